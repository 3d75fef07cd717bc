"""kobs of every well: the slow-onset progress curve fitted to each well of a plate.

Given kobs, the progress curve of :mod:`.schemes` is linear in P0, vi and vs. So every well
is first profiled over a common grid of kobs·T (T the well's last read time) in one numpy
pass — batched normal equations for all wells and all grid values at once — and the best
grid point starts :func:`scipy.optimize.least_squares`, which refines the well's
parameters (kobs on the log scale) and gives the Jacobian behind the standard errors. The
interval of kobs is a Wald interval on log kobs with Student-t quantiles (residual
variance estimated), so it is asymmetric and never reaches zero.

A well whose best grid point is the smallest kobs·T shows no curvature the read can see
(``no_onset``); one at the largest finished its onset before the second read
(``onset_too_fast``); either way kobs is not determined and its interval is NaN.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..core.compare import f_test
from .schemes import onset, progress_curve

__all__ = ["kobs_arrays", "grid_profile", "KOBS_FLAGS"]

KOBS_FLAGS = {
    "no_onset": "no curvature within the read: kobs·T at the low end of the search",
    "onset_too_fast": "the onset is over before the second read: kobs·T at the high end",
    "too_few_points": "fewer reads than parameters + 2",
}

# kobs·T searched from 0.02 to 50: below, the curve is a line within noise; above, the
# onset is over within the first 2 % of the read.
_GRID = np.geomspace(0.02, 50.0, 64)


def _design(t, c, total, irreversible):
    """Columns of the linear part at kobs = c/T: (1, g) or (1, t − g, g)."""
    g = onset(t[:, None, :], (c[None, :, None] / total[:, None, None]))
    ones = np.ones_like(g)
    if irreversible:
        return np.stack([ones, g], axis=-1)
    return np.stack([ones, t[:, None, :] - g, g], axis=-1)


def grid_profile(t, y, valid, irreversible):
    """Best grid kobs·T of every well and its linear coefficients, in one pass."""
    total = np.nanmax(np.where(valid, t, np.nan), axis=1)
    tz = np.where(valid, t, 0.0)
    yz = np.where(valid, y, 0.0)
    x = _design(tz, _GRID, total, irreversible) * valid[:, None, :, None]
    xtx = np.einsum("wgnp,wgnq->wgpq", x, x)
    xty = np.einsum("wgnp,wn->wgp", x, yz)
    ridge = 1e-12 * np.trace(xtx, axis1=-2, axis2=-1)[..., None, None] * np.eye(x.shape[-1])
    beta = np.linalg.solve(xtx + ridge, xty[..., None])[..., 0]
    ssr = np.einsum("wn,wn->w", yz, yz)[:, None] - np.einsum("wgp,wgp->wg", beta, xty)
    best = np.argmin(ssr, axis=1)
    rows = np.arange(len(t))
    return _GRID[best] / total, beta[rows, best], best, total


def _line_ssr(t, y):
    a = np.column_stack([np.ones_like(t), t])
    coef, *_ = np.linalg.lstsq(a, y, rcond=None)
    return float(np.sum((y - a @ coef) ** 2))


def _refine(t, y, k_start, beta, irreversible):
    """least_squares on (p0, vi[, vs], log kobs) from the grid start."""
    if irreversible:
        p0, vi = beta
        x0 = np.array([p0, vi, np.log(k_start)])

        def model(th):
            return progress_curve(t, th[0], th[1], 0.0, np.exp(th[2]))
    else:
        p0, vs, vi = beta
        x0 = np.array([p0, vi, vs, np.log(k_start)])

        def model(th):
            return progress_curve(t, th[0], th[1], th[2], np.exp(th[3]))
    scale = max(np.ptp(y), np.finfo(float).tiny)
    res = optimize.least_squares(lambda th: (model(th) - y) / scale, x0, method="lm",
                                 xtol=1e-12, ftol=1e-12)
    return res.x, res.jac * scale, float(np.sum((res.fun * scale) ** 2)), res.success


def kobs_arrays(t, y, valid, *, irreversible=True, level=0.95) -> pd.DataFrame:
    """kobs, vi, vs and intervals of every well from padded (wells, reads) arrays.

    Parameters
    ----------
    t, y : numpy.ndarray
        Times (≥ 0, any unit) and signals, shape (wells, reads), NaN padded.
    valid : numpy.ndarray of bool
        Which entries are reads.
    irreversible : bool
        Hold vs = 0 (inactivation to no activity) instead of fitting it.
    level : float
        Confidence level of the kobs interval.

    Returns
    -------
    pandas.DataFrame
        One row per well (input order): kobs, kobs_low, kobs_high (per time unit of t),
        log_kobs_se, vi, vi_se, vs, vs_se (signal per time unit; vs = 0 and vs_se = NaN
        when irreversible), p0, n_points, residual_sd, p_curvature (F-test of the curve
        against a straight line), converged, flags.
    """
    n_wells = t.shape[0]
    n_par = 3 if irreversible else 4
    n_points = valid.sum(axis=1)
    k_start, beta, best, _ = grid_profile(t, y, valid, irreversible)
    out = {name: np.full(n_wells, np.nan) for name in
           ("kobs", "kobs_low", "kobs_high", "log_kobs_se", "vi", "vi_se", "vs", "vs_se",
            "p0", "residual_sd", "p_curvature")}
    converged = np.zeros(n_wells, dtype=bool)
    flags = np.full(n_wells, "", dtype=object)
    for w in range(n_wells):
        n = int(n_points[w])
        if n < n_par + 2:
            flags[w] = "too_few_points"
            continue
        tw, yw = t[w, valid[w]], y[w, valid[w]]
        theta, jac, ssr, ok = _refine(tw, yw, k_start[w], beta[w], irreversible)
        dof = n - n_par
        s2 = ssr / dof
        cov = s2 * np.linalg.pinv(jac.T @ jac)
        se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        tq = stats.t.ppf(0.5 + level / 2, dof)
        out["p0"][w] = theta[0]
        out["vi"][w], out["vi_se"][w] = theta[1], se[1]
        if irreversible:
            out["vs"][w] = 0.0
        else:
            out["vs"][w], out["vs_se"][w] = theta[2], se[2]
        out["kobs"][w] = np.exp(theta[-1])
        out["log_kobs_se"][w] = se[-1]
        out["residual_sd"][w] = np.sqrt(s2)
        out["p_curvature"][w] = f_test(_line_ssr(tw, yw), n - 2, ssr, dof)[1]
        converged[w] = ok
        edge = ("no_onset" if best[w] == 0 else
                "onset_too_fast" if best[w] == len(_GRID) - 1 else "")
        if edge:
            flags[w] = edge
        else:
            out["kobs_low"][w] = np.exp(theta[-1] - tq * se[-1])
            out["kobs_high"][w] = np.exp(theta[-1] + tq * se[-1])
    frame = pd.DataFrame(out)
    frame["n_points"] = n_points
    frame["converged"] = converged
    frame["flags"] = flags
    return frame
