"""Potency: dose-response fits, IC50 → Ki by mechanism, tight binding, the potency table.

Four-parameter logistic
-----------------------
:func:`fit_dose_response` fits the 4PL of :mod:`inhibkin.logistic` on x = log10(conc)
by least squares (lmfit), with top and/or bottom optionally fixed; replicates are
separate points. Standard errors come from the covariance s²(JᵀJ)⁻¹ at the optimum
(s² = SSR/(n − k), J the analytic Jacobian). Intervals are profile-likelihood intervals
(``"profile"``: the set of values whose re-optimised SSR stays below
SSR·(1 + F(level; 1, n − k)/(n − k)); Bates & Watts 1988, §6.1) or Wald intervals
(``"wald"``: estimate ± t·se). Both are computed on log10(IC50) and are therefore
asymmetric in IC50.

Cheng–Prusoff
-------------
:func:`cheng_prusoff` turns an IC50 measured at substrate concentration S into the
inhibition constant of the assumed mechanism, from the mixed-inhibition relation
IC50 = (Km + S)/(Km/Kic + S/Kiu) (Cheng & Prusoff 1973; Cortés et al. 2001):

==============  =============================  ===========================
mechanism       Ki returned                    relation
==============  =============================  ===========================
competitive     Kic                            Ki = IC50 / (1 + S/Km)
uncompetitive   Kiu                            Ki = IC50 / (1 + Km/S)
noncompetitive  Ki (= Kic = Kiu)               Ki = IC50
mixed           Kic (Kiu = alpha·Kic)          Kic = IC50·(Km + S/alpha)/(Km + S)
==============  =============================  ===========================

Errors propagate by the delta method on the log scale, IC50 and Km independent, S and
alpha exact: var(ln Ki) = (se_IC50/IC50)² + (∂ln Ki/∂ln Km)²·(se_Km/Km)²; the interval
is Ki·exp(±z·se(ln Ki)).

Tight binding
-------------
When IC50 is within :data:`TIGHT_BINDING_FACTOR` (10×) of the active enzyme
concentration, depletion of free inhibitor biases the Cheng–Prusoff result (common
practice). :func:`fit_morrison` fits the Morrison (1969) quadratic for the apparent Ki
instead; its IC50 is Ki,app + [E]/2.
"""

from __future__ import annotations

import html
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import lmfit
import numpy as np
import pandas as pd
from scipy import optimize, stats

from .errors import DataError, FitError, InhibkinError, Problem
from .logistic import PARAM_NAMES, logistic4, logistic4_jacobian, logistic4_start
from .plates import Z_PRIME_THRESHOLD, PlateQC, percent_activity, plate_qc
from .profile import profile_crossing
from .validate import check_columns, numeric_column

__all__ = [
    "FLAGS",
    "HILL_RANGE",
    "TIGHT_BINDING_FACTOR",
    "CONVERSIONS",
    "DoseResponseFit",
    "MorrisonFit",
    "PotencyTable",
    "fit_dose_response",
    "dose_response_from_estimates",
    "EngineFitter",
    "cheng_prusoff",
    "ic50_from_ki",
    "morrison",
    "fit_morrison",
    "potency_table",
]

#: Short flag -> what it means. Every flag any potency result carries is listed here.
FLAGS = {
    "ic50_above_range": "the curve does not reach its midpoint, or a falling curve does not "
                        "fall to half its top, within the tested range; IC50 is reported as "
                        "a lower bound",
    "ic50_below_range": "the midpoint lies below the lowest concentration tested; IC50 is "
                        "reported as an upper bound",
    "steep_hill": "Hill slope above 2: possible aggregation, denaturation or stoichiometric "
                  "(tight-binding) inhibition (common practice)",
    "shallow_hill": "Hill slope below 0.5: possible negative cooperativity, mixtures, "
                    "solubility limits or a non-1:1 binding (common practice)",
    "few_points_below": "fewer than two concentrations below the midpoint: top poorly defined",
    "few_points_above": "fewer than two concentrations above the midpoint: bottom poorly "
                        "defined",
    "partial_efficacy": "the curve levels off far from zero activity (bottom above 20 % of "
                        "top): partial inhibition",
    "rising": "the fitted curve rises with concentration; IC50 is its midpoint",
    "not_converged": "the optimiser stopped before converging; read the estimates with care",
    "tight_binding": "IC50 within 10x of the enzyme concentration: Cheng–Prusoff is biased",
    "low_z_prime": "a plate of this compound has Z' below the threshold",
}

#: Hill slopes (absolute value) outside this range are flagged (common practice).
HILL_RANGE = (0.5, 2.0)
#: Distinct concentrations needed on each side of the midpoint (common practice).
MIN_POINTS_EACH_SIDE = 2
#: bottom above this fraction of top is partial efficacy (common practice).
PARTIAL_EFFICACY_FRACTION = 0.2
#: IC50 below this multiple of the enzyme concentration is tight binding (common practice).
TIGHT_BINDING_FACTOR = 10.0
#: Mechanisms an IC50 can be converted under.
CONVERSIONS = ("competitive", "uncompetitive", "noncompetitive", "mixed")

INTERVAL_METHODS = ("profile", "wald")

# Convergence tolerances (relative) of the main fits: far below the 6 significant
# digits the reference checks ask for.
_TOL = 1e-12
_MAX_FUNCTION_EVALUATIONS = 4000
# Profile refits locate a crossing only.
_PROFILE_TOL = 1e-10
_PROFILE_MAX_DOUBLINGS = 30
_PROFILE_XTOL = 1e-7
# The midpoint is kept within this many decades beyond the tested range, and |hill|
# below this, so that a flat or step-like curve ends at a bound instead of diverging.
_LOG_IC50_MARGIN = 4.0
_HILL_MAX = 20.0
# Morrison: Ki,app between these multiples of the lowest / highest concentration.
_MORRISON_K_BELOW = 1e-6
_MORRISON_K_ABOVE = 1e6


# --------------------------------------------------------------------------- least squares

@dataclass(frozen=True)
class _Curve:
    """One least-squares problem: y ≈ model(x, *theta), some parameters fixed."""

    model: Callable
    jacobian: Callable
    names: tuple
    x: np.ndarray
    y: np.ndarray
    w: np.ndarray
    free: np.ndarray          # bool mask over names
    fixed_values: np.ndarray  # used where not free
    lower: np.ndarray
    upper: np.ndarray

    def full(self, phi):
        theta = self.fixed_values.copy()
        theta[self.free] = phi
        return theta

    def residual(self, phi):
        return self.w * (self.y - self.model(self.x, *self.full(phi)))

    def residual_jacobian(self, phi):
        return -self.w[:, None] * self.jacobian(self.x, *self.full(phi))[:, self.free]

    def ssr(self, phi) -> float:
        return float(np.sum(self.residual(phi) ** 2))


def _lmfit_solve(curve: _Curve, phi0):
    """Main fit with lmfit (MINPACK Levenberg–Marquardt, analytic Jacobian)."""
    lower, upper = curve.lower[curve.free], curve.upper[curve.free]
    params = lmfit.Parameters()
    for m, value in enumerate(phi0):
        params.add(f"p{m}", value=float(np.clip(value, lower[m], upper[m])), min=lower[m],
                   max=upper[m])

    def phi_of(pars):
        return np.array([pars[f"p{m}"].value for m in range(len(phi0))])

    minimizer = lmfit.Minimizer(lambda p: curve.residual(phi_of(p)), params, nan_policy="raise")
    with np.errstate(all="ignore"):
        result = minimizer.leastsq(Dfun=lambda p: curve.residual_jacobian(phi_of(p)),
                                   col_deriv=0, ftol=_TOL, xtol=_TOL,
                                   max_nfev=_MAX_FUNCTION_EVALUATIONS)
    phi = phi_of(result.params)
    return phi, curve.ssr(phi), bool(result.success), str(result.message)


def _covariance(curve: _Curve, phi, ssr, dof):
    """s²(JᵀJ)⁻¹ over the free parameters, or None when singular."""
    J = curve.residual_jacobian(phi)
    if dof <= 0 or not np.all(np.isfinite(J)):
        return None
    with np.errstate(all="ignore"):
        info = J.T @ J
        if np.linalg.matrix_rank(info) < info.shape[0]:
            return None
        return np.linalg.inv(info) * (ssr / dof)


def _profile_refit(curve: _Curve, j, value, warm):
    """Minimum SSR with free parameter j held at ``value`` (others re-optimised)."""
    keep = np.arange(len(warm)) != j
    if not keep.any():
        phi = warm.copy()
        phi[j] = value
        return curve.ssr(phi), phi

    def full(psi):
        phi = np.empty(len(warm))
        phi[j] = value
        phi[keep] = psi
        return phi

    lower = curve.lower[curve.free][keep]
    upper = curve.upper[curve.free][keep]
    start = np.clip(warm[keep], lower, upper)
    with np.errstate(all="ignore"):
        out = optimize.least_squares(
            lambda psi: curve.residual(full(psi)), start,
            jac=lambda psi: curve.residual_jacobian(full(psi))[:, keep],
            bounds=(lower, upper), method="trf", ftol=_PROFILE_TOL, xtol=_PROFILE_TOL,
            gtol=_PROFILE_TOL)
    phi = full(out.x)
    return curve.ssr(phi), phi


def _profile_limit(curve: _Curve, phi_hat, j, direction, target, step):
    """Where the profile SSR of free parameter j crosses ``target`` (±inf when open)."""
    centre = phi_hat[j]
    bound = (curve.upper if direction > 0 else curve.lower)[curve.free][j]

    def excess(c, warm):
        value, phi = _profile_refit(curve, j, c, warm)
        return value - target, phi

    return profile_crossing(excess, centre, bound, direction, step, phi_hat,
                            xtol=_PROFILE_XTOL * max(1.0, abs(centre)),
                            max_doublings=_PROFILE_MAX_DOUBLINGS)


def _intervals(curve, phi, ssr, se, method, level, dof):
    """(low, high) of every free parameter, on the fitted scale."""
    k = len(phi)
    if dof <= 0:
        return np.full(k, np.nan), np.full(k, np.nan)
    if method == "wald" or ssr == 0:
        t = stats.t.ppf(0.5 + level / 2, dof)
        return phi - t * se, phi + t * se
    target = ssr * (1 + stats.f.ppf(level, 1, dof) / dof)
    low, high = np.empty(k), np.empty(k)
    for j in range(k):
        step = se[j] if np.isfinite(se[j]) and se[j] > 0 else 0.1 * max(1.0, abs(phi[j]))
        low[j] = _profile_limit(curve, phi, j, -1, target, step)
        high[j] = _profile_limit(curve, phi, j, +1, target, step)
    return low, high


# --------------------------------------------------------------------------- input checks

def _check_curve(conc, response, weights, *, context, columns=("conc", "response", "weights"),
                 rows=None, n_free=4, zero_allowed=False):
    """Float arrays (conc, response, weights) after every check; DataError otherwise."""
    table = {columns[0]: np.atleast_1d(np.asarray(conc, dtype=object)),
             columns[1]: np.atleast_1d(np.asarray(response, dtype=object))}
    if table[columns[0]].shape != table[columns[1]].shape or table[columns[0]].ndim != 1:
        raise DataError(Problem(columns[1], None, table[columns[1]].size,
                                f"{columns[0]} and {columns[1]} must be 1-d and of one length "
                                f"({table[columns[0]].size} and {table[columns[1]].size})"),
                        context)
    if weights is not None:
        table[columns[2]] = np.atleast_1d(np.asarray(weights, dtype=object))
        if table[columns[2]].shape != table[columns[0]].shape:
            raise DataError(Problem(columns[2], None, table[columns[2]].size,
                                    "weights must have one entry per point"), context)
    frame = pd.DataFrame(table, index=rows)
    problems: list[Problem] = []
    c = numeric_column(frame, columns[0], problems, allow_negative=True)
    y = numeric_column(frame, columns[1], problems, allow_negative=True)
    w = None if weights is None else numeric_column(frame, columns[2], problems)
    labels = frame.index.to_numpy()
    finite_c = np.where(np.isfinite(c), c, 1.0)
    bad = finite_c < 0 if zero_allowed else finite_c <= 0
    why = ("concentration must be ≥ 0" if zero_allowed else
           "concentration must be > 0 (the curve is fitted on log concentration; "
           "no-inhibitor wells belong in the 'max' controls)")
    for row, value in list(zip(labels[bad], c[bad]))[:5]:
        problems.append(Problem(columns[0], row, float(value), why))
    if w is not None:
        zero = np.isfinite(w) & (w == 0)
        for row in labels[zero][:5]:
            problems.append(Problem(columns[2], row, 0.0, "weights must be > 0"))
    if problems:
        raise DataError(problems, context)
    levels = np.unique(c)
    if levels.size == 0:
        raise DataError(Problem(columns[0], None, None,
                                f"no points; a curve needs more than {n_free}"), context)
    if levels.size < 2:
        raise DataError(Problem(columns[0], None, float(levels[0]),
                                "a single concentration; a dose-response curve needs several "
                                f"(at least {n_free})"), context)
    if levels.size < n_free:
        raise DataError(Problem(columns[0], None, int(levels.size),
                                f"{levels.size} distinct concentrations cannot determine "
                                f"{n_free} curve parameters"), context)
    if len(y) <= n_free:
        raise DataError(Problem(columns[1], None, len(y),
                                f"{len(y)} points; {n_free} parameters need more points "
                                "than that"), context)
    if np.all(y == y[0]):
        raise DataError(Problem(columns[1], None, float(y[0]),
                                "all responses are equal; there is no curve to fit"), context)
    return c, y, (np.ones_like(y) if w is None else w)


def _context(compound):
    return None if compound is None else f"compound {compound!r}"


# --------------------------------------------------------------------------- 4PL fit

@dataclass(frozen=True)
class DoseResponseFit:
    """A four-parameter logistic fitted to one compound's dose-response points.

    Attributes
    ----------
    compound : str or None
    params : pandas.DataFrame
        Rows top, bottom, ic50, log_ic50, pic50, hill; columns estimate, se, ci_low,
        ci_high (at ``level``), fixed, determined. IC50 in the concentration's unit;
        pic50 = −log10(IC50) (a pIC50 proper when the unit is molar).
    flags : tuple of str
        Keys of :data:`FLAGS`.
    ic50_bound : str or None
        The IC50 as a bound ("> 30") when the midpoint lies outside the tested range.
    n_obs, n_free, dof : int
    ssr : float
        Weighted residual sum of squares.
    residual_se : float
        sqrt(SSR/dof).
    converged : bool
    message : str
    level : float
    interval_method : str
    conc, response, fitted : numpy.ndarray
    covariance : numpy.ndarray or None
        Covariance of the free parameters (order of ``free``) on the fitted scale.
    free : tuple of str
        Names (from ``PARAM_NAMES``) that were fitted.
    """

    compound: str | None
    params: pd.DataFrame
    flags: tuple
    ic50_bound: str | None
    n_obs: int
    n_free: int
    dof: int
    ssr: float
    residual_se: float
    converged: bool
    message: str
    level: float
    interval_method: str
    conc: np.ndarray = field(repr=False)
    response: np.ndarray = field(repr=False)
    fitted: np.ndarray = field(repr=False)
    covariance: np.ndarray | None = field(default=None, repr=False)
    free: tuple = PARAM_NAMES

    def _value(self, name):
        return float(self.params.loc[name, "estimate"])

    @property
    def estimates(self) -> dict[str, float]:
        """top, bottom, log_ic50, hill: the curve's parameters (even when IC50 is a bound)."""
        return {n: self._value(n) for n in PARAM_NAMES}

    @property
    def ic50(self) -> float:
        """IC50 (concentration unit), NaN when only a bound is known (see ``ic50_bound``)."""
        return np.nan if self.ic50_bound else self._value("ic50")

    @property
    def pic50(self) -> float:
        """−log10(IC50), NaN when IC50 is a bound."""
        return np.nan if self.ic50_bound else self._value("pic50")

    @property
    def hill(self) -> float:
        return self._value("hill")

    @property
    def top(self) -> float:
        return self._value("top")

    @property
    def bottom(self) -> float:
        return self._value("bottom")

    @property
    def reported_ic50(self) -> str:
        """The IC50 as it should be read: a number or a bound."""
        return self.ic50_bound or f"{self._value('ic50'):.4g}"

    def predict(self, conc) -> np.ndarray:
        """The fitted curve at concentrations ``conc`` (> 0)."""
        with np.errstate(divide="ignore"):
            return logistic4(np.log10(np.asarray(conc, dtype=float)), **self.estimates)

    def to_frame(self) -> pd.DataFrame:
        """The parameter table, tidy, with the compound as a column."""
        out = self.params.reset_index()
        out.insert(0, "compound", self.compound)
        return out

    def summary(self) -> str:
        """Plain-text report."""
        who = f"{self.compound}: " if self.compound is not None else ""
        lines = [f"{who}4PL, n = {self.n_obs}, free = {self.n_free}, SSR = {self.ssr:.6g}, "
                 f"residual SE = {self.residual_se:.4g}, converged = {self.converged}",
                 f"  IC50 = {self.reported_ic50}",
                 f"  {'parameter':<10} {'estimate':>12} {'se':>12}  "
                 f"{100 * self.level:g}% interval ({self.interval_method})"]
        for name, row in self.params.iterrows():
            if row["fixed"]:
                lines.append(f"  {name:<10} {row['estimate']:>12.6g} {'fixed':>12}")
            else:
                lines.append(f"  {name:<10} {row['estimate']:>12.6g} {row['se']:>12.4g}  "
                             f"[{row['ci_low']:.4g}, {row['ci_high']:.4g}]")
        for flag in self.flags:
            lines.append(f"  flag {flag}: {FLAGS[flag]}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from .report import dose_response_html  # matplotlib only when a notebook asks

        return dose_response_html(self)


#: Allowed signs of the Hill slope: any, falling (inhibition of activity), rising.
DIRECTIONS = ("any", "falling", "rising")


def _logistic_curve(x, y, w, fixed: dict, direction="any") -> _Curve:
    free = np.array([n not in fixed for n in PARAM_NAMES])
    values = np.array([float(fixed.get(n, np.nan)) for n in PARAM_NAMES])
    hill_low = 0.0 if direction == "falling" else -_HILL_MAX
    hill_high = 0.0 if direction == "rising" else _HILL_MAX
    lower = np.array([-np.inf, -np.inf, x.min() - _LOG_IC50_MARGIN, hill_low])
    upper = np.array([np.inf, np.inf, x.max() + _LOG_IC50_MARGIN, hill_high])
    return _Curve(logistic4, logistic4_jacobian, PARAM_NAMES, x, y, w, free, values, lower,
                  upper)


def _curve_flags(x, est, *, direction, hill_range, min_points_each_side, partial_efficacy):
    """Flags and the IC50 bound text from the curve's shape and the design."""
    flags = []
    bound = None
    log_ic50, hill = est["log_ic50"], est["hill"]
    falling = (est["top"] - est["bottom"]) * hill > 0
    # A falling curve must also halve the response without inhibitor (top) within the
    # tested range: a partial inhibitor whose midpoint is in range but which never
    # removes half the activity has an IC50 above the top concentration. When only
    # falling curves are allowed, a fit that rises is noise on an inactive compound.
    if falling:
        reached = est["top"] <= 0 or logistic4(x.max(), **est) <= 0.5 * est["top"]
    else:
        reached = direction != "falling"
    if log_ic50 > x.max() or not reached:
        flags.append("ic50_above_range")
        bound = f"> {10 ** x.max():.3g}"
    elif log_ic50 < x.min():
        flags.append("ic50_below_range")
        bound = f"< {10 ** x.min():.3g}"
    # With only a bound on IC50 the slope and the midpoint's neighbours describe an
    # extrapolation (or noise on an inactive compound): those flags would mislead.
    if bound is None:
        if abs(hill) > hill_range[1]:
            flags.append("steep_hill")
        elif abs(hill) < hill_range[0]:
            flags.append("shallow_hill")
        levels = np.unique(x)
        if np.sum(levels < log_ic50) < min_points_each_side:
            flags.append("few_points_below")
        if np.sum(levels > log_ic50) < min_points_each_side:
            flags.append("few_points_above")
    if not falling:
        flags.append("rising")
    elif est["top"] > 0 and est["bottom"] > partial_efficacy * est["top"]:
        flags.append("partial_efficacy")
    return flags, bound


def _build_dose_response(curve: _Curve, phi, ssr, converged, message, *, conc, compound,
                         method, level, hill_range, min_points_each_side, partial_efficacy):
    n, k = len(curve.y), int(curve.free.sum())
    dof = n - k
    covariance = _covariance(curve, phi, ssr, dof)
    se_free = (np.sqrt(np.clip(np.diag(covariance), 0, None)) if covariance is not None
               else np.full(k, np.nan))
    low_free, high_free = _intervals(curve, phi, ssr, se_free, method, level, dof)
    # A Hill slope held to one sign has a real limit at 0, not an open interval.
    h = int(np.sum(curve.free[:PARAM_NAMES.index("hill")]))
    if curve.lower[3] == 0.0:
        low_free[h] = max(low_free[h], 0.0)
    if curve.upper[3] == 0.0:
        high_free[h] = min(high_free[h], 0.0)
    theta = curve.full(phi)
    est = dict(zip(PARAM_NAMES, theta))
    se = np.full(4, np.nan)
    low, high = np.full(4, np.nan), np.full(4, np.nan)
    se[curve.free], low[curve.free], high[curve.free] = se_free, low_free, high_free
    direction = ("falling" if curve.lower[3] == 0.0 else
                 "rising" if curve.upper[3] == 0.0 else "any")
    flags, bound = _curve_flags(curve.x, est, direction=direction, hill_range=hill_range,
                                min_points_each_side=min_points_each_side,
                                partial_efficacy=partial_efficacy)
    if not converged:
        flags.insert(0, "not_converged")
    fixed = ~curve.free
    determined = curve.free & np.isfinite(se) & np.isfinite(low) & np.isfinite(high)
    j = PARAM_NAMES.index("log_ic50")
    with np.errstate(over="ignore"):
        ic50 = 10.0 ** theta[j]
        ic50_row = [ic50, ic50 * np.log(10) * se[j], 10.0 ** low[j], 10.0 ** high[j], fixed[j],
                    determined[j] and bound is None]
    rows = {name: [theta[m], se[m], low[m], high[m], fixed[m], determined[m]]
            for m, name in enumerate(PARAM_NAMES)}
    rows["log_ic50"][5] = ic50_row[5]
    rows["ic50"] = ic50_row
    rows["pic50"] = [-theta[j], se[j], -high[j], -low[j], fixed[j], ic50_row[5]]
    order = ["top", "bottom", "ic50", "log_ic50", "pic50", "hill"]
    params = pd.DataFrame([rows[r] for r in order], index=pd.Index(order, name="parameter"),
                          columns=["estimate", "se", "ci_low", "ci_high", "fixed", "determined"])
    params["fixed"] = params["fixed"].astype(bool)
    params["determined"] = params["determined"].astype(bool)
    fitted = curve.model(curve.x, *theta)
    return DoseResponseFit(compound, params, tuple(flags), bound, n, k, dof, ssr,
                           float(np.sqrt(ssr / dof)) if dof > 0 else np.nan, converged,
                           message, level, method, conc, curve.y, fitted, covariance,
                           tuple(np.asarray(PARAM_NAMES)[curve.free]))


def _fixed(fix_top, fix_bottom) -> dict:
    out = {}
    if fix_top is not None:
        out["top"] = float(fix_top)
    if fix_bottom is not None:
        out["bottom"] = float(fix_bottom)
    return out


def fit_dose_response(conc, response, *, fix_top=None, fix_bottom=None, weights=None,
                      intervals="profile", level=0.95, direction="any", compound=None,
                      hill_range=HILL_RANGE,
                      min_points_each_side=MIN_POINTS_EACH_SIDE,
                      partial_efficacy=PARTIAL_EFFICACY_FRACTION) -> DoseResponseFit:
    """Fit the four-parameter logistic to a dose-response curve.

    Parameters
    ----------
    conc : array_like
        Inhibitor concentrations (> 0; any unit, IC50 comes out in it). Replicates are
        repeated concentrations, fitted as separate points.
    response : array_like
        Responses (percent activity, or a signal proportional to activity).
    fix_top, fix_bottom : float, optional
        Hold top (response without inhibitor) and/or bottom (response at full effect)
        at this value, e.g. 100 and 0 for percent activity.
    weights : array_like, optional
        Residual multipliers w = 1/σ (relative values suffice; the scale is estimated).
    intervals : {"profile", "wald"}
        Interval method (module docstring).
    level : float
        Confidence level of the intervals.
    direction : {"any", "falling", "rising"}
        Sign allowed for the Hill slope: ``"falling"`` (hill ≥ 0) for activity that an
        inhibitor can only lower, so that noise on an inactive compound is not fitted
        as a rising curve.
    compound : str, optional
        Named in messages and on the result.
    hill_range : (float, float)
        |hill| outside this range is flagged.
    min_points_each_side : int
        Distinct concentrations wanted on each side of the midpoint.
    partial_efficacy : float
        A falling curve whose bottom exceeds this fraction of its top is flagged.

    Returns
    -------
    DoseResponseFit

    Raises
    ------
    DataError
        Concentrations not positive or not numbers, a single concentration, too few
        points, all responses equal (naming compound, column, row and value).
    FitError
        When no finite least-squares solution is found.

    Examples
    --------
    >>> import numpy as np
    >>> conc = np.logspace(-2, 2, 9)
    >>> fit = fit_dose_response(conc, 100 / (1 + conc / 0.5), intervals="wald")
    >>> round(fit.ic50, 6), round(fit.hill, 6)
    (0.5, 1.0)
    """
    if intervals not in INTERVAL_METHODS:
        raise FitError(f"intervals must be one of {INTERVAL_METHODS}, got {intervals!r}")
    if direction not in DIRECTIONS:
        raise FitError(f"direction must be one of {DIRECTIONS}, got {direction!r}")
    fixed = _fixed(fix_top, fix_bottom)
    c, y, w = _check_curve(conc, response, weights, context=_context(compound),
                           n_free=4 - len(fixed))
    return _fit_logistic(c, y, w, fixed, compound=compound, method=intervals, level=level,
                         direction=direction, hill_range=hill_range,
                         min_points_each_side=min_points_each_side,
                         partial_efficacy=partial_efficacy)


def _fit_logistic(c, y, w, fixed, *, compound, method, level, direction="any",
                  **flag_options):
    x = np.log10(c)
    curve = _logistic_curve(x, y, w, fixed, direction)
    start = logistic4_start(x, y)
    start.update(fixed)
    if direction != "any":
        start["hill"] = 1.0 if direction == "falling" else -1.0
    phi0 = np.array([start[n] for n, f in zip(PARAM_NAMES, curve.free) if f])
    best = None
    # A second start at the other end of the range rescues curves whose half-way level
    # is crossed more than once by noisy means.
    j = [n for n, f in zip(PARAM_NAMES, curve.free) if f].index("log_ic50")
    for shift in (0.0, -0.25, 0.25):
        trial = phi0.copy()
        trial[j] = phi0[j] + shift * (x.max() - x.min())
        outcome = _lmfit_solve(curve, trial)
        if np.isfinite(outcome[1]) and (best is None or outcome[1] < best[1] * (1 - 1e-12)):
            best = outcome
        if shift == 0.0 and outcome[2]:
            break
    if best is None:
        raise FitError(f"{_context(compound) or 'dose-response'}: no finite least-squares "
                       f"solution found")
    phi, ssr, converged, message = best
    return _build_dose_response(curve, phi, ssr, converged, message, conc=c, compound=compound,
                                method=method, level=level, **flag_options)


def dose_response_from_estimates(conc, response, estimates, *, weights=None, fix_top=None,
                                 fix_bottom=None, level=0.95, compound=None, converged=True,
                                 message="fitted elsewhere", direction="any",
                                 hill_range=HILL_RANGE,
                                 min_points_each_side=MIN_POINTS_EACH_SIDE,
                                 partial_efficacy=PARTIAL_EFFICACY_FRACTION) -> DoseResponseFit:
    """A :class:`DoseResponseFit` from 4PL estimates found elsewhere (a batched engine).

    Standard errors, Wald intervals and flags are computed here from the analytic
    Jacobian at ``estimates``, exactly as :func:`fit_dose_response` does with
    ``intervals="wald"``, so the potency table treats both alike.

    Parameters
    ----------
    conc, response, weights, fix_top, fix_bottom, level, compound, direction
        As for :func:`fit_dose_response`; ``direction`` sets the Hill-slope sign the
        fit was held to, which the flags and the slope's interval (clipped at 0) follow.
    estimates : mapping
        top, bottom, log_ic50, hill (log10 of the concentration's unit).
    converged : bool
    message : str
        The outside optimiser's report.
    """
    if direction not in DIRECTIONS:
        raise FitError(f"direction must be one of {DIRECTIONS}, got {direction!r}")
    fixed = _fixed(fix_top, fix_bottom)
    c, y, w = _check_curve(conc, response, weights, context=_context(compound),
                           n_free=4 - len(fixed))
    return _from_estimates(c, y, w, fixed, estimates, level=level, compound=compound,
                           converged=converged, message=message, direction=direction,
                           hill_range=hill_range, min_points_each_side=min_points_each_side,
                           partial_efficacy=partial_efficacy)


def _from_estimates(c, y, w, fixed, estimates, *, level, compound, converged, message,
                    direction, **flag_options) -> DoseResponseFit:
    """dose_response_from_estimates on arrays already checked."""
    curve = _logistic_curve(np.log10(c), y, w, fixed, direction)
    phi = np.array([float(estimates[n]) for n, f in zip(PARAM_NAMES, curve.free) if f])
    return _build_dose_response(curve, phi, curve.ssr(phi), converged, message, conc=c,
                                compound=compound, method="wald", level=level, **flag_options)


# --------------------------------------------------------------------------- Cheng–Prusoff

def _as_array(value, name, problems, index, *, positive, allow_nan=False):
    frame = pd.DataFrame({name: np.broadcast_to(np.asarray(value, dtype=object),
                                                (len(index),))}, index=index)
    arr = numeric_column(frame, name, problems, allow_nan=allow_nan)
    if positive:
        labels = frame.index.to_numpy()
        zero = np.isfinite(arr) & (arr == 0)
        for row in labels[zero][:5]:
            problems.append(Problem(name, row, 0.0, f"{name} must be > 0"))
    return arr


def _log_factor(s, km, mechanism, alpha):
    """ln(Ki/IC50) and its derivative in ln Km, per element."""
    log_f = np.full(s.shape, np.nan)
    d_log_km = np.full(s.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        for name, f, d in (
            ("competitive", km / (km + s), s / (km + s)),
            ("uncompetitive", s / (km + s), -km / (km + s)),
            ("noncompetitive", np.ones_like(s), np.zeros_like(s)),
            ("mixed", (km + s / alpha) / (km + s), km / (km + s / alpha) - km / (km + s)),
        ):
            here = mechanism == name
            log_f[here] = np.log(f[here])
            d_log_km[here] = d[here]
    return log_f, d_log_km


def _conversion_inputs(value, s, km, mechanism, alpha, value_name):
    """Validated, broadcast float arrays, the mechanism array and the output index."""
    index = None
    for candidate in (value, s, km):
        if isinstance(candidate, pd.Series):
            index = candidate.index
            break
    shape = np.broadcast_shapes(np.shape(value), np.shape(s), np.shape(km),
                                np.shape(mechanism) if not isinstance(mechanism, str) else (),
                                np.shape(alpha) if alpha is not None else ())
    if len(shape) > 1:
        raise DataError(Problem(value_name, None, shape, "inputs must be scalars or 1-d"))
    n = shape[0] if shape else 1
    rows = index if index is not None and len(index) == n else pd.RangeIndex(n)
    problems: list[Problem] = []

    def plain(v):
        return v.to_numpy() if isinstance(v, pd.Series) else v

    values = _as_array(plain(value), value_name, problems, rows, positive=True, allow_nan=True)
    s_arr = _as_array(plain(s), "s", problems, rows, positive=False)
    km_arr = _as_array(plain(km), "km", problems, rows, positive=True)
    mech = np.broadcast_to(np.asarray(plain(mechanism), dtype=object), (n,))
    labels = rows.to_numpy()
    unknown = ~np.isin(mech, CONVERSIONS)
    for row, m in list(zip(labels[unknown], mech[unknown]))[:5]:
        problems.append(Problem("mechanism", row, m,
                                f"unknown mechanism; IC50 converts under {CONVERSIONS}"))
    alpha_arr = np.full(n, np.nan)
    mixed = mech == "mixed"
    if mixed.any():
        if alpha is None:
            problems.append(Problem("alpha", None, None,
                                    "the mixed conversion needs alpha = Kiu/Kic"))
        else:
            alpha_arr = _as_array(plain(alpha), "alpha", problems, rows, positive=True,
                                  allow_nan=True)
            missing = mixed & ~np.isfinite(alpha_arr)
            for row in labels[missing][:5]:
                problems.append(Problem("alpha", row, np.nan,
                                        "the mixed conversion needs alpha = Kiu/Kic"))
    needs_s = np.isin(mech, ("uncompetitive", "mixed")) & np.isfinite(s_arr) & (s_arr == 0)
    for row in labels[needs_s][:5]:
        problems.append(Problem("s", row, 0.0, "an uncompetitive or mixed inhibitor has no "
                                               "IC50 at S = 0; s must be > 0"))
    if problems:
        raise DataError(problems)
    scalar = not shape and index is None
    return values, s_arr, km_arr, mech, alpha_arr, rows, scalar, index is not None


def _shaped(values, rows, scalar, is_series, name):
    if scalar:
        return float(values[0])
    if is_series:
        return pd.Series(values, index=rows, name=name)
    return values


def cheng_prusoff(ic50, s, km, mechanism="competitive", alpha=None, *, ic50_se=None,
                  km_se=None, level=0.95):
    """Ki from IC50 by mechanism (Cheng & Prusoff 1973; Cortés et al. 2001).

    Parameters
    ----------
    ic50 : float, array_like or pandas.Series
        IC50 (> 0, inhibitor's unit; NaN passes through as NaN).
    s : float or array_like
        Substrate concentration of the IC50 assay (substrate's unit, ≥ 0; > 0 for
        uncompetitive and mixed).
    km : float or array_like
        Michaelis constant (substrate's unit, > 0).
    mechanism : str or array_like of str
        One of :data:`CONVERSIONS`, per element if an array.
    alpha : float or array_like, optional
        Kiu/Kic, required where the mechanism is ``"mixed"``.
    ic50_se, km_se : float or array_like, optional
        Standard errors (natural scale) to propagate.
    level : float
        Level of the interval returned with errors.

    Returns
    -------
    float, numpy.ndarray, pandas.Series or pandas.DataFrame
        Without errors: Ki (Kic for competitive and mixed, Kiu for uncompetitive, Ki for
        noncompetitive), shaped like the input (a Series keeps its index). With
        ``ic50_se`` or ``km_se``: a DataFrame with columns ki, ki_se, ki_low, ki_high
        (delta method on the log scale; see the module docstring).

    Examples
    --------
    >>> cheng_prusoff(3.0, 20.0, 10.0)
    1.0
    >>> cheng_prusoff(2.0, 20.0, 10.0, mechanism="mixed", alpha=4.0)
    1.0
    """
    values, s_arr, km_arr, mech, alpha_arr, rows, scalar, is_series = _conversion_inputs(
        ic50, s, km, mechanism, alpha, "ic50")
    log_f, d_log_km = _log_factor(s_arr, km_arr, mech, alpha_arr)
    ki = values * np.exp(log_f)
    if ic50_se is None and km_se is None:
        return _shaped(ki, rows, scalar, is_series, "ki")
    problems: list[Problem] = []
    se_ic50 = (np.zeros(len(rows)) if ic50_se is None else
               _as_array(ic50_se.to_numpy() if isinstance(ic50_se, pd.Series) else ic50_se,
                         "ic50_se", problems, rows, positive=False, allow_nan=True))
    se_km = (np.zeros(len(rows)) if km_se is None else
             _as_array(km_se.to_numpy() if isinstance(km_se, pd.Series) else km_se, "km_se",
                       problems, rows, positive=False))
    if problems:
        raise DataError(problems)
    se_log = np.sqrt((se_ic50 / values) ** 2 + (d_log_km * se_km / km_arr) ** 2)
    z = stats.norm.ppf(0.5 + level / 2)
    return pd.DataFrame({"ki": ki, "ki_se": ki * se_log, "ki_low": ki * np.exp(-z * se_log),
                         "ki_high": ki * np.exp(z * se_log)}, index=rows)


def ic50_from_ki(ki, s, km, mechanism="competitive", alpha=None):
    """IC50 expected at substrate concentration S from Ki: the inverse of
    :func:`cheng_prusoff`.

    Parameters
    ----------
    ki : float, array_like or pandas.Series
        Kic (competitive, mixed), Kiu (uncompetitive) or Ki (noncompetitive), > 0.
    s, km, mechanism, alpha
        As for :func:`cheng_prusoff`.

    Returns
    -------
    float, numpy.ndarray or pandas.Series
        IC50 in the unit of ``ki``.

    Examples
    --------
    >>> ic50_from_ki(1.0, 20.0, 10.0, mechanism="uncompetitive")
    1.5
    """
    values, s_arr, km_arr, mech, alpha_arr, rows, scalar, is_series = _conversion_inputs(
        ki, s, km, mechanism, alpha, "ki")
    log_f, _ = _log_factor(s_arr, km_arr, mech, alpha_arr)
    return _shaped(values * np.exp(-log_f), rows, scalar, is_series, "ic50")


# --------------------------------------------------------------------------- Morrison

def morrison(conc, v0, ki_app, enzyme):
    """Morrison (1969) rate at total inhibitor concentration ``conc``.

    v = v0·(1 − [(E + I + K) − sqrt((E + I + K)² − 4·E·I)]/(2E)), K = Ki,app, written as
    v = v0·(1 − 2I/((E + I + K) + sqrt((E − I + K)² + 4·I·K))) so that it stays exact
    when E ≪ K (no cancellation) and as E → 0 tends to v0/(1 + I/K).

    Parameters
    ----------
    conc : array_like
        Total inhibitor concentration (≥ 0).
    v0 : float
        Rate without inhibitor.
    ki_app : float
        Apparent inhibition constant (inhibitor's unit, > 0).
    enzyme : float
        Active enzyme concentration (inhibitor's unit, > 0).
    """
    i = np.asarray(conc, dtype=float)
    a = enzyme + i + ki_app
    root = np.sqrt((enzyme - i + ki_app) ** 2 + 4.0 * i * ki_app)
    return v0 * (1.0 - 2.0 * i / (a + root))


def _saturating_exp(x):
    """exp that gives 0 or inf for open (infinite) log-scale limits without a warning."""
    with np.errstate(over="ignore"):
        return np.exp(x)


def _morrison_model(i, v0, log_k, log_e):
    return morrison(i, v0, np.exp(log_k), np.exp(log_e))


def _morrison_jacobian(i, v0, log_k, log_e):
    k, e = np.exp(log_k), np.exp(log_e)
    a = e + i + k
    root = np.sqrt((e - i + k) ** 2 + 4.0 * i * k)
    s = a + root
    frac = 2.0 * i / s
    d_k = v0 * 2.0 * i / (s * root)
    d_e = v0 * 2.0 * i * (root + a - 2.0 * i) / (s**2 * root)
    return np.stack([1.0 - frac, d_k * k, d_e * e], axis=-1)


@dataclass(frozen=True)
class MorrisonFit:
    """The Morrison quadratic fitted to one compound's tight-binding curve.

    Attributes
    ----------
    compound : str or None
    params : pandas.DataFrame
        Rows v0, ki_app, enzyme, ic50 (= Ki,app + [E]/2) and, when a conversion was
        asked for, ki; columns estimate, se, ci_low, ci_high, fixed.
    mechanism : str or None
        Mechanism of the Ki,app → Ki conversion (None when none was asked for).
    n_obs, dof : int
    ssr : float
    converged : bool
    message : str
    level : float
    interval_method : str
    conc, response, fitted : numpy.ndarray
    """

    compound: str | None
    params: pd.DataFrame
    mechanism: str | None
    n_obs: int
    dof: int
    ssr: float
    converged: bool
    message: str
    level: float
    interval_method: str
    conc: np.ndarray = field(repr=False)
    response: np.ndarray = field(repr=False)
    fitted: np.ndarray = field(repr=False)

    @property
    def ki_app(self) -> float:
        return float(self.params.loc["ki_app", "estimate"])

    @property
    def ic50(self) -> float:
        """Ki,app + [E]/2: the inhibitor concentration of half the uninhibited rate."""
        return float(self.params.loc["ic50", "estimate"])

    @property
    def ki(self) -> float:
        """Ki by :attr:`mechanism`, NaN when no conversion was asked for."""
        return float(self.params.loc["ki", "estimate"]) if "ki" in self.params.index else np.nan

    @property
    def enzyme(self) -> float:
        return float(self.params.loc["enzyme", "estimate"])

    def to_frame(self) -> pd.DataFrame:
        """The parameter table, tidy, with the compound as a column."""
        out = self.params.reset_index()
        out.insert(0, "compound", self.compound)
        return out

    def summary(self) -> str:
        """Plain-text report."""
        who = f"{self.compound}: " if self.compound is not None else ""
        conv = f", Ki by {self.mechanism}" if self.mechanism else ""
        lines = [f"{who}Morrison tight-binding fit, n = {self.n_obs}, SSR = {self.ssr:.6g}"
                 f"{conv}, converged = {self.converged}",
                 f"  {'parameter':<8} {'estimate':>12} {'se':>12}  "
                 f"{100 * self.level:g}% interval ({self.interval_method})"]
        for name, row in self.params.iterrows():
            se = "fixed" if row["fixed"] else f"{row['se']:.4g}"
            lines.append(f"  {name:<8} {row['estimate']:>12.6g} {se:>12}  "
                         f"[{row['ci_low']:.4g}, {row['ci_high']:.4g}]")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        who = html.escape(str(self.compound)) if self.compound is not None else "Morrison fit"
        return (f"<p><b>{who}</b> — Ki,app = {self.ki_app:.4g}, IC50 = {self.ic50:.4g}</p>"
                + self.params.to_html(float_format="{:.4g}".format))


def fit_morrison(conc, v, *, enzyme, fit_enzyme=False, s=None, km=None, mechanism=None,
                 alpha=None, intervals="profile", level=0.95, compound=None,
                 weights=None) -> MorrisonFit:
    """Fit the Morrison (1969) quadratic for the apparent Ki of a tight-binding inhibitor.

    Parameters
    ----------
    conc : array_like
        Total inhibitor concentrations (≥ 0; zero = uninhibited wells).
    v : array_like
        Rates or percent activity.
    enzyme : float
        Active enzyme concentration, in the inhibitor's unit (> 0); the starting value
        when ``fit_enzyme``.
    fit_enzyme : bool
        Also fit the active enzyme concentration (titration).
    s, km, mechanism, alpha : optional
        When ``mechanism`` is given, Ki,app is converted to Ki as an IC50 is by
        :func:`cheng_prusoff` (Ki,app has the same dependence on S/Km).
    intervals : {"profile", "wald"}
    level : float
    compound : str, optional
    weights : array_like, optional
        Residual multipliers 1/σ.

    Returns
    -------
    MorrisonFit
        ``ic50`` = Ki,app + [E]/2 (Morrison 1969; Copeland, *Evaluation of Enzyme
        Inhibitors in Drug Discovery*, from memory).
    """
    if intervals not in INTERVAL_METHODS:
        raise FitError(f"intervals must be one of {INTERVAL_METHODS}, got {intervals!r}")
    context = _context(compound)
    problems: list[Problem] = []
    e_value = _as_array(enzyme, "enzyme", problems, pd.RangeIndex(1), positive=True)[0]
    if problems:
        raise DataError(problems, context)
    n_free = 3 if fit_enzyme else 2
    i, y, w = _check_curve(conc, v, weights, context=context, columns=("conc", "v", "weights"),
                           n_free=n_free, zero_allowed=True)
    if np.unique(i).size < n_free + 1 or len(y) <= n_free:
        raise DataError(Problem("conc", None, int(np.unique(i).size),
                                f"too few concentrations for {n_free} parameters"), context)
    positive = i[i > 0]
    lo, hi = positive.min(), positive.max()
    names = ("v0", "log_k", "log_e")
    free = np.array([True, True, fit_enzyme])
    start_v0 = float(np.mean(y[i == i.min()]))
    grid = np.geomspace(lo, hi, 13)
    log_e = np.log(e_value)
    ssr_grid = [np.sum((w * (y - morrison(i, start_v0, k, e_value))) ** 2) for k in grid]
    curve = _Curve(_morrison_model, _morrison_jacobian, names, i, y, w, free,
                   np.array([start_v0, np.log(grid[int(np.argmin(ssr_grid))]), log_e]),
                   np.array([-np.inf, np.log(lo * _MORRISON_K_BELOW), log_e - np.log(1e3)]),
                   np.array([np.inf, np.log(hi * _MORRISON_K_ABOVE), log_e + np.log(1e3)]))
    phi, ssr, converged, message = _lmfit_solve(curve, curve.fixed_values[free])
    if not np.isfinite(ssr):
        raise FitError(f"{context or 'Morrison fit'}: no finite least-squares solution")
    dof = len(y) - n_free
    cov = _covariance(curve, phi, ssr, dof)
    se = np.sqrt(np.clip(np.diag(cov), 0, None)) if cov is not None else np.full(n_free, np.nan)
    low, high = _intervals(curve, phi, ssr, se, intervals, level, dof)
    theta = curve.full(phi)
    v0, k, e = theta[0], float(np.exp(theta[1])), float(np.exp(theta[2]))
    # An open profile limit is ±inf in log units; its exp saturates to 0 or inf quietly.
    low, high = np.array(low, dtype=float), np.array(high, dtype=float)
    low[1:], high[1:] = _saturating_exp(low[1:]), _saturating_exp(high[1:])
    rows = {"v0": [v0, se[0], low[0], high[0], False],
            "ki_app": [k, k * se[1], low[1], high[1], False]}
    if fit_enzyme:
        rows["enzyme"] = [e, e * se[2], low[2], high[2], False]
    else:
        rows["enzyme"] = [e, np.nan, np.nan, np.nan, True]
    k_row = rows["ki_app"]
    if fit_enzyme and cov is not None:
        # IC50 = K + E/2 with both fitted: delta method, t interval.
        grad = np.array([0.0, k, e / 2])
        se_ic50 = float(np.sqrt(grad @ cov @ grad))
        t = stats.t.ppf(0.5 + level / 2, dof)
        rows["ic50"] = [k + e / 2, se_ic50, k + e / 2 - t * se_ic50, k + e / 2 + t * se_ic50,
                        False]
    else:
        # With [E] fixed the IC50 is a shift of Ki,app: same standard error, shifted limits.
        rows["ic50"] = [k + e / 2, k_row[1], k_row[2] + e / 2, k_row[3] + e / 2, False]
    if mechanism is not None:
        if s is None or km is None:
            raise DataError(Problem("mechanism", None, mechanism,
                                    "converting Ki,app needs s and km"), context)
        factor = cheng_prusoff(1.0, s, km, mechanism, alpha)
        rows["ki"] = [k * factor, k_row[1] * factor, k_row[2] * factor, k_row[3] * factor,
                      False]
    params = pd.DataFrame.from_dict(rows, orient="index",
                                    columns=["estimate", "se", "ci_low", "ci_high", "fixed"])
    params.index.name = "parameter"
    params["fixed"] = params["fixed"].astype(bool)
    fitted = curve.model(i, *theta)
    return MorrisonFit(compound, params, mechanism, len(y), dof, ssr, converged, message,
                       level, intervals, i, y, fitted)


# --------------------------------------------------------------------------- potency table

#: Columns of :attr:`PotencyTable.table`, in order.
TABLE_COLUMNS = (
    "compound", "status", "reason", "plate", "n_points", "ic50", "ic50_low", "ic50_high",
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
        ``"failed"`` (with the ``reason``); IC50 and Ki in the concentration's unit
        (``ic50_bound``/``ki_bound`` hold "> x" text when only a bound is known);
        ``mechanism_source`` is ``"mechanism fit"`` or ``"default"``; ``ki_method`` is
        ``"cheng-prusoff"`` or ``"morrison"``; ``flags`` joins :data:`FLAGS` keys with
        ", ".
    fits : dict
        Compound to its :class:`DoseResponseFit` (fitted compounds only).
    plates : PlateQC
        Z'-factor and control statistics per plate.
    morrison_fits : dict
        Compound to its :class:`MorrisonFit` (only with ``tight_binding="morrison"``).
    """

    table: pd.DataFrame
    fits: dict = field(repr=False)
    plates: PlateQC = field(repr=False)
    morrison_fits: dict = field(default_factory=dict, repr=False)

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


def _per_compound_value(spec, rows, name, frame):
    """A number given directly, or the single value of column ``spec`` on ``rows``."""
    if spec is None:
        return np.nan
    if isinstance(spec, str):
        values = pd.to_numeric(frame.loc[rows, spec], errors="coerce").to_numpy(dtype=float)
        distinct = np.unique(values[np.isfinite(values)])
        if distinct.size != 1 or not np.all(np.isfinite(values)):
            raise DataError(Problem(spec, None, distinct.tolist() or values[:1].tolist(),
                                    f"{name} must be one number per compound"))
        return float(distinct[0])
    return float(spec)


def _mechanism_of(name, mechanisms, default_mechanism, default_alpha):
    if mechanisms is not None and name in mechanisms:
        entry = mechanisms[name]
        mech, alpha = (entry, None) if isinstance(entry, str) else tuple(entry)
        return mech, (np.nan if alpha is None else float(alpha)), "mechanism fit"
    return default_mechanism, (np.nan if default_alpha is None else float(default_alpha)), \
        "default"


def _convert_bound(bound, factor):
    sign, value = bound.split(" ", 1)
    return f"{sign} {float(value) * factor:.3g}"


def _default_fitter(curves, *, fix_top, fix_bottom, intervals, level):
    out = {}
    fixed = _fixed(fix_top, fix_bottom)
    for name, (conc, response) in curves.items():
        try:
            out[name] = _fit_logistic(conc, response, np.ones_like(response), fixed,
                                      compound=name, method=intervals, level=level,
                                      direction="falling",
                                      hill_range=HILL_RANGE,
                                      min_points_each_side=MIN_POINTS_EACH_SIDE,
                                      partial_efficacy=PARTIAL_EFFICACY_FRACTION)
        except InhibkinError as error:
            out[name] = error
    return out


class EngineFitter:
    """A ``fitter`` for :func:`potency_table`: every curve fitted at once by the batched
    engine, the curves it does not settle refitted by the lmfit path.

    The curves go through :func:`inhibkin.engine.fit_logistic_batch` together; each
    solution becomes a :class:`DoseResponseFit` through
    :func:`dose_response_from_estimates` (standard errors, Wald intervals and flags
    computed exactly as the lmfit path computes them). The lmfit path fits within
    bounds — a Hill slope between 0 and 20, the midpoint within the tested range ± 4
    decades — and the engine without them; the two problems share their optimum only
    inside those bounds. And a curve that does not fall to its midpoint within the
    tested range (noise on an inactive compound, a partial or rising curve) has a flat
    least-squares surface with several minima, where two optimisers from different
    starts can settle on different ones. So an engine solution is kept only when it
    converged strictly inside the bounds to a falling curve whose IC50 lies within the
    tested range; every other curve is refitted by the lmfit path, and its compound is
    recorded in :attr:`refitted`.

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

    def __call__(self, curves, *, fix_top, fix_bottom, intervals, level) -> dict:
        from .engine import fit_logistic_batch  # the engine only when asked for

        options = dict(fix_top=fix_top, fix_bottom=fix_bottom, intervals=intervals,
                       level=level)
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
        out = {}
        for k, name in enumerate(names):
            conc, response = curves[name]
            estimates = dict(zip(batch.names, batch.estimate[k]))
            x_min, x_max = x[k, mask[k]].min(), x[k, mask[k]].max()
            inside = (bool(batch.converged[k]) and 0.0 < estimates["hill"] < _HILL_MAX
                      and x_min - _LOG_IC50_MARGIN < estimates["log_ic50"]
                      < x_max + _LOG_IC50_MARGIN)
            if inside:
                # potency_table checked the curves; the flags follow _default_fitter's.
                fit = _from_estimates(
                    conc, response, np.ones_like(response), _fixed(fix_top, fix_bottom),
                    estimates, level=level, compound=name, converged=True,
                    message=f"batched engine: {batch.reason[k]}", direction="falling",
                    hill_range=HILL_RANGE, min_points_each_side=MIN_POINTS_EACH_SIDE,
                    partial_efficacy=PARTIAL_EFFICACY_FRACTION)
                if fit.ic50_bound is None and "rising" not in fit.flags:
                    out[name] = fit
                    continue
            self.refitted.append(name)
            out.update(_default_fitter({name: curves[name]}, **options))
        return out


def potency_table(df, *, compound="compound", plate="plate", role="role",
                  concentration="inhibitor", response="signal", substrate="substrate", km,
                  km_se=None, enzyme=None, mechanisms=None, default_mechanism="competitive",
                  default_alpha=None, normalise=True, fix_top=None, fix_bottom=None,
                  intervals="profile", level=0.95, z_prime_threshold=Z_PRIME_THRESHOLD,
                  tight_binding="flag", tight_binding_factor=TIGHT_BINDING_FACTOR,
                  fitter: Fitter | None = None) -> PotencyTable:
    """IC50, Hill slope, Ki and pKi of every compound of a tidy dose-response table.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per well. ``role`` is ``"sample"`` (compound at a concentration),
        ``"max"`` (no inhibitor: full activity) or ``"min"`` (no enzyme or full
        inhibition: zero activity); see :mod:`inhibkin.plates`. Control wells need no
        compound.
    compound, plate, role, concentration, response, substrate : str
        Column names. ``substrate`` holds the substrate concentration of the assay
        (one value per compound).
    km : float or str
        Michaelis constant (substrate's unit), or the column holding it.
    km_se : float, optional
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
    fitter : callable, optional
        Replaces the per-compound lmfit loop, e.g. by a batched engine:
        ``fitter(curves, *, fix_top, fix_bottom, intervals, level)`` with ``curves``
        mapping compound to (conc, response) arrays already validated, returning
        compound to :class:`DoseResponseFit` (see :func:`dose_response_from_estimates`)
        or to the :class:`~inhibkin.errors.InhibkinError` that stopped it.

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
    if tight_binding not in ("flag", "morrison"):
        raise DataError(Problem(None, None, tight_binding,
                                "tight_binding must be 'flag' or 'morrison'"))
    columns = [compound, plate, role, concentration, response, substrate]
    columns += [c for c in (km, enzyme) if isinstance(c, str)]
    check_columns(df, columns)
    if default_mechanism not in CONVERSIONS:
        raise DataError(Problem("default_mechanism", None, default_mechanism,
                                f"must be one of {CONVERSIONS}"))
    if default_mechanism == "mixed" and default_alpha is None:
        raise DataError(Problem("default_alpha", None, None,
                                "a mixed default mechanism needs default_alpha = Kiu/Kic"))
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
        raise DataError([Problem(compound, r, None, "a 'sample' well has no compound")
                         for r in samples.index[nameless][:5]])
    y_samples = pd.Series(y_all[is_sample], index=samples.index)
    unusable = qc.unusable
    low_plates = set(qc.flagged)

    rows, curves, info = {}, {}, {}
    for name in pd.unique(samples[compound]):
        here = samples[samples[compound] == name]
        on = [p for p in pd.unique(here[plate])]
        info[name] = (here.index, on)
        rows[name] = {"compound": name, "status": "failed", "plate": ", ".join(map(str, on)),
                      "n_points": len(here), "flags": ""}
        bad = [unusable[p] for p in on if p in unusable]
        try:
            if bad:
                raise DataError(bad[0], _context(name))
            conc, resp, _ = _check_curve(here[concentration].to_numpy(),
                                         y_samples[here.index].to_numpy(), None,
                                         context=_context(name),
                                         columns=(concentration, response, "weights"),
                                         rows=here.index,
                                         n_free=4 - len(_fixed(fix_top, fix_bottom)))
            curves[name] = (conc, resp)
        except InhibkinError as error:
            rows[name]["reason"] = str(error)
    run = fitter or _default_fitter
    results = dict(run(curves, fix_top=fix_top, fix_bottom=fix_bottom, intervals=intervals,
                       level=level)) if curves else {}

    fits, morrison_fits = {}, {}
    for name in curves:
        outcome = results.get(name)
        row = rows[name]
        if not isinstance(outcome, DoseResponseFit):
            row["reason"] = (str(outcome) if outcome is not None else
                             "the fitter returned no result for this compound")
            continue
        fits[name] = outcome
        try:
            row.update(_potency_row(name, outcome, df, info[name], low_plates=low_plates,
                                    substrate=substrate, km=km, km_se=km_se, enzyme=enzyme,
                                    mechanisms=mechanisms, default_mechanism=default_mechanism,
                                    default_alpha=default_alpha, level=level,
                                    tight_binding=tight_binding,
                                    tight_binding_factor=tight_binding_factor,
                                    morrison_fits=morrison_fits, intervals=intervals))
        except InhibkinError as error:
            row["reason"] = f"{_context(name)}: {error}" if _context(name) not in str(error) \
                else str(error)
    table = pd.DataFrame([rows[n] for n in rows], columns=list(TABLE_COLUMNS))
    text = ["reason", "ic50_bound", "ki_bound", "mechanism", "mechanism_source", "ki_method",
            "flags"]
    table[text] = table[text].fillna("")
    return PotencyTable(table.reset_index(drop=True), fits, qc, morrison_fits)


def _potency_row(name, fit: DoseResponseFit, df, where, *, low_plates, substrate, km, km_se,
                 enzyme, mechanisms, default_mechanism, default_alpha, level, tight_binding,
                 tight_binding_factor, morrison_fits, intervals) -> dict:
    index, plates = where
    flags = list(fit.flags)
    s = _per_compound_value(substrate, index, "substrate", df)
    km_value = _per_compound_value(km, index, "km", df)
    e = _per_compound_value(enzyme, index, "enzyme", df)
    ic50_row = fit.params.loc["ic50"]
    hill_row = fit.params.loc["hill"]
    out = {"status": "ok", "reason": "", "ic50": fit.ic50, "ic50_low": np.nan,
           "ic50_high": np.nan, "ic50_bound": fit.ic50_bound or "", "pic50": fit.pic50,
           "hill": fit.hill, "hill_low": hill_row["ci_low"], "hill_high": hill_row["ci_high"],
           "top": fit.top, "bottom": fit.bottom, "substrate": s, "km": km_value, "enzyme": e,
           "ki": np.nan, "ki_low": np.nan, "ki_high": np.nan, "ki_bound": "", "pki": np.nan,
           "ki_method": "cheng-prusoff"}
    if not fit.ic50_bound:
        out["ic50_low"], out["ic50_high"] = ic50_row["ci_low"], ic50_row["ci_high"]
    if any(p in low_plates for p in plates):
        flags.append("low_z_prime")
    mech, alpha, source = _mechanism_of(name, mechanisms, default_mechanism, default_alpha)
    out.update(mechanism=mech, alpha=alpha, mechanism_source=source)
    if np.isfinite(e) and np.isfinite(fit.ic50) and fit.ic50 < tight_binding_factor * e:
        flags.append("tight_binding")
    out["flags"] = ", ".join(flags)
    if mech not in CONVERSIONS:
        out["reason"] = f"mechanism {mech!r}: no IC50 to Ki conversion; Ki not reported"
        return out
    factor = cheng_prusoff(1.0, s, km_value, mech, None if np.isnan(alpha) else alpha)
    if fit.ic50_bound:
        out["ki_bound"] = _convert_bound(fit.ic50_bound, factor)
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
