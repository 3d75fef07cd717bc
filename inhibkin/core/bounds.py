"""Bounds on the log-parameters of a rate law, set by each parameter's role.

A constant is fitted as its natural logarithm inside bounds that lie orders of magnitude
beyond the data: they bind only when the data cannot determine it, and a constant at a
bound is then reported as not determined (:mod:`inhibkin.core.determined`). The data axis
that sets a parameter's bounds is its role (:data:`inhibkin.core.models.ROLES`).
"""

from __future__ import annotations

import numpy as np

__all__ = ["BOUND_FACTORS", "NESTED_FAR_FACTOR", "log_bounds_arrays", "classical_limit"]

#: Per role: (factor below the smallest positive level, factor above the largest), of the
#: largest |rate| for ``rate``, of the substrate levels for ``substrate``, of the inhibitor
#: levels for ``inhibitor`` and ``enzyme`` ([E] shares the inhibitor's unit), of 1 for
#: ``partial`` (beta between 1e-6, where the law is the dead-end one to any precision, and
#: 1, where ESI turns over as fast as ES). Wide on purpose (common practice: bounds far
#: outside the data only keep the optimiser finite).
BOUND_FACTORS = {"rate": (1e-3, 1e4), "substrate": (1e-4, 1e4), "inhibitor": (1e-4, 1e6),
                 "substrate_inhibition": (1e-4, 1e6), "enzyme": (1e-6, 1e2),
                 "partial": (1e-6, 1.0)}

#: A constant that a nested model lacks starts the larger model at its upper bound
#: divided by this (far out, where the nesting's limit lies, yet inside the bounds).
NESTED_FAR_FACTOR = 10.0


def _positive_range(x, mask):
    """Smallest and largest positive valid value per row (1 and 1 where there is none)."""
    pos = mask & (x > 0)
    has = pos.any(axis=1)
    low = np.where(has, np.min(np.where(pos, x, np.inf), axis=1), 1.0)
    high = np.where(has, np.max(np.where(pos, x, -np.inf), axis=1), 1.0)
    return low, high


def log_bounds_arrays(law, s, i, v, mask):
    """Lower and upper bounds on the log-parameters of ``law`` for every problem.

    Parameters
    ----------
    law : inhibkin.core.models.RateLaw
    s, i, v : numpy.ndarray, shape (B, n)
        Substrate and inhibitor concentrations and rates, padded.
    mask : numpy.ndarray of bool, shape (B, n)
        True for real points.

    Returns
    -------
    lower, upper : numpy.ndarray, shape (B, k)
        Natural logs of the bounds, in parameter order.
    """
    top = np.max(np.where(mask, np.abs(v), 0.0), axis=1, initial=0.0)
    top = np.where(top == 0, 1.0, top)
    substrate = _positive_range(s, mask)
    inhibitor = _positive_range(i, mask)
    one = np.ones_like(top)
    ranges = {"rate": (top, top), "substrate": substrate, "inhibitor": inhibitor,
              "substrate_inhibition": substrate, "enzyme": inhibitor, "partial": (one, one)}
    lower, upper = [], []
    for role in law.roles:
        below, above = BOUND_FACTORS[role]
        low, high = ranges[role]
        lower.append(low * below)
        upper.append(high * above)
    return np.log(np.stack(lower, axis=1)), np.log(np.stack(upper, axis=1))


def classical_limit(role, lower, upper):
    """Where a family constant of ``role`` gives the classical law back, inside its log
    bounds ``lower``, ``upper`` (arrays or floats): the upper bound / NESTED_FAR_FACTOR for
    ksi (ksi -> inf), the lower bound × NESTED_FAR_FACTOR for [E] and beta (-> 0).
    Natural scale."""
    if role == "substrate_inhibition":
        return np.exp(upper) / NESTED_FAR_FACTOR
    return np.exp(lower) * NESTED_FAR_FACTOR
