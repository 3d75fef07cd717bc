"""The public entry points of time-dependent inhibition and their immutable results.

:func:`fit_time_dependent` takes one compound's kinetic reads (one progress curve per
well, each at its own [I]) and returns a :class:`TimeDependentFit`: kobs of every well,
the one-step / two-step comparison, the constants of the chosen scheme (kinact, KI,
kinact/KI; Ki* and residence time for slow reversible binding) and, for an irreversible
inhibitor, the global fit of every progress curve. :func:`fit_preincubation` takes percent
activity after several pre-incubation times and returns a :class:`PreincubationFit`.
"""

from __future__ import annotations

import html
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..validate import check_columns, numeric_column
from .dependence import compare_schemes, derived_constants, fit_scheme
from .depletion import check_depletion, depletion_factors
from .global_fit import fit_global
from .kobs import kobs_arrays
from .preincubation import fit_activity_surface, fit_ic50_times, ic50_shift, ic50_table
from .schemes import SCHEMES, progress_curve

__all__ = ["TimeDependentFit", "PreincubationFit", "fit_time_dependent", "fit_preincubation"]

_WIDTH = 78
# At least this many inhibited wells with a determined kobs: a hyperbola has two or three
# parameters and the F-test needs a residual degree of freedom beside them.
_MIN_WELLS = 4


def _frame_text(frame):
    return frame.to_string(float_format=lambda x: f"{x:.4g}")


def _check_level(level, alpha):
    problems = []
    if not 0 < level < 1:
        problems.append(Problem("level", None, level, "must lie strictly between 0 and 1"))
    if not 0 < alpha < 1:
        problems.append(Problem("alpha", None, alpha, "must lie strictly between 0 and 1"))
    if problems:
        raise DataError(problems)


@dataclass(frozen=True)
class TimeDependentFit:
    """kobs per well, the scheme of kobs against [I], and the constants that rank.

    Attributes
    ----------
    compound : str or None
    kobs : pandas.DataFrame
        One row per well: well, inhibitor, kobs, kobs_low, kobs_high, log_kobs_se, vi,
        vi_se, vs, vs_se, p0, n_points, residual_sd, p_curvature, converged, flags
        (kobs per the reads' time unit; rates in signal per time unit), and
        depletion_factor: how much the well's substrate depletion raised its fitted kobs
        (the schemes were fitted to kobs/depletion_factor; 1 when depletion is not
        carried, NaN for wells not in the kobs-against-[I] fit).
    scheme : str
        ``one_step`` or ``two_step`` (the verdict of the nested F-test).
    comparison : pandas.DataFrame
        Per scheme: n, k, ssr, aicc, bic, converged, delta_aicc, akaike_weight.
    ftest : pandas.Series
        f_value, p_value, df_num, df_den of one_step against two_step.
    constants : pandas.DataFrame
        Of the chosen scheme: estimate, ci_low, ci_high, meaning per constant
        (:func:`inhibkin.time_dependent.dependence.derived_constants`).
    two_step_constants, one_step_constants : pandas.DataFrame
        The same for each scheme, whatever the verdict.
    global_constants : pandas.DataFrame or None
        The chosen scheme's constants from the global fit of every progress curve (None
        when not asked for).
    irreversible : bool
    substrate, km : float or None
        The assay's S and Km used for the competitive correction (None: apparent values).
    product_per_signal : float or None
        Product (substrate's unit) per signal unit when substrate depletion was carried.
    level : float
    reads : pandas.DataFrame
        The reads fitted: well, time, signal (for the figures).
    """

    compound: str | None
    kobs: pd.DataFrame = field(repr=False)
    scheme: str
    comparison: pd.DataFrame = field(repr=False)
    ftest: pd.Series = field(repr=False)
    constants: pd.DataFrame = field(repr=False)
    two_step_constants: pd.DataFrame = field(repr=False)
    one_step_constants: pd.DataFrame = field(repr=False)
    global_constants: pd.DataFrame | None = field(repr=False)
    irreversible: bool = True
    substrate: float | None = None
    km: float | None = None
    product_per_signal: float | None = None
    level: float = 0.95
    reads: pd.DataFrame | None = field(default=None, repr=False)

    @property
    def kinact_over_ki(self) -> float:
        """kinact/KI (two-step) or kon (one-step): the second-order constant that ranks."""
        name = "k5_over_ki" if self.scheme == "two_step" else "kon"
        return float(self.constants.loc[name, "estimate"])

    def fitted_progress(self, n_points=50) -> pd.DataFrame:
        """Each well's fitted slow-onset curve: well, inhibitor, time, signal (tidy).

        ``n_points`` times from 0 to the well's last read; wells whose kobs the reads do
        not determine have no curve.
        """
        parts = []
        ends = self.reads.groupby("well", sort=False)["time"].max()
        for row in self.kobs.itertuples(index=False):
            if not np.isfinite(row.kobs):
                continue
            grid = np.linspace(0.0, float(ends[row.well]), n_points)
            parts.append(pd.DataFrame({
                "well": row.well, "inhibitor": row.inhibitor, "time": grid,
                "signal": progress_curve(grid, row.p0, row.vi, row.vs, row.kobs)}))
        if not parts:
            return pd.DataFrame(columns=["well", "inhibitor", "time", "signal"])
        return pd.concat(parts, ignore_index=True)

    def fitted_kobs(self, n_points=50) -> pd.DataFrame:
        """Both schemes' kobs against [I] as fitted (apparent constants, the assay's S):
        scheme, chosen, inhibitor, kobs (tidy), from [I] = 0 to 1.05 × the largest."""
        used = self.kobs[(self.kobs["inhibitor"] > 0) & np.isfinite(self.kobs["kobs_low"])]
        grid = np.linspace(0.0, float(used["inhibitor"].max()) * 1.05, n_points)
        factor = (1.0 + self.substrate / self.km) if self.km else 1.0
        parts = []
        for name, table in (("two_step", self.two_step_constants),
                            ("one_step", self.one_step_constants)):
            def value(constant, scale=1.0, table=table):
                return (float(table.loc[constant, "estimate"]) * scale
                        if constant in table.index else 0.0)
            if name == "two_step":
                args = (value("k5"), value("ki_app"), value("k6"))
            else:
                args = (value("kon", 1.0 / factor), value("koff"))
            parts.append(pd.DataFrame({"scheme": name, "chosen": name == self.scheme,
                                       "inhibitor": grid,
                                       "kobs": SCHEMES[name].function(grid, *args)}))
        return pd.concat(parts, ignore_index=True)

    def to_frame(self) -> pd.DataFrame:
        """The constants of every route, one row each: route, constant, estimate, ci_low,
        ci_high, chosen (the verdict's scheme); the ``global`` route fits the verdict's
        scheme to every progress curve."""
        parts = []
        for route, table in (("two_step", self.two_step_constants),
                             ("one_step", self.one_step_constants),
                             ("global", self.global_constants)):
            if table is None:
                continue
            part = table.drop(columns="meaning").rename_axis("constant").reset_index()
            part.insert(0, "route", route)
            part["chosen"] = route == self.scheme
            parts.append(part)
        out = pd.concat(parts, ignore_index=True)
        out.insert(0, "compound", self.compound)
        return out

    def summary(self) -> str:
        """Plain-text report: verdict, comparison, constants, wells."""
        head = f"Time-dependent inhibition{f' of {self.compound}' if self.compound else ''}"
        kind = "irreversible (vs = 0)" if self.irreversible else "reversible (vs fitted)"
        correction = (f"S = {self.substrate:g}, Km = {self.km:g} (competitive correction)"
                      if self.substrate is not None and self.km is not None
                      else "no substrate correction: constants are apparent")
        if self.product_per_signal is not None:
            correction += (f"; substrate depletion carried ({self.product_per_signal:g} "
                           "product per signal unit)")
        lines = ["=" * _WIDTH, head, f"  {kind}; {correction}",
                 f"  scheme: {self.scheme} (F = {self.ftest['f_value']:.4g}, "
                 f"p = {self.ftest['p_value']:.3g} for one_step against two_step)",
                 "-" * _WIDTH, "Schemes", _frame_text(self.comparison),
                 "-" * _WIDTH, f"Constants of {self.scheme} ({self.level:.0%} intervals)",
                 _frame_text(self.constants)]
        if self.global_constants is not None:
            lines += ["-" * _WIDTH, "Global fit of every progress curve",
                      _frame_text(self.global_constants)]
        lines += ["-" * _WIDTH, "kobs per well",
                  _frame_text(self.kobs[["well", "inhibitor", "kobs", "kobs_low", "kobs_high",
                                         "vi", "vs", "flags"]]),
                  "=" * _WIDTH]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        name = f" of {self.compound}" if self.compound else ""
        head = html.escape(f"Time-dependent inhibition{name}: {self.scheme} "
                           f"(p = {self.ftest['p_value']:.3g})")
        return "".join([f"<div><p><b>{head}</b></p>",
                        self.constants.to_html(float_format="{:.4g}".format),
                        self.comparison.to_html(float_format="{:.4g}".format),
                        self.kobs.to_html(float_format="{:.4g}".format, max_rows=40),
                        "</div>"])


def _wells(reads, *, well, time, signal, inhibitor):
    """Padded (wells, reads) arrays and each well's [I], after the boundary checks."""
    check_columns(reads, [well, time, signal, inhibitor], "reads")
    problems: list[Problem] = []
    t = numeric_column(reads, time, problems)
    y = numeric_column(reads, signal, problems, allow_negative=True, allow_nan=True)
    conc = numeric_column(reads, inhibitor, problems)
    if problems:
        raise DataError(problems, "reads")
    frame = pd.DataFrame({"well": reads[well].to_numpy(), "t": t, "y": y, "i": conc},
                         index=reads.index)
    spread = frame.groupby("well", sort=False)["i"].agg(["min", "max"])
    mixed = spread[spread["min"] != spread["max"]]
    if len(mixed):
        name = mixed.index[0]
        raise DataError(Problem(inhibitor, None, name,
                                f"well {name!r} has more than one inhibitor concentration; "
                                "each well is one progress curve at one [I]"), "reads")
    frame = frame.sort_values(["well", "t"], kind="stable")
    names = pd.unique(frame["well"])
    code = pd.Index(names).get_indexer(frame["well"])
    column = frame.groupby("well", sort=False).cumcount().to_numpy()
    shape = (len(names), int(column.max()) + 1)
    tt, yy = np.full(shape, np.nan), np.full(shape, np.nan)
    tt[code, column] = frame["t"].to_numpy()
    yy[code, column] = frame["y"].to_numpy()
    return names, tt, yy, np.isfinite(tt) & np.isfinite(yy), spread.loc[names, "min"].to_numpy()


def fit_time_dependent(reads, *, well="well", time="time", signal="signal",
                       inhibitor="inhibitor", irreversible=True, substrate=None, km=None,
                       product_per_signal=None, level=0.95, alpha=0.05, global_fit=True,
                       compound=None) -> TimeDependentFit:
    """kobs of every well, one-step against two-step, kinact, KI and kinact/KI.

    Parameters
    ----------
    reads : pandas.DataFrame
        Tidy kinetic reads of one compound: one row per (well, time), the signal
        (product or a signal proportional to it, NaN for a missing read) and the well's
        inhibitor concentration (constant within a well; wells without inhibitor are
        kept in the kobs table but not in the kobs-against-[I] fit).
    well, time, signal, inhibitor : str
        Column names. Times ≥ 0 in any unit; kobs, kinact and k6 come out per that unit,
        KI in the inhibitor's unit.
    irreversible : bool
        Covalent (vs = 0, k6 = koff = 0) or reversible slow binding (vs, k6, koff fitted).
    substrate, km : float, optional
        The assay's substrate concentration and Km (same unit), to correct KI,app =
        KI(1 + S/Km) for a substrate-competitive inhibitor. Give both or neither.
    product_per_signal : float, optional
        Product concentration (in the substrate's unit) per signal unit, e.g. 1.0 when the
        signal is the product concentration. Given with ``substrate`` and ``km`` for an
        irreversible inhibitor, both routes carry the substrate each well consumes
        (:mod:`inhibkin.time_dependent.depletion`): the global fit integrates it, and the
        kobs route divides each well's kobs by the rise depletion alone causes in that
        fit (the ``depletion_factor`` column). Without it the progress curves hold S at
        its initial value, which reads kinact/KI high by about half the fraction of
        substrate the controls convert at S = 10 Km (docs/time_dependent.md).
    level : float
        Confidence level of every interval.
    alpha : float
        Level of the F-test of one_step against two_step.
    global_fit : bool
        Also fit every progress curve at once with the chosen scheme's constants shared
        (:func:`inhibkin.time_dependent.global_fit.fit_global`; every scheme, irreversible
        or reversible).
    compound : str, optional
        Named on the result.

    Returns
    -------
    TimeDependentFit

    Raises
    ------
    DataError
        Missing or non-numeric columns, a well with two [I], fewer than four inhibited
        wells with a determined kobs, only one of ``substrate`` and ``km``, or
        ``product_per_signal`` not > 0, without ``substrate`` and ``km``, or with
        ``irreversible=False`` (depletion is carried for inactivation only).

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from inhibkin.time_dependent.schemes import progress_curve
    >>> t = np.linspace(0, 3600, 41)
    >>> conc = [0.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0]
    >>> kobs = [0.002 * i / (10.0 + i) for i in conc]
    >>> reads = pd.concat([pd.DataFrame({"well": f"A{j}", "time": t, "inhibitor": i,
    ...     "signal": progress_curve(t, 0.0, 0.01 / (1 + i / 10.0), 0.0, k)
    ...               + np.random.default_rng(j).normal(0, 1e-4, t.size)})
    ...     for j, (i, k) in enumerate(zip(conc, kobs))])
    >>> fit = fit_time_dependent(reads)
    >>> fit.scheme
    'two_step'
    >>> round(float(fit.constants.loc["k5", "estimate"]), 4)
    0.002
    """
    _check_level(level, alpha)
    if (substrate is None) != (km is None):
        raise DataError(Problem("km" if km is None else "substrate", None, None,
                                "give both substrate and km for the competitive correction, "
                                "or neither"))
    if km is not None and not (np.isfinite(km) and km > 0 and np.isfinite(substrate)
                               and substrate >= 0):
        raise DataError(Problem("km", None, km, "km must be > 0 and substrate ≥ 0"))
    depletion = check_depletion(product_per_signal, substrate, km, irreversible)
    names, t, y, valid, conc = _wells(reads, well=well, time=time, signal=signal,
                                      inhibitor=inhibitor)
    table = kobs_arrays(t, y, valid, irreversible=irreversible, level=level)
    table.insert(0, "well", names)
    table.insert(1, "inhibitor", conc)
    use = (conc > 0) & np.isfinite(table["kobs_low"].to_numpy())
    if use.sum() < _MIN_WELLS:
        raise DataError(Problem(inhibitor, None, int(use.sum()),
                                f"need at least {_MIN_WELLS} inhibited wells whose kobs the "
                                "reads determine (see the kobs table's flags)"),
                        f"compound {compound!r}" if compound else None)
    i_use = conc[use]
    k_use = table["kobs"].to_numpy()[use]
    se_use = k_use * table["log_kobs_se"].to_numpy()[use]
    factor = np.where(use, 1.0, np.nan)
    if depletion is not None:
        # The two-step scheme nests the one-step one, so its fit describes kobs either way.
        raw = fit_scheme("two_step", i_use, k_use, se_use, irreversible=True)
        factor[use] = depletion_factors(
            t[use], valid[use], i_use, table["p0"].to_numpy()[use],
            table["vi"].to_numpy()[use], scheme="two_step", values=raw["values"],
            depletion=depletion,
            fit_kobs=lambda tt, yy, vv: kobs_arrays(tt, yy, vv, level=level)["kobs"].to_numpy())
        k_use, se_use = k_use / factor[use], se_use / factor[use]
    table["depletion_factor"] = factor
    fits = {name: fit_scheme(name, i_use, k_use, se_use, irreversible=irreversible)
            for name in ("one_step", "two_step")}
    comparison, ftest, scheme = compare_schemes(fits, alpha=alpha)
    by_scheme = {name: derived_constants(fit, substrate=substrate, km=km, level=level)
                 for name, fit in fits.items()}
    global_constants = None
    if global_fit:
        keep = np.isfinite(table["kobs"].to_numpy()) | (conc == 0)
        joint = fit_global(t[keep], y[keep], valid[keep], conc[keep], start=fits[scheme],
                           irreversible=irreversible, depletion=depletion)
        global_constants = derived_constants(joint, substrate=substrate, km=km, level=level)
    return TimeDependentFit(compound, table, scheme, comparison, pd.Series(ftest),
                            by_scheme[scheme], by_scheme["two_step"], by_scheme["one_step"],
                            global_constants, irreversible, substrate, km, product_per_signal,
                            level,
                            pd.DataFrame({"well": reads[well].to_numpy(),
                                          "time": reads[time].to_numpy(dtype=float),
                                          "signal": reads[signal].to_numpy(dtype=float)}))


@dataclass(frozen=True)
class PreincubationFit:
    """IC50 after each pre-incubation time, the shift, and kinact and KI from it.

    Attributes
    ----------
    compound : str or None
    ic50s : pandas.DataFrame
        One row per time (ascending): time, ic50, ci_low, ci_high, log_ic50_se, n_obs,
        curve_class, bottom.
    shift : float
        IC50(shortest)/IC50(longest).
    time_dependent : bool
        The ``ic50_shift`` flag (:func:`inhibkin.time_dependent.preincubation.ic50_shift`).
    constants : pandas.DataFrame or None
        kinact, ki, kinact_over_ki with estimate, ci_low, ci_high from the activity of
        every well (:func:`inhibkin.time_dependent.preincubation.fit_activity_surface`);
        None without an IC50 shift or with fewer than three times with a finite IC50.
    ic50_constants : pandas.DataFrame or None
        The same from the IC50(t) relation alone.
    level : float
    """

    compound: str | None
    ic50s: pd.DataFrame = field(repr=False)
    shift: float
    time_dependent: bool
    constants: pd.DataFrame | None = field(repr=False)
    ic50_constants: pd.DataFrame | None = field(repr=False)
    level: float = 0.95

    @property
    def flags(self) -> tuple[str, ...]:
        return ("ic50_shift",) if self.time_dependent else ()

    def to_frame(self) -> pd.DataFrame:
        """The IC50 table with the compound, shift and flag on every row."""
        out = self.ic50s.copy()
        out.insert(0, "compound", self.compound)
        out["shift"] = self.shift
        out["time_dependent"] = self.time_dependent
        return out

    def summary(self) -> str:
        """Plain-text report: IC50 per time, the shift, kinact and KI."""
        lines = ["=" * _WIDTH,
                 f"IC50 after pre-incubation{f' of {self.compound}' if self.compound else ''}",
                 f"  shift (shortest/longest time) {self.shift:.3g}"
                 + ("; flagged ic50_shift: potency depends on time" if self.time_dependent
                    else "; no shift flagged"),
                 "-" * _WIDTH, _frame_text(self.ic50s)]
        if self.constants is not None:
            lines += ["-" * _WIDTH,
                      f"kinact and KI from every well ({self.level:.0%} intervals)",
                      _frame_text(self.constants),
                      "kinact and KI from the IC50(t) relation alone",
                      _frame_text(self.ic50_constants)]
        lines.append("=" * _WIDTH)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        head = html.escape(f"IC50 after pre-incubation: shift {self.shift:.3g}"
                           + (" (ic50_shift)" if self.time_dependent else ""))
        parts = [f"<div><p><b>{head}</b></p>", self.ic50s.to_html(float_format="{:.4g}".format)]
        if self.constants is not None:
            parts.append(self.constants.to_html(float_format="{:.4g}".format))
        parts.append("</div>")
        return "".join(parts)


def fit_preincubation(data, *, inhibitor="inhibitor", time="preincubation",
                      activity="activity", shift_factor=2.0, level=0.95,
                      compound=None) -> PreincubationFit:
    """IC50 at each pre-incubation time, the IC50 shift flag, and kinact and KI.

    Parameters
    ----------
    data : pandas.DataFrame
        One row per well: inhibitor concentration (> 0), pre-incubation time (≥ 0, any
        unit; kinact comes out per that unit) and percent activity (100 = no inhibition).
    inhibitor, time, activity : str
        Column names.
    shift_factor : float
        Fold fall of IC50 from the shortest to the longest time that is flagged (> 1;
        default 2).
    level : float
        Confidence level.
    compound : str, optional

    Returns
    -------
    PreincubationFit

    Raises
    ------
    DataError
        Missing or non-numeric columns, fewer than two pre-incubation times, bad options.
    """
    _check_level(level, 0.05)
    if not shift_factor > 1:
        raise DataError(Problem("shift_factor", None, shift_factor, "must be above 1"))
    check_columns(data, [inhibitor, time, activity], "pre-incubation table")
    problems: list[Problem] = []
    conc = numeric_column(data, inhibitor, problems)
    times = numeric_column(data, time, problems)
    act = numeric_column(data, activity, problems, allow_negative=True)
    if problems:
        raise DataError(problems, "pre-incubation table")
    if len(np.unique(times)) < 2:
        raise DataError(Problem(time, None, len(np.unique(times)),
                                "need at least two pre-incubation times"))
    keep = conc > 0
    ic50s = ic50_table(conc[keep], times[keep], act[keep], level=level)
    shift, flagged = ic50_shift(ic50s, shift_factor=shift_factor)
    # kinact and KI describe a shift; without one they are not determined.
    from_ic50 = fit_ic50_times(ic50s, level=level) if flagged else None
    surface = None
    if from_ic50 is not None:
        start = (from_ic50.loc["kinact", "estimate"], from_ic50.loc["ki", "estimate"])
        surface = fit_activity_surface(conc[keep], times[keep], act[keep], start=start,
                                       level=level)
    return PreincubationFit(compound, ic50s, shift, flagged, surface, from_ic50, level)
