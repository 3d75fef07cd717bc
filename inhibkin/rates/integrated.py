"""Initial rates from each well's whole curve: the integrated rate law, its row's km.

``initial_rates(method="integrated")`` runs the linear method first, then a second pass:

1. **The row's apparent km.** For each row of the grid (one compound at one inhibitor
   level, every plate), Michaelis–Menten is fitted to the first pass's rates against
   the substrate concentration, weighted by their standard errors (log-parameters,
   ``scipy.optimize.least_squares``). At a fixed inhibitor level every classical law is
   Michaelis–Menten in S, so this Kapp is the row's own, whatever the mechanism.
2. **Each well's v0.** The well's reads (every read before the detector's ceiling, not
   only the early window) are fitted with the integrated Michaelis–Menten equation
   (:mod:`inhibkin.core.integrated_rate_law`, Lambert W) with Kapp held at the row's
   value and two free constants: the well's offset and its apparent vmax (then the
   rows' Kapp is fitted again to these rates and the wells refitted once). The well's
   initial rate is v0 = Vapp·S0/(Kapp + S0). Because the curve carries the depletion,
   the late reads inform v0 instead of biasing it, and a well at low substrate is no
   longer cut short by the conversion cap.
3. **Its standard error.** The Gauss–Newton variance of v0 with the offset projected
   out (residual variance on n − 2 degrees of freedom), plus the part that comes from
   the row's Kapp: (dv0/d ln Kapp)²·var(ln Kapp), the derivative by refitting the well
   at Kapp·exp(±h), var(ln Kapp) from the row fit's covariance scaled by its reduced
   chi-square when that exceeds one.

Rows with fewer than :data:`ROW_MIN_LEVELS` substrate levels with a rate, wells whose
substrate is unknown in signal units (no ``conversion`` or ``signal_unit``), and wells
the first pass could not rate keep the linear rate; they carry the flag
``linear_rate``.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from ..core.integrated_rate_law import closed_form_product, closed_form_sensitivities

__all__ = ["ROW_MIN_LEVELS", "ROW_PASSES", "row_apparent_km", "integrated_rates"]

#: Passes of the row fit: the first from the linear rates, the next from the integrated
#: rates of the pass before (the linear rates of low-substrate wells are biased low by
#: depletion, which biases the row's Kapp high).
ROW_PASSES = 2
#: Fewest distinct substrate levels with a finite rate that give a row its own Kapp.
ROW_MIN_LEVELS = 3
# Gauss–Newton steps of the one-constant well fits (the product is nearly linear in
# Vapp, so a few steps converge to machine precision) and the relative step size below
# which a well has converged.
_NEWTON_STEPS = 25
_NEWTON_RTOL = 1e-12
# Log step of the central difference of v0 in ln Kapp.
_LOG_K_STEP = 0.05
# Kapp is kept within this factor outside the row's substrate range.
_K_RANGE_FACTOR = 100.0


def row_apparent_km(substrate, rate, rate_se, row):
    """Apparent km of each row and the variance of its logarithm.

    Parameters
    ----------
    substrate, rate, rate_se : numpy.ndarray, shape (wells,)
        The wells' substrate (any concentration unit) and first-pass rates with their
        standard errors.
    row : numpy.ndarray of int, shape (wells,)
        Each well's row code (0 … rows − 1).

    Returns
    -------
    kapp, log_kapp_var : numpy.ndarray, shape (rows,)
        In the substrate's unit; NaN where the row has fewer than
        :data:`ROW_MIN_LEVELS` substrate levels with a rate, or the fit failed.
    """
    n_rows = int(row.max()) + 1 if len(row) else 0
    kapp = np.full(n_rows, np.nan)
    log_var = np.full(n_rows, np.nan)
    usable = np.isfinite(rate) & np.isfinite(rate_se) & (rate_se > 0) & (substrate > 0)
    for r in range(n_rows):
        keep = usable & (row == r)
        s, v, se = substrate[keep], rate[keep], rate_se[keep]
        if len(np.unique(s)) < ROW_MIN_LEVELS or not np.any(v > 0):
            continue
        bounds = (np.log(s.min() / _K_RANGE_FACTOR), np.log(s.max() * _K_RANGE_FACTOR))

        def residual(theta, s=s, v=v, se=se):
            vmax, km = np.exp(theta)
            return (v - vmax * s / (km + s)) / se

        start = np.array([np.log(np.max(v) * 1.5), np.log(np.median(s))])
        start[1] = np.clip(start[1], *bounds)
        fit = optimize.least_squares(
            residual, start, bounds=([-np.inf, bounds[0]], [np.inf, bounds[1]]),
            x_scale=1.0)
        if not fit.success:
            continue
        dof = max(len(s) - 2, 1)
        scale = max(1.0, 2.0 * fit.cost / dof)
        try:
            cov = np.linalg.inv(fit.jac.T @ fit.jac) * scale
        except np.linalg.LinAlgError:
            continue
        kapp[r] = np.exp(fit.x[1])
        log_var[r] = max(cov[1, 1], 0.0)
    return kapp, log_var


def _fit_wells(t, y, valid, s0, kapp, start):
    """Vapp (and the projected fit's pieces) of every well, Kapp held: Gauss–Newton on
    Vapp with each well's offset projected out (its mean residual)."""
    weight = valid.astype(float)
    n = weight.sum(axis=1)
    n_safe = np.maximum(n, 1.0)
    tt = np.where(valid, t, 0.0)
    yy = np.where(valid, y, 0.0)
    s0_, k_ = s0[:, None], kapp[:, None]
    vapp = start.copy()

    def centred(a):
        a = np.where(valid, a, 0.0)
        return np.where(valid, a - (a.sum(axis=1) / n_safe)[:, None], 0.0)

    for _ in range(_NEWTON_STEPS):
        product = closed_form_product(tt, s0_, vapp[:, None], k_)
        d_v, _ = closed_form_sensitivities(tt, s0_, vapp[:, None], k_)
        r_c, j_c = centred(yy - product), centred(d_v)
        jj = np.sum(j_c * j_c, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(jj > 0, np.sum(j_c * r_c, axis=1) / jj, 0.0)
        vapp = vapp + step
        if np.all(~np.isfinite(step) | (np.abs(step) <= _NEWTON_RTOL * np.abs(vapp))):
            break
    product = closed_form_product(tt, s0_, vapp[:, None], k_)
    d_v, _ = closed_form_sensitivities(tt, s0_, vapp[:, None], k_)
    r_c, j_c = centred(yy - product), centred(d_v)
    ssr = np.sum(r_c * r_c, axis=1)
    jj = np.sum(j_c * j_c, axis=1)
    return vapp, ssr, jj, n


def integrated_rates(t, y, valid, s0_signal, kapp_signal, log_kapp_var, start_rate):
    """Initial rates of the wells (rows of the arrays) from their whole curves.

    Parameters
    ----------
    t, y : numpy.ndarray, shape (wells, reads)
        Times from the start of the reaction and blank-corrected, oriented signal.
    valid : numpy.ndarray of bool, shape (wells, reads)
        Reads the fit may use (finite, before the detector's ceiling).
    s0_signal, kapp_signal : numpy.ndarray, shape (wells,)
        The well's substrate and its row's Kapp, both expressed as signal.
    log_kapp_var : numpy.ndarray, shape (wells,)
        Variance of ln Kapp of the well's row.
    start_rate : numpy.ndarray, shape (wells,)
        The first pass's rate (signal per time), the start of Vapp.

    Returns
    -------
    dict
        ``rate``, ``rate_se`` (signal per time), ``residual_sd``, ``n_points``,
        ``position_end`` (the last read used), ``window_end`` (its time) and
        ``conversion`` (fraction of the substrate converted by then), per well.
    """
    share = s0_signal / (kapp_signal + s0_signal)  # v0 = Vapp·share
    with np.errstate(divide="ignore", invalid="ignore"):
        start = np.where(np.isfinite(start_rate) & (share > 0), start_rate / share, 0.0)

    def v0_at(log_factor):
        k = kapp_signal * np.exp(log_factor)
        vapp, ssr, jj, n = _fit_wells(t, y, valid, s0_signal, k, start)
        return vapp * s0_signal / (k + s0_signal), vapp, ssr, jj, n

    rate, vapp, ssr, jj, n = v0_at(0.0)
    up, *_ = v0_at(_LOG_K_STEP)
    down, *_ = v0_at(-_LOG_K_STEP)
    d_rate = (up - down) / (2 * _LOG_K_STEP)
    with np.errstate(divide="ignore", invalid="ignore"):
        residual_var = ssr / np.maximum(n - 2, 1)
        var = residual_var / jj * share**2 + d_rate**2 * np.where(
            np.isfinite(log_kapp_var), log_kapp_var, 0.0)
    last = np.where(valid.any(axis=1),
                    t.shape[1] - 1 - np.argmax(valid[:, ::-1], axis=1), -1)
    t_end = np.where(last >= 0, np.take_along_axis(
        np.where(valid, t, np.nan), np.maximum(last, 0)[:, None], axis=1)[:, 0], np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        conversion = closed_form_product(t_end, s0_signal, vapp, kapp_signal) / s0_signal
    return {"rate": rate, "rate_se": np.sqrt(np.maximum(var, 0.0)),
            "residual_sd": np.sqrt(np.maximum(residual_var, 0.0)), "n_points": n,
            "position_end": last, "window_end": t_end, "conversion": conversion}
