"""Is a well's rate falling faster than substrate depletion explains? The time-dependence flag.

For every well the slope over the first third of its reads (early) and over the last
third (late) give the fall of the rate, 1 − r with r = late/early (delta-method standard
error from the two slopes). Wells without inhibitor at the same plate and substrate level
(the references) show how far depletion alone lowers the rate: their median fall per
product formed, scaled by the product the well itself formed, is what depletion explains
for it. Under any rapid-equilibrium (hyperbolic) rate law the relative fall of the rate
per fraction of substrate converted is Km,app/(Km,app + S) ≤ 1, so an inhibitor can at most
raise it from the references' Km/(Km + S) to 1; ``depletion_factor`` (default 2, the same
margin the rates stage uses for its burst flag) covers that and product inhibition. A
well is flagged when its fall exceeds the explained fall by more than ``min_excess`` and
the late slope lies significantly below (1 − explained) × the early one: the contrast
(1 − explained)·early − late over its standard error, a difference of two independent
slopes (Fieller's form; a test on the ratio's delta-method SE is biased towards flagging
wells whose noise raised the early slope), at the one-sided level ``level`` of Student's
t with the Welch–Satterthwaite degrees of freedom of the two terms (strict, because
every well is tested). Wells with no reference at their substrate level, or with an
early slope ≤ 0, are not judged.

A compound's grid holds many wells, so a per-well level alone is not a per-compound one:
72 inhibited wells of a rapid-equilibrium compound, each flagged with probability
``LEVEL`` = 0.1 %, carry at least one false flag 7 % of the time (1 − 0.999⁷²). The
compound-level decision (:func:`flagged_inhibited`, the grid verdict's rule 6) therefore
counts the flagged wells against the binomial tail: a grid is time-dependent when at
least :func:`min_flagged` (n) of its n inhibited wells are flagged, the smallest count
that n wells at the per-well level reach with probability ≤ ``COMPOUND_LEVEL`` (5 %).
That is one well up to 51 inhibited wells, two up to 355, and so on; a slow-binding grid
flags most of its inhibited wells (docs/time_dependent.md), far above either.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .well_flags import carries_flag

__all__ = ["time_dependence", "time_dependent_grid", "flagged_inhibited", "min_flagged",
           "FLAG", "LEVEL", "COMPOUND_LEVEL"]

#: The rates stage's name of the flag (a well's ``flags`` are joined by ";").
FLAG = "time_dependent"

# The rates stage's burst margin: depletion and product inhibition explain at most twice
# the references' fall per product formed.
DEPLETION_FACTOR = 2.0
# A fall of the rate 10 % beyond the explained one is the least worth flagging.
MIN_EXCESS = 0.10
# One-sided level of the test (every well is tested; a depletion curve should almost
# never be flagged).
LEVEL = 1e-3
# The false-alarm rate the compound-level decision keeps to (the quiet rate the time-
# dependence check promises for rapid-equilibrium compounds).
COMPOUND_LEVEL = 0.05


def _window_slopes(t, y, mask):
    """Least-squares slope, its SE (n − 2 degrees of freedom) and the mean signal over
    ``mask`` in every row."""
    n = mask.sum(axis=1)
    tz, yz = np.where(mask, t, 0.0), np.where(mask, y, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mt, my = tz.sum(axis=1) / n, yz.sum(axis=1) / n
        dt = np.where(mask, t - mt[:, None], 0.0)
        dy = np.where(mask, y - my[:, None], 0.0)
        sxx = np.sum(dt * dt, axis=1)
        slope = np.sum(dt * dy, axis=1) / sxx
        resid = np.where(mask, dy - slope[:, None] * dt, 0.0)
        s2 = np.sum(resid ** 2, axis=1) / (n - 2)
        return slope, np.sqrt(s2 / sxx), my


def time_dependence(t, y, valid, *, substrate, inhibitor, group,
                    depletion_factor=DEPLETION_FACTOR, min_excess=MIN_EXCESS, level=LEVEL):
    """Flag wells whose rate falls with time beyond what substrate depletion explains.

    Parameters
    ----------
    t, y : numpy.ndarray
        Times and signals (oriented so that product raises the signal), shape
        (wells, reads), NaN padded.
    valid : numpy.ndarray of bool
        Which entries are reads.
    substrate, inhibitor : numpy.ndarray
        Each well's substrate and inhibitor concentration.
    group : numpy.ndarray
        Each well's plate (any hashable codes); references are sought on the same plate.
    depletion_factor, min_excess, level : float
        Module notes.

    Returns
    -------
    pandas.DataFrame
        One row per well: rate_fall (1 − late/early), explained_fall, fall_se and
        time_dependent (bool; always False for wells without inhibitor or reference).
    """
    rank = np.cumsum(valid, axis=1) - 1
    n = valid.sum(axis=1)[:, None]
    third = np.maximum(n // 3, 3)
    early = valid & (rank < third)
    late = valid & (rank >= n - third)
    v_early, se_early, m_early = _window_slopes(t, y, early)
    v_late, se_late, m_late = _window_slopes(t, y, late)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = v_late / v_early
    fall = 1.0 - ratio
    product = m_late - m_early
    frame = pd.DataFrame({"group": pd.Series(group).astype(str).to_numpy(),
                          "substrate": np.asarray(substrate, dtype=float),
                          "fall": fall, "product": product})
    reference = frame[np.asarray(inhibitor, dtype=float) == 0].groupby(
        ["group", "substrate"])[["fall", "product"]].median()
    reference.columns = ["fall_ref", "product_ref"]
    keyed = frame.join(reference, on=["group", "substrate"])
    with np.errstate(divide="ignore", invalid="ignore"):
        explained = (depletion_factor * np.clip(keyed["fall_ref"].to_numpy(), 0.0, None)
                     * np.clip(product / keyed["product_ref"].to_numpy(), 0.0, None))
        # The test is on the slopes themselves, not on their ratio (Fieller 1954, J. R.
        # Stat. Soc. B 16:175): under "the rate fell by the explained fall only" the late
        # slope is kept = (1 − explained) of the early one, and early·kept − late is a
        # difference of two independent slopes (disjoint windows) whose variance needs no
        # estimate of the ratio. The delta-method SE of the ratio, |r|·√(CV²_late +
        # CV²_early) at the estimated slopes, shrinks exactly when noise has raised the
        # early slope and sunk the late one: on the reads study's mass-action plates
        # (rapid equilibrium, 3 % read noise) it flagged 0.25 % of inhibited wells at
        # the 0.1 % level, nearly all with a late slope below zero.
        kept = np.clip(1.0 - explained, 0.0, None)
        early_var, late_var = (kept * se_early) ** 2, se_late ** 2
        contrast_se = np.sqrt(early_var + late_var)
        z = (kept * v_early - v_late) / contrast_se
        # Each slope's SE comes from its window's n − 2 residual degrees of freedom (two
        # when a window holds 4 reads): z is referred to Student's t with the
        # Welch–Satterthwaite degrees of freedom of the two variances (Satterthwaite 1946,
        # Biometrics Bull. 2:110), not to the normal, which at 11 reads flagged 5.8 % of
        # linear wells at the 0.1 % level.
        df = ((early_var + late_var) ** 2
              / (early_var ** 2 / (early.sum(axis=1) - 2)
                 + late_var ** 2 / (late.sum(axis=1) - 2)))
        # The fall's standard error at the hypothesised ratio (the contrast over the
        # early slope), for display.
        fall_se = contrast_se / np.abs(v_early)
    flagged = ((np.asarray(inhibitor, dtype=float) > 0) & np.isfinite(explained)
               & (v_early > 0) & np.isfinite(z) & (fall - explained > min_excess)
               & (z > stats.t.isf(level, np.where(df > 0, df, np.nan))))
    return pd.DataFrame({"rate_fall": fall, "explained_fall": explained, "fall_se": fall_se,
                         "time_dependent": flagged})


def min_flagged(n_inhibited, *, level=LEVEL, compound_level=COMPOUND_LEVEL) -> int:
    """Flagged wells a grid of ``n_inhibited`` inhibited wells needs to be time-dependent.

    The smallest k ≥ 1 with P(Binomial(n, level) ≥ k) ≤ ``compound_level`` (module notes).
    """
    n = max(int(n_inhibited), 0)
    k = 1
    while stats.binom.sf(k - 1, n, level) > compound_level:
        k += 1
    return k


def flagged_inhibited(flags, inhibitor) -> tuple[int, int]:
    """How many inhibited wells carry the ``time_dependent`` flag, and how many there are.

    The count is the one a compound-level decision reads: it is 0 when fewer than
    :func:`min_flagged` of the inhibited wells are flagged, as many flags as wells at
    the per-well level would raise by chance over the whole grid (module notes).

    Parameters
    ----------
    flags : array-like of str
        Each well's flags as the rates stage writes them (names joined by ``;``; missing
        values are no flags).
    inhibitor : array-like of float
        Each well's inhibitor concentration (any unit; only > 0 matters).

    Returns
    -------
    (int, int)
        Flagged inhibited wells, inhibited wells.
    """
    inhibited = pd.to_numeric(pd.Series(np.asarray(inhibitor)), errors="coerce").to_numpy() > 0
    marked = carries_flag(flags, FLAG)
    n_flagged, n_inhibited = int((inhibited & marked).sum()), int(inhibited.sum())
    return (n_flagged if n_flagged >= min_flagged(n_inhibited) else 0), n_inhibited


def time_dependent_grid(table, *, inhibitor="inhibitor", flags="flags") -> bool:
    """Whether a rates table's inhibited wells carry the ``time_dependent`` flag: at least
    :func:`min_flagged` of them (one, up to 51 inhibited wells).

    The hook for a grid fit: a grid built on such wells violates the steady-state
    assumption, so its verdict says ``time_dependent`` instead of reporting a Ki
    (:func:`inhibkin.mechanism.fit.fit_mechanisms` and :func:`inhibkin.fit_campaign` ask it).

    Parameters
    ----------
    table : pandas.DataFrame
        A rates table (``InitialRates.table``); without a ``flags`` column, False.
    inhibitor, flags : str
        Column names.
    """
    if flags not in table.columns or inhibitor not in table.columns:
        return False
    return flagged_inhibited(table[flags], table[inhibitor])[0] > 0
