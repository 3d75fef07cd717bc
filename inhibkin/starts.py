"""Automatic starting values for the mechanism fits.

The user never supplies guesses. vmax and km come from a Hanes–Woolf line (S/v against
S) through the uninhibited points; every inhibition constant then comes from a coarse
search over a log-spaced grid spanning the tested inhibitor range, at that vmax and km.
Both steps are closed-form or a handful of rate evaluations, so the batched engine can
use exactly the same rule for thousands of compounds at once.

The same module gives the bounds (in log space) that keep every positive constant
finite: far outside anything the data could determine, so that a constant the data do
not pin down ends up at a bound and is reported as not determined.
"""

from __future__ import annotations

import numpy as np

from .core.bounds import log_bounds_arrays
from .models import MODELS

__all__ = ["michaelis_menten_start", "starting_values", "log_bounds", "KI_GRID_POINTS",
           "KI_GRID_SPAN"]

#: Points in the log-spaced search grid for each inhibition constant.
KI_GRID_POINTS = 13
#: The grid runs from the smallest positive inhibitor level divided by the first to the
#: largest times the second (the engine's vectorised search uses the same span).
KI_GRID_SPAN = (10.0, 100.0)

def michaelis_menten_start(s, v) -> tuple[float, float]:
    """Starting vmax and km from a Hanes–Woolf line through (S, S/v).

    Parameters
    ----------
    s, v : array_like
        Substrate concentrations and rates (any units; the line uses the points with
        S > 0 and v > 0, so zero and negative rates are allowed).

    Returns
    -------
    vmax, km : float
        Positive starting values, in the units of ``v`` and ``s``. When the line has a
        non-positive slope or intercept (noisy or flat data) the fallback is
        vmax = 1.1 × the largest positive rate (the largest |v| when none is positive)
        and km = the median substrate concentration.
    """
    s = np.asarray(s, dtype=float)
    v = np.asarray(v, dtype=float)
    keep = (s > 0) & (v > 0)
    # The scale of the rates: the largest positive one, else the largest magnitude (rates
    # may scatter around zero), else 1.
    scale = float(np.max(v[keep])) if keep.any() else (float(np.max(np.abs(v), initial=0.0))
                                                        or 1.0)
    s, v = s[keep], v[keep]
    fallback = (1.1 * scale, float(np.median(s)) if s.size else 1.0)
    if np.unique(s).size < 2:
        return fallback
    slope, intercept = np.polyfit(s, s / v, 1)
    if slope <= 0 or intercept <= 0:
        return fallback
    return float(1.0 / slope), float(intercept / slope)


def _inhibitor_grid(i) -> np.ndarray:
    positive = i[i > 0]
    low, high = positive.min() / KI_GRID_SPAN[0], positive.max() * KI_GRID_SPAN[1]
    return np.geomspace(low, high, KI_GRID_POINTS)


def starting_values(model: str, s, i, v, weights=None) -> dict[str, float]:
    """Starting values for ``model`` fitted to one compound's grid.

    Parameters
    ----------
    model : str
        A name in :data:`inhibkin.models.MODELS`.
    s, i, v : array_like
        Substrate and inhibitor concentrations and rates, one entry per point.
    weights : array_like, optional
        Multipliers of the residuals (1/σ), used to score the grid search.

    Returns
    -------
    dict
        Parameter name to starting value, all positive.
    """
    s = np.asarray(s, dtype=float)
    i = np.asarray(i, dtype=float)
    v = np.asarray(v, dtype=float)
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float)
    uninhibited = i == 0
    if np.unique(s[uninhibited]).size >= 2:
        vmax, km = michaelis_menten_start(s[uninhibited], v[uninhibited])
    else:
        vmax, km = michaelis_menten_start(s, v)
    law = MODELS[model]
    names = law.inhibition_constants
    if not names or not np.any(i > 0):
        return {"vmax": vmax, "km": km, **{n: 1.0 for n in names}}
    grid = _inhibitor_grid(i)
    # Every combination of grid values, one row each: 13 rows for one constant, 169 for two.
    combos = np.stack(np.meshgrid(*([grid] * len(names)), indexing="ij"), axis=-1)
    combos = combos.reshape(-1, len(names))
    pred = law.rate(s[None, :], i[None, :], vmax, km, *(combos[:, [k]] for k in range(len(names))))
    score = np.sum((w * (v[None, :] - pred)) ** 2, axis=1)
    best = combos[int(np.argmin(score))]
    return {"vmax": vmax, "km": km, **{n: float(x) for n, x in zip(names, best)}}


def log_bounds(model: str, s, i, v) -> dict[str, tuple[float, float]]:
    """Bounds on the natural log of each parameter of ``model``.

    They lie orders of magnitude beyond the data (:data:`inhibkin.core.bounds.BOUND_FACTORS`,
    by each parameter's role), so they bind only when the data cannot determine a
    constant. One compound: :func:`inhibkin.core.bounds.log_bounds_arrays` with one row.
    """
    law = MODELS[model]
    rows = [np.asarray(x, dtype=float)[None, :] for x in (s, i, v)]
    lower, upper = log_bounds_arrays(law, *rows, np.ones(rows[0].shape, bool))
    return {name: (float(lower[0, j]), float(upper[0, j]))
            for j, name in enumerate(law.param_names)}
