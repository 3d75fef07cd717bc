"""Starting values and log-space bounds for padded batches, as the engine asks for them.

The mechanism starts and bounds are the one rule of :mod:`inhibkin.core.starts` and
:mod:`inhibkin.core.bounds` (which the lmfit path calls with one problem), re-exported
here; :func:`logistic_starts` is :func:`inhibkin.core.logistic.logistic4_start` rewritten
over (B, n) arrays with a mask, checked against it by the tests.
"""

from __future__ import annotations

import numpy as np

from ..core.bounds import log_bounds_arrays
from ..core.models import MODELS
from ..core.starts import count_unique, masked_median, mechanism_starts

__all__ = ["mechanism_starts", "mechanism_log_bounds", "logistic_starts", "count_unique"]


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
    """Vectorised :func:`inhibkin.core.logistic.logistic4_start`: (B, 4) top, bottom,
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
        log_ic50 = masked_median(np.where(level_mask, levels, 0.0), level_mask)
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
