"""The four-parameter logistic (4PL) dose-response curve, as data.

    y = bottom + (top − bottom) / (1 + 10**(hill·(x − log_ic50))),   x = log10(conc)

With ``hill > 0`` the curve falls from ``top`` (low concentration) to ``bottom`` (high
concentration), the usual inhibition curve; with ``hill < 0`` it rises. ``log_ic50`` is
the log10 of the concentration at the midpoint, in the concentration's unit. Both the
lmfit path (:mod:`inhibkin.potency.curve`) and the batched engine read the curve, its
Jacobian and its starting values from here.
"""

from __future__ import annotations

import numpy as np

__all__ = ["PARAM_NAMES", "logistic4", "logistic4_jacobian", "logistic4_start"]

PARAM_NAMES = ("top", "bottom", "log_ic50", "hill")

_LN10 = np.log(10.0)


def logistic4(x, top, bottom, log_ic50, hill):
    """4PL response at x = log10(concentration); vectorised."""
    with np.errstate(over="ignore"):
        return bottom + (top - bottom) / (1.0 + 10.0 ** (hill * (x - log_ic50)))


def logistic4_jacobian(x, top, bottom, log_ic50, hill):
    """d response / d (top, bottom, log_ic50, hill), shape (..., 4)."""
    with np.errstate(over="ignore", invalid="ignore"):
        d = x - log_ic50
        u = 10.0 ** (hill * d)
        g = 1.0 / (1.0 + u)
        h = 1.0 - g
        # d g / d z for z = hill*(x - log_ic50) is -ln10 * u/(1+u)^2 = -ln10 * g*(1-g);
        # written with g alone it stays finite when u overflows.
        dg = -_LN10 * g * h
    span_dg = (top - bottom) * dg
    # Written into one array (the lmfit path calls this hundreds of times per curve).
    out = np.empty(np.shape(g) + (4,))
    out[..., 0] = g
    out[..., 1] = h
    out[..., 2] = span_dg * (-hill)
    out[..., 3] = span_dg * d
    return out


def logistic4_start(x, y) -> dict[str, float]:
    """Starting values from the data alone.

    top and bottom are the mean responses at the lowest and highest concentration;
    log_ic50 is where the response first crosses the half-way level (linear
    interpolation between the concentration means), else the middle of the tested
    range; hill is ±1 with the sign of the trend.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    levels = np.unique(x)
    means = np.array([y[x == lv].mean() for lv in levels])
    top, bottom = float(means[0]), float(means[-1])
    half = 0.5 * (top + bottom)
    log_ic50 = float(np.median(levels))
    above = (means - half) * np.sign(top - bottom or 1.0) > 0
    for k in range(len(levels) - 1):
        if above[k] and not above[k + 1]:
            m0, m1 = means[k], means[k + 1]
            frac = (m0 - half) / (m0 - m1) if m0 != m1 else 0.5
            log_ic50 = float(levels[k] + frac * (levels[k + 1] - levels[k]))
            break
    hill = 1.0 if top >= bottom else -1.0
    return {"top": top, "bottom": bottom, "log_ic50": log_ic50, "hill": hill}
