"""Lack of fit: does the fitted law describe the grid, or only approximate it?

Two tests, written once over padded (problems, points) arrays with a mask; the lmfit
path calls them with one problem.

- With replicates (some (S, I) cell measured more than once): the pure-error F-test
  (Draper & Smith, *Applied Regression Analysis*, 3rd ed., section 2.1). The residual sum
  of squares splits into pure error, the scatter of replicates about their cell means
  (n − m degrees of freedom for m cells), and lack of fit, the rest (m − k degrees of
  freedom for k parameters); F = (SS_lof/(m − k)) / (SS_pe/(n − m)).
- Without replicates: a runs test of the residual signs along S within each inhibitor
  level (Wald & Wolfowitz 1940, Ann. Math. Stat. 11:147): a law that misses the shape
  leaves long runs of one sign. Runs are counted per level and their expected number
  and variance (under random signs, given the counts of each sign) summed over levels;
  the one-sided p-value of too few runs is read from the normal approximation.

Weighted residuals (w·(v − fitted)) go in, so both tests read the same scale the fit
minimised. :func:`residual_pattern` names what the residuals do, for the verdict.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

__all__ = ["LACK_OF_FIT_ALPHA", "pure_error_test", "runs_test", "lack_of_fit",
           "residual_pattern", "FALLS_AT_HIGH_S", "LEVELS_OFF", "ALONG_S"]

#: Default level of the lack-of-fit test (an option of ``fit_mechanisms``): stricter than
#: the nested tests' 0.05, because a failed test sends a classical truth to the extended
#: models; the false-alarm rate on classical truths is measured in
#: benchmarks/lack_of_fit_study.py.
LACK_OF_FIT_ALPHA = 0.01


def pure_error_test(residuals, s, i, mask, n_params):
    """Pure-error lack-of-fit F-test of every problem.

    Parameters
    ----------
    residuals, s, i : numpy.ndarray, shape (B, n)
        Weighted residuals, substrate and inhibitor levels (padded).
    mask : numpy.ndarray of bool, shape (B, n)
        True for real points.
    n_params : int
        Parameters of the fitted law.

    Returns
    -------
    f_value, p_value : numpy.ndarray, shape (B,)
        NaN where the grid has no replicates or no more cells than parameters.
    df_lack, df_pure : numpy.ndarray of int, shape (B,)
    """
    r = np.where(mask, residuals, 0.0)
    same = ((s[:, :, None] == s[:, None, :]) & (i[:, :, None] == i[:, None, :])
            & mask[:, :, None] & mask[:, None, :])
    size = same.sum(axis=2)
    cell_mean = np.einsum("bij,bj->bi", same, r) / np.maximum(size, 1)
    pure = np.sum(np.where(mask, (r - cell_mean) ** 2, 0.0), axis=1)
    total = np.sum(r * r, axis=1)
    n_obs = mask.sum(axis=1)
    n_cells = np.sum(np.where(mask, 1.0 / np.maximum(size, 1), 0.0), axis=1).round()
    df_pure = (n_obs - n_cells).astype(int)
    df_lack = (n_cells - n_params).astype(int)
    valid = (df_pure > 0) & (df_lack > 0) & (pure > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f_value = np.where(valid, (np.maximum(total - pure, 0.0) / df_lack)
                           / (pure / df_pure), np.nan)
        p_value = np.where(valid, stats.f.sf(f_value, np.maximum(df_lack, 1),
                                             np.maximum(df_pure, 1)), np.nan)
    return f_value, p_value, df_lack, df_pure


def _runs_one(r, s, i):
    """Observed runs, their expectation and variance summed over the inhibitor levels."""
    observed = expected = variance = 0.0
    for level in np.unique(i):
        at = i == level
        signs = np.sign(r[at][np.argsort(s[at], kind="stable")])
        signs = signs[signs != 0]
        n = signs.size
        n_pos, n_neg = np.sum(signs > 0), np.sum(signs < 0)
        if n < 2 or n_pos == 0 or n_neg == 0:
            continue
        observed += 1 + np.sum(signs[1:] != signs[:-1])
        product = 2.0 * n_pos * n_neg
        expected += 1 + product / n
        variance += product * (product - n) / (n * n * (n - 1))
    return observed, expected, variance


def runs_test(residuals, s, i, mask):
    """Runs test of the residual signs along S within each inhibitor level.

    Parameters
    ----------
    residuals, s, i, mask : numpy.ndarray, shape (B, n)
        As :func:`pure_error_test`.

    Returns
    -------
    z_value, p_value : numpy.ndarray, shape (B,)
        Standardised number of runs (negative: fewer runs than chance) and the one-sided
        p-value of so few runs; NaN where no level has both signs.
    """
    b = residuals.shape[0]
    z_value = np.full(b, np.nan)
    for c in range(b):
        keep = mask[c]
        observed, expected, variance = _runs_one(residuals[c, keep], s[c, keep], i[c, keep])
        if variance > 0:
            z_value[c] = (observed - expected) / np.sqrt(variance)
    return z_value, stats.norm.cdf(z_value)


def lack_of_fit(residuals, s, i, mask, n_params):
    """The lack-of-fit test each problem's design allows: pure error with replicates,
    else the runs test.

    Returns
    -------
    method : numpy.ndarray of str, shape (B,)
        ``"pure error"`` or ``"runs"``.
    statistic, p_value : numpy.ndarray, shape (B,)
        F (pure error) or z (runs), and its p-value (NaN when neither test applies).
    """
    f_value, p_pure, _, _ = pure_error_test(residuals, s, i, mask, n_params)
    use_pure = np.isfinite(p_pure)
    z_value, p_runs = runs_test(residuals, s, i, mask)
    method = np.where(use_pure, "pure error", "runs")
    return method, np.where(use_pure, f_value, z_value), np.where(use_pure, p_pure, p_runs)


#: The residuals' patterns in words (:func:`residual_pattern`).
FALLS_AT_HIGH_S = "rates fall at the highest substrate levels"
LEVELS_OFF = "inhibition levels off below full"
ALONG_S = "the residuals run in patterns along S"


#: The levelling-off pattern is named only when the top level's mean residual stands
#: this many standard errors above the middle levels' (residual scatter of the whole
#: grid): a classical grid that fails the lack-of-fit test by chance at 0.01 has no
#: pattern worth a name.
LEVELS_OFF_Z = 2.0


def _top_against_middle(r, x):
    """Mean residual at the highest level of ``x``, at the levels just below its top
    third, and the standard error of their difference (None with fewer than three
    levels)."""
    levels = np.unique(x)
    if levels.size < 3:
        return None
    at_top = x == levels[-1]
    middle = levels[: max(1, (2 * levels.size) // 3)]
    at_middle = np.isin(x, middle[-max(1, middle.size // 2):])
    se = np.std(r, ddof=1) * np.sqrt(1 / at_top.sum() + 1 / at_middle.sum())
    return np.mean(r[at_top]), np.mean(r[at_middle]), se


def residual_pattern(residuals, s, mask, i=None) -> np.ndarray:
    """What the residuals of each problem do, in words, for the verdict's reason.

    "rates fall at the highest substrate levels" when the residuals at the highest
    substrate level are on average negative while those of the level below the top
    third are positive (the shape substrate inhibition leaves on a classical fit);
    else, with the inhibitor levels ``i`` (same shape as ``s``), "inhibition levels off
    below full" when the residuals at the highest non-zero inhibitor level are on average
    positive while those of the inhibited levels below its top third are negative (a
    classical law drives the rate to zero as I grows; a partial inhibitor's rate levels
    off, so the fit runs below the data at the top and above them in the middle), the
    difference at least ``LEVELS_OFF_Z`` standard errors;
    otherwise "the residuals run in patterns along S".
    """
    out = np.full(residuals.shape[0], ALONG_S, dtype=object)
    for c in range(residuals.shape[0]):
        keep = mask[c]
        r = residuals[c, keep]
        along_s = _top_against_middle(r, s[c, keep])
        if along_s is not None and along_s[0] < 0 < along_s[1]:
            out[c] = FALLS_AT_HIGH_S
            continue
        if i is None:
            continue
        inhibited = i[c, keep] > 0
        along_i = _top_against_middle(r[inhibited], i[c, keep][inhibited])
        if (along_i is not None and along_i[1] < 0 < along_i[0]
                and along_i[0] - along_i[1] > LEVELS_OFF_Z * along_i[2]):
            out[c] = LEVELS_OFF
    return out
