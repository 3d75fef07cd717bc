"""The straight line's substrate-depletion bias, removed with the row's apparent km.

Under Michaelis–Menten kinetics the rate falls as the substrate is used:
dv/dt = (dv/dS)(dS/dt) = −v²·c/S, with c = Kapp/(Kapp + S) (0 < c < 1), so to second
order in t the product is P(t) = v0·t − v0²·c·t²/(2·S0) (S0 and P in one unit, t from
the start of the reaction). A least-squares straight line over the window's reads then
has the slope

    b = v0 − a·v0²,   a = c·β/(2·S0),

with β = Σ(t − t̄)·t² / Σ(t − t̄)², the slope of t² on t over the window's reads (β = T for
evenly spaced reads from 0 to T). For conversion f = v0·T/S0 this is b ≈ v0·(1 − c·f/2),
the bias of up to f/2 that :mod:`inhibkin.rates.initial` documents; at f = 10 % and
S0 = 0.2 × km it is −4 %, the same sign in every low-substrate well of a grid, which
pulls a competitive kic low and its intervals off the truth.

:func:`depletion_corrected` inverts b = v0 − a·v0² for v0 (the smaller root,
v0 = 2b/(1 + √(1 − 4ab))), with c from the row's apparent km
(:func:`inhibkin.rates.integrated.row_apparent_km`: one compound at one inhibitor level,
Michaelis–Menten in S whatever the mechanism). Its standard error is the line's, times
dv0/db = 1/√(1 − 4ab), plus the part from the row's km, (dv0/dc)²·var(c) with
var(c) = (c(1 − c))²·var(ln Kapp). A row without its own km (fewer than
:data:`~inhibkin.rates.integrated.ROW_MIN_LEVELS` substrate levels with a rate) keeps
the slope: nothing then says how much of the window's conversion slows the rate (a
curve can be straight because S ≫ km).

The correction is second order in t and uses only the window the linear method chose,
so it keeps that method's independence from the late reads (product inhibition or loss
of enzyme bend a curve late; within a window of ≤ 10 % conversion their first-order
share is what the ``product_inhibition`` and ``time_dependent`` flags look for).
"""

from __future__ import annotations

import numpy as np

__all__ = ["window_curvature", "depletion_corrected"]


def window_curvature(t, in_window):
    """β = Σ(t − t̄)·t² / Σ(t − t̄)² over each well's window (time units; NaN when the
    window has fewer than two distinct times).

    Parameters
    ----------
    t : numpy.ndarray, shape (wells, reads)
        Read times from the start of the reaction.
    in_window : numpy.ndarray of bool, shape (wells, reads)
        The reads of each well's window.
    """
    tt = np.where(in_window, t, 0.0)
    n = in_window.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        centre = tt.sum(axis=1) / n
        d = np.where(in_window, tt - centre[:, None], 0.0)
        return np.sum(d * tt * tt, axis=1) / np.sum(d * d, axis=1)


def depletion_corrected(slope, slope_se, beta, s0, kapp, log_kapp_var):
    """Initial rates and standard errors of straight-line slopes, depletion removed.

    Parameters
    ----------
    slope, slope_se : numpy.ndarray, shape (wells,)
        The window's least-squares slope and its standard error (signal per time).
    beta : numpy.ndarray, shape (wells,)
        :func:`window_curvature` of the window (time).
    s0, kapp : numpy.ndarray, shape (wells,)
        The well's substrate and its row's apparent km, both as signal (kapp NaN: the
        row has no km of its own, and the slope is kept).
    log_kapp_var : numpy.ndarray, shape (wells,)
        Variance of ln Kapp of the well's row.

    Returns
    -------
    rate, rate_se : numpy.ndarray
        The slope itself where it cannot be corrected (no substrate as signal, no km
        of the row, no finite slope, or a correction past the second-order range,
        4ab ≥ 1/2).
    """
    known = np.isfinite(kapp) & (kapp > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.where(known, kapp / (kapp + s0), 0.0)
        c_var = (c * (1.0 - c)) ** 2 * np.where(np.isfinite(log_kapp_var), log_kapp_var, 0.0)
        a_per_c = beta / (2.0 * s0)
        a = c * a_per_c
        root = np.sqrt(1.0 - 4.0 * a * slope)
        rate = 2.0 * slope / (1.0 + root)
        d_slope = 1.0 / root
        # Implicit derivatives of b = v0 − c·k·v0² (k = a_per_c), 1 − 2a·v0 = root.
        d_c = rate * rate * a_per_c / root
        se = np.sqrt((d_slope * slope_se) ** 2 + d_c * d_c * c_var)
    usable = (known & np.isfinite(slope) & np.isfinite(slope_se) & np.isfinite(beta)
              & np.isfinite(s0) & (s0 > 0) & (4.0 * a * slope < 0.5))
    return np.where(usable, rate, slope), np.where(usable, se, slope_se)
