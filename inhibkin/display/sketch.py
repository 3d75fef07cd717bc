"""Small inline SVG sketches of a fit, drawn straight from its numbers.

The report shows every compound, so its per-compound figures must cost milliseconds: a
sketch is a few hundred bytes of SVG text written from the fit's arrays (no plotting
library, no rasterising), placed inline in the HTML, so the page stays one
self-contained file. The full matplotlib figures (:mod:`inhibkin.display.figures`) are drawn
only for the compounds the report is asked to detail.

Inhibitor levels use the same ordered ramp as :mod:`inhibkin.display.figures` (cubehelix,
Green 2011, Bull. Astr. Soc. India 39:289, lightness falling from the uninhibited
level to the highest), computed here from the published formula.
"""

from __future__ import annotations

import math
from functools import lru_cache
from html import escape

import numpy as np

from ..core.models import MODELS

__all__ = ["level_colours", "grid_sketch", "residual_sketch", "dose_response_sketch",
           "progress_sketch", "kobs_sketch"]

# Size of a sketch and its margins (CSS pixels).
_WIDTH, _HEIGHT = 250, 160
_LEFT, _RIGHT, _TOP, _BOTTOM = 34, 8, 16, 26
# Width kept for the legend of inhibitor levels, right of the grid sketch.
_LEGEND = 70
# Points along each drawn curve.
_CURVE_POINTS = 30
# Reads drawn per well in a progress-curve sketch (evenly thinned): the fitted line shows
# the rest, and the sketch stays a few kilobytes whatever the read count.
_READS_PER_WELL = 16
# The ramp of figures.level_palette (cubehelix start, rotations, hue, gamma, lightness).
_RAMP = dict(start=0.3, rot=-0.55, hue=0.9, gamma=1.0, light=0.62, dark=0.12)
_INK = "#222"
_FAINT = "#999"


@lru_cache(maxsize=32)
def level_colours(n: int) -> tuple:
    """``n`` hex colours from light (no inhibitor) to dark (most inhibitor).

    The cubehelix formula of Green (2011): lightness λ, angle φ = 2π(start/3 + rot·λ),
    amplitude a = hue·λ^γ(1 − λ^γ)/2, each channel λ^γ + a(c₁ cos φ + c₂ sin φ).
    """
    lam = np.linspace(_RAMP["light"], _RAMP["dark"], max(n, 1)) ** _RAMP["gamma"]
    phi = 2 * np.pi * (_RAMP["start"] / 3 + _RAMP["rot"] * lam)
    amp = _RAMP["hue"] * lam * (1 - lam) / 2
    cos, sin = np.cos(phi), np.sin(phi)
    rgb = np.stack([lam + amp * (-0.14861 * cos + 1.78277 * sin),
                    lam + amp * (-0.29227 * cos - 0.90649 * sin),
                    lam + amp * (1.97294 * cos)], axis=1)
    rgb = np.clip(np.rint(rgb * 255), 0, 255).astype(int)
    return tuple(f"#{r:02x}{g:02x}{b:02x}" for r, g, b in rgb)


def _tick(x: float) -> str:
    return f"{x:.3g}"


class _Frame:
    """Data → pixel mapping of one plot area, and the SVG pieces drawn on it."""

    def __init__(self, x_range, y_range, *, width=_WIDTH, height=_HEIGHT):
        self.width, self.height = width, height
        self.x0, self.x1 = _span(*x_range)
        self.y0, self.y1 = _span(*y_range)
        self.px0, self.px1 = _LEFT, width - _RIGHT
        self.py0, self.py1 = height - _BOTTOM, _TOP
        self.parts: list[str] = []

    def px(self, x):
        return self.px0 + (np.asarray(x, float) - self.x0) / (self.x1 - self.x0) * (
            self.px1 - self.px0)

    def py(self, y):
        return self.py0 + (np.asarray(y, float) - self.y0) / (self.y1 - self.y0) * (
            self.py1 - self.py0)

    def axes(self, xlabel: str, ylabel: str, *, xticks=None, yticks=None) -> None:
        p = self.parts
        p.append(f'<path d="M{self.px0} {self.py1}V{self.py0}H{self.px1}" fill="none" '
                 f'stroke="{_INK}" stroke-width="0.8"/>')
        for x in (self.x0, self.x1) if xticks is None else xticks:
            p.append(f'<text x="{self.px(x):.1f}" y="{self.py0 + 10}" '
                     f'text-anchor="middle">{escape(_tick(x))}</text>')
        for y in (self.y0, self.y1) if yticks is None else yticks:
            p.append(f'<text x="{self.px0 - 3}" y="{self.py(y) + 3:.1f}" '
                     f'text-anchor="end">{escape(_tick(y))}</text>')
        p.append(f'<text x="{(self.px0 + self.px1) / 2:.1f}" y="{self.height - 4}" '
                 f'text-anchor="middle">{escape(xlabel)}</text>')
        p.append(f'<text x="4" y="{_TOP - 5}">{escape(ylabel)}</text>')

    def line(self, x, y, colour, *, dash="", width=1.2) -> None:
        keep = np.isfinite(x) & np.isfinite(y)
        if keep.sum() < 2:
            return
        xs, ys = self.px(np.asarray(x)[keep]), self.py(np.clip(
            np.asarray(y)[keep], self.y0, self.y1))
        points = _pairs("%.1f,%.1f ", xs, ys)[:-1]
        dashed = f' stroke-dasharray="{dash}"' if dash else ""
        self.parts.append(f'<polyline points="{points}" fill="none" stroke="{colour}" '
                          f'stroke-width="{width}"{dashed}/>')

    def dots(self, x, y, colour, *, open_square=False) -> None:
        # A zero-length stroke with round caps is a dot: one short path per series keeps
        # a sketch of hundreds of points to a few kilobytes.
        keep = np.isfinite(x) & np.isfinite(y)
        if not keep.any():
            return
        xs, ys = self.px(np.asarray(x)[keep]), self.py(np.asarray(y)[keep])
        if open_square:
            d = _pairs("M%.1f %.1fh5v5h-5z", xs - 2.5, ys - 2.5)
            self.parts.append(f'<path d="{d}" fill="none" stroke="{_INK}"/>')
        else:
            d = _pairs("M%.1f %.1fh0", xs, ys)
            self.parts.append(f'<path d="{d}" stroke="{colour}" stroke-width="5" '
                              'stroke-linecap="round"/>')

    def note(self, text: str) -> None:
        self.parts.append(f'<text x="{(self.px0 + self.px1) / 2:.1f}" '
                          f'y="{(self.py0 + self.py1) / 2:.1f}" text-anchor="middle" '
                          f'fill="#555">{escape(text)}</text>')

    def svg(self, label: str, *, extra_width=0) -> str:
        width = self.width + extra_width
        return (f'<svg class="sketch" role="img" width="{width}" height="{self.height}" '
                f'viewBox="0 0 {width} {self.height}" font-size="9" '
                f'font-family="sans-serif"><title>{escape(label)}</title>'
                + "".join(self.parts) + "</svg>")


def _pairs(template: str, xs, ys) -> str:
    """``template`` (two %-fields) written for every (x, y) pair, concatenated: one
    formatting of the whole series, not an f-string per point (a report writes about
    two hundred points per compound)."""
    return (template * len(xs)) % tuple(np.column_stack([xs, ys]).ravel().tolist())


def _span(low, high):
    low, high = float(low), float(high)
    if not (math.isfinite(low) and math.isfinite(high)):
        return 0.0, 1.0
    if high <= low:
        pad = abs(low) * 0.1 or 1.0
        return low - pad, high + pad
    return low, high


def _cells(s, i, v):
    """Mean rate of every (inhibitor, substrate) cell: arrays i, s, mean (sorted by i, s)."""
    keys, inverse = np.unique(np.stack([i, s], axis=1), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    mean = np.bincount(inverse, weights=v) / np.bincount(inverse)
    return keys[:, 0], keys[:, 1], mean


def _grid_arrays(fit, units):
    data = fit.data
    s = data["substrate"].to_numpy(float) * units.substrate_factor
    i = data["inhibitor"].to_numpy(float) * units.inhibitor_factor
    return s, i, data["rate"].to_numpy(float)


def _best_model(fit):
    best = fit.best_fit
    if best is None or not best.converged:
        return None
    return best


def grid_sketch(fit, *, units, label="") -> str:
    """Rate against substrate, cell means per inhibitor level, the best model's curves.

    Parameters
    ----------
    fit : MechanismFit
    units : inhibkin.display.figures.AxisUnits
        Unit labels and display factors of the axes.
    label : str
        Text for the sketch's accessible title (escaped).

    Returns
    -------
    str
        An ``<svg>`` element; every text in it is escaped.
    """
    s, i, v = _grid_arrays(fit, units)
    ci, cs, mean = _cells(s, i, v)
    levels = np.unique(ci)
    colours = level_colours(len(levels))
    s_hi = float(np.nanmax(cs)) * 1.05 if cs.size else 1.0
    y_hi = float(np.nanmax(mean)) * 1.1 if mean.size else 1.0
    frame = _Frame((0.0, s_hi), (min(0.0, float(np.nanmin(mean, initial=0.0))), y_hi))
    frame.axes(units.label("substrate", units.substrate),
               units.label("rate", units.rate))
    model = _best_model(fit)
    curve_s = np.linspace(0.0, s_hi, _CURVE_POINTS)
    if model is not None:
        law = MODELS[model.model]
        estimate = model.params["estimate"]
        theta = [float(estimate[name]) for name in law.param_names]
    for k, level in enumerate(levels):
        at = ci == level
        if model is not None:
            curve = law.rate(curve_s / units.substrate_factor,
                             np.full(curve_s.size, level / units.inhibitor_factor), *theta)
            frame.line(curve_s, curve, colours[k])
        frame.dots(cs[at], mean[at], colours[k])
        y = _TOP + 4 + 11 * k
        frame.parts.append(f'<circle cx="{_WIDTH + 4}" cy="{y}" r="2.6" fill="{colours[k]}" '
                           f'stroke="{_INK}" stroke-width="0.5"/><text x="{_WIDTH + 10}" '
                           f'y="{y + 3}">{escape(_tick(level))} {escape(units.inhibitor)}'
                           "</text>")
    frame.parts.append(f'<text x="{_LEFT + 4}" y="{_TOP - 5}" dx="60">'
                       f'{escape(model.model if model is not None else "no fitted model")}'
                       "</text>")
    return frame.svg(label or "global fit", extra_width=_LEGEND)


def residual_sketch(fit, *, units, label="") -> str:
    """Residuals v − v̂ of the best model against its fitted rate, shaded by level.

    Returns an empty string when no model converged (the grid sketch says so).
    """
    model = _best_model(fit)
    if model is None:
        return ""
    _, i, _ = _grid_arrays(fit, units)
    fitted, resid = np.asarray(model.fitted, float), np.asarray(model.residuals, float)
    levels, index = np.unique(i, return_inverse=True)
    colours = level_colours(len(levels))
    bound = float(np.nanmax(np.abs(resid), initial=0.0)) * 1.1 or 1.0
    frame = _Frame((min(0.0, float(np.nanmin(fitted))), float(np.nanmax(fitted)) * 1.05),
                   (-bound, bound))
    frame.axes(units.label("fitted rate", units.rate),
               f"residual of {model.model}", yticks=(-bound, 0.0, bound))
    frame.line(np.array([frame.x0, frame.x1]), np.zeros(2), _FAINT, dash="3 2", width=0.8)
    for k in range(len(levels)):
        at = index.reshape(-1) == k
        frame.dots(fitted[at], resid[at], colours[k])
    return frame.svg(label or "residuals")


def dose_response_sketch(fit, *, conc_unit="", label="") -> str:
    """Activity against log10 concentration with the fitted 4PL curve.

    Wells without compound (concentration 0) sit at the left edge as open squares; the
    dashed line marks the IC50 when it lies in the tested range.
    """
    from ..core.logistic import logistic4

    conc, response = np.asarray(fit.conc, float), np.asarray(fit.response, float)
    positive = conc > 0
    x = np.log10(conc[positive])
    lo, hi = (float(x.min()), float(x.max())) if x.size else (0.0, 1.0)
    if np.any(~positive):
        lo -= 0.5
    finite = response[np.isfinite(response)]
    frame = _Frame((lo - 0.2, hi + 0.2), (min(0.0, float(finite.min(initial=0.0))),
                                          max(110.0, float(finite.max(initial=0.0)))))
    frame.axes(f"log10 concentration ({conc_unit})" if conc_unit else "log10 concentration",
               "activity (%)", xticks=(lo, hi), yticks=(0.0, 100.0))
    colour = level_colours(3)[1]
    estimates = fit.estimates if fit.converged else None
    if estimates is not None and np.all(np.isfinite(list(estimates.values()))):
        grid = np.linspace(lo - 0.2, hi + 0.2, _CURVE_POINTS)
        frame.line(grid, logistic4(grid, **estimates), _INK)
        if lo <= estimates["log_ic50"] <= hi:
            frame.line(np.full(2, estimates["log_ic50"]), np.array([frame.y0, frame.y1]),
                       _FAINT, dash="3 2", width=0.8)
    else:
        frame.note("no fitted curve")
    frame.dots(x, response[positive], colour)
    frame.dots(np.full(int(np.sum(~positive)), lo), response[~positive], colour,
               open_square=True)
    return frame.svg(label or "dose-response")


def _finite_max(values) -> float:
    """The largest finite value (1.0 when there is none: an empty sketch still draws)."""
    values = np.asarray(values, float)
    finite = values[np.isfinite(values)]
    return float(finite.max()) if finite.size else 1.0


def _legend(frame, levels, colours, unit="") -> None:
    """The inhibitor levels beside the plot area (the grid sketch's legend)."""
    for k, level in enumerate(levels):
        y = _TOP + 4 + 11 * k
        frame.parts.append(f'<circle cx="{_WIDTH + 4}" cy="{y}" r="2.6" fill="{colours[k]}" '
                           f'stroke="{_INK}" stroke-width="0.5"/><text x="{_WIDTH + 10}" '
                           f'y="{y + 3}">{escape(_tick(level))} {escape(unit)}</text>')


def progress_sketch(reads, fitted, *, label="") -> str:
    """Progress curves: each well's reads (thinned) and its fitted slow-onset line.

    Parameters
    ----------
    reads, fitted : pandas.DataFrame
        Tidy well, inhibitor, time, signal: the reads, and the fitted curves
        (``TimeDependentFit.reads`` with the wells' [I], and
        ``TimeDependentFit.fitted_progress()``).
    label : str
        Accessible title (escaped).

    Returns
    -------
    str
        An ``<svg>`` element, shaded by [I] as the grid sketch is.
    """
    levels = np.unique(reads["inhibitor"].to_numpy(float))
    colours = level_colours(len(levels))
    t, y = reads["time"].to_numpy(float), reads["signal"].to_numpy(float)
    top, bottom = _finite_max(y), -_finite_max(-y)
    # Read noise dipping below 0 at t = 0 does not move the axis off 0.
    frame = _Frame((0.0, _finite_max(t)),
                   (bottom if bottom < -0.05 * abs(top) else 0.0, top * 1.05))
    frame.axes("time", "signal")
    for well, part in reads.groupby("well", sort=False):
        k = int(np.searchsorted(levels, float(part["inhibitor"].iloc[0])))
        step = max(1, math.ceil(len(part) / _READS_PER_WELL))
        frame.dots(part["time"].to_numpy(float)[::step],
                   part["signal"].to_numpy(float)[::step], colours[k])
        line = fitted[fitted["well"] == well]
        frame.line(line["time"].to_numpy(float), line["signal"].to_numpy(float), _INK,
                   width=0.9)
    _legend(frame, levels, colours)
    return frame.svg(label or "progress curves", extra_width=_LEGEND)


def kobs_sketch(points, curves, *, label="") -> str:
    """kobs of every well with its interval, and each scheme's fitted kobs against [I].

    Parameters
    ----------
    points : pandas.DataFrame
        inhibitor, kobs, kobs_low, kobs_high of the wells used.
    curves : pandas.DataFrame
        Tidy scheme, chosen, inhibitor, kobs (``TimeDependentFit.fitted_kobs()``): the
        chosen scheme solid, the other dashed.
    label : str
        Accessible title (escaped).

    Returns
    -------
    str
        An ``<svg>`` element.
    """
    x = points["inhibitor"].to_numpy(float)
    k, low, high = (points[c].to_numpy(float) for c in ("kobs", "kobs_low", "kobs_high"))
    # The wells and the chosen scheme set the range; the other scheme is cut where it
    # leaves it (a line far above the data would flatten both).
    chosen_kobs = curves.loc[curves["chosen"].astype(bool), "kobs"].to_numpy(float)
    top = _finite_max(np.concatenate([high, k, chosen_kobs])) * 1.05
    frame = _Frame((0.0, _finite_max(curves["inhibitor"].to_numpy(float))), (0.0, top))
    frame.axes("[I]", "kobs")
    for a, b, c in zip(x, low, high):
        frame.line(np.array([a, a]), np.array([b, c]), _FAINT, width=0.8)
    colour = level_colours(3)[1]
    frame.dots(x, k, colour)
    names = []
    for name, part in curves.groupby("scheme", sort=False):
        chosen = bool(part["chosen"].iloc[0])
        y = part["kobs"].to_numpy(float)
        frame.line(part["inhibitor"].to_numpy(float), np.where(y <= top, y, np.nan), _INK,
                   dash="" if chosen else "3 2", width=1.2 if chosen else 0.8)
        names.append(f"{name} {'solid' if chosen else 'dashed'}")
    frame.parts.append(f'<text x="{_LEFT + 4}" y="{_TOP - 5}" dx="30">'
                       f'{escape(", ".join(names))}</text>')
    return frame.svg(label or "kobs against [I]")
