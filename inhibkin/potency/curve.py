"""Dose-response: the four-parameter logistic fitted to one compound's curve.

Four-parameter logistic
-----------------------
:func:`fit_dose_response` fits the 4PL of :mod:`inhibkin.core.logistic` on x = log10(conc)
by least squares (lmfit), with top and/or bottom optionally fixed; replicates are
separate points. Standard errors come from the covariance s²(JᵀJ)⁻¹ at the optimum
(s² = SSR/(n − k), J the analytic Jacobian). Intervals are profile-likelihood intervals
(``"profile"``: the set of values whose re-optimised SSR stays below
SSR·(1 + F(level; 1, n − k)/(n − k)); Bates & Watts 1988, §6.1) or Wald intervals
(``"wald"``: estimate ± t·se). Both are computed on log10(IC50) and are therefore
asymmetric in IC50.

The least-squares core (one curve, some parameters fixed, covariance and profile
intervals) is :mod:`inhibkin.potency.least_squares`, shared with the Morrison fit of
:mod:`inhibkin.potency.morrison`. IC50 → Ki lives in
:mod:`inhibkin.potency.conversion`, the table of a whole screen in :mod:`inhibkin.potency.table`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.bound import Bound
from ..core.curve_class import DEFAULT_RULES, CurveClassRules, classify_curves
from ..core.logistic import PARAM_NAMES, logistic4, logistic4_jacobian, logistic4_start
from ..core.readonly import readonly_array, readonly_frame
from ..errors import FitError
from ..mechanism.one_model import INTERVAL_METHODS
from .least_squares import (
    Curve,
    check_curve,
    compound_context,
    curve_intervals,
    free_covariance,
    lmfit_solve,
    tidy_parameters,
)

__all__ = [
    "FLAGS",
    "HILL_RANGE",
    "DoseResponseFit",
    "fit_dose_response",
    "dose_response_from_estimates",
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
    "inactive": "no curve: too little activity removed, a trend no better than a flat "
                "line, or activity that rises with concentration (see "
                "inhibkin.core.curve_class); IC50 above the highest concentration",
    "single_point_activity": "only the highest tested concentration shows activity; IC50 "
                             "reported as a lower bound",
    "incomplete_curve": "one plateau of the curve lies outside the tested range",
    "hill_at_bound": "the Hill slope stopped at its fitting bound; not determined",
    "low_z_prime": "a plate of this compound has Z' below the threshold",
}

#: Hill slopes (absolute value) outside this range are flagged (common practice).
HILL_RANGE = (0.5, 2.0)
#: Distinct concentrations needed on each side of the midpoint (common practice).
MIN_POINTS_EACH_SIDE = 2
#: bottom above this fraction of top is partial efficacy (common practice).
PARTIAL_EFFICACY_FRACTION = 0.2

# The midpoint is kept within this many decades beyond the tested range, and |hill|
# below this, so that a flat or step-like curve ends at a bound instead of diverging.
LOG_IC50_MARGIN = 4.0
HILL_MAX = 20.0

#: Rows and columns of :attr:`DoseResponseFit.params`.
PARAMETER_ROWS = ("top", "bottom", "ic50", "log_ic50", "pic50", "hill")
PARAMETER_COLUMNS = ("estimate", "se", "ci_low", "ci_high", "fixed", "determined")


# --------------------------------------------------------------------------- 4PL fit

@dataclass(frozen=True)
class DoseResponseFit:
    """A four-parameter logistic fitted to one compound's dose-response points.

    Attributes
    ----------
    compound : str or None
    parameter_values : numpy.ndarray, shape (6, 6)
        The numbers of :attr:`params` (rows :data:`PARAMETER_ROWS`, columns
        :data:`PARAMETER_COLUMNS`; fixed and determined as 1.0 / 0.0).
    flags : tuple of str
        Keys of :data:`FLAGS`.
    ic50_bound : Bound or None
        The IC50 as a bound (side and value, written "> 30") when the midpoint lies
        outside the tested range.
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
    curve_class : str
        One of :data:`inhibkin.core.curve_class.CURVE_CLASSES`, decided before the IC50 is
        believed.
    class_reason : str
        The class in words.
    not_determined : tuple of str
        "parameter: why" for every free parameter the data do not set (a Hill slope at
        its fitting bound, a plateau outside the tested range, any parameter of an
        inactive curve); their properties (``hill``, ``top``, ``bottom``) are NaN.
    """

    compound: str | None
    parameter_values: np.ndarray = field(repr=False)
    flags: tuple
    ic50_bound: Bound | None
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
    curve_class: str = "complete"
    class_reason: str = ""
    not_determined: tuple = ()

    def __post_init__(self):
        # The parameter numbers by name, read once: a screen reads every curve's
        # properties. The table itself (``params``) is built on first read: a campaign
        # holds one fit per curve and most are never displayed (a DataFrame costs about
        # as much as the rest of the fit).
        values = readonly_array(np.asarray(self.parameter_values, dtype=float))
        object.__setattr__(self, "parameter_values", values)
        object.__setattr__(self, "_numbers", {
            name: (float(estimate), bool(fixed) or bool(determined), float(low), float(high))
            for name, (estimate, _, low, high, fixed, determined) in zip(PARAMETER_ROWS,
                                                                         values.tolist())})
        # Frozen all the way down: the arrays cannot be edited.
        for name in ("conc", "response", "fitted", "covariance"):
            object.__setattr__(self, name, readonly_array(getattr(self, name)))

    @property
    def params(self) -> pd.DataFrame:
        """Rows top, bottom, ic50, log_ic50, pic50, hill; columns estimate, se, ci_low,
        ci_high (at ``level``), fixed, determined. IC50 in the concentration's unit;
        pic50 = −log10(IC50) (a pIC50 proper when the unit is molar). Read-only."""
        table = self.__dict__.get("_params")
        if table is None:
            values = self.parameter_values
            table = readonly_frame(pd.DataFrame(
                {name: (values[:, j] != 0) if name in ("fixed", "determined") else values[:, j]
                 for j, name in enumerate(PARAMETER_COLUMNS)},
                index=pd.Index(PARAMETER_ROWS, name="parameter")))
            object.__setattr__(self, "_params", table)
        return table

    def _value(self, name):
        return self._numbers[name][0]

    def _result(self, name):
        """The estimate when the data set it (or it was fixed), else NaN."""
        estimate, set_ = self._numbers[name][:2]
        return estimate if set_ else np.nan

    def interval(self, name) -> tuple[float, float]:
        """(ci_low, ci_high) of parameter ``name`` as :attr:`params` holds them (at
        ``level``; NaN where the table has none), without a read of the table."""
        return self._numbers[name][2:]

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
        """Hill slope, NaN when not determined (see ``not_determined``)."""
        return self._result("hill")

    @property
    def top(self) -> float:
        """Response without inhibitor, NaN when not determined."""
        return self._result("top")

    @property
    def bottom(self) -> float:
        """Response at full effect, NaN when not determined."""
        return self._result("bottom")

    @property
    def reported_ic50(self) -> str:
        """The IC50 as it should be read: a number or a bound."""
        return self.ic50_bound.text() if self.ic50_bound else f"{self._value('ic50'):.4g}"

    def predict(self, conc) -> np.ndarray:
        """The fitted curve at concentrations ``conc`` (> 0)."""
        with np.errstate(divide="ignore"):
            return logistic4(np.log10(np.asarray(conc, dtype=float)), **self.estimates)

    def to_frame(self) -> pd.DataFrame:
        """The parameter table, tidy, with the compound as a column (an editable copy)."""
        return tidy_parameters(self.params, self.compound)

    def summary(self) -> str:
        """Plain-text report."""
        who = f"{self.compound}: " if self.compound is not None else ""
        lines = [f"{who}4PL, n = {self.n_obs}, free = {self.n_free}, SSR = {self.ssr:.6g}, "
                 f"residual SE = {self.residual_se:.4g}, converged = {self.converged}",
                 f"  class: {self.class_reason or self.curve_class}",
                 f"  IC50 = {self.reported_ic50}",
                 f"  {'parameter':<10} {'estimate':>12} {'se':>12}  "
                 f"{100 * self.level:g}% interval ({self.interval_method})"]
        for name, row in self.params.iterrows():
            if row["fixed"]:
                lines.append(f"  {name:<10} {row['estimate']:>12.6g} {'fixed':>12}")
            else:
                lines.append(f"  {name:<10} {row['estimate']:>12.6g} {row['se']:>12.4g}  "
                             f"[{row['ci_low']:.4g}, {row['ci_high']:.4g}]")
        for what in self.not_determined:
            lines.append(f"  not determined: {what}")
        for flag in self.flags:
            lines.append(f"  flag {flag}: {FLAGS[flag]}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from ..display.html import dose_response_html

        return dose_response_html(self)


#: Allowed signs of the Hill slope: any, falling (inhibition of activity), rising.
DIRECTIONS = ("any", "falling", "rising")


def _logistic_curve(x, y, w, fixed: dict, direction="any") -> Curve:
    free = np.array([n not in fixed for n in PARAM_NAMES])
    values = np.array([float(fixed.get(n, np.nan)) for n in PARAM_NAMES])
    hill_low = 0.0 if direction == "falling" else -HILL_MAX
    hill_high = 0.0 if direction == "rising" else HILL_MAX
    lower = np.array([-np.inf, -np.inf, x.min() - LOG_IC50_MARGIN, hill_low])
    upper = np.array([np.inf, np.inf, x.max() + LOG_IC50_MARGIN, hill_high])
    return Curve(logistic4, logistic4_jacobian, PARAM_NAMES, x, y, w, free, values, lower,
                  upper)


def _curve_flags(curve: Curve, est, *, n_free, direction, hill_range, min_points_each_side,
                partial_efficacy, full_activity=None, zero_activity=0.0,
                curve_rules: CurveClassRules = DEFAULT_RULES, classes=None):
    """Flags, the IC50 bound, the curve's class and what the data do not set.

    ``classes`` is the curve's class when a batch already classified it with these
    options (a one-curve :class:`~inhibkin.core.curve_class.CurveClasses`)."""
    x = curve.x
    hill_limit = max(abs(curve.lower[3]), abs(curve.upper[3]))
    if classes is None:
        theta = np.array([est[n] for n in PARAM_NAMES])
        classes = classify_curves(x[None, :], curve.y[None, :], np.ones((1, x.size), bool),
                                  theta[None, :], weights=curve.w[None, :], n_free=n_free,
                                  full_activity=full_activity, zero_activity=zero_activity,
                                  hill_limit=hill_limit, falling_only=direction == "falling",
                                  rules=curve_rules)
    kind = str(classes.curve_class[0])
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
    if kind == "inactive":
        # No curve: whatever the fitted midpoint, nothing was seen up to the top dose.
        flags += ["inactive", "ic50_above_range"]
        bound = Bound(">", 10 ** x.max())
    elif kind == "single_point":
        flags.append("single_point_activity")
        edge = x.max() if (log_ic50 > x.max() or not reached) else classes.x_next[0]
        bound = Bound(">", 10 ** edge)
    elif log_ic50 > x.max() or not reached:
        flags.append("ic50_above_range")
        bound = Bound(">", 10 ** x.max())
    elif log_ic50 < x.min() or classes.below_range[0]:
        flags.append("ic50_below_range")
        bound = Bound("<", 10 ** x.min())
    if kind == "incomplete":
        flags.append("incomplete_curve")
    at_limit = bool(classes.hill_at_limit[0])
    if at_limit and kind != "inactive":
        flags.append("hill_at_bound")
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
    if kind != "inactive":
        if not falling:
            flags.append("rising")
        elif (bool(classes.bottom_seen[0]) and est["top"] > 0
              and est["bottom"] > partial_efficacy * est["top"]):
            flags.append("partial_efficacy")
    # What the data do not set: never shown as a result.
    missing = {}
    if kind == "inactive":
        for name in ("top", "bottom", "hill"):
            missing[name] = "the curve is inactive (no curve within the tested range)"
    else:
        if not classes.top_seen[0]:
            missing["top"] = "its plateau is not reached within the tested range"
        if not classes.bottom_seen[0]:
            missing["bottom"] = "its plateau is not reached within the tested range"
        if at_limit:
            missing["hill"] = f"at its fitting bound ({hill_limit:g})"
        elif bound is not None:
            missing["hill"] = "the IC50 is only a bound"
    return flags, bound, kind, str(classes.reason[0]), missing


def _build_dose_response(curve: Curve, phi, ssr, converged, message, *, conc, compound,
                         method, level, hill_range, min_points_each_side, partial_efficacy,
                         full_activity=None, zero_activity=0.0,
                         curve_rules: CurveClassRules = DEFAULT_RULES, classes=None):
    n, k = len(curve.y), int(curve.free.sum())
    dof = n - k
    covariance = free_covariance(curve, phi, ssr, dof)
    se_free = (np.sqrt(np.clip(np.diag(covariance), 0, None)) if covariance is not None
               else np.full(k, np.nan))
    low_free, high_free = curve_intervals(curve, phi, ssr, se_free, method, level, dof)
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
    flags, bound, kind, class_reason, missing = _curve_flags(
        curve, est, n_free=k, direction=direction, hill_range=hill_range,
        min_points_each_side=min_points_each_side, partial_efficacy=partial_efficacy,
        full_activity=full_activity, zero_activity=zero_activity, curve_rules=curve_rules,
        classes=classes)
    # An inactive curve reports no estimate (its IC50 is a bound, its efficacy read off
    # the data): where its flat SSR surface stopped the optimiser changes nothing reported.
    if not converged and kind != "inactive":
        flags.insert(0, "not_converged")
    fixed = ~curve.free
    missing = {n: why for n, why in missing.items() if curve.free[PARAM_NAMES.index(n)]}
    determined = curve.free & np.isfinite(se) & np.isfinite(low) & np.isfinite(high) & \
        np.array([n not in missing for n in PARAM_NAMES])
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
    values = np.array([rows[r] for r in PARAMETER_ROWS], dtype=float)
    fitted = curve.model(curve.x, *theta)
    return DoseResponseFit(compound, values, tuple(flags), bound, n, k, dof, ssr,
                           float(np.sqrt(ssr / dof)) if dof > 0 else np.nan, converged,
                           message, level, method, conc, curve.y, fitted, covariance,
                           tuple(np.asarray(PARAM_NAMES)[curve.free]), kind, class_reason,
                           tuple(f"{n}: {why}" for n, why in missing.items()))


def fixed_parameters(fix_top, fix_bottom) -> dict:
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
                      partial_efficacy=PARTIAL_EFFICACY_FRACTION, full_activity=None,
                      zero_activity=0.0,
                      curve_rules: CurveClassRules = DEFAULT_RULES) -> DoseResponseFit:
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
        A falling curve whose bottom exceeds this fraction of its top is flagged (only
        when the bottom plateau is seen).
    full_activity, zero_activity : float, optional
        The responses at full and at zero activity (100 and 0 for percent activity
        from plate controls), against which the curve's efficacy is measured for its
        class (:mod:`inhibkin.core.curve_class`); without ``full_activity`` the curve's
        value at the lowest concentration stands in.
    curve_rules : CurveClassRules
        Thresholds of the curve classes.

    Returns
    -------
    DoseResponseFit
        An inactive curve (no activity, or a trend no better than a flat line) reports
        its IC50 as a bound above the highest concentration, whatever its fitted
        midpoint; parameters the data do not set are listed in ``not_determined``.

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
    fixed = fixed_parameters(fix_top, fix_bottom)
    c, y, w = check_curve(conc, response, weights, context=compound_context(compound),
                           n_free=4 - len(fixed))
    return fit_logistic(c, y, w, fixed, compound=compound, method=intervals, level=level,
                         direction=direction, hill_range=hill_range,
                         min_points_each_side=min_points_each_side,
                         partial_efficacy=partial_efficacy, full_activity=full_activity,
                         zero_activity=zero_activity, curve_rules=curve_rules)


def fit_logistic(c, y, w, fixed, *, compound, method, level, direction="any",
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
        outcome = lmfit_solve(curve, trial)
        if np.isfinite(outcome[1]) and (best is None or outcome[1] < best[1] * (1 - 1e-12)):
            best = outcome
        if shift == 0.0 and outcome[2]:
            break
    if best is None:
        raise FitError(f"{compound_context(compound) or 'dose-response'}: no finite least-squares "
                       f"solution found")
    phi, ssr, converged, message = best
    return _build_dose_response(curve, phi, ssr, converged, message, conc=c, compound=compound,
                                method=method, level=level, **flag_options)


def dose_response_from_estimates(conc, response, estimates, *, weights=None, fix_top=None,
                                 fix_bottom=None, level=0.95, compound=None, converged=True,
                                 message="fitted elsewhere", direction="any",
                                 hill_range=HILL_RANGE,
                                 min_points_each_side=MIN_POINTS_EACH_SIDE,
                                 partial_efficacy=PARTIAL_EFFICACY_FRACTION,
                                 full_activity=None, zero_activity=0.0,
                                 curve_rules: CurveClassRules = DEFAULT_RULES
                                 ) -> DoseResponseFit:
    """A :class:`DoseResponseFit` from 4PL estimates found elsewhere (a batched engine).

    Standard errors, Wald intervals and flags are computed here from the analytic
    Jacobian at ``estimates``, exactly as :func:`fit_dose_response` does with
    ``intervals="wald"``, so the potency table treats both alike.

    Parameters
    ----------
    conc, response, weights, fix_top, fix_bottom, level, compound, direction,
    full_activity, zero_activity, curve_rules
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
    fixed = fixed_parameters(fix_top, fix_bottom)
    c, y, w = check_curve(conc, response, weights, context=compound_context(compound),
                           n_free=4 - len(fixed))
    return from_estimates(c, y, w, fixed, estimates, level=level, compound=compound,
                           converged=converged, message=message, direction=direction,
                           hill_range=hill_range, min_points_each_side=min_points_each_side,
                           partial_efficacy=partial_efficacy, full_activity=full_activity,
                           zero_activity=zero_activity, curve_rules=curve_rules)


def from_estimates(c, y, w, fixed, estimates, *, level, compound, converged, message,
                    direction, **flag_options) -> DoseResponseFit:
    """dose_response_from_estimates on arrays already checked; ``classes=`` (in
    ``flag_options``) takes the curve's class from a batch that classified it with the
    same options (:func:`~inhibkin.core.curve_class.classify_curves`)."""
    curve = _logistic_curve(np.log10(c), y, w, fixed, direction)
    phi = np.array([float(estimates[n]) for n, f in zip(PARAM_NAMES, curve.free) if f])
    return _build_dose_response(curve, phi, curve.ssr(phi), converged, message, conc=c,
                                compound=compound, method="wald", level=level, **flag_options)
