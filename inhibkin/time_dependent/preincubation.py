r"""IC50 after several pre-incubation times: the shift, and kinact and KI from it.

The relation implemented
------------------------
Krippendorff et al. (2009, J. Biomol. Screen. 14:913) relate IC50 values measured after
different incubation times to kinact and KI. The limit implemented here is derived as
follows. Enzyme and inhibitor are pre-incubated for a time t without substrate; the first
complex is in rapid equilibrium (KI) and only it inactivates (kinact), so the active enzyme
E_act = E + EI decays as

    dE_act/dt = −kinact·[EI] = −kinact·[I]/(KI + [I])·E_act   ⇒   E_act(t)/E0 = e^(−kobs·t),

kobs = kinact·[I]/(KI + [I]) ([I] ≫ E0, not depleted). Activity is then read after
substrate is added with the reversible complex released (jump dilution, or a read short
against 1/kobs at high substrate), so the percent activity is 100·e^(−kobs·t). Half
activity needs kobs·t = ln 2, i.e. kinact·IC50/(KI + IC50) = ln 2/t, so

    IC50(t) = KI·ln 2/(kinact·t − ln 2),        t > ln 2/kinact.

At long times IC50·t → KI·ln 2/kinact: the IC50 keeps falling in inverse proportion to the
pre-incubation time — the hallmark of an irreversible inhibitor — and no single IC50 is a
property of the compound. Krippendorff et al. also treat inactivation continuing during a
read in the presence of substrate; that case is not implemented here (from memory of the
paper's scope; the relation above is derived, not copied).

Each pre-incubation time's IC50 comes from the four-parameter logistic of
:func:`inhibkin.fit_dose_response` (top 100, bottom free, falling; see :func:`ic50_table`),
so the IC50 is read without assuming the model; log KI and log kinact are then fitted to
the log IC50 values by weighted least squares (weights from each IC50's standard error),
which needs at least three times for a residual degree of freedom. Because a 4PL only
approximates the shape 100·e^(−kobs·t) (on simulated covalent plates its IC50 reads
5–8 % low at long times), the constants the result reports first come from the same
relation before it is solved for the IC50: 100·e^(−kinact·t·[I]/(KI + [I])) fitted to
every well at once (:func:`fit_activity_surface`); the IC50(t) route is reported beside
it. An IC50 that falls by ``shift_factor`` or more from the shortest to the longest time,
with the two intervals apart, is flagged ``ic50_shift`` (time dependence).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..potency.curve import fit_dose_response

__all__ = ["ic50_at_time", "fit_ic50_times", "fit_activity_surface", "ic50_table",
           "ic50_shift"]

LN2 = np.log(2.0)


def ic50_at_time(t, kinact, ki):
    """IC50 after pre-incubation time t (module relation); NaN where t ≤ ln 2/kinact.

    Parameters
    ----------
    t : array_like
        Pre-incubation time (time unit; kinact per the same unit).
    kinact : float
        Inactivation rate constant.
    ki : float
        KI ([I] unit; the IC50 comes out in it).
    """
    t = np.asarray(t, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(kinact * t > LN2, ki * LN2 / (kinact * t - LN2), np.nan)


def _absolute_log10_ic50(top, bottom, log_ic50, hill):
    """log10 of the concentration where the 4PL crosses 50 % activity (NaN if it never does)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        if not bottom < 50.0 < top:
            return np.nan
        return log_ic50 + np.log10((top - bottom) / (50.0 - bottom) - 1.0) / hill


def ic50_table(inhibitor, time, activity, *, level=0.95):
    """One 4PL fit per pre-incubation time; the IC50 is where activity crosses 50 %.

    The 4PL is fitted with top 100 and the bottom free, because after a short
    pre-incubation activity levels off at e^(−kinact·t) rather than at zero; the IC50
    reported is the absolute one (50 % activity, the quantity of the module relation),
    with a Wald interval on the log scale from the fit's covariance (delta method).

    Returns
    -------
    pandas.DataFrame
        One row per time (ascending): time, ic50, ci_low, ci_high, log_ic50_se (natural
        log), n_obs, curve_class, bottom (NaN IC50 when activity never falls to 50 %).
    """
    rows = []
    for value in np.unique(time):
        pick = time == value
        fit = fit_dose_response(inhibitor[pick], activity[pick], fix_top=100.0,
                                direction="falling", level=level, intervals="wald")
        est = fit.estimates
        log10_ic50 = _absolute_log10_ic50(**est)
        se = np.nan
        if np.isfinite(log10_ic50) and fit.covariance is not None:
            theta = np.array([est[name] for name in fit.free])
            grad = np.zeros(len(theta))
            for j in range(len(theta)):
                step = 1e-6 * max(abs(theta[j]), 1.0)
                bumped = dict(est)
                bumped[fit.free[j]] = theta[j] + step
                grad[j] = (_absolute_log10_ic50(**bumped) - log10_ic50) / step
            se = float(np.sqrt(max(grad @ fit.covariance @ grad, 0.0))) * np.log(10.0)
        tq = stats.t.ppf(0.5 + level / 2, max(fit.dof, 1))
        log_ic50 = log10_ic50 * np.log(10.0)
        rows.append({"time": float(value), "ic50": np.exp(log_ic50),
                     "ci_low": np.exp(log_ic50 - tq * se), "ci_high": np.exp(log_ic50 + tq * se),
                     "log_ic50_se": se, "n_obs": fit.n_obs, "curve_class": fit.curve_class,
                     "bottom": est["bottom"]})
    return pd.DataFrame(rows)


def fit_ic50_times(table, *, level=0.95):
    """log kinact and log KI fitted to log IC50(t) (module relation).

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`ic50_table`; rows without a finite IC50 are left out.

    Returns
    -------
    pandas.DataFrame or None
        Rows kinact, ki, kinact_over_ki with estimate, ci_low, ci_high (Wald on the log
        scale, t quantiles); None with fewer than three usable times.
    """
    ok = table[np.isfinite(table["ic50"]) & (table["log_ic50_se"] > 0)]
    if len(ok) < 3:
        return None
    t, log_ic50, se = (ok[c].to_numpy(dtype=float) for c in ("time", "ic50", "log_ic50_se"))
    log_ic50 = np.log(log_ic50)
    floor = np.log(LN2 / t.min()) + 1e-9

    def residual(theta):
        kinact, ki = np.exp(np.clip(theta, -700.0, 700.0))
        return (np.log(ki * LN2) - np.log(kinact * t - LN2) - log_ic50) / se

    # Start from the longest-time asymptote IC50·t ≈ KI·ln2/kinact with kinact well above
    # the floor.
    k0 = max(np.exp(floor) * 4, 1e-300)
    ki0 = np.exp(log_ic50[-1]) * (k0 * t[-1] - LN2) / LN2
    res = optimize.least_squares(residual, [np.log(k0), np.log(ki0)],
                                 bounds=([floor, -np.inf], [np.inf, np.inf]), method="trf",
                                 xtol=1e-12, ftol=1e-12, gtol=1e-12)
    dof = len(t) - 2
    s2 = float(np.sum(res.fun ** 2)) / dof
    return _constants(res.x, s2 * np.linalg.pinv(res.jac.T @ res.jac), dof, level)


def _constants(theta, cov, dof, level):
    tq = stats.t.ppf(0.5 + level / 2, dof)
    rows = {}
    for name, g, meaning in (("kinact", [1, 0], "per time unit"), ("ki", [0, 1], "[I] unit"),
                             ("kinact_over_ki", [1, -1], "per [I] unit per time unit")):
        g = np.array(g, dtype=float)
        value, sd = float(g @ theta), float(np.sqrt(max(g @ cov @ g, 0.0)))
        with np.errstate(over="ignore"):
            rows[name] = {"estimate": np.exp(value), "ci_low": np.exp(value - tq * sd),
                          "ci_high": np.exp(value + tq * sd), "meaning": meaning}
    return pd.DataFrame.from_dict(rows, orient="index")


def fit_activity_surface(inhibitor, time, activity, *, start, level=0.95):
    """kinact and KI from percent activity 100·e^(−kinact·t·[I]/(KI + [I])) of every well.

    Parameters
    ----------
    inhibitor, time, activity : numpy.ndarray
        One entry per well ([I] > 0, pre-incubation time, percent activity).
    start : tuple of float
        Starting (kinact, KI), e.g. from the IC50(t) route.
    level : float

    Returns
    -------
    pandas.DataFrame
        Rows kinact, ki, kinact_over_ki: estimate, ci_low, ci_high, meaning (Wald on the
        log scale, uniform weights, residual variance estimated).
    """
    def residual(theta):
        # Far-off trial steps (a compound without time dependence) must not overflow.
        kinact, ki = np.exp(np.clip(theta, -700.0, 700.0))
        with np.errstate(over="ignore", under="ignore"):
            return 100.0 * np.exp(-kinact * time * inhibitor / (ki + inhibitor)) - activity

    best = None
    for scale in (1.0, 0.3, 3.0):
        res = optimize.least_squares(residual, np.log([start[0] * scale, start[1] * scale]),
                                     method="lm", xtol=1e-12, ftol=1e-12)
        if best is None or res.cost < best.cost:
            best = res
    dof = len(activity) - 2
    cov = float(np.sum(best.fun ** 2)) / dof * np.linalg.pinv(best.jac.T @ best.jac)
    return _constants(best.x, cov, dof, level)


def ic50_shift(table, *, shift_factor=2.0):
    """Fold fall of IC50 from the shortest to the longest time and whether it is flagged.

    Returns
    -------
    ratio : float
        IC50(shortest)/IC50(longest), NaN when either is not finite.
    flagged : bool
        ratio ≥ ``shift_factor`` and the shortest time's lower limit above the longest
        time's upper limit.
    """
    first, last = table.iloc[0], table.iloc[-1]
    ratio = first["ic50"] / last["ic50"] if len(table) > 1 else np.nan
    if not np.isfinite(ratio):
        # Activity that never halves at the shortest time but does at the longest is a
        # shift as well.
        return ratio, bool(np.isnan(first["ic50"]) and np.isfinite(last["ic50"]))
    return float(ratio), bool(ratio >= shift_factor and first["ci_low"] > last["ci_high"])
