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
:func:`inhibkin.fit_dose_response` (top 100, bottom 0, falling), so the IC50 is read
without assuming the model; log KI and log kinact are then fitted to the log IC50 values by
weighted least squares (weights from each IC50's standard error), which needs at least
three times for a residual degree of freedom. An IC50 that falls by ``shift_factor`` or
more from the shortest to the longest time, with the two intervals apart, is flagged
``ic50_shift`` (time dependence).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..potency import fit_dose_response

__all__ = ["ic50_at_time", "fit_ic50_times", "ic50_table"]

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


def ic50_table(inhibitor, time, activity, *, level=0.95):
    """One 4PL fit per pre-incubation time.

    Returns
    -------
    pandas.DataFrame
        One row per time (ascending): time, ic50, ci_low, ci_high, log_ic50_se (natural
        log), n_obs, curve_class, ic50_bound.
    """
    rows = []
    for value in np.unique(time):
        pick = time == value
        fit = fit_dose_response(inhibitor[pick], activity[pick], fix_top=100.0,
                                fix_bottom=0.0, direction="falling", level=level)
        p = fit.params
        rows.append({"time": float(value), "ic50": fit.ic50,
                     "ci_low": float(p.loc["ic50", "ci_low"]),
                     "ci_high": float(p.loc["ic50", "ci_high"]),
                     "log_ic50_se": float(p.loc["log_ic50", "se"]) * np.log(10.0),
                     "n_obs": fit.n_obs, "curve_class": fit.curve_class,
                     "ic50_bound": fit.ic50_bound})
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
        kinact, ki = np.exp(theta)
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
    cov = s2 * np.linalg.pinv(res.jac.T @ res.jac)
    tq = stats.t.ppf(0.5 + level / 2, dof)
    rows = {}
    for name, g, meaning in (("kinact", [1, 0], "per time unit"), ("ki", [0, 1], "[I] unit"),
                             ("kinact_over_ki", [1, -1], "per [I] unit per time unit")):
        g = np.array(g, dtype=float)
        value, sd = float(g @ res.x), float(np.sqrt(max(g @ cov @ g, 0.0)))
        rows[name] = {"estimate": np.exp(value), "ci_low": np.exp(value - tq * sd),
                      "ci_high": np.exp(value + tq * sd), "meaning": meaning}
    return pd.DataFrame.from_dict(rows, orient="index")


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
        # The earliest IC50 may be a bound above the range: a shift it is, when the
        # latest is a measured IC50 below the tested range's top.
        early_open = isinstance(first["ic50_bound"], str) and first["ic50_bound"].startswith(">")
        return ratio, bool(early_open and np.isfinite(last["ic50"]))
    return float(ratio), bool(ratio >= shift_factor and first["ci_low"] > last["ci_high"])
