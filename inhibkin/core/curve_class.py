"""Curve classes: what a fitted dose-response curve shows before its IC50 is believed.

A 4PL can be fitted to any set of points, flat ones included; its IC50 means something
only when the data show a curve. Every fitted curve is therefore put in one class
(after the curve-class idea for quantitative high-throughput screens of Inglese et
al. 2006, PNAS 103:11473; the rules and thresholds below are this package's own):

``complete``
    activity is removed, the trend is real, and both plateaus are seen within the
    tested range;
``incomplete``
    activity is removed and the trend is real (or activity is already removed at
    the lowest concentration), but one plateau lies outside the tested range;
``single_point``
    only the highest tested concentration shows activity;
``inactive``
    no activity worth the name: the curve removes less than ``min_efficacy`` of the
    control window by the highest concentration, or its trend is not distinguishable
    from a flat line (and activity is not already removed at the lowest
    concentration). For activity, which an inhibitor can only lower
    (``falling_only=True``, the potency and campaign path), a curve that *rises* with
    concentration removes nothing: activity above full activity is activation, not
    inhibition, so it is inactive however large the rise, with that reason.

The quantities, all read off the fitted curve at the tested concentrations:

efficacy
    |full − y(highest)| / (full − zero): the fraction of the control window (full
    activity ``full``, zero activity ``zero``; 100 and 0 for percent activity from
    plate controls) that the curve has moved by the highest concentration (with
    ``falling_only``, (full − y(highest)) / (full − zero), floored at 0: only a move
    towards zero activity counts). Without a
    full-activity level the curve's own value at the lowest concentration stands in
    for it, and a curve already at full effect there cannot be told from a flat one.
trend
    the extra sum-of-squares F-test of the fitted curve against a flat line (the
    weighted mean): p below ``flat_alpha`` says the curve explains the points better
    than no curve at all — the fit-quality criterion.
plateaus
    with g(x) = 1/(1 + 10**(hill·(x − log_ic50))) the fraction of the way from bottom
    to top, the top plateau is seen when g reaches ``plateau_fraction`` at one end of
    the tested range, the bottom plateau when g falls to 1 − ``plateau_fraction`` at
    the other.
at the limit
    |hill| within :data:`AT_LIMIT_RTOL` of the bound the fit imposed (20 on the lmfit
    path): the slope was stopped by the bound, not set by the data.

The class is decided on the fitted curve; what an *inactive* curve reports is read off
the data instead (:func:`observed_efficacy`): the mean response at the highest tested
concentration against the control window, with its standard error. A flat curve's 4PL
fit has several minima of nearly equal SSR, so its value at the highest concentration
depends on which optimiser ran and from where; the mean of the points there does not,
and the lmfit path and the batched engine report the same numbers.

The rule is written once, vectorised over (curves, points) with a mask; the lmfit path
(:mod:`inhibkin.potency.curve`) classifies a batch of one, the batched engine
(:mod:`inhibkin.engine.dose_response`) a batch of many.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import DataError, Problem
from .logistic import logistic4

__all__ = ["CURVE_CLASSES", "CurveClassRules", "CurveClasses", "classify_curves",
           "observed_efficacy", "AT_LIMIT_RTOL"]

#: The classes, from the most to the least informative curve.
CURVE_CLASSES = ("complete", "incomplete", "single_point", "inactive")

#: A parameter within this fraction of a fitting bound is taken to be at the bound.
AT_LIMIT_RTOL = 1e-3


@dataclass(frozen=True)
class CurveClassRules:
    """Thresholds of the curve classes (module docstring); all are options.

    Attributes
    ----------
    min_efficacy : float
        Fraction of the control window a curve must remove by the highest concentration
        to count as active (default 0.25: five standard deviations of a well read with
        5 % noise, so noise alone seldom reaches it, while a partial inhibitor that
        removes a third of the activity still counts).
    plateau_fraction : float
        A plateau is seen when the curve has gone this fraction of the way to it
        within the tested range (default 0.8).
    flat_alpha : float
        Significance level of the F-test of the curve against a flat line (default
        0.01).
    """

    min_efficacy: float = 0.25
    plateau_fraction: float = 0.8
    flat_alpha: float = 0.01

    def __post_init__(self):
        for name, low, high in (("min_efficacy", 0.0, 1.0), ("plateau_fraction", 0.5, 1.0),
                                ("flat_alpha", 0.0, 1.0)):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and low < value < high):
                raise DataError(Problem(name, None, value, f"must be a number between "
                                                           f"{low:g} and {high:g} (exclusive)"))


#: The default thresholds.
DEFAULT_RULES = CurveClassRules()


@dataclass(frozen=True)
class CurveClasses:
    """The class of every curve of a batch and the quantities that decided it.

    Attributes
    ----------
    curve_class : numpy.ndarray of str, shape (B,)
        One of :data:`CURVE_CLASSES`.
    efficacy : numpy.ndarray, shape (B,)
        Fraction of the control window removed by the highest tested concentration.
    efficacy_next : numpy.ndarray, shape (B,)
        The same at the second-highest tested concentration.
    efficacy_lowest : numpy.ndarray, shape (B,)
        The same at the lowest tested concentration (0 without a full-activity level).
    p_flat : numpy.ndarray, shape (B,)
        p-value of the F-test of the curve against a flat line.
    top_seen, bottom_seen : numpy.ndarray of bool, shape (B,)
        Whether each plateau is reached within the tested range.
    hill_at_limit : numpy.ndarray of bool, shape (B,)
    below_range : numpy.ndarray of bool, shape (B,)
        Active curves whose activity is already removed at the lowest concentration
        with little change across the range: the midpoint lies below the range.
    x_min, x_next, x_max : numpy.ndarray, shape (B,)
        Lowest, second-highest and highest tested log10 concentration.
    reason : numpy.ndarray of str, shape (B,)
        The class in words (an inactive curve's from the data, :func:`observed_efficacy`).
    observed_efficacy, observed_efficacy_se : numpy.ndarray, shape (B,)
        The fraction of the control window removed by the highest concentration read
        off the data, and its standard error (:func:`observed_efficacy`).
    """

    curve_class: np.ndarray
    efficacy: np.ndarray = field(repr=False)
    efficacy_next: np.ndarray = field(repr=False)
    efficacy_lowest: np.ndarray = field(repr=False)
    p_flat: np.ndarray = field(repr=False)
    top_seen: np.ndarray = field(repr=False)
    bottom_seen: np.ndarray = field(repr=False)
    hill_at_limit: np.ndarray = field(repr=False)
    below_range: np.ndarray = field(repr=False)
    x_min: np.ndarray = field(repr=False)
    x_next: np.ndarray = field(repr=False)
    x_max: np.ndarray = field(repr=False)
    reason: np.ndarray = field(repr=False)
    observed_efficacy: np.ndarray = field(repr=False)
    observed_efficacy_se: np.ndarray = field(repr=False)

    def __len__(self) -> int:
        return len(self.curve_class)

    def subset(self, rows) -> CurveClasses:
        """The classes of the curves ``rows`` (an index array or slice), in that order."""
        return CurveClasses(**{f.name: getattr(self, f.name)[rows] for f in fields(self)})

    def to_frame(self) -> pd.DataFrame:
        """One row per curve."""
        return pd.DataFrame({name: getattr(self, name) for name in (
            "curve_class", "efficacy", "efficacy_next", "efficacy_lowest", "p_flat",
            "top_seen", "bottom_seen", "hill_at_limit", "below_range", "observed_efficacy",
            "observed_efficacy_se", "reason")})

    def summary(self) -> str:
        counts = pd.Series(self.curve_class).value_counts()
        return f"{len(self)} curves: " + ", ".join(
            f"{int(counts.get(c, 0))} {c}" for c in CURVE_CLASSES)

    def _repr_html_(self) -> str:
        return f"<pre>{self.summary()}</pre>"


def _per_curve(value, n_batch, default):
    if value is None:
        return np.full(n_batch, default, dtype=float)
    return np.broadcast_to(np.asarray(value, dtype=float), (n_batch,)).astype(float)


def _mean_at(x, y, mask, at):
    """Mean, standard error of the mean and count of the points of each curve at ``at``."""
    here = mask & (x == at[:, None])
    n = here.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.sum(np.where(here, y, 0.0), axis=1) / n
        spread = np.sum(np.where(here, (y - mean[:, None]) ** 2, 0.0), axis=1)
        se = np.sqrt(spread / (n - 1) / n)
    return mean, np.where(n > 1, se, np.nan), n


def observed_efficacy(x, y, mask, *, full_activity=None, zero_activity=0.0,
                      falling_only=False):
    """The efficacy of every curve of a batch read off the data, not off a fit.

    The mean response at the highest tested concentration (its replicates) against the
    control window: (full − mean) / (full − zero), floored at 0 with ``falling_only``
    (only a move towards zero activity counts) and taken as a magnitude otherwise, the
    same reading as the fitted curve's efficacy of :func:`classify_curves`. Without a
    full-activity level the mean at the lowest concentration stands in for it, and its
    standard error enters the efficacy's.

    Parameters
    ----------
    x, y, mask : array_like, shape (B, n)
        log10 concentrations, responses and real points, as for :func:`classify_curves`.
    full_activity, zero_activity : float or array_like of shape (B,), optional
        Response at full and at zero activity (100 and 0 for percent activity).
    falling_only : bool
        The responses are activity, which an inhibitor can only lower.

    Returns
    -------
    efficacy : numpy.ndarray, shape (B,)
        Fraction of the control window removed (0 without a usable window).
    std_err : numpy.ndarray, shape (B,)
        Its standard error from the replicates' spread (NaN with one point there).
    rise : numpy.ndarray, shape (B,)
        (mean at the highest − mean at the lowest concentration) / window: how far the
        activity climbs across the range (0 without a usable window).
    n_points : numpy.ndarray of int, shape (B,)
        Points at the highest concentration.
    """
    x = np.atleast_2d(np.asarray(x, dtype=float))
    y = np.asarray(y, dtype=float).reshape(x.shape)
    mask = np.asarray(mask, bool).reshape(x.shape) & np.isfinite(x) & np.isfinite(y)
    n_batch = x.shape[0]
    x_min = np.where(mask, x, np.inf).min(axis=1)
    x_max = np.where(mask, x, -np.inf).max(axis=1)
    high, high_se, n_high = _mean_at(x, y, mask, x_max)
    low, low_se, _ = _mean_at(x, y, mask, x_min)
    zero = _per_curve(zero_activity, n_batch, 0.0)
    if full_activity is None:
        full, full_se = low, low_se
    else:
        full, full_se = _per_curve(full_activity, n_batch, np.nan), np.zeros(n_batch)
    window = full - zero
    valid = np.isfinite(window) & (window > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        moved = full - high
        efficacy = np.clip(moved, 0.0, None) if falling_only else np.abs(moved)
        efficacy = efficacy / window
        std_err = np.sqrt(high_se ** 2 + full_se ** 2) / window
        rise = (high - low) / window
    efficacy = np.where(valid & np.isfinite(efficacy), efficacy, 0.0)
    std_err = np.where(valid, std_err, np.nan)
    rise = np.where(valid & np.isfinite(rise), rise, 0.0)
    return efficacy, std_err, rise, n_high


def classify_curves(x, y, mask, estimate, *, weights=None, n_free=4, full_activity=None,
                    zero_activity=0.0, hill_limit=np.inf, falling_only=False,
                    rules: CurveClassRules = DEFAULT_RULES) -> CurveClasses:
    """The class of every fitted 4PL curve of a batch.

    Parameters
    ----------
    x : array_like, shape (B, n)
        log10 of the concentrations.
    y : array_like, shape (B, n)
        Responses.
    mask : array_like of bool, shape (B, n)
        True for real points.
    estimate : array_like, shape (B, 4)
        top, bottom, log_ic50, hill of each fit (the order of
        :data:`inhibkin.core.logistic.PARAM_NAMES`).
    weights : array_like, shape (B, n), optional
        Residual multipliers 1/σ used by the fit (default 1).
    n_free : int or array_like of shape (B,)
        Parameters the fit estimated (4 minus those held fixed).
    full_activity, zero_activity : float or array_like of shape (B,), optional
        Response at full and at zero activity (100 and 0 for percent activity from
        plate controls). Without ``full_activity`` each curve's value at its lowest
        concentration is used.
    hill_limit : float
        The bound the fit put on |hill| (``inf`` when none).
    falling_only : bool
        The responses are activity, which an inhibitor can only lower: a curve that
        rises with concentration shows no inhibition and is ``inactive`` (module
        docstring). False (any direction counts) for a readout that may rise.
    rules : CurveClassRules

    Returns
    -------
    CurveClasses
    """
    x = np.atleast_2d(np.asarray(x, dtype=float))
    y = np.asarray(y, dtype=float).reshape(x.shape)
    mask = np.asarray(mask, bool).reshape(x.shape) & np.isfinite(x) & np.isfinite(y)
    theta = np.asarray(estimate, dtype=float).reshape(x.shape[0], 4)
    w = np.ones(x.shape) if weights is None else np.asarray(weights, float).reshape(x.shape)
    n_batch = x.shape[0]
    top, bottom, log_ic50, hill = (theta[:, j] for j in range(4))

    def curve(at):
        return logistic4(at, top, bottom, log_ic50, hill)

    x_min = np.where(mask, x, np.inf).min(axis=1)
    x_max = np.where(mask, x, -np.inf).max(axis=1)
    x_next = np.where(mask & (x < x_max[:, None]), x, -np.inf).max(axis=1)
    x_next = np.where(np.isfinite(x_next), x_next, x_min)
    with np.errstate(invalid="ignore", over="ignore"):
        y_low, y_next, y_high = curve(x_min), curve(x_next), curve(x_max)
    zero = _per_curve(zero_activity, n_batch, 0.0)
    have_full = full_activity is not None
    full = _per_curve(full_activity, n_batch, np.nan) if have_full else y_low
    # Activity can only be removed by an inhibitor: with falling_only a move above full
    # activity counts as nothing, not as efficacy.
    moved = (lambda d: np.clip(d, 0.0, None)) if falling_only else np.abs
    with np.errstate(divide="ignore", invalid="ignore"):
        window = full - zero
        efficacy = moved(full - y_high) / window
        efficacy_next = moved(full - y_next) / window
        efficacy_lowest = (moved(full - y_low) / window if have_full
                           else np.zeros(n_batch))
    # No usable window, or a failed fit (NaN estimates): nothing seen.
    valid = np.isfinite(window) & (window > 0)
    efficacy, efficacy_next, efficacy_lowest = (
        np.where(valid & np.isfinite(e), e, 0.0)
        for e in (efficacy, efficacy_next, efficacy_lowest))

    # The F-test of the curve against a flat line (the weighted mean).
    w2 = np.where(mask, w * w, 0.0)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        fitted = logistic4(x, top[:, None], bottom[:, None], log_ic50[:, None],
                           hill[:, None])
        ssr_curve = np.sum(np.where(mask, w2 * (y - fitted) ** 2, 0.0), axis=1)
        mean = np.sum(w2 * np.where(mask, y, 0.0), axis=1) / np.sum(w2, axis=1)
        ssr_flat = np.sum(np.where(mask, w2 * (y - mean[:, None]) ** 2, 0.0), axis=1)
        k = np.broadcast_to(np.asarray(n_free, dtype=float), (n_batch,))
        dof = mask.sum(axis=1) - k
        gain = np.clip(ssr_flat - ssr_curve, 0.0, None) / np.maximum(k - 1.0, 1.0)
        statistic = gain / (ssr_curve / dof)
        p_flat = stats.f.sf(statistic, np.maximum(k - 1.0, 1.0), np.maximum(dof, 1.0))
    p_flat = np.where(dof <= 0, np.nan, p_flat)
    p_flat = np.where((dof > 0) & (ssr_curve == 0) & (ssr_flat > 0), 0.0, p_flat)
    p_flat = np.where(np.isfinite(p_flat), p_flat, 1.0)

    with np.errstate(over="ignore", invalid="ignore"):
        g_low = 1.0 / (1.0 + 10.0 ** (hill * (x_min - log_ic50)))
        g_high = 1.0 / (1.0 + 10.0 ** (hill * (x_max - log_ic50)))
    top_seen = np.maximum(g_low, g_high) >= rules.plateau_fraction
    bottom_seen = np.minimum(g_low, g_high) <= 1.0 - rules.plateau_fraction
    hill_at_limit = np.isfinite(hill_limit) & (np.abs(hill) >= hill_limit * (1 - AT_LIMIT_RTOL))

    trend = p_flat < rules.flat_alpha
    active_everywhere = efficacy_lowest >= rules.min_efficacy
    # Activity already removed at the lowest concentration and little change across
    # the range: the midpoint lies below the range, whatever step the noise suggests.
    with np.errstate(invalid="ignore", divide="ignore"):
        drop_within = np.where(valid, np.abs(y_low - y_high) / window, 0.0)
    below_range = active_everywhere & ~(np.nan_to_num(drop_within) >= rules.min_efficacy)
    top_seen = top_seen & ~below_range
    active = (efficacy >= rules.min_efficacy) & (trend | active_everywhere) & \
        np.all(np.isfinite(theta), axis=1)
    single = active & ~active_everywhere & (efficacy_next < rules.min_efficacy)
    complete = active & ~single & top_seen & bottom_seen
    incomplete = active & ~single & ~complete
    curve_class = np.select([complete, incomplete, single], CURVE_CLASSES[:3],
                            default="inactive").astype(object)
    below_range = below_range & active
    observed, observed_se, observed_rise, n_top = observed_efficacy(
        x, y, mask, full_activity=full_activity, zero_activity=zero_activity,
        falling_only=falling_only)
    # An inactive curve is described by its data (module docstring); the rise that
    # makes it activation is that of the means, by at least what would count as efficacy.
    rising = falling_only & (observed_rise >= rules.min_efficacy)
    percent = np.round(100 * efficacy).astype(int)
    reason = np.empty(n_batch, dtype=object)
    for b in range(n_batch):
        if curve_class[b] == "complete":
            reason[b] = f"complete curve ({percent[b]} % of the control window removed)"
        elif curve_class[b] == "incomplete" and below_range[b]:
            reason[b] = (f"incomplete curve (activity already {round(100 * efficacy_lowest[b])} "
                         f"% removed at the lowest concentration: the midpoint lies below "
                         f"the tested range)")
        elif curve_class[b] == "incomplete":
            missing = [name for name, seen in (("top", top_seen[b]), ("bottom", bottom_seen[b]))
                       if not seen]
            reason[b] = (f"incomplete curve ({percent[b]} % removed; the "
                         f"{' and '.join(missing)} plateau not reached within the tested "
                         f"range)")
        elif curve_class[b] == "single_point":
            reason[b] = (f"activity at the highest concentration only ({percent[b]} % "
                         f"removed there, {round(100 * efficacy_next[b])} % at the next)")
        elif rising[b]:
            reason[b] = (f"inactive: activity rises with concentration (the mean at the "
                         f"highest concentration {round(100 * observed_rise[b])} % of the "
                         f"control window above that at the lowest): activation, no "
                         f"inhibition")
        else:
            removed = _percent_with_se(observed[b], observed_se[b])
            reason[b] = (f"inactive: {removed} % of the control window removed at the "
                         f"highest concentration ("
                         + (f"mean of {n_top[b]} points)" if n_top[b] > 1 else "one point)")
                         + (f", below {100 * rules.min_efficacy:g} %"
                            if observed[b] < rules.min_efficacy else
                            f"; the curve is not distinguishable from a flat line "
                            f"(F-test p ≥ {rules.flat_alpha:g})"))
    return CurveClasses(curve_class, efficacy, efficacy_next, efficacy_lowest, p_flat,
                        top_seen, bottom_seen, np.broadcast_to(hill_at_limit, (n_batch,)),
                        below_range, x_min, x_next, x_max, reason, observed, observed_se)


def _percent_with_se(fraction, std_err) -> str:
    """``12 ± 3`` (percent, whole numbers; the value alone without a standard error)."""
    if not np.isfinite(std_err):
        return f"{round(100 * fraction)}"
    return f"{round(100 * fraction)} ± {round(100 * std_err)}"
