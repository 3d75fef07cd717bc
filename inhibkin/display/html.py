"""HTML views of results: the notebook display and the cells the report is built from.

The ``_repr_html_`` of :class:`~inhibkin.mechanism.fit.MechanismFit`, potency fits and
:class:`~inhibkin.campaign.result.Campaign` call :func:`fit_html`, :func:`dose_response_html` and
:func:`campaign_html` here (lazily: matplotlib loads only when a notebook asks), so the
results never import the report; :mod:`inhibkin.reporting.report` builds its page from the same
cells. Every text goes through Jinja2 with autoescaping on.
"""

from __future__ import annotations

import base64
import io
import math

import numpy as np
import pandas as pd
from jinja2 import Environment, PackageLoader, select_autoescape
from markupsafe import Markup, escape

from ..units import from_molar, molar_unit, normalise_unit, unit_label
from . import figures
from .text import format_estimate, ki_texts, ranking_ki_unit

__all__ = ["ENVIRONMENT", "REPORT_DPI", "LAYOUT_DPI", "NOTEBOOK_DPI", "NOTEBOOK_LAYOUT_DPI",
           "png_uri", "png_image",
           "number_text", "cell",
           "table_cells", "table_html", "parameter_cells", "ranking_rows", "fit_html",
           "dose_response_html", "campaign_html"]

#: Scale of the page: a figure of w inches is shown w × LAYOUT_DPI CSS pixels wide.
LAYOUT_DPI = 72
#: Resolution of the report's figures (dots per inch): twice the layout's, so each CSS pixel
#: holds 2 × 2 image pixels and the figures stay sharp on high-density screens and when
#: zoomed to 200 % (about 2.3 times the bytes of a 72 dpi figure).
REPORT_DPI = 2 * LAYOUT_DPI
#: Scale of the notebook views: smaller than the report's, so a view fits beside the code.
NOTEBOOK_LAYOUT_DPI = 60
#: Resolution of the notebook figures: twice their layout's, as sharp as the report's.
NOTEBOOK_DPI = 2 * NOTEBOOK_LAYOUT_DPI
# zlib level of the embedded PNGs: one compound's three report figures take 73 ms to
# compress at levels 1 to 3 against 106 ms at the default 6, for 5 % more bytes (407 KB
# against 387 KB, measured); above 3 the time grows faster than the bytes fall.
_PNG_COMPRESSION = 3



def png_uri(fig, dpi=REPORT_DPI) -> str:
    """A figure as a base64 PNG data URI (no metadata: it would carry a web address)."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None},
                pil_kwargs={"compress_level": _PNG_COMPRESSION})
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def png_image(fig, dpi=REPORT_DPI, *, layout_dpi=LAYOUT_DPI) -> dict:
    """A figure as an image of the page: its PNG data URI (``src``) at ``dpi``, and the
    size it is shown at (``width``, ``height`` in CSS pixels, at ``layout_dpi``), so a
    higher ``dpi`` makes the figure sharper, never larger."""
    width, height = fig.get_size_inches()
    return {"src": png_uri(fig, dpi), "width": round(width * layout_dpi),
            "height": round(height * layout_dpi)}


def _notebook_image(fig) -> dict:
    return png_image(fig, NOTEBOOK_DPI, layout_dpi=NOTEBOOK_LAYOUT_DPI)


def number_text(x, fmt="{:.3g}") -> str:
    # Floats first: pd.isna costs more than the formatting, and a report formats
    # hundreds of thousands of cells.
    if isinstance(x, (float, np.floating)):
        return fmt.format(float(x)) if math.isfinite(x) else ""
    if x is None or pd.isna(x):
        return ""
    return fmt.format(float(x))


def _sort_key(x) -> str:
    """The value a table cell sorts by (numbers as numbers, empty cells last)."""
    if isinstance(x, str):
        return x
    if isinstance(x, (bool, np.bool_)):
        return str(bool(x))
    if isinstance(x, (int, float, np.integer, np.floating)):
        return repr(float(x)) if math.isfinite(float(x)) else ""
    if x is None or pd.isna(x):
        return ""
    return str(x)


def cell(text, sort=None) -> dict:
    return {"text": "" if text is None else str(text),
            "sort": _sort_key(text if sort is None else sort)}


def table_cells(frame: pd.DataFrame, *, index=True, fmt="{:.4g}", yes_no=False) -> dict:
    """A DataFrame as header + rows of cells for the template (numbers formatted; with
    ``yes_no``, true and false written "yes" and "no")."""
    columns = ([frame.index.name or ""] if index else []) + [str(c) for c in frame.columns]
    rows = []
    # One object array, not itertuples: a report builds two of these per compound.
    for label, values in zip(frame.index.tolist(), frame.to_numpy(object)):
        cells = [cell(label)] if index else []
        for value in values:
            if isinstance(value, (float, np.floating)):
                cells.append(cell(number_text(value, fmt), value))
            elif yes_no and isinstance(value, (bool, np.bool_)):
                cells.append(cell("yes" if value else "no"))
            else:
                cells.append(cell(value))
        rows.append(cells)
    return {"columns": columns, "rows": rows}


def table_html(table: dict, cls: str = "") -> Markup:
    """The HTML of a table of :func:`table_cells` (its columns and rows of cells), every
    text escaped; sort keys (``data-sort``) only in a ``sortable`` table, since only those
    are sorted in the page.

    Written here rather than as a template macro: a report writes about seven tables per
    compound, and a Jinja2 macro call per table and a loop step per cell cost more than the
    joined strings (profiled: the macro was 1.2 s of the 1.5 s render of a 1,000-compound
    report).
    """
    sortable = "sortable" in cls
    rows = []
    for row in table["rows"]:
        if sortable:
            cells = "".join(f'<td data-sort="{escape(c["sort"])}">{escape(c["text"])}</td>'
                            for c in row)
        else:
            cells = "".join(f"<td>{escape(c['text'])}</td>" for c in row)
        rows.append(f"<tr>{cells}</tr>\n")
    header = "".join(f'<th scope="col">{escape(c)}</th>' for c in table["columns"])
    return Markup(f'<table class="{escape(cls)}">\n<thead><tr>{header}</tr></thead>\n'
                  f'<tbody>\n{"".join(rows)}</tbody>\n</table>\n')


#: The templates (inhibkin/display/templates), autoescaped; ``table`` is :func:`table_html`.
ENVIRONMENT = Environment(loader=PackageLoader("inhibkin.display", "templates"),
                          autoescape=select_autoescape(default=True, default_for_string=True),
                          trim_blocks=True, lstrip_blocks=True)
ENVIRONMENT.globals["table"] = table_html


def parameter_cells(model_fit, *, molar=False) -> dict:
    """Estimate as read (a number, or a bound), standard error and interval.

    With ``molar`` (constants in M, as a campaign holds them) each concentration
    constant (km, kic, kiu, ki) is written in the unit its estimate suggests
    (:func:`inhibkin.units.molar_unit`), named in a unit column, never as raw molar.
    """
    from ..core.models import MODELS

    pct = f"{100 * model_fit.level:g}%"
    rows = []
    params = model_fit.params
    law = MODELS[model_fit.model]
    concentrations = {n for n, role in zip(law.param_names, law.roles)
                      if role in ("substrate", "inhibitor")}
    # One array of the five columns, not iterrows or a column at a time: a report builds
    # five of these tables per compound (a column read from a DataFrame costs ~20 µs).
    names = ("estimate", "se", "ci_low", "ci_high", "determined")
    columns = params.columns.tolist()
    values = params.to_numpy(object)[:, [columns.index(n) for n in names]]
    for name, numbers in zip(params.index.tolist(), values):
        row = dict(zip(names, numbers))
        unit = ""
        if molar and name in concentrations:
            reference = row["estimate"] if row["determined"] else row["ci_low"]
            unit = molar_unit(reference) if np.isfinite(reference) and reference > 0 else "M"
            per_unit = from_molar(1.0, unit)
            row = {**row, **{c: row[c] * per_unit for c in ("estimate", "se", "ci_low",
                                                            "ci_high")}}
        cells = [cell(name), cell(format_estimate(row), row["estimate"]),
                 cell(number_text(row["se"]), row["se"]),
                 cell(f"[{number_text(row['ci_low'])}, {number_text(row['ci_high'])}]",
                      row["ci_low"]),
                 cell("yes" if row["determined"] else "no")]
        rows.append(cells[:1] + [cell(unit)] + cells[1:] if molar else cells)
    header = ["parameter", "estimate", "SE", f"{pct} interval ({model_fit.interval_method})",
              "determined"]
    return {"columns": header[:1] + ["unit"] + header[1:] if molar else header, "rows": rows}


def ranking_rows(ranking: pd.DataFrame, anchors, ki_unit) -> list:
    """The report's and the notebook's ranked rows, the Ki in ``ki_unit`` (the header
    states it; :func:`inhibkin.display.text.ki_texts`)."""
    rows = []
    for r, (ki, ki_sort) in zip(ranking.to_dict("records"), ki_texts(ranking, ki_unit)):
        status = r["status"]
        pki = ""
        if np.isfinite(r["pki"]):
            pki = f"{r['pki']:.2f} [{r['pki_low']:.2f}, {r['pki_high']:.2f}]"
        rows.append({
            "anchor": anchors.get(r["compound"]),
            "cells": [cell(r["rank"] if not pd.isna(r["rank"]) else "", r["rank"]),
                      cell(r["compound"]), cell(status), cell(r["verdict"]),
                      cell(r["mechanism"]), cell(ki, ki_sort), cell(pki, r["pki"]),
                      cell(number_text(r.get("pic50", np.nan), "{:.2f}"), r.get("pic50", np.nan)),
                      cell(r["flags"]), cell(_reason_text(r))],
            "status": status,
        })
    return rows


def _reason_text(row) -> str:
    """The reason, and what an ambiguous verdict still establishes."""
    established = row.get("established", "")
    if isinstance(established, str) and established:
        return f"{row['reason']} Established: {established}."
    return row["reason"]


def fit_html(fit, *, units=None) -> str:
    """Compact HTML of a :class:`~inhibkin.mechanism.fit.MechanismFit` for a notebook.

    Verdict and reason, the comparison table, the nested F-tests, the best model's
    parameters with intervals, and one small figure (global fit, model support,
    residuals). Every text is escaped.
    """
    best = fit.best_fit
    overview = figures.plot_mechanism_overview(fit, units=units)
    return ENVIRONMENT.get_template("fit.html").render(
        verdict=fit.verdict, reason=fit.reason, candidates=", ".join(fit.candidates),
        weighting=fit.weighting, best=fit.best, comparison=table_cells(fit.comparison),
        ftests=table_cells(fit.ftests, index=False),
        params=parameter_cells(best) if best is not None and best.converged else None,
        png=_notebook_image(overview))


def dose_response_html(fit, *, conc_unit="") -> str:
    """Compact HTML of a potency fit (:class:`~inhibkin.potency.curve.DoseResponseFit`)."""
    fig, axes = figures.new_figure(size=(3.6, 2.7))
    figures.plot_dose_response(fit, conc_unit=conc_unit, ax=axes[0, 0])
    params = fit.params.copy()
    return ENVIRONMENT.get_template("dose_response.html").render(
        compound="" if fit.compound is None else str(fit.compound),
        ic50=fit.reported_ic50, conc_unit=conc_unit, n_obs=fit.n_obs,
        flags=list(fit.flags), params=table_cells(params), png=_notebook_image(fig))


def campaign_html(campaign, *, rows=10, ki_unit=None) -> str:
    """Compact HTML of a :class:`~inhibkin.campaign.result.Campaign`: counts and the top of
    the ranking, with one small figure (pKi of the ranked compounds with their intervals).
    The Ki column is in ``ki_unit``, by default the one its values read best in
    (:func:`inhibkin.display.text.ranking_ki_unit`)."""
    ranking = campaign.ranking
    ki_unit = unit_label(normalise_unit(ki_unit) if ki_unit else ranking_ki_unit(ranking))
    anchors: dict = {}
    fig, axes = figures.new_figure(size=(4.2, 2.6))
    _plot_ranking(ranking.head(rows * 2), ax=axes[0, 0])
    return ENVIRONMENT.get_template("campaign.html").render(
        n_compounds=len(ranking), counts=ranking["status"].value_counts().to_dict(),
        columns=["rank", "compound", "status", "verdict", "mechanism",
                 f"Ki ({ki_unit}) [95% CI]", "pKi [95% CI]", "pIC50", "flags", "reason"],
        rows=ranking_rows(ranking.head(rows), anchors, ki_unit),
        more=max(len(ranking) - rows, 0), png=_notebook_image(fig))


def _plot_ranking(ranking, *, ax):
    """pKi with its interval for the determined compounds, bounds as arrows."""
    shown = ranking[ranking["status"].isin(["determined", "bound"])]
    y = np.arange(len(shown))
    colour = figures.level_palette(3)[2]
    for k, (_, r) in enumerate(shown.iterrows()):
        if r["status"] == "determined":
            ax.errorbar(r["pki"], k, xerr=[[r["pki"] - r["pki_low"]], [r["pki_high"] - r["pki"]]],
                        marker="o", color=colour, capsize=2, markersize=4)
        elif np.isfinite(r["pki_high"]):
            ax.annotate("", xy=(r["pki_high"] - 0.5, k), xytext=(r["pki_high"], k),
                        arrowprops=dict(arrowstyle="->", color="0.4"))
    ax.set_yticks(y, [str(c) for c in shown["compound"]], fontsize=6)
    ax.invert_yaxis()
    ax.set_xlabel("pKi (95% interval; arrows: bound, Ki above)")
    ax.set_title("Ranked compounds", fontsize=9)
    return ax
