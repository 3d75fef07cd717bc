"""Progress curves to initial rates, with the checks a bench scientist makes by eye.

:func:`initial_rates` takes a tidy table of kinetic reads (plate, well, time, signal) and a
plate map (plate, well, compound, substrate, inhibitor, role) and returns, for every sample
well, its initial rate with a standard error, the window of reads used, and quality flags.
Its table feeds :func:`inhibkin.mechanism.fit.fit_mechanisms` directly (the substrate and
inhibitor columns keep the plate map's names and units; ``rate_se`` can serve as ``sd``).

Windows
-------
Every candidate window starts at the first read of the well and ends at one of the later
reads (prefix windows), from ``min_points`` reads up to every read before the detector's
ceiling. All fits over all windows of all wells come from cumulative sums of the moments
of time and signal, in one numpy pass: no Python loop runs over wells or windows.

``method="linear"`` (default) reports the least-squares slope of the longest early window
that stays linear. A window counts as *not linear* when a quadratic fitted to it is

1. significantly better than the straight line: extra sum-of-squares F-test of the
   quadratic term, p < ``alpha``; **and**
2. curved enough to matter: for evenly spaced reads the straight line's slope differs
   from the quadratic's slope at the window start by c·T/b (c the quadratic coefficient,
   b the start slope, T the window length), and the curvature matters when this relative
   bias exceeds ``max_bias`` (default 1 %).

The first condition stops noise from being read as curvature; the second stops very precise
reads of a nearly straight curve from shrinking the window for no gain. The longest window
that is linear by this rule and stays within ``max_conversion`` is chosen; when no window
is linear the shortest is used and the well is flagged ``nonlinear``.

``method="curve"`` fits a quadratic to the early curve and reports its slope at t = 0
(the start of the reaction, i.e. time 0 of the reads). Its window is the longest within
``max_conversion`` whose cubic term is not both significant (F-test of the cubic term,
p < ``alpha``) and material (the slope bias the cubic term causes, 0.6·d/b for evenly
spaced reads, above ``max_bias``). The quadratic absorbs the first-order loss of rate as
substrate is depleted, so its bias grows only with the square of the conversion; its
standard error is about four times that of a straight line over the same reads.

``method="integrated"`` runs the linear method, then rates each well from its whole
curve: the integrated Michaelis–Menten equation with the apparent km of the well's row
(one compound at one inhibitor level, fitted to the first rates) held and the well's
offset and apparent vmax free; see :mod:`inhibkin.rates.integrated`. The late reads then
inform v0 instead of biasing it, and no conversion cap shortens a low-substrate well. It
needs the substrate as signal (``conversion`` or ``signal_unit`` and the substrate's
unit); wells it cannot rate keep the linear rate, flagged ``linear_rate``. It assumes the
curve follows Michaelis–Menten to its last read (no product inhibition, no loss of
enzyme): the whole-curve fit of :func:`inhibkin.fit_progress_curves` makes the same
assumption, and the linear method does not.

Accuracy. Under Michaelis–Menten kinetics the rate falls by at most the fraction of
substrate converted (d ln v / d conversion = −km/(km + S) ≥ −1), so a straight line over a
window with conversion f underestimates the initial rate by at most about f/2 (first-order
conditions, S ≪ km) and by much less when S ≫ km. The linearity test removes this bias
only as far as the read noise lets curvature be seen; ``method="curve"`` does not need to
see it.

Conversion
----------
The substrate converted by the end of the window is estimated from the fit (product
formed from t = 0 to the window end, in the substrate's unit, times ``stoichiometry``
moles of substrate per mole of signal species) divided by the well's substrate
concentration. It needs the signal in concentration units (``conversion`` or
``signal_unit``) and the substrate's unit (``substrate_unit`` or a header such as
``substrate_uM``); without them it is not computed and the window is not capped.
For ``method="linear"`` the conversion is the slope times the window's end over S0 and
carries the slope's relative standard error; a window then passes the cap unless its
conversion lies beyond ``max_conversion`` by more than that noise (one-sided, at
``alpha``), as curvature must be significant before it ends a window. A cap read off the
bare estimate would choose windows by their noise: the whole curve where the noise ran
low, a shorter window where it ran high, which biases the wells whose conversion reaches
the cap near their last read. The ``conversion`` flag follows the same rule.

Flags
-----
See :data:`FLAGS`. A well with flags keeps its rate (``status="flagged"``); a well with
no usable window or no reads has no rate (``status="failed"``).
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from ..core.readonly import readonly_frame, readonly_mapping
from ..errors import DataError, Problem, UnitsError
from ..inputs.columns import find_column
from ..units import from_molar, normalise_unit, to_molar, to_seconds
from ..validate import check_columns, normalise_roles, numeric_column, row_kind
from .depletion import depletion_corrected, window_curvature
from .integrated import ROW_PASSES, integrated_rates, row_apparent_km
from .product_inhibition import FLAG as PRODUCT_INHIBITION
from .product_inhibition import product_inhibition
from .signal import BeerLambert, StandardCurve, blank_signal
from .time_dependence import time_dependence

__all__ = ["InitialRates", "RateOptions", "initial_rates", "product_curves", "FLAGS",
           "METHODS", "ROLES"]

METHODS = ("linear", "curve", "integrated")
DIRECTIONS = ("increase", "decrease")
ROLES = ("sample", "blank", "control")

FLAGS = {
    "conversion": "more than max_conversion of the substrate converted in the window "
                  "(linear method: beyond it by more than the slope's noise; initial-rate "
                  "conditions are usually taken as ≤ 10 %, common practice)",
    "lag": "the early curve accelerates (curvature opposite to substrate depletion)",
    "burst": "the early rate falls faster than substrate depletion can explain",
    "nonlinear": "the window used fails the linearity test (no window within max_conversion "
                 "passed it, so the shortest was used)",
    "ceiling": "reads at the detector's ceiling cut the window short",
    "out_of_range": "reads in the window lie outside the standard curve's range",
    "too_few_points": "fewer than min_points usable reads",
    "no_reads": "the plate map lists the well but the reads do not",
    "no_blank": "blanks are in use but none match this well's plate and substrate level",
    "flat": "the slope cannot be told from zero (|rate| ≤ 2 standard errors)",
    "negative_slope": "the signal moves against the product (rate < −2 standard errors)",
    "noisy": "the rate's standard error exceeds max_rate_cv of the rate",
    "linear_rate": "method='integrated' could not fit this well's curve (its row has too "
                   "few substrate levels with a rate, or the substrate is not known as "
                   "signal): the rate is the linear method's",
    "time_dependent": "an inhibited well's rate falls with time beyond what substrate "
                      "depletion explains from the wells without inhibitor at the same "
                      "plate and substrate (slow binding or inactivation; see "
                      "inhibkin.rates.time_dependence)",
    PRODUCT_INHIBITION: "the uninhibited wells of the plate bend faster than substrate "
                        "depletion explains (see inhibkin.rates.product_inhibition)",
}

# A well label: row letters and a column number; "A01", "a1" and " A1" are one well.
_WELL_LABEL = r"^([A-Z]+)0*([0-9]+)$"
# Control characters (C0, DEL) have no place in a label; one would also break the key.
_CONTROL_CHARACTER = re.compile(r"[\x00-\x1f\x7f]")

# Slopes within this many standard errors of zero are "flat" (about a 95 % two-sided test).
_FLAT_T = 2.0
# A burst is an early fall of the slope larger than this multiple of the conversion,
# the most that substrate depletion explains (margin for product inhibition and noise).
_BURST_FACTOR = 2.0
# Level of the F-test behind the lag and burst flags: strict, because every well is
# tested and a depletion curve should almost never be called a lag or a burst.
_SHAPE_ALPHA = 1e-3
# Without a known conversion a burst is an early fall of the slope beyond this fraction.
_BURST_DROP_UNKNOWN = 0.5
# Lag and burst are judged on the first third of a well's reads (at least min_points).
_START_FRACTION = 1.0 / 3.0
# Sums of squares below this fraction of the window's total are round-off.
_ROUNDOFF = 1e-12
# Least-squares slope of v**2 (linear fit) and the slope at 0 of a quadratic fitted to
# v**3, for evenly spaced v on [0, 1]: the bias factors of the two linearity tests.
_LINE_BIAS_OF_CURVATURE = 1.0
_QUADRATIC_BIAS_OF_CUBIC = 0.6


@dataclass(frozen=True)
class RateOptions:
    """The options an :class:`InitialRates` was computed with (see :func:`initial_rates`)."""

    method: str = "linear"
    direction: str = "increase"
    alpha: float = 0.05
    max_bias: float = 0.01
    max_conversion: float = 0.10
    min_points: int = 6
    max_rate_cv: float = 0.10
    ceiling: float | None = None
    stoichiometry: float = 1.0
    time_unit: str = "s"
    rate_time_unit: str = "s"


@dataclass(frozen=True)
class InitialRates:
    """Initial rates of every sample well, the windows used and the quality flags.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per sample well: plate, well, compound, substrate, inhibitor (the plate
        map's column names, and every other plate-map column), rate, rate_se,
        window_start, window_end (in the reads' time unit), n_points, conversion
        (fraction, NaN when unknown), residual_sd (signal units), method, flags
        (``;``-separated names from :data:`FLAGS`, empty when none) and status
        (``ok``, ``flagged`` or ``failed``).
    controls : pandas.DataFrame
        The same columns for wells of role ``control``.
    unmatched : pandas.DataFrame
        plate, well, where (``reads`` or ``plate map``) and reason for every well found
        in only one of the two tables.
    units : dict
        ``substrate``, ``inhibitor``, ``rate`` and ``time`` units (None when undeclared).
    options : RateOptions
    """

    table: pd.DataFrame = field(repr=False)
    controls: pd.DataFrame = field(repr=False)
    unmatched: pd.DataFrame = field(repr=False)
    units: dict
    options: RateOptions

    def __post_init__(self):
        # Frozen all the way down: rates.table.loc[...] = ... and rates.units[...] = ...
        # are refused; to_frame() gives a copy to edit.
        for name in ("table", "controls", "unmatched"):
            object.__setattr__(self, name, readonly_frame(getattr(self, name)))
        object.__setattr__(self, "units", readonly_mapping(self.units))

    def to_frame(self) -> pd.DataFrame:
        """A copy of :attr:`table` (units in ``.attrs["units"]``)."""
        out = self.table.copy()
        out.attrs["units"] = dict(self.units)
        return out

    def flag_counts(self) -> pd.Series:
        """Number of sample wells carrying each flag."""
        flags = self.table["flags"].str.split(";").explode()
        return flags[flags != ""].value_counts().rename("wells")

    def summary(self) -> str:
        """Plain-text report: wells by status, flags, unmatched wells and units."""
        width = 78
        status = self.table["status"].value_counts()
        lines = ["=" * width,
                 f"Initial rates ({self.options.method}), {len(self.table)} sample wells: "
                 + ", ".join(f"{k} {v}" for k, v in status.items()),
                 f"  rate unit {self.units.get('rate')}, substrate {self.units.get('substrate')}, "
                 f"inhibitor {self.units.get('inhibitor')}, time {self.units.get('time')}"]
        counts = self.flag_counts()
        if len(counts):
            lines += ["-" * width, "Flags"]
            lines += [f"  {name:<15} {n:>5}  {FLAGS[name]}" for name, n in counts.items()]
        if len(self.unmatched):
            lines += ["-" * width, f"Unmatched wells: {len(self.unmatched)}",
                      self.unmatched.head(10).to_string(index=False)]
        if np.isnan(self.table["conversion"].to_numpy(dtype=float)).all():
            lines.append("  conversion not checked: signal or substrate unit not declared")
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        status = self.table["status"].value_counts()
        head = (f"<p><b>Initial rates ({html.escape(self.options.method)})</b> — "
                + html.escape(", ".join(f"{k} {v}" for k, v in status.items()))
                + f"; rate unit {html.escape(str(self.units.get('rate')))}</p>")
        parts = [f"<div>{head}", self.table.to_html(float_format="{:.4g}".format, max_rows=40)]
        if len(self.unmatched):
            parts += ["<p>Unmatched wells</p>", self.unmatched.to_html(max_rows=20)]
        parts.append("</div>")
        return "".join(parts)


# ---------------------------------------------------------------------------------------
# Array core: every window of every well in one pass.


def _spd_inverse(matrix):
    """Inverses of a stack of small symmetric positive-definite matrices, by Cholesky.

    Written out over the (at most 4 × 4) matrix entries so that each step is one numpy
    operation over the whole stack: ``numpy.linalg.inv`` calls LAPACK once per matrix,
    which dominated the run time for tens of thousands of windows. The normal matrices
    are equilibrated (see :func:`_poly_fit`), so Cholesky without pivoting is stable.
    """
    k = matrix.shape[-1]
    lower = np.zeros_like(matrix)
    for j in range(k):
        pivot = matrix[..., j, j] - np.sum(lower[..., j, :j] ** 2, axis=-1)
        lower[..., j, j] = np.sqrt(np.maximum(pivot, np.finfo(float).tiny))
        for i in range(j + 1, k):
            lower[..., i, j] = (matrix[..., i, j]
                                - np.sum(lower[..., i, :j] * lower[..., j, :j], axis=-1)
                                ) / lower[..., j, j]
    lower_inv = np.zeros_like(matrix)
    for i in range(k):
        lower_inv[..., i, i] = 1.0 / lower[..., i, i]
        for j in range(i):
            lower_inv[..., i, j] = -np.sum(lower[..., i, j:i] * lower_inv[..., j:i, j],
                                           axis=-1) / lower[..., i, i]
    return np.einsum("...mi,...mj->...ij", lower_inv, lower_inv)


def _poly_fit(moments_t, moments_ty, y2, h, degree, usable):
    """Least-squares polynomials of ``degree`` over every prefix window.

    ``moments_t[..., p]`` = Σ u**p and ``moments_ty[..., p]`` = Σ u**p·y over the window,
    u the time from the well's first read in units of the well's span; ``h`` the window's
    span in those units. Scaling by h**p (v = u/h ∈ [0, 1]) equilibrates the normal
    equations, so short windows are as well conditioned as long ones.

    Returns coefficients in powers of v, the inverse normal matrix and the SSR.
    """
    powers = np.arange(2 * degree + 1)
    scale = np.where(usable, h, 1.0)[..., None] ** -powers
    scaled_t = moments_t[..., : 2 * degree + 1] * scale
    idx = np.arange(degree + 1)
    matrix = scaled_t[..., idx[:, None] + idx[None, :]]
    rhs = moments_ty[..., : degree + 1] * scale[..., : degree + 1]
    matrix = np.where(usable[..., None, None], matrix, np.eye(degree + 1))
    rhs = np.where(usable[..., None], rhs, 0.0)
    inverse = _spd_inverse(matrix)
    coef = np.einsum("...ij,...j->...i", inverse, rhs)
    ssr = np.maximum(y2 - np.einsum("...i,...i->...", coef, rhs), 0.0)
    return coef, inverse, ssr


def _f_pvalue(ssr_small, ssr_big, total, n, k_big, usable):
    """p-value of the extra sum-of-squares F-test of one added term (1 where unusable)."""
    floor = _ROUNDOFF * np.maximum(total, np.finfo(float).tiny)
    gain = ssr_small - ssr_big
    dof = np.maximum(n - k_big, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        f_stat = np.where(gain > floor, gain * dof / np.maximum(ssr_big, floor), 0.0)
    return np.where(usable, stats.f.sf(f_stat, 1, dof), 1.0)


def _last_true(mask):
    reverse = mask[:, ::-1]
    return mask.shape[1] - 1 - np.argmax(reverse, axis=1), mask.any(axis=1)


def _take(array, index):
    return np.take_along_axis(array, index[:, None], axis=1)[:, 0]


def _rates_core(t, y, valid, ceiling_at, s0_signal, *, method, alpha, max_bias,
                max_conversion, min_points):
    """Initial rates of wells stored as rows of (wells × reads) arrays.

    Parameters
    ----------
    t, y : numpy.ndarray, shape (wells, reads)
        Times (from the start of the reaction) sorted along each row, and blank-corrected
        signal oriented so that product formation raises it; NaN padding allowed.
    valid : numpy.ndarray of bool
        Reads that may enter a window.
    ceiling_at : numpy.ndarray of int
        Position of each well's first read at the detector's ceiling (``reads`` if none);
        windows end before it.
    s0_signal : numpy.ndarray
        The well's substrate concentration expressed as signal (NaN when unknown), so
        that conversion = product signal / s0_signal.

    Returns
    -------
    dict of numpy.ndarray, one entry per well.
    """
    n_wells, n_reads = t.shape
    positions = np.arange(n_reads)
    before_ceiling = positions[None, :] < ceiling_at[:, None]
    valid = valid & before_ceiling
    count = np.cumsum(valid, axis=1)
    first = np.argmax(valid, axis=1)
    any_valid = valid.any(axis=1)
    last, _ = _last_true(valid)
    t_first = np.where(any_valid, _take(t, first), 0.0)
    span = np.where(any_valid, _take(t, last) - t_first, 1.0)
    span = np.where(span > 0, span, 1.0)
    y_first = np.where(any_valid, _take(y, first), 0.0)

    u = np.where(valid, (t - t_first[:, None]) / span[:, None], 0.0)
    yy = np.where(valid, y - y_first[:, None], 0.0)
    weight = valid.astype(float)
    n_powers = 7 if method == "curve" else 5
    powers_t = [weight]
    for _ in range(n_powers - 1):
        powers_t.append(powers_t[-1] * u)
    moments_t = np.cumsum(np.stack(powers_t, axis=-1), axis=1)
    moments_ty = np.cumsum(np.stack([p * yy for p in powers_t[: n_powers // 2 + 1]], axis=-1),
                           axis=1)
    y2 = np.cumsum(weight * yy * yy, axis=1)
    h = np.maximum.accumulate(u, axis=1)
    usable = valid & (count >= min_points) & (h > 0)
    total = y2 - np.where(count > 0, moments_ty[..., 0] ** 2 / np.maximum(count, 1), 0.0)

    line, line_inv, ssr1 = _poly_fit(moments_t, moments_ty, y2, h, 1, usable)
    quad, quad_inv, ssr2 = _poly_fit(moments_t, moments_ty, y2, h, 2, usable)
    p_curved = _f_pvalue(ssr1, ssr2, total, count, 3, usable)
    curved = p_curved < alpha
    time_scale = span[:, None] * np.where(usable, h, 1.0)  # dt/dv of each window
    t_end = t_first[:, None] + time_scale
    v_zero = -t_first[:, None] / time_scale  # t = 0 in window units (≤ 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        quad_drop = -2.0 * quad[..., 2] / quad[..., 1]
        product_quad = quad[..., 1] * (1 - v_zero) + quad[..., 2] * (1 - v_zero**2)
        conversion_quad = product_quad / s0_signal[:, None]

    if method == "linear":
        slope_v = line[..., 1]
        dof = np.maximum(count - 2, 1)
        var = ssr1 / dof * line_inv[..., 1, 1]
        residual_var = ssr1 / dof
        material = np.abs(quad[..., 2]) * _LINE_BIAS_OF_CURVATURE > max_bias * np.abs(quad[..., 1])
        nonlinear = curved & material
        with np.errstate(divide="ignore", invalid="ignore"):
            conversion = slope_v * (t_end / time_scale) / s0_signal[:, None]
            conversion_se = np.abs(conversion) * np.sqrt(np.maximum(var, 0.0)) / np.abs(slope_v)
        # The cap tested against the conversion's noise (module notes, Conversion): a
        # bare noisy estimate kept whole curves where the noise ran low and cut them
        # where it ran high (S = 2 µM, I = 0 on the reads study's plates: the rates'
        # mean z −0.21, −0.75 in the wells that kept every read).
        beyond = conversion - stats.norm.ppf(1.0 - alpha) * conversion_se > max_conversion
    else:
        cubic, _, ssr3 = _poly_fit(moments_t, moments_ty, y2, h, 3, usable)
        curved3 = _f_pvalue(ssr2, ssr3, total, count, 4, usable) < alpha
        material = (np.abs(cubic[..., 3]) * _QUADRATIC_BIAS_OF_CUBIC
                    > max_bias * np.abs(quad[..., 1]))
        nonlinear = curved3 & material
        slope_v = quad[..., 1] + 2 * quad[..., 2] * v_zero
        gradient = np.stack([np.zeros_like(v_zero), np.ones_like(v_zero), 2 * v_zero], axis=-1)
        dof = np.maximum(count - 3, 1)
        var = ssr2 / dof * np.einsum("...i,...ij,...j->...", gradient, quad_inv, gradient)
        residual_var = ssr2 / dof
        conversion = conversion_quad
        beyond = conversion > max_conversion

    within = usable & ~beyond
    good = within & ~nonlinear
    k_good, has_good = _last_true(good)
    k_within = np.argmax(within, axis=1)
    has_within = within.any(axis=1)
    k_usable = np.argmax(usable, axis=1)
    has_usable = usable.any(axis=1)
    chosen = np.where(has_good, k_good, np.where(has_within, k_within, k_usable))

    # Lag and burst: the quadratic over the first third of the reads (≥ min_points).
    n_total = count[:, -1]
    n_start = np.maximum(min_points, np.ceil(n_total * _START_FRACTION)).astype(int)
    start_mask = usable & (count >= n_start[:, None])
    k_start = np.argmax(start_mask, axis=1)
    has_start = start_mask.any(axis=1)
    c_start = _take(quad[..., 2], k_start)
    b_start = _take(quad[..., 1], k_start)
    sig_start = (_take(p_curved, k_start) < _SHAPE_ALPHA) & has_start
    material_start = np.abs(c_start) > max_bias * np.abs(b_start)
    drop = _take(quad_drop, k_start)
    conv_start = _take(conversion_quad, k_start)
    drop_limit = np.where(np.isfinite(conv_start), _BURST_FACTOR * np.abs(conv_start),
                          _BURST_DROP_UNKNOWN)
    lag = sig_start & material_start & (c_start > 0)
    burst = sig_start & material_start & (c_start < 0) & (b_start > 0) & (drop > drop_limit)

    scale_k = _take(time_scale, chosen)
    rate = _take(slope_v, chosen) / scale_k
    rate_se = np.sqrt(np.maximum(_take(var, chosen), 0.0)) / scale_k
    n_points = _take(count, chosen)
    ceiling_hit = ceiling_at < n_reads
    ok = has_usable
    nan = np.nan
    return {
        "rate": np.where(ok, rate, nan),
        "rate_se": np.where(ok, rate_se, nan),
        "window_start": np.where(ok, t_first, nan),
        "window_end": np.where(ok, _take(t_end, chosen), nan),
        "n_points": np.where(ok, n_points, n_total),
        "conversion": np.where(ok, _take(conversion, chosen), nan),
        "beyond_conversion": ok & _take(beyond, chosen),
        "residual_sd": np.where(ok, np.sqrt(np.maximum(_take(residual_var, chosen), 0.0)), nan),
        "position_end": np.where(ok, chosen, -1),
        "failed": ~ok,
        "nonlinear": ok & _take(nonlinear, chosen),
        "lag": ok & lag,
        "burst": ok & burst,
        # The ceiling matters when the window used every read before it.
        "ceiling": ceiling_hit & (~ok | (n_total <= n_points)),
    }


# ---------------------------------------------------------------------------------------
# Public boundary.


def _plain(value):
    """A numpy scalar as the Python number it holds, so messages read ``1``, not ``np.int64(1)``."""
    return value.item() if isinstance(value, np.generic) else value


def _duplicates(df, columns, problems, what, shown=None):
    """Rows of ``df`` repeating ``columns``; the values listed are those of ``shown``."""
    shown = df if shown is None else shown
    dup = df.duplicated(columns, keep=False).to_numpy()
    if dup.any():
        rows = df.index.to_numpy()[dup]
        for position, row in zip(np.flatnonzero(dup)[:5], rows[:5]):
            value = tuple(_plain(shown[c].iloc[position]) for c in columns)
            problems.append(Problem(", ".join(columns), row, value,
                                    f"duplicated {what}; each must appear once", row_kind(df)))
        if len(rows) > 5:
            problems.append(Problem(", ".join(columns), None, None,
                                    f"and {len(rows) - 5} more duplicated rows"))


def _check_options(method, direction, alpha, max_bias, max_conversion, min_points, max_rate_cv,
                   ceiling, stoichiometry, conversion):
    problems = []
    if method not in METHODS:
        problems.append(Problem("method", None, method, f"must be one of {METHODS}"))
    if direction not in DIRECTIONS:
        problems.append(Problem("direction", None, direction, f"must be one of {DIRECTIONS}"))
    for name, value, low, high in (("alpha", alpha, 0, 1), ("max_bias", max_bias, 0, 1),
                                   ("max_conversion", max_conversion, 0, np.inf),
                                   ("max_rate_cv", max_rate_cv, 0, np.inf),
                                   ("stoichiometry", stoichiometry, 0, np.inf)):
        if not (isinstance(value, (int, float)) and low < value < high):
            problems.append(Problem(name, None, value, f"must be a number in ({low}, {high})"))
    if not (isinstance(min_points, (int, np.integer)) and min_points >= 6):
        problems.append(Problem("min_points", None, min_points,
                                "must be an integer ≥ 6 (the cubic term's F-test needs 2 "
                                "residual degrees of freedom)"))
    if ceiling is not None and not isinstance(ceiling, (int, float)):
        problems.append(Problem("ceiling", None, ceiling, "must be a number or None"))
    if conversion is not None and not isinstance(conversion, (BeerLambert, StandardCurve)):
        problems.append(Problem("conversion", None, type(conversion).__name__,
                                "must be a BeerLambert, a StandardCurve or None"))
    if problems:
        raise DataError(problems, "initial_rates options")


def _plate_labels(values) -> pd.Series:
    """Plate labels as they are matched: the text, trimmed of surrounding spaces."""
    return pd.Series(values).astype(str).str.strip()


def _well_labels(values) -> pd.Series:
    """Well labels as they are matched: trimmed, upper case, no leading zeros (A01 = A1)."""
    text = pd.Series(values).astype(str).str.strip().str.upper()
    return text.str.replace(_WELL_LABEL, r"\1\2", regex=True)


def _label_problems(frame, plate, well, problems):
    """A plate or well label holding a control character (a tab, a unit separator…)."""
    for column in (plate, well):
        text = frame[column].astype(str)
        bad = text.str.contains(_CONTROL_CHARACTER).to_numpy() & frame[column].notna().to_numpy()
        for row, value in list(zip(frame.index[bad], text[bad]))[:5]:
            problems.append(Problem(column, row, value, "the label holds a control character "
                                                        "(a tab, line break or other invisible "
                                                        "code); retype it", row_kind(frame)))


def _matching_labels(frame, plate, well):
    """A copy of ``frame`` whose plate and well columns are the labels as matched."""
    return frame.assign(**{plate: _plate_labels(frame[plate]).to_numpy(),
                           well: _well_labels(frame[well]).to_numpy()})


def _read_table(reads, *, time, signal, plate, well):
    check_columns(reads, [plate, well, time, signal], "reads")
    problems: list[Problem] = []
    _label_problems(reads, plate, well, problems)
    t = numeric_column(reads, time, problems)
    y = numeric_column(reads, signal, problems, allow_negative=True, allow_nan=True)
    for column in (plate, well):
        missing = reads[column].isna().to_numpy()
        if missing.any():
            row = reads.index[missing][0]
            problems.append(Problem(column, row, None, "missing plate or well label",
                                    row_kind(reads)))
    if problems:
        raise DataError(problems, "reads")
    # Duplicates are looked for among the labels as matched: " A1" and "A1" are one well.
    _duplicates(_matching_labels(reads, plate, well), [plate, well, time], problems,
                "(plate, well, time) after trimming spaces and case (A01 = A1)", reads)
    if problems:
        raise DataError(problems, "reads")
    return t, y


def _read_map(plate_map, *, plate, well, compound, substrate, inhibitor, role):
    columns = [plate, well, compound, substrate, inhibitor]
    check_columns(plate_map, columns, "plate map")
    problems: list[Problem] = []
    _label_problems(plate_map, plate, well, problems)
    roles = (normalise_roles(plate_map[role]).to_numpy(dtype=object)
             if role in plate_map.columns else np.full(len(plate_map), "sample"))
    bad_role = ~np.isin(roles, ROLES)
    if bad_role.any():
        for row, value in list(zip(plate_map.index[bad_role], plate_map[role][bad_role]))[:5]:
            problems.append(Problem(role, row, value, f"unknown role; use one of {ROLES}",
                                    row_kind(plate_map)))
    s = numeric_column(plate_map, substrate, problems, allow_nan=True)
    i = numeric_column(plate_map, inhibitor, problems, allow_nan=True)
    needs = roles != "blank"
    for column, values in ((substrate, s), (inhibitor, i)):
        missing = needs & np.isnan(values) & plate_map[column].isna().to_numpy()
        for row in plate_map.index[missing][:5]:
            problems.append(Problem(column, row, None,
                                    "missing concentration in a sample or control well "
                                    "(write 0 for none)", row_kind(plate_map)))
    if problems:
        raise DataError(problems, "plate map")
    _duplicates(_matching_labels(plate_map, plate, well), [plate, well], problems,
                "(plate, well) after trimming spaces and case (A01 = A1)", plate_map)
    if problems:
        raise DataError(problems, "plate map")
    return roles, s, i


def _key(frame, plate, well):
    return _plate_labels(frame[plate]) + "\x1f" + _well_labels(frame[well])


def _check_some_match(read_key, map_key):
    """Refuse reads of which not one well is in the plate map, naming the labels."""
    if len(read_key) == 0 or np.isin(read_key, map_key).any():
        return
    def plates(keys):
        return sorted({k.split("\x1f")[0] for k in keys})[:5]
    def wells(keys):
        return sorted({k.split("\x1f")[1] for k in keys})[:5]
    hint = ""
    read_wells = {k.split("\x1f")[1] for k in read_key}
    if read_wells & {k.split("\x1f")[1] for k in map_key}:
        # The usual cause: a plate-reader matrix whose blocks name no plate took the
        # file's name, and the layout calls the plate P1.
        hint = (". The wells match but the plates do not: name the reads' plate as the map "
                "does (a matrix block without 'plate NAME' takes the file's name; "
                "--plate NAME, or read_plate_matrix(path, plate=NAME))")
    raise DataError(f"no well of the reads is in the plate map: the reads have plates "
                    f"{plates(read_key)} and wells {wells(read_key)}, the plate map plates "
                    f"{plates(map_key)} and wells {wells(map_key)}. Labels are compared as "
                    f"text (spaces trimmed, A01 = A1), so plate '1' and '1.0' differ{hint}",
                    "reads and plate map")


def _header_column(frame, name, declared, *, kind, what, context="reads"):
    """The column ``name`` of ``frame`` (matched as the column mapping matches headers:
    ``Time (min)``, ``time [min]`` and ``TIME_min`` are the time column; ``substrate_uM``
    and ``Substrate (uM)`` the plate map's substrate) and its unit.

    The unit is the one ``declared`` as an option, else the one the header carries, else
    None; an option that contradicts the header is refused. A name that matches no
    column is returned as it is, for the column check to report.
    """
    canonical = normalise_unit(declared, kind=kind) if declared is not None else None
    if not isinstance(frame, pd.DataFrame):
        return name, canonical
    # A signal header's unit may be a detector's label ('Signal (RFU)'); a time's may not.
    found = find_column(frame.columns, name, kind=kind, label_ok=what == "signal",
                        context=context)
    if found is None:
        return name, canonical
    column, header = found
    if canonical is not None and header is not None and canonical != header:
        raise UnitsError(Problem(column, None, declared,
                                 f"{what} unit given as an option ({declared}) contradicts "
                                 f"the header {column!r}"), context)
    return column, canonical or header


_PREPARED = ("time_unit", "substrate_unit", "inhibitor_unit", "roles", "s_map", "i_map",
             "sensitivity", "to_substrate", "rate_conc_unit", "map_key", "has_reads",
             "unmatched", "t", "raw", "oriented", "map_row", "no_blank_read")


def _prepare(reads, plate_map, *, time, signal, plate, well, compound, substrate, inhibitor,
             role, time_unit, conversion, signal_unit, substrate_unit, inhibitor_unit,
             direction, subtract_blanks) -> dict:
    """The reads checked, matched to the plate map, blank-corrected and oriented: the part
    of the rates stage that :func:`initial_rates` and :func:`product_curves` share.

    Returns a dict with the names of :data:`_PREPARED`; ``t``, ``raw``, ``oriented``,
    ``map_row`` and ``no_blank_read`` are per read of every mapped non-blank well.
    """
    time, time_unit = _header_column(reads, time, time_unit, kind="time", what="time")
    time_unit = time_unit or "s"
    signal, header_unit = _header_column(reads, signal, signal_unit if conversion is None
                                         else None, kind="concentration", what="signal")
    if conversion is not None and header_unit:
        raise UnitsError(Problem(signal, None, conversion.unit,
                                 "the header declares the signal a concentration, but a "
                                 "conversion was given; give one or the other"), "reads")
    signal_unit = header_unit if conversion is None else signal_unit
    # The plate map's concentrations are found as every stage finds them: a layout of
    # inhibkin.inputs.layouts (substrate_uM, inhibitor_nM) or a lab's 'Substrate (uM)'.
    substrate, substrate_unit = _header_column(plate_map, substrate, substrate_unit,
                                               kind="concentration", what="substrate",
                                               context="plate map")
    inhibitor, inhibitor_unit = _header_column(plate_map, inhibitor, inhibitor_unit,
                                               kind="concentration", what="inhibitor",
                                               context="plate map")
    t_all, y_all = _read_table(reads, time=time, signal=signal, plate=plate, well=well)
    roles, s_map, i_map = _read_map(plate_map, plate=plate, well=well, compound=compound,
                                    substrate=substrate, inhibitor=inhibitor, role=role)

    # Concentration unit of the signal and the factor from it to the substrate's unit.
    if conversion is not None:
        sensitivity = conversion.sensitivity
        signal_conc_unit = conversion.unit
    else:
        sensitivity = 1.0
        signal_conc_unit = normalise_unit(signal_unit) if signal_unit is not None else None
    if signal_conc_unit is not None and substrate_unit is not None:
        to_substrate = float(from_molar(to_molar(1.0, signal_conc_unit), substrate_unit))
        rate_conc_unit = substrate_unit
    elif signal_conc_unit is not None:
        to_substrate = np.nan
        rate_conc_unit = signal_conc_unit
    else:
        to_substrate = np.nan
        rate_conc_unit = None
    if conversion is not None and signal_conc_unit is None and substrate_unit is None:
        raise UnitsError(Problem("conversion", None, None,
                                 "the standard curve has no unit; give it unit= or declare "
                                 "substrate_unit="))

    map_key = _key(plate_map, plate, well).to_numpy()
    read_key = _key(reads, plate, well).to_numpy()
    _check_some_match(read_key, map_key)
    map_index = pd.Index(map_key)
    where = map_index.get_indexer(read_key)
    in_map = where >= 0
    read_wells = pd.unique(read_key)
    unmatched_rows = []
    for key in pd.unique(read_key[~in_map]):
        p, w = key.split("\x1f")
        unmatched_rows.append({"plate": p, "well": w, "where": "reads",
                               "reason": "well in the reads but not in the plate map"})
    has_reads = np.isin(map_key, read_wells)
    for row in np.flatnonzero(~has_reads):
        unmatched_rows.append({"plate": plate_map[plate].iloc[row],
                               "well": plate_map[well].iloc[row], "where": "plate map",
                               "reason": "well in the plate map but without reads"})
    unmatched = pd.DataFrame(unmatched_rows, columns=["plate", "well", "where", "reason"])

    # Reads of mapped wells, blank-corrected and oriented so that product raises the signal.
    t = t_all[in_map]
    raw = y_all[in_map]
    map_row = where[in_map]
    read_role = roles[map_row]
    uses_blanks = subtract_blanks and bool(np.any(roles == "blank"))
    if uses_blanks:
        group_frame = pd.DataFrame({"p": plate_map[plate].astype(str).to_numpy()[map_row],
                                    "s": s_map[map_row]})
        group = group_frame.groupby(["p", "s"], sort=False, dropna=False).ngroup().to_numpy()
        background = blank_signal(t, raw, group, read_role == "blank")
        corrected = raw - np.nan_to_num(background)
        no_blank_read = np.isnan(background)
    else:
        corrected = raw
        no_blank_read = np.zeros(len(t), dtype=bool)
    sign = 1.0 if direction == "increase" else -1.0
    oriented = sign * corrected

    rated = read_role != "blank"
    t, raw, oriented, map_row = t[rated], raw[rated], oriented[rated], map_row[rated]
    no_blank_read = no_blank_read[rated]
    return dict(zip(_PREPARED, (time_unit, substrate_unit, inhibitor_unit, roles, s_map, i_map,
                                sensitivity, to_substrate, rate_conc_unit, map_key, has_reads,
                                unmatched, t, raw, oriented, map_row, no_blank_read)))


def product_curves(reads, plate_map, *, time="time", signal="signal", plate="plate",
                   well="well", compound="compound", substrate="substrate",
                   inhibitor="inhibitor", role="role", time_unit=None, conversion=None,
                   signal_unit=None, substrate_unit=None, inhibitor_unit=None,
                   direction="increase", stoichiometry=1.0,
                   subtract_blanks=True) -> pd.DataFrame:
    """Every read of every sample well as product formed, for fits of whole progress curves.

    The reads are checked, matched to the plate map, blank-corrected and oriented exactly
    as :func:`initial_rates` does (same options, same messages); then the signal is
    turned into substrate converted (``conversion`` or ``signal_unit``, times
    ``stoichiometry``) in the substrate's unit, and the times into seconds.

    Returns
    -------
    pandas.DataFrame
        One row per finite read of a sample well: the plate map's columns, ``time``
        (s) and ``product`` (the substrate's unit; the signal's concentration unit when
        the substrate's is undeclared; signal units when neither is known). The reads
        keep their offset (the blank when no blank wells are given): a fit of whole
        curves fits one offset per well. ``.attrs["units"]`` holds ``substrate``,
        ``inhibitor``, ``product`` and ``time`` (``s``).
    """
    _check_options("linear", direction, 0.05, 0.01, 0.1, 6, 0.1, None, stoichiometry,
                   conversion)
    prepared = _prepare(reads, plate_map, time=time, signal=signal, plate=plate, well=well,
                        compound=compound, substrate=substrate, inhibitor=inhibitor,
                        role=role, time_unit=time_unit, conversion=conversion,
                        signal_unit=signal_unit, substrate_unit=substrate_unit,
                        inhibitor_unit=inhibitor_unit, direction=direction,
                        subtract_blanks=subtract_blanks)
    to_product = 1.0 / prepared["sensitivity"] / stoichiometry
    if np.isfinite(prepared["to_substrate"]):
        to_product *= prepared["to_substrate"]
    keep = (prepared["roles"][prepared["map_row"]] == "sample") & np.isfinite(
        prepared["oriented"])
    rows = prepared["map_row"][keep]
    out = plate_map.iloc[rows].reset_index(drop=True)
    out["time"] = to_seconds(prepared["t"][keep], prepared["time_unit"])
    out["product"] = prepared["oriented"][keep] * to_product
    out = out.sort_values([plate, well, "time"], kind="stable").reset_index(drop=True)
    out.attrs["units"] = {"substrate": prepared["substrate_unit"],
                          "inhibitor": prepared["inhibitor_unit"],
                          "product": prepared["rate_conc_unit"], "time": "s"}
    return out


def initial_rates(reads, plate_map, *, time="time", signal="signal", plate="plate", well="well",
                  compound="compound", substrate="substrate", inhibitor="inhibitor",
                  role="role", time_unit=None, rate_time_unit=None, method="linear",
                  conversion=None, signal_unit=None, substrate_unit=None, inhibitor_unit=None,
                  direction="increase", stoichiometry=1.0, subtract_blanks=True, ceiling=None,
                  alpha=0.05, max_bias=0.01, max_conversion=0.10, min_points=6,
                  max_rate_cv=0.10) -> InitialRates:
    """Initial rate of every sample well from its progress curve, with quality flags.

    Parameters
    ----------
    reads : pandas.DataFrame
        Tidy kinetic reads, one row per (plate, well, time): the time since the reaction
        started (≥ 0, in ``time_unit``) and the detector signal (NaN for a missing read).
    plate_map : pandas.DataFrame
        One row per well: plate, well, compound, substrate and inhibitor concentrations
        and role (``sample``, ``blank`` = no enzyme, ``control``); without a role column
        every well is a sample. Other columns are carried into the output.
    time, signal, plate, well : str
        Column names in ``reads``. ``time`` and ``signal`` may also name a header that
        carries its unit (``time_min``, ``product_uM``), and ``time="time"`` finds a
        single ``time_<unit>`` column (likewise ``signal``): the header's unit is then
        used as if given as ``time_unit`` / ``signal_unit``.
    compound, substrate, inhibitor, role : str
        Column names in ``plate_map``.
    time_unit : str, optional
        Unit of the times (s, ms, min, h); default the unit in the time column's header
        (``time_min``), else s. A unit that contradicts the header is refused.
    rate_time_unit : str, optional
        Time unit of the reported rates; default ``time_unit``.
    method : {"linear", "curve", "integrated"}
        Straight line over the longest linear early window, slope at t = 0 of a
        quadratic over the early curve, or v0 of the integrated rate law fitted to the
        whole curve with the row's apparent km (see the module notes).
    conversion : BeerLambert or StandardCurve, optional
        Signal to concentration. Without it the signal is taken as a concentration in
        ``signal_unit`` (or, if that is None too, rates stay in signal units).
    signal_unit : str, optional
        Concentration unit of the signal when ``conversion`` is None; default the unit in
        the signal column's header (``product_uM``), if any.
    substrate_unit, inhibitor_unit : str, optional
        Units of the plate map's concentrations; default the unit in the header
        (``substrate_uM``), else undeclared. Rates come out in the substrate's unit per
        ``rate_time_unit`` when the signal's unit is known.
    direction : {"increase", "decrease"}
        Whether the signal rises or falls as the reaction proceeds (NADH consumed at
        340 nm: ``"decrease"``); rates are reported positive for product formation.
    stoichiometry : float
        Moles of substrate converted per mole of the species read.
    subtract_blanks : bool
        Subtract the mean blank curve of the same plate and substrate level.
    ceiling : float, optional
        Detector ceiling in signal units (raw, before blank subtraction); reads at or
        above it end the window.
    alpha : float
        Level of the F-tests of curvature (and, for ``method="linear"``, of the one-sided
        test that a window's conversion lies beyond ``max_conversion``).
    max_bias : float
        Relative slope bias the curvature may cause before a window stops being linear.
    max_conversion : float
        Largest fraction of substrate converted in the window (default 0.10; for
        ``method="linear"`` beyond the slope's noise, see Conversion in the module notes).
    min_points : int
        Fewest reads in a window (≥ 6).
    max_rate_cv : float
        A rate whose standard error exceeds this fraction of it is flagged ``noisy``.

    Returns
    -------
    InitialRates

    Raises
    ------
    DataError
        Missing columns, non-numeric or negative times, text in the signal, duplicated
        (plate, well, time) or (plate, well), unknown roles, bad options; the message
        names the column, row and value.
    UnitsError
        Unknown units, or a conversion whose unit cannot be matched to the substrate's.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> t = np.arange(0.0, 300.0, 10.0)
    >>> reads = pd.DataFrame({"plate": 1, "well": "A1", "time": t, "signal": 0.1 + 2e-3 * t})
    >>> plate_map = pd.DataFrame({"plate": [1], "well": ["A1"], "compound": ["X"],
    ...                           "substrate": [100.0], "inhibitor": [0.0]})
    >>> res = initial_rates(reads, plate_map, conversion=BeerLambert.of("NADH"),
    ...                     substrate_unit="uM")
    >>> round(float(res.table["rate"].iloc[0]), 4)   # µM/s: 2e-3 per s / 6220 per M
    0.3215
    """
    _check_options(method, direction, alpha, max_bias, max_conversion, min_points, max_rate_cv,
                   ceiling, stoichiometry, conversion)
    prepared = _prepare(reads, plate_map, time=time, signal=signal, plate=plate, well=well,
                        compound=compound, substrate=substrate, inhibitor=inhibitor,
                        role=role, time_unit=time_unit, conversion=conversion,
                        signal_unit=signal_unit, substrate_unit=substrate_unit,
                        inhibitor_unit=inhibitor_unit, direction=direction,
                        subtract_blanks=subtract_blanks)
    (time_unit, substrate_unit, inhibitor_unit, roles, s_map, i_map, sensitivity,
     to_substrate, rate_conc_unit, map_key, has_reads, unmatched, t, raw, oriented, map_row,
     no_blank_read) = (prepared[name] for name in _PREPARED)
    rate_time_unit = (normalise_unit(rate_time_unit, kind="time")
                      if rate_time_unit is not None else time_unit)
    options = RateOptions(method, direction, alpha, max_bias, max_conversion, min_points,
                          max_rate_cv, ceiling, stoichiometry, time_unit, rate_time_unit)
    wells_rated = np.flatnonzero((roles != "blank") & has_reads)
    code = np.searchsorted(wells_rated, map_row)
    order = np.lexsort((t, code))
    code, t, raw, oriented = code[order], t[order], raw[order], oriented[order]
    no_blank_read = no_blank_read[order]
    n_wells = len(wells_rated)
    per_well = np.bincount(code, minlength=n_wells)
    n_reads = int(per_well.max()) if n_wells else 0
    starts = np.concatenate([[0], np.cumsum(per_well)[:-1]]) if n_wells else np.array([], int)
    column = np.arange(len(code)) - starts[code]
    shape = (n_wells, n_reads)
    t_grid = np.full(shape, np.nan)
    y_grid = np.full(shape, np.nan)
    raw_grid = np.full(shape, np.nan)
    t_grid[code, column] = t
    y_grid[code, column] = oriented
    raw_grid[code, column] = raw
    valid = np.isfinite(t_grid) & np.isfinite(y_grid)
    if ceiling is not None:
        at_ceiling = raw_grid >= ceiling
        ceiling_at = np.where(at_ceiling.any(axis=1), np.argmax(at_ceiling, axis=1), n_reads)
    else:
        ceiling_at = np.full(n_wells, n_reads)
    s0 = s_map[wells_rated]
    with np.errstate(divide="ignore", invalid="ignore"):
        s0_signal = np.where(s0 > 0, s0 / to_substrate * sensitivity / stoichiometry, np.nan)

    # Degenerate windows (reads bunched at one time next to one far away) overflow to
    # inf/NaN; the finiteness checks of the assembly turn those into flagged or failed
    # wells, so the floating-point warnings would only repeat that.
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        core = _rates_core(t_grid, y_grid, valid, ceiling_at, s0_signal,
                           method="linear" if method == "integrated" else method,
                           alpha=alpha, max_bias=max_bias, max_conversion=max_conversion,
                           min_points=min_points) if n_wells else None
        if method in ("integrated", "linear") and n_wells:
            row_of = pd.factorize(pd.MultiIndex.from_arrays(
                [plate_map[compound].astype(str).to_numpy()[wells_rated],
                 i_map[wells_rated]]))[0]
            # The integrated pass starts from (and falls back to) the linear rates.
            core = _depletion_pass(core, t_grid, valid, s0, s0_signal, row_of)
            if method == "integrated":
                core = _integrated_pass(core, t_grid, y_grid, valid, ceiling_at, s0,
                                        s0_signal, row_of, min_points)
        rows = _assemble(core, t_grid, raw_grid, code, no_blank_read, conversion, n_wells,
                         options=options)
        if n_wells:
            plate_of = plate_map[plate].astype(str).to_numpy()[wells_rated]
            onset = time_dependence(t_grid, y_grid, valid, substrate=s0,
                                    inhibitor=i_map[wells_rated], group=plate_of)
            _add_flag(rows, onset["time_dependent"].to_numpy() & (rows["status"] != "failed"),
                      "time_dependent")
            # Reads from the detector's ceiling on bend for another reason.
            below = valid & (np.arange(n_reads)[None, :] < ceiling_at[:, None])
            bending = product_inhibition(t_grid, y_grid, below, s0_signal=s0_signal,
                                         inhibitor=i_map[wells_rated], group=plate_of,
                                         usable=rows["status"] != "failed")
            _add_flag(rows, bending[PRODUCT_INHIBITION].to_numpy() & (rows["status"] != "failed"),
                      PRODUCT_INHIBITION)

    factor = to_seconds(1.0, rate_time_unit) / to_seconds(1.0, time_unit)
    to_rate_unit = factor / sensitivity / stoichiometry
    if np.isfinite(to_substrate):
        to_rate_unit = to_rate_unit * to_substrate
    rate_unit = f"{rate_conc_unit or 'signal'}/{rate_time_unit}"

    base = plate_map.reset_index(drop=True)
    out = base.iloc[wells_rated].copy()
    out["rate"] = rows["rate"] * to_rate_unit
    out["rate_se"] = rows["rate_se"] * to_rate_unit
    for name in ("window_start", "window_end", "n_points", "conversion", "residual_sd"):
        out[name] = rows[name]
    out["method"] = method
    out["flags"] = rows["flags"]
    out["status"] = rows["status"]
    missing = base.iloc[np.flatnonzero((roles != "blank") & ~has_reads)].copy()
    if len(missing):
        for name in ("rate", "rate_se", "window_start", "window_end", "conversion",
                     "residual_sd"):
            missing[name] = np.nan
        missing["n_points"] = 0
        missing["method"] = method
        missing["flags"] = "no_reads"
        missing["status"] = "failed"
        out = pd.concat([out, missing]).sort_index()
    role_of = np.asarray(roles)[out.index.to_numpy()]
    units = {"substrate": substrate_unit, "inhibitor": inhibitor_unit, "rate": rate_unit,
             "time": time_unit}
    table = out[role_of == "sample"].reset_index(drop=True)
    controls = out[role_of == "control"].reset_index(drop=True)
    table.attrs["units"] = dict(units)
    return InitialRates(table, controls, unmatched, units, options)


def _row_kapp(rates, s0, s0_signal, row_of):
    """Each well's row Kapp as signal and the variance of its logarithm, fitted to
    ``rates`` (``rate``, ``rate_se``); (None, None) when there are no rows."""
    kapp_row, log_var_row = row_apparent_km(s0, rates["rate"], rates["rate_se"], row_of)
    if not len(kapp_row):
        return None, None
    with np.errstate(divide="ignore", invalid="ignore"):
        return kapp_row[row_of] * s0_signal / s0, log_var_row[row_of]


def _integrated_pass(core, t_grid, y_grid, valid, ceiling_at, s0, s0_signal, row_of,
                     min_points):
    """The second pass of ``method="integrated"`` (:mod:`inhibkin.rates.integrated`) over
    the linear pass's ``core``: its wells' rates from their whole curves. The rows' Kapp
    is estimated again from the integrated rates (the linear rates it first came from
    carry the depletion bias), :data:`ROW_PASSES` times in all."""
    usable = valid & (np.arange(t_grid.shape[1])[None, :] < ceiling_at[:, None])
    enough = ~core["failed"] & np.isfinite(s0_signal) & (usable.sum(axis=1) >= min_points)
    out = dict(core)
    fitted = np.zeros(len(s0), dtype=bool)
    for _ in range(ROW_PASSES):
        kapp_signal, log_var = _row_kapp(out, s0, s0_signal, row_of)
        if kapp_signal is None:
            break
        fitting = enough & np.isfinite(kapp_signal)
        if not fitting.any():
            break
        second = integrated_rates(t_grid[fitting], y_grid[fitting], usable[fitting],
                                  s0_signal[fitting], kapp_signal[fitting],
                                  log_var[fitting], core["rate"][fitting])
        good = np.isfinite(second["rate"]) & np.isfinite(second["rate_se"])
        where = np.flatnonzero(fitting)[good]
        out = dict(core)
        for name, values in second.items():
            column = np.array(core[name], dtype=float, copy=True)
            column[where] = values[good]
            out[name] = column if name != "position_end" else column.astype(int)
        fitted = np.zeros(len(s0), dtype=bool)
        fitted[where] = True
    # The curve carries depletion: the linear window's tests and the conversion cap do
    # not apply to a well rated from its whole curve.
    out["nonlinear"] = core["nonlinear"] & ~fitted
    out["curve_fitted"] = fitted
    out["linear_rate"] = ~fitted & ~core["failed"]
    return out


def _depletion_pass(core, t_grid, valid, s0, s0_signal, row_of):
    """``method="linear"``: each window's slope with its depletion bias removed by the
    row's apparent km (:mod:`inhibkin.rates.depletion`); the rows' Kapp is estimated
    again from the corrected rates, :data:`ROW_PASSES` times in all. Wells whose
    substrate is unknown as signal keep the slope."""
    if not np.isfinite(s0_signal).any():
        return core
    in_window = valid & (np.arange(t_grid.shape[1])[None, :] <= core["position_end"][:, None])
    beta = window_curvature(t_grid, in_window)
    out = dict(core)
    for _ in range(ROW_PASSES):
        kapp_signal, log_var = _row_kapp(out, s0, s0_signal, row_of)
        if kapp_signal is None:
            break
        rate, se = depletion_corrected(core["rate"], core["rate_se"], beta, s0_signal,
                                       kapp_signal, log_var)
        out = dict(core, rate=np.where(core["failed"], core["rate"], rate),
                   rate_se=np.where(core["failed"], core["rate_se"], se))
    return out


def _add_flag(rows, mask, name):
    """Append flag ``name`` to the wells in ``mask`` (status ok becomes flagged)."""
    flags = rows["flags"]
    rows["flags"] = np.where(mask, np.where(flags == "", name, flags + ";" + name), flags)
    rows["status"] = np.where(mask & (rows["status"] == "ok"), "flagged", rows["status"])


def _assemble(core, t_grid, raw_grid, code, no_blank_read, conversion, n_wells, *, options):
    """Per-well flags and status from the core's arrays."""
    if core is None:
        empty = np.array([], dtype=float)
        return {k: empty for k in ("rate", "rate_se", "window_start", "window_end",
                                   "n_points", "conversion", "residual_sd")} | {
            "flags": np.array([], dtype=object), "status": np.array([], dtype=object)}
    rate, se = core["rate"], core["rate_se"]
    with np.errstate(invalid="ignore"):
        flat = np.abs(rate) <= _FLAT_T * se
        negative = rate < -_FLAT_T * se
        imprecise = ~flat & ~negative & (se > options.max_rate_cv * np.abs(rate))
        high_conversion = core["beyond_conversion"] & ~core.get("curve_fitted", False)
    in_window = np.arange(t_grid.shape[1])[None, :] <= core["position_end"][:, None]
    if isinstance(conversion, StandardCurve):
        outside = conversion.outside(raw_grid) & np.isfinite(raw_grid) & in_window
        out_of_range = outside.any(axis=1)
    else:
        out_of_range = np.zeros(n_wells, dtype=bool)
    no_blank = np.bincount(code, weights=no_blank_read, minlength=n_wells) > 0
    failed = core["failed"]
    named = {
        "conversion": high_conversion & ~failed,
        "lag": core["lag"],
        "burst": core["burst"],
        "nonlinear": core["nonlinear"],
        "ceiling": core["ceiling"],
        "out_of_range": out_of_range & ~failed,
        "too_few_points": failed,
        "no_blank": no_blank,
        "flat": flat & ~failed,
        "negative_slope": negative & ~failed,
        "noisy": imprecise & ~failed,
        "linear_rate": core.get("linear_rate", np.zeros(n_wells, dtype=bool)),
    }
    flags = np.full(n_wells, "", dtype=object)
    for name, mask in named.items():
        flags = np.where(mask, np.where(flags == "", name, flags + ";" + name), flags)
    status = np.where(failed, "failed", np.where(flags == "", "ok", "flagged"))
    return {**{k: core[k] for k in ("rate", "rate_se", "window_start", "window_end",
                                    "n_points", "conversion", "residual_sd")},
            "flags": flags, "status": status}
