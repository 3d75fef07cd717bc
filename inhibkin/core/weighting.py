"""The weighting rules of the mechanism fits, shared by the lmfit path and the engine.

``relative`` weighting (constant coefficient of variation) sets residual multipliers
1/v̂ from a reweighted fit of the most general model, with v̂ floored at a fraction of the
largest fitted rate so that a fully inhibited point does not receive an unbounded weight,
and normalised to a geometric mean of 1. Each solver runs the reweighting fits; the rule
that turns fitted rates into weights is :func:`relative_weights_from_fitted`.
"""

from __future__ import annotations

import numpy as np

__all__ = ["WEIGHTINGS", "DEFAULT_WEIGHTING", "REWEIGHT_ITERATIONS", "WEIGHT_FLOOR",
           "relative_weights_from_fitted", "normalise_weights"]

WEIGHTINGS = ("uniform", "relative", "sd")
#: The weighting of rate tables when none is asked for, everywhere (API, campaigns, CLI):
#: initial rates spread over a wide range carry a roughly constant coefficient of
#: variation, and on such data relative weighting calls the mechanism right more often
#: and sets pKi closer than uniform weighting (README, "Weighting").
DEFAULT_WEIGHTING = "relative"
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
