"""The potency table: IC50, Hill slope, Ki and pKi of every compound of a screen.

:func:`potency_table` checks a tidy dose-response table, fits each compound's curve
(:mod:`inhibkin.potency.curve`, or a batched ``fitter`` such as :class:`EngineFitter`),
converts IC50 to Ki by mechanism (:mod:`inhibkin.potency.conversion`) and, for tight binders
when asked, by a Morrison fit (:mod:`inhibkin.potency.morrison`).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.curve_class import CURVE_CLASSES, DEFAULT_RULES, CurveClassRules, classify_curves
from ..core.readonly import readonly_frame, readonly_mapping
from ..errors import DataError, FitError, InhibkinError, Problem
from ..rates.plates import Z_PRIME_THRESHOLD, ZERO_SPREAD, PlateQC, percent_activity, plate_qc
from ..units import from_molar, normalise_unit, parse_concentration, split_unit
from ..validate import check_columns, normalise_roles, numeric_rows, row_kind
from .conversion import CONVERSIONS, cheng_prusoff
from .curve import HILL_MAX as _HILL_MAX
from .curve import (
    HILL_RANGE,
    INTERVAL_METHODS,
    MIN_POINTS_EACH_SIDE,
    PARTIAL_EFFICACY_FRACTION,
    DoseResponseFit,
)
from .curve import LOG_IC50_MARGIN as _LOG_IC50_MARGIN
from .curve import fit_logistic as _fit_logistic
from .curve import fixed_parameters as _fixed
from .curve import from_estimates as _from_estimates
from .least_squares import check_curve as _check_curve
from .least_squares import check_curve_points as _check_curve_points
from .least_squares import compound_context as _context
from .morrison import fit_morrison

__all__ = ["TIGHT_BINDING_FACTOR", "PotencyTable", "EngineFitter", "potency_table",
           "check_potency_options"]

#: IC50 below this multiple of the enzyme concentration is tight binding (common practice).
TIGHT_BINDING_FACTOR = 10.0

#: Columns of :attr:`PotencyTable.table`, in order.
TABLE_COLUMNS = (
    "compound", "status", "curve_class", "reason", "plate", "n_points", "ic50", "ic50_low",
    "ic50_high",
    "ic50_bound", "pic50", "hill", "hill_low", "hill_high", "top", "bottom", "substrate", "km",
    "enzyme", "ki", "ki_low", "ki_high", "ki_bound", "pki", "mechanism", "alpha",
    "mechanism_source", "ki_method", "flags",
)

#: A fitter takes {compound: (conc, response)} and options, and returns
#: {compound: DoseResponseFit or InhibkinError}; see :func:`potency_table`.
Fitter = Callable[..., Mapping]


@dataclass(frozen=True)
class PotencyTable:
    """Potency of every compound of a dose-response table.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per compound, columns :data:`TABLE_COLUMNS`. ``status`` is ``"ok"`` or
        ``"failed"`` (with the ``reason``); ``curve_class`` is one of
        :data:`~inhibkin.core.curve_class.CURVE_CLASSES` (an ``inactive`` curve reports
        "IC50 > highest concentration"), and for fitted compounds ``reason`` says why
        that class and which parameters the data do not set (their columns are empty:
        a Hill slope at its fitting bound, a plateau outside the tested range);
        IC50 and Ki in the concentration's unit
        (``ic50_bound``/``ki_bound`` hold "> x" text when only a bound is known; the
        values themselves are in :attr:`records`);
        ``mechanism_source`` is ``"mechanism fit"`` or ``"default"``; ``ki_method`` is
        ``"cheng-prusoff"`` or ``"morrison"``; ``flags`` joins
        :data:`~inhibkin.potency.curve.FLAGS` keys with ", ".
    fits : dict
        Compound to its :class:`DoseResponseFit` (fitted compounds only).
    plates : PlateQC
        Z'-factor and control statistics per plate.
    morrison_fits : dict
        Compound to its :class:`~inhibkin.potency.morrison.MorrisonFit` (only with
        ``tight_binding="morrison"``).
    records : dict
        Compound to the values the table writes out as text: ``ic50_bound`` and
        ``ki_bound`` (:class:`~inhibkin.core.bound.Bound` or None) and ``flags`` (a
        tuple), for the stages downstream that need the numbers.
    """

    table: pd.DataFrame
    fits: dict = field(repr=False)
    plates: PlateQC = field(repr=False)
    morrison_fits: dict = field(default_factory=dict, repr=False)
    records: dict = field(default_factory=dict, repr=False)

    def __post_init__(self):
        # Frozen all the way down (see inhibkin.core.readonly).
        object.__setattr__(self, "table", readonly_frame(self.table))
        for name in ("fits", "morrison_fits", "records"):
            object.__setattr__(self, name, readonly_mapping(getattr(self, name)))

    @property
    def failed(self) -> pd.DataFrame:
        """The rows whose status is ``"failed"``."""
        return self.table[self.table["status"] == "failed"]

    def to_frame(self) -> pd.DataFrame:
        """The per-compound table (a copy)."""
        return self.table.copy()

    def summary(self) -> str:
        """Plain-text report: counts, plates, then the main columns."""
        n_ok = int((self.table["status"] == "ok").sum())
        lines = [f"Potency: {len(self.table)} compounds, {n_ok} fitted, "
                 f"{len(self.table) - n_ok} failed; {len(self.plates.table)} plates, "
                 f"{len(self.plates.flagged)} flagged (Z' < {self.plates.threshold:g})"]
        shown = self.table[["compound", "status", "ic50", "ic50_bound", "hill", "ki", "ki_bound",
                            "mechanism", "mechanism_source", "flags"]]
        lines.append(shown.to_string(index=False, float_format=lambda x: f"{x:.4g}"))
        for _, row in self.failed.iterrows():
            lines.append(f"  {row['compound']}: {row['reason']}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        n_ok = int((self.table["status"] == "ok").sum())
        return (f"<p><b>Potency</b> — {len(self.table)} compounds, {n_ok} fitted, "
                f"{len(self.table) - n_ok} failed</p>"
                + self.table.to_html(index=False, float_format="{:.4g}".format)
                + self.plates._repr_html_())


def check_potency_options(*, tight_binding="flag", default_mechanism="competitive",
                          default_alpha=None, **_) -> None:
    """The checks of :func:`potency_table`'s options that need no table (``fit_campaign``
    runs them once before any work; other keywords are ignored here).

    Raises
    ------
    DataError
        Naming the option.
    """
    if tight_binding not in ("flag", "morrison"):
        raise DataError(Problem(None, None, tight_binding,
                                "tight_binding must be 'flag' or 'morrison'"))
    if default_mechanism not in CONVERSIONS:
        raise DataError(Problem("default_mechanism", None, default_mechanism,
                                f"must be one of {CONVERSIONS}"))
    if default_mechanism == "mixed" and default_alpha is None:
        raise DataError(Problem("default_alpha", None, None,
                                "a mixed default mechanism needs default_alpha = Kiu/Kic"))


def _per_compound_value(spec, columns, at, name):
    """A number given directly, or the single value of column ``spec`` on the rows at
    positions ``at`` (``columns``: column name → its values as floats)."""
    if spec is None:
        return np.nan
    if isinstance(spec, str):
        values = columns[spec][at]
        distinct = np.unique(values[np.isfinite(values)])
        if distinct.size != 1 or not np.all(np.isfinite(values)):
            raise DataError(Problem(spec, None, distinct.tolist() or values[:1].tolist(),
                                    f"{name} must be one number per compound"))
        return float(distinct[0])
    return float(spec)


def _conversion_factors(keys) -> dict:
    """Ki/IC50 of every distinct (substrate, km, mechanism, alpha) in one conversion, or
    {} when the conversion refuses one of them (each compound is then converted on its
    own, so that only it fails, with its message)."""
    keys = list(dict.fromkeys(keys))
    if not keys:
        return {}
    s, km, mechanism, alpha = zip(*keys)
    try:
        factors = cheng_prusoff(np.ones(len(keys)), np.array(s, dtype=float),
                                np.array(km, dtype=float), np.array(mechanism, dtype=object),
                                np.array([np.nan if a is None else a for a in alpha]))
    except InhibkinError:
        return {}
    return {key: float(f) for key, f in zip(keys, factors)}


def _mechanism_of(name, mechanisms, default_mechanism, default_alpha):
    if mechanisms is not None and name in mechanisms:
        entry = mechanisms[name]
        mech, alpha = (entry, None) if isinstance(entry, str) else tuple(entry)
        return mech, (np.nan if alpha is None else float(alpha)), "mechanism fit"
    return default_mechanism, (np.nan if default_alpha is None else float(default_alpha)), \
        "default"


def _km_in_substrate_unit(km, df, substrate, substrate_unit):
    """Km as the fit uses it: a column name, or a number in the substrate's unit."""
    if isinstance(km, str) and km in df.columns:
        return km
    declared = (normalise_unit(substrate_unit) if substrate_unit is not None
                else split_unit(substrate)[1])
    if declared is not None:
        declared = normalise_unit(declared)
    if isinstance(km, str):
        molar = parse_concentration(km)
        if declared is None:
            raise DataError(Problem(substrate, None, km,
                                    f"km is given with a unit but column {substrate!r} "
                                    "declares none; name its unit (substrate_unit='uM', "
                                    "or a header such as 'substrate_uM')"))
        return float(from_molar(molar, declared))
    problem = Problem("km", None, km, "km must be a positive number, text with its unit "
                                      "(e.g. '40uM') or a column name")
    if isinstance(km, bool) or not isinstance(km, (int, float, np.floating, np.integer)):
        raise DataError(problem)
    try:
        value = float(km)
    except OverflowError:  # a Python int past the float range
        raise DataError(problem) from None
    if not (math.isfinite(value) and value > 0):
        raise DataError(problem)
    return float(from_molar(value, declared)) if declared is not None else value


def _default_fitter(curves, *, fix_top, fix_bottom, intervals, level, class_options=None):
    out = {}
    fixed = _fixed(fix_top, fix_bottom)
    for name, (conc, response) in curves.items():
        try:
            out[name] = _fit_logistic(conc, response, np.ones_like(response), fixed,
                                      compound=name, method=intervals, level=level,
                                      direction="falling",
                                      hill_range=HILL_RANGE,
                                      min_points_each_side=MIN_POINTS_EACH_SIDE,
                                      partial_efficacy=PARTIAL_EFFICACY_FRACTION,
                                      **dict(class_options or {}))
        except InhibkinError as error:
            out[name] = error
    return out


class EngineFitter:
    """A ``fitter`` for :func:`potency_table`: every curve fitted at once by the batched
    engine, the curves it does not settle refitted by the lmfit path.

    The curves go through :func:`inhibkin.engine.fit_logistic_batch` together; each
    solution becomes a :class:`DoseResponseFit` through
    :func:`~inhibkin.potency.curve.dose_response_from_estimates` (standard errors, Wald
    intervals and flags computed exactly as the lmfit path computes them). The lmfit path
    fits within bounds — a Hill slope between 0 and 20, the midpoint within the tested
    range ± 4 decades — and the engine without them; the two problems share their optimum
    only inside those bounds. And a curve that does not fall to its midpoint within the
    tested range (noise on an inactive compound, a partial or rising curve) has a flat
    least-squares surface with several minima, where two optimisers from different
    starts can settle on different ones. So an engine solution is kept only when it
    converged strictly inside the bounds to a falling curve whose class
    (:func:`~inhibkin.core.curve_class.classify_curves`, the rule the lmfit path applies,
    here over the whole batch at once) is complete or incomplete and whose IC50 lies
    within the tested range. Every other curve is fitted again by the engine as the lmfit
    path fits it (within its bounds, from its first start) and kept when that converges
    or finds the curve inactive with finite estimates: an inactive curve reports only its
    IC50 bound and the efficacy read off its data
    (:func:`~inhibkin.core.curve_class.observed_efficacy`), the same whichever minimum
    either optimiser found. What remains is refitted by the
    lmfit path, and its compound is recorded in :attr:`refitted`.

    With ``intervals="profile"`` every curve takes the lmfit path (the engine gives
    Wald intervals only), and none is counted as refitted.

    Attributes
    ----------
    refitted : list
        Compounds refitted by the lmfit path, in the order of the curves; one instance
        records one :func:`potency_table` call (make a fresh one for each).
    """

    def __init__(self):
        self.refitted: list = []

    def __call__(self, curves, *, fix_top, fix_bottom, intervals, level,
                 class_options=None) -> dict:
        from ..engine import fit_logistic_batch

        class_options = dict(class_options or {})
        options = dict(fix_top=fix_top, fix_bottom=fix_bottom, intervals=intervals,
                       level=level, class_options=class_options)
        if intervals != "wald" or not curves:
            return _default_fitter(curves, **options)
        names = list(curves)
        width = max(len(conc) for conc, _ in curves.values())
        x, y = np.zeros((len(names), width)), np.zeros((len(names), width))
        mask = np.zeros((len(names), width), bool)
        for k, name in enumerate(names):
            conc, response = curves[name]
            x[k, :len(conc)], y[k, :len(conc)] = np.log10(conc), response
            mask[k, :len(conc)] = True
        batch = fit_logistic_batch(x, y, mask, fix_top=fix_top, fix_bottom=fix_bottom,
                                   level=level)
        classes = classify_curves(
            x, y, mask, batch.estimate, n_free=batch.n_params,
            full_activity=class_options.get("full_activity"),
            zero_activity=class_options.get("zero_activity", 0.0),
            hill_limit=_HILL_MAX, falling_only=True,
            rules=class_options.get("curve_rules", DEFAULT_RULES))
        out, unsettled = {}, []
        for k, name in enumerate(names):
            estimates = dict(zip(batch.names, batch.estimate[k]))
            x_min, x_max = x[k, mask[k]].min(), x[k, mask[k]].max()
            inside = (bool(batch.converged[k]) and 0.0 < estimates["hill"] < _HILL_MAX
                      and x_min - _LOG_IC50_MARGIN < estimates["log_ic50"]
                      < x_max + _LOG_IC50_MARGIN
                      and classes.curve_class[k] in CURVE_CLASSES[:2])
            fit = (self._fit(curves[name], estimates, batch.reason[k], name, fix_top,
                             fix_bottom, level, class_options, classes=classes.subset([k]))
                   if inside else None)
            if fit is not None and fit.ic50_bound is None and "rising" not in fit.flags:
                out[name] = fit
            else:
                unsettled.append(k)
        out.update(self._bounded(curves, names, unsettled, x, y, mask, options))
        return {name: out[name] for name in names}

    @staticmethod
    def _fit(curve, estimates, reason, name, fix_top, fix_bottom, level, class_options,
             converged=True, classes=None):
        """The DoseResponseFit of an engine solution (the flags follow _default_fitter's;
        potency_table checked the curves); ``classes``: its class from the batch's."""
        conc, response = curve
        return _from_estimates(
            conc, response, np.ones_like(response), _fixed(fix_top, fix_bottom), estimates,
            level=level, compound=name, converged=bool(converged),
            message=f"batched engine: {reason}", direction="falling", hill_range=HILL_RANGE,
            min_points_each_side=MIN_POINTS_EACH_SIDE,
            partial_efficacy=PARTIAL_EFFICACY_FRACTION, classes=classes, **class_options)

    def _bounded(self, curves, names, rows, x, y, mask, options) -> dict:
        """The curves ``rows`` fitted again as the lmfit path fits them: within its bounds
        and from its first start; those this neither converges nor finds inactive go to
        the lmfit path."""
        from ..engine import fit_logistic_batch
        from ..engine.starts import logistic_starts

        if not rows:
            return {}
        x, y, mask = x[rows], y[rows], mask[rows]
        x_min = np.where(mask, x, np.inf).min(axis=1)
        x_max = np.where(mask, x, -np.inf).max(axis=1)
        lower = np.stack([np.full(len(rows), -np.inf), np.full(len(rows), -np.inf),
                          x_min - _LOG_IC50_MARGIN, np.zeros(len(rows))], axis=1)
        upper = np.stack([np.full(len(rows), np.inf), np.full(len(rows), np.inf),
                          x_max + _LOG_IC50_MARGIN, np.full(len(rows), _HILL_MAX)], axis=1)
        start = logistic_starts(x, y, mask)
        start[:, 3] = 1.0  # the lmfit path's start of a falling curve
        batch = fit_logistic_batch(x, y, mask, fix_top=options["fix_top"],
                                   fix_bottom=options["fix_bottom"], lower=lower,
                                   upper=upper, start=start, level=options["level"])
        # An inactive curve reports nothing its minimum sets (its efficacy is read off
        # the data), so any finite solution settles it, converged or not: a fit that ran
        # out of iterations or stalled on a flat surface is classified, in arrays, where
        # it stopped; only a curve that would be active there goes to the lmfit path.
        converged = batch.converged
        point = np.where(converged[:, None], batch.estimate, batch.stopped_at)
        class_options = options["class_options"]
        classes = classify_curves(
            x, y, mask, point, n_free=batch.n_params,
            full_activity=class_options.get("full_activity"),
            zero_activity=class_options.get("zero_activity", 0.0), hill_limit=_HILL_MAX,
            falling_only=True, rules=class_options.get("curve_rules", DEFAULT_RULES))
        settled = converged | ((classes.curve_class == "inactive")
                               & np.isfinite(batch.stopped_ssr)
                               & np.all(np.isfinite(point), axis=1))
        out = {}
        for k, row in enumerate(rows):
            name = names[row]
            if settled[k]:
                out[name] = self._fit(curves[name], dict(zip(batch.names, point[k])),
                                      batch.reason[k], name, options["fix_top"],
                                      options["fix_bottom"], options["level"], class_options,
                                      converged[k], classes=classes.subset([k]))
            else:
                self.refitted.append(name)
                out.update(_default_fitter({name: curves[name]}, **options))
        return out


def potency_table(df, *, compound="compound", plate="plate", role="role",
                  concentration="inhibitor", response="signal", substrate="substrate", km,
                  substrate_unit=None, km_se=None, enzyme=None, mechanisms=None,
                  default_mechanism="competitive", default_alpha=None, normalise=True,
                  fix_top=None, fix_bottom=None,
                  intervals="profile", level=0.95, z_prime_threshold=Z_PRIME_THRESHOLD,
                  tight_binding="flag", tight_binding_factor=TIGHT_BINDING_FACTOR,
                  curve_rules: CurveClassRules = DEFAULT_RULES,
                  fitter: Fitter | None = None) -> PotencyTable:
    """IC50, Hill slope, Ki and pKi of every compound of a tidy dose-response table.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per well. ``role`` is ``"sample"`` (compound at a concentration),
        ``"max"`` (no inhibitor: full activity) or ``"min"`` (no enzyme or full
        inhibition: zero activity); see :mod:`inhibkin.rates.plates`. Control wells need no
        compound.
    compound, plate, role, concentration, response, substrate : str
        Column names. ``substrate`` holds the substrate concentration of the assay
        (one value per compound).
    km : float or str
        Michaelis constant: text with its unit (``"40uM"``), a number, or the column
        holding it (in the substrate column's unit). A number is in **M** when the
        substrate's unit is declared (``substrate_unit``, or a header such as
        ``substrate_uM``), as in :func:`~inhibkin.campaign.fit.fit_campaign`; in a table
        whose substrate carries no unit, a number is in the substrate's own unit.
    substrate_unit : str, optional
        Unit of the substrate column, when its header does not carry it.
    km_se : float, optional
        In the unit Km is used in (the substrate's).
        Standard error of Km, propagated into Ki (delta method; see
        :func:`cheng_prusoff`). Without it the Ki interval is the IC50 interval
        times the conversion factor.
    enzyme : float or str, optional
        Active enzyme concentration (inhibitor's unit) or its column; enables the
        tight-binding flag.
    mechanisms : mapping, optional
        Compound to ``(mechanism, alpha)`` (or a mechanism name) from the campaign's
        mechanism fits; other compounds take ``default_mechanism``.
    default_mechanism : str
        One of :data:`CONVERSIONS`.
    default_alpha : float, optional
        Kiu/Kic when the default is ``"mixed"``.
    normalise : bool
        Fit percent activity from the plate controls (default); when False, fit the
        response as given (Z' is still computed).
    fix_top, fix_bottom : float, optional
        Passed to the 4PL (e.g. 100 and 0 for percent activity).
    intervals : {"profile", "wald"}
    level : float
    z_prime_threshold : float
        Plates below it are flagged, and so is every compound on them.
    tight_binding : {"flag", "morrison"}
        With ``"morrison"``, compounds flagged tight-binding get their Ki from a
        :func:`fit_morrison` fit of the same points instead of Cheng–Prusoff.
    tight_binding_factor : float
        IC50 below this multiple of the enzyme concentration is tight binding.
    curve_rules : CurveClassRules
        Thresholds of the curve classes (:mod:`inhibkin.core.curve_class`); efficacy is
        measured against the plate controls (100 % and 0 % activity) when
        ``normalise`` is on.
    fitter : callable, optional
        Replaces the per-compound lmfit loop, e.g. by a batched engine:
        ``fitter(curves, *, fix_top, fix_bottom, intervals, level, class_options)``
        with ``curves`` mapping compound to (conc, response) arrays already validated
        and ``class_options`` the keywords (full_activity, zero_activity, curve_rules)
        to hand to :func:`~inhibkin.potency.curve.dose_response_from_estimates`, returning
        compound to :class:`DoseResponseFit` (see
        :func:`~inhibkin.potency.curve.dose_response_from_estimates`) or to the
        :class:`~inhibkin.errors.InhibkinError` that stopped it.

    Returns
    -------
    PotencyTable
        Every compound exactly once; one failing compound never stops the others.

    Raises
    ------
    DataError
        For problems of the whole table: missing columns, no control wells of a kind,
        unknown roles, sample rows without a compound, an unknown default mechanism.
    """
    if intervals not in INTERVAL_METHODS:
        raise FitError(f"intervals must be one of {INTERVAL_METHODS}, got {intervals!r}")
    check_potency_options(tight_binding=tight_binding, default_mechanism=default_mechanism,
                          default_alpha=default_alpha)
    km = _km_in_substrate_unit(km, df, substrate, substrate_unit)
    columns = [compound, plate, role, concentration, response, substrate]
    columns += [c for c in (km, enzyme) if isinstance(c, str)]
    check_columns(df, columns)
    if not df.index.is_unique:
        # Rows are picked by label below; repeated labels would pick several.
        df = df.reset_index(drop=True)
    df = df.assign(**{role: normalise_roles(df[role]).to_numpy(dtype=object)})
    qc = plate_qc(df, plate=plate, role=role, response=response, threshold=z_prime_threshold,
                  strict=False)
    y_all = (percent_activity(df, qc, plate=plate, response=response) if normalise else
             pd.to_numeric(df[response], errors="coerce").to_numpy(dtype=float))
    is_sample = (df[role] == "sample").to_numpy()
    samples = df[is_sample]
    if samples.empty:
        raise DataError(Problem(role, None, "sample", "the table has no 'sample' wells"))
    nameless = samples[compound].isna().to_numpy()
    if nameless.any():
        raise DataError([Problem(compound, r, None, "a 'sample' well has no compound",
                                 row_kind(df)) for r in samples.index[nameless][:5]])
    y_samples = pd.Series(y_all[is_sample], index=samples.index)
    unusable = qc.unusable
    no_spread = set(qc.no_spread)
    low_plates = set(qc.flagged) - no_spread

    rows, curves, info = {}, {}, {}
    n_free = 4 - len(_fixed(fix_top, fix_bottom))
    # One pass over the whole table: the compounds, their rows, and which rows hold a
    # value the per-curve check would refuse; only a compound with such a row is
    # checked on its own (for the message that names its rows).
    codes, names = pd.factorize(samples[compound])
    order = np.argsort(codes, kind="stable")
    where = np.split(order, np.cumsum(np.bincount(codes, minlength=len(names)))[:-1])
    conc_all, bad_conc = numeric_rows(samples, concentration, allow_negative=True)
    with np.errstate(invalid="ignore"):
        bad_conc |= np.isfinite(conc_all) & (conc_all <= 0)
    response_all, bad_response = numeric_rows(pd.DataFrame({response: y_samples}), response,
                                              allow_negative=True)
    bad_any = bad_conc | bad_response
    plate_all = samples[plate].to_numpy()
    in_table = np.flatnonzero(is_sample)
    for name, at in zip(names, where):
        index = samples.index[at]
        on = list(pd.unique(plate_all[at]))
        info[name] = (in_table[at], on)
        rows[name] = {"compound": name, "status": "failed", "plate": ", ".join(map(str, on)),
                      "n_points": len(at), "flags": ()}
        bad = [unusable[p] for p in on if p in unusable]
        try:
            if bad:
                raise DataError(bad[0], _context(name))
            if bad_any[at].any():
                conc, resp, _ = _check_curve(samples[concentration].to_numpy()[at],
                                             response_all[at], None, context=_context(name),
                                             columns=(concentration, response, "weights"),
                                             rows=index, n_free=n_free)
            else:
                conc, resp = conc_all[at], response_all[at]
                _check_curve_points(conc, resp, context=_context(name),
                                    columns=(concentration, response), n_free=n_free)
            curves[name] = (conc, resp)
        except InhibkinError as error:
            rows[name]["reason"] = str(error)
    if not isinstance(curve_rules, CurveClassRules):
        raise DataError(Problem("curve_rules", None, curve_rules,
                                "must be an inhibkin.core.curve_class.CurveClassRules"))
    # Percent activity from the controls: the control window is 100 % to 0 %.
    class_options = {"full_activity": 100.0 if normalise else None, "zero_activity": 0.0,
                     "curve_rules": curve_rules}
    run = fitter or _default_fitter
    results = dict(run(curves, fix_top=fix_top, fix_bottom=fix_bottom, intervals=intervals,
                       level=level, class_options=class_options)) if curves else {}

    fits, morrison_fits = {}, {}
    # The per-compound columns as numbers, once; conversion factors by their inputs (a
    # screen has one substrate concentration and a handful of mechanisms).
    columns = {c: pd.to_numeric(df[c], errors="coerce").to_numpy(dtype=float)
               for c in (substrate, km, enzyme) if isinstance(c, str)}
    keys = []
    for name in curves:
        if not isinstance(results.get(name), DoseResponseFit):
            continue
        try:
            at = info[name][0]
            key = (_per_compound_value(substrate, columns, at, "substrate"),
                   _per_compound_value(km, columns, at, "km"))
        except DataError:
            continue  # the compound's row says why
        mech, alpha, _ = _mechanism_of(name, mechanisms, default_mechanism, default_alpha)
        if mech in CONVERSIONS:
            keys.append((*key, mech, None if np.isnan(alpha) else alpha))
    factors = _conversion_factors(keys)
    for name in curves:
        outcome = results.get(name)
        row = rows[name]
        if not isinstance(outcome, DoseResponseFit):
            row["reason"] = (str(outcome) if outcome is not None else
                             "the fitter returned no result for this compound")
            continue
        fits[name] = outcome
        try:
            row.update(_potency_row(name, outcome, columns, info[name], factors,
                                    low_plates=low_plates,
                                    no_spread=no_spread,
                                    substrate=substrate, km=km, km_se=km_se, enzyme=enzyme,
                                    mechanisms=mechanisms, default_mechanism=default_mechanism,
                                    default_alpha=default_alpha, level=level,
                                    tight_binding=tight_binding,
                                    tight_binding_factor=tight_binding_factor,
                                    morrison_fits=morrison_fits, intervals=intervals))
        except InhibkinError as error:
            row["reason"] = f"{_context(name)}: {error}" if _context(name) not in str(error) \
                else str(error)
    # Bounds and flags stay values (a Bound, a tuple) in ``records``; the table is where
    # they are written out as text.
    records = {name: {"ic50_bound": row.get("ic50_bound"), "ki_bound": row.get("ki_bound"),
                      "flags": tuple(row["flags"])} for name, row in rows.items()}
    table = pd.DataFrame([_written(rows[n]) for n in rows], columns=list(TABLE_COLUMNS))
    text = ["curve_class", "reason", "ic50_bound", "ki_bound", "mechanism", "mechanism_source",
            "ki_method", "flags"]
    # As object first: filling an all-missing float column with text would warn, and the
    # batch's warning capture would write that warning into the flags.
    table[text] = table[text].astype(object).fillna("")
    return PotencyTable(table.reset_index(drop=True), fits, qc, morrison_fits, records)


def _written(row: dict) -> dict:
    """A result row as the table holds it: bounds as "> x" text, flags joined by ", "."""
    out = dict(row)
    for key in ("ic50_bound", "ki_bound"):
        out[key] = out[key].text() if out.get(key) is not None else ""
    out["flags"] = ", ".join(row["flags"])
    return out


def _potency_row(name, fit: DoseResponseFit, columns, where, factors, *, low_plates, no_spread,
                 substrate,
                 km, km_se, enzyme, mechanisms, default_mechanism, default_alpha, level,
                 tight_binding, tight_binding_factor, morrison_fits, intervals) -> dict:
    at, plates = where
    flags = list(fit.flags)
    s = _per_compound_value(substrate, columns, at, "substrate")
    km_value = _per_compound_value(km, columns, at, "km")
    e = _per_compound_value(enzyme, columns, at, "enzyme")
    ic50_low, ic50_high = fit.interval("ic50")
    hill_low, hill_high = fit.interval("hill")
    hill_set = np.isfinite(fit.hill)
    why = "; ".join([fit.class_reason] + [f"{what} (not determined)"
                                          for what in fit.not_determined])
    out = {"status": "ok", "curve_class": fit.curve_class, "reason": why, "ic50": fit.ic50,
           "ic50_low": np.nan, "ic50_high": np.nan, "ic50_bound": fit.ic50_bound,
           "pic50": fit.pic50, "hill": fit.hill,
           "hill_low": hill_low if hill_set else np.nan,
           "hill_high": hill_high if hill_set else np.nan,
           "top": fit.top, "bottom": fit.bottom, "substrate": s, "km": km_value, "enzyme": e,
           "ki": np.nan, "ki_low": np.nan, "ki_high": np.nan, "ki_bound": None, "pki": np.nan,
           "ki_method": "cheng-prusoff"}
    if not fit.ic50_bound:
        out["ic50_low"], out["ic50_high"] = ic50_low, ic50_high
    if any(p in low_plates for p in plates):
        flags.append("low_z_prime")
    if any(p in no_spread for p in plates):
        flags.append(ZERO_SPREAD)
    mech, alpha, source = _mechanism_of(name, mechanisms, default_mechanism, default_alpha)
    out.update(mechanism=mech, alpha=alpha, mechanism_source=source)
    if np.isfinite(e) and np.isfinite(fit.ic50) and fit.ic50 < tight_binding_factor * e:
        flags.append("tight_binding")
    out["flags"] = tuple(flags)
    if mech not in CONVERSIONS:
        out["reason"] = "; ".join(filter(None, (
            why, f"mechanism {mech!r}: no IC50 to Ki conversion; Ki not reported")))
        return out
    key = (s, km_value, mech, None if np.isnan(alpha) else alpha)
    if key not in factors:
        factors[key] = cheng_prusoff(1.0, *key)
    factor = factors[key]
    if fit.ic50_bound:
        out["ki_bound"] = fit.ic50_bound.scaled(factor)
        return out
    if tight_binding == "morrison" and "tight_binding" in flags:
        m = fit_morrison(fit.conc, fit.response, enzyme=e, s=s, km=km_value, mechanism=mech,
                         alpha=None if np.isnan(alpha) else alpha, intervals=intervals,
                         level=level, compound=name)
        morrison_fits[name] = m
        ki = m.params.loc["ki"]
        out.update(ki=ki["estimate"], ki_low=ki["ci_low"], ki_high=ki["ci_high"],
                   ki_method="morrison")
    elif km_se is not None:
        se_ic50 = fit.ic50 * np.log(10) * fit.params.loc["log_ic50", "se"]
        ki = cheng_prusoff(fit.ic50, s, km_value, mech, None if np.isnan(alpha) else alpha,
                           ic50_se=se_ic50, km_se=km_se, level=level).iloc[0]
        out.update(ki=ki["ki"], ki_low=ki["ki_low"], ki_high=ki["ki_high"])
    else:
        out.update(ki=fit.ic50 * factor, ki_low=out["ic50_low"] * factor,
                   ki_high=out["ic50_high"] * factor)
    with np.errstate(divide="ignore"):
        out["pki"] = -np.log10(out["ki"])
    return out
