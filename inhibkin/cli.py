"""The ``inhibkin`` command line: one subcommand per stage, a thin layer over the API.

Every stage reads CSV or Parquet and writes CSV or Parquet (by file suffix), atomically.
Exit status: 0 when every compound was fitted, 1 when some compounds failed (all
results are still written, each failure with its reason), 2 when the input cannot be
used at all (the problems are listed on stderr, and nothing is written).

A stage is one arguments function, one run function and one entry in SUBCOMMANDS.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from .errors import DataError, InhibkinError, Problem

__all__ = ["main", "build_parser", "Subcommand", "SUBCOMMANDS"]

EXIT_OK = 0
EXIT_SOME_FAILED = 1
EXIT_UNUSABLE_INPUT = 2

# What `inhibkin --help` says (the module docstring is for developers).
_DESCRIPTION = """\
Characterise enzyme inhibitors from plate data, one stage at a time: initial rates from
kinetic reads (rates), the mechanism of each compound from its substrate × inhibitor grid
(mechanism), IC50 and Ki from dose-response plates (potency), a ranking by pKi (rank), an
HTML report (report) and kinact, KI and kinact/KI of time-dependent inhibitors
(inactivation). Each stage reads and writes CSV or Parquet tables; `inhibkin
STAGE --help` shows its options and a worked example.

Exit status: 0 when every compound was fitted, 1 when some failed (every result is still
written, each failure with its reason), 2 when the input cannot be used (the problems are
listed, nothing is written).

Results are statistical estimates for research triage; confirm decisions with
orthogonal experiments. No output is for clinical or dosing use."""

# Seconds to wait for a Dask scheduler before giving up.
_SCHEDULER_TIMEOUT = "20s"


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


def _check_output(path) -> Path:
    """Refuse an output path we could not write *before* the work starts."""
    from .io import TABLE_FORMATS

    path = Path(path)
    if path.suffix.lower() not in TABLE_FORMATS:
        raise DataError(Problem("--output", None, str(path),
                                f"unknown table format; use one of {', '.join(TABLE_FORMATS)}"))
    if not (path.parent if str(path.parent) else Path(".")).is_dir():
        raise DataError(Problem("--output", None, str(path), "the directory does not exist"))
    return path


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


def _fit_options(args) -> dict:
    return dict(compound=args.compound, units=_units(args.units),
                weighting=_weighting(args.weighting),
                intervals=args.intervals, level=args.level, quiet=args.quiet,
                chunk_size=args.chunk_size, engine=args.engine)


def _finish(campaign, output, args) -> int:
    """Write the ranking, report on stdout/stderr, and choose the exit status."""
    from .io import write_table

    write_table(campaign.ranking, output)
    if not args.quiet:
        print(campaign.summary())
    n_failed = campaign.counts["failed"]
    if n_failed:
        print(f"inhibkin {args.command}: {n_failed} of {len(campaign.ranking)} compounds "
              f"failed; their reasons are in the 'reason' column of {output}", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _weighting(chosen):
    """--weighting, or the library's default (the fitting modules only when a stage runs)."""
    from .mechanism import DEFAULT_WEIGHTING

    return chosen or DEFAULT_WEIGHTING


def _km(text):
    """--km: a concentration with its unit (in M), or a column name."""
    from .batch import parse_concentration

    if text is None:
        return None
    if text[:1].isdigit() or text[:1] == ".":
        return parse_concentration(text)
    return text


def _fit_arguments(parser, output="ranked table (.csv or .parquet)",
                   weighting="weights of the grid fits: uniform, relative (constant CV; "
                             "the default) or sd"):
    parser.add_argument("-o", "--output", required=True, help=output)
    parser.add_argument("--units", action="append", metavar="NAME=UNIT",
                        help="declare a concentration unit when the header does not carry "
                             "one (repeatable), e.g. --units inhibitor=nM")
    parser.add_argument("--compound", default="compound", help="compound column")
    # None: the library's default (relative), read when the stage runs.
    parser.add_argument("--weighting", choices=("uniform", "relative", "sd"), default=None,
                        help=weighting)
    parser.add_argument("--intervals", choices=("wald", "profile"), default="wald",
                        help="confidence intervals: wald (fast, default) or profile")
    parser.add_argument("--level", type=float, default=0.95, help="confidence level")
    parser.add_argument("--chunk-size", type=int, default=None,
                        help="compounds per task (default: 32 on the lmfit path, 256 on the "
                             "batched engine)")
    parser.add_argument("--engine", choices=("auto", "batched", "lmfit"), default="auto",
                        help="auto: the batched engine for tables of 20 or more compounds "
                             "with wald intervals, else lmfit")


def _dose_arguments(parser):
    parser.add_argument("--km", help="Km for the IC50 to Ki conversion, with its unit "
                                     "(e.g. 20uM), or the name of a Km column")
    parser.add_argument("--enzyme", help="active enzyme concentration with its unit (e.g. "
                                         "2nM) or a column; enables the tight-binding flag")
    parser.add_argument("--default-mechanism", default="competitive",
                        choices=("competitive", "uncompetitive", "noncompetitive"),
                        help="mechanism assumed for compounds without a grid fit")


def _dose_options(args) -> dict:
    return dict(km=_km(args.km), enzyme=_km(args.enzyme),
                potency_options={"default_mechanism": args.default_mechanism})


# ---------------------------------------------------------------- stages


def _rates_arguments(parser):
    parser.add_argument("reads", help="kinetic reads: plate, well, time, signal")
    parser.add_argument("--plate-map", required=True,
                        help="one row per well: plate, well, compound, substrate_<unit>, "
                             "inhibitor_<unit>, role")
    parser.add_argument("-o", "--output", required=True, help="initial-rate table")
    parser.add_argument("--time", default="time", metavar="COLUMN",
                        help="time column of the reads (default: 'time', or the one "
                             "'time_<unit>' column, e.g. time_s, whose unit is then used)")
    parser.add_argument("--signal", default="signal", metavar="COLUMN",
                        help="signal column of the reads (default: 'signal'); a header "
                             "with a concentration unit, e.g. product_uM, declares the "
                             "signal a concentration in that unit")
    parser.add_argument("--rate", default="rate", metavar="COLUMN",
                        help="name of the rate column written (default: 'rate'; give the "
                             "same --rate to the mechanism stage)")
    parser.add_argument("--time-unit", choices=("s", "ms", "min", "h"),
                        help="unit of the times (default: the time header's unit, else s)")
    parser.add_argument("--rate-time-unit", choices=("s", "ms", "min", "h"),
                        help="time unit of the rates written, e.g. min for µM/min "
                             "(default: --time-unit)")
    parser.add_argument("--method", choices=("linear", "curve"), default="linear",
                        help="linear: slope of the longest linear early window (default); "
                             "curve: slope at t = 0 of a quadratic over the early curve")
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


def _check_read_columns(reads, args) -> None:
    """Name the option when the column it names (or its default) is not in the reads."""
    from .units import split_unit

    have = [str(c) for c in reads.columns]
    for option, name, kind in (("--time", args.time, "time"),
                               ("--signal", args.signal, "concentration")):
        if name in have or any(split_unit(c, kind=kind)[0] == name
                               and split_unit(c, kind=kind)[1] for c in have):
            continue
        raise DataError(Problem(option, None, name,
                                f"no such column in the reads; they have: "
                                f"{', '.join(map(repr, have[:20]))}; name the column with "
                                f"{option}"))


def _rates(args) -> int:
    from .io import read_table, write_table
    from .rates import initial_rates
    from .signal import BeerLambert
    from .units import resolve_units

    output = _check_output(args.output)
    reads, plate_map = read_table(args.reads), read_table(args.plate_map)
    _check_read_columns(reads, args)
    found = resolve_units(plate_map.columns, ["substrate", "inhibitor"],
                          units=_units(args.units), context="plate map")
    (substrate, substrate_unit), (inhibitor, inhibitor_unit) = (found["substrate"],
                                                                found["inhibitor"])
    conversion = (BeerLambert.of(args.chromophore, path_length=args.path_length)
                  if args.chromophore else None)
    result = initial_rates(reads, plate_map, time=args.time, signal=args.signal,
                           time_unit=args.time_unit,
                           rate_time_unit=args.rate_time_unit, method=args.method,
                           conversion=conversion, signal_unit=args.signal_unit,
                           substrate=substrate, inhibitor=inhibitor,
                           substrate_unit=substrate_unit, inhibitor_unit=inhibitor_unit,
                           direction=args.direction)
    write_table(result.to_frame().rename(columns={"rate": args.rate}), output)
    if not args.quiet:
        print(result.summary())
    n_failed = int((result.table["status"] == "failed").sum())
    if n_failed:
        print(f"inhibkin rates: {n_failed} wells failed; see the 'flags' and 'status' columns "
              f"of {output}", file=sys.stderr)
        return EXIT_SOME_FAILED
    return EXIT_OK


def _mechanism_arguments(parser):
    parser.add_argument("grid", help="substrate × inhibitor rates: compound, substrate_<unit>, "
                                     "inhibitor_<unit>, rate")
    _fit_arguments(parser)
    _rate_column_argument(parser)
    parser.add_argument("--params", help="also write every model's parameters of every "
                                         "compound (tidy table)")


def _rate_column_argument(parser):
    parser.add_argument("--rate", default="rate", metavar="COLUMN",
                        help="rate column of the grid (default: 'rate')")


def _mechanism(args) -> int:
    from .batch import fit_campaign
    from .io import read_table, write_table

    output = _check_output(args.output)
    params = _check_output(args.params) if args.params else None
    table = read_table(args.grid)
    with _execution(args) as where:
        campaign = fit_campaign(table, rate=args.rate, **_fit_options(args), **where)
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
    from .batch import fit_campaign
    from .io import read_table

    output = _check_output(args.output)
    table = read_table(args.plates)
    with _execution(args) as where:
        campaign = fit_campaign(dose_response=table, **_dose_options(args),
                                **_fit_options(args), **where)
    return _finish(campaign, output, args)


def _rank_arguments(parser):
    parser.add_argument("--grid", help="substrate × inhibitor rate table")
    parser.add_argument("--dose-response", help="dose-response well table")
    _fit_arguments(parser)
    _rate_column_argument(parser)
    _dose_arguments(parser)


def _whole_campaign(args):
    """fit_campaign over --grid and/or --dose-response (the rank and report stages)."""
    from .batch import fit_campaign
    from .io import read_table

    grid = read_table(args.grid) if args.grid else None
    dose = read_table(args.dose_response) if args.dose_response else None
    dose_options = _dose_options(args) if dose is not None else {}
    with _execution(args) as where:
        return fit_campaign(grid, dose_response=dose, rate=args.rate, **dose_options,
                            **_fit_options(args), **where)


def _rank(args) -> int:
    if not args.grid and not args.dose_response:
        raise DataError("give --grid, --dose-response, or both")
    output = _check_output(args.output)
    return _finish(_whole_campaign(args), output, args)


def _report_arguments(parser):
    parser.add_argument("--grid", help="substrate × inhibitor rate table")
    parser.add_argument("--dose-response", help="dose-response well table")
    parser.add_argument("--ranking", help="also write the ranked table (.csv or .parquet)")
    parser.add_argument("--rate-unit", default="", help="label of the rates, e.g. uM/min")
    _fit_arguments(parser, output="the HTML report (.html)")
    _rate_column_argument(parser)
    _dose_arguments(parser)
    parser.set_defaults(intervals="profile")


def _report(args) -> int:
    from .io import write_table
    from .report import report

    if not args.grid and not args.dose_response:
        raise DataError("give --grid, --dose-response, or both")
    output = Path(args.output)
    if output.suffix.lower() not in (".html", ".htm"):
        raise DataError(Problem("--output", None, str(output), "the report is an .html file"))
    if not output.parent.is_dir():
        raise DataError(Problem("--output", None, str(output), "the directory does not exist"))
    ranking = _check_output(args.ranking) if args.ranking else None
    campaign = _whole_campaign(args)
    if ranking is not None:
        write_table(campaign.ranking, ranking)
    path = report(campaign, output, rate_unit=args.rate_unit)
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
    parser.add_argument("-o", "--output", help="write the proposed layout, one row per well")


def _levels(text, option):
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise DataError(Problem(option, None, text,
                                "must be numbers separated by commas")) from None


def _design(args) -> int:
    from .design import plan_grid
    from .io import write_table

    output = _check_output(args.output) if args.output else None
    plan = plan_grid(km_range=tuple(args.km_range), ki_range=tuple(args.ki_range),
                     n_wells=args.wells, substrate_choices=_levels(args.substrate, "--substrate"),
                     inhibitor_choices=_levels(args.inhibitor, "--inhibitor"), cv=args.cv,
                     floor_sd=args.floor_sd, replicates=args.replicates,
                     n_simulations=args.simulations, seed=args.seed)
    if output is not None:
        write_table(plan.layout(), output)
    if not args.quiet:
        print(plan.summary())
    return EXIT_OK


def _simulate_arguments(parser):
    parser.add_argument("-o", "--output", required=True, help="simulated grid table")
    parser.add_argument("--compounds", type=int, default=20, help="number of compounds")
    parser.add_argument("--seed", type=int, required=True, help="random seed")
    parser.add_argument("--cv", type=float, default=0.05, help="coefficient of variation")
    parser.add_argument("--truth", help="also write the true mechanisms and Ki")


def _simulate(args) -> int:
    from .batch import simulate_campaign
    from .io import write_table

    output = _check_output(args.output)
    truth_path = _check_output(args.truth) if args.truth else None
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
    parser.add_argument("--substrate-conc", type=float,
                        help="assay substrate concentration, for KI = KI,app/(1 + S/Km)")
    parser.add_argument("--km", type=float, help="Km in the substrate's unit")
    parser.add_argument("--level", type=float, default=0.95)


def _inactivation(args) -> int:
    import pandas as pd

    from .io import read_table, write_table
    from .time_dependent import fit_time_dependent

    output = _check_output(args.output)
    kobs_path = _check_output(args.kobs) if args.kobs else None
    for option, path in (("--output", output), ("--kobs", kobs_path)):
        if path is not None and path.resolve() == Path(args.reads).resolve():
            raise DataError(Problem(option, None, str(path), "would overwrite the input reads"))
    reads = read_table(args.reads)
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
                                     substrate=args.substrate_conc, km=args.km,
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

    print(run_demo(args.out))
    return EXIT_OK


SUBCOMMANDS = [
    Subcommand(
        "rates", "initial rates from kinetic reads and a plate map",
        "inhibkin rates reads.csv --plate-map plate_map.csv --time-unit min "
        "--chromophore NADH --direction decrease -o rates.csv\n"
        "  inhibkin rates data_demo/invented_moa_reads.csv --plate-map "
        "data_demo/invented_moa_plate_map.csv --signal product_uM --rate-time-unit min "
        "-o rates.csv",
        _rates_arguments, _rates, parallel=False),
    Subcommand(
        "mechanism", "fit every mechanism to each compound's substrate × inhibitor grid",
        "inhibkin mechanism rates.csv --weighting relative -o mechanisms.csv "
        "--params parameters.csv --workers 2",
        _mechanism_arguments, _mechanism),
    Subcommand(
        "potency", "IC50, Hill slope and Ki from dose-response plates",
        "inhibkin potency plates.csv --km 20uM -o potency.csv",
        _potency_arguments, _potency),
    Subcommand(
        "rank", "the whole campaign: grids and dose-response curves, ranked by pKi",
        "inhibkin simulate --compounds 50 --seed 1 -o grid.csv\n"
        "  inhibkin rank --grid grid.csv --weighting relative -o ranking.csv --workers 2\n"
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
        "--inhibitor 0.001,0.003,0.009,0.027,0.081,0.243,0.729,2.187 -o layout.csv",
        _design_arguments, _design, parallel=False),
    Subcommand(
        "inactivation", "kobs per well, one-step or two-step, kinact, KI and kinact/KI",
        "inhibkin inactivation reads.csv --substrate-conc 100 --km 10 -o constants.csv "
        "--kobs kobs.csv",
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
        return args.handler(args)
    except InhibkinError as err:
        print(f"inhibkin {args.command}: {err}", file=sys.stderr)
        return EXIT_UNUSABLE_INPUT


if __name__ == "__main__":
    sys.exit(main())
