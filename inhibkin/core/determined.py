"""Which fitted constants are "determined within the tested range": the one rule.

A constant is determined when the fit sets it: not at a bound, with a finite standard
error and an interval that is finite above and positive below. On top of that, each
parameter's role (:data:`inhibkin.core.models.ROLES`) adds what the tested levels can see:

- ``inhibitor`` (kic, kiu, ki): an estimate above ``factor`` × the largest inhibitor
  level is past the tested range;
- ``substrate`` (km): above ``factor`` × the largest substrate level, with an open
  upper limit, or at its upper bound, km is not determined, and neither is the ``rate``
  constant (every S far below km sets only vmax/km, vmax is an extrapolation); below
  the smallest substrate level / ``factor`` (every S far above km: the rates sit on the
  plateau) km is below resolution;
- ``substrate_inhibition`` (ksi): an estimate above ``factor`` × the largest substrate
  level is past the tested range (reported as a lower bound);
- ``enzyme`` ([E] of a tight-binding law, fitted when not given) and ``partial`` (beta):
  only the general rule (at its lower bound: the law is the classical one to any
  precision, and the value is an upper bound);
- a derived quantity (alpha = kiu/kic) is determined when both its terms are.

Written over (problems, parameters) arrays; the lmfit path calls it with one problem.
"""

from __future__ import annotations

import numpy as np

__all__ = ["AT_BOUND", "DETERMINATION_FACTOR", "determined_flags"]

#: A log-parameter this close to its bound counts as "at the bound" (log units).
AT_BOUND = 1e-3
#: Default multiple of the tested range past which a constant is not determined.
DETERMINATION_FACTOR = 10.0


def determined_flags(law, theta, lower, upper, ci_low, ci_high, se_log, s, i, mask, *,
                     factor=DETERMINATION_FACTOR) -> np.ndarray:
    """The determined flag of every parameter of ``law`` for every problem.

    Parameters
    ----------
    law : inhibkin.core.models.RateLaw
    theta, lower, upper, se_log : numpy.ndarray, shape (B, k)
        Log-estimates, their bounds and standard errors (log units).
    ci_low, ci_high : numpy.ndarray, shape (B, k)
        Interval limits on the natural scale.
    s, i : numpy.ndarray, shape (B, n)
        Substrate and inhibitor levels of each problem (padded).
    mask : numpy.ndarray of bool, shape (B, n)
        True for real points.
    factor : float
        How far past the tested range a constant may lie and still count.

    Returns
    -------
    numpy.ndarray of bool, shape (B, k + len(law.derived))
        Parameters in order, then the derived quantities.
    """
    estimate = np.exp(theta)
    at_bound = (theta - lower < AT_BOUND) | (upper - theta < AT_BOUND)
    with np.errstate(invalid="ignore"):
        ok = ~at_bound & np.isfinite(ci_high) & (ci_low > 0) & np.isfinite(se_log)
    i_max = np.max(np.where(mask, i, 0.0), axis=1, initial=0.0)
    s_max = np.max(np.where(mask, s, 0.0), axis=1, initial=0.0)
    s_low = np.min(np.where(mask & (s > 0), s, np.inf), axis=1, initial=np.inf)
    roles = np.array(law.roles)
    for j, role in enumerate(law.roles):
        if role == "inhibitor":
            ok[:, j] &= ~(estimate[:, j] > factor * i_max)
        elif role == "substrate_inhibition":
            ok[:, j] &= ~(estimate[:, j] > factor * s_max)
        elif role == "substrate":
            too_high = ((estimate[:, j] > factor * s_max) | ~np.isfinite(ci_high[:, j])
                        | (upper[:, j] - theta[:, j] < AT_BOUND))
            ok[:, j] &= ~too_high
            ok[:, roles == "rate"] &= ~too_high[:, None]
            ok[:, j] &= ~(estimate[:, j] * factor < s_low)
    names = law.param_names
    derived = [ok[:, names.index(d.numerator)] & ok[:, names.index(d.denominator)]
               for d in law.derived]
    return np.column_stack([ok, *derived]) if derived else ok
