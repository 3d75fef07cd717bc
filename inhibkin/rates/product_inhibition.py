"""The product-inhibition flag: do uninhibited wells bend faster than depletion explains?

A product that binds the enzyme (E + P ⇌ EP) slows every well as it accumulates, most of
all the wells without inhibitor, which form the most product. Linear-window rates then
read the rate at the product present in the window, so the grid fit sees km·(1 + P̄/Kp)
and Ki·(1 + P̄/Kp) (competitive product inhibition, rapid equilibrium) with intervals
that exclude the truth. The test here looks at the one thing depletion alone cannot do.

For a rate that depends on the substrate hyperbolically, v = V·S/(K + S) with any V and
K, the relative fall of the rate per unit of substrate converted is

    −(dv/dP)/v = K/(S·(K + S)) < 1/S

(substrate depletion alone: dS = −dP; Michaelis–Menten algebra, `common practice`), so
the fall per *fraction* of substrate converted, −(dv/dt)·S0/v², is below 1 whatever K
is. Competitive product inhibition adds K/(Kp·(K + S)) per unit product, which exceeds
the bound when Kp < K. Per well, a quadratic over the early reads, y = a + b·t + c·t²
(reads up to ``MAX_CONVERSION`` of the substrate converted), gives v = b and
dv/dt = 2c at t = 0; the contrast T = −2c − b²/S0 (S0 in signal units) is ≤ 0 under the
bound and positive when the rate falls faster. Its standard error comes from the
quadratic's covariance (delta method; T is linear in c, which carries nearly all of its
variance). The wells without inhibitor of one plate are pooled by Stouffer's sum of their z =
T/se (Stouffer et al. 1949; `common practice` for independent one-sided tests); the
plate is flagged when the sum exceeds the one-sided normal quantile of ``LEVEL``. Every
well of a flagged plate carries the flag: its rates were all read at product levels
that slow the enzyme. An enzyme that loses activity during the reads bends the curves
the same way and is flagged too (the reason names both); the test cannot tell them apart.

The bound is conservative (under plain depletion the expected z is negative, and more
so at high S): on 60 classical plates of tests/grid_ode.py the plate's sum had mean
−0.23 and standard deviation 1.03 at 3 % read noise, −1.01 and 1.03 at 0.5 %
(measured), so the level holds. The test has little power when the curvature of a well is poorly
determined: on the mass-action plates of docs/lack_of_fit.md (3 % read noise, ≤ 10 %
conversion) a product inhibitor with Kp = Km/10 is seldom flagged; with Kp = Km/100 it
is flagged on most plates. What the flag cannot see it cannot warn about; the remedies for
a suspected product inhibitor are initial slopes (``method="curve"``), shorter reads or a
progress-curve fit with the product's constant (their figures in docs/lack_of_fit.md).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .well_flags import carries_flag

__all__ = ["product_inhibition", "product_inhibited_grid", "FLAG", "LEVEL",
           "MAX_CONVERSION", "REASON"]

#: The rates stage's name of the flag (a well's ``flags`` are joined by ";").
FLAG = "product_inhibition"
#: One-sided level of the plate's test (one test per plate; a false flag puts a warning
#: on every compound of the plate).
LEVEL = 1e-3
#: Reads beyond this fraction of the substrate converted are left out of the quadratic
#: (past it the curvature of depletion itself changes along the curve).
MAX_CONVERSION = 0.30
# Every uninhibited well counts, whatever its slope: choosing wells by their fitted slope
# would choose by noise too, and the slope and curvature of one quadratic are correlated
# (wells picked for a slope raised by noise carry a curvature lowered by it, which the
# contrast reads as a fall; on the substrate-inhibition plates of docs/lack_of_fit.md a
# cut at 3 standard errors flagged 10 % of plates). An inactive well has b ≈ 0 and a
# z centred on zero: it dilutes the sum, it does not bias it.
#: What a grid verdict built on flagged wells says first in its reason.
REASON = ("product inhibition: the uninhibited wells' rates fall faster than substrate "
          "depletion explains (product binding the enzyme, or the enzyme losing activity "
          "during the reads), so the rates were not read at the initial conditions and km "
          "and the inhibition constants read high — use initial slopes "
          "(method=\"curve\"), read for a shorter time (less product in the window), or "
          "fit the progress curves with the product's constant")

# Fewest usable reads for a quadratic with a residual variance worth the name.
_MIN_READS = 6


def _quadratic(t, y, mask):
    """Slope b and curvature c of y = a + b·(t − t0) + c·(t − t0)² over ``mask`` in every
    row (t0 its first read), and the covariance of (b, c) from the residual variance
    (n − 3 degrees of freedom)."""
    n = mask.sum(axis=1)
    # Shift and scale time per row for a well-conditioned fit.
    any_read = mask.any(axis=1, keepdims=True)
    t0 = np.where(any_read, np.min(np.where(mask, t, np.inf), axis=1, keepdims=True), 0.0)
    span = np.where(any_read, np.max(np.where(mask, t, -np.inf), axis=1, keepdims=True) - t0,
                    0.0)
    u = np.where(mask, (t - t0) / np.where(span > 0, span, 1.0), 0.0)
    design = np.stack([mask * 1.0, u, u * u], axis=-1)
    yz = np.where(mask, y, 0.0)
    gram = np.einsum("wrk,wrl->wkl", design, design)
    rhs = np.einsum("wrk,wr->wk", design, yz)
    ok = (n >= _MIN_READS) & (np.abs(np.linalg.det(gram)) > 1e-12)
    gram = np.where(ok[:, None, None], gram, np.eye(3))
    inverse = np.linalg.inv(gram)
    coef = np.einsum("wkl,wl->wk", inverse, rhs)
    resid = np.where(mask, yz - np.einsum("wrk,wk->wr", design, coef), 0.0)
    s2 = np.sum(resid ** 2, axis=1) / np.maximum(n - 3, 1)
    cov = inverse * s2[:, None, None]
    # Back to time units, at the first read used.
    h = span[:, 0]
    b, c = coef[:, 1] / h, coef[:, 2] / h ** 2
    scale = np.stack([1 / h, 1 / h ** 2], axis=1)
    cov_bc = cov[:, 1:, 1:] * scale[:, :, None] * scale[:, None, :]
    return b, c, cov_bc, ok


def product_inhibition(t, y, valid, *, s0_signal, inhibitor, group, level=LEVEL,
                       max_conversion=MAX_CONVERSION, usable=None) -> pd.DataFrame:
    """Flag the wells of plates whose uninhibited wells' rates fall faster than substrate
    depletion explains.

    Parameters
    ----------
    t, y : numpy.ndarray
        Times and signals (oriented so that product raises the signal, blanks
        subtracted), shape (wells, reads), NaN padded; reads in time order.
    valid : numpy.ndarray of bool
        Which entries are reads.
    s0_signal : numpy.ndarray
        Each well's substrate in signal units (NaN when unknown: the well is not used).
    inhibitor : numpy.ndarray
        Each well's inhibitor concentration (only = 0 matters).
    group : numpy.ndarray
        Each well's plate (any hashable codes); one test per plate.
    level, max_conversion : float
        Module notes.
    usable : numpy.ndarray of bool, optional
        Wells that may enter the test (the rates stage leaves out failed wells).

    Returns
    -------
    pandas.DataFrame
        One row per well: fall_excess (−2c − b²/S0, signal per time²; NaN for wells not
        used), fall_z (its z), plate_z (the plate's Stouffer sum; NaN without a usable
        uninhibited well) and product_inhibition (bool, every well of a flagged plate).
    """
    s0 = np.asarray(s0_signal, dtype=float)
    uninhibited = np.asarray(inhibitor, dtype=float) == 0
    y_first = np.where(valid, y, np.nan)[np.arange(len(y)), np.argmax(valid, axis=1)] \
        if y.size else np.full(len(y), np.nan)
    with np.errstate(invalid="ignore"):
        # Product formed by each read, against the first read (the noise of that one read
        # only shifts where the cut falls).
        early = valid & ((y - y_first[:, None]) <= max_conversion * s0[:, None])
        early &= np.cumprod(early | ~valid, axis=1).astype(bool)
    b, c, cov, ok = _quadratic(t, y, early)
    with np.errstate(divide="ignore", invalid="ignore"):
        excess = -2 * c - b ** 2 / s0
        # dT/db = −2b/S0, dT/dc = −2.
        grad = np.stack([-2 * b / s0, np.full_like(b, -2.0)], axis=1)
        se = np.sqrt(np.einsum("wi,wij,wj->w", grad, cov, grad))
        z = excess / se
    used = uninhibited & ok & np.isfinite(s0) & (s0 > 0) & np.isfinite(z)
    if usable is not None:
        used &= np.asarray(usable, dtype=bool)
    frame = pd.DataFrame({"group": pd.Series(group).astype(str).to_numpy(),
                          "z": np.where(used, z, np.nan)})
    pooled = frame.groupby("group")["z"].agg(lambda x: x.sum() / np.sqrt(x.count())
                                             if x.count() else np.nan)
    plate_z = frame["group"].map(pooled).to_numpy(dtype=float)
    flagged = np.isfinite(plate_z) & (plate_z > stats.norm.isf(level))
    return pd.DataFrame({"fall_excess": np.where(used, excess, np.nan),
                         "fall_z": np.where(used, z, np.nan), "plate_z": plate_z,
                         "product_inhibition": flagged})


def product_inhibited_grid(table, *, flags="flags") -> bool:
    """Whether a rates table's wells carry the ``product_inhibition`` flag.

    The hook for a grid fit (:func:`inhibkin.mechanism.fit.with_rate_flags`): the
    verdict keeps its name, its reason starts with :data:`REASON` and the fit and its
    ranking row carry the flag, so no constant read from such rates goes unwarned.

    Parameters
    ----------
    table : pandas.DataFrame or array-like of str
        A rates table (``InitialRates.table``; without a ``flags`` column, False) or
        its flags column.
    flags : str
        Column name.
    """
    if isinstance(table, pd.DataFrame):
        if flags not in table.columns:
            return False
        table = table[flags]
    return bool(carries_flag(table, FLAG).any())
