"""The ``inhibkin`` command line: one subcommand per stage, a thin layer over the API.

Every stage reads CSV or Parquet and writes CSV or Parquet (by file suffix), atomically.
Exit status: 0 when every compound was fitted, 1 when some compounds failed (all
results are still written, each failure with its reason), 2 when the input cannot be
used at all (the problems are listed on stderr, and nothing is written).

A stage is one arguments function, one run function and one entry in SUBCOMMANDS.
"""

from __future__ import annotations

import argparse
import os
import re
import sys
from collections.abc import Callable
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from .errors import DataError, InhibkinError, Problem
from .interrupt import interrupts_recorded

__all__ = ["main", "build_parser", "Subcommand", "SUBCOMMANDS"]

EXIT_OK = 0
EXIT_SOME_FAILED = 1
EXIT_UNUSABLE_INPUT = 2

# What `inhibkin --help` says (the module docstring is for developers).
_DESCRIPTION = """\
Characterise enzyme inhibitors from plate data, one stage at a time: initial rates from
kinetic reads (rates), the mechanism of each compound from its substrate × inhibitor grid
(mechanism) or from its whole progress curves (progress), IC50 and Ki from dose-response
plates (potency), a ranking by pKi (rank), an HTML report (report) and kinact, KI and
kinact/KI of time-dependent inhibitors (inactivation). Each stage reads and writes CSV or
Parquet tables; `inhibkin STAGE --help` shows its options and a worked example.

Exit status: 0 when every compound was fitted, 1 when some failed (every result is still
written, each failure with its reason), 2 when the input cannot be used (the problems are
listed, nothing is written).

Results are statistical estimates for research triage; confirm decisions with
orthogonal experiments. No output is for clinical or dosing use."""

# Seconds to wait for a Dask scheduler before giving up.
_SCHEDULER_TIMEOUT = "20s"
# A scheduler address: [protocol://]host:port (host a name, IPv4 or [IPv6]).
# Dask's in-process addresses (inproc://host/pid/n) carry no port; every other protocol
# names a host and a port.
_SCHEDULER_ADDRESS = re.compile(r"((tcp|tls|ucx|ws|wss)://)?"
                                r"(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.-]+):[0-9]{1,5}"
                                r"|inproc://[A-Za-z0-9_.-]+(/[0-9]+)+")


@dataclass(frozen=True)
class Subcommand:
    """One stage of the command line.

    Attributes
    ----------
    name, help : str
        The subcommand and its one-line description.
    example : str
        A worked example shown at the end of ``--help``.
    arguments : callable
        ``arguments(parser)`` adds the stage's own options.
    run : callable
        ``run(args) -> exit status``.
    parallel : bool
        Whether the stage takes ``--workers`` and ``--scheduler``.
    """

    name: str
    help: str
    example: str
    arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]
    parallel: bool = True


# ---------------------------------------------------------------- shared helpers


def _units(pairs) -> dict:
    """``["inhibitor=nM", "substrate=uM"]`` → ``{"inhibitor": "nM", "substrate": "uM"}``."""
    out = {}
    for pair in pairs or []:
        name, sep, unit = pair.partition("=")
        if not sep or not name or not unit:
            raise DataError(Problem("--units", None, pair, "write NAME=UNIT, e.g. inhibitor=nM"))
        out[name.strip()] = unit.strip()
    return out


def _check_output(path, option="--output", suffixes=None) -> Path:
    """Refuse an output path we could not write *before* the work starts.

    The suffix must name a known format; the path must not be a directory; its
    directory must exist and be writable (the table goes to a temporary file there).
    """
    from .inputs.io import TABLE_FORMATS

    suffixes = suffixes or (*TABLE_FORMATS, ".xlsx")
    path = Path(path)
    if path.suffix.lower() not in suffixes:
        raise DataError(Problem(option, None, str(path),
                                f"unknown output format; use one of {', '.join(suffixes)}"))
    if path.is_dir():
        raise DataError(Problem(option, None, str(path), "is a directory; give a file name"))
    directory = path.parent if str(path.parent) else Path(".")
    if not directory.is_dir():
        raise DataError(Problem(option, None, str(path), "the directory does not exist"))
    if not os.access(directory, os.W_OK | os.X_OK):
        raise DataError(Problem(option, None, str(path),
                                "the directory is not writable; choose another place"))
    return path


def _check_paths(inputs: dict, outputs: dict) -> None:
    """Refuse an output that is one of the inputs or another output, before any work.

    Paths are compared after resolving links and ``..``, and by device and inode for
    files that exist (hard links), so no spelling of a path lets a run overwrite its
    own data or write two tables to one file.
    """
    def key(path):
        resolved = Path(path).resolve()
        if resolved.exists():
            info = resolved.stat()
            return ("inode", info.st_dev, info.st_ino)
        return ("path", str(resolved))

    seen = {key(path): option for option, path in inputs.items() if path}
    for option, path in outputs.items():
        if not path:
            continue
        here = key(path)
        if here in seen:
            what = "an input" if seen[here] in inputs else "another output"
            raise DataError(Problem(option, None, str(path),
                                    f"is the same file as {seen[here]} ({what}); writing it "
                                    f"would destroy that table. Choose another name"))
        seen[here] = option


def _check_scheduler(args) -> None:
    """--scheduler must look like [protocol://]host:port before anything is read."""
    address = getattr(args, "scheduler", None)
    if address and not _SCHEDULER_ADDRESS.fullmatch(address.strip()):
        raise DataError(Problem("--scheduler", None, address,
                                "not a scheduler address; write [protocol://]host:port, "
                                "e.g. tcp://10.0.0.5:8786"))


def _check_fit_arguments(args) -> None:
    """The range checks of the fitting options, before any file is read."""
    from .validate import check_options

    check_options({"--level": args.level})
    _check_scheduler(args)
    for option in ("km", "enzyme"):
        value = _km(getattr(args, option, None))
        if value is not None and not isinstance(value, str):
            check_options({f"--{option}": value})
    _grid_enzyme(args)


@contextmanager
def _execution(args):
    """workers= / client= for fit_campaign, from --workers and --scheduler."""
    if getattr(args, "scheduler", None):
        if args.workers is not None:
            raise DataError("give --workers or --scheduler, not both")
        try:
            from distributed import Client
        except ImportError:
            raise DataError("--scheduler needs dask.distributed: pip install "
                            "'inhibkin[dask]'") from None
        try:
            client = Client(args.scheduler, timeout=_SCHEDULER_TIMEOUT)
        except (OSError, TimeoutError) as err:
            raise DataError(Problem("--scheduler", None, args.scheduler,
                                    f"cannot reach the Dask scheduler ({err})")) from None
        with client:
            yield {"client": client}
    else:
        yield {"workers": getattr(args, "workers", None)}


def _read(path, args, *, required, context):
    """A table from CSV, Parquet, .xlsx or a plate matrix, its headers mapped to the
    stage's names by the column options (see :mod:`inhibkin.inputs.columns`)."""
    from .inputs.columns import standardise_columns
    from .inputs.files import read_any_table

    names = {role: getattr(args, role) for role in _COLUMN_OPTIONS if getattr(args, role, None)}
    text = [args.compound] if getattr(args, "compound", None) else []
    table = read_any_table(path, plate=getattr(args, "plate", None), text_columns=text)
    return standardise_columns(table,
                               required=required, context=context, options={
                                   role: f"--{role}" for role in names}, **names)


# The column options every stage that reads a table may take (role = option name).
_COLUMN_OPTIONS = ("compound", "substrate", "inhibitor", "rate", "time", "signal")


def _column_arguments(parser, roles=("compound", "substrate", "inhibitor")):
    """--compound / --substrate / --inhibitor: the header of each column, matched without
    regard to case, its unit written _uM, (uM), [uM] or µM."""
    for role in roles:
        parser.add_argument(f"--{role}", default=role, metavar="COLUMN",
                            help=f"{role} column (default: '{role}'; matched ignoring case "
                                 f"and a unit written _uM, (uM) or [uM])")


def _write_output(table, path, *, campaign=None):
    """A table, or (.xlsx) a workbook with the campaign's parameters and plate QC too."""
    from .inputs.io import write_table

    if Path(path).suffix.lower() != ".xlsx":
        return write_table(table, path)
    from .inputs.excel import campaign_sheets, write_workbook

    sheets = campaign_sheets(campaign) if campaign is not None else {"table": table}
    return write_workbook(sheets, path)


def _fit_options(args) -> dict:
    if getattr(args, "figures", None):  # checked before the fits, not after
        from .reporting.figure_files import MIN_DPI

        folder = Path(args.figures)
        if not (folder.parent if str(folder.parent) else Path(".")).is_dir():
            raise DataError(Problem("--figures", None, args.figures,
                                    "the parent directory does not exist"))
        if args.figure_format == "png" and not args.dpi >= MIN_DPI:
            raise DataError(Problem("--dpi", None, args.dpi, f"must be at least {MIN_DPI}"))
    if getattr(args, "store", None):  # a store that cannot be opened stops the run now
        from .store import ResultStore

        ResultStore(args.store).close()
    return dict(compound="compound", units=_units(args.units),
                weighting=_weighting(args.weighting),
                intervals=args.intervals, level=args.level, quiet=args.quiet,
                chunk_size=args.chunk_size, engine=args.engine, edge_sides=args.edge_sides)


def _finish(campaign, output, args) -> int:
    """Write the ranking, report on stdout/stderr, and choose the exit status."""
    _write_output(campaign.ranking, output, campaign=campaign)
    _keep(campaign, output, args)
    _draw(campaign, args)
    if not args.quiet:
        print(campaign.summary())
    n_failed = campaign.counts["failed"]
    if n_failed:
        print(f"inhibkin {args.command}: {n_failed} of {len(campaign.ranking)} compounds "
              f"failed; their reasons are in the 'reason' column of {output}", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _weighting(chosen):
    """--weighting, or None: the library's default for the table (rate_se + variance model
    when the grid carries the rates stage's rate_se column, else relative)."""
    return chosen


def _km(text):
    """--km: a concentration with its unit (in M), or a column name."""
    from .units import parse_concentration

    if text is None:
        return None
    if text[:1].isdigit() or text[:1] in ".+-":
        return parse_concentration(text)
    return text


def _keep(campaign, output, args) -> None:
    """--store: write the campaign, with its provenance, to the results store."""
    if not getattr(args, "store", None):
        return
    from .store import write_campaign

    written = write_campaign(args.store, campaign, name=args.campaign or Path(output).stem,
                             inputs=_input_paths(args), notes=args.notes or "",
                             options=_stored_options(args))
    if not args.quiet:
        print(f"campaign {written.name!r} version {written.version} stored in {args.store}")


def _draw(campaign, args) -> None:
    """--figures DIR: every compound's figures as files (PNG at --dpi, or SVG)."""
    if getattr(args, "figures", None):
        from .reporting.figure_files import write_figures

        write_figures(campaign, args.figures, format=args.figure_format, dpi=args.dpi)


def _input_paths(args) -> list:
    return [getattr(args, name) for name in ("grid", "plates", "dose_response")
            if getattr(args, name, None)]


def _stored_options(args) -> dict:
    skip = {"handler", "store", "notes", "campaign", "quiet"}
    return {k: v for k, v in vars(args).items() if k not in skip}


def _store_arguments(parser):
    parser.add_argument("--store", metavar="FILE_OR_URL",
                        help="also keep the campaign in a results store: an SQLite file "
                             "(created when missing) or a postgresql:// URL")
    parser.add_argument("--campaign", metavar="NAME",
                        help="the campaign's name in the store (default: the output's stem); "
                             "writing a name again adds a new version")
    parser.add_argument("--notes", metavar="TEXT", help="free-text assay description kept "
                                                        "with the campaign")


def _fit_arguments(parser, output="ranked table (.csv, .parquet or .xlsx)",
                   weighting="weights of the grid fits: rate_se (rate_se + variance "
                             "model; the default when the grid has the rates stage's "
                             "rate_se column), relative (constant CV; the default "
                             "otherwise), uniform or sd"):
    parser.add_argument("-o", "--output", required=True, help=output)
    parser.add_argument("--units", action="append", metavar="NAME=UNIT",
                        help="declare a concentration unit when the header does not carry "
                             "one (repeatable), e.g. --units inhibitor=nM")
    _column_arguments(parser)
    _store_arguments(parser)
    parser.add_argument("--figures", metavar="DIR",
                        help="also write every compound's figures into DIR (created when "
                             "missing), with an index.csv of compound -> files")
    parser.add_argument("--figure-format", choices=("png", "svg"), default="png",
                        help="format of --figures (default png)")
    parser.add_argument("--dpi", type=float, default=150.0,
                        help="resolution of PNG --figures, at least 150 (default 150)")
    # None: the library's default for the table (rate_se when the grid carries it).
    parser.add_argument("--weighting", choices=("uniform", "relative", "sd", "rate_se"),
                        default=None,
                        help=weighting)
    parser.add_argument("--intervals", choices=("wald", "profile"), default="wald",
                        help="confidence intervals: wald (fast, default) or profile")
    parser.add_argument("--level", type=float, default=0.95, help="confidence level")
    _edge_sides_argument(parser)
    parser.add_argument("--chunk-size", type=int, default=None,
                        help="compounds per task (default: 32 on the lmfit path; on the "
                             "batched engine 1024 in one process, 256 with workers)")
    parser.add_argument("--engine", choices=("auto", "batched", "lmfit"), default="auto",
                        help="auto: the batched engine for tables of 20 or more compounds "
                             "with wald intervals, else lmfit")


def _edge_sides_argument(parser):
    parser.add_argument("--edge-sides", type=int, choices=(1, 2), default=2,
                        help="rule 4's test of the alpha edge a one-constant verdict must "
                             "reject: 2 two-sided (default), 1 one-sided (only when the "
                             "free alpha lies beyond the edge)")


def _dose_arguments(parser):
    from .core.models import ONE_CONSTANT_MODELS

    parser.add_argument("--km", help="Km for the IC50 to Ki conversion, with its unit "
                                     "(e.g. 20uM), or the name of a Km column")
    parser.add_argument("--enzyme", help="active enzyme concentration with its unit (e.g. "
                                         "2nM) or a column; enables the tight-binding flag")
    # The laws of one constant: mixed would need an alpha the command line does not take.
    parser.add_argument("--default-mechanism", default="competitive",
                        choices=ONE_CONSTANT_MODELS,
                        help="mechanism assumed for compounds without a grid fit")


def _dose_options(args) -> dict:
    return dict(km=_km(args.km), enzyme=_km(args.enzyme),
                potency_options={"default_mechanism": args.default_mechanism})


# ---------------------------------------------------------------- stages


def _rates_arguments(parser):
    _reads_arguments(parser, "initial-rate table")
    parser.add_argument("--rate", default="rate", metavar="COLUMN",
                        help="name of the rate column written (default: 'rate'; give the "
                             "same --rate to the mechanism stage)")
    parser.add_argument("--rate-time-unit", choices=("s", "ms", "min", "h"),
                        help="time unit of the rates written, e.g. min for µM/min "
                             "(default: --time-unit)")
    parser.add_argument("--method", choices=("linear", "curve", "integrated"),
                        default="linear",
                        help="linear: slope of the longest linear early window (default); "
                             "curve: slope at t = 0 of a quadratic over the early curve; "
                             "integrated: v0 from each well's whole curve (integrated "
                             "Michaelis-Menten, the km of the well's inhibitor row; needs "
                             "the signal as a concentration)")


def _reads_arguments(parser, output):
    """The options of the stages that read kinetic reads and a plate map."""
    parser.add_argument("reads", help="kinetic reads: a table (plate, well, time, signal; "
                                      "CSV, Parquet or .xlsx) or a plate-reader matrix of "
                                      "blocks (see README, 'Plate matrices')")
    parser.add_argument("--plate-map", required=True,
                        help="one row per well: plate, well, compound, substrate_<unit>, "
                             "inhibitor_<unit>, role")
    parser.add_argument("-o", "--output", required=True, help=output)
    parser.add_argument("--time", default="time", metavar="COLUMN",
                        help="time column of the reads (default: 'time', or the one "
                             "'time_<unit>' column, e.g. time_s, whose unit is then used)")
    parser.add_argument("--signal", default="signal", metavar="COLUMN",
                        help="signal column of the reads (default: 'signal'); a header "
                             "with a concentration unit, e.g. product_uM, declares the "
                             "signal a concentration in that unit")
    _column_arguments(parser)
    parser.add_argument("--plate", metavar="NAME",
                        help="plate name of plate-matrix blocks that name none (default: "
                             "the file's name)")
    parser.add_argument("--time-unit", choices=("s", "ms", "min", "h"),
                        help="unit of the times (default: the time header's unit, else s)")
    parser.add_argument("--chromophore", help="convert absorbance by Beer–Lambert, e.g. NADH")
    parser.add_argument("--path-length", type=float, default=1.0, help="cm (with --chromophore)")
    parser.add_argument("--signal-unit", help="concentration unit of the signal, when it is "
                                              "already a concentration")
    parser.add_argument("--direction", choices=("increase", "decrease"), default="increase",
                        help="whether the signal rises (default) or falls as the reaction "
                             "runs, e.g. decrease for NADH consumed at 340 nm")
    parser.add_argument("--units", action="append", metavar="NAME=UNIT",
                        help="substrate=UNIT / inhibitor=UNIT when the plate map's headers "
                             "carry none")


class _ReadsOnly:
    """The rates stage's options that name columns of the reads (time, signal)."""

    def __init__(self, args):
        self.time, self.signal, self.plate = args.time, args.signal, args.plate


class _MapOnly:
    """The rates stage's options that name columns of the plate map."""

    def __init__(self, args):
        self.compound, self.substrate, self.inhibitor = (args.compound, args.substrate,
                                                         args.inhibitor)


def _reads_and_map(args):
    """The reads and the plate map of a reads stage, read with its column options."""
    reads = _read(args.reads, _ReadsOnly(args), required=("plate", "well", "signal"),
                  context="reads")
    plate_map = _read(args.plate_map, _MapOnly(args), required=("plate", "well"),
                      context="plate map")
    return reads, plate_map


def _reads_options(args, plate_map) -> dict:
    """The keyword options a reads stage passes to initial_rates / fit_progress_curves."""
    from .rates.signal import BeerLambert
    from .units import resolve_units

    found = resolve_units(plate_map.columns, ["substrate", "inhibitor"],
                          units=_units(args.units), context="plate map")
    (substrate, substrate_unit), (inhibitor, inhibitor_unit) = (found["substrate"],
                                                                found["inhibitor"])
    conversion = (BeerLambert.of(args.chromophore, path_length=args.path_length)
                  if args.chromophore else None)
    return dict(time="time", signal="signal", time_unit=args.time_unit,
                conversion=conversion, signal_unit=args.signal_unit, substrate=substrate,
                inhibitor=inhibitor, substrate_unit=substrate_unit,
                inhibitor_unit=inhibitor_unit, direction=args.direction)


def _rates(args) -> int:
    from .rates.initial import initial_rates

    output = _check_output(args.output)
    _check_paths({"reads": args.reads, "--plate-map": args.plate_map}, {"--output": output})
    reads, plate_map = _reads_and_map(args)
    if not any(c == "time" or c.startswith("time_") for c in map(str, reads.columns)):
        return _endpoint(reads, plate_map, output, args)
    result = initial_rates(reads, plate_map, rate_time_unit=args.rate_time_unit,
                           method=args.method, **_reads_options(args, plate_map))
    _write_output(result.to_frame().rename(columns={"rate": args.rate}), output)
    if not args.quiet:
        print(result.summary())
    n_failed = int((result.table["status"] == "failed").sum())
    if n_failed:
        print(f"inhibkin rates: {n_failed} wells failed; see the 'flags' and 'status' columns "
              f"of {output}", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _progress_arguments(parser):
    _reads_arguments(parser, "one row per compound: verdict, reason, how the curves were "
                             "computed, and the verdict's constants (M where the plate "
                             "map declares units)")
    parser.add_argument("--params", help="also write every model's parameters of every "
                                         "compound (tidy table, with a unit column)")
    parser.add_argument("--product-ki", type=float, metavar="KP",
                        help="competitive product inhibition constant, in the substrate's "
                             "unit: the curves are then integrated numerically (ODE)")
    parser.add_argument("--integration", choices=("auto", "closed", "ode"), default="auto",
                        help="auto (default): the integrated Michaelis–Menten closed form "
                             "where it holds, else the ODE; closed; ode")
    parser.add_argument("--intervals", choices=("profile", "wald"), default="profile",
                        help="profile-likelihood (default) or log-scale Wald intervals")
    _edge_sides_argument(parser)


def _progress(args) -> int:
    import pandas as pd

    from .inputs.io import write_table
    from .mechanism.progress_curves import fit_progress_curves

    output = _check_output(args.output)
    params = _check_output(args.params, "--params") if args.params else None
    _check_paths({"reads": args.reads, "--plate-map": args.plate_map},
                 {"--output": output, "--params": params})
    reads, plate_map = _reads_and_map(args)
    options = _reads_options(args, plate_map)
    samples = plate_map
    if "role" in plate_map.columns:
        samples = plate_map[plate_map["role"].astype(str).str.strip().str.lower() == "sample"]
    compounds = pd.unique(samples["compound"].astype(str)) if "compound" in samples else []
    rows, tables = [], []
    for name in compounds:
        try:
            fit = fit_progress_curves(reads, plate_map, compound_id=name,
                                      integration=args.integration,
                                      product_ki=args.product_ki, intervals=args.intervals,
                                      edge_sides=args.edge_sides, **options)
        except InhibkinError as err:
            rows.append({"compound": name, "verdict": "failed", "best": None,
                         "reason": str(err)})
            continue
        row = {"compound": name, "verdict": fit.verdict, "best": fit.best,
               "reason": fit.reason, "integration": fit.integration,
               "wells": len(fit.offsets), "reads": len(fit.data)}
        unit = fit.units.get("inhibitor")
        for constant, values in fit.constants().iterrows():
            suffix = "" if constant == "alpha" or not unit else f"_{unit}"
            for column in ("estimate", "ci_low", "ci_high"):
                row[f"{constant}_{column}{suffix}"] = values[column]
        rows.append(row)
        tables.append(fit.to_frame())
        if not args.quiet:
            print(fit.summary())
    _write_output(pd.DataFrame(rows), output)
    if params is not None:
        write_table(pd.concat(tables, ignore_index=True) if tables else pd.DataFrame(), params)
    failed = [r["compound"] for r in rows if r["verdict"] == "failed"]
    if failed:
        print(f"inhibkin progress: {len(failed)} compounds failed ({', '.join(failed[:5])}); "
              f"see the 'reason' column of {output}", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _endpoint(reads, plate_map, output, args) -> int:
    """Reads without a time (one block per plate): each well's signal joined to the plate
    map, the dose-response table of the potency stage."""
    from .inputs.layouts import join_layout

    if args.time != "time":
        raise DataError(Problem("--time", None, args.time,
                                "no such column in the reads, and they hold no read times"))
    table = join_layout(reads, plate_map)
    _write_output(table, output)
    if not args.quiet:
        print(f"endpoint reads: {len(table)} wells of {table['plate'].nunique()} plates "
              f"joined to the plate map, written to {output}")
    return EXIT_OK


def _layout_arguments(parser):
    parser.add_argument("kind", choices=("dilution", "grid", "show"),
                        help="dilution: one compound per row, a dilution series along the "
                             "columns, control columns; grid: one compound's substrate "
                             "levels along rows × inhibitor levels along columns; show: "
                             "print an existing layout (FILE) as a plate")
    parser.add_argument("file", nargs="?", help="the layout to show (with 'show')")
    parser.add_argument("-o", "--output", help="write the layout (.csv, .parquet or .xlsx)")
    parser.add_argument("--plate", default="P1", help="plate name")
    parser.add_argument("--wells", type=int, default=96, choices=(96, 384, 1536))
    parser.add_argument("--compounds", help="dilution: compounds, comma-separated, one per row")
    parser.add_argument("--compound", help="grid: the compound")
    parser.add_argument("--top", type=float, help="dilution: top inhibitor concentration")
    parser.add_argument("--factor", type=float, default=3.0, help="dilution factor")
    parser.add_argument("--unit", default="uM", help="inhibitor concentration unit")
    parser.add_argument("--substrate", help="dilution: the assay's substrate concentration; "
                                            "grid: the substrate levels, comma-separated")
    parser.add_argument("--substrate-unit", default="uM")
    parser.add_argument("--inhibitor", help="grid: the inhibitor levels, comma-separated")
    parser.add_argument("--replicates", type=int, default=1, help="grid: wells per pair")
    parser.add_argument("--value", default="compound",
                        help="column shown in the printed plate (default: compound)")


def _layout(args) -> int:
    from .inputs.columns import standardise_columns
    from .inputs.files import read_any_table
    from .inputs.layouts import dilution_layout, grid_layout, plate_grid

    output = _check_output(args.output) if args.output else None
    if args.kind == "show":
        if not args.file:
            raise DataError(Problem("file", None, None, "name the layout to show"))
        layout = standardise_columns(read_any_table(args.file), required=("plate", "well"),
                                     context="layout")
    elif args.kind == "dilution":
        if not args.compounds or args.top is None:
            raise DataError("a dilution layout needs --compounds and --top")
        layout = dilution_layout(
            [c.strip() for c in args.compounds.split(",") if c.strip()], top=args.top,
            factor=args.factor, unit=args.unit, plate=args.plate, wells=args.wells,
            substrate=float(args.substrate) if args.substrate else None,
            substrate_unit=args.substrate_unit)
    else:
        if not args.compound or not args.substrate or not args.inhibitor:
            raise DataError("a grid layout needs --compound, --substrate and --inhibitor")
        layout = grid_layout(args.compound, substrate=_levels(args.substrate, "--substrate"),
                             inhibitor=_levels(args.inhibitor, "--inhibitor"),
                             substrate_unit=args.substrate_unit, inhibitor_unit=args.unit,
                             plate=args.plate, wells=args.wells, replicates=args.replicates)
    if output is not None:
        _write_output(layout, output)
    if args.kind == "show" or not args.quiet:
        print(plate_grid(layout, value=args.value))
    return EXIT_OK


def _store_stage_arguments(parser):
    parser.add_argument("store", metavar="FILE_OR_URL",
                        help="the results store: an SQLite file or a postgresql:// URL")
    parser.add_argument("what", choices=("campaigns", "campaign", "history", "msr"),
                        help="campaigns: every campaign kept; campaign NAME: its ranked "
                             "table (--table for another); history COMPOUND: the compound "
                             "across campaigns; msr: minimum significant ratio of pKi and "
                             "pIC50 from compounds measured more than once")
    parser.add_argument("name", nargs="?", help="the campaign or the compound")
    parser.add_argument("--version", type=int, help="campaign version (default: the latest)")
    parser.add_argument("--table", default="ranking",
                        choices=("ranking", "parameters", "comparisons", "plates",
                                 "time_dependent"),
                        help="which of the campaign's tables (with 'campaign')")
    parser.add_argument("-o", "--output", help="also write the table (.csv, .parquet, .xlsx)")


def _store_stage(args) -> int:
    from . import store
    from .display.text import text_table
    from .units import readable_units

    output = _check_output(args.output) if args.output else None
    if args.what in ("campaign", "history") and not args.name:
        thing = "compound" if args.what == "history" else "campaign"
        raise DataError(Problem("name", None, None, f"name the {thing}"))
    with store.ResultStore(args.store, create=False) as kept:
        if args.what == "campaigns":
            table = kept.campaigns()
        elif args.what == "campaign":
            table = kept.campaign_table(args.name, args.table, version=args.version)
        elif args.what == "history":
            table = kept.history(args.name)
        else:
            table = kept.msr().to_frame()
    if output is not None:
        _write_output(table, output)
    if not args.quiet:
        print(text_table(readable_units(table), index=False))
    return EXIT_OK


def _mechanism_arguments(parser):
    parser.add_argument("grid", help="substrate × inhibitor rates: compound, substrate_<unit>, "
                                     "inhibitor_<unit>, rate")
    _fit_arguments(parser)
    _rate_column_argument(parser)
    _enzyme_conc_argument(parser)
    parser.add_argument("--params", help="also write every model's parameters of every "
                                         "compound (tidy table)")


def _enzyme_conc_argument(parser):
    parser.add_argument("--enzyme-conc", metavar="CONC",
                        help="active enzyme concentration of the grid fits, with its unit "
                             "(e.g. 50nM): the tight-binding laws hold [E] there, and a Ki "
                             "within 10 x [E] is fitted in its tight-binding form")
    parser.add_argument("--fit-enzyme", action="store_true",
                        help="fit [E] in the tight-binding laws, starting at --enzyme-conc, "
                             "instead of holding it there (reported with its interval)")


def _grid_enzyme(args) -> dict:
    """enzyme= (and fit_enzyme=) for fit_campaign from --enzyme-conc (the grid fits' [E])
    and --fit-enzyme, checked against a dose stage's --enzyme: one campaign has one
    active enzyme concentration. --fit-enzyme needs an [E] to start from."""
    from .errors import OptionError
    from .units import parse_concentration

    text = getattr(args, "enzyme_conc", None)
    fit = {"fit_enzyme": True} if getattr(args, "fit_enzyme", False) else {}
    if fit and text is None and not isinstance(_km(getattr(args, "enzyme", None)), float):
        raise OptionError(Problem("--fit-enzyme", None, None,
                                  "needs the active enzyme concentration to start from: "
                                  "give --enzyme-conc (e.g. 50nM)"))
    if text is None:
        return fit
    value = parse_concentration(text)
    other = _km(getattr(args, "enzyme", None))
    if other is not None and other != value:
        raise DataError(Problem("--enzyme-conc", None, text,
                                f"differs from --enzyme {args.enzyme}: give one of them"))
    return {"enzyme": value, **fit}


def _rate_column_argument(parser):
    parser.add_argument("--rate", default="rate", metavar="COLUMN",
                        help="rate column of the grid (default: 'rate')")


# Columns each kind of table must have (roles of inhibkin.inputs.columns).
_GRID_COLUMNS = ("compound", "substrate", "inhibitor", "rate")
_DOSE_COLUMNS = ("compound", "inhibitor")


def _mechanism(args) -> int:
    from .campaign import fit_campaign
    from .inputs.io import write_table

    output = _check_output(args.output)
    params = _check_output(args.params, "--params") if args.params else None
    _check_paths({"grid": args.grid}, {"--output": output, "--params": params})
    _check_fit_arguments(args)
    table = _read(args.grid, args, required=_GRID_COLUMNS, context="grid")
    with _execution(args) as where:
        campaign = fit_campaign(table, rate="rate", **_grid_enzyme(args), **_fit_options(args),
                                **where)
    if params is not None:
        write_table(campaign.parameters(), params)
    return _finish(campaign, output, args)


def _potency_arguments(parser):
    parser.add_argument("plates", help="dose-response wells: compound, plate, role "
                                       "(sample/max/min), inhibitor_<unit>, signal, "
                                       "substrate_<unit>")
    _fit_arguments(parser, weighting="no effect in this stage: the dose-response curves are "
                                     "fitted unweighted (it weights grid fits in rank and "
                                     "report)")
    _dose_arguments(parser)


def _potency(args) -> int:
    from .campaign import fit_campaign

    output = _check_output(args.output)
    _check_paths({"plates": args.plates}, {"--output": output})
    _check_fit_arguments(args)
    table = _read(args.plates, _DoseColumns(args), required=_DOSE_COLUMNS,
                  context="dose-response table")
    with _execution(args) as where:
        campaign = fit_campaign(dose_response=table, **_dose_options(args),
                                **_fit_options(args), **where)
    return _finish(campaign, output, args)


class _DoseColumns:
    """Column options for a dose-response table: its signal is the 'signal' column."""

    def __init__(self, args):
        self.compound, self.substrate, self.inhibitor = (args.compound, args.substrate,
                                                         args.inhibitor)


def _rank_arguments(parser):
    parser.add_argument("--grid", help="substrate × inhibitor rate table")
    parser.add_argument("--dose-response", help="dose-response well table")
    _time_dependent_arguments(parser, "ranked in their own table")
    parser.add_argument("--time-dependent-output", metavar="PATH",
                        help="the time-dependent ranking (needed with --time-dependent): "
                             "covalent by log10(kinact/KI), or with --reversible slow "
                             "binding by Ki* with residence time")
    _fit_arguments(parser)
    _rate_column_argument(parser)
    _enzyme_conc_argument(parser)
    _dose_arguments(parser)


def _time_dependent_arguments(parser, where):
    """--time-dependent READS (ranked apart, ``where`` says how), --reversible and the
    assay's S and Km: the same options on rank and report."""
    parser.add_argument("--time-dependent", metavar="READS",
                        help="kinetic reads of time-dependent compounds (compound, well, "
                             f"time, signal, inhibitor), {where}")
    parser.add_argument("--reversible", action="store_true",
                        help="the --time-dependent compounds bind slowly and reversibly")
    parser.add_argument("--time-dependent-substrate", metavar="CONC",
                        help="substrate concentration of the --time-dependent assay with its "
                             "unit (e.g. 100uM), for KI = KI,app/(1 + S/Km); with "
                             "--time-dependent-km")
    parser.add_argument("--time-dependent-km", metavar="CONC",
                        help="Km of the --time-dependent assay with its unit (e.g. 10uM)")


def _whole_campaign(args, time_dependent=None):
    """fit_campaign over --grid and/or --dose-response (the rank and report stages), the
    --time-dependent ranking carried along."""
    from .campaign import fit_campaign

    grid = (_read(args.grid, args, required=_GRID_COLUMNS, context="grid")
            if args.grid else None)
    dose = (_read(args.dose_response, _DoseColumns(args), required=_DOSE_COLUMNS,
                  context="dose-response table") if args.dose_response else None)
    dose_options = {**(_dose_options(args) if dose is not None else {}), **_grid_enzyme(args)}
    with _execution(args) as where:
        return fit_campaign(grid, dose_response=dose, rate="rate", **dose_options,
                            **_fit_options(args), **where, time_dependent=time_dependent)


def _time_dependent_ranking(args):
    """--time-dependent READS ranked in their own table (rank and report stages), KI
    corrected by 1 + S/Km when the assay's S and Km are given."""
    from .inputs.io import read_table
    from .time_dependent import fit_time_dependent_ranking

    substrate, km, _ = _assay_concentrations(args.time_dependent_substrate, args.time_dependent_km)
    if (substrate is None) != (km is None):
        raise DataError(Problem("--time-dependent-km", None, km,
                                "give --time-dependent-substrate and --time-dependent-km "
                                "together"))
    reads = read_table(args.time_dependent, text_columns=["compound"])
    return fit_time_dependent_ranking(reads, irreversible=not args.reversible,
                                      substrate=substrate, km=km, level=args.level)


def _rank(args) -> int:
    if not args.grid and not args.dose_response:
        raise DataError("give --grid, --dose-response, or both")
    if bool(args.time_dependent) != bool(args.time_dependent_output):
        raise DataError(Problem("--time-dependent-output", None, args.time_dependent_output,
                                "give --time-dependent and --time-dependent-output together"))
    output = _check_output(args.output)
    td_output = (_check_output(args.time_dependent_output, "--time-dependent-output")
                 if args.time_dependent_output else None)
    _check_paths({"--grid": args.grid, "--dose-response": args.dose_response,
                  "--time-dependent": args.time_dependent},
                 {"--output": output, "--time-dependent-output": td_output})
    _check_fit_arguments(args)
    td_failed, ranked = 0, None
    if args.time_dependent:
        from .inputs.io import write_table

        ranked = _time_dependent_ranking(args)
        write_table(ranked.table, td_output)
        td_failed = int((ranked.table["status"] == "failed").sum())
        if td_failed:
            print(f"inhibkin rank: {td_failed} of {len(ranked.table)} time-dependent "
                  f"compounds failed; their reasons are in the 'reason' column of "
                  f"{td_output}", file=sys.stderr)
    status = _finish(_whole_campaign(args, ranked), output, args)
    return EXIT_SOME_FAILED if td_failed and status == EXIT_OK else status


def _report_arguments(parser):
    parser.add_argument("--grid", help="substrate × inhibitor rate table")
    parser.add_argument("--dose-response", help="dose-response well table")
    parser.add_argument("--ranking", help="also write the ranked table (.csv or .parquet)")
    _time_dependent_arguments(parser, "their own ranked section")
    parser.add_argument("--rate-unit", default="", help="label of the rates, e.g. uM/min")
    parser.add_argument("--detail", action="append", metavar="WHICH",
                        help="compounds drawn with the full figures (about a second each; "
                             "every compound gets tables and small sketches): top:N (the N "
                             "best ranked; default top:5), flagged, all, none, or a "
                             "compound ID; repeatable, the union is drawn")
    _fit_arguments(parser, output="the HTML report (.html)")
    _rate_column_argument(parser)
    _enzyme_conc_argument(parser)
    _dose_arguments(parser)


def _report(args) -> int:
    from .reporting.report import DEFAULT_DETAIL, check_detail, report

    if not args.grid and not args.dose_response:
        raise DataError("give --grid, --dose-response, or both")
    detail = check_detail(args.detail or DEFAULT_DETAIL)
    output = _check_output(args.output, suffixes=(".html", ".htm"))
    ranking = _check_output(args.ranking, "--ranking") if args.ranking else None
    _check_paths({"--grid": args.grid, "--dose-response": args.dose_response,
                  "--time-dependent": args.time_dependent},
                 {"--output": output, "--ranking": ranking})
    _check_fit_arguments(args)
    time_dependent = _time_dependent_ranking(args) if args.time_dependent else None
    campaign = _whole_campaign(args, time_dependent)
    if ranking is not None:
        _write_output(campaign.ranking, ranking, campaign=campaign)
    _keep(campaign, ranking or output, args)
    _draw(campaign, args)
    path = report(campaign, output, rate_unit=args.rate_unit, detail=detail,
                  quiet=args.quiet)
    if not args.quiet:
        print(f"report written to {path.resolve()}")
    n_failed = campaign.counts["failed"]
    if n_failed:
        print(f"inhibkin report: {n_failed} of {len(campaign.ranking)} compounds failed; "
              "the report lists their reasons", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _design_arguments(parser):
    parser.add_argument("--km-range", nargs=2, type=float, required=True,
                        metavar=("LOW", "HIGH"), help="prior range of km (substrate unit)")
    parser.add_argument("--ki-range", nargs=2, type=float, required=True,
                        metavar=("LOW", "HIGH"), help="prior range of Ki (inhibitor unit)")
    parser.add_argument("--wells", type=int, required=True, help="wells for one compound")
    parser.add_argument("--substrate", required=True,
                        help="substrate concentrations that can be made, comma-separated")
    parser.add_argument("--inhibitor", required=True,
                        help="inhibitor concentrations that can be made, comma-separated "
                             "(0 is always added)")
    parser.add_argument("--cv", type=float, default=0.05, help="expected CV of a rate")
    parser.add_argument("--floor-sd", type=float, default=0.01,
                        help="constant noise SD as a fraction of vmax")
    parser.add_argument("--replicates", type=int, default=2)
    parser.add_argument("--simulations", type=int, default=200,
                        help="simulated data sets per grid for the correct-call rate")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--substrate-unit", metavar="UNIT",
                        help="unit of --km-range and --substrate, e.g. uM (needed with -o: "
                             "the layout's headers carry it)")
    parser.add_argument("--inhibitor-unit", metavar="UNIT",
                        help="unit of --ki-range and --inhibitor, e.g. nM (needed with -o)")
    parser.add_argument("-o", "--output",
                        help="write the proposed layout: plate, well, substrate_<unit>, "
                             "inhibitor_<unit>, replicate (from 1)")


def _levels(text, option):
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise DataError(Problem(option, None, text,
                                "must be numbers separated by commas")) from None


def _design(args) -> int:
    from .design import plan_grid
    from .inputs.io import write_table
    from .units import normalise_unit

    output = _check_output(args.output) if args.output else None
    units = {}
    for option, value in (("--substrate-unit", args.substrate_unit),
                          ("--inhibitor-unit", args.inhibitor_unit)):
        if value is None and output is not None:
            raise DataError(Problem(option, None, None,
                                    "the layout's headers carry the units; give "
                                    f"{option} (e.g. uM)"))
        units[option] = normalise_unit(value) if value is not None else None
    plan = plan_grid(km_range=tuple(args.km_range), ki_range=tuple(args.ki_range),
                     n_wells=args.wells, substrate_choices=_levels(args.substrate, "--substrate"),
                     inhibitor_choices=_levels(args.inhibitor, "--inhibitor"), cv=args.cv,
                     floor_sd=args.floor_sd, replicates=args.replicates,
                     n_simulations=args.simulations, seed=args.seed,
                     substrate_unit=units["--substrate-unit"],
                     inhibitor_unit=units["--inhibitor-unit"])
    if output is not None:
        write_table(plan.layout(), output)
    if not args.quiet:
        print(plan.summary())
        if output is not None:
            print(f"wrote the {plan.choice} grid, {len(plan.layout())} wells, to {output}")
    return EXIT_OK


def _simulate_arguments(parser):
    parser.add_argument("-o", "--output", required=True, help="simulated grid table")
    parser.add_argument("--compounds", type=int, default=20, help="number of compounds")
    parser.add_argument("--seed", type=int, required=True, help="random seed")
    parser.add_argument("--cv", type=float, default=0.05, help="coefficient of variation")
    parser.add_argument("--truth", help="also write the true mechanisms and Ki")


def _simulate(args) -> int:
    from .inputs.io import write_table
    from .simulate import simulate_campaign

    output = _check_output(args.output)
    truth_path = _check_output(args.truth, "--truth") if args.truth else None
    _check_paths({}, {"--output": output, "--truth": truth_path})
    if args.compounds < 1:
        raise DataError(Problem("--compounds", None, args.compounds, "must be at least 1"))
    table, truth = simulate_campaign(args.compounds, seed=args.seed, cv=args.cv)
    write_table(table, output)
    if truth_path is not None:
        write_table(truth, truth_path)
    if not args.quiet:
        print(f"wrote {len(table)} rows for {args.compounds} simulated compounds to {output}")
    return EXIT_OK


def _inactivation_arguments(parser):
    parser.add_argument("reads", help="kinetic reads: well, time, signal, inhibitor[, compound]")
    parser.add_argument("-o", "--output", required=True,
                        help="one row per compound: scheme and constants with intervals")
    parser.add_argument("--kobs", help="also write kobs of every well")
    parser.add_argument("--compound", default="compound",
                        help="compound column (absent: the whole file is one compound)")
    parser.add_argument("--well", default="well")
    parser.add_argument("--time", default="time")
    parser.add_argument("--signal", default="signal")
    parser.add_argument("--inhibitor", default="inhibitor")
    parser.add_argument("--reversible", action="store_true",
                        help="slow reversible binding (fit vs, k6, koff) instead of covalent")
    parser.add_argument("--substrate-conc",
                        help="assay substrate concentration with its unit (e.g. 200uM), for "
                             "KI = KI,app/(1 + S/Km)")
    parser.add_argument("--km", help="Km with its unit (e.g. 40uM); a bare number is read "
                                     "in the unit of a bare --substrate-conc")
    parser.add_argument("--product-per-signal",
                        help="product per signal unit, as a concentration (e.g. 6.2uM per "
                             "absorbance unit; a bare number in the unit of a bare "
                             "--substrate-conc): carries each well's substrate depletion in "
                             "the covalent fits (needs --substrate-conc and --km)")
    parser.add_argument("--level", type=float, default=0.95)


def _assay_concentrations(substrate, km, product_per_signal=None):
    """--substrate-conc, --km (and --product-per-signal) as numbers of one unit: all with
    their units (read in M, as every other stage reads concentrations) or all bare numbers
    of one unit. Returns (substrate, km, product_per_signal), None where not given."""
    from .units import parse_concentration
    from .validate import check_options

    def is_bare(text):
        try:
            float(text)
        except ValueError:
            return False
        return True

    options = (("--substrate-conc", substrate), ("--km", km),
               ("--product-per-signal", product_per_signal))
    given = {option: text for option, text in options if text is not None}
    if len({is_bare(text) for text in given.values()}) > 1:
        raise DataError(Problem("--km", None, " and ".join(given.values()),
                                f"give {', '.join(given)} all with their units "
                                "(e.g. 200uM and 40uM) or all as bare numbers of one unit"))
    if all(is_bare(text) for text in given.values()):
        values = {option: float(text) for option, text in given.items()}
    else:
        values = {option: parse_concentration(text) for option, text in given.items()}
    if "--km" in values:
        check_options({"--km": values["--km"]})
    return tuple(values.get(option) for option, _ in options)


def _inactivation(args) -> int:
    import pandas as pd

    from .inputs.io import read_table, write_table
    from .time_dependent import fit_time_dependent
    from .validate import check_options

    output = _check_output(args.output)
    kobs_path = _check_output(args.kobs, "--kobs") if args.kobs else None
    _check_paths({"reads": args.reads}, {"--output": output, "--kobs": kobs_path})
    check_options({"--level": args.level})
    substrate, km, product_per_signal = _assay_concentrations(args.substrate_conc, args.km,
                                                          args.product_per_signal)
    reads = read_table(args.reads, text_columns=[args.compound])
    if args.compound in reads.columns:
        groups = list(reads.groupby(args.compound, sort=False))
    else:
        groups = [(None, reads)]
    rows, wells, failed = [], [], 0
    for name, part in groups:
        row = {"compound": name}
        try:
            fit = fit_time_dependent(part, well=args.well, time=args.time,
                                     signal=args.signal, inhibitor=args.inhibitor,
                                     irreversible=not args.reversible,
                                     substrate=substrate, km=km,
                                     product_per_signal=product_per_signal,
                                     level=args.level, compound=name)
        except InhibkinError as err:
            failed += 1
            rows.append(row | {"status": "failed", "error": str(err)})
            continue
        row |= {"scheme": fit.scheme, "p_value": fit.ftest["p_value"]}
        for constant, values in fit.constants.iterrows():
            row |= {constant: values["estimate"], f"{constant}_low": values["ci_low"],
                    f"{constant}_high": values["ci_high"]}
        rows.append(row | {"status": "ok", "error": ""})
        wells.append(fit.kobs.assign(compound=name))
        if not args.quiet:
            print(fit.summary())
    write_table(pd.DataFrame(rows), output)
    if kobs_path is not None and wells:
        write_table(pd.concat(wells, ignore_index=True), kobs_path)
    return EXIT_SOME_FAILED if failed else EXIT_OK


def _demo_arguments(parser):
    parser.add_argument("--out", default="demo_output", help="output directory")


def _demo(args) -> int:
    from .demo import run_demo

    # Each stage's lines as soon as it is done: the demo takes a while on a busy machine.
    run_demo(args.out, progress=None if args.quiet else lambda line: print(line, flush=True))
    return EXIT_OK


SUBCOMMANDS = [
    Subcommand(
        "rates", "initial rates from kinetic reads and a plate map",
        "inhibkin rates reads.csv --plate-map plate_map.csv --time-unit min "
        "--chromophore NADH --direction decrease -o rates.csv\n"
        "  inhibkin rates data_demo/invented_moa_reads.csv --plate-map "
        "data_demo/invented_moa_plate_map.csv --signal product_uM --rate-time-unit min "
        "-o demo_rates.csv",
        _rates_arguments, _rates, parallel=False),
    Subcommand(
        "progress", "fit every mechanism to whole progress curves (all reads of all wells)",
        "inhibkin progress reads.csv --plate-map plate_map.csv --time-unit min --chromophore NADH "
        "--direction decrease -o progress.csv --params progress_parameters.csv",
        _progress_arguments, _progress, parallel=False),
    Subcommand(
        "mechanism", "fit every mechanism to each compound's substrate × inhibitor grid",
        "inhibkin mechanism rates.csv --weighting relative -o mechanisms.csv "
        "--params parameters.csv",
        _mechanism_arguments, _mechanism),
    Subcommand(
        "potency", "IC50, Hill slope and Ki from dose-response plates",
        "inhibkin potency plates.csv --km 20uM -o potency.csv",
        _potency_arguments, _potency),
    Subcommand(
        "rank", "the whole campaign: grids and dose-response curves, ranked by pKi",
        "inhibkin simulate --compounds 50 --seed 1 -o grid.csv\n"
        "  inhibkin rank --grid grid.csv --weighting relative -o ranking.csv\n"
        "  inhibkin rank --grid grid.csv --dose-response plates.csv --km 20uM -o ranking.parquet"
        " --scheduler tcp://127.0.0.1:8786",
        _rank_arguments, _rank),
    Subcommand(
        "report", "fit a campaign and write one self-contained HTML report",
        "inhibkin report --grid rates.csv --units substrate=uM --units inhibitor=nM "
        "--weighting relative -o report.html --ranking ranking.csv",
        _report_arguments, _report),
    Subcommand(
        "simulate", "a seeded simulated campaign of known mechanisms and Ki (for trials)",
        "inhibkin simulate --compounds 200 --seed 7 --cv 0.05 -o grid.csv --truth truth.csv",
        _simulate_arguments, _simulate, parallel=False),
    Subcommand(
        "design", "propose substrate × inhibitor levels that tell the mechanisms apart",
        "inhibkin design --km-range 1 5 --ki-range 0.05 0.5 --wells 48 "
        "--substrate 0.01,0.02,0.04,0.08,0.16,0.32,0.64,1.28,2.56,5.12,10.24,20.48 "
        "--inhibitor 0.001,0.003,0.009,0.027,0.081,0.243,0.729,2.187 "
        "--substrate-unit uM --inhibitor-unit uM --simulations 20 -o layout.csv",
        _design_arguments, _design, parallel=False),
    Subcommand(
        "layout", "write a usual plate layout, or print a layout as a plate for review",
        "inhibkin layout dilution --compounds CPD-1,CPD-2 --top 30 --unit uM --factor 3 "
        "--substrate 40 -o layout.csv\n"
        "  inhibkin layout grid --compound CPD-1 --substrate 2,5,10,20,40,80,160,320 "
        "--inhibitor 0,10,30,100 --unit nM --replicates 3 -o grid_map.csv\n"
        "  inhibkin layout show layout.csv --value role",
        _layout_arguments, _layout, parallel=False),
    Subcommand(
        "store", "read back the results store: campaigns, a compound's history, the MSR",
        "inhibkin rank --grid grid.csv -o ranking.csv --store results.sqlite "
        "--campaign week-12 --notes 'kinase X, 1 mM ATP'\n"
        "  inhibkin store results.sqlite history CPD-0007\n"
        "  inhibkin store results.sqlite msr",
        _store_stage_arguments, _store_stage, parallel=False),
    Subcommand(
        "inactivation", "kobs per well, one-step or two-step, kinact, KI and kinact/KI",
        "inhibkin inactivation data_demo/invented_covalent_reads.csv --time time_s "
        "--signal product_uM --inhibitor inhibitor_uM --substrate-conc 200uM --km 40uM "
        "-o constants.csv --kobs kobs.csv",
        _inactivation_arguments, _inactivation, parallel=False),
    Subcommand("demo", "run the demo flow on invented data", "inhibkin demo",
               _demo_arguments, _demo, parallel=False),
]


def build_parser() -> argparse.ArgumentParser:
    """The parser of every subcommand in :data:`SUBCOMMANDS`."""
    parser = argparse.ArgumentParser(prog="inhibkin", description=_DESCRIPTION,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="command", required=True)
    for command in SUBCOMMANDS:
        stage = sub.add_parser(command.name, help=command.help, description=command.help,
                               epilog=f"example:\n  {command.example}",
                               formatter_class=argparse.RawDescriptionHelpFormatter)
        command.arguments(stage)
        stage.add_argument("--quiet", action="store_true",
                           help="no progress bar and no summary on stdout")
        if command.parallel:
            stage.add_argument("--workers", type=int, metavar="N",
                               help="local worker processes")
            stage.add_argument("--scheduler", metavar="ADDRESS",
                               help="run on a Dask cluster, e.g. tcp://10.0.0.5:8786")
        stage.set_defaults(handler=command.run)
    return parser


def main(argv=None) -> int:
    """Run one subcommand; returns the exit status (0, 1 or 2, see the module notes)."""
    args = build_parser().parse_args(argv)
    try:
        with interrupts_recorded():
            return args.handler(args)
    except InhibkinError as err:
        print(f"inhibkin {args.command}: {err}", file=sys.stderr)
        return EXIT_UNUSABLE_INPUT
    except OSError as err:
        # Reading or writing failed (disk full, permissions changed mid-run): one line,
        # and the atomic writes have left every earlier file as it was.
        where = f" {err.filename!r}" if err.filename else ""
        print(f"inhibkin {args.command}: cannot read or write{where}: "
              f"{err.strerror or err}", file=sys.stderr)
        return EXIT_UNUSABLE_INPUT


if __name__ == "__main__":
    sys.exit(main())
