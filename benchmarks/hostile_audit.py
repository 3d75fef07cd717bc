"""Hostile-input audit of the reading and writing edges (CLI and Python API).

Runs a fixed list of hostile cases (IDs pandas would coerce, duplicate headers, outputs
over inputs, bad options, formula-like IDs, well labels, broken controls, misleading
files) and sorts each outcome into one of:

correct
    the run gave the right answer (every compound once, under its exact input text);
clear error
    the input deserves refusal and got an InhibkinError (exit 2) naming the problem;
unclear error
    the input deserves refusal, but the message misleads or misses what it must name
    (the file's line, the separator, what the path is);
refused wrongly
    a usable input was refused with an InhibkinError;
silent wrong
    the run finished (exit 0/1) with a wrong answer, or accepted what it should refuse;
traceback
    an exception that is not an InhibkinError (a raw traceback on the command line);
lost
    an input file was overwritten, or an output table misses an input compound;
skipped
    the case cannot be staged here (e.g. a read-only directory when running as root).

Run ``python -m benchmarks.hostile_audit`` (about a minute); ``--list`` prints each case.
"""

from __future__ import annotations

import contextlib
import io
import os
import sys
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

import inhibkin as ik
from inhibkin import cli
from inhibkin.campaign import fit_campaign
from inhibkin.errors import InhibkinError
from inhibkin.inputs.io import read_table
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign

OUTCOMES = ("correct", "clear error", "unclear error", "refused wrongly", "silent wrong",
            "traceback", "lost", "skipped")
CASES = []


def case(expect):
    """Register a case; ``expect`` is "result" (should work) or "error" (should refuse)."""
    def register(function):
        CASES.append((function.__name__, expect, function))
        return function
    return register


class Wrong(Exception):
    """The run finished, but its answer is wrong."""


class Lost(Exception):
    """An input was overwritten or a compound is missing from an output."""


class Unclear(Exception):
    """Refused, but the message misleads."""


class Skip(Exception):
    """The case cannot be staged on this machine."""


def _grid(names, seed=3):
    """A small grid table: the compounds of a simulated campaign renamed to ``names``."""
    table, _ = simulate_campaign(len(names), seed=seed)
    mapping = dict(zip(pd.unique(table["compound"]), names))
    table["compound"] = table["compound"].map(mapping)
    return table


def _write_csv(path, table):
    table.to_csv(path, index=False)
    return path


def _cli(*argv):
    """Run the CLI in-process: (exit status, stderr)."""
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        try:
            status = cli.main(list(argv) + ["--quiet"])
        except SystemExit as exc:  # argparse refusals
            status = exc.code
    return status, err.getvalue()


def _expect_compounds(ranking, names):
    got = list(ranking["compound"].astype(object))
    if sorted(map(str, got)) != sorted(names) or any(not isinstance(g, str) for g in got):
        missing = set(names) - set(map(str, got))
        if missing:
            raise Lost(f"missing {sorted(missing)}; got {got}")
        raise Wrong(f"compounds {got}, expected {names}")


def _rank_ids(tmp, names):
    path = _write_csv(tmp / "grid.csv", _grid(names))
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv"),
                       "--engine", "lmfit")
    if status == 2:
        raise InhibkinError(err)
    out = pd.read_csv(tmp / "out.csv", dtype=str, keep_default_na=False)
    _expect_compounds(out, names)


# ---------------------------------------------------------------- item 1: IDs coerced

@case("result")
def ids_numeric_spellings(tmp):
    _rank_ids(tmp, ["1", "1.0", "1e0"])


@case("result")
def ids_booleans(tmp):
    _rank_ids(tmp, ["True", "TRUE", "true"])


@case("result")
def ids_leading_zeros(tmp):
    _rank_ids(tmp, ["007", "010"])


@case("result")
def ids_integers_kept(tmp):
    _rank_ids(tmp, ["2", "3"])


@case("result")
def ids_whitespace_variants(tmp):
    _rank_ids(tmp, ["A", "A ", " A"])


# ---------------------------------------------------------------- item 2: NA words, lines

@case("result")
def ids_na_words(tmp):
    _rank_ids(tmp, ["NA", "None", "null"])


@case("result")
def ids_nan_and_hash_na(tmp):
    _rank_ids(tmp, ["nan", "#N/A"])


@case("error")
def empty_id_names_file_line(tmp):
    table = _grid(["A", "B"])
    table.loc[5, "compound"] = np.nan
    path = _write_csv(tmp / "grid.csv", table)
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv"))
    if status != 2:
        raise Wrong(f"exit {status}")
    if "line 7" not in err:
        raise Unclear(f"message does not give line 7: {err.strip()}")
    raise InhibkinError(err)


@case("error")
def bad_number_names_file_line(tmp):
    table = _grid(["A", "B"]).astype({"rate": object})
    table.loc[3, "rate"] = "fast"
    path = _write_csv(tmp / "grid.csv", table)
    status, err = _cli("mechanism", str(path), "-o", str(tmp / "out.csv"), "--engine", "lmfit")
    if status == 2:
        raise (InhibkinError if "line 5" in err else Unclear)(err)
    reason = pd.read_csv(tmp / "out.csv").set_index("compound")["reason"]["A"]
    if "line 5" not in str(reason):
        raise Unclear(f"exit {status}, the reason does not give line 5: {reason}")
    raise InhibkinError(reason)


# ---------------------------------------------------------------- item 3: duplicate headers

@case("error")
def duplicate_rate_header(tmp):
    path = tmp / "grid.csv"
    table = _grid(["A", "B"])
    table["rate_b"] = table["rate"] * 3
    path.write_text(table.to_csv(index=False).replace(",rate_b", ",rate", 1))
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv"))
    if status != 2:
        raise Wrong(f"exit {status}: two 'rate' columns accepted")
    raise InhibkinError(err)


@case("error")
def duplicate_compound_header(tmp):
    path = tmp / "grid.csv"
    table = _grid(["A", "B", "C", "D"])
    text = table[["compound", "compound", "substrate_uM", "inhibitor_nM", "rate"]].copy()
    text.columns = ["compound", "compound2", "substrate_uM", "inhibitor_nM", "rate"]
    text["compound2"] = table["compound"].map({"A": "A", "B": "A", "C": "C", "D": "C"})
    raw = text.to_csv(index=False).replace("compound,compound2", "compound,compound", 1)
    path.write_text(raw)
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv"))
    if status != 2:
        raise Wrong(f"exit {status}: duplicate header accepted")
    raise InhibkinError(err)


@case("error")
def duplicate_header_after_strip(tmp):
    path = tmp / "grid.csv"
    table = _grid(["A", "B"])
    table["rate2"] = table["rate"] * 2
    path.write_text(table.to_csv(index=False).replace(",rate2", ", rate", 1))
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv"))
    if status != 2:
        raise Wrong(f"exit {status}: near-duplicate header accepted")
    raise InhibkinError(err)


@case("error")
def duplicate_columns_in_python(tmp):
    table = _grid(["A", "B"])
    table = pd.concat([table, table[["rate"]] * 2], axis=1)
    campaign = fit_campaign(table, quiet=True, engine="lmfit")
    raise Wrong(f"accepted two 'rate' columns ({len(campaign.ranking)} rows)")


# ---------------------------------------------------------------- item 4: output over input

def _unchanged(path, before):
    if path.read_bytes() != before:
        raise Lost(f"{path.name} was overwritten")


@case("error")
def output_is_the_grid(tmp):
    path = _write_csv(tmp / "precious.csv", _grid(["A", "B"]))
    before = path.read_bytes()
    status, err = _cli("rank", "--grid", str(path), "-o", str(path))
    _unchanged(path, before)
    if status != 2:
        raise Wrong(f"exit {status}")
    raise InhibkinError(err)


@case("error")
def output_is_the_grid_other_spelling(tmp):
    path = _write_csv(tmp / "precious.csv", _grid(["A", "B"]))
    before = path.read_bytes()
    (tmp / "sub").mkdir()
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "sub" / ".." / "precious.csv"))
    _unchanged(path, before)
    if status != 2:
        raise Wrong(f"exit {status}")
    raise InhibkinError(err)


@case("error")
def output_is_a_symlink_to_the_grid(tmp):
    path = _write_csv(tmp / "precious.csv", _grid(["A", "B"]))
    before = path.read_bytes()
    link = tmp / "link.csv"
    link.symlink_to(path)
    status, err = _cli("rank", "--grid", str(path), "-o", str(link))
    _unchanged(path, before)
    if status != 2:
        raise Wrong(f"exit {status}")
    raise InhibkinError(err)


@case("error")
def params_equals_output(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    status, err = _cli("mechanism", str(path), "-o", str(tmp / "m.csv"), "--params",
                       str(tmp / "m.csv"))
    if status != 2:
        raise Lost("one of the two tables written to m.csv is lost")
    raise InhibkinError(err)


@case("error")
def rates_output_is_plate_map(tmp):
    reads, plate_map = _rates_inputs()
    r = _write_csv(tmp / "reads.csv", reads)
    m = _write_csv(tmp / "map.csv", plate_map)
    before = m.read_bytes()
    status, err = _cli("rates", str(r), "--plate-map", str(m), "-o", str(m))
    _unchanged(m, before)
    if status != 2:
        raise Wrong(f"exit {status}")
    raise InhibkinError(err)


@case("error")
def report_ranking_is_the_grid(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    before = path.read_bytes()
    status, err = _cli("report", "--grid", str(path), "-o", str(tmp / "r.html"), "--ranking",
                       str(path), "--intervals", "wald")
    _unchanged(path, before)
    if status != 2:
        raise Wrong(f"exit {status}")
    raise InhibkinError(err)


# ---------------------------------------------------------------- item 5: output problems

def _expect_exit_2_before_work(status, err):
    if status != 2:
        raise Wrong(f"exit {status}")
    if "Traceback" in err or err.strip().count("\n") > 2:
        raise Wrong(f"not one line: {err!r}")
    raise InhibkinError(err)


@case("error")
def output_is_a_directory(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    (tmp / "out.csv").mkdir()
    _expect_exit_2_before_work(*_cli("rank", "--grid", str(path), "-o", str(tmp / "out.csv")))


@case("error")
def report_output_is_a_directory(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    (tmp / "r.html").mkdir()
    _expect_exit_2_before_work(*_cli("report", "--grid", str(path), "-o", str(tmp / "r.html"),
                                     "--intervals", "wald"))


@case("error")
def output_directory_read_only(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    locked = tmp / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        if os.access(locked, os.W_OK):  # running as root: the case cannot be staged
            raise Skip("the directory stays writable for this user (root)")
        _expect_exit_2_before_work(*_cli("rank", "--grid", str(path), "-o",
                                         str(locked / "out.csv")))
    finally:
        locked.chmod(0o700)


@case("error")
def scheduler_not_a_url(tmp):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    _expect_exit_2_before_work(*_cli("rank", "--grid", str(path), "-o", str(tmp / "o.csv"),
                                     "--scheduler", "notaurl"))


# ---------------------------------------------------------------- item 6: option ranges

def _level(tmp, level):
    path = _write_csv(tmp / "grid.csv", _grid(["A", "B"]))
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "o.csv"), "--level", level,
                       "--engine", "lmfit")
    if status == 2:
        raise InhibkinError(err)
    raise Wrong(f"--level {level} accepted (exit {status})")


@case("error")
def level_as_percent(tmp):
    _level(tmp, "95")


@case("error")
def level_nan(tmp):
    _level(tmp, "nan")


@case("error")
def level_above_one(tmp):
    _level(tmp, "1.5")


@case("error")
def level_zero(tmp):
    _level(tmp, "0")


def _km(tmp, km):
    plates, _ = simulate_dose_campaign(2, seed=1)
    path = _write_csv(tmp / "plates.csv", plates)
    status, err = _cli("potency", str(path), "-o", str(tmp / "o.csv"), "--km", km)
    if status == 2:
        raise InhibkinError(err)
    raise Wrong(f"--km {km} not refused (exit {status})")


@case("error")
def km_zero(tmp):
    _km(tmp, "0uM")


@case("error")
def km_overflow(tmp):
    _km(tmp, "1e999uM")


@case("error")
def km_true_in_python(tmp):
    plates, _ = simulate_dose_campaign(2, seed=1)
    fit_campaign(dose_response=plates, km=True, quiet=True)
    raise Wrong("km=True accepted")


@case("error")
def level_in_python(tmp):
    fit_campaign(_grid(["A", "B"]), level=95, quiet=True, engine="lmfit")
    raise Wrong("level=95 accepted")


# ---------------------------------------------------------------- item 7: formulas

FORMULAS = ["=cmd|' /C calc'!A0", '=HYPERLINK("http://x","y")', "+1+1", "-2+3", "@SUM(A1)",
            "\tTAB", "\rCR"]


@case("result")
def formula_ids_neutralised(tmp):
    table = _grid(FORMULAS)
    campaign = fit_campaign(table, quiet=True, engine="lmfit")
    ik.write_table(campaign.ranking, tmp / "o.csv")
    out = pd.read_csv(tmp / "o.csv", dtype=str, keep_default_na=False)
    live = [c for c in out["compound"] if c[:1] in ("=", "+", "-", "@", "\t", "\r")]
    if live:
        raise Wrong(f"cells a spreadsheet would run: {live}")
    if len(out) != len(FORMULAS):
        raise Lost(f"{len(out)} rows for {len(FORMULAS)} compounds")


@case("result")
def negative_numbers_stay_numbers(tmp):
    frame = pd.DataFrame({"compound": ["A"], "pki": [-1.5], "note": ["-2"]})
    ik.write_table(frame, tmp / "o.csv")
    out = pd.read_csv(tmp / "o.csv")
    if out["pki"].iloc[0] != -1.5 or str(out["note"].iloc[0]) != "-2":
        raise Wrong(f"numbers changed: {out.to_dict('records')}")


# ---------------------------------------------------------------- item 8: wells

def _rates_inputs(wells=("A1", "A2"), plate_reads=1, plate_map=1, map_wells=None):
    t = np.arange(0.0, 300.0, 30.0)
    reads = pd.concat([pd.DataFrame({"plate": plate_reads, "well": w, "time": t,
                                     "signal": 0.1 + (k + 1) * 1e-3 * t})
                       for k, w in enumerate(wells)], ignore_index=True)
    map_wells = list(map_wells or dict.fromkeys(wells))
    plate_map = pd.DataFrame({"plate": plate_map, "well": map_wells,
                              "compound": "X", "substrate_uM": 10.0, "inhibitor_nM": 0.0})
    return reads, plate_map


def _rates_cli(tmp, reads, plate_map):
    r = _write_csv(tmp / "reads.csv", reads)
    m = _write_csv(tmp / "map.csv", plate_map)
    status, err = _cli("rates", str(r), "--plate-map", str(m), "-o", str(tmp / "rates.csv"))
    if status == 2:
        raise InhibkinError(err)
    return pd.read_csv(tmp / "rates.csv", dtype={"plate": str, "well": str})


@case("error")
def reads_wells_differ_by_space(tmp):
    reads, plate_map = _rates_inputs(wells=("A1", " A1"), map_wells=["A1"])
    out = _rates_cli(tmp, reads, plate_map)
    raise Wrong(f"two curves pooled into one well: {out[['well', 'rate']].to_dict('records')}")


@case("error")
def map_wells_differ_by_space(tmp):
    reads, plate_map = _rates_inputs(wells=("A1",), map_wells=["A1", "A1 "])
    _rates_cli(tmp, reads, plate_map)
    raise Wrong("duplicate wells of the plate map accepted")


@case("result")
def well_a01_matches_a1(tmp):
    reads, plate_map = _rates_inputs(wells=("A01", "B02"), map_wells=["A1", "B2"])
    out = _rates_cli(tmp, reads, plate_map)
    if len(out) != 2 or (out["status"] == "failed").any():
        raise Wrong(f"A01 not matched to A1: {out[['well', 'status']].to_dict('records')}")


@case("error")
def plate_with_control_character(tmp):
    reads, plate_map = _rates_inputs()
    reads["plate"] = "P\x1f1"
    plate_map["plate"] = "P\x1f1"
    _rates_cli(tmp, reads, plate_map)
    raise Wrong("a plate with a control character accepted silently")


@case("error")
def plate_1_0_against_1(tmp):
    reads, plate_map = _rates_inputs(plate_reads="1.0", plate_map="1")
    out = _rates_cli(tmp, reads, plate_map)
    raise Wrong(f"no plate matched, no cause named: {out['status'].tolist()}")


@case("result")
def upper_case_roles_in_plates(tmp):
    plates, _ = simulate_dose_campaign(2, seed=1)
    plates["role"] = plates["role"].str.upper()
    campaign = fit_campaign(dose_response=plates, km="20uM", quiet=True)
    _expect_compounds(campaign.ranking, ["DR-1", "DR-2"])


@case("result")
def upper_case_roles_in_plate_map(tmp):
    reads, plate_map = _rates_inputs()
    plate_map["role"] = "SAMPLE"
    out = _rates_cli(tmp, reads, plate_map)
    if len(out) != 2:
        raise Wrong(f"{len(out)} wells")


# ---------------------------------------------------------------- item 9: internals

@case("result")
def dose_table_with_duplicate_index(tmp):
    plates, _ = simulate_dose_campaign(2, seed=1)
    replicate = plates.assign(plate=plates["plate"] + "b")  # the same compounds, again
    table = pd.concat([plates, replicate])  # no ignore_index: every label twice
    campaign = fit_campaign(dose_response=table, km="20uM", quiet=True, engine="lmfit")
    failed = campaign.ranking[campaign.ranking["status"] == "failed"]
    if len(failed):
        raise Wrong(f"failed: {failed['reason'].tolist()}")


@case("result")
def grid_table_with_duplicate_index(tmp):
    table = _grid(["A", "B"])
    table.index = np.zeros(len(table), dtype=int)
    campaign = fit_campaign(table, quiet=True, engine="lmfit")
    if (campaign.ranking["status"] == "failed").any():
        raise Wrong(f"failed: {campaign.ranking['reason'].tolist()}")


@case("result")
def unusable_controls_flag_text(tmp):
    plates, _ = simulate_dose_campaign(2, seed=1)
    one_min = plates.index[plates["role"] == "min"][1:]
    plates = plates.drop(index=one_min)  # one 'min' control well left: unusable plate
    with warnings.catch_warnings():
        # As in a fresh process, where the first occurrence of a warning is shown.
        warnings.simplefilter("always")
        campaign = fit_campaign(dose_response=plates, km="20uM", quiet=True)
    text = " ".join(campaign.ranking["flags"].astype(str)) + " ".join(
        campaign.ranking["reason"].astype(str))
    if any(word in text for word in ("Warning", "deprecated", "future version")):
        raise Wrong(f"a library warning leaked into the table: {text[:200]}")
    _expect_compounds(campaign.ranking, ["DR-1", "DR-2"])


@case("error")
def z_prime_text_values(tmp):
    ik.z_prime(["a", "b"], [1.0, 2.0])
    raise Wrong("text accepted")


@case("error")
def z_prime_one_control(tmp):
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        value = ik.z_prime([1.0], [0.0, 0.1])
    raise Wrong(f"one control well gave {value}")


@case("result")
def zero_spread_controls_flagged(tmp):
    plates, _ = simulate_dose_campaign(2, seed=1)
    controls = plates["role"] != "sample"
    plates.loc[controls, "signal"] = plates.loc[controls, "role"].map({"max": 1000.0,
                                                                       "min": 50.0})
    campaign = fit_campaign(dose_response=plates, km="20uM", quiet=True)
    qc = campaign.plates
    flags = " ".join(campaign.ranking["flags"].astype(str))
    if not qc["flagged"].all() or "spread" not in flags:
        raise Wrong(f"Z' {qc['z_prime'].tolist()} on identical controls; flags: {flags!r}")


# ---------------------------------------------------------------- item 10: messages

@case("error")
def semicolon_file(tmp):
    path = tmp / "grid.csv"
    path.write_text("compound;substrate_uM;inhibitor_nM;rate\nA;1,5;0;2,5\nA;3;0;4,1\n")
    status, err = _cli("rank", "--grid", str(path), "-o", str(tmp / "o.csv"))
    if "semicolon" not in err and "';'" not in err:
        raise Unclear(f"exit {status}; separator not named: {err.strip()[:200]}")
    raise InhibkinError(err)


@case("error")
def directory_as_input(tmp):
    (tmp / "grid.csv").mkdir()
    status, err = _cli("rank", "--grid", str(tmp / "grid.csv"), "-o", str(tmp / "o.csv"))
    if "directory" not in err:
        raise Unclear(f"exit {status}; says {err.strip()[:200]}")
    raise InhibkinError(err)


@case("error")
def fifo_as_input(tmp):
    os.mkfifo(tmp / "grid.csv")
    status, err = _cli("rank", "--grid", str(tmp / "grid.csv"), "-o", str(tmp / "o.csv"))
    if "regular file" not in err and "FIFO" not in err and "pipe" not in err:
        raise Unclear(f"exit {status}; says {err.strip()[:200]}")
    raise InhibkinError(err)


@case("result")
def round_trip_of_ids(tmp):
    names = ["007", "1", "1.0", "NA", "True", "=1+1", "A B"]
    frame = pd.DataFrame({"compound": names, "x": range(len(names))})
    ik.write_table(frame, tmp / "t.csv")
    back = read_table(tmp / "t.csv")
    if list(back["compound"]) != [n if not n.startswith("=") else "'" + n for n in names]:
        raise Wrong(f"{list(back['compound'])}")


def run_case(function, expect):
    """The outcome of one case and a short note."""
    with tempfile.TemporaryDirectory() as directory:
        tmp = Path(directory)
        try:
            # Warnings keep the interpreter's filters: inhibkin records some of them in
            # its tables, and silencing them here would hide exactly that.
            function(tmp)
        except Lost as err:
            return "lost", str(err)
        except Skip as err:
            return "skipped", str(err)
        except Unclear as err:
            return "unclear error", str(err)
        except Wrong as err:
            return "silent wrong", str(err)
        except InhibkinError as err:
            return ("clear error" if expect == "error" else "refused wrongly"), str(err)
        except Exception as err:  # the audit's whole point: anything else is a traceback
            return "traceback", f"{type(err).__name__}: {err}"
    return ("correct" if expect == "result" else "silent wrong"), ""


def main(argv=None) -> str:
    argv = sys.argv[1:] if argv is None else argv
    counts = dict.fromkeys(OUTCOMES, 0)
    lines = []
    for name, expect, function in CASES:
        outcome, note = run_case(function, expect)
        counts[outcome] += 1
        lines.append(f"{outcome:>15}  {name}: {note.strip().splitlines()[0][:110] if note else ''}")
    summary = (f"{len(CASES)} hostile cases: "
               + ", ".join(f"{counts[o]} {o}" for o in OUTCOMES))
    return "\n".join((lines if "--list" in argv else []) + [summary])


if __name__ == "__main__":
    print(main())
