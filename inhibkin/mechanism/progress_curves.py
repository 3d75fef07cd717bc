"""Whole progress curves fitted globally: every mechanism, every read of every well.

:func:`fit_progress_curves` fits each rate law of :mod:`inhibkin.core.models` to all reads
of one compound's substrate × inhibitor grid at once, with shared constants and one
offset per well, then compares the laws and decides with the rules of the rate path
(:mod:`inhibkin.core.compare`: the same information criteria, nested F-tests, fixed-alpha
tests and verdict). It uses the late reads that an initial rate discards.

The product curve of each law comes from :mod:`inhibkin.mechanism.product_curve`: the
integrated Michaelis–Menten equation in closed form (Lambert W) where it holds, the
numerically integrated rate law where it does not (product inhibition, laws not
hyperbolic in S), and the result says which (``integration``). Tight binding
(inhibitor depleted by the enzyme) is not modelled: fit such a compound with Morrison's
equation (:func:`inhibkin.fit_morrison`).

Weights and intervals
---------------------
The reads' noise is described by sd² = a² + (b·ŷ)², ŷ the fitted read including the
well's offset (constant noise plus noise proportional to the signal, as a photometer
gives), with a and b fitted to the squared residuals of the mixed fit and shared by
every law, so that their SSRs compare like with like. The offsets are linear and are
projected out of each fit (variable projection: for given constants the best offset
of each well is its weighted mean residual); they count as parameters in every
criterion and degree of freedom. Intervals are profile-likelihood intervals (or
log-scale Wald), as :mod:`inhibkin.mechanism.one_model` gives them.

The lack-of-fit test (rule 5) is not applied: reads of one well are not replicates.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..core.bounds import NESTED_FAR_FACTOR
from ..core.compare import (
    EDGE_SIDES,
    EXACT_FIT_RTOL,
    Verdict,
    VerdictOptions,
    comparison_table,
    decide,
    f_test,
    f_test_table,
    free_alpha,
    information_criteria,
)
from ..core.determined import DETERMINATION_FACTOR, determined_flags
from ..core.models import MODEL_NAMES, MODELS, nested_start, ratio_tie
from ..core.options import INTERVAL_METHODS
from ..core.profile import profile_crossing, profile_tie
from ..core.readonly import readonly_frame, readonly_mapping
from ..core.starts import log_bounds, starting_values
from ..display.text import text_table
from ..errors import DataError, Problem
from ..rates.initial import product_curves
from ..units import header_column, to_molar
from .one_model import ModelFit
from .product_curve import CLOSED_FORM, INTEGRATIONS, ODE, WellCurves, integration_of

__all__ = ["ProgressCurveFit", "fit_progress_curves"]

# Passes of the variance model: the first from a fit with one noise level for every
# read, the second from the residuals of a fit weighted by the first.
_REWEIGHT_PASSES = 2
# Tolerances of scipy's least_squares (relative; the residuals are O(1) once weighted).
_TOL = 1e-10
_PROFILE_TOL = 1e-8
_MAX_EVALUATIONS = 400
_PROFILE_MAX_EVALUATIONS = 100
# Profile search: as in mechanism/one_model.py.
_PROFILE_FIRST_STEP = 0.25
_PROFILE_MAX_DOUBLINGS = 20
_PROFILE_XTOL = 1e-5
# The early reads that give a well's rough initial rate, for the starts and bounds.
_EARLY_FRACTION = 1.0 / 3.0


@dataclass(frozen=True)
class _Problem:
    """Weighted least squares of one law on one compound's reads, offsets projected out."""

    law: object
    curves: WellCurves
    y: np.ndarray
    w: np.ndarray
    method: str
    product_ki: float | None
    lower: np.ndarray
    upper: np.ndarray

    def offsets(self, predicted):
        w2 = self.w**2
        n_wells = len(self.curves.s0)
        total = np.bincount(self.curves.code, w2 * (self.y - predicted), minlength=n_wells)
        weight = np.bincount(self.curves.code, w2, minlength=n_wells)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(weight > 0, total / weight, 0.0)

    def fitted(self, theta):
        predicted = self.curves.product(self.law, np.exp(theta), self.method, self.product_ki)
        return predicted + self.offsets(predicted)[self.curves.code]

    def residual(self, theta):
        r = self.w * (self.y - self.fitted(theta))
        return np.where(np.isfinite(r), r, 1e150)

    def jacobian(self, theta):
        """d residual / d theta with the offsets projected out (each column minus its
        weighted well mean), or None where the product comes from the ODE."""
        if self.method == ODE:
            return None
        d_product = self.curves.product_jacobian(self.law, theta)
        w2 = self.w**2
        n_wells = len(self.curves.s0)
        weight = np.bincount(self.curves.code, w2, minlength=n_wells)
        means = np.column_stack([
            np.bincount(self.curves.code, w2 * column, minlength=n_wells)
            for column in d_product.T]) / np.where(weight > 0, weight, 1.0)[:, None]
        out = -self.w[:, None] * (d_product - means[self.curves.code])
        return np.where(np.isfinite(out), out, 0.0)


def _solve(problem, theta0, tie=None, offset=None, *, tol=_TOL, max_evaluations=_MAX_EVALUATIONS):
    """Minimise the SSR over phi, theta = tie @ phi + offset (as one_model's solver).

    Returns (theta, ssr, log-covariance scaled to unit variance or None, success,
    message).
    """
    k = len(theta0)
    A = np.eye(k) if tie is None else tie
    b = np.zeros(k) if offset is None else offset
    owner = [int(np.flatnonzero(A[:, m])[0]) for m in range(A.shape[1])]
    lower = np.array([problem.lower[j] - b[j] for j in owner])
    upper = np.array([problem.upper[j] - b[j] for j in owner])
    phi0 = np.linalg.lstsq(A, np.asarray(theta0) - b, rcond=None)[0]
    phi0 = np.clip(phi0, lower + 1e-9, upper - 1e-9)
    jac = "2-point" if problem.method == ODE else (
        lambda phi: problem.jacobian(A @ phi + b) @ A)
    with np.errstate(all="ignore"):
        result = optimize.least_squares(lambda phi: problem.residual(A @ phi + b), phi0,
                                        jac=jac, bounds=(lower, upper), method="trf",
                                        ftol=tol, xtol=tol, gtol=tol,
                                        max_nfev=max_evaluations, x_scale=1.0)
    theta = A @ result.x + b
    ssr = float(np.sum(result.fun**2))
    covariance = None
    if A.shape[1] == k:
        jac = result.jac
        try:
            covariance = np.linalg.inv(jac.T @ jac)
        except np.linalg.LinAlgError:
            covariance = None
    success = bool(result.status > 0) and np.isfinite(ssr) and ssr < 1e290
    return theta, ssr, covariance, success, str(result.message)


def _profile(problem, theta_hat, target, direction, first_step, j=None, contrast=None):
    """Where the profile SSR of theta_j (or of theta_b − theta_a) crosses ``target``."""
    k = len(theta_hat)
    A, fixed, centre, limit = profile_tie(theta_hat, problem.lower, problem.upper, direction,
                                          j, contrast)

    def excess(c, warm):
        b = np.zeros(k)
        b[fixed] = c
        theta, ssr, _, _, _ = _solve(problem, warm, A, b, tol=_PROFILE_TOL,
                                     max_evaluations=_PROFILE_MAX_EVALUATIONS)
        return ssr - target, theta

    return profile_crossing(excess, centre, limit, direction, first_step, theta_hat,
                            xtol=_PROFILE_XTOL, max_doublings=_PROFILE_MAX_DOUBLINGS)


def _limits(problem, theta, ssr, se_log, method, level, dof, j=None, contrast=None):
    centre = theta[j] if contrast is None else theta[contrast[1]] - theta[contrast[0]]
    if method == "wald" or dof <= 0:
        t = stats.t.ppf(0.5 + level / 2, max(dof, 1))
        with np.errstate(over="ignore"):
            return np.exp(centre - t * se_log), np.exp(centre + t * se_log)
    target = ssr * (1 + stats.f.ppf(level, 1, dof) / dof)
    step = se_log if np.isfinite(se_log) and se_log > 0 else _PROFILE_FIRST_STEP
    low = _profile(problem, theta, target, -1, step, j, contrast)
    high = _profile(problem, theta, target, +1, step, j, contrast)
    with np.errstate(over="ignore"):
        return np.exp(low), np.exp(high)


def _failed(model, n_obs, n_params, message, level, method) -> ModelFit:
    names = MODELS[model].param_names
    nan = np.full(len(names), np.nan)
    params = pd.DataFrame({"estimate": nan, "se": nan, "ci_low": nan, "ci_high": nan,
                           "determined": False}, index=pd.Index(names, name="parameter"))
    return ModelFit(model, params, n_obs, n_params, np.nan, np.nan, np.nan, np.nan, np.nan,
                    False, message, np.full(n_obs, np.nan), np.full(n_obs, np.nan), level,
                    method)


def _fit_law(problem, model, starts, *, intervals, level, determination_factor, s_points,
             i_points) -> ModelFit:
    """One law fitted to every read, as a :class:`ModelFit` (offsets counted in k)."""
    law = problem.law
    n = len(problem.y)
    n_wells = len(problem.curves.s0)
    k = law.n_params
    k_total = k + n_wells
    best = None
    for start in starts:
        theta0 = np.clip(np.log([start[p] for p in law.param_names]), problem.lower + 1e-6,
                         problem.upper - 1e-6)
        outcome = _solve(problem, theta0)
        if best is None or (outcome[3] and (not best[3] or outcome[1] < best[1])):
            best = outcome
    theta, ssr, covariance, success, message = best
    if not success or n <= k_total:
        return _failed(model, n, k_total, f"optimiser did not converge: {message}", level,
                       intervals)
    dof = n - k_total
    scale = ssr / dof
    with np.errstate(invalid="ignore"):
        se_log = (np.sqrt(np.diag(covariance) * scale) if covariance is not None
                  else np.full(k, np.nan))
    low, high = np.empty(k), np.empty(k)
    for j in range(k):
        low[j], high[j] = _limits(problem, theta, ssr, se_log[j], intervals, level, dof, j=j)
    mask = np.ones((1, len(s_points)), bool)
    flags = determined_flags(law, theta[None], problem.lower[None], problem.upper[None],
                             low[None], high[None], se_log[None], s_points[None],
                             i_points[None], mask, factor=determination_factor)[0]
    estimate = np.exp(theta)
    table = pd.DataFrame({"estimate": estimate, "se": estimate * se_log, "ci_low": low,
                          "ci_high": high, "determined": flags[:k]},
                         index=pd.Index(law.param_names, name="parameter"))
    for d, both in zip(law.derived, flags[k:]):
        a, b = law.param_names.index(d.denominator), law.param_names.index(d.numerator)
        se_ratio = np.nan
        if covariance is not None:
            var = scale * (covariance[a, a] + covariance[b, b] - 2 * covariance[a, b])
            se_ratio = float(np.sqrt(var)) if var >= 0 else np.nan
        lo, hi = (_limits(problem, theta, ssr, se_ratio, intervals, level, dof,
                          contrast=(a, b)) if both else (np.nan, np.nan))
        ratio = float(np.exp(theta[b] - theta[a]))
        table.loc[d.name] = [ratio, ratio * se_ratio, lo, hi, bool(both)]
    fitted = problem.fitted(theta)
    criteria = information_criteria(ssr, n, k_total, float(np.sum(np.log(problem.w))))
    return ModelFit(model, table, n, k_total, ssr, criteria["loglik"], criteria["aic"],
                    criteria["aicc"], criteria["bic"], True, message, fitted,
                    problem.y - fitted, level, intervals, covariance)


def _fixed_alpha_ssr(problem, starts, alpha):
    law = problem.law
    (ratio,) = law.derived
    names = law.param_names
    tie, offset = ratio_tie(law, alpha)
    best = np.nan
    for start in starts:
        held = {**start, ratio.numerator: alpha * start[ratio.denominator]}
        theta0 = np.clip(np.log([held[p] for p in names]), problem.lower + 1e-6,
                         problem.upper - 1e-6)
        _, ssr, _, success, _ = _solve(problem, theta0, tie, offset)
        if success and not ssr >= best:
            best = ssr
    return float(best)


def _variance_weights(fitted, residuals, dof_fraction):
    """1/sd with sd² = a² + (b·ŷ)² fitted to the squared residuals (a, b ≥ 0)."""
    design = np.column_stack([np.ones_like(fitted), fitted**2])
    coef, _ = optimize.nnls(design, residuals**2 / dof_fraction)
    variance = design @ coef
    floor = np.finfo(float).tiny if not np.any(variance > 0) else 1e-6 * np.max(variance)
    # Absolute weights (not normalised): the weighted residuals are then O(1), the scale
    # the solver's tolerances are meant for.
    return 1.0 / np.sqrt(np.maximum(variance, floor)), coef


def _read_noise(curves, y):
    """A first read-noise scale: the median absolute second difference within wells."""
    order = np.lexsort((curves.t, curves.code))
    yy, cc = y[order], curves.code[order]
    second = yy[2:] - 2 * yy[1:-1] + yy[:-2]
    same = (cc[2:] == cc[:-2])
    spread = np.median(np.abs(second[same])) if same.any() else 0.0
    # MAD of a difference of three reads with weights 1, −2, 1: sd·√6·0.6745.
    return spread / (np.sqrt(6) * 0.6745) if spread > 0 else max(float(np.std(y)), 1e-300)


def _early_rates(curves, y):
    """A rough initial rate of each well (straight line over its early reads)."""
    n_wells = len(curves.s0)
    rates = np.zeros(n_wells)
    for w in range(n_wells):
        use = curves.code == w
        t, v = curves.t[use], y[use]
        keep = t <= np.quantile(t, _EARLY_FRACTION) if len(t) > 6 else np.ones(len(t), bool)
        if keep.sum() >= 2 and np.ptp(t[keep]) > 0:
            rates[w] = np.polyfit(t[keep], v[keep], 1)[0]
    top = np.max(rates) if np.any(rates > 0) else 1.0
    return np.maximum(rates, 1e-3 * top)


@dataclass(frozen=True)
class ProgressCurveFit:
    """Every mechanism fitted to one compound's whole progress curves, and the verdict.

    Attributes
    ----------
    compound : str
        The compound, as the plate map writes it.
    verdict, best, candidates, reason : str, str or None, tuple of str, str
        As :class:`inhibkin.MechanismFit` (the same rules decide).
    models : dict of str to ModelFit
        Every law's fit; ``n_params`` counts the per-well offsets, ``fitted`` and
        ``residuals`` are per read.
    comparison, ftests : pandas.DataFrame
        As :class:`inhibkin.MechanismFit`.
    data : pandas.DataFrame
        The reads fitted: well, substrate, inhibitor (M when declared), time (s),
        product (M), weight (1/sd of the read).
    offsets : pandas.DataFrame
        Per well: plate, well, substrate, inhibitor and the offset of the verdict's law
        (the product's scale, M).
    integration : str
        How the product curve was computed: the closed form, or the ODE and why.
    variance_model : tuple of float
        (a, b) of sd² = a² + (b·ŷ)² for the reads (a in the product's unit, b a
        fraction).
    units : dict
        ``substrate``, ``inhibitor`` (M when declared; the constants are then in M),
        ``rate`` (vmax: the product's unit per s).
    options : VerdictOptions
    """

    compound: str
    verdict: str
    best: str | None
    candidates: tuple[str, ...]
    reason: str
    models: dict[str, ModelFit] = field(repr=False)
    comparison: pd.DataFrame = field(repr=False)
    ftests: pd.DataFrame = field(repr=False)
    data: pd.DataFrame = field(repr=False)
    offsets: pd.DataFrame = field(repr=False)
    integration: str = CLOSED_FORM
    variance_model: tuple[float, float] = (np.nan, np.nan)
    units: dict = field(default_factory=dict)
    options: VerdictOptions = VerdictOptions()

    def __post_init__(self):
        object.__setattr__(self, "models", readonly_mapping(self.models, nested=False))
        object.__setattr__(self, "units", readonly_mapping(self.units))
        for name in ("comparison", "ftests", "data", "offsets"):
            object.__setattr__(self, name, readonly_frame(getattr(self, name)))

    @property
    def best_fit(self) -> ModelFit | None:
        """The ModelFit of :attr:`best`."""
        return self.models.get(self.best) if self.best else None

    @property
    def params(self) -> pd.DataFrame:
        """Tidy parameter table of every law: model, parameter, estimate, se, ci_low,
        ci_high, determined."""
        return pd.concat([fit.to_frame() for fit in self.models.values()], ignore_index=True)

    def constants(self) -> pd.DataFrame:
        """The inhibition constants (and alpha) of the verdict's law; empty for ``none``
        and ``failed``."""
        fit = self.best_fit
        if fit is None or self.best == "none":
            return pd.DataFrame(columns=["estimate", "se", "ci_low", "ci_high", "determined"])
        keep = [p for p in fit.params.index if p not in ("vmax", "km")]
        return fit.params.loc[keep]

    def to_frame(self) -> pd.DataFrame:
        """The tidy parameter table with the compound, which row is the verdict's law and
        each parameter's unit (from its role: vmax the rate's, km the substrate's, kic,
        kiu, ki the inhibitor's; ratios none)."""
        by_role = {"rate": self.units.get("rate"), "substrate": self.units.get("substrate"),
                   "substrate_inhibition": self.units.get("substrate"),
                   "inhibitor": self.units.get("inhibitor")}

        def unit(model, parameter):
            law = MODELS[model]
            return by_role.get(dict(zip(law.param_names, law.roles)).get(parameter)) or ""

        out = self.params
        out.insert(0, "compound", self.compound)
        out.insert(2, "is_best", out["model"] == self.best)
        out["unit"] = [unit(m, p) for m, p in zip(out["model"], out["parameter"])]
        return out

    def summary(self) -> str:
        """Plain-text report: verdict, how the curves were computed, comparison, F-tests
        and the verdict law's parameters."""
        width = 78
        a, b = self.variance_model
        lines = ["=" * width, f"Progress curves of {self.compound}: {self.verdict}",
                 f"  {self.reason}",
                 f"  {len(self.offsets)} wells, {len(self.data)} reads; product by "
                 f"{self.integration}; one offset per well",
                 f"  read noise sd² = a² + (b·ŷ)², a = {a:.3g} "
                 f"{self.units.get('substrate')}, b = {b:.3g}",
                 f"  units: substrate {self.units.get('substrate')}, inhibitor "
                 f"{self.units.get('inhibitor')}, vmax {self.units.get('rate')}",
                 "-" * width, "Model comparison (offsets counted in n_params)",
                 text_table(self.comparison), "-" * width, "Nested F-tests",
                 text_table(self.ftests, index=False)]
        if self.best_fit is not None:
            lines += ["-" * width, self.best_fit.summary()]
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        import html

        head = (f"<p><b>Progress curves of {html.escape(self.compound)}</b>: "
                f"{html.escape(self.verdict)} — {html.escape(self.reason)}<br>"
                f"product by {html.escape(self.integration)}</p>")
        parts = [head, self.comparison.to_html(float_format="{:.4g}".format)]
        if self.best_fit is not None:
            parts.append(self.best_fit._repr_html_())
        return "<div>" + "".join(parts) + "</div>"


def _check_options(integration, product_ki, intervals, level, models):
    problems = []
    if integration not in INTEGRATIONS:
        problems.append(Problem("integration", None, integration,
                                f"must be one of {INTEGRATIONS}"))
    if product_ki is not None and not (isinstance(product_ki, (int, float))
                                       and product_ki > 0):
        problems.append(Problem("product_ki", None, product_ki, "must be a positive number"))
    if intervals not in INTERVAL_METHODS:
        problems.append(Problem("intervals", None, intervals,
                                f"must be one of {INTERVAL_METHODS}"))
    if not (isinstance(level, float) and 0 < level < 1):
        problems.append(Problem("level", None, level, "must be a number in (0, 1)"))
    unknown = [m for m in models if m not in MODELS]
    if unknown:
        problems.append(Problem("models", None, unknown, f"known: {', '.join(MODELS)}"))
    elif not {"none", "mixed"} <= set(models):
        problems.append(Problem("models", None, list(models),
                                "the verdict needs none and mixed among them"))
    if problems:
        raise DataError(problems, "fit_progress_curves options")


def fit_progress_curves(reads, plate_map, *, compound_id=None, time="time", signal="signal",
                        plate="plate", well="well", compound="compound",
                        substrate="substrate", inhibitor="inhibitor", role="role",
                        time_unit=None, conversion=None, signal_unit=None,
                        substrate_unit=None, inhibitor_unit=None, direction="increase",
                        stoichiometry=1.0, subtract_blanks=True, integration="auto",
                        product_ki=None, models=MODEL_NAMES, intervals="profile",
                        level=0.95, alpha=0.05, min_delta_aicc=2.0, alpha_factor=5.0,
                        determination_factor=DETERMINATION_FACTOR,
                        edge_sides=EDGE_SIDES) -> ProgressCurveFit:
    """Fit every mechanism to all reads of all wells of one compound and decide.

    Parameters
    ----------
    reads, plate_map : pandas.DataFrame
        As :func:`inhibkin.initial_rates` takes them (same column options, units,
        blanks and checks; :func:`inhibkin.rates.initial.product_curves` reads them).
        The product must be a concentration in the substrate's unit: give
        ``conversion`` (or a signal already in concentration, ``signal_unit``) and the
        substrate's unit (``substrate_unit`` or a header such as ``substrate_uM``).
    compound_id : str, optional
        The compound to fit when the plate map's sample wells hold several (its text
        as the plate map writes it).
    time, signal, plate, well, compound, substrate, inhibitor, role : str
        Column names, as :func:`inhibkin.initial_rates`.
    time_unit, conversion, signal_unit, substrate_unit, inhibitor_unit, direction,
    stoichiometry, subtract_blanks
        As :func:`inhibkin.initial_rates`.
    integration : {"auto", "closed", "ode"}
        ``auto``: the closed form where it holds, else the ODE (see the module notes).
    product_ki : float, optional
        Competitive product inhibition constant, in the substrate's unit as declared
        (µM for ``substrate_uM``); the product curve is then integrated numerically.
    models : sequence of str
        Laws to fit (default the five classical laws).
    intervals : {"profile", "wald"}
    level : float
        Confidence level of the intervals.
    alpha, min_delta_aicc, alpha_factor : float
        The verdict's options, as :func:`inhibkin.fit_mechanisms`.
    determination_factor : float
        As :func:`inhibkin.fit_mechanisms`.
    edge_sides : {1, 2}
        Rule 4's edge test, as :func:`inhibkin.fit_mechanisms` (default 2, two-sided).

    Returns
    -------
    ProgressCurveFit
        Constants in M when the plate map declares the concentrations' units; vmax in
        the product's unit (M when declared) per s.

    Raises
    ------
    DataError
        Bad reads or plate map (as :func:`inhibkin.initial_rates`), a bad option, no
        unit to put product and substrate on one scale, several compounds and no
        ``compound_id``, or too few wells or levels.
    """
    _check_options(integration, product_ki, intervals, level, tuple(models))
    options = VerdictOptions(alpha=alpha, min_delta_aicc=min_delta_aicc,
                             alpha_factor=alpha_factor, lack_of_fit_alpha=0.0,
                             edge_sides=edge_sides)
    curves_table = product_curves(reads, plate_map, time=time, signal=signal, plate=plate,
                                  well=well, compound=compound, substrate=substrate,
                                  inhibitor=inhibitor, role=role, time_unit=time_unit,
                                  conversion=conversion, signal_unit=signal_unit,
                                  substrate_unit=substrate_unit,
                                  inhibitor_unit=inhibitor_unit, direction=direction,
                                  stoichiometry=stoichiometry, subtract_blanks=subtract_blanks)
    units = curves_table.attrs["units"]
    names = pd.unique(curves_table[compound].astype(str))
    if compound_id is None and len(names) > 1:
        raise DataError(Problem(compound, None, list(names[:5]),
                                "the sample wells hold several compounds; name one with "
                                "compound_id="), "fit_progress_curves")
    chosen = str(compound_id) if compound_id is not None else (names[0] if len(names) else "")
    table = curves_table[curves_table[compound].astype(str) == chosen]
    if not len(table):
        raise DataError(Problem(compound, None, chosen, "no sample well of this compound "
                                                        "has reads"), "fit_progress_curves")
    if units["product"] is None or units["substrate"] is None:
        raise DataError(Problem(signal, None, units["product"],
                                "the product must be a concentration on the substrate's "
                                "scale: give conversion= (or signal_unit=) and the "
                                "substrate's unit (substrate_unit= or a header such as "
                                "substrate_uM)"), "fit_progress_curves")
    s_column, _ = header_column(table.columns, substrate)
    i_column, _ = header_column(table.columns, inhibitor)
    s = to_molar(table[s_column].to_numpy(float), units["substrate"])
    i = (to_molar(table[i_column].to_numpy(float), units["inhibitor"])
         if units["inhibitor"] else table[i_column].to_numpy(float))
    y = to_molar(table["product"].to_numpy(float), units["product"])
    kp = None if product_ki is None else float(to_molar(product_ki, units["substrate"]))
    well_key = table[plate].astype(str) + "\x1f" + table[well].astype(str)
    code = pd.factorize(well_key)[0]
    curves = WellCurves.from_reads(table["time"].to_numpy(float), s, i, code)
    if len(np.unique(curves.s0)) < 2 or (len(np.unique(curves.inhibitor)) < 2):
        raise DataError(Problem(substrate, None, None,
                                "need at least two substrate and two inhibitor levels"),
                        chosen)
    fit = _fit_compound(curves, y, models=tuple(models), integration=integration,
                        product_ki=kp, intervals=intervals, level=level, options=options,
                        determination_factor=determination_factor)
    verdict, fits, comparison, ftests, w, method, coef = fit
    data = pd.DataFrame({"well": table[well].to_numpy(), "substrate": s, "inhibitor": i,
                         "time": curves.t, "product": y, "weight": w})
    best = fits.get(verdict.best)
    first_read = np.unique(code, return_index=True)[1]  # one row per well, in code order
    offsets = pd.DataFrame({"plate": table[plate].to_numpy()[first_read],
                            "well": table[well].to_numpy()[first_read],
                            "substrate": curves.s0, "inhibitor": curves.inhibitor,
                            "offset": np.nan})
    if best is not None and best.converged:
        # Every read of a well carries the same offset: fitted − product formed.
        offsets["offset"] = np.bincount(
            code, best.fitted - _product_of(curves, verdict.best, best, method, kp),
            minlength=len(curves.s0)) / np.bincount(code)
    molar = {"substrate": "M" if units["substrate"] else None,
             "inhibitor": "M" if units["inhibitor"] else units["inhibitor"],
             "rate": "M/s"}
    return ProgressCurveFit(chosen, verdict.verdict, verdict.best, verdict.candidates,
                            verdict.reason, fits, comparison, ftests, data, offsets,
                            method if kp is None else f"{method}: product inhibition, "
                            f"Kp = {kp:.4g} M", tuple(np.sqrt(coef)), molar, options)


def _product_of(curves, model, fit, method, product_ki):
    law = MODELS[model]
    return curves.product(law, [fit.best_values[p] for p in law.param_names], method,
                          product_ki)


def _fit_compound(curves, y, *, models, integration, product_ki, intervals, level, options,
                  determination_factor):
    """Every law fitted with shared variance-model weights; the verdict."""
    s_points = curves.s0[curves.code]
    i_points = curves.inhibitor[curves.code]
    v0 = _early_rates(curves, y)
    methods = {name: integration_of(MODELS[name], integration, product_ki, curves.scale)
               for name in models}
    w = np.full(len(y), 1.0 / _read_noise(curves, y))
    coef = np.array([np.nan, np.nan])

    far = float(np.exp(log_bounds("mixed", curves.s0, curves.inhibitor, v0)["kic"][1])
                / NESTED_FAR_FACTOR)

    def problem_of(name, weights):
        bounds = log_bounds(name, curves.s0, curves.inhibitor, v0)
        names = MODELS[name].param_names
        return _Problem(MODELS[name], curves, y, weights, methods[name], product_ki,
                        np.array([bounds[p][0] for p in names]),
                        np.array([bounds[p][1] for p in names]))

    def fit(name, weights, fits, intervals_now):
        problem = problem_of(name, weights)
        starts = [starting_values(name, curves.s0, curves.inhibitor, v0)]
        for small, done in fits.items():
            if done.converged and name in MODELS[small].nests_in:
                starts.append(nested_start(small, done.best_values, name, far))
        return _fit_law(problem, name, starts, intervals=intervals_now, level=level,
                        determination_factor=determination_factor, s_points=s_points,
                        i_points=i_points)

    # The weights: the variance model fitted to the residuals of the most general law.
    general = "mixed"
    for _ in range(_REWEIGHT_PASSES):
        pilot = fit(general, w, {}, "wald")
        if not pilot.converged:
            break
        dof_fraction = pilot.dof / pilot.n_obs
        w, coef = _variance_weights(pilot.fitted, pilot.residuals, dof_fraction)
    fits: dict[str, ModelFit] = {}
    for name in sorted(models, key=lambda m: MODELS[m].n_params):
        fits[name] = fit(name, w, fits, intervals)
    fits = {name: fits[name] for name in MODELS if name in fits}
    comparison = comparison_table(fits)
    exact_ssr = EXACT_FIT_RTOL * float(np.sum((w * y) ** 2))
    ftests = f_test_table(fits, exact_ssr=exact_ssr)
    mixed = fits.get("mixed")
    if mixed is not None and mixed.converged:
        problem = problem_of("mixed", w)
        starts = [mixed.best_values] + [
            nested_start(m, f.best_values, "mixed", far)
            for m, f in fits.items() if f.converged and "mixed" in MODELS[m].nests_in]
        rows = []
        for value in options.alpha_values:
            ssr = _fixed_alpha_ssr(problem, starts, value)
            if np.isfinite(ssr):
                f_value, p_value, df_num, df_den = f_test(ssr, mixed.dof + 1, mixed.ssr,
                                                          mixed.dof)
            else:
                f_value, p_value, df_num, df_den = np.nan, np.nan, 1, mixed.dof
            rows.append({"reduced": options.alpha_row(value), "full": "mixed",
                         "f_value": f_value, "df_num": df_num, "df_den": df_den,
                         "p_value": p_value, "free_alpha": free_alpha(mixed.best_values)})
        ftests = pd.concat([ftests, pd.DataFrame(rows)], ignore_index=True)
    verdict: Verdict = decide(comparison, ftests, options)
    return verdict, fits, comparison, ftests, w, methods.get(verdict.best or general,
                                                             CLOSED_FORM), coef
