"""The least-squares core of the potency fits: one curve, some parameters fixed.

:class:`Curve` is one weighted least-squares problem y ≈ model(x, θ) with some of θ
held fixed; :func:`lmfit_solve` fits it (MINPACK Levenberg–Marquardt through lmfit,
analytic Jacobian), :func:`free_covariance` gives s²(JᵀJ)⁻¹ at the optimum and
:func:`curve_intervals` the Wald or profile-likelihood intervals (Bates & Watts 1988,
§6.1). The four-parameter logistic (:mod:`inhibkin.potency.curve`) and the Morrison
quadratic (:mod:`inhibkin.potency.morrison`) both solve through it, and both check their
points with :func:`check_curve`.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass

import lmfit
import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..core.profile import profile_crossing
from ..errors import DataError, Problem
from ..validate import numeric_column, row_kind

__all__ = ["Curve", "lmfit_solve", "free_covariance", "curve_intervals", "check_curve",
           "check_curve_points",
           "compound_context", "tidy_parameters"]

# Convergence tolerances (relative) of the main fits: far below the 6 significant
# digits the reference checks ask for.
_TOL = 1e-12
_MAX_FUNCTION_EVALUATIONS = 4000
# Profile refits locate a crossing only.
_PROFILE_TOL = 1e-10
_PROFILE_MAX_DOUBLINGS = 30
_PROFILE_XTOL = 1e-7


@dataclass(frozen=True)
class Curve:
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


def lmfit_solve(curve: Curve, phi0):
    """Main fit with lmfit (MINPACK Levenberg–Marquardt, analytic Jacobian)."""
    lower, upper = curve.lower[curve.free], curve.upper[curve.free]
    params = lmfit.Parameters()
    for m, value in enumerate(phi0):
        params.add(f"p{m}", value=float(np.clip(value, lower[m], upper[m])), min=lower[m],
                   max=upper[m])

    names = [f"p{m}" for m in range(len(phi0))]

    def phi_of(pars):
        return np.array([pars[name].value for name in names])

    minimizer = lmfit.Minimizer(lambda p: curve.residual(phi_of(p)), params, nan_policy="raise")
    with np.errstate(all="ignore"):
        result = minimizer.leastsq(Dfun=lambda p: curve.residual_jacobian(phi_of(p)),
                                   col_deriv=0, ftol=_TOL, xtol=_TOL,
                                   max_nfev=_MAX_FUNCTION_EVALUATIONS)
    phi = phi_of(result.params)
    return phi, curve.ssr(phi), bool(result.success), str(result.message)


def free_covariance(curve: Curve, phi, ssr, dof):
    """s²(JᵀJ)⁻¹ over the free parameters, or None when singular."""
    J = curve.residual_jacobian(phi)
    if dof <= 0 or not np.all(np.isfinite(J)):
        return None
    with np.errstate(all="ignore"):
        info = J.T @ J
        if np.linalg.matrix_rank(info) < info.shape[0]:
            return None
        return np.linalg.inv(info) * (ssr / dof)


def _profile_refit(curve: Curve, j, value, warm):
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


def _profile_limit(curve: Curve, phi_hat, j, direction, target, step):
    """Where the profile SSR of free parameter j crosses ``target`` (±inf when open)."""
    centre = phi_hat[j]
    bound = (curve.upper if direction > 0 else curve.lower)[curve.free][j]

    def excess(c, warm):
        value, phi = _profile_refit(curve, j, c, warm)
        return value - target, phi

    return profile_crossing(excess, centre, bound, direction, step, phi_hat,
                            xtol=_PROFILE_XTOL * max(1.0, abs(centre)),
                            max_doublings=_PROFILE_MAX_DOUBLINGS)


@functools.lru_cache(maxsize=256)
def _t_quantile(q, dof):
    # A screen asks for a handful of (level, dof) pairs thousands of times.
    return stats.t.ppf(q, dof)


def curve_intervals(curve, phi, ssr, se, method, level, dof):
    """(low, high) of every free parameter, on the fitted scale."""
    k = len(phi)
    if dof <= 0:
        return np.full(k, np.nan), np.full(k, np.nan)
    if method == "wald" or ssr == 0:
        t = _t_quantile(0.5 + level / 2, dof)
        return phi - t * se, phi + t * se
    target = ssr * (1 + stats.f.ppf(level, 1, dof) / dof)
    low, high = np.empty(k), np.empty(k)
    for j in range(k):
        step = se[j] if np.isfinite(se[j]) and se[j] > 0 else 0.1 * max(1.0, abs(phi[j]))
        low[j] = _profile_limit(curve, phi, j, -1, target, step)
        high[j] = _profile_limit(curve, phi, j, +1, target, step)
    return low, high


def check_curve(conc, response, weights, *, context, columns=("conc", "response", "weights"),
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
        problems.append(Problem(columns[0], row, float(value), why, row_kind(frame)))
    if w is not None:
        zero = np.isfinite(w) & (w == 0)
        for row in labels[zero][:5]:
            problems.append(Problem(columns[2], row, 0.0, "weights must be > 0"))
    if problems:
        raise DataError(problems, context)
    check_curve_points(c, y, context=context, columns=columns, n_free=n_free)
    return c, y, (np.ones_like(y) if w is None else w)


def check_curve_points(c, y, *, context, columns=("conc", "response"), n_free=4) -> None:
    """The checks of :func:`check_curve` once every value is a valid number: enough
    concentrations and points for ``n_free`` parameters, responses not all equal."""
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


def compound_context(compound):
    """How an error names a compound (None when it has no name)."""
    return None if compound is None else f"compound {compound!r}"


def tidy_parameters(params: pd.DataFrame, compound) -> pd.DataFrame:
    """A curve fit's parameter table as its ``to_frame()`` gives it: one row per
    parameter, the compound as the first column (an ordinary, editable copy)."""
    out = params.reset_index()
    out.insert(0, "compound", compound)
    return out
