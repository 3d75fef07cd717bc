"""Figures an enzymologist checks before believing a fit: seaborn on matplotlib, no window.

Every function takes the result (or the data) first, options by keyword, draws on
``ax`` when given (else on a new figure) and returns the Axes (or the Figure for the
multi-panel views). Nothing here touches pyplot: figures are plain
:class:`matplotlib.figure.Figure` objects, drawn by the Agg renderer when saved, so no
display is ever needed, a notebook's own backend is left alone, and a report that
draws hundreds of figures leaks none of them into pyplot's global state. Because no
backend is asked for, the figures draw themselves in a notebook (:class:`NotebookFigure`,
a PNG through ``_repr_png_``) without ``%matplotlib inline``.

Colour scheme
-------------
Inhibitor levels are ordered, so they get an ordered palette: a cubehelix ramp
(Green 2011, Bull. Astr. Soc. India 39:289) whose lightness falls monotonically from
the uninhibited level (light) to the highest inhibitor level (dark), so it reads in
grey and does not rely on telling red from green. Each level also has its own marker
and line style (:data:`LEVEL_MARKERS`, :data:`LEVEL_LINES`), so the levels stay
distinct in a black-and-white print. The five models get seaborn's colour-blind
palette plus a hatch pattern each (:data:`MODEL_HATCHES`).

Linearised views
----------------
Double-reciprocal, Dixon and S/v-against-I plots distort the error structure and are
shown for diagnosis only: their titles say so, and the lines drawn on them are the
global nonlinear fit transformed, never a straight-line fit of the transformed data.

Failed fits
-----------
A figure of a fit that failed, or of a model that did not converge, draws the data
and writes the reason on the axes instead of raising.
"""

from __future__ import annotations

import io
import textwrap
from dataclasses import dataclass

import matplotlib as mpl
import numpy as np
import pandas as pd
import seaborn as sns
from matplotlib.figure import Figure
from matplotlib.ticker import LogLocator

from ..core.logistic import PARAM_NAMES, logistic4, logistic4_jacobian
from ..core.models import MODELS
from ..errors import OptionError
from ..units import from_molar

__all__ = [
    "AxisUnits",
    "LEVEL_MARKERS",
    "LEVEL_LINES",
    "MODEL_HATCHES",
    "DIAGNOSTIC_PREFIX",
    "level_palette",
    "model_colours",
    "new_figure",
    "FigurePool",
    "Margins",
    "LAYOUTS",
    "DOSE_MARGINS",
    "NotebookFigure",
    "plot_global_fit",
    "plot_residuals",
    "plot_residual_grid",
    "plot_akaike_weights",
    "plot_dose_response",
    "dose_response_band",
    "plot_double_reciprocal",
    "plot_dixon",
    "plot_s_over_v",
    "plot_diagnostics",
    "plot_mechanism_overview",
]

#: Markers and line styles by inhibitor level (cycled when there are more levels).
LEVEL_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h")
LEVEL_LINES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1)), (0, (1, 2)), (0, (8, 2)), (0, (3, 3)))
#: Hatch patterns, handed to the models in their registry order (distinct while there
#: are no more models than patterns; tests/test_figures.py checks it).
HATCH_PATTERNS = ("", "//", "\\\\", "xx", "..", "++", "oo", "--", "||", "**",
                  "/o", "\\o", "x.", "+o", "-.", "|*", "/.", "\\*", "x-", "+|",
                  "O", "O.", "o-", "*-")
#: Hatch pattern per model (bar charts stay readable in grey).
MODEL_HATCHES = {name: HATCH_PATTERNS[k % len(HATCH_PATTERNS)]
                 for k, name in enumerate(MODELS)}
#: Every linearised view's title starts with this.
DIAGNOSTIC_PREFIX = "Diagnostic only (linearised view, not the fit)"

# Points on each fitted curve, and the substrate span the curves cover beyond the data.
_CURVE_POINTS = 200
# Figure sizes in inches; the report scales them down.
_PANEL_SIZE = (4.8, 3.6)
# Resolution (dpi) of the PNG a figure shows in a notebook: matplotlib's default figure.dpi.
_NOTEBOOK_DPI = 100
# Characters per line of a reason written on a failed figure.
_WRAP = 48
# Marker size (points across) of the residual points: the 16 pt² of the scatter they were
# drawn with before. They are drawn as a line's markers: a marker line costs less to build
# and draw than a scatter's collection, and the residual grid draws a hundred of them.
_MARKER_SIZE = 4.0
# The same for the cell means of the linearised views (18 pt², as their scatters were).
_CELL_MARKER_SIZE = float(np.sqrt(18.0))
# Normal quantile of the default 95 % band (common practice: 1.96 for a two-sided 95 %).
_Z95 = 1.959963984540054


@dataclass(frozen=True)
class AxisUnits:
    """Unit labels of the axes, and factors from the stored values to the shown ones.

    Parameters
    ----------
    substrate, inhibitor, rate : str
        Unit labels, e.g. ``"µM"``, ``"nM"``, ``"µM/min"``; empty for unitless.
    substrate_factor, inhibitor_factor : float
        Shown value = stored value × factor (1 when the fit already uses the shown unit).
    """

    substrate: str = ""
    inhibitor: str = ""
    rate: str = ""
    substrate_factor: float = 1.0
    inhibitor_factor: float = 1.0

    @classmethod
    def from_molar(cls, *, substrate="uM", inhibitor="nM", rate="") -> AxisUnits:
        """Labels for a fit whose concentrations are stored in M (as in a Campaign)."""
        return cls(_pretty(substrate), _pretty(inhibitor), rate,
                   float(from_molar(1.0, substrate)), float(from_molar(1.0, inhibitor)))

    def label(self, quantity: str, unit: str) -> str:
        """``"quantity (unit)"`` or the quantity alone when unitless."""
        return f"{quantity} ({unit})" if unit else quantity


def _pretty(unit: str) -> str:
    return unit.replace("u", "µ", 1) if unit.startswith("u") else unit


def level_palette(n: int) -> list:
    """``n`` colours from light (no inhibitor) to dark (most inhibitor), monotone lightness."""
    return sns.cubehelix_palette(max(n, 1), start=0.3, rot=-0.55, gamma=1.0, hue=0.9,
                                 light=0.62, dark=0.12)


def model_colours() -> dict:
    """One colour per model (seaborn's colour-blind palette)."""
    colours = sns.color_palette("colorblind", len(MODELS))
    return dict(zip(MODELS, colours))


class NotebookFigure(Figure):
    """A plain matplotlib Figure that shows itself as a PNG in a notebook.

    Figures made outside pyplot get no display hook from a notebook's backend, so a
    notebook would print only ``<Figure size ... with n Axes>``; ``_repr_png_`` (the
    hook IPython looks for on any object) renders the figure with the Agg canvas the
    figure already has.
    """

    def _repr_png_(self) -> bytes:
        buffer = io.BytesIO()
        self.savefig(buffer, format="png", dpi=_NOTEBOOK_DPI)
        return buffer.getvalue()


@dataclass(frozen=True)
class Margins:
    """Fixed margins of a figure, in inches: around the panels (left, right, bottom,
    top) and between them (wgap across, hgap down).

    The constrained layout measures every tick label and title before the figure is
    drawn, which costs about a third of a report figure's time (measured: 1.9 s → 1.3 s
    of CPU for one compound's three grid figures); a figure whose contents are known
    can be given its margins instead (``layout="fixed"``).
    """

    left: float = 0.75
    right: float = 0.2
    bottom: float = 0.55
    top: float = 0.45
    wgap: float = 0.6
    hgap: float = 0.6

    def apply(self, fig, nrows, ncols) -> None:
        width, height = fig.get_size_inches()
        panel_w = (width - self.left - self.right - (ncols - 1) * self.wgap) / ncols
        panel_h = (height - self.bottom - self.top - (nrows - 1) * self.hgap) / nrows
        fig.subplots_adjust(left=self.left / width, right=1 - self.right / width,
                            bottom=self.bottom / height, top=1 - self.top / height,
                            wspace=self.wgap / panel_w, hspace=self.hgap / panel_h)


#: How a multi-panel figure is laid out: measured before drawing (the default), or by
#: its own :class:`Margins` (cheaper; the report draws its figures this way).
LAYOUTS = ("constrained", "fixed")


def new_figure(nrows=1, ncols=1, *, size=_PANEL_SIZE, margins: Margins | None = None,
               **kwargs):
    """A figure not attached to pyplot's state (safe in threads and loops, no leaks),
    shown as an image in a notebook (:class:`NotebookFigure`); laid out by the
    constrained layout, or by ``margins`` when given."""
    fig = NotebookFigure(figsize=(size[0] * ncols, size[1] * nrows),
                         layout="constrained" if margins is None else None)
    if margins is None:
        axes = fig.subplots(nrows, ncols, squeeze=False, **kwargs)
    else:
        # Titles at the top edge of their panels (plus the usual pad), not placed above
        # whatever the panel draws there: nothing is drawn there, and the search measures
        # every x tick label of the panel at each draw (about a tenth of a report figure).
        with mpl.rc_context({"axes.titley": 1.0}):
            axes = fig.subplots(nrows, ncols, squeeze=False, **kwargs)
        margins.apply(fig, nrows, ncols)
    return fig, axes


def _margins(layout, fixed: Margins) -> Margins | None:
    if layout not in LAYOUTS:
        raise OptionError(f"layout must be one of {LAYOUTS}, got {layout!r}")
    return fixed if layout == "fixed" else None


class FigurePool:
    """Figures kept from one call of a multi-panel view to the next, their data cleared.

    A panel's ticks are the dearest part of a report figure to build (each is two lines,
    two labels and a grid line: about a quarter of the CPU of one compound's figures); a
    figure kept and cleared of its data keeps its ticks, and the next compound is drawn
    on it. The pixels are those of a new figure (tests/test_figures.py checks). For
    figures saved one at a time, as the report does: the next call of the same view
    draws over the figure the last one returned.
    """

    def __init__(self):
        self._figures = {}

    def figure(self, nrows=1, ncols=1, *, size=_PANEL_SIZE, margins=None, **kwargs):
        """:func:`new_figure`'s figure and axes, the kept ones when there are."""
        key = (nrows, ncols, tuple(size), margins, tuple(sorted(kwargs.items())))
        kept = self._figures.get(key)
        if kept is None:
            kept = self._figures[key] = new_figure(nrows, ncols, size=size, margins=margins,
                                                   **kwargs)
            return kept
        for ax in kept[1].flat:
            _clear_data(ax)
        return kept


def _clear_data(ax) -> None:
    """``ax`` as a view function finds a new panel, its ticks kept (not ``ax.clear()``,
    which builds them again): no artists, legend, titles or labels; linear scales and
    the limits of a new axes."""
    for artist in [*ax.lines, *ax.collections, *ax.patches, *ax.texts, *ax.images]:
        artist.remove()
    if ax.legend_ is not None:
        ax.legend_.remove()
    ax.containers.clear()
    ax.set_title("")
    ax.set_xlabel("")
    ax.set_ylabel("")
    ax.set_xscale("linear")
    ax.set_yscale("linear")
    # A new axes' limits, the right way up, and autoscaled from the next data (a panel
    # that gets none, as on a failed fit, keeps these).
    ax.relim()
    ax.set_xlim(0.0, 1.0, auto=True)
    ax.set_ylim(0.0, 1.0, auto=True)


def _figure(pool, *args, **kwargs):
    return new_figure(*args, **kwargs) if pool is None else pool.figure(*args, **kwargs)


# The multi-panel figures' fixed margins (inches): room for two-line panel titles, the
# model names beside the support bars, and a title over the panels.
_OVERVIEW_MARGINS = Margins(top=0.65, wgap=1.35)
_RESIDUAL_GRID_MARGINS = Margins(top=0.7, wgap=0.3, hgap=0.65)
_DIAGNOSTIC_MARGINS = Margins(top=0.85, wgap=0.8)
#: Margins of a one-panel dose-response figure (the report's).
DOSE_MARGINS = Margins(left=0.65, right=0.15, bottom=0.5, top=0.3)


def _axes(ax):
    if ax is not None:
        return ax
    return new_figure()[1][0, 0]


# ---------------------------------------------------------------- data access


def _grid_data(fit_or_data) -> pd.DataFrame:
    """The substrate, inhibitor, rate table of a MechanismFit or a DataFrame."""
    data = getattr(fit_or_data, "data", fit_or_data)
    if not isinstance(data, pd.DataFrame):
        raise TypeError("expected a MechanismFit or a DataFrame with columns substrate, "
                        f"inhibitor and rate, got {type(fit_or_data).__name__}")
    return data


def _is_fit(obj) -> bool:
    return hasattr(obj, "models") and hasattr(obj, "verdict")


def _model_name(fit, model):
    if model is not None:
        return model
    return fit.best if fit.best is not None else "mixed"


def _usable_model(fit, model):
    """(ModelFit or None, reason it cannot be drawn)."""
    if not _is_fit(fit):
        return None, "data only (no fit given)"
    name = _model_name(fit, model)
    m = fit.models.get(name)
    if m is None:
        return None, f"model {name!r} was not fitted"
    if not m.converged:
        return None, f"{name} fit did not converge: {m.message}"
    return m, ""


def _cell_summary(data, units: AxisUnits) -> pd.DataFrame:
    """Mean, SD and count of the rate in every (substrate, inhibitor) cell, shown units."""
    frame = pd.DataFrame({"s": data["substrate"].to_numpy(float) * units.substrate_factor,
                          "i": data["inhibitor"].to_numpy(float) * units.inhibitor_factor,
                          "v": data["rate"].to_numpy(float)})
    cells = frame.groupby(["i", "s"], sort=True)["v"].agg(["mean", "std", "count"])
    return cells.reset_index()


def _failure_note(ax, reason, *, loc="center"):
    y = 0.5 if loc == "center" else 0.97
    va = "center" if loc == "center" else "top"
    ax.text(0.5, y, "\n".join(textwrap.wrap(reason, _WRAP)), transform=ax.transAxes,
            ha="center", va=va, fontsize=8, color="0.1",
            bbox=dict(boxstyle="round", facecolor="0.93", edgecolor="0.4"))


def _fmt_level(value, unit):
    return f"I = {value:.3g} {unit}".rstrip()


def _verdict_line(fit) -> str:
    if not _is_fit(fit):
        return ""
    if fit.verdict == "ambiguous":
        return f"verdict: ambiguous ({', '.join(fit.candidates)})"
    return f"verdict: {fit.verdict}"


# ---------------------------------------------------------------- the global fit


def plot_global_fit(fit_or_data, *, model=None, units=None, log_x=False, ax=None):
    """Rate against substrate, one fitted curve per inhibitor level.

    Parameters
    ----------
    fit_or_data : MechanismFit or pandas.DataFrame
        A fit (its ``.data`` is drawn, with the curves of ``model``) or a table with
        columns ``substrate``, ``inhibitor`` and ``rate`` (points only).
    model : str, optional
        The model whose curves are drawn; default the fit's best (mixed when failed).
    units : AxisUnits, optional
        Unit labels and display factors.
    log_x : bool
        Log-scaled substrate axis.
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Points are cell means with ±1 SD error bars where a cell has replicates.
    """
    units = units or AxisUnits()
    ax = _axes(ax)
    data = _grid_data(fit_or_data)
    cells = _cell_summary(data, units)
    levels = np.unique(cells["i"])
    colours = level_palette(len(levels))
    m, reason = _usable_model(fit_or_data, model)
    s_shown = cells["s"].to_numpy()
    positive = s_shown[s_shown > 0]
    s_hi = s_shown.max() * 1.05 if s_shown.size else 1.0
    if log_x and positive.size:
        curve_s = np.geomspace(positive.min() / 1.5, s_hi, _CURVE_POINTS)
    else:
        curve_s = np.linspace(0.0, s_hi, _CURVE_POINTS)
    for k, level in enumerate(levels):
        cell = cells[cells["i"] == level]
        style = dict(color=colours[k], marker=LEVEL_MARKERS[k % len(LEVEL_MARKERS)])
        replicated = cell["count"] > 1
        yerr = np.where(replicated, cell["std"].fillna(0.0), 0.0)
        ax.errorbar(cell["s"], cell["mean"], yerr=yerr if replicated.any() else None,
                    linestyle="none", markersize=5, markeredgecolor="0.15", markeredgewidth=0.6,
                    capsize=2, elinewidth=0.8, label=_fmt_level(level, units.inhibitor),
                    **style)
        if m is not None:
            law = MODELS[m.model]
            curve = law.rate(curve_s / units.substrate_factor,
                             np.full(curve_s.size, level / units.inhibitor_factor),
                             *m.params["estimate"].loc[list(law.param_names)].to_numpy())
            ax.plot(curve_s, curve, color=colours[k],
                    linestyle=LEVEL_LINES[k % len(LEVEL_LINES)], linewidth=1.4)
    if log_x and positive.size:
        ax.set_xscale("log")
    ax.set_xlabel(units.label("substrate", units.substrate))
    ax.set_ylabel(units.label("initial rate", units.rate))
    title = "Global fit" if m is not None else "Data"
    if m is not None:
        title += f": {m.model} (all levels at once)"
    line = _verdict_line(fit_or_data)
    ax.set_title(title + (f"\n{line}" if line else ""), fontsize=10)
    if m is None and _is_fit(fit_or_data):
        _failure_note(ax, f"No curve drawn: {reason}. {fit_or_data.reason}", loc="top")
    ax.legend(fontsize=7, title="inhibitor", title_fontsize=7, frameon=False,
              loc="lower right")
    ax.set_ylim(bottom=min(0.0, ax.get_ylim()[0]))
    return ax


# ---------------------------------------------------------------- residuals


def plot_residuals(fit, *, model=None, against="fitted", units=None, ax=None):
    """Residuals of one model against its fitted rate or against substrate.

    Parameters
    ----------
    fit : MechanismFit
    model : str, optional
        Default the best model.
    against : {"fitted", "substrate"}
    units : AxisUnits, optional
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Unweighted residuals v − v̂ (rate units); markers and shades by inhibitor level.
        With relative weighting a funnel here is expected; the weighted residuals are
        the ones the fit treats as equal.
    """
    if against not in ("fitted", "substrate"):
        raise ValueError(f"against must be 'fitted' or 'substrate', got {against!r}")
    units = units or AxisUnits()
    ax = _axes(ax)
    data = _grid_data(fit)
    name = _model_name(fit, model) if _is_fit(fit) else "—"
    m, reason = _usable_model(fit, model)
    ax.axhline(0.0, color="0.3", linewidth=0.8)
    ax.set_ylabel(units.label("residual", units.rate))
    xlabel = (units.label("fitted rate", units.rate) if against == "fitted"
              else units.label("substrate", units.substrate))
    ax.set_xlabel(xlabel)
    ax.set_title(f"Residuals: {name} vs {'fitted' if against == 'fitted' else 'substrate'}",
                 fontsize=10)
    if m is None:
        _failure_note(ax, f"No residuals: {reason}")
        return ax
    i_shown = data["inhibitor"].to_numpy(float) * units.inhibitor_factor
    levels = np.unique(i_shown)
    colours = level_palette(len(levels))
    x = m.fitted if against == "fitted" else data["substrate"].to_numpy(float) * \
        units.substrate_factor
    for k, level in enumerate(levels):
        on = i_shown == level
        ax.plot(x[on], m.residuals[on], linestyle="none", color=colours[k],
                markersize=_MARKER_SIZE, marker=LEVEL_MARKERS[k % len(LEVEL_MARKERS)],
                markeredgecolor="0.15", markeredgewidth=0.4,
                label=_fmt_level(level, units.inhibitor))
    if against == "substrate" and np.all(x > 0):
        ax.set_xscale("log")
        ax.xaxis.set_minor_locator(_InViewLogLocator(subs="auto"))
    return ax


class _InViewLogLocator(LogLocator):
    """The minor ticks of a log axis, only those inside its view.

    matplotlib's LogLocator returns every tick of each decade the view touches, beyond
    both ends too, and the axis builds a tick (two lines, two labels, a grid line) for
    each before it drops those outside: a third of a residual grid's minor ticks. The
    ticks drawn are the same; the tolerance is the one the axis keeps ticks by.
    """

    def __call__(self):
        ticks = np.asarray(super().__call__(), dtype=float)
        low, high = sorted(np.log10(self.axis.get_view_interval()))
        slack = 1e-10 * max(high - low, 1e-300)
        with np.errstate(divide="ignore", invalid="ignore"):
            at = np.log10(ticks)
        return ticks[(at >= low - slack) & (at <= high + slack)]


def plot_residual_grid(fit, *, models=None, units=None, layout="constrained",
                       pool=None) -> Figure:
    """Residuals of every converged model: against fitted (top row), substrate (bottom).

    Parameters
    ----------
    fit : MechanismFit
    models : sequence of str, optional
        Default every fitted model.
    units : AxisUnits, optional
    layout : {"constrained", "fixed"}
        See :data:`LAYOUTS`.
    pool : FigurePool, optional
        Draw on the figure the pool kept from the last call (see :class:`FigurePool`).

    Returns
    -------
    matplotlib.figure.Figure
        One column per model; the y axis is shared so the models compare at a glance.
    """
    names = list(models) if models is not None else list(fit.models)
    fig, axes = _figure(pool, 2, len(names), size=(3.0, 2.5), sharey=True,
                           margins=_margins(layout, _RESIDUAL_GRID_MARGINS))
    for k, name in enumerate(names):
        plot_residuals(fit, model=name, against="fitted", units=units, ax=axes[0, k])
        plot_residuals(fit, model=name, against="substrate", units=units, ax=axes[1, k])
        for row in (0, 1):
            axes[row, k].set_title(name if row == 0 else "", fontsize=9)
            if k:
                axes[row, k].set_ylabel("")
    fig.suptitle("Residuals per model (top: vs fitted rate; bottom: vs substrate)", fontsize=10)
    return fig


# ---------------------------------------------------------------- model comparison


def plot_akaike_weights(fit, *, ax=None):
    """Akaike weights (from AICc) of the candidate models, with ΔAICc written on each bar.

    Parameters
    ----------
    fit : MechanismFit
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Non-converged models appear as empty rows marked "not converged". The
        verdict is decided by the F-tests and AICc rules, not by these weights alone
        (see :mod:`inhibkin.core.compare`); the title says which verdict they led to.
    """
    ax = _axes(ax)
    table = fit.comparison
    colours = model_colours()
    names = list(table.index)
    weights = table["akaike_weight"].to_numpy(float)
    y = np.arange(len(names))
    for k, name in enumerate(names):
        w = weights[k] if np.isfinite(weights[k]) else 0.0
        ax.barh(y[k], w, color=colours.get(name, "0.5"), edgecolor="0.1",
                hatch=MODEL_HATCHES.get(name, ""), linewidth=0.8)
        if not bool(table["converged"].iloc[k]):
            text = "not converged"
        else:
            text = f"w = {w:.2f}, ΔAICc = {table['delta_aicc'].iloc[k]:.1f}"
        ax.text(min(w, 0.98) + 0.02 if w < 0.6 else w - 0.02, y[k], text, va="center",
                ha="left" if w < 0.6 else "right", fontsize=7,
                color="0.05" if w < 0.6 else "white",
                bbox=None if w < 0.6 else dict(facecolor="0.2", edgecolor="none", pad=1))
    ax.set_yticks(y, names)
    ax.invert_yaxis()
    ax.set_xlim(0.0, 1.0)
    ax.set_xlabel("Akaike weight (AICc)")
    ax.set_title(f"Model support\n{_verdict_line(fit)}", fontsize=10)
    if fit.verdict == "failed":
        _failure_note(ax, fit.reason)
    return ax


# ---------------------------------------------------------------- dose-response


def dose_response_band(x, estimates, covariance, *, free=PARAM_NAMES, z=_Z95):
    """Pointwise band of a 4PL curve from the parameter covariance (delta method).

    Parameters
    ----------
    x : array_like
        log10 concentrations.
    estimates : mapping
        top, bottom, log_ic50, hill (log_ic50 in log10 of the concentration's unit).
    covariance : array_like, shape (k, k)
        Covariance of the ``free`` parameters at the optimum.
    free : sequence of str
        The fitted parameters, in :data:`inhibkin.core.logistic.PARAM_NAMES` order; fixed
        ones (e.g. top = 100) contribute no uncertainty.
    z : float
        Normal quantile of the band (1.96 for 95 %).

    Returns
    -------
    low, high : numpy.ndarray
        ŷ ∓ z·sqrt(gᵀΣg), g the gradient of the curve in the free parameters at each
        x. A band for the fitted mean curve, not a prediction band for new wells.
    """
    x = np.asarray(x, dtype=float)
    theta = [float(estimates[n]) for n in PARAM_NAMES]
    centre = logistic4(x, *theta)
    columns = [PARAM_NAMES.index(n) for n in free]
    g = logistic4_jacobian(x, *theta)[:, columns]
    var = np.einsum("ni,ij,nj->n", g, np.asarray(covariance, dtype=float), g)
    half = z * np.sqrt(np.clip(var, 0.0, None))
    return centre - half, centre + half


def plot_dose_response(fit, *, conc_unit="", response_label="activity (%)", band=True,
                       reason=None, ax=None):
    """Response against log concentration with the fitted 4PL curve and its 95 % band.

    Parameters
    ----------
    fit : DoseResponseFit or pandas.DataFrame
        A potency fit (:func:`inhibkin.potency.curve.fit_dose_response`), or, for a compound
        whose fit failed, a table with columns ``conc`` and ``response`` (points only).
    conc_unit : str
        Unit label of the concentration (the fit's unit).
    response_label : str
        y-axis label, with its unit.
    band : bool
        Draw the pointwise 95 % band of the mean curve from the 4PL parameter
        covariance (delta method, :func:`dose_response_band`); omitted when the
        covariance is missing (singular). The band comes from the covariance, not
        from the profile likelihood, so it is symmetric about the curve.
    reason : str, optional
        Written on the axes when there is no curve (e.g. why the fit failed).
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Zero concentrations cannot sit on a log axis; they are drawn at the left edge
        as open squares.
    """
    ax = _axes(ax)
    if isinstance(fit, pd.DataFrame):
        conc, response = fit["conc"].to_numpy(float), fit["response"].to_numpy(float)
        estimates, name = None, None
    else:
        conc, response = np.asarray(fit.conc, float), np.asarray(fit.response, float)
        estimates = fit.estimates if fit.converged else None
        if estimates is not None and not np.all(np.isfinite(list(estimates.values()))):
            estimates = None
        name = fit.compound
        reason = reason or (None if fit.converged else fit.message)
    colour = level_palette(3)[1]
    positive = conc > 0
    with np.errstate(divide="ignore"):
        x = np.log10(conc[positive])
    ax.scatter(x, response[positive], color=colour, edgecolor="0.1", s=18, marker="o",
               label="wells")
    lo = x.min() if x.size else 0.0
    hi = x.max() if x.size else 1.0
    if np.any(~positive):
        lo = lo - 0.5
        ax.scatter(np.full(int(np.sum(~positive)), lo), response[~positive], facecolor="none",
                   edgecolor="0.1", s=18, marker="s", label="no compound")
    if estimates is not None:
        grid = np.linspace(lo - 0.2, hi + 0.2, _CURVE_POINTS)
        if band and fit.covariance is not None and np.all(np.isfinite(fit.covariance)):
            low, high = dose_response_band(grid, estimates, fit.covariance, free=fit.free)
            ax.fill_between(grid, low, high, color=colour, alpha=0.3, linewidth=0,
                            label="95% band (covariance)")
        ax.plot(grid, logistic4(grid, **estimates), color="0.1", linewidth=1.4,
                label="4PL fit")
        if lo <= estimates["log_ic50"] <= hi:
            ax.axvline(estimates["log_ic50"], color="0.35", linestyle="--", linewidth=0.8)
        title = f"IC50 = {fit.reported_ic50} {conc_unit}".rstrip()
    else:
        title = "no fitted curve"
        _failure_note(ax, reason or "the fit did not converge", loc="top")
    ax.set_title((f"{name}: " if name is not None else "Dose-response: ") + title, fontsize=9)
    ax.set_xlabel(f"log10 concentration ({conc_unit})" if conc_unit else "log10 concentration")
    ax.set_ylabel(response_label)
    ax.legend(fontsize=6, frameon=False, loc="lower left")
    return ax


# ---------------------------------------------------------------- linearised diagnostics


def _positive_cells(fit_or_data, units):
    cells = _cell_summary(_grid_data(fit_or_data), units)
    keep = (cells["s"] > 0) & (cells["mean"] > 0)
    return cells[keep], int((~keep).sum())


def _model_at(fit_or_data, s_shown, i_shown, units):
    m, _ = _usable_model(fit_or_data, None)
    if m is None:
        return None
    law = MODELS[m.model]
    return law.rate(np.asarray(s_shown) / units.substrate_factor,
                    np.asarray(i_shown) / units.inhibitor_factor,
                    *m.params["estimate"].loc[list(law.param_names)].to_numpy())


def _diagnostic_title(ax, name, dropped, fit_or_data):
    m, reason = _usable_model(fit_or_data, None)
    lines = f"lines: {m.model} fit, transformed" if m is not None else f"no lines: {reason}"
    note = f"; {dropped} cells with S = 0 or v ≤ 0 left out" if dropped else ""
    ax.set_title(f"{DIAGNOSTIC_PREFIX}\n{name} — {lines}{note}", fontsize=8)


def plot_double_reciprocal(fit_or_data, *, units=None, ax=None):
    """1/v against 1/S, one series per inhibitor level (diagnostic only).

    Parameters
    ----------
    fit_or_data : MechanismFit or pandas.DataFrame
    units : AxisUnits, optional
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Points are cell means; lines are the global fit transformed (not a fit in
        this space). Lines crossing on the 1/v axis suggest competitive, parallel
        lines uncompetitive, crossing on the 1/S axis noncompetitive.
    """
    units = units or AxisUnits()
    inv = f"1/{units.substrate}" if units.substrate else ""
    return _linearised(
        fit_or_data, by="i", x_of=lambda s, i: 1.0 / s, y_of=lambda s, v: 1.0 / v,
        name="double reciprocal", xlabel=units.label("1 / substrate", inv),
        ylabel=units.label("1 / rate", f"1/({units.rate})" if units.rate else ""),
        series_label=lambda level: _fmt_level(level, units.inhibitor), units=units, ax=ax)


def _linearised(fit_or_data, *, by, x_of, y_of, name, xlabel, ylabel, series_label, units,
                ax):
    """One linearised view: a series per level of ``by`` ("i": inhibitor, the line runs
    along S; "s": substrate, the line runs along I), cell means as points and the
    global fit transformed as lines; ``x_of(s, i)`` and ``y_of(s, v)`` set the axes."""
    ax = _axes(ax)
    cells, dropped = _positive_cells(fit_or_data, units)
    levels = np.unique(cells[by])
    colours = level_palette(len(levels))
    for k, level in enumerate(levels):
        cell = cells[cells[by] == level]
        s, i = cell["s"].to_numpy(), cell["i"].to_numpy()
        ax.plot(x_of(s, i), y_of(s, cell["mean"].to_numpy()), linestyle="none",
                color=colours[k], markersize=_CELL_MARKER_SIZE, markeredgecolor="0.15",
                markeredgewidth=0.4, marker=LEVEL_MARKERS[k % len(LEVEL_MARKERS)],
                label=series_label(level))
        if len(cell):
            if by == "i":
                s_line, i_line = np.geomspace(s.min(), s.max(), 50), np.full(50, level)
            else:
                s_line, i_line = np.full(50, level), np.linspace(i.min(), i.max(), 50)
            v_line = _model_at(fit_or_data, s_line, i_line, units)
            if v_line is not None:
                ax.plot(x_of(s_line, i_line), y_of(s_line, v_line), color=colours[k],
                        linestyle=LEVEL_LINES[k % len(LEVEL_LINES)], linewidth=1.0)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    _diagnostic_title(ax, name, dropped, fit_or_data)
    ax.legend(fontsize=6, frameon=False)
    return ax


def _against_inhibitor(fit_or_data, transform, name, ylabel, *, units, ax):
    return _linearised(
        fit_or_data, by="s", x_of=lambda s, i: i, y_of=transform, name=name,
        xlabel=units.label("inhibitor", units.inhibitor), ylabel=ylabel,
        series_label=lambda level: f"S = {level:.3g} {units.substrate}".rstrip(), units=units,
        ax=ax)


def plot_dixon(fit_or_data, *, units=None, ax=None):
    """1/v against I, one series per substrate level (Dixon view; diagnostic only).

    Parameters
    ----------
    fit_or_data : MechanismFit or pandas.DataFrame
    units : AxisUnits, optional
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    units = units or AxisUnits()
    label = units.label("1 / rate", f"1/({units.rate})" if units.rate else "")
    return _against_inhibitor(fit_or_data, lambda s, v: 1.0 / v, "Dixon (1/v vs I)", label,
                              units=units, ax=ax)


def plot_s_over_v(fit_or_data, *, units=None, ax=None):
    """S/v against I, one series per substrate level (diagnostic only).

    Parameters
    ----------
    fit_or_data : MechanismFit or pandas.DataFrame
    units : AxisUnits, optional
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        Together with the Dixon view it separates competitive from mixed and
        uncompetitive patterns: parallel lines here point to competitive.
    """
    units = units or AxisUnits()
    unit = f"{units.substrate}/({units.rate})" if units.substrate and units.rate else ""
    return _against_inhibitor(fit_or_data, lambda s, v: s / v, "S/v vs I",
                              units.label("S / rate", unit), units=units, ax=ax)


def plot_diagnostics(fit_or_data, *, units=None, layout="constrained", pool=None) -> Figure:
    """The three linearised views side by side (diagnostic only); ``layout``: see
    :data:`LAYOUTS`; ``pool``: see :class:`FigurePool`."""
    fig, axes = _figure(pool, 1, 3, size=(4.0, 3.4),
                        margins=_margins(layout, _DIAGNOSTIC_MARGINS))
    plot_double_reciprocal(fit_or_data, units=units, ax=axes[0, 0])
    plot_dixon(fit_or_data, units=units, ax=axes[0, 1])
    plot_s_over_v(fit_or_data, units=units, ax=axes[0, 2])
    fig.suptitle(DIAGNOSTIC_PREFIX, fontsize=10)
    return fig


def plot_mechanism_overview(fit, *, units=None, log_x=False, layout="constrained",
                            pool=None) -> Figure:
    """Global fit, model support and the best model's residuals in one figure.

    Parameters
    ----------
    fit : MechanismFit
    units : AxisUnits, optional
    log_x : bool
        Log-scaled substrate axis on the global fit.
    layout : {"constrained", "fixed"}
        See :data:`LAYOUTS`.
    pool : FigurePool, optional
        Draw on the figure the pool kept from the last call (see :class:`FigurePool`).

    Returns
    -------
    matplotlib.figure.Figure
    """
    fig, axes = _figure(pool, 1, 3, size=(4.2, 3.5),
                        margins=_margins(layout, _OVERVIEW_MARGINS))
    plot_global_fit(fit, units=units, log_x=log_x, ax=axes[0, 0])
    plot_akaike_weights(fit, ax=axes[0, 1])
    plot_residuals(fit, units=units, ax=axes[0, 2])
    return fig
