"""Many four-parameter logistic (4PL) dose-response curves fitted at once.

The curve, its Jacobian and its starting values are those of :mod:`inhibkin.core.logistic`
(parameters top, bottom, log_ic50, hill; fitted on x = log10(concentration)). top
and/or bottom can be held at given values (a fixed-plateau fit). Parameters are fitted
unbounded, on their natural scale, so the Wald intervals are estimate ± t·se.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..core.logistic import PARAM_NAMES
from . import lm
from .chunks import concat_batches, run_chunks
from .starts import count_unique, logistic_starts

__all__ = ["LogisticBatch", "fit_logistic_batch"]

_TOO_FEW_LEVELS = "failed: need at least two distinct concentrations"
_LN10 = np.log(10.0)


class _Logistic:
    """The 4PL as the solver wants it: batch-last, theta (4, b) and x (n, b).

    The formulas are those of :func:`inhibkin.core.logistic.logistic4_jacobian` (the tests
    check the two agree), written into one (4, n, b) array with in-place operations:
    the per-iteration cost of the engine is mostly this evaluation, and the general
    function's stacking along the last axis would cost as much again.
    """

    def __call__(self, theta, x):
        top, bottom, log_ic50, hill = theta
        jac = np.empty((4,) + x.shape)
        g, h, d_mid, d_hill = jac
        np.subtract(x, log_ic50, out=d_hill)  # x − log_ic50, kept for the last column
        with np.errstate(over="ignore", invalid="ignore"):
            np.multiply(d_hill, hill * _LN10, out=g)
            np.exp(g, out=g)  # u = 10**(hill·(x − log_ic50))
            np.add(g, 1.0, out=g)
            np.reciprocal(g, out=g)  # g = 1/(1 + u)
        np.subtract(1.0, g, out=h)  # ∂y/∂bottom = 1 − g
        # ∂g/∂z = −ln10·g·(1 − g), finite even where u overflowed.
        np.multiply(g, h, out=d_mid)
        d_mid *= -_LN10 * (top - bottom)
        np.multiply(d_mid, d_hill, out=d_hill)
        d_mid *= -hill
        # The response is linear in top and bottom: y = top·g + bottom·(1 − g).
        pred = top * g
        pred += bottom * h
        return pred, jac

    def curvature(self, theta, x, *, jacobian, residual):
        """Σ r·∇²y over the points, laid out (4, 4, b), with ``residual`` r the
        residuals times the squared weights and ``jacobian`` this model's at ``theta``.

        y is linear in top and bottom, so only their cross terms with log_ic50 and
        hill, and the log_ic50/hill block, are non-zero. With z = ln10·hill·(x − log_ic50)
        and g = 1/(1 + eᶻ): dg/dz = −q, d²g/dz² = q·(1 − 2g), q = g·(1 − g).
        """
        _, _, log_ic50, hill = theta
        g, h = jacobian[0], jacobian[1]
        c = g * h
        c *= residual  # r·q
        c2 = 1.0 - 2.0 * g
        c2 *= c  # r·q·(1 − 2g)
        e = x - log_ic50
        sum_c = c.sum(axis=0)
        sum_ce = np.einsum("nb,nb->b", c, e)
        sum_c2 = c2.sum(axis=0)
        c2 *= e
        sum_c2e = c2.sum(axis=0)
        sum_c2ee = np.einsum("nb,nb->b", c2, e)
        span = theta[0] - theta[1]
        ln10_sq = _LN10 * _LN10
        out = np.zeros((4, 4) + hill.shape)
        out[0, 2] = out[2, 0] = _LN10 * hill * sum_c  # Σ r·∂g/∂log_ic50
        out[0, 3] = out[3, 0] = -_LN10 * sum_ce  # Σ r·∂g/∂hill
        out[1, 2] = out[2, 1] = -out[0, 2]
        out[1, 3] = out[3, 1] = -out[0, 3]
        out[2, 2] = span * ln10_sq * hill * hill * sum_c2
        out[2, 3] = out[3, 2] = span * (_LN10 * sum_c - ln10_sq * hill * sum_c2e)
        out[3, 3] = span * ln10_sq * sum_c2ee
        return out


@dataclass(frozen=True)
class LogisticBatch:
    """4PL fits of a batch of curves (rows: curves).

    Attributes
    ----------
    names : tuple of str
        ``("top", "bottom", "log_ic50", "hill")``, the column order of the arrays.
    estimate : numpy.ndarray, shape (B, 4)
        top and bottom in the response's unit, log_ic50 in log10 of the
        concentration's unit, hill unitless; NaN for a failed fit.
    se, ci_low, ci_high : numpy.ndarray, shape (B, 4)
        Standard errors (from the Jacobian at the solution, scaled by SSR/(n − k)) and
        Wald intervals estimate ± t·se at ``level``; NaN for a fixed parameter.
    free : numpy.ndarray of bool, shape (B, 4)
        False for a parameter held fixed.
    covariance : numpy.ndarray, shape (B, 4, 4)
    ssr : numpy.ndarray, shape (B,)
        Weighted residual sum of squares.
    n_obs, n_params : numpy.ndarray of int, shape (B,)
        Points used and parameters fitted.
    converged : numpy.ndarray of bool
    status : numpy.ndarray of int8
        The engine's code (:data:`inhibkin.engine.lm.STATUS_REASONS`).
    reason : numpy.ndarray of str
    iterations : numpy.ndarray of int
    start : numpy.ndarray, shape (B, 4)
        The automatic starting values used.
    stopped_at : numpy.ndarray, shape (B, 4)
        Where the solver stopped, converged or not (the last accepted point of a fit that
        ran out of iterations or stalled; NaN where it never started): what a caller may
        still classify when nothing a minimum sets is reported (an inactive curve).
    stopped_ssr : numpy.ndarray, shape (B,)
        The SSR at ``stopped_at`` (NaN where not computable).
    level : float
    """

    estimate: np.ndarray
    se: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    free: np.ndarray = field(repr=False)
    covariance: np.ndarray = field(repr=False)
    ssr: np.ndarray = field(repr=False)
    n_obs: np.ndarray = field(repr=False)
    n_params: np.ndarray = field(repr=False)
    converged: np.ndarray = field(repr=False)
    status: np.ndarray = field(repr=False)
    reason: np.ndarray = field(repr=False)
    iterations: np.ndarray = field(repr=False)
    start: np.ndarray = field(repr=False)
    stopped_at: np.ndarray = field(repr=False)
    stopped_ssr: np.ndarray = field(repr=False)
    level: float = 0.95
    names: tuple[str, ...] = PARAM_NAMES

    batch_fields = ("estimate", "se", "ci_low", "ci_high", "free", "covariance", "ssr",
                    "n_obs", "n_params", "converged", "status", "reason", "iterations",
                    "start", "stopped_at", "stopped_ssr")

    def __len__(self) -> int:
        return len(self.ssr)

    @property
    def ic50(self) -> np.ndarray:
        """10**log_ic50, in the concentration's unit."""
        return 10.0 ** self.estimate[:, self.names.index("log_ic50")]

    def to_frame(self) -> pd.DataFrame:
        """One row per curve: estimates, standard errors, intervals and status."""
        out = {}
        for j, name in enumerate(self.names):
            out[name] = self.estimate[:, j]
            out[f"{name}_se"] = self.se[:, j]
            out[f"{name}_ci_low"] = self.ci_low[:, j]
            out[f"{name}_ci_high"] = self.ci_high[:, j]
        out.update(ic50=self.ic50, ssr=self.ssr, n_obs=self.n_obs, n_params=self.n_params,
                   converged=self.converged, reason=self.reason, iterations=self.iterations)
        frame = pd.DataFrame(out)
        frame.index.name = "curve"
        return frame

    def summary(self) -> str:
        """How many curves converged, and the reasons of the others."""
        lines = [f"{len(self)} 4PL curves: {int(self.converged.sum())} converged"]
        failed = pd.Series(self.reason[~self.converged]).value_counts()
        lines += [f"  {count:>6}  {why}" for why, count in failed.items()]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        return f"<pre>{self.summary()}</pre>"


def _fixed(value, n_batch):
    """(values, held) for a fix_top/fix_bottom option: None, a number, or one per curve
    (NaN = free for that curve)."""
    if value is None:
        return np.full(n_batch, np.nan), np.zeros(n_batch, bool)
    values = np.broadcast_to(np.asarray(value, dtype=float), (n_batch,)).copy()
    return values, np.isfinite(values)


def _fit_chunk(x, y, mask, weights, top, bottom, lower, upper, start, *, level,
               max_iterations, ftol, xtol, gtol):
    n_batch = x.shape[0]
    if start is None:
        start = logistic_starts(x, y, mask) if n_batch else np.zeros((0, 4))
    start = start.copy()
    free = np.ones((n_batch, 4), bool)
    hold_top, hold_bottom = np.isfinite(top), np.isfinite(bottom)
    start[hold_top, 0] = top[hold_top]
    start[hold_bottom, 1] = bottom[hold_bottom]
    free[:, 0], free[:, 1] = ~hold_top, ~hold_bottom
    few_levels = count_unique(x, mask & np.isfinite(x)) < 2
    theta0 = np.where(np.isfinite(start), start, 0.0)
    result = lm.solve(_Logistic(), theta0, (x,), y, mask=mask & ~few_levels[:, None],
                      weights=weights, lower=lower, upper=upper, free=free,
                      max_iterations=max_iterations, ftol=ftol, xtol=xtol, gtol=gtol)
    status = result.status.copy()
    reason = result.reason
    status[few_levels] = lm.FAILED_DATA
    reason[few_levels] = _TOO_FEW_LEVELS
    ok = status > 0
    se = result.std_err
    dof = result.n_obs - result.n_free
    # The quantile once per distinct degrees of freedom (a screen has a handful).
    dof_levels, which = np.unique(np.maximum(dof, 1), return_inverse=True)
    t = stats.t.ppf(0.5 + level / 2, dof_levels)[which.reshape(-1)][:, None]
    estimate = np.where(ok[:, None], result.theta, np.nan)
    se = np.where(ok[:, None] & free, se, np.nan)
    # A problem that never ran (bad data, too few points) stopped nowhere.
    ran = np.isfinite(result.ssr) & ~few_levels
    stopped_at = np.where(ran[:, None], result.theta, np.nan)
    return LogisticBatch(estimate, se, estimate - t * se, estimate + t * se, free,
                         result.covariance, np.where(ok, result.ssr, np.nan), result.n_obs,
                         result.n_free, ok, status, reason, result.iterations, start,
                         stopped_at, np.where(ran, result.ssr, np.nan), level)


def fit_logistic_batch(x, y, mask=None, *, fix_top=None, fix_bottom=None, weights=None,
                       lower=None, upper=None, start=None,
                       level=0.95, max_iterations=lm.MAX_ITERATIONS, ftol=lm.FTOL,
                       xtol=lm.XTOL, gtol=lm.GTOL, client=None,
                       chunk_size=None) -> LogisticBatch:
    """Fit the 4PL to every curve of padded arrays.

    Parameters
    ----------
    x : array_like, shape (B, n)
        log10 of the concentrations (any one unit; log_ic50 comes out in its log10).
    y : array_like, shape (B, n)
        Responses (any unit, e.g. % activity).
    mask : array_like of bool, shape (B, n), optional
        True for real points (default all); padding may hold anything.
    fix_top, fix_bottom : float or array_like of shape (B,), optional
        Hold top and/or bottom at these values (NaN entries leave that curve free).
    weights : array_like, shape (B, n), optional
        Residual multipliers 1/σ (default 1).
    lower, upper : array_like, shape (B, 4), optional
        Bounds on top, bottom, log_ic50 and hill (default none; ±inf leaves one open),
        kept by projection (:func:`inhibkin.engine.lm.solve`). The Wald intervals of a
        parameter at a bound are those of the unbounded problem there.
    start : array_like, shape (B, 4), optional
        Starting values (default the automatic starts of
        :func:`inhibkin.engine.starts.logistic_starts`); a held top or bottom starts at
        its value.
    level : float
        Confidence level of the Wald intervals.
    max_iterations : int
        Iteration bound per curve.
    ftol, xtol, gtol : float
        Convergence tolerances of :func:`inhibkin.engine.lm.solve`; the defaults settle
        estimates far below 1e-6 relative, looser ones trade accuracy for speed.
    client : dask.distributed.Client, optional
        Run the chunks on this cluster's workers.
    chunk_size : int, optional
        Curves per chunk (default one chunk locally,
        :data:`inhibkin.engine.chunks.DEFAULT_CHUNK_SIZE` on a client).

    Returns
    -------
    LogisticBatch
        Every curve appears once, with its status; a curve with NaN among its points, too
        few points or a single concentration is reported failed and leaves the others
        untouched.

    Examples
    --------
    >>> import numpy as np
    >>> from inhibkin.engine import fit_logistic_batch
    >>> x = np.tile(np.linspace(-9, -5, 9), (2, 1))
    >>> y = 100 / (1 + 10 ** (x - np.array([[-7.0], [-6.5]])))
    >>> np.round(fit_logistic_batch(x, y).estimate[:, 2], 6)
    array([-7. , -6.5])
    """
    x = np.atleast_2d(np.asarray(x, dtype=float))
    y = np.asarray(y, dtype=float).reshape(x.shape)
    mask = np.ones(x.shape, bool) if mask is None else np.asarray(mask, bool).reshape(x.shape)
    weights = np.ones(x.shape) if weights is None else \
        np.asarray(weights, dtype=float).reshape(x.shape)
    top, _ = _fixed(fix_top, x.shape[0])
    bottom, _ = _fixed(fix_bottom, x.shape[0])
    lower, upper = (None if b is None else
                    np.broadcast_to(np.asarray(b, dtype=float), (x.shape[0], 4)).copy()
                    for b in (lower, upper))
    start = None if start is None else np.asarray(start, dtype=float).reshape(x.shape[0], 4)
    if x.shape[1] == 0:
        x, y, weights = (np.zeros((x.shape[0], 1)) for _ in range(3))
        mask = np.zeros(x.shape, bool)
    parts = run_chunks(_fit_chunk, (x, y, mask, weights, top, bottom, lower, upper, start),
                       dict(level=level, max_iterations=max_iterations, ftol=ftol, xtol=xtol,
                            gtol=gtol), client=client,
                       chunk_size=chunk_size)
    return concat_batches(parts)
