"""The campaign report: one self-contained HTML file, and the notebook display of results.

:func:`report` writes a single HTML file that opens anywhere, offline: figures are
inline, the style sheet and the few lines of JavaScript that sort the tables are
inline, and the file holds no external address at all. The page is rendered by Jinja2
with autoescaping on, so a compound ID such as ``<script>alert(1)</script>`` is shown as
text, never run.

The report scales with the campaign: every compound gets its tables and small SVG
sketches drawn from the fit's numbers (:mod:`inhibkin.display.sketch`, milliseconds each); the
full matplotlib figures (base64 PNG, about a second each) are drawn only for the
compounds chosen by ``detail`` (the five best ranked by default, see
:func:`select_detail`). Nothing is refitted: intervals are the campaign's own.

:func:`fit_html`, :func:`dose_response_html` and :func:`campaign_html`, the compact
notebook views behind the ``_repr_html_`` of the results, live in
:mod:`inhibkin.display.html` and are re-exported here.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ..core.models import MODELS
from ..display import figures, sketch
from ..display.html import (
    ENVIRONMENT,
    REPORT_DPI,
    campaign_html,
    cell,
    dose_response_html,
    fit_html,
    number_text,
    parameter_cells,
    png_image,
    ranking_rows,
    table_cells,
)
from ..display.text import format_estimate, ki_texts, ranking_ki_unit
from ..errors import DataError, Problem, UnitsError
from ..inputs.io import atomic_output
from ..progress import progress_bar
from ..rates.plates import Z_PRIME_THRESHOLD
from ..units import column_unit, from_molar, normalise_unit, to_molar, unit_label

__all__ = ["report", "render_report", "fit_html", "dose_response_html", "campaign_html",
           "check_detail", "select_detail", "CAUTIONS", "DEFAULT_DETAIL"]

#: The cautions printed in every report (the README's, in short).
CAUTIONS = (
    "Results are statistical estimates for research triage only: a mechanism call or a Ki "
    "is a hypothesis about the data it was fitted to, not a fact about the compound.",
    "Confirm decisions with orthogonal assays (a different readout, a biophysical binding "
    "measurement, a second lot of enzyme).",
    "Not for clinical use or for choosing doses.",
    "Laboratory work that produces the data follows your local safety rules and licensed "
    "practice.",
)

# Points along each fitted curve of the time-dependent sketches.
_TD_CURVE_POINTS = 30
# Dose-response sketches in the report's gallery (the most potent first); the table lists all.
_MAX_POTENCY_FIGURES = 24
#: Compounds drawn with the full matplotlib figures unless ``detail`` says otherwise: the
#: five best ranked, the ones a reader checks first (each costs about a second, against
#: milliseconds for a sketched compound: `make bench` prints the report's cost with the
#: five and with the three best in full; flagged compounds and IDs are one option away).
DEFAULT_DETAIL = "top:5"
# The rules ``detail`` understands besides compound IDs and ``top:N``.
_DETAIL_RULES = ("all", "none", "flagged")


def _units_of(campaign, rate_unit, display) -> figures.AxisUnits:
    """Axis units of a campaign's fits (stored in M; shown in the declared units)."""
    declared = dict(getattr(campaign, "options", {}).get("units", {}) or {})
    substrate = display.get("substrate") or declared.get("substrate") or "uM"
    inhibitor = display.get("inhibitor") or declared.get("inhibitor") or "nM"
    return figures.AxisUnits.from_molar(substrate=substrate, inhibitor=inhibitor,
                                        rate=rate_unit)


# ---------------------------------------------------------------- sections


def _mechanism_section(anchor, compound, fit, row, units, dpi, *, detailed,
                       dose_fit=None, dose_unit="", molar=False, pool=None) -> dict:
    """One compound's part of the report: tables and sketches always, the matplotlib
    figures only when ``detailed`` (drawn on the figures of ``pool``, a
    :class:`~inhibkin.display.figures.FigurePool`, and saved at once)."""
    section = {"anchor": anchor, "compound": str(compound), "row": row, "fit": None,
               "detailed": detailed, "dose": None}
    if dose_fit is not None:
        section["dose"] = {
            "sketch": None if detailed else sketch.dose_response_sketch(
                dose_fit, conc_unit=dose_unit, label=f"dose-response of {compound}"),
            "png": _dose_image(dose_fit, dose_unit, dpi) if detailed else None,
            "ic50": dose_fit.reported_ic50, "unit": dose_unit}
    if fit is None:
        return section
    best = fit.best_fit
    section["fit"] = {
        "verdict": fit.verdict, "reason": fit.reason, "best": fit.best,
        # Which family of laws the verdict's model belongs to, and its equation.
        "family": MODELS[fit.best].family.replace("_", " ") if fit.best in MODELS else "",
        "equation": MODELS[fit.best].equation if fit.best in MODELS else "",
        "candidates": ", ".join(fit.candidates), "basis": fit.basis,
        "weighting": fit.weighting,
        "alpha": fit.options.alpha, "min_delta_aicc": fit.options.min_delta_aicc,
        # Its converged column as yes / no (a copy of the table to rewrite it cost more
        # than the cells).
        "comparison": table_cells(fit.comparison, yes_no=True),
        "ftests": table_cells(fit.ftests, index=False),
        "params": (parameter_cells(best, molar=molar)
                   if best is not None and best.converged else None),
        "all_params": [{"model": name, "table": parameter_cells(m, molar=molar)}
                       for name, m in fit.models.items() if m.converged and name != fit.best],
        # A compound drawn in full shows the figures instead of its sketches.
        "sketches": [] if detailed else [
            sketch.grid_sketch(fit, units=units, label=f"global fit of {compound}"),
            sketch.residual_sketch(fit, units=units, label=f"residuals of {compound}")],
        "units": units,
    }
    if detailed:
        section["fit"].update(
            overview=png_image(figures.plot_mechanism_overview(
                fit, units=units, layout="fixed", pool=pool), dpi),
            residuals=png_image(figures.plot_residual_grid(
                fit, units=units, layout="fixed", pool=pool), dpi),
            diagnostics=png_image(figures.plot_diagnostics(
                fit, units=units, layout="fixed", pool=pool), dpi))
    return section


def _dose_image(fit, conc_unit, dpi) -> dict:
    fig, axes = figures.new_figure(size=(3.4, 2.6), margins=figures.DOSE_MARGINS)
    figures.plot_dose_response(fit, conc_unit=conc_unit, ax=axes[0, 0])
    return png_image(fig, dpi)


def check_detail(detail) -> tuple:
    """``detail`` as a tuple of items, its rules checked (before any work is done).

    Parameters
    ----------
    detail : str or sequence of str
        One item or several. An item is a compound ID or a rule: ``"all"``, ``"none"``,
        ``"flagged"`` (every compound with a flag) or ``"top:N"`` (the N best ranked).

    Returns
    -------
    tuple of str

    Raises
    ------
    DataError
        When ``detail`` is not text, or a ``top:N`` does not give a whole number N ≥ 0.
    """
    items = (detail,) if isinstance(detail, str) else tuple(detail)
    for item in items:
        if not isinstance(item, str):
            raise DataError(Problem("detail", None, repr(item),
                                    "give compound IDs or rules as text: all, none, "
                                    "flagged, top:N"))
        if item.startswith("top:"):
            count = item.removeprefix("top:")
            if not (count.isdigit() and count.isascii()):
                raise DataError(Problem("detail", None, item,
                                        "top:N needs a whole number N ≥ 0, e.g. top:50"))
    return items


def select_detail(detail, ranking: pd.DataFrame) -> set:
    """The compounds of ``ranking`` that get the full matplotlib figures.

    An item that is a compound of the ranking (its exact text) names that compound, so a
    compound called ``flagged`` can still be chosen; otherwise it must be a rule (see
    :func:`check_detail`). The union of every item is returned.

    Raises
    ------
    DataError
        For an item that is neither a compound of the ranking nor a rule.
    """
    compounds = list(ranking["compound"])
    known = set(compounds)
    chosen: set = set()
    for item in check_detail(detail):
        if item in known:
            chosen.add(item)
        elif item == "all":
            chosen.update(compounds)
        elif item == "flagged":
            chosen.update(ranking.loc[ranking["flags"].astype(str) != "", "compound"])
        elif item.startswith("top:"):
            chosen.update(compounds[:int(item.removeprefix("top:"))])
        elif item != "none":
            raise DataError(Problem("detail", None, item,
                                    "neither a compound of the campaign nor a rule "
                                    f"({', '.join(_DETAIL_RULES)}, top:N)"))
    return chosen


def _log_molar_shift(unit) -> float | None:
    """log10 of the unit in molar (−6 for µM), or None when the unit is not a concentration."""
    try:
        return float(np.log10(to_molar(1.0, normalise_unit(unit))))
    except (UnitsError, KeyError, ValueError):
        return None


def _potency_context(potency, conc_unit, max_figures) -> dict:
    table = potency.table.copy()
    # potency_table reports −log10 in the concentration's own unit; shown as true
    # pIC50/pKi (from molar) whenever that unit is a known concentration unit.
    shift = _log_molar_shift(conc_unit) if conc_unit else None
    p_label = "" if shift is not None else f" (−log10 of {conc_unit or 'the unit'})"
    if shift is not None:
        table["pic50"] = table["pic50"] - shift
        table["pki"] = table["pki"] - shift
    rows = []
    for r in table.to_dict("records"):
        ic50 = r["ic50_bound"] if isinstance(r["ic50_bound"], str) and r["ic50_bound"] else (
            f"{number_text(r['ic50'])} [{number_text(r['ic50_low'])}, "
            f"{number_text(r['ic50_high'])}]"
            if np.isfinite(r["ic50"]) else "")
        ki = r["ki_bound"] if isinstance(r["ki_bound"], str) and r["ki_bound"] else (
            f"{number_text(r['ki'])} [{number_text(r['ki_low'])}, {number_text(r['ki_high'])}]"
            if np.isfinite(r["ki"]) else "")
        rows.append([cell(r["compound"]), cell(r["status"]), cell(r["plate"]),
                     cell(ic50, r["ic50"]), cell(number_text(r["pic50"], "{:.2f}"), r["pic50"]),
                     cell(number_text(r["hill"], "{:.2f}"), r["hill"]), cell(ki, r["ki"]),
                     cell(number_text(r["pki"], "{:.2f}"), r["pki"]), cell(r["mechanism"]),
                     cell(r["ki_method"]), cell(r["flags"]), cell(r["reason"])])
    unit = f" ({conc_unit})" if conc_unit else ""
    columns = ["compound", "status", "plate", f"IC50{unit} [95% CI]", f"pIC50{p_label}", "Hill",
               f"Ki{unit} [95% CI]", f"pKi{p_label}", "mechanism", "Ki method", "flags",
               "reason"]
    fitted = table[table["status"] == "ok"].sort_values("pic50", ascending=False,
                                                       na_position="last")
    return {"table": {"columns": columns, "rows": rows},
            "gallery": _gallery(potency.fits, fitted["compound"], conc_unit, max_figures),
            "n_total": len(table), "n_failed": int((table["status"] == "failed").sum()),
            **_plates_context(potency.plates.to_frame(), potency.plates.threshold)}


def _gallery(fits, compounds, conc_unit, max_figures) -> list:
    """Dose-response sketches of the first ``max_figures`` of ``compounds`` with a fit."""
    return [{"compound": str(c),
             "svg": sketch.dose_response_sketch(fits[c], conc_unit=conc_unit,
                                                label=f"dose-response of {c}")}
            for c in [c for c in compounds if c in fits][:max_figures]]


def _plates_context(plates: pd.DataFrame, threshold: float) -> dict:
    keep = [c for c in ("plate", "n_max", "mean_max", "sd_max", "n_min", "mean_min", "sd_min",
                        "z_prime", "flagged", "problem") if c in plates.columns]
    shown = plates[keep].copy()
    flagged = [str(p) for p in plates.loc[plates["flagged"].astype(bool), "plate"]]
    shown["flagged"] = shown["flagged"].map({True: "yes", False: "no"})
    return {"plates": table_cells(shown, index=False, fmt="{:.3g}"), "z_threshold": threshold,
            "flagged_plates": flagged}


def _campaign_potency_context(campaign, max_figures) -> dict | None:
    """The dose-response screen of a campaign that fitted curves itself (concentrations in
    M): the curve columns of its ranking, its plates' Z', and the curves."""
    fits = getattr(campaign, "potency_fits", {}) or {}
    plates = getattr(campaign, "plates", None)
    if not fits and (plates is None or not len(plates)):
        return None
    ranking = campaign.ranking
    screen = ranking[ranking["compound"].isin(list(fits))]
    # One unit for the column, chosen by the size of its values (issue 17).
    ic50_unit = column_unit(screen["ic50_M"])
    per_unit = from_molar(1.0, ic50_unit)
    ki_unit = ranking_ki_unit(ranking)
    rows = []
    for r, (ki, ki_sort) in zip(screen.to_dict("records"), ki_texts(screen, ki_unit)):
        ic50 = (f"{number_text(r['ic50_M'] * per_unit)} "
                f"[{number_text(r['ic50_low_M'] * per_unit)}, "
                f"{number_text(r['ic50_high_M'] * per_unit)}]"
                if np.isfinite(r["ic50_M"]) else "")
        rows.append([cell(r["compound"]), cell(r["status"]), cell(ic50, r["ic50_M"]),
                     cell(number_text(r["pic50"], "{:.2f}"), r["pic50"]),
                     cell(number_text(r["hill"], "{:.2f}"), r["hill"]), cell(ki, ki_sort),
                     cell(number_text(r["pki"], "{:.2f}"), r["pki"]), cell(r["mechanism"]),
                     cell(r["ki_source"]), cell(r["flags"]), cell(r["reason"])])
    columns = ["compound", "status", f"IC50 ({ic50_unit}) [95% CI]", "pIC50", "Hill",
               f"Ki ({ki_unit}) [95% CI]",
               "pKi", "mechanism", "Ki from", "flags", "reason"]
    by_potency = screen.sort_values("pic50", ascending=False, na_position="last")["compound"]
    threshold = dict(getattr(campaign, "options", {})).get("z_prime_threshold",
                                                           Z_PRIME_THRESHOLD)
    context = {"table": {"columns": columns, "rows": rows},
               "gallery": _gallery(fits, by_potency, "M", max_figures),
               "n_total": len(screen), "n_failed": int((screen["status"] == "failed").sum())}
    if plates is not None and len(plates):
        context.update(_plates_context(plates, threshold))
    else:
        context.update({"plates": None, "z_threshold": threshold, "flagged_plates": []})
    return context


def _as_campaign(campaign):
    """A Campaign, or a mapping of compound → MechanismFit wrapped as a small campaign."""
    if hasattr(campaign, "ranking") and hasattr(campaign, "fits"):
        return campaign.ranking, campaign.fits, dict(getattr(campaign, "options", {}))
    if isinstance(campaign, Mapping):
        rows = []
        for compound, fit in campaign.items():
            constants = fit.constants()
            determined = constants[constants["determined"]] if len(constants) else constants
            row = {"rank": pd.NA, "compound": compound, "verdict": fit.verdict,
                   "mechanism": fit.best or "", "ki_M": np.nan, "ki_low_M": np.nan,
                   "ki_high_M": np.nan, "pki": np.nan, "pki_low": np.nan, "pki_high": np.nan,
                   "ki_reported": "", "flags": "", "reason": fit.reason,
                   "established": fit.established.text() if fit.established else ""}
            row["status"] = ("failed" if fit.verdict == "failed" else
                             "inactive" if fit.best == "none" else
                             "determined" if len(determined) else "bound")
            if len(determined):
                ki = determined.sort_values("estimate").iloc[0]
                row["ki_reported"] = (f"{format_estimate(ki)} [{number_text(ki['ci_low'])}, "
                                      f"{number_text(ki['ci_high'])}] (fit units)")
            rows.append(row)
        return pd.DataFrame(rows), dict(campaign), {}
    raise DataError("report() needs a Campaign (inhibkin.campaign.fit.fit_campaign) or a "
                    f"mapping of compound to MechanismFit, got {type(campaign).__name__}")


def _time_dependent_sketches(fits, compounds) -> list:
    """Progress curves with their fits and kobs against [I] with both schemes, as small
    SVG sketches (milliseconds each) for every compound in ``compounds`` with a fit."""
    out = []
    for compound in compounds:
        fit = fits.get(compound)
        if fit is None:
            continue
        conc = fit.kobs.set_index("well")["inhibitor"]
        reads = fit.reads.assign(inhibitor=fit.reads["well"].map(conc).to_numpy())
        used = fit.kobs[(fit.kobs["inhibitor"] > 0) & np.isfinite(fit.kobs["kobs_low"])]
        out.append({"compound": str(compound), "svgs": [
            sketch.progress_sketch(reads, fit.fitted_progress(_TD_CURVE_POINTS),
                                   label=f"progress curves of {compound}"),
            sketch.kobs_sketch(used, fit.fitted_kobs(_TD_CURVE_POINTS),
                               label=f"kobs against [I] of {compound}")]})
    return out


def _time_dependent_context(time_dependent) -> dict:
    """The time-dependent section: its own ranked table, by its class's metric, and (for a
    TimeDependentRanking, which keeps the fits) each compound's sketches."""
    table = getattr(time_dependent, "table", time_dependent)
    fits = getattr(time_dependent, "fits", {}) or {}

    def number(value):
        return "-" if pd.isna(value) else f"{value:.3g}"

    def interval(row, name):
        return (f"{number(row[name])} [{number(row[name + '_low'])}, "
                f"{number(row[name + '_high'])}]")

    columns = ["rank", "compound", "status", "class", "scheme", "score", "kinact/KI [CI]",
               "Ki* [CI]", "residence time [CI]", "reason"]
    rows = [["-" if pd.isna(r["rank"]) else str(r["rank"]), str(r["compound"]),
             str(r["status"]), str(r["class"]), str(r["scheme"]), number(r["score"]),
             interval(r, "kinact_over_ki"), interval(r, "ki_star"),
             interval(r, "residence_time"), " ".join(str(x) for x in (r["note"], r["reason"])
                                                     if isinstance(x, str) and x)]
            for _, r in table.iterrows()]
    return {"metrics": sorted(set(table["metric"].astype(str))), "columns": columns,
            "rows": rows, "sketches": _time_dependent_sketches(fits, table["compound"])}


def render_report(campaign, *, potency=None, rates=None, time_dependent=None,
                  title="Inhibitor campaign report",
                  rate_unit="", units=None, ki_unit=None, potency_unit="",
                  max_potency_figures=_MAX_POTENCY_FIGURES, notes=(), dpi=REPORT_DPI,
                  detail=DEFAULT_DETAIL, quiet=False) -> str:
    """The report as an HTML string (see :func:`report`)."""
    check_detail(detail)
    if time_dependent is None:
        time_dependent = getattr(campaign, "time_dependent", None)
    ranking, fits, options = _as_campaign(campaign)
    molar = hasattr(campaign, "ranking")
    # One unit for the Ki column, by magnitude unless asked for; a mapping of fits keeps
    # its fits' own units, written in its texts.
    ki_unit = normalise_unit(ki_unit) if ki_unit else ranking_ki_unit(ranking)
    ki_header = f"Ki ({unit_label(ki_unit)}) [95% CI]" if molar else "Ki [95% CI]"
    detailed = select_detail(detail, ranking)
    display = dict(units or {})
    if hasattr(campaign, "ranking"):
        axis_units = _units_of(campaign, rate_unit, display)
    else:
        axis_units = figures.AxisUnits(display.get("substrate", ""),
                                       display.get("inhibitor", ""), rate_unit)
    # Anchors are numbered, never built from compound IDs (which may hold any text).
    anchors = {compound: f"compound-{k}" for k, compound in enumerate(ranking["compound"])}
    if potency is not None:
        dose_fits, dose_unit = potency.fits, potency_unit
    else:
        dose_fits, dose_unit = getattr(campaign, "potency_fits", {}) or {}, "M"
    sections = []
    # The compounds drawn in full share one figure of each view (their ticks kept).
    pool = figures.FigurePool()
    with progress_bar(len(ranking), quiet=quiet, desc="report") as bar:
        for c, r in zip(ranking["compound"], ranking.to_dict("records")):
            sections.append(_mechanism_section(anchors[c], c, fits.get(c), r, axis_units, dpi,
                                               detailed=c in detailed,
                                               dose_fit=dose_fits.get(c),
                                               dose_unit=dose_unit,
                                               molar=molar, pool=pool))
            bar.update()
    flagged = ranking[ranking["flags"].astype(str) != ""][["compound", "status", "flags"]]
    failed = ranking[ranking["status"] == "failed"][["compound", "reason"]]
    counts = ranking["status"].value_counts().to_dict()
    from .. import __version__

    context = {
        "title": title,
        "generated": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "version": __version__,
        "cautions": CAUTIONS,
        "notes": list(notes),
        "counts": counts,
        "n_compounds": len(ranking),
        "options": {k: v for k, v in options.items() if k != "seconds"},
        "ki_unit": unit_label(ki_unit),
        "ranking": ranking_rows(ranking, anchors, ki_unit),
        "ranking_columns": ["rank", "compound", "status", "verdict", "mechanism",
                            ki_header, "pKi [95% CI]", "pIC50", "flags", "reason"],
        "flagged": [{"compound": str(c), "anchor": anchors[c], "status": s, "flags": f}
                    for c, s, f in flagged.itertuples(index=False)],
        "failed": [{"compound": str(c), "anchor": anchors[c], "reason": r}
                   for c, r in failed.itertuples(index=False)],
        "sections": sections,
        "n_detailed": sum(1 for section in sections if section["detailed"]),
        "potency": (_potency_context(potency, potency_unit, max_potency_figures)
                    if potency is not None else
                    _campaign_potency_context(campaign, max_potency_figures)),
        "rates": _rates_context(rates) if rates is not None else None,
        "time_dependent": (_time_dependent_context(time_dependent)
                           if time_dependent is not None else None),
        "units": axis_units,
        "param_units": ("concentrations in the unit of each row, rates in the input's unit"
                        if hasattr(campaign, "ranking") else "in the units of the fitted data"),
    }
    return ENVIRONMENT.get_template("report.html").render(**context)


def _rates_context(rates) -> dict:
    """QC of the initial-rate stage: the flag counts of its table."""
    table = getattr(rates, "table", rates)
    flags = table["flags"].astype(str) if "flags" in table.columns else pd.Series([], dtype=str)
    counts = {}
    for text in flags:
        for flag in filter(None, (f.strip() for f in text.replace(";", ",").split(","))):
            counts[flag] = counts.get(flag, 0) + 1
    return {"n_rows": len(table), "flag_counts": sorted(counts.items())}


def _write_atomically(text: str, path: Path) -> None:
    with atomic_output(path) as temporary:
        temporary.write_text(text, encoding="utf-8")


def report(campaign, path, *, potency=None, rates=None, time_dependent=None,
           title="Inhibitor campaign report",
           rate_unit="", units=None, ki_unit=None, potency_unit="",
           max_potency_figures=_MAX_POTENCY_FIGURES, notes=(), dpi=REPORT_DPI,
           detail=DEFAULT_DETAIL, quiet=False) -> Path:
    """Write the campaign's report as one self-contained HTML file.

    Every compound gets the overview tables, its comparison, F-tests and parameters,
    and small SVG sketches of its fit drawn from the numbers (milliseconds each); the
    compounds chosen by ``detail`` also get the full matplotlib figures. Nothing is
    refitted: the intervals shown are those the campaign was fitted with.

    Parameters
    ----------
    campaign : Campaign or mapping of str to MechanismFit
        From :func:`inhibkin.campaign.fit.fit_campaign` (constants in M), or a mapping of
        compound to :class:`~inhibkin.mechanism.fit.MechanismFit` (constants in the fit's
        own units; ``units`` then labels the axes).
    path : str or os.PathLike
        The HTML file to write; written to a temporary file in the same directory and
        renamed, so an interrupted run leaves no half-written report.
    potency : PotencyTable, optional
        The dose-response screen (:func:`inhibkin.potency.table.potency_table`): its table,
        the Z'-factor of every plate, and the dose-response curves of the most potent
        compounds.
    rates : InitialRates or pandas.DataFrame, optional
        The initial-rate table (:func:`inhibkin.rates.initial.initial_rates`); its QC flags are
        counted in the QC summary.
    time_dependent : TimeDependentRanking or pandas.DataFrame, optional
        The time-dependent compounds' ranking, shown as a section of its own, apart from
        the pKi ranking; by default the campaign's own (``Campaign.time_dependent``).
        A :class:`~inhibkin.time_dependent.TimeDependentRanking`
        (:func:`inhibkin.fit_time_dependent_ranking`) keeps the fits, so every compound
        also gets two small SVG sketches: its progress curves with their fits, and kobs
        against [I] with both schemes (the chosen one solid); a bare table
        (:func:`inhibkin.rank_time_dependent`) gives the table only.
    title : str
    rate_unit : str
        Unit label of the rates, e.g. ``"µM/min"``.
    units : dict, optional
        Display units of the axes, ``{"substrate": "uM", "inhibitor": "nM"}``; by
        default the units the campaign declared.
    ki_unit : str, optional
        Unit of Ki in the ranked table (pKi is always from molar); by default the one
        its values read best in (:func:`inhibkin.display.text.ranking_ki_unit`).
    potency_unit : str
        Unit label of the dose-response concentrations.
    max_potency_figures : int
        Dose-response sketches in the screen's gallery (the most potent compounds); the
        table lists all.
    notes : sequence of str
        Extra paragraphs for the top of the report (e.g. "data invented for a demo").
    dpi : int
        Resolution of the embedded matplotlib figures (default 144, twice the page's 72
        dpi layout: sharp on high-density screens); it changes their sharpness and bytes,
        not the size they are shown at.
    detail : str or sequence of str
        The compounds drawn with the full matplotlib figures (about a second each):
        ``"top:N"`` (the N best ranked; default ``"top:5"``), ``"flagged"``, ``"all"``,
        ``"none"``, compound IDs, or several of these (their union); see
        :func:`select_detail`.
    quiet : bool
        No progress bar. Without it, a bar over the compounds is shown on a terminal or in
        a notebook with ipywidgets (never in a log file or a pipe).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    DataError
        When ``campaign`` is neither a Campaign nor a mapping of fits, the output
        directory does not exist, or ``detail`` names a compound the campaign does not
        hold or a rule it does not know.
    """
    path = Path(path)
    if not (path.parent if str(path.parent) else Path(".")).is_dir():
        raise DataError("the output directory does not exist", context=f"file {str(path)!r}")
    text = render_report(campaign, potency=potency, rates=rates,
                         time_dependent=time_dependent, title=title,
                         rate_unit=rate_unit, units=units, ki_unit=ki_unit,
                         potency_unit=potency_unit, max_potency_figures=max_potency_figures,
                         notes=notes, dpi=dpi, detail=detail, quiet=quiet)
    _write_atomically(text, path)
    return path
