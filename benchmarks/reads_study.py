"""Validation from plate reads: mass-action plates → rates or whole curves → the verdict.

``python -m benchmarks.reads_study [--n N] [--out docs/validation.md]`` (run by
``make validate``). Each truth's 48 wells are solved once by the mass-action ODE of
``tests/grid_ode.py`` (E, S, I, ES, EI, ESI, P; independent of inhibkin's rate laws);
every plate draws new read noise and pipetting scatter from
``np.random.default_rng(seed)``. Each plate is read as absorbance (3 % read noise, 8 × 6
grid in duplicate) and taken through each route of :data:`ROUTES`:

* ``linear rates, relative`` / ``linear rates, default`` / ``curve rates, default`` /
  ``integrated rates, default``: ``initial_rates`` (linear, curve or integrated
  method), then ``fit_mechanisms`` with constant-CV
  weights or with no weighting named, which for a table carrying ``rate_se`` is
  ``rate_se + variance model`` (:mod:`inhibkin.core.weighting`);
* ``progress curves``: ``fit_progress_curves`` on every read of every well.

Reported per truth and route, with Clopper–Pearson 95 % bands: the verdict classes
(:func:`benchmarks.validation.outcome`) and the pooled coverage of the 95 % intervals of
the true model's inhibition constants (kic, kiu, ki, alpha), with their median log10
width. ``--routes 'A;B'`` runs some routes only. The table replaces the
section between the markers of ``--out``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

import inhibkin as ik
from benchmarks.validation import clopper_pearson, edge_verdict, outcome

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from grid_ode import EPSILON_PATH, Mechanism, plate  # noqa: E402

SEED = 20261215
#: Truths (µM). Km = 10 µM, vmax = 0.002 µM/s (grid_ode defaults).
TRUTHS = {
    "competitive": Mechanism(kic=1.0),
    "uncompetitive": Mechanism(kiu=2.0),
    "noncompetitive": Mechanism(kic=1.5, kiu=1.5),
    "mixed": Mechanism(kic=1.0, kiu=5.0),
}
#: The constants of each true model (names as fit_mechanisms reports them), in M.
CONSTANTS = {
    "competitive": lambda m: {"kic": m.kic},
    "uncompetitive": lambda m: {"kiu": m.kiu},
    "noncompetitive": lambda m: {"ki": m.kic},
    "mixed": lambda m: {"kic": m.kic, "kiu": m.kiu, "alpha": m.kiu / m.kic},
}
#: The routes from reads to constants: rates (method, weighting) then fit_mechanisms, or
#: the whole progress curves fitted (fit_progress_curves).
ROUTES = {
    "linear rates, relative": ("linear", "relative"),
    "linear rates, default": ("linear", None),
    "curve rates, default": ("curve", None),
    "integrated rates, default": ("integrated", None),
    "progress curves": ("progress", None),
}
START = "<!-- reads-study -->"
END = "<!-- /reads-study -->"
#: Absorbance per M of the product, for the Beer–Lambert conversion (path 1 cm).
EPSILON = EPSILON_PATH * 1e6
COLUMNS = dict(substrate="substrate_uM", inhibitor="inhibitor_uM")


def _scored(record, params, truth_values):
    """Coverage and log10 width of each true constant's interval."""
    for name, value in truth_values.items():
        row = params.loc[name]
        record[f"{name}_covered"] = bool(row["ci_low"] <= value <= row["ci_high"])
        with np.errstate(divide="ignore", invalid="ignore"):
            record[f"{name}_width"] = float(np.log10(row["ci_high"] / row["ci_low"]))
    return record


def fit_plate(truth: str, seed: int, routes=tuple(ROUTES)) -> list[dict]:
    """One plate read, then every route of ``routes``: one record each."""
    mechanism = TRUTHS[truth]
    reads, plate_map = plate(mechanism, seed)
    conversion = ik.BeerLambert(EPSILON)
    truth_values = {k: (v * 1e-6 if k != "alpha" else v)
                    for k, v in CONSTANTS[truth](mechanism).items()}
    tables = {}
    records = []
    for label in routes:
        method, weighting = ROUTES[label]
        record = {"truth": truth, "seed": seed, "route": label}
        if method == "progress":
            fit = ik.fit_progress_curves(reads, plate_map, conversion=conversion, **COLUMNS)
            record.update(verdict=fit.verdict, used=fit.integration.split(" (")[0],
                          noisy_or_flat=0, verdict_one_sided=edge_verdict(fit, 1))
            records.append(_scored(record, fit.models[truth].params, truth_values))
            continue
        if method not in tables:
            tables[method] = ik.initial_rates(reads, plate_map, conversion=conversion,
                                              method=method, **COLUMNS).table
        table = tables[method]
        record["noisy_or_flat"] = int(table["flags"].str.contains("noisy|flat").sum())
        try:
            fit = ik.fit_mechanisms(table, weighting=weighting, **COLUMNS)
        except ik.DataError:
            records.append({**record, "verdict": "rejected", "used": ""})
            continue
        record.update(verdict=fit.verdict, used=fit.weighting,
                      verdict_one_sided=edge_verdict(fit, 1))
        records.append(_scored(record, fit.models[truth].params, truth_values))
    return records


def run(n: int, routes=tuple(ROUTES)) -> pd.DataFrame:
    """Records of ``n`` plates per truth, through each of ``routes``."""
    rows = []
    for k, truth in enumerate(TRUTHS):
        for r in range(n):
            rows += fit_plate(truth, SEED + 1000 * k + r, routes)
    return pd.DataFrame(rows)


def _band(hits, total) -> str:
    low, high = clopper_pearson(hits, total)
    return f"{hits / total:.0%} [{float(low):.0%}, {float(high):.0%}]" if total else "-"


def _row(truth, group, truths) -> dict:
    classes = [outcome(t, v) for t, v in zip(truths, group["verdict"])]
    covered = group.filter(like="_covered").to_numpy(dtype=float).ravel()
    covered = covered[np.isfinite(covered)]
    widths = group.filter(like="_width").to_numpy(dtype=float).ravel()
    widths = widths[np.isfinite(widths)]
    n = len(group)
    return {
        "truth": truth, "route": group["route"].iloc[0],
        "fit": ", ".join(sorted(set(group["used"]) - {""})),
        "plates": n,
        "correct": _band(classes.count("correct"), n),
        "ambiguous": _band(classes.count("ambiguous"), n),
        "wrong": _band(classes.count("wrong"), n),
        "rejected": classes.count("rejected"),
        "coverage (pooled)": _band(int(covered.sum()), covered.size),
        "median width (log10)": f"{np.median(widths):.2f}" if widths.size else "-",
    }


def summary_table(records: pd.DataFrame) -> pd.DataFrame:
    """Per truth and route: correct, ambiguous, confidently wrong, pooled coverage and
    the median log10 width (ci_high/ci_low) of the true constants' intervals; then the
    same over every truth, per route."""
    out = [_row(truth, group, [truth] * len(group))
           for (truth, _), group in records.groupby(["truth", "route"], sort=False)]
    out += [_row("all", group, group["truth"])
            for _, group in records.groupby("route", sort=False)]
    return pd.DataFrame(out)


def constant_table(records: pd.DataFrame) -> pd.DataFrame:
    """Per truth and route: the coverage of each true constant's 95 % interval."""
    names = [c.removesuffix("_covered") for c in records.columns if c.endswith("_covered")]
    out = []
    for (truth, route), group in records.groupby(["truth", "route"], sort=False):
        row = {"truth": truth, "route": route}
        for name in names:
            hits = group[f"{name}_covered"].dropna().astype(bool)
            row[name] = _band(int(hits.sum()), len(hits)) if len(hits) else "-"
        out.append(row)
    return pd.DataFrame(out)


def markdown(frame: pd.DataFrame) -> str:
    """A DataFrame as a Markdown table (no optional dependency)."""
    head = "| " + " | ".join(frame.columns) + " |"
    rule = "|" + "|".join("---" for _ in frame.columns) + "|"
    body = ["| " + " | ".join(str(v) for v in row) + " |" for row in frame.to_numpy()]
    return "\n".join([head, rule, *body])


def section(records: pd.DataFrame, n: int, seconds: float, routes=tuple(ROUTES)) -> str:
    """The Markdown section written between the markers."""
    flagged = records.loc[records["route"].str.startswith("linear"), "noisy_or_flat"]
    option = "" if routes == tuple(ROUTES) else f" --routes '{';'.join(routes)}'"
    return "\n".join([
        START,
        "## From plate reads (mass-action ODE → absorbance → rates or whole curves → fit)",
        "",
        f"`python -m benchmarks.reads_study --n {n}{option}` (seed {SEED}; "
        f"{seconds:.0f} s). "
        "Each plate: one compound on the 8 × 6 grid in duplicate (S = 2–100 µM, "
        "Km = 10 µM; I = 0–8 µM), progress curves from the mass-action ODE of "
        "E, S, I, ES, EI, ESI, P (`tests/grid_ode.py`, LSODA, rtol 1e-10), read as "
        "absorbance every 20 s for 600 s with 3 % read noise and 3 % pipetting scatter "
        "of the enzyme. Routes: `initial_rates` (linear, curve or integrated method), then "
        "`fit_mechanisms` (profile intervals) with `weighting=\"relative\"` or with no "
        "weighting named (the default for a table carrying `rate_se`: `rate_se + "
        "variance model`); or `fit_progress_curves` (every read of every well, the "
        "integrated rate law in closed form, one offset per well, profile intervals). "
        "The rate routes read the rates stage's flags as `fit_mechanisms` does, so a "
        "grid with enough inhibited wells flagged `time_dependent` (`min_flagged`: two "
        "of the 80 here) gets that verdict "
        "(counted wrong: no truth here is time dependent). Truths: competitive "
        "kic = 1, uncompetitive "
        "kiu = 2, noncompetitive ki = 1.5, mixed kic = 1, kiu = 5 (alpha = 5), µM. "
        f"Coverage pools the 95 % intervals of kic, kiu, ki and alpha of the true "
        f"model's fit; width is the median log10(ci_high/ci_low) of those intervals; "
        f"brackets are Clopper–Pearson 95 % bands."
        + (f" Wells flagged noisy or flat per plate (linear rates): median "
           f"{int(np.median(flagged))} of 96." if len(flagged) else ""),
        "",
        markdown(summary_table(records)),
        "",
        "Coverage of each constant's 95 % interval (the true model's fit; Clopper–Pearson "
        "bands):",
        "",
        markdown(constant_table(records)),
        END,
    ])


def write_section(text: str, path: Path, start: str = START, end: str = END) -> None:
    """Replace the section of ``path`` between ``start`` and ``end`` (appended when the
    markers are missing)."""
    old = path.read_text() if path.exists() else ""
    if start in old and end in old:
        new = old[:old.index(start)] + text + old[old.index(end) + len(end):]
    else:
        new = old.rstrip("\n") + "\n\n" + text + "\n"
    path.write_text(new)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=100, help="plates per truth")
    parser.add_argument("--out", type=Path, help="Markdown file whose section is replaced")
    parser.add_argument("--records", type=Path,
                        help="CSV file for the per-plate records (one row per plate and route)")
    parser.add_argument("--routes", default=";".join(ROUTES),
                        help=f"routes separated by ; (default all: {'; '.join(ROUTES)})")
    args = parser.parse_args(argv)
    routes = tuple(r.strip() for r in args.routes.split(";"))
    unknown = [r for r in routes if r not in ROUTES]
    if unknown:
        parser.error(f"unknown routes {unknown}; known: {', '.join(ROUTES)}")
    started = time.perf_counter()
    records = run(args.n, routes)
    if args.records:
        records.to_csv(args.records, index=False)
    text = section(records, args.n, time.perf_counter() - started, routes)
    print(text)
    if args.out:
        write_section(text, args.out)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
