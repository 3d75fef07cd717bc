"""Tight binding: the Morrison quadratic for the apparent Ki.

When IC50 is within :data:`~inhibkin.potency.table.TIGHT_BINDING_FACTOR` (10×) of the
active enzyme concentration, depletion of free inhibitor biases the Cheng–Prusoff result
(common practice). :func:`fit_morrison` fits the Morrison (1969) quadratic for the
apparent Ki instead; its IC50 is Ki,app + [E]/2.
"""

from __future__ import annotations

import html
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..core.readonly import readonly_array, readonly_frame
from ..errors import DataError, FitError, Problem
from . import least_squares
from .conversion import as_array, cheng_prusoff
from .curve import INTERVAL_METHODS

__all__ = ["MorrisonFit", "morrison", "fit_morrison"]

# Morrison: Ki,app between these multiples of the lowest / highest concentration.
_MORRISON_K_BELOW = 1e-6
_MORRISON_K_ABOVE = 1e6


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

    def __post_init__(self):
        # Frozen all the way down: the parameter table and the arrays cannot be edited.
        object.__setattr__(self, "params", readonly_frame(self.params))
        for name in ("conc", "response", "fitted"):
            object.__setattr__(self, name, readonly_array(getattr(self, name)))

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
        """The parameter table, tidy, with the compound as a column (an editable copy)."""
        return least_squares.tidy_parameters(self.params, self.compound)

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
    context = least_squares.compound_context(compound)
    problems: list[Problem] = []
    e_value = as_array(enzyme, "enzyme", problems, pd.RangeIndex(1), positive=True)[0]
    if problems:
        raise DataError(problems, context)
    n_free = 3 if fit_enzyme else 2
    i, y, w = least_squares.check_curve(conc, v, weights, context=context,
                                        columns=("conc", "v", "weights"), n_free=n_free,
                                        zero_allowed=True)
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
    curve = least_squares.Curve(
        _morrison_model, _morrison_jacobian, names, i, y, w, free,
        np.array([start_v0, np.log(grid[int(np.argmin(ssr_grid))]), log_e]),
        np.array([-np.inf, np.log(lo * _MORRISON_K_BELOW), log_e - np.log(1e3)]),
        np.array([np.inf, np.log(hi * _MORRISON_K_ABOVE), log_e + np.log(1e3)]))
    phi, ssr, converged, message = least_squares.lmfit_solve(curve, curve.fixed_values[free])
    if not np.isfinite(ssr):
        raise FitError(f"{context or 'Morrison fit'}: no finite least-squares solution")
    dof = len(y) - n_free
    cov = least_squares.free_covariance(curve, phi, ssr, dof)
    se = np.sqrt(np.clip(np.diag(cov), 0, None)) if cov is not None else np.full(n_free, np.nan)
    low, high = least_squares.curve_intervals(curve, phi, ssr, se, intervals, level, dof)
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
