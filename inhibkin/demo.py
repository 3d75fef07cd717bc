"""The demo: the whole flow on the invented data set in ``data_demo/``.

kinetic reads + plate map → initial rates → mechanism fits of every compound → Km and
mechanisms carried into the dose-response screen → potency (IC50 → Ki) → ranked tables
→ one self-contained HTML report. Everything in ``data_demo/`` is invented (see its
README.md): the enzyme, the compounds and every read.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd

from .campaign import fit_campaign
from .errors import DataError
from .inputs.io import read_table, write_table
from .potency.table import potency_table
from .rates.initial import initial_rates
from .reporting.report import report
from .units import from_molar

__all__ = ["run_demo", "DEMO_DATA", "DEFAULT_OUTPUT"]

#: The demo data shipped with the repository (regenerate with scripts/make_demo_data.py).
DEMO_DATA = Path(__file__).resolve().parent.parent / "data_demo"
#: Where the demo writes when no directory is given (relative to the working directory).
DEFAULT_OUTPUT = Path("demo_output")

_NOTE = ("Every number in this report comes from invented data: the enzyme FCT-7 "
         "(fictase-7), the compounds INV-xxxx and all reads were made up by "
         "scripts/make_demo_data.py with a fixed seed, to show the flow. Nothing here "
         "describes a real assay or a real compound.")


def _mechanisms(ranking: pd.DataFrame) -> dict:
    """Compound → (mechanism, alpha) for the compounds whose mechanism the grid settled."""
    out = {}
    for _, row in ranking.iterrows():
        if row["status"] != "determined" or row["verdict"] == "ambiguous":
            continue
        alpha = float(row["alpha"]) if row["mechanism"] == "mixed" else None
        if row["mechanism"] == "mixed" and not np.isfinite(alpha):
            continue
        out[row["compound"]] = (row["mechanism"], alpha)
    return out


def _km_M(campaign) -> float:
    """Km of the enzyme (M): median over the compounds' best models (all share the enzyme)."""
    values = [float(fit.best_fit.params.loc["km", "estimate"]) for fit in campaign.fits.values()
              if fit.best_fit is not None and bool(fit.best_fit.params.loc["km", "determined"])]
    if not values:
        raise DataError("no compound's grid fit determined Km; the screen cannot be converted "
                        "to Ki")
    return float(np.median(values))


class _Log:
    """The demo's lines, each handed to ``progress`` as soon as its stage is done."""

    def __init__(self, progress, started):
        self.lines: list[str] = []
        self.progress, self.started = progress, started

    def add(self, *lines: str, timed=True) -> None:
        lines = list(lines)
        if timed and lines:
            lines[0] += f" ({time.perf_counter() - self.started:.1f} s)"
        self.lines += lines
        if self.progress is not None:
            for line in lines:
                self.progress(line)


def _covalent_series(data, out, *, km_um):
    """The invented covalent series ranked by kinact/KI (substrate 200 µM, Km from the
    grids), its constants table and the demo's lines about it.

    The invented curves follow the slow-onset equation with S held at S0, so the fits
    hold it too (no ``product_per_signal``).
    """
    from .time_dependent import fit_time_dependent_ranking

    reads = read_table(data / "invented_covalent_reads.csv")
    ranking = fit_time_dependent_ranking(reads, time="time_s", signal="product_uM",
                                         inhibitor="inhibitor_uM", substrate=200.0,
                                         km=km_um)
    table = pd.concat([fit.to_frame()[lambda f: f["chosen"]] for fit in ranking.fits.values()],
                      ignore_index=True)
    write_table(table, out / "covalent_constants.csv")
    ratio = table[table["constant"] == "k5_over_ki"]
    lines = ["   covalent series (kinact/KI, per µM per s, 95 % interval): "
             + "; ".join(f"{r.compound} {r.estimate:.3g} [{r.ci_low:.3g}, {r.ci_high:.3g}]"
                         for r in ratio.itertuples()),
             f"   written to {out / 'covalent_constants.csv'}; ranked apart in the report"]
    return ranking, lines


def run_demo(output_dir=None, *, data_dir=None, progress=None) -> str:
    """Run the whole flow on the invented demo data and write the report.

    Parameters
    ----------
    output_dir : str or os.PathLike, optional
        Where the tables and the report go (created if needed); default
        ``demo_output`` in the working directory.
    data_dir : str or os.PathLike, optional
        The demo data; default the repository's ``data_demo``.
    progress : callable, optional
        Called with each line of the account as soon as its stage is done (the command
        line prints them), the seconds since the start closing each stage's first line;
        given, the fits also show their progress bars on a terminal.

    Returns
    -------
    str
        What was done, stage by stage; the last line is the report's path.
    """
    started = time.perf_counter()
    data = Path(data_dir) if data_dir is not None else DEMO_DATA
    out = Path(output_dir) if output_dir is not None else DEFAULT_OUTPUT
    out.mkdir(parents=True, exist_ok=True)
    log = _Log(progress, started)
    log.add("inhibkin demo on invented data (enzyme FCT-7, compounds INV-xxxx; see "
            f"{data / 'README.md'})", timed=False)
    quiet = progress is None

    reads = read_table(data / "invented_moa_reads.csv")
    plate_map = read_table(data / "invented_moa_plate_map.csv")
    rates = initial_rates(reads, plate_map, time="time_s", signal="product_uM",
                          substrate="substrate_uM", inhibitor="inhibitor_nM", time_unit="s",
                          rate_time_unit="min", signal_unit="uM", method="curve")
    table = rates.table
    usable = table[table["status"] != "failed"]
    flagged = int((table["status"] == "flagged").sum())
    log.add(f"1. initial rates: {len(table)} wells, {flagged} flagged, "
            f"{len(table) - len(usable)} failed")

    campaign = fit_campaign(usable, compound="compound", substrate="substrate_uM",
                            inhibitor="inhibitor_nM", rate="rate", weighting="relative",
                            intervals="profile", quiet=quiet)
    counts = ", ".join(f"{n} {s}" for s, n in campaign.counts.items() if n)
    verdicts = campaign.ranking[["compound", "verdict", "mechanism", "ki_reported"]]
    first = next(iter(campaign.fits))
    comparison = campaign.fits[first].comparison[["n_params", "ssr", "aicc", "delta_aicc",
                                                   "akaike_weight"]]
    log.add(f"2. mechanisms: {len(campaign.ranking)} compounds ({counts})",
            *["   " + row for row in verdicts.to_string(index=False).splitlines()],
            f"   model comparison for {first} (verdict: {campaign.fits[first].verdict}):",
            *["   " + row for row in
              comparison.to_string(float_format=lambda x: f"{x:.4g}").splitlines()])

    km = _km_M(campaign)
    screen = read_table(data / "invented_screen_wells.csv")
    # Log-scale Wald intervals: a few seconds for the whole screen. Km in M: the
    # substrate column declares its unit (µM), and both potency_table and
    # fit_campaign take a bare number as M.
    potency = potency_table(screen, concentration="inhibitor_uM", response="signal",
                            substrate="substrate_uM", km=km,
                            mechanisms=_mechanisms(campaign.ranking), intervals="wald")
    # The ranked table of the screen, concentrations in M: the grids give the Ki of
    # the compounds they settled and their mechanisms to the IC50 conversion.
    screen_campaign = fit_campaign(usable, dose_response=screen, compound="compound",
                                   substrate="substrate", inhibitor="inhibitor",
                                   rate="rate", km=km, weighting="relative",
                                   intervals="wald", quiet=quiet)
    counts = screen_campaign.counts
    below = screen_campaign.ranking["ki_reported"].astype(str).str.startswith("<")
    log.add(f"3. potency: {len(potency.table)} compounds on {len(potency.plates.table)} "
            f"plates, Km = {from_molar(km, 'uM'):.3g} µM from the grids; plates below "
            f"Z' {potency.plates.threshold:g}: "
            f"{', '.join(map(str, potency.plates.flagged))}",
            f"   ranked: {counts['determined']} determined, {counts['bound']} bounds "
            f"({int(below.sum())} below the tested range), {counts['inactive']} "
            f"inactive, {counts['failed']} failed")

    write_table(table, out / "initial_rates.csv")
    write_table(campaign.ranking, out / "mechanism_ranking.csv")
    write_table(screen_campaign.ranking, out / "potency_ranking.csv")
    log.add(f"4. ranked tables: {out / 'mechanism_ranking.csv'}, "
            f"{out / 'potency_ranking.csv'}")

    covalent, lines = _covalent_series(data, out, km_um=from_molar(km, "uM"))
    log.add(*lines, timed=False)

    path = report(campaign, out / "report.html", potency=potency, rates=rates,
                  time_dependent=covalent,
                  title="Demo campaign against FCT-7 (invented data)", rate_unit="µM/min",
                  units={"substrate": "uM", "inhibitor": "nM"}, ki_unit="nM",
                  potency_unit="µM", notes=[_NOTE], quiet=quiet, detail="top:3")
    log.add(f"5. report: {path.stat().st_size} bytes, whole demo "
            f"{time.perf_counter() - started:.1f} s", timed=False)
    log.add(f"Report written to {path.resolve()}", timed=False)
    return "\n".join(log.lines)
