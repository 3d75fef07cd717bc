"""Per-compound figures written to files: PNG (150 dpi by default) or SVG.

:func:`write_figures` draws, for every compound of a campaign, the mechanism overview
(global fit, model support, residuals) of its grid fit and the dose-response curve of
its potency fit, one file each, and an ``index.csv`` that maps every compound — under
its exact input text — to its files. File names are the compound's text made safe for
any file system (letters, digits, ``-``, ``_``, ``.``; others become ``_``), with a
number added when two compounds would share a name.
"""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd

from ..errors import DataError, Problem

__all__ = ["FIGURE_FORMATS", "MIN_DPI", "write_figures"]

FIGURE_FORMATS = ("png", "svg")
#: The lowest resolution a PNG figure is written at (dots per inch).
MIN_DPI = 150
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_MAX_STEM = 80


def _stem(compound, taken) -> str:
    stem = _UNSAFE.sub("_", str(compound)).strip("._")[:_MAX_STEM] or "compound"
    candidate, k = stem, 1
    while candidate.lower() in taken:
        k += 1
        candidate = f"{stem}_{k}"
    taken.add(candidate.lower())
    return candidate


def write_figures(campaign, directory, *, format="png", dpi=MIN_DPI, units=None) -> pd.DataFrame:
    """Write every compound's figures into ``directory``.

    Parameters
    ----------
    campaign : inhibkin.Campaign
    directory : str or os.PathLike
        Created when missing (its parent must exist).
    format : {"png", "svg"}
    dpi : float
        Resolution of PNG files (at least :data:`MIN_DPI`).
    units : inhibkin.display.figures.AxisUnits, optional
        Axis units; default the campaign's declared units (else µM substrate, nM
        inhibitor).

    Returns
    -------
    pandas.DataFrame
        The index written to ``index.csv``: compound, mechanism_figure,
        dose_response_figure (file names, empty when the compound has no such fit).
    """
    import matplotlib.pyplot as plt

    from ..display import figures
    from ..inputs.io import atomic_output, write_table

    if format not in FIGURE_FORMATS:
        raise DataError(Problem("format", None, format, f"use one of {', '.join(FIGURE_FORMATS)}"))
    if format == "png" and not dpi >= MIN_DPI:
        raise DataError(Problem("dpi", None, dpi, f"PNG figures are written at {MIN_DPI} dpi "
                                                  f"or more"))
    directory = Path(directory)
    if not (directory.parent if str(directory.parent) else Path(".")).is_dir():
        raise DataError(Problem("--figures", None, str(directory),
                                "the parent directory does not exist"))
    directory.mkdir(exist_ok=True)
    if units is None:
        declared = dict(campaign.options.get("units", {}) or {})
        units = figures.AxisUnits.from_molar(substrate=declared.get("substrate", "uM"),
                                             inhibitor=declared.get("inhibitor", "nM"))
    taken: set = set()
    rows = []
    for compound in campaign.ranking["compound"]:
        stem = _stem(compound, taken)
        row = {"compound": compound, "mechanism_figure": "", "dose_response_figure": ""}
        drawings = []
        if compound in campaign.fits:
            drawings.append(("mechanism_figure", f"{stem}_mechanism.{format}",
                             lambda c=compound: figures.plot_mechanism_overview(
                                 campaign.fits[c], units=units)))
        if compound in campaign.potency_fits:
            def dose(c=compound):
                fig, axes = figures.new_figure(size=(4.0, 3.0))
                # A campaign's curves are in M, as the report draws them.
                figures.plot_dose_response(campaign.potency_fits[c], conc_unit="M",
                                           ax=axes[0, 0])
                return fig
            drawings.append(("dose_response_figure", f"{stem}_dose_response.{format}", dose))
        for column, name, draw in drawings:
            fig = draw()
            try:
                with atomic_output(directory / name) as temporary:
                    fig.savefig(temporary, format=format, dpi=dpi, metadata={
                        "Software": None} if format == "png" else {"Creator": None})
            finally:
                plt.close(fig)
            row[column] = name
        rows.append(row)
    index = pd.DataFrame(rows, columns=["compound", "mechanism_figure", "dose_response_figure"])
    write_table(index, directory / "index.csv")
    return index
