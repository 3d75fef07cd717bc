"""The weighting rules of the mechanism fits, shared by the lmfit path and the engine.

``relative`` weighting (constant coefficient of variation) sets residual multipliers
1/v̂ from a reweighted fit of the most general model, with v̂ floored at a fraction of the
largest fitted rate so that a fully inhibited point does not receive an unbounded weight,
and normalised to a geometric mean of 1. Each solver runs the reweighting fits; the rule
that turns fitted rates into weights is :func:`relative_weights_from_fitted`.

``rate_se`` weighting (the default for tables that carry a ``rate_se`` column, as
:func:`inhibkin.initial_rates` writes them) gives each rate the standard deviation

    sd² = rate_se² + a² + (b·v̄)²

where rate_se is the rate's own standard error from its progress curve (the read noise
of that well), and a² + (b·v̄)² is the scatter between wells that the reads of one well
cannot see (pipetting, plate position), a constant part a and a part proportional to the
rate b·v̄, with v̄ the mean rate of the point's replicate group. The two-component
form (constant + proportional) is the usual error model of analytical measurements
(Rocke & Lorenzato 1995, Technometrics 37:176; `from memory`); independent sources of
error add in variance (`common practice`). a and b are fitted per compound from the
replicate scatter (:func:`variance_model`) when at least
:data:`MIN_REPLICATE_GROUPS` points are replicated; otherwise a = b = 0 and the weights
are 1/rate_se. The rule reads only the data, so both solvers apply it identically
(:func:`rate_se_weights`).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import nnls

__all__ = ["WEIGHTINGS", "DEFAULT_WEIGHTING", "REWEIGHT_ITERATIONS", "WEIGHT_FLOOR",
           "RATE_SE_COLUMN", "MIN_REPLICATE_GROUPS", "SD_FLOOR", "SD_WEIGHTINGS",
           "relative_weights_from_fitted", "normalise_weights", "resolve_weighting",
           "weighting_label", "variance_model", "rate_se_weights"]

WEIGHTINGS = ("uniform", "relative", "sd", "rate_se")
#: Weightings that read a column of standard deviations (``rate_se`` reads rate_se).
SD_WEIGHTINGS = ("sd", "rate_se")
#: The column of the rates' standard errors that :func:`inhibkin.initial_rates` writes.
RATE_SE_COLUMN = "rate_se"
#: Replicated points (groups of ≥ 2 rates at one substrate and inhibitor) needed before
#: the variance model's two constants are fitted: two parameters from fewer groups of
#: one degree of freedom each would be mostly noise (`common practice`).
MIN_REPLICATE_GROUPS = 6
#: A rate's sd is floored at this fraction of the compound's median sd, so that one
#: well with an (accidentally) tiny standard error does not take all the weight.
SD_FLOOR = 0.1
#: Reweighting rounds of the variance model's fit (its rows are weighted by the
#: variance they predict).
VARIANCE_MODEL_ITERATIONS = 3
#: The weighting of rate tables when none is asked for, everywhere (API, campaigns, CLI):
#: initial rates spread over a wide range carry a roughly constant coefficient of
#: variation, and on such data relative weighting calls the mechanism right more often
#: and sets pKi closer than uniform weighting (README, "Weighting").
DEFAULT_WEIGHTING = "relative"
#: What the results say for each weighting (``rate_se`` always adds the variance model,
#: which is zero where there are too few replicates).
_LABELS = {"rate_se": "rate_se + variance model"}
#: Iterations of the reweighting that sets the constant-CV weights.
REWEIGHT_ITERATIONS = 3
#: Fitted rates below this fraction of the largest are floored before weighting.
WEIGHT_FLOOR = 1e-3


def relative_weights_from_fitted(fitted, mask) -> np.ndarray:
    """Residual multipliers 1/max(v̂, floor·max v̂) per row, 0 outside ``mask``.

    Parameters
    ----------
    fitted : numpy.ndarray, shape (B, n)
        Fitted rates of the reweighting model.
    mask : numpy.ndarray of bool, shape (B, n)
    """
    top = np.max(np.where(mask, fitted, -np.inf), axis=1, initial=-np.inf)
    scale = np.maximum(fitted, WEIGHT_FLOOR * top[:, None])
    return np.where(mask, 1.0 / np.where(mask, scale, 1.0), 0.0)


def normalise_weights(w, mask) -> np.ndarray:
    """``w`` divided by its geometric mean over the valid points of each row."""
    with np.errstate(divide="ignore"):
        log_w = np.where(mask, np.log(np.where(mask, w, 1.0)), 0.0)
    geometric = np.exp(log_w.sum(axis=1) / np.maximum(mask.sum(axis=1), 1))
    return np.where(mask, w / geometric[:, None], 0.0)


def resolve_weighting(weighting, columns, sd=None) -> tuple[str, str | None]:
    """The weighting and sd column a fit uses when ``weighting`` may be None (the default).

    None means: ``rate_se`` (with the ``rate_se`` column) when the table has that column
    and no other ``sd`` column is named, else :data:`DEFAULT_WEIGHTING`. A weighting
    asked for by name is kept; ``rate_se`` reads ``sd`` when given, else ``rate_se``.

    Returns
    -------
    weighting : str
    sd : str or None
        The column of standard deviations to read (None when the weighting reads none).
    """
    if weighting is None:
        weighting = "rate_se" if sd is None and RATE_SE_COLUMN in set(columns) \
            else DEFAULT_WEIGHTING
    if weighting == "rate_se":
        return weighting, sd if sd is not None else RATE_SE_COLUMN
    return weighting, sd if weighting == "sd" else None


def weighting_label(weighting) -> str:
    """The weighting as results write it (``rate_se`` -> ``rate_se + variance model``)."""
    return _LABELS.get(weighting, weighting)


def _replicate_groups(s, i):
    """Group index of every point: points with equal substrate and inhibitor share one."""
    _, group = np.unique(np.stack([s, i], axis=1), axis=0, return_inverse=True)
    return group.ravel()


def variance_model(s, i, v, se) -> tuple[float, float]:
    """a² and b² of sd² = se² + a² + (b·v̄)², fitted from one compound's replicates.

    Each replicated group g (n_g ≥ 2 rates at one substrate and inhibitor) gives its
    sample variance s_g², whose expectation is mean(se²) + a² + b²·v̄_g²; a² and b²
    (both ≥ 0) are the non-negative least-squares solution of s_g² − mean(se²) on
    [1, v̄_g²], each row weighted by the inverse of the standard deviation of s_g²
    under normal errors, σ_g²·sqrt(2/(n_g − 1)) with σ_g² the predicted variance.

    Parameters
    ----------
    s, i, v, se : numpy.ndarray, shape (n,)
        Substrate, inhibitor, rate and the rate's standard error of one compound.

    Returns
    -------
    a2, b2 : float
        Zero both when fewer than :data:`MIN_REPLICATE_GROUPS` points are replicated.
    """
    group = _replicate_groups(s, i)
    count = np.bincount(group)
    replicated = np.flatnonzero(count >= 2)
    if replicated.size < MIN_REPLICATE_GROUPS:
        return 0.0, 0.0
    mean_v = np.bincount(group, v) / count
    sample_var = np.bincount(group, (v - mean_v[group]) ** 2) / np.maximum(count - 1, 1)
    mean_se2 = np.bincount(group, se ** 2) / count
    n_g, s2, m2, v2 = (x[replicated] for x in (count, sample_var, mean_se2, mean_v ** 2))
    design = np.stack([np.ones_like(v2), v2], axis=1)
    predicted = np.full_like(s2, max(float(np.mean(s2)), np.finfo(float).tiny))
    coef = np.zeros(2)
    for _ in range(VARIANCE_MODEL_ITERATIONS):
        row = np.sqrt((n_g - 1) / 2.0) / predicted
        coef, _ = nnls(design * row[:, None], (s2 - m2) * row)
        predicted = np.maximum(m2 + design @ coef, 1e-12 * float(np.max(s2 + m2)))
    return float(coef[0]), float(coef[1])


def rate_se_weights(s, i, v, se, mask) -> np.ndarray:
    """Residual multipliers 1/sd with sd² = rate_se² + a² + (b·v̄)², normalised.

    The rule of ``weighting="rate_se"`` (module notes), over (compounds, points) arrays.

    Parameters
    ----------
    s, i, v, se : numpy.ndarray, shape (B, n)
        Substrate, inhibitor, rate and the rate's standard error (same rate unit).
    mask : numpy.ndarray of bool, shape (B, n)

    Returns
    -------
    numpy.ndarray, shape (B, n)
        Weights with geometric mean 1 over each row's valid points, 0 outside ``mask``.
    """
    w = np.zeros(s.shape)
    for row in range(s.shape[0]):
        keep = mask[row]
        if not keep.any():
            continue
        sc, ic, vc, sec = s[row, keep], i[row, keep], v[row, keep], se[row, keep]
        a2, b2 = variance_model(sc, ic, vc, sec)
        group = _replicate_groups(sc, ic)
        mean_v = np.bincount(group, vc) / np.bincount(group)
        sd = np.sqrt(sec ** 2 + a2 + b2 * mean_v[group] ** 2)
        positive = sd[sd > 0]
        # Exactly linear reads (se = 0, no replicate scatter) carry no weight information.
        sd = np.maximum(sd, SD_FLOOR * np.median(positive)) if positive.size else np.ones_like(sd)
        w[row, keep] = 1.0 / sd
    return normalise_weights(w, mask)
