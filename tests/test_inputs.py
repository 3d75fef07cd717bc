"""The lab's own files in: well names, plate-reader matrices, column mapping, layouts,
and the rates / mechanism stages fed with them (issue 17, items 1–3)."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from inhibkin.cli import main
from inhibkin.errors import DataError
from inhibkin.inputs import (
    normalise_wells,
    parse_plate_matrix,
    read_any_table,
    read_plate_matrix,
    split_header,
    standardise_columns,
    write_plate_matrix,
)
from inhibkin.inputs.io import read_table, write_table
from inhibkin.inputs.layouts import dilution_layout, grid_layout, join_layout, plate_grid
from inhibkin.inputs.wells import parse_well

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
# Rates computed from the same reads through two readers agree to rounding of the sums.
RATE_RTOL = 1e-12


# ---------------------------------------------------------------- wells


def test_well_names_are_normalised():
    wells = normalise_wells(["A1", "A01", "a001", " B 7 ", "P24", "AF48"])
    assert list(wells) == ["A1", "A1", "A1", "B7", "P24", "AF48"]
    for bad in ("AG1", "A0", "A49", "Z", "11", ""):
        assert parse_well(bad) is None, bad
    with pytest.raises(DataError, match=r"row 1 \(value 'AG3'\): not a well name"):
        normalise_wells(pd.Series(["A1", "AG3"]))


# ---------------------------------------------------------------- matrices


def _block(values, *, sep="\t", head=None, corner=""):
    rows, columns = values.shape
    lines = [head] if head else []
    lines.append(sep.join([corner] + [str(c) for c in range(1, columns + 1)]))
    for r in range(rows):
        letter = chr(65 + r) if r < 26 else "A" + chr(65 + r - 26)
        lines.append(sep.join([letter] + [repr(float(v)) for v in values[r]]))
    return lines


def test_matrix_round_trip_is_exact(tmp_path, rng):
    """write_plate_matrix then read_plate_matrix gives back every float to the bit."""
    wells = [f"{chr(65 + r)}{c}" for r in range(16) for c in range(1, 25)]
    table = pd.DataFrame({"plate": "P7", "well": np.tile(wells, 3),
                          "time_s": np.repeat([0.0, 30.0, 61.5], len(wells)),
                          "signal": rng.normal(size=3 * len(wells))})
    path = write_plate_matrix(table, tmp_path / "reads.txt")
    back = read_plate_matrix(path)
    assert list(back.columns) == ["plate", "well", "time_s", "signal"]
    np.testing.assert_array_equal(back["signal"].to_numpy().view(np.int64),
                                  table["signal"].to_numpy().view(np.int64))
    assert (back["well"] == table["well"]).all() and (back["time_s"] == table["time_s"]).all()


def test_matrix_variants_are_read(rng):
    """The common variants: free text between blocks, time in the header or the corner
    cell, clock times, comma / space / semicolon cells, decimal commas, trailing
    separators, a 1536-well block, plate named once for a kinetic series."""
    v96 = rng.uniform(size=(8, 12)).round(4)
    lines = ["Instrument export", "Protocol: kinetic, 2 reads", "1,2,3", ""]
    lines += _block(v96, head="Plate: K1; Time: 0:00:30")
    lines += ["", "some footer text", ""]
    lines += [line + "\t" for line in _block(v96 * 2, corner="0:01:00")]  # trailing tabs
    kinetic = parse_plate_matrix(lines)
    assert kinetic["plate"].unique().tolist() == ["K1"]
    assert kinetic["time_s"].unique().tolist() == [30.0, 60.0]
    np.testing.assert_array_equal(kinetic["signal"].to_numpy()[96:], (v96 * 2).ravel())

    spaces = [" ".join(line.split("\t")) for line in _block(v96, head="plate E1")]
    commas = _block(v96, sep=",", head="plate=E2")
    semicolons = [line.replace(".", ",") for line in _block(v96, sep=";", head="plate E3")]
    endpoint = parse_plate_matrix(spaces + ["free text"] + commas + [""] + semicolons)
    assert list(endpoint.columns) == ["plate", "well", "signal"]
    for plate in ("E1", "E2", "E3"):
        np.testing.assert_array_equal(endpoint.loc[endpoint["plate"] == plate, "signal"],
                                      v96.ravel())

    big = parse_plate_matrix(_block(rng.uniform(size=(32, 48)), head="plate HD time 2 min"))
    assert len(big) == 1536 and big["well"].iloc[-1] == "AF48"
    assert big["time_s"].iloc[0] == 120.0

    missing = [line.replace(repr(float(v96[1, 2])), "OVRFLW") for line in _block(v96)]
    read = parse_plate_matrix(missing, missing=["OVRFLW"])
    assert np.isnan(read.loc[read["well"] == "B3", "signal"]).all()


@pytest.mark.parametrize(("edit", "message"), [
    (lambda ls: ls[:6], r"line 1: the block ends after 5 rows; .* 8 rows \(A-H\)"),
    (lambda ls: ls[:3] + [ls[3].replace("0.5", "high")] + ls[4:],
     r"value 'high': line 4, well C1: not a number; to read it as a missing read"),
    (lambda ls: ls + ls, r"line 10: a second block of plate 'plate' without a time"),
    (lambda ls: ls[:2] + ls[3:], r"line 3: expected row B"),
    (lambda ls: ls[:1] + [ls[1].rsplit("\t", 1)[0]] + ls[2:],
     r"line 2: row A has 11 cells, the column line \(line 1\) has 12; write an empty cell"),
    (lambda ls: [ls[0].replace("\t12", "")] + ls[1:],
     r"line 1: a column line numbered 1 to 11; a plate has 12, 24 or 48 columns"),
    (lambda ls: ["time 30 parsecs"] + ls, r"line 1: the block header's time cannot be read"),
    (lambda ls: ["time 30 s"] + ls + ["plate Q"] + ls, r"line 12: this block has no read time"),
    (lambda ls: ["no blocks here"], r"no plate block found"),
])
def test_matrix_refusals_name_the_line(edit, message):
    values = np.full((8, 12), 0.5)
    with pytest.raises(DataError, match=message):
        parse_plate_matrix(edit(_block(values)))


# ---------------------------------------------------------------- column mapping


def test_headers_match_without_regard_to_case_and_unit_spelling():
    table = pd.DataFrame({"Compound": ["x"], "Substrate (uM)": [1.0], "inhibitor [nM]": [2.0],
                          "Rate (mOD/min)": [3.0], "Well": ["B03"]})
    out = standardise_columns(table, required=("compound", "substrate", "inhibitor", "rate",
                                                "well"))
    assert list(out.columns) == ["compound", "substrate_uM", "inhibitor_nM", "rate", "well"]
    assert out["well"].tolist() == ["B3"]
    for header, unit in (("substrate (uM)", "uM"), ("SUBSTRATE_µM", "uM"),
                         ("Substrate [μM]", "uM"), ("substrate mM", "mM")):
        assert list(standardise_columns(pd.DataFrame({header: [1]})).columns) == [
            f"substrate_{unit}"], header
    assert split_header("compound id") == ("compound id", None)
    renamed = standardise_columns(pd.DataFrame({"Cpd ID": ["x"], "v0": [1.0]}),
                                  compound="cpd id", rate="V0", required=("compound", "rate"))
    assert list(renamed.columns) == ["compound", "rate"]


def test_a_missing_column_is_answered_with_the_closest_header():
    table = pd.DataFrame({"Compound": ["x"], "Substrat (uM)": [1.0], "Inhibitor (nM)": [1.0]})
    with pytest.raises(DataError, match=r"option '--substrate' \(value 'substrate'\): no such "
                                        r"column; did you mean 'Substrat \(uM\)'\?"):
        standardise_columns(table, required=("substrate",), options={"substrate": "--substrate"})
    with pytest.raises(DataError, match=r"several columns match 'inhibitor'"):
        standardise_columns(pd.DataFrame({"inhibitor_nM": [1], "Inhibitor (uM)": [1]}),
                            required=("inhibitor",))
    # Columns the stage does not read are left alone, even when they would clash.
    kept = standardise_columns(pd.DataFrame({"Plate": [1], "PLATE": [2], "rate": [1.0]}),
                               required=("rate",))
    assert list(kept.columns) == ["Plate", "PLATE", "rate"]
    with pytest.raises(DataError, match=r"unknown concentration unit in the header"):
        standardise_columns(pd.DataFrame({"substrate (furlongs)": [1]}), required=("substrate",))


# ---------------------------------------------------------------- the rates stage


def _demo_plate(plate="MOA-P01"):
    reads = read_table(DEMO / "invented_moa_reads.csv")
    plate_map = read_table(DEMO / "invented_moa_plate_map.csv")
    return (reads[reads["plate"] == plate].reset_index(drop=True),
            plate_map[plate_map["plate"] == plate].reset_index(drop=True))


def _export(reads, path, *, wells=None):
    """A plate-reader-style export: preamble, one block per read time (time as h:mm:ss
    in the corner cell), free text between blocks."""
    wells = wells or 96
    rows, columns = {96: (8, 12), 384: (16, 24)}[wells]
    lines = ["Reader export", "Kinetic read, 340 nm", ""]
    for time, group in reads.groupby("time_s", sort=True):
        grid = np.full((rows, columns), np.nan)
        for well, value in zip(group["well"], group["product_uM"]):
            r, c = parse_well(well)
            grid[r, c - 1] = value
        minutes, seconds = divmod(int(time), 60)
        lines += [f"Plate {reads['plate'].iloc[0]}",
                  ",".join([f"0:{minutes:02d}:{seconds:02d}"] + [str(c) for c in
                                                                 range(1, columns + 1)])]
        lines += [",".join([chr(65 + r)] + ["" if np.isnan(v) else repr(float(v))
                                            for v in grid[r]]) for r in range(rows)]
        lines += ["", f"end of read at {time:g} s", ""]
    path.write_text("\n".join(lines) + "\n")
    return path


def _to_96(table, wells):
    """The demo plate's wells (rows A-D of a 384-well plate) repacked onto a 96-well plate,
    row by row."""
    moved = {w: f"{chr(65 + k // 12)}{k % 12 + 1}" for k, w in enumerate(wells)}
    return table.assign(well=table["well"].map(moved))


@pytest.fixture(scope="module")
def tidy_rates(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tidy")
    reads, plate_map = _demo_plate()
    write_table(reads, folder / "reads.csv")
    write_table(plate_map, folder / "map.csv")
    assert main(["rates", str(folder / "reads.csv"), "--plate-map", str(folder / "map.csv"),
                 "--signal", "product_uM", "-o", str(folder / "rates.csv"), "--quiet"]) == 0
    return read_table(folder / "rates.csv")


@pytest.mark.parametrize("wells", [96, 384])
def test_a_wide_kinetic_export_goes_through_the_rates_stage(tmp_path, tidy_rates, wells):
    """Issue 17, done-when: a 96- and a 384-well kinetic export, as the reader writes it,
    gives the rates the tidy table gives, with no reshaping. The map's headers are the
    lab's own (capitals, units in brackets, zero-padded wells)."""
    reads, plate_map = _demo_plate()  # a 384-well plate, rows A-D used
    if wells == 96:
        used = list(plate_map["well"])
        reads, plate_map = _to_96(reads, used), _to_96(plate_map, used)
    export = _export(reads, tmp_path / f"export_{wells}.csv", wells=wells)
    lab_map = plate_map.assign(well=plate_map["well"].map(
        lambda w: f"{w[0]}{int(w[1:]):02d}")).rename(columns={
            "compound": "Compound", "substrate_uM": "Substrate (uM)",
            "inhibitor_nM": "Inhibitor [nM]", "role": "Role", "plate": "Plate", "well": "Well"})
    write_table(lab_map, tmp_path / "map.csv")
    status = main(["rates", str(export), "--plate-map", str(tmp_path / "map.csv"),
                   "--signal-unit", "uM", "-o", str(tmp_path / "rates.csv"), "--quiet"])
    assert status == 0
    got = read_table(tmp_path / "rates.csv")
    key = ["compound", "substrate_uM", "inhibitor_nM"]
    got = got.sort_values(key + ["rate"], ignore_index=True)
    expected = tidy_rates.sort_values(key + ["rate"], ignore_index=True)
    np.testing.assert_allclose(got["rate"], expected["rate"], rtol=RATE_RTOL)
    assert (got[key] == expected[key]).all().all()


def test_a_384_endpoint_export_becomes_the_dose_response_table(tmp_path):
    """An endpoint read (one block per plate, no times) is joined to the plate map: the
    potency stage's table, with every signal as the tidy table had it."""
    wells = read_table(DEMO / "invented_screen_wells.csv")
    wells = wells[wells["plate"].isin(["SCR-P01", "SCR-P02"])].reset_index(drop=True)
    write_plate_matrix(wells, tmp_path / "endpoint.txt")
    write_table(wells.drop(columns="signal"), tmp_path / "map.csv")
    assert main(["rates", str(tmp_path / "endpoint.txt"), "--plate-map",
                 str(tmp_path / "map.csv"), "-o", str(tmp_path / "plates.csv"),
                 "--quiet"]) == 0
    got = read_table(tmp_path / "plates.csv")
    assert len(got) == len(wells)
    # A table read from CSV is indexed by file line; compare rows by position.
    pd.testing.assert_frame_equal(got[list(wells.columns)].reset_index(drop=True), wells,
                                  check_dtype=False)


def test_read_any_table_chooses_by_suffix_and_content(tmp_path):
    (tmp_path / "notes.txt").write_text("a,b\n1,2\n")
    with pytest.raises(DataError, match="holds no plate block"):
        read_any_table(tmp_path / "notes.txt")
    with pytest.raises(DataError, match=r"unknown table format '\.json'"):
        read_any_table(tmp_path / "t.json")
    write_table(pd.DataFrame({"a": [1]}), tmp_path / "t.csv")
    assert read_any_table(tmp_path / "t.csv")["a"].tolist() == [1]


# ---------------------------------------------------------------- layouts


def test_usual_layouts_in_one_call():
    layout = dilution_layout(["CPD-1", "CPD-2"], top=30.0, factor=3.0, unit="uM", substrate=40)
    one = layout[layout["compound"] == "CPD-1"]
    samples = one[one["role"] == "sample"]
    np.testing.assert_allclose(samples["inhibitor_uM"], 30.0 / 3.0 ** np.arange(10))
    assert one.loc[one["role"] == "max", "well"].tolist() == ["A11"]
    assert one.loc[one["role"] == "min", "well"].tolist() == ["A12"]
    assert (layout["substrate_uM"] == 40.0).all()
    grid = grid_layout("CPD-9", substrate=[1, 2, 4, 8], inhibitor=[0, 10, 30], replicates=2)
    assert len(grid) == 24 and grid.loc[grid["well"] == "D6", "inhibitor_nM"].item() == 30.0
    assert grid.loc[grid["well"] == "D6", "substrate_uM"].item() == 8.0
    drawn = plate_grid(layout, value="role", width=6)
    assert drawn.splitlines()[2].split() == ["A"] + ["sample"] * 10 + ["max", "min"]
    assert drawn.splitlines()[4].split() == ["C"] + ["."] * 12
    with pytest.raises(DataError, match="the layout lists this well but the reads have no"):
        join_layout(pd.DataFrame({"plate": ["P1"], "well": ["A1"], "signal": [1.0]}), layout)


def test_layout_stage_writes_and_shows(tmp_path, capsys):
    out = tmp_path / "layout.csv"
    assert main(["layout", "grid", "--compound", "C1", "--substrate", "1,2,4",
                 "--inhibitor", "0,10", "--unit", "nM", "-o", str(out)]) == 0
    assert len(read_table(out)) == 6
    assert main(["layout", "show", str(out), "--value", "inhibitor_nM"]) == 0
    shown = capsys.readouterr().out
    assert "plate P1 (inhibitor_nM)" in shown and shown.count("10") >= 3
    # A new user asks for the base name, as the other stages take it: it was refused
    # ("no such column in the layout"); a misspelling gets the closest header.
    assert main(["layout", "show", str(out), "--value", "Substrate"]) == 0
    assert "plate P1 (substrate_uM)" in capsys.readouterr().out
    assert main(["layout", "show", str(out), "--value", "inhibitr"]) == 2
    assert "did you mean 'inhibitor_nM'?" in capsys.readouterr().err


@settings(max_examples=150, deadline=None)
@given(st.lists(st.text(alphabet="AB H1203.,;\t-:ptimelas", max_size=40), max_size=30),
       st.integers(0, 9))
def test_matrix_reader_refuses_garbage_only_with_data_errors(noise, at):
    """Any text, and any text spliced into a valid block: a table or a DataError with a
    line, never another exception."""
    block = _block(np.full((8, 12), 0.25))
    for lines in (noise, block[:at] + noise + block[at:]):
        try:
            table = parse_plate_matrix(lines)
        except DataError as err:
            assert str(err)
        else:
            assert list(table.columns)[:2] == ["plate", "well"]


def test_a_superscript_digit_is_not_a_column_number():
    # str.isdigit accepts '²' (int() does not); found by the hostile-table property test.
    from inhibkin.inputs.plate_matrix import looks_like_plate_matrix

    assert not looks_like_plate_matrix(["compound,hostile", "²,True", ",True"])


# ------------------------------------ a plate read from first principles, as exported

# tests/grid_ode.py: the mass-action ODE of E, S, I, ES, EI (solve_ivp, LSODA, rtol 1e-10),
# read as absorbance with 3 % read noise. A rapid-equilibrium competitive inhibitor,
# Ki = 1 µM; read every 60 s for 10 min (11 reads, a common kinetic protocol).
ODE_KI_UM = 1.0
ODE_READ_STEP = 3  # every third of the simulator's 20 s reads


@pytest.fixture(scope="module")
def ode_plate():
    from grid_ode import Mechanism, plate

    reads, plate_map = plate(Mechanism(kic=ODE_KI_UM), seed=4, compound="CPD-3")
    keep = (reads["time"] / 20.0).round().astype(int) % ODE_READ_STEP == 0
    return reads[keep].reset_index(drop=True), plate_map


def _tab_export(reads, path):
    """The other common layout: tab-separated, the plate and time in a header line
    ('plate P1, time 0:01:00'), decimal commas, instrument text between blocks."""
    lines = ["Instrument: absorbance reader", "Wavelength: 340 nm", ""]
    for time, group in reads.groupby("time", sort=True):
        grid = np.full((8, 12), np.nan)
        for well, value in zip(group["well"], group["signal"]):
            r, c = parse_well(well)
            grid[r, c - 1] = value
        minutes, seconds = divmod(int(round(time)), 60)
        lines += [f"plate P1, time 0:{minutes:02d}:{seconds:02d}",
                  "\t" + "\t".join(str(c) for c in range(1, 13))]
        lines += [chr(65 + r) + "\t" + "\t".join(f"{v:.5f}".replace(".", ",") for v in grid[r])
                  for r in range(8)]
        lines += ["", "Temperature: 25.0 °C", ""]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_an_exported_plate_of_mass_action_reads_gives_the_true_mechanism(tmp_path,
                                                                          ode_plate):
    """Issue 17, done-when, as a new user runs it: the export and the map go through
    `inhibkin rates` and `inhibkin mechanism` as they are. Before the fix of the
    time-dependence test (Student's t instead of the normal for slopes of 4 reads), 10 of
    the 80 inhibited wells of this rapid-equilibrium plate were flagged time_dependent and
    the compound got no Ki."""
    reads, plate_map = ode_plate
    export = _tab_export(reads, tmp_path / "export.txt")
    write_table(plate_map, tmp_path / "map.csv")
    assert main(["rates", str(export), "--plate-map", str(tmp_path / "map.csv"),
                 "-o", str(tmp_path / "rates.csv"), "--quiet"]) == 0
    rates = read_table(tmp_path / "rates.csv")
    assert len(rates) == len(plate_map)
    assert not rates["flags"].fillna("").str.contains("time_dependent").any()
    assert main(["mechanism", str(tmp_path / "rates.csv"), "-o",
                 str(tmp_path / "ranked.csv"), "--quiet"]) == 0
    row = read_table(tmp_path / "ranked.csv").iloc[0]
    assert row["verdict"] == "competitive", row["reason"]
    # The simulator's Ki inside the fit's 95 % interval (one seed).
    assert row["ki_low_M"] <= ODE_KI_UM * 1e-6 <= row["ki_high_M"]


def test_initial_rates_reads_a_layout_s_headers_in_python(ode_plate):
    """The Python API took the reads' headers as the command line does but refused the
    plate map's ('column substrate is missing' beside substrate_uM)."""
    import inhibkin as ik

    reads, plate_map = ode_plate
    lab_map = plate_map.rename(columns={"substrate_uM": "Substrate (uM)",
                                        "inhibitor_uM": "inhibitor [uM]"})
    got = ik.initial_rates(reads, lab_map).table
    expected = ik.initial_rates(reads, plate_map.rename(columns={
        "substrate_uM": "substrate", "inhibitor_uM": "inhibitor"}), substrate_unit="uM",
        inhibitor_unit="uM").table
    np.testing.assert_array_equal(got["rate"], expected["rate"])
    with pytest.raises(DataError, match=r"did you mean 'Substrate \(uM\)'\?"):
        ik.initial_rates(reads, lab_map, substrate="substrat")


def test_an_unnamed_plate_is_answered_with_how_to_name_it(tmp_path, ode_plate, capsys):
    """A new user's first run: the export's blocks name no plate (so it takes the file's
    name) and the layout says P1; the refusal listed both but not what to do."""
    reads, plate_map = ode_plate
    export = _tab_export(reads, tmp_path / "export.txt")
    export.write_text(export.read_text(encoding="utf-8").replace("plate P1, ", ""),
                      encoding="utf-8")
    write_table(plate_map, tmp_path / "map.csv")
    command = ["rates", str(export), "--plate-map", str(tmp_path / "map.csv"),
               "-o", str(tmp_path / "rates.csv"), "--quiet"]
    assert main(command) == 2
    err = capsys.readouterr().err
    assert "plates ['export']" in err and "--plate NAME" in err
    assert main(command + ["--plate", "P1"]) == 0


def test_fit_campaign_takes_lab_headers_by_keyword():
    """In Python, fit_campaign(substrate='S [µM]') said 'concentration unit not declared'
    (a bracketed unit was read only by standardise_columns), and a missing column listed
    every header instead of the closest one."""
    import inhibkin as ik

    table, _ = ik.simulate_campaign(2, seed=5)
    lab = table.rename(columns={"compound": "Cpd ID", "substrate_uM": "S [µM]",
                                "inhibitor_nM": "Inhibitor (nM)", "rate": "V0 (mOD/min)"})
    got = ik.fit_campaign(lab, compound="Cpd ID", substrate="S [µM]",
                          inhibitor="Inhibitor (nM)", rate="V0 (mOD/min)", quiet=True)
    expected = ik.fit_campaign(table, quiet=True)
    np.testing.assert_array_equal(got.ranking["ki_M"], expected.ranking["ki_M"])
    with pytest.raises(DataError, match=r"column 'V0': column is missing; did you mean "
                                        r"'V0 \(mOD/min\)'\?"):
        ik.fit_campaign(lab, compound="Cpd ID", substrate="S [µM]",
                        inhibitor="Inhibitor (nM)", rate="V0", quiet=True)
