"""The input and output edges under hostile files: nothing lost, merged or overwritten.

One section per item of the hostile-input audit (benchmarks/hostile_audit.py). Most
tests stop before any fit (the checks run first) or use a grid fitter that refuses
every compound, so that what is tested — which compounds come out, under which text —
costs no fitting time.
"""

import contextlib
import io
import os
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import inhibkin.inputs.io as inhibkin_io
from inhibkin.campaign import fit_campaign
from inhibkin.cli import main
from inhibkin.errors import DataError, FitError
from inhibkin.inputs.io import LINE_INDEX, read_table, write_table
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.rates.initial import initial_rates
from inhibkin.rates.plates import ZERO_SPREAD, plate_qc, z_prime
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign
from inhibkin.validate import OPTION_LIMITS, check_options

# Text pandas would turn into numbers, booleans or missing values if it guessed types.
COERCIBLE_IDS = ["1", "1.0", "1e0", "01", "007", "True", "TRUE", "true", "NA", "None",
                 "null", "nan", "#N/A", "N/A", "-0", "A1 ", " A1", "inf"]
PROPERTY = settings(max_examples=25, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])


def refuse_every_grid(df, **options):
    """A grid fitter that fails each compound at once: the campaign's bookkeeping alone."""
    raise FitError("not fitted in this test")


def grid(names, seed=3):
    """A small simulated grid table whose compounds are renamed ``names``."""
    table, _ = simulate_campaign(len(names), seed=seed)
    table["compound"] = table["compound"].map(dict(zip(pd.unique(table["compound"]), names)))
    return table


def cli(*argv):
    """Run the command line in this process: (exit status, stderr)."""
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        status = main([str(a) for a in argv] + ["--quiet"])
    return status, err.getvalue()


def as_text(path):
    """A CSV file as exact text cells, nothing converted."""
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def rates(reads, plate_map):
    return initial_rates(reads, plate_map, substrate="substrate_uM", inhibitor="inhibitor_nM")


def rates_inputs(wells=("A1", "A2"), map_wells=None, plate_reads=1, plate_map=1):
    """Straight progress curves (one per well) and their plate map."""
    t = np.arange(0.0, 300.0, 30.0)
    reads = pd.concat([pd.DataFrame({"plate": plate_reads, "well": w, "time": t,
                                     "signal": 0.1 + (k + 1) * 1e-3 * t})
                       for k, w in enumerate(wells)], ignore_index=True)
    plate_map = pd.DataFrame({"plate": plate_map, "well": list(map_wells or wells),
                              "compound": "X", "substrate_uM": 10.0, "inhibitor_nM": 0.0})
    return reads, plate_map


# ------------------------------------------------- 1. IDs are text, written back as given

def test_ids_plates_and_wells_are_read_as_the_files_text(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("compound,plate,well,rate\n1,01,A01,1.5\n1.0,1,A1,2\n1e0,1.0,a1,3\n"
                    "007,P,B2,4\n")
    table = read_table(path)
    assert list(table["compound"]) == ["1", "1.0", "1e0", "007"]
    assert list(table["plate"]) == ["01", "1", "1.0", "P"]
    assert list(table["well"]) == ["A01", "A1", "a1", "B2"]
    assert table["rate"].dtype == float


def test_text_columns_option_covers_a_compound_column_of_another_name(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("id,rate\n007,1\n7,2\n")
    assert list(read_table(path, text_columns=["id"])["id"]) == ["007", "7"]


def test_coercible_ids_stay_separate_compounds_in_the_ranking(tmp_path):
    path = tmp_path / "grid.csv"
    grid(COERCIBLE_IDS).to_csv(path, index=False)
    campaign = fit_campaign(read_table(path), engine=refuse_every_grid, quiet=True)
    assert sorted(campaign.ranking["compound"]) == sorted(COERCIBLE_IDS)
    write_table(campaign.ranking, tmp_path / "out.csv")
    assert sorted(as_text(tmp_path / "out.csv")["compound"]) == sorted(COERCIBLE_IDS)


def test_cli_rank_keeps_1_and_1_0_and_1e0_apart(tmp_path):
    """The issue's case end to end: three compounds in, three out, under their text."""
    names = ["1", "1.0", "1e0"]
    grid(names).to_csv(tmp_path / "grid.csv", index=False)
    status, err = cli("rank", "--grid", tmp_path / "grid.csv", "-o", tmp_path / "out.csv",
                      "--engine", "lmfit")
    assert status == 0, err
    out = as_text(tmp_path / "out.csv")
    assert sorted(out["compound"]) == names
    assert (out["status"] == "determined").all()


# ------------------------------------------------- 2. NA words are IDs; lines, not labels

def test_na_words_are_ids_and_only_an_empty_cell_is_missing(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("compound,rate\nNA,1\nNone,NA\nnull,\n#N/A,2\nnan,3\n,4\n")
    table = read_table(path)
    assert list(table["compound"].iloc[:5]) == ["NA", "None", "null", "#N/A", "nan"]
    assert pd.isna(table["compound"].iloc[5])
    # Number columns keep the usual missing-value words.
    assert table["rate"].isna().tolist() == [False, True, True, False, False, False]


def test_a_row_without_a_compound_is_named_by_its_line(tmp_path):
    table = grid(["A", "B"])
    table.loc[5, "compound"] = np.nan  # the 6th row: line 7 of the file
    table.to_csv(tmp_path / "grid.csv", index=False)
    status, err = cli("rank", "--grid", tmp_path / "grid.csv", "-o", tmp_path / "o.csv")
    assert status == 2
    assert "column 'compound', line 7: row has no compound" in err


def test_a_bad_number_is_named_by_its_line(tmp_path):
    table = grid(["A", "B"]).astype({"rate": object})
    table.loc[3, "rate"] = "fast"  # line 5
    table.to_csv(tmp_path / "grid.csv", index=False)
    read = read_table(tmp_path / "grid.csv")
    assert read.index.name == LINE_INDEX and read.index[0] == 2
    with pytest.raises(DataError, match=r"column 'rate', line 5 \(value 'fast'\): not a number"):
        fit_mechanisms(read[read["compound"] == "A"], substrate="substrate_uM",
                       inhibitor="inhibitor_nM")


def test_a_frame_built_in_python_keeps_row_labels():
    table = grid(["A"]).astype({"rate": object})
    table.loc[3, "rate"] = "fast"
    with pytest.raises(DataError, match=r"row 3 \(value 'fast'\)"):
        fit_mechanisms(table, substrate="substrate_uM", inhibitor="inhibitor_nM")


# ------------------------------------------------- 3. duplicate headers refused

@pytest.mark.parametrize("header", ["compound,compound,substrate_uM,inhibitor_nM,rate",
                                    "compound,substrate_uM,inhibitor_nM,rate,rate",
                                    "compound,substrate_uM,inhibitor_nM,rate, rate"])
def test_a_header_naming_a_column_twice_is_refused(tmp_path, header):
    path = tmp_path / "grid.csv"
    path.write_text(header + "\nA,1,0,2,3\n")
    fields = [name.strip() for name in header.split(",")]
    twice = [n for n in ("compound", "rate") if fields.count(n) == 2][0]
    with pytest.raises(DataError, match=rf"line 1: the header names column '{twice}' twice"):
        read_table(path)


def test_a_frame_with_two_columns_of_one_name_is_refused():
    table = grid(["A", "B"])
    table = pd.concat([table, table[["rate"]] * 2], axis=1)
    with pytest.raises(DataError, match="column 'rate': the table has two columns"):
        fit_campaign(table, quiet=True)


# ------------------------------------------------- 4. no output over an input

@pytest.fixture
def precious(tmp_path):
    path = tmp_path / "precious.csv"
    grid(["A", "B"]).to_csv(path, index=False)
    return path


def _same_file_spellings(path):
    folder = path.parent
    (folder / "sub").mkdir()
    (folder / "link.csv").symlink_to(path)
    os.link(path, folder / "hard.csv")
    return [path, folder / "sub" / ".." / path.name, folder / "link.csv", folder / "hard.csv"]


def test_no_spelling_of_the_input_can_be_the_output(precious):
    before = precious.read_bytes()
    for spelling in _same_file_spellings(precious):
        status, err = cli("rank", "--grid", precious, "-o", spelling)
        assert status == 2, spelling
        assert "is the same file as --grid" in err
    assert precious.read_bytes() == before


@pytest.mark.parametrize("stage", ["mechanism", "report", "rates", "simulate"])
def test_two_outputs_or_an_output_and_an_input_may_not_share_a_file(tmp_path, precious, stage):
    reads, plate_map = rates_inputs()
    reads.to_csv(tmp_path / "reads.csv", index=False)
    plate_map.to_csv(tmp_path / "map.csv", index=False)
    argv = {"mechanism": ["mechanism", precious, "-o", tmp_path / "m.csv", "--params",
                          tmp_path / "m.csv"],
            "report": ["report", "--grid", precious, "-o", tmp_path / "r.html", "--ranking",
                       precious],
            "rates": ["rates", tmp_path / "reads.csv", "--plate-map", tmp_path / "map.csv",
                      "-o", tmp_path / "map.csv"],
            "simulate": ["simulate", "--seed", 1, "-o", tmp_path / "s.csv", "--truth",
                         tmp_path / "s.csv"]}[stage]
    before = {p: p.read_bytes() for p in (precious, tmp_path / "map.csv")}
    status, err = cli(*argv)
    assert status == 2
    assert "is the same file as" in err
    assert not (tmp_path / "m.csv").exists() and not (tmp_path / "s.csv").exists()
    assert all(p.read_bytes() == b for p, b in before.items())


# ------------------------------------------------- 5. output problems before the work

def _one_line(err):
    return err.strip().count("\n") == 0 and "Traceback" not in err


@pytest.mark.parametrize("stage", ["rank", "report"])
def test_an_output_that_is_a_directory_is_refused_before_fitting(precious, tmp_path, stage):
    target = tmp_path / ("out.csv" if stage == "rank" else "out.html")
    target.mkdir()
    status, err = cli(stage, "--grid", precious, "-o", target)
    assert status == 2 and _one_line(err)
    assert "is a directory" in err


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write in a read-only directory")
def test_a_read_only_directory_is_refused_before_fitting(precious, tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        status, err = cli("rank", "--grid", precious, "-o", locked / "out.csv")
    finally:
        locked.chmod(0o700)
    assert status == 2 and "not writable" in err


def test_a_scheduler_address_without_a_port_is_refused_before_fitting(precious, tmp_path):
    status, err = cli("rank", "--grid", precious, "-o", tmp_path / "o.csv", "--scheduler",
                      "notaurl")
    assert status == 2 and _one_line(err)
    assert "option '--scheduler'" in err and "host:port" in err


def test_a_failed_write_is_exit_2_with_one_line(tmp_path, monkeypatch):
    def disk_full(table, path):
        raise OSError(28, "No space left on device", str(path))

    monkeypatch.setattr(inhibkin_io, "write_table", disk_full)
    status, err = cli("simulate", "--compounds", 1, "--seed", 1, "-o", tmp_path / "s.csv")
    assert status == 2 and _one_line(err)
    assert "No space left on device" in err


# ------------------------------------------------- 6. options range-checked once

@pytest.mark.parametrize("level, hint", [("95", "looks like a percent: write 0.95"),
                                         ("1.5", "must be a number in \\(0, 1\\)"),
                                         ("nan", "must be a number in"),
                                         ("0", "must be a number in"),
                                         ("1", "must be a number in")])
def test_level_outside_0_1_is_refused_before_reading(tmp_path, level, hint):
    # The grid file does not exist: the option is refused before any file is read.
    status, err = cli("rank", "--grid", tmp_path / "absent.csv", "-o", tmp_path / "o.csv",
                      "--level", level)
    assert status == 2
    assert "option '--level'" in err
    assert re.search(hint, err)


@pytest.mark.parametrize("km", ["0uM", "1e999uM", "-5uM"])
def test_km_that_is_no_concentration_is_refused_with_exit_2(tmp_path, km):
    status, err = cli("potency", tmp_path / "absent.csv", "-o", tmp_path / "o.csv", f"--km={km}")
    assert status == 2
    assert "option '--km'" in err


def test_python_options_are_checked_by_the_same_limits():
    plates, _ = simulate_dose_campaign(1, seed=1)
    with pytest.raises(DataError, match="km must be a number .* got bool"):
        fit_campaign(dose_response=plates, km=True, quiet=True)
    with pytest.raises(DataError, match="level must be .*write 0.95"):
        fit_campaign(grid(["A"]), level=95, quiet=True)
    with pytest.raises(DataError, match="level must be"):
        fit_mechanisms(grid(["A"]), substrate="substrate_uM", inhibitor="inhibitor_nM",
                       level=float("nan"))
    with pytest.raises(DataError, match="km must be"):
        fit_campaign(dose_response=plates, km="0uM", quiet=True)


def test_check_options_lists_every_bad_option_at_once():
    with pytest.raises(DataError) as info:
        check_options({"level": 2.0, "alpha": -1.0, "km": None})
    assert len(info.value.problems) == 2
    check_options({name: None for name in OPTION_LIMITS})  # nothing given: nothing to check


# ------------------------------------------------- 7. formulas neutralised in CSV

FORMULAS = ["=cmd|' /C calc'!A0", '=HYPERLINK("http://x","y")', "+1+1", "-2+3", "@SUM(A1)",
            "\tTAB", "\rCR"]


def test_formula_cells_are_neutralised_and_numbers_stay_numbers(tmp_path):
    # OWASP "CSV Injection": prefix cells starting with = + - @ tab or CR.
    frame = pd.DataFrame({"compound": FORMULAS + ["-2", "+1.5e3", "A-1"],
                          "pki": np.arange(10.0) - 5})
    write_table(frame, tmp_path / "o.csv")
    back = as_text(tmp_path / "o.csv")
    assert list(back["compound"]) == ["'" + f for f in FORMULAS] + ["-2", "+1.5e3", "A-1"]
    assert read_table(tmp_path / "o.csv")["pki"].tolist() == (np.arange(10.0) - 5).tolist()


def test_parquet_outputs_keep_the_exact_text(tmp_path):
    pytest.importorskip("pyarrow")
    frame = pd.DataFrame({"compound": FORMULAS, "x": range(len(FORMULAS))})
    write_table(frame, tmp_path / "o.parquet")
    assert list(read_table(tmp_path / "o.parquet")["compound"]) == FORMULAS


def test_a_carriage_return_inside_a_cell_does_not_break_the_csv(tmp_path):
    frame = pd.DataFrame({"compound": ["a\rb", "c"], "x": [1.0, 2.0]})
    write_table(frame, tmp_path / "o.csv")
    back = read_table(tmp_path / "o.csv")
    assert list(back["compound"]) == ["a\rb", "c"] and list(back["x"]) == [1.0, 2.0]


# ------------------------------------------------- 8. wells: normalise, then check

def test_reads_of_a1_and_space_a1_are_one_well_read_twice():
    reads, plate_map = rates_inputs(wells=("A1", " A1"), map_wells=["A1", "A2"])
    with pytest.raises(DataError, match=r"duplicated \(plate, well, time\) after trimming"):
        rates(reads, plate_map)


def test_a_plate_map_with_a1_and_a1_space_is_refused():
    reads, plate_map = rates_inputs(wells=("A1", "A2"), map_wells=["A1", "A1 "])
    with pytest.raises(DataError, match=r"duplicated \(plate, well\)"):
        rates(reads, plate_map)


def test_a01_in_the_reads_matches_a1_in_the_plate_map():
    reads, plate_map = rates_inputs(wells=("A01", "b02"), map_wells=["A1", "B2"])
    result = rates(reads, plate_map)
    assert list(result.table["well"]) == ["A1", "B2"]  # the plate map's text
    assert (result.table["status"] != "failed").all()
    assert result.unmatched.empty


def test_a_label_with_a_control_character_is_refused():
    reads, plate_map = rates_inputs()
    reads["plate"] = "P\x1f1"
    plate_map["plate"] = "P\x1f1"
    with pytest.raises(DataError, match="control character"):
        rates(reads, plate_map)


def test_reads_that_match_no_well_name_both_plates():
    reads, plate_map = rates_inputs(plate_reads="1.0", plate_map="1")
    with pytest.raises(DataError, match=r"plates \['1.0'\].*plates \['1'\]"):
        rates(reads, plate_map)


# ------------------------------------------------- 9. internals stay inside

def test_a_dose_table_with_repeated_index_labels_fits_like_a_clean_one():
    plates, _ = simulate_dose_campaign(2, seed=1)
    again = plates.assign(plate=plates["plate"] + "b")  # a replicate plate
    messy = pd.concat([plates, again])  # index labels repeat
    ranking = fit_campaign(dose_response=messy, km="20uM", quiet=True).ranking
    clean = fit_campaign(dose_response=messy.reset_index(drop=True), km="20uM",
                         quiet=True).ranking
    pd.testing.assert_frame_equal(ranking, clean)
    assert (ranking["status"] != "failed").all()


def test_unusable_controls_fail_compounds_without_leaking_warnings():
    plates, _ = simulate_dose_campaign(2, seed=1)
    plates = plates.drop(index=plates.index[plates["role"] == "min"][1:])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ranking = fit_campaign(dose_response=plates, km="20uM", quiet=True).ranking
    assert (ranking["status"] == "failed").all()
    assert (ranking["flags"] == "").all()
    assert ranking["reason"].str.contains("1 'min' control wells").all()


def test_z_prime_refuses_text_and_single_wells():
    with pytest.raises(DataError, match="not a number"):
        z_prime(["a", "b"], [1.0, 2.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(DataError, match="at least 2"):
            z_prime([1.0], [0.0, 0.1])


def test_controls_without_spread_are_flagged_not_trusted():
    plates, _ = simulate_dose_campaign(2, seed=1)
    controls = plates["role"] != "sample"
    plates.loc[controls, "signal"] = plates.loc[controls, "role"].map({"max": 1000.0,
                                                                       "min": 50.0})
    qc = plate_qc(plates)
    assert qc.table["z_prime"].iloc[0] == 1.0  # Zhang et al. 1999: zero SDs give 1
    assert qc.flagged == qc.no_spread == ("P1",)
    ranking = fit_campaign(dose_response=plates, km="20uM", quiet=True).ranking
    assert ranking["flags"].str.contains(ZERO_SPREAD).all()
    assert not ranking["flags"].str.contains("low_z_prime").any()


# ------------------------------------------------- 10. messages that say what is wrong

def test_a_semicolon_file_is_named_as_such(tmp_path):
    path = tmp_path / "grid.csv"
    path.write_text("compound;substrate_uM;inhibitor_nM;rate\nA;1,5;0;2,5\n")
    with pytest.raises(DataError, match="separated by semicolons"):
        read_table(path)


def test_a_directory_or_a_pipe_is_not_called_missing(tmp_path):
    (tmp_path / "d.csv").mkdir()
    with pytest.raises(DataError, match="is a directory"):
        read_table(tmp_path / "d.csv")
    os.mkfifo(tmp_path / "p.csv")
    with pytest.raises(DataError, match=r"named pipe \(FIFO\)"):
        read_table(tmp_path / "p.csv")
    with pytest.raises(DataError, match="no such file"):
        read_table(tmp_path / "absent.csv")


def test_roles_follow_one_rule_in_plates_and_plate_maps():
    plates, _ = simulate_dose_campaign(2, seed=1)
    plates["role"] = " " + plates["role"].str.upper()
    ranking = fit_campaign(dose_response=plates, km="20uM", quiet=True).ranking
    assert (ranking["status"] != "failed").all()
    reads, plate_map = rates_inputs()
    plate_map["role"] = ["SAMPLE", "Sample "]
    assert len(rates(reads, plate_map).table) == 2


# ------------------------------------------------- generated: the invariant

ID_TEXT = st.one_of(st.sampled_from(COERCIBLE_IDS),
                    st.text(alphabet="0123456789.eE+-TtrueFalsNn/# ", min_size=1, max_size=6))


@PROPERTY
@given(names=st.lists(ID_TEXT, min_size=1, max_size=5, unique=True)
       .filter(lambda names: all(n.strip() for n in names)))
def test_every_compound_comes_out_once_under_its_exact_text(tmp_path, names):
    """Invariant: each input compound appears exactly once in every output, as written."""
    table = pd.concat([pd.DataFrame({"compound": name, "substrate_uM": [1.0, 2.0, 4.0],
                                     "inhibitor_nM": 0.0, "rate": [1.0, 2.0, 3.0]})
                       for name in names])
    table.to_csv(tmp_path / "grid.csv", index=False)
    campaign = fit_campaign(read_table(tmp_path / "grid.csv"), engine=refuse_every_grid,
                            quiet=True)
    write_table(campaign.ranking, tmp_path / "out.csv")
    # The CSV's only change: an apostrophe before a cell a spreadsheet would run.
    out = [cell[1:] if cell.startswith("'") else cell
           for cell in as_text(tmp_path / "out.csv")["compound"]]
    assert sorted(out) == sorted(names)
    assert sorted(campaign.ranking["compound"]) == sorted(names)


@PROPERTY
@given(index=st.lists(st.integers(-3, 3), min_size=12, max_size=12))
def test_any_index_labels_give_the_same_ranking(index):
    """Duplicate or unordered labels (a concat without ignore_index) change nothing."""
    table = pd.concat([pd.DataFrame({"compound": name, "substrate_uM": [1.0, 2.0, 4.0],
                                     "inhibitor_nM": 0.0, "rate": [1.0, 2.0, 3.0]})
                       for name in ("1", "1.0", "A", "NA")])
    table.index = index
    ranking = fit_campaign(table, engine=refuse_every_grid, quiet=True).ranking
    assert sorted(ranking["compound"]) == ["1", "1.0", "A", "NA"]


@PROPERTY
@given(names=st.lists(st.sampled_from(["compound", "rate", "substrate_uM", "inhibitor_nM"]),
                      min_size=2, max_size=6),
       spaces=st.lists(st.sampled_from(["", " ", "  "]), min_size=6, max_size=6))
def test_generated_headers_with_a_repeat_are_refused(tmp_path, names, spaces):
    header = [space + name for name, space in zip(names, spaces)]
    path = tmp_path / "t.csv"
    path.write_text(",".join(header) + "\n" + ",".join("1" for _ in header) + "\n")
    if len({name for name in names}) < len(names):
        with pytest.raises(DataError, match="twice"):
            read_table(path)
    else:
        assert len(read_table(path).columns) == len(header)


@PROPERTY
@given(spelling=st.sampled_from(["{d}/s.csv", "{d}/./s.csv", "{d}/x/../s.csv", "{d}//s.csv"]))
def test_generated_spellings_of_one_output_collide(tmp_path, spelling):
    (tmp_path / "x").mkdir(exist_ok=True)
    status, err = cli("simulate", "--seed", 1, "-o", tmp_path / "s.csv", "--truth",
                      spelling.format(d=tmp_path))
    assert status == 2 and "is the same file as --output" in err
    assert not (tmp_path / "s.csv").exists()


def test_identifier_columns_are_text_whatever_the_header_case(tmp_path):
    # The column mapping reads "Compound" as the compound column; the reader must then
    # keep its IDs as text too (found when the two were merged).
    path = tmp_path / "ids.csv"
    path.write_text("Compound,Plate,rate\n007,01,1.5\n1e0,1,2.0\n", encoding="utf-8")
    table = read_table(path)
    assert list(table["Compound"]) == ["007", "1e0"]
    assert list(table["Plate"]) == ["01", "1"]


def test_an_in_process_scheduler_address_passes_the_syntax_check():
    # Dask's inproc:// addresses have no port (found when tests/test_docs.py used one).
    from inhibkin.cli import _SCHEDULER_ADDRESS

    assert _SCHEDULER_ADDRESS.fullmatch("inproc://192.0.2.2/31764/1")
    assert not _SCHEDULER_ADDRESS.fullmatch("inproc://192.0.2.2")
    assert not _SCHEDULER_ADDRESS.fullmatch("notaurl")


def test_a_python_int_km_past_the_float_range_is_a_clear_error():
    # Found by the hostile-plates property test: km=2**64 raised a TypeError from
    # np.isfinite, and an int past the float range would overflow float().
    from inhibkin.errors import DataError
    from inhibkin.potency.table import potency_table

    plates = pd.DataFrame({"compound": ["A", None, None], "plate": ["P", "P", "P"],
                           "role": ["sample", "max", "min"], "inhibitor": [1.0, 0.0, 0.0],
                           "signal": [50.0, 100.0, 0.0], "substrate": [10.0, 10.0, 10.0]})
    with pytest.raises(DataError, match="km must be a positive number"):
        potency_table(plates, km=10**400, intervals="wald")
    potency_table(plates, km=2**64, intervals="wald")  # finite: no TypeError


def test_whole_table_number_check_marks_exactly_the_rows_numeric_column_lists():
    """validate.numeric_rows (one pass over a table) flags the rows whose values
    numeric_column reports, for every combination of what is allowed."""
    from inhibkin.errors import Problem
    from inhibkin.validate import numeric_column, numeric_rows

    frame = pd.DataFrame({"x": ["1.5", "abc", None, "inf", "1e200", "1e-200", "-2", "0",
                                3.0, float("nan"), "-inf"]})
    for allow_negative in (False, True):
        for allow_nan in (False, True):
            problems: list[Problem] = []
            values = numeric_column(frame, "x", problems, allow_negative=allow_negative,
                                    allow_nan=allow_nan)
            same, bad = numeric_rows(frame, "x", allow_negative=allow_negative,
                                     allow_nan=allow_nan)
            np.testing.assert_array_equal(same, values)
            listed = {p.row for p in problems}
            assert set(np.flatnonzero(bad)) == listed, (allow_negative, allow_nan)
