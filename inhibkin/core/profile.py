"""Where a profile-likelihood curve crosses its threshold: the one search both the
mechanism fits and the dose-response fits use for their interval limits.

A profile is evaluated by re-optimising the other parameters with one parameter (or a
contrast) held fixed. The search steps outward from the estimate, doubling the step,
until the profile SSR exceeds the target or the bound is reached (an open limit), then
brackets the crossing with Brent's method. Every evaluation inside the bracket starts
from the solution at its inner end, so the root-finder sees one fixed function.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

__all__ = ["profile_crossing", "profile_tie"]


def profile_crossing(excess, centre, limit, direction, first_step, start, *, xtol,
                     max_doublings):
    """The value where ``excess`` changes sign on one side of ``centre``.

    Parameters
    ----------
    excess : callable
        ``excess(c, start) -> (profile SSR − target, solution)``: re-optimise with the
        profiled quantity fixed at ``c``, starting from ``start``.
    centre : float
        The estimate (where ``excess`` is negative).
    limit : float
        The bound of the search on this side.
    direction : {-1, +1}
        Which side of ``centre``.
    first_step : float
        First step away from ``centre`` (doubled until the crossing is bracketed).
    start : object
        The solution at ``centre``, the first warm start.
    xtol : float
        Absolute precision of the crossing.
    max_doublings : int
        Steps after which the limit is declared open.

    Returns
    -------
    float
        The crossing, or ``direction * inf`` when the profile stays below the target up
        to ``limit`` (the data set no limit on that side).
    """
    step = first_step
    inner, inner_start = centre, start
    for _ in range(max_doublings):
        outer = centre + direction * step
        if (outer - limit) * direction >= 0:
            outer = limit
        value, solution = excess(outer, inner_start)
        if value > 0:
            def bracketed(c, warm=inner_start):
                return excess(c, warm)[0]

            # A refit from the bracket's inner end can land a hair above the target
            # when the profile is flat there; the inner end is then the limit.
            if bracketed(inner) >= 0:
                return inner
            return optimize.brentq(bracketed, inner, outer, xtol=xtol)
        if outer == limit:
            return direction * np.inf
        inner, inner_start = outer, solution
        step *= 2
    return direction * np.inf


def profile_tie(theta_hat, lower, upper, direction, j=None, contrast=None):
    """How a profile holds one log-parameter, or a difference of two, fixed.

    Parameters
    ----------
    theta_hat, lower, upper : numpy.ndarray
        The log-estimates and their bounds.
    direction : {-1, +1}
        Which side of the estimate the search runs.
    j : int, optional
        The parameter profiled.
    contrast : tuple of int, optional
        ``(a, b)``: profile theta_b − theta_a instead (theta_b = theta_a + c, e.g.
        log alpha = log kiu − log kic).

    Returns
    -------
    tie : numpy.ndarray, shape (k, k − 1)
        theta = tie @ phi + offset(c), phi the free parameters.
    fixed : int
        The entry of the offset that carries the profiled value c.
    centre, limit : float
        The estimate of the profiled quantity and the bound of the search on this side.
    """
    k = len(theta_hat)
    if contrast is None:
        tie = np.delete(np.eye(k), j, axis=1)
        limit = upper[j] if direction > 0 else lower[j]
        return tie, j, float(theta_hat[j]), float(limit)
    a, fixed = contrast
    tie = np.delete(np.eye(k), fixed, axis=1)
    tie[fixed, a] = 1.0
    limit = upper[fixed] - lower[a] if direction > 0 else lower[fixed] - upper[a]
    return tie, fixed, float(theta_hat[fixed] - theta_hat[a]), float(limit)
