"""Automatic starting values for the mechanism fits.

The user never supplies guesses. vmax and km come from a Hanes–Woolf line (S/v against
S) through the uninhibited points; every inhibition constant then comes from a coarse
search over a log-spaced grid spanning the tested inhibitor range, at that vmax and km.
Both steps are closed-form or a handful of rate evaluations, written once over padded
(B, n) arrays with a mask (:func:`mechanism_starts`): the batched engine calls it for
thousands of compounds, the lmfit path (:func:`starting_values`) with one.

:func:`log_bounds` gives one compound's bounds (in log space) that keep every positive
constant finite (:mod:`inhibkin.core.bounds`): far outside anything the data could
determine, so that a constant the data do not pin down ends up at a bound and is
reported as not determined.
"""

from __future__ import annotations

import numpy as np

from .bounds import log_bounds_arrays
from .models import MODELS

__all__ = ["michaelis_menten_start", "starting_values", "extra_start", "ENZYME_START_FACTOR",
           "BETA_START", "mechanism_starts", "log_bounds",
           "count_unique", "masked_median", "KI_GRID_POINTS", "KI_GRID_SPAN"]

#: Points in the log-spaced search grid for each inhibition constant.
KI_GRID_POINTS = 13
#: The grid runs from the smallest positive inhibitor level divided by the first to the
#: largest times the second (the engine's vectorised search uses the same span).
KI_GRID_SPAN = (10.0, 100.0)

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


def masked_median(values, mask):
    """Median of the valid values per row (NaN for an empty row)."""
    ordered = _sorted_valid(values, mask)
    count = mask.sum(axis=1)
    lo = np.clip((count - 1) // 2, 0, None)
    hi = np.clip(count // 2, 0, ordered.shape[1] - 1)
    rows = np.arange(len(count))
    out = 0.5 * (ordered[rows, lo] + ordered[rows, hi])
    return np.where(count > 0, out, np.nan)


def _michaelis_menten_start(s, v, use):
    """Hanes–Woolf starts over the points ``use`` of each row (see
    :func:`michaelis_menten_start`)."""
    keep = use & (s > 0) & (v > 0)
    any_kept = keep.any(axis=1)
    magnitude = np.max(np.where(use, np.abs(v), 0.0), axis=1, initial=0.0)
    scale = np.where(any_kept, np.max(np.where(keep, v, -np.inf), axis=1, initial=-np.inf),
                     np.where(magnitude > 0, magnitude, 1.0))
    vmax_fb = 1.1 * scale
    km_fb = np.where(any_kept, masked_median(s, keep), 1.0)
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


#: A ksi start when the uninhibited rates show no fall at high S: this multiple of the
#: largest substrate level (far, where the law is classical, yet inside the bounds).
KSI_FAR_START = 100.0


def _substrate_inhibition_start(s, v, use):
    """vmax, km and ksi from the quadratic S/v = km/vmax + S/vmax + S**2/(vmax*ksi)
    through the points ``use`` of each row (the Hanes–Woolf line with substrate
    inhibition's extra term); the line's starts and a far ksi where the quadratic does
    not give positive constants."""
    vmax, km = _michaelis_menten_start(s, v, use)
    keep = use & (s > 0) & (v > 0)
    s_max = np.max(np.where(use, s, 0.0), axis=1, initial=0.0)
    ksi = np.where(s_max > 0, KSI_FAR_START * s_max, 1.0)
    scale = np.where(s_max > 0, s_max, 1.0)[:, None]
    x = np.where(keep, s / scale, 0.0)
    q = np.where(keep, s / np.where(keep, v, 1.0), 0.0)
    design = np.stack([keep.astype(float), x, x * x], axis=-1)
    normal = np.einsum("bni,bnj->bij", design, design)
    rhs = np.einsum("bni,bn->bi", design, q)
    solvable = (count_unique(s, keep) >= 3) & (np.abs(np.linalg.det(normal)) > 1e-12)
    coef = np.zeros_like(rhs)
    if solvable.any():
        coef[solvable] = np.linalg.solve(normal[solvable], rhs[solvable][..., None])[..., 0]
    a, b, c = coef[:, 0], coef[:, 1] / scale[:, 0], coef[:, 2] / scale[:, 0] ** 2
    good = solvable & (a > 0) & (b > 0) & (c > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        vmax = np.where(good, 1 / b, vmax)
        km = np.where(good, a / b, km)
        ksi = np.where(good, b / c, ksi)
    return vmax, km, ksi


#: Starts of the families' constants (other than ksi, started from the quadratic) and
#: where each starts from a classical solution: [E] at the lowest non-zero inhibitor
#: level times this (depletion just visible), beta at this.
ENZYME_START_FACTOR = 0.3
BETA_START = 0.1


def extra_start(role, s, i, mask) -> np.ndarray:
    """Start of a family's constant of ``role`` for every problem, shape (B,), natural
    scale: ksi at the largest substrate level, [E] at :data:`ENZYME_START_FACTOR` × the
    lowest non-zero inhibitor level, beta at :data:`BETA_START`."""
    if role == "substrate_inhibition":
        s_max = np.max(np.where(mask, s, 0.0), axis=1, initial=0.0)
        return np.where(s_max > 0, s_max, 1.0)
    if role == "enzyme":
        low = np.min(np.where(mask & (i > 0), i, np.inf), axis=1, initial=np.inf)
        return ENZYME_START_FACTOR * np.where(np.isfinite(low), low, 1.0)
    return np.full(s.shape[0], BETA_START)


def mechanism_starts(model, s, i, v, mask, weights=None, held=None) -> np.ndarray:
    """Starting parameters of ``model`` for every problem, shape (B, k), natural scale.

    Parameters
    ----------
    model : str
        A name in :data:`inhibkin.core.models.MODELS`.
    s, i, v : numpy.ndarray, shape (B, n)
        Substrate and inhibitor concentrations and rates, padded.
    mask : numpy.ndarray of bool, shape (B, n)
        True for real points.
    weights : numpy.ndarray, shape (B, n), optional
        Residual multipliers used to score the grid search (default 1).
    held : numpy.ndarray, shape (B,), optional
        The active enzyme concentration of a tight-binding law, where it is given (it
        then starts, and stays, there).
    """
    law = MODELS[model]
    uninhibited = mask & (i == 0)
    use_uninhibited = count_unique(s, uninhibited) >= 2
    use = np.where(use_uninhibited[:, None], uninhibited, mask)
    roles = np.array(law.roles)
    extra = np.flatnonzero(~np.isin(roles, ("rate", "substrate", "inhibitor")))
    out = np.empty((s.shape[0], law.n_params))
    if "substrate_inhibition" in law.roles:
        vmax, km, out[:, extra[0]] = _substrate_inhibition_start(s, v, use)
    else:
        vmax, km = _michaelis_menten_start(s, v, use)
        for j in extra:
            out[:, j] = extra_start(law.roles[j], s, i, mask)
    if held is not None and "enzyme" in law.roles:
        out[:, law.roles.index("enzyme")] = held
    names = law.inhibition_constants
    out[:, 0], out[:, 1] = vmax, km
    if not names:
        return out
    columns = np.flatnonzero(roles == "inhibitor")
    rest = out[:, extra]
    out[:, columns] = 1.0
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
                            *(combos[:, :, [c]] for c in range(m)),
                            *(rest[rows][:, None, [c]] for c in range(extra.size)))
            score = np.sum(np.where(sel, (wr * (vr - pred)) ** 2, 0.0), axis=2)
        best = np.argmin(np.where(np.isnan(score), np.inf, score), axis=1)
        out[rows[:, None], columns[None, :]] = combos[np.arange(rows.size), best]
    return out


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
    s = np.asarray(s, dtype=float)[None, :]
    v = np.asarray(v, dtype=float)[None, :]
    vmax, km = _michaelis_menten_start(s, v, np.ones(s.shape, bool))
    return float(vmax[0]), float(km[0])


def starting_values(model: str, s, i, v, weights=None) -> dict[str, float]:
    """Starting values for ``model`` fitted to one compound's grid.

    :func:`mechanism_starts` with one problem: the lmfit path and the engine start
    every problem from the same rule.

    Parameters
    ----------
    model : str
        A name in :data:`inhibkin.core.models.MODELS`.
    s, i, v : array_like
        Substrate and inhibitor concentrations and rates, one entry per point.
    weights : array_like, optional
        Multipliers of the residuals (1/σ), used to score the grid search.

    Returns
    -------
    dict
        Parameter name to starting value, all positive.
    """
    rows = [np.asarray(x, dtype=float)[None, :] for x in (s, i, v)]
    w = None if weights is None else np.asarray(weights, dtype=float)[None, :]
    start = mechanism_starts(model, *rows, np.ones(rows[0].shape, bool), w)[0]
    return {name: float(x) for name, x in zip(MODELS[model].param_names, start)}


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
