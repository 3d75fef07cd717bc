"""The figures a reviewer checks: progress curves with their fits, kobs against [I].

Each function takes a :class:`~inhibkin.time_dependent.TimeDependentFit` first, draws on
``ax`` when given (else on a new figure, not attached to pyplot) and returns the Axes.
The curves come from the fit's ``fitted_progress()`` and ``fitted_kobs()``, which the
report's SVG sketches draw too.
"""

from __future__ import annotations

import numpy as np

from ..display.figures import level_palette, new_figure


def _axes(ax):
    return ax if ax is not None else new_figure()[1][0, 0]


def progress_curves(fit, *, ax=None):
    """Reads of every well (points) and its fitted slow-onset curve (line), by [I].

    Parameters
    ----------
    fit : TimeDependentFit
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    ax = _axes(ax)
    wells = fit.kobs.sort_values("inhibitor", kind="stable")
    curves = fit.fitted_progress(200)
    colours = level_palette(len(wells))
    for colour, (_, row) in zip(colours, wells.iterrows()):
        reads = fit.reads[fit.reads["well"] == row["well"]]
        ax.plot(reads["time"], reads["signal"], ".", ms=3, color=colour)
        curve = curves[curves["well"] == row["well"]]
        if len(curve):
            ax.plot(curve["time"], curve["signal"], "-", lw=1, color=colour,
                    label=f"{row['inhibitor']:g}")
    ax.set_xlabel("time")
    ax.set_ylabel("signal")
    ax.set_title("Progress curves and slow-onset fits")
    ax.legend(title="[I]", fontsize="x-small", title_fontsize="small")
    return ax


def kobs_against_inhibitor(fit, *, ax=None):
    """kobs of every well with its interval, and both schemes' fitted curves (apparent).

    The chosen scheme is drawn solid, the other dashed.

    Parameters
    ----------
    fit : TimeDependentFit
    ax : matplotlib.axes.Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
    """
    ax = _axes(ax)
    rows = fit.kobs[(fit.kobs["inhibitor"] > 0) & np.isfinite(fit.kobs["kobs_low"])]
    ax.errorbar(rows["inhibitor"], rows["kobs"],
                yerr=[rows["kobs"] - rows["kobs_low"], rows["kobs_high"] - rows["kobs"]],
                fmt="o", color="0.2", ms=4, capsize=2, label="kobs per well")
    for name, curve in fit.fitted_kobs(200).groupby("scheme", sort=False):
        chosen = bool(curve["chosen"].iloc[0])
        ax.plot(curve["inhibitor"], curve["kobs"], "-" if chosen else "--", lw=1.2,
                label=name + (" (chosen)" if chosen else ""))
    ax.set_xlabel("[I]")
    ax.set_ylabel("kobs (per time unit)")
    ax.set_title("kobs against [I]")
    ax.legend(fontsize="x-small")
    return ax
