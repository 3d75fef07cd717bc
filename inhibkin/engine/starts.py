"""The automatic starting values and log-space bounds, for padded batches.

These are :func:`inhibkin.starts.starting_values`, :func:`inhibkin.starts.log_bounds` and
:func:`inhibkin.logistic.logistic4_start` rewritten over (B, n) arrays with a mask, rule
for rule, so the engine starts every problem where the lmfit path starts it. The test
suite checks them against the per-problem functions.
"""

from __future__ import annotations

import numpy as np

from ..core.bounds import log_bounds_arrays
from ..models import MODELS
from ..starts import KI_GRID_POINTS, KI_GRID_SPAN

__all__ = ["mechanism_starts", "mechanism_log_bounds", "logistic_starts", "count_unique"]

# Problems scored at once in the inhibition-constant grid search: (problems × 169 grid
# points × n) floats should fit in cache, which is what makes the search fast.
_GRID_CHUNK = 16


def _sorted_valid(values, mask):
    """Each row sorted with the masked entries moved to the end as +inf."""
    return np.sort(np.where(mask, values, np.inf), axis=1)


def count_unique(values, mask):
    """Number of distinct valid values per row."""
    ordered = _sorted_valid(values, mask)
    count = mask.sum(axis=1)
    new = np.ones(ordered.shape, dtype=bool)
    new[:, 1:] = ordered[:, 1:] != ordered[:, :-1]
    return np.where(count > 0, np.sum(new & (np.arange(ordered.shape[1]) < count[:, None]),
                                      axis=1), 0)


def _median(values, mask):
    """Median of the valid values per row (NaN for an empty row)."""
    ordered = _sorted_valid(values, mask)
    count = mask.sum(axis=1)
    lo = np.clip((count - 1) // 2, 0, None)
    hi = np.clip(count // 2, 0, ordered.shape[1] - 1)
    rows = np.arange(len(count))
    out = 0.5 * (ordered[rows, lo] + ordered[rows, hi])
    return np.where(count > 0, out, np.nan)


def _michaelis_menten_start(s, v, use):
    """Vectorised :func:`inhibkin.starts.michaelis_menten_start` over the points ``use``."""
    keep = use & (s > 0) & (v > 0)
    any_kept = keep.any(axis=1)
    magnitude = np.max(np.where(use, np.abs(v), 0.0), axis=1, initial=0.0)
    scale = np.where(any_kept, np.max(np.where(keep, v, -np.inf), axis=1, initial=-np.inf),
                     np.where(magnitude > 0, magnitude, 1.0))
    vmax_fb = 1.1 * scale
    km_fb = np.where(any_kept, _median(s, keep), 1.0)
    n = keep.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        x_mean = np.sum(np.where(keep, s, 0.0), axis=1) / n
        q = np.where(keep, s / np.where(keep, v, 1.0), 0.0)
        q_mean = np.sum(q, axis=1) / n
        dx = np.where(keep, s - x_mean[:, None], 0.0)
        slope = np.sum(dx * (q - q_mean[:, None]) * keep, axis=1) / np.sum(dx * dx, axis=1)
        intercept = q_mean - slope * x_mean
        line_ok = (count_unique(s, keep) >= 2) & (slope > 0) & (intercept > 0)
        vmax = np.where(line_ok, 1.0 / slope, vmax_fb)
        km = np.where(line_ok, intercept / slope, km_fb)
    return vmax, km


def mechanism_starts(model, s, i, v, mask, weights=None) -> np.ndarray:
    """Starting parameters of ``model`` for every problem, shape (B, k), natural scale.

    Parameters
    ----------
    model : str
        A name in :data:`inhibkin.models.MODELS`.
    s, i, v : numpy.ndarray, shape (B, n)
        Substrate and inhibitor concentrations and rates, padded.
    mask : numpy.ndarray of bool, shape (B, n)
        True for real points.
    weights : numpy.ndarray, shape (B, n), optional
        Residual multipliers used to score the grid search (default 1).
    """
    law = MODELS[model]
    uninhibited = mask & (i == 0)
    use_uninhibited = count_unique(s, uninhibited) >= 2
    use = np.where(use_uninhibited[:, None], uninhibited, mask)
    vmax, km = _michaelis_menten_start(s, v, use)
    names = law.inhibition_constants
    out = np.empty((s.shape[0], law.n_params))
    out[:, 0], out[:, 1] = vmax, km
    if not names:
        return out
    out[:, 2:] = 1.0
    inhibited = mask & (i > 0)
    has = np.flatnonzero(inhibited.any(axis=1))
    if has.size == 0:
        return out
    w = np.ones_like(v) if weights is None else weights
    low = np.min(np.where(inhibited, i, np.inf), axis=1)[has] / KI_GRID_SPAN[0]
    high = np.max(np.where(inhibited, i, -np.inf), axis=1)[has] * KI_GRID_SPAN[1]
    grid = np.geomspace(low, high, KI_GRID_POINTS, axis=1)
    m = len(names)
    # The same combinations, in the same order, as the per-problem search.
    index = np.stack(np.meshgrid(*([np.arange(KI_GRID_POINTS)] * m), indexing="ij"),
                     axis=-1).reshape(-1, m)
    for start in range(0, has.size, _GRID_CHUNK):
        rows = has[start:start + _GRID_CHUNK]
        g = grid[start:start + _GRID_CHUNK]
        combos = g[:, index]  # (b, n_combos, m)
        sel = mask[rows][:, None, :]
        sr, ir, vr, wr = (np.where(mask[rows], x[rows], 0.0)[:, None, :] for x in (s, i, v, w))
        ir = np.where(sel, ir, 0.0)
        sr = np.where(sel, sr, 1.0)
        with np.errstate(all="ignore"):
            pred = law.rate(sr, ir, vmax[rows, None, None], km[rows, None, None],
                            *(combos[:, :, [c]] for c in range(m)))
            score = np.sum(np.where(sel, (wr * (vr - pred)) ** 2, 0.0), axis=2)
        best = np.argmin(np.where(np.isnan(score), np.inf, score), axis=1)
        out[rows, 2:] = combos[np.arange(rows.size), best]
    return out


def mechanism_log_bounds(model, s, i, v, mask):
    """Lower and upper bounds on log-parameters, each shape (B, k), as ``log_bounds``
    (both are :func:`inhibkin.core.bounds.log_bounds_arrays`)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return log_bounds_arrays(MODELS[model], s, i, v, mask)


def _level_means(x, y, mask):
    """Distinct valid x per row (ascending, NaN-padded), the mean y at each, and their
    number."""
    n_batch, n = x.shape
    order = np.argsort(np.where(mask, x, np.inf), axis=1, kind="stable")
    xs = np.take_along_axis(np.where(mask, x, np.inf), order, axis=1)
    ys = np.take_along_axis(np.where(mask, y, 0.0), order, axis=1)
    count = mask.sum(axis=1)
    inside = np.arange(n) < count[:, None]
    new = np.ones((n_batch, n), dtype=bool)
    new[:, 1:] = xs[:, 1:] != xs[:, :-1]
    new &= inside
    group = np.cumsum(new, axis=1) - 1  # level index of each sorted point
    flat = (np.arange(n_batch)[:, None] * n + group)[inside]
    sums = np.bincount(flat, weights=ys[inside], minlength=n_batch * n).reshape(n_batch, n)
    counts = np.bincount(flat, minlength=n_batch * n).reshape(n_batch, n)
    levels = np.full((n_batch, n), np.nan)
    levels[np.nonzero(new)[0], group[new]] = xs[new]
    with np.errstate(invalid="ignore", divide="ignore"):
        means = sums / counts
    return levels, means, new.sum(axis=1)


def logistic_starts(x, y, mask) -> np.ndarray:
    """Vectorised :func:`inhibkin.logistic.logistic4_start`: (B, 4) top, bottom,
    log_ic50, hill."""
    n_batch, n = x.shape
    level_mask = None
    if n and mask.all() and np.all(x[:, 1:] > x[:, :-1]):
        # The usual layout: one point per concentration, rising. Every point is a level,
        # already in order, so the median level needs no sort.
        levels, means = x, y
        n_levels = np.full(n_batch, n)
        log_ic50 = 0.5 * (levels[:, (n - 1) // 2] + levels[:, n // 2])
    else:
        levels, means, n_levels = _level_means(x, y, mask)
        level_mask = np.arange(n) < n_levels[:, None]
        log_ic50 = _median(np.where(level_mask, levels, 0.0), level_mask)
    rows = np.arange(n_batch)
    last = np.clip(n_levels - 1, 0, None)
    top = means[:, 0]
    bottom = means[rows, last]
    half = 0.5 * (top + bottom)
    direction = np.sign(np.where(top - bottom == 0, 1.0, top - bottom))
    above = (means - half[:, None]) * direction[:, None] > 0
    crossing = above[:, :-1] & ~above[:, 1:]
    if level_mask is not None:
        above &= level_mask
        crossing = above[:, :-1] & ~above[:, 1:] & level_mask[:, 1:]
    has = crossing.any(axis=1)
    first = np.argmax(crossing, axis=1)
    m0 = means[rows, first]
    m1 = means[rows, np.minimum(first + 1, n - 1)]
    l0 = levels[rows, first]
    l1 = levels[rows, np.minimum(first + 1, n - 1)]
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(m0 != m1, (m0 - half) / (m0 - m1), 0.5)
        log_ic50 = np.where(has, l0 + frac * (l1 - l0), log_ic50)
    hill = np.where(top >= bottom, 1.0, -1.0)
    return np.stack([top, bottom, log_ic50, hill], axis=1)
