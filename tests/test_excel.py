"""Excel in and out (issue 17, item 4): numbers as numbers, formula-like text as text,
workbooks of a campaign, .xlsx tables and plate matrices read back."""

import zipfile

import numpy as np
import pandas as pd
import pytest

import inhibkin as ik
from inhibkin.cli import main
from inhibkin.display.text import ranking_ki_unit
from inhibkin.errors import DataError
from inhibkin.inputs import read_any_table
from inhibkin.inputs.excel import looks_like_formula, read_workbook_rows, write_workbook
from inhibkin.units import to_molar

openpyxl = pytest.importorskip("openpyxl")

# Text a spreadsheet would run (OWASP's CSV-injection examples, common practice).
# openpyxl writes a number with 16 significant digits ("%.16g"): the workbook holds every
# value to within half a unit in the 16th digit (the bit-exact copies are the store,
# Parquet and CSV). Excel itself shows and keeps 15 digits on entry (common practice).
XLSX_RTOL = 5e-16
HOSTILE = ["=HYPERLINK(\"http://x\",\"y\")", "+1+1", "-2+3", "@SUM(A1:A2)", "=1/0"]


def test_numbers_stay_numbers_and_formulas_stay_text(tmp_path, rng):
    values = rng.normal(size=len(HOSTILE)) * 10.0 ** rng.integers(-12, 12, len(HOSTILE))
    table = pd.DataFrame({"compound": HOSTILE, "ki_M": values,
                          "n": np.arange(len(HOSTILE)), "ok": [True, False, True, True, False],
                          "missing": [np.nan, 1.0, np.inf, -np.inf, 2.0]})
    # readable=False: the table as it is (the molar column not restated for people).
    path = write_workbook({"ranking": table}, tmp_path / "out.xlsx", readable=False)
    with zipfile.ZipFile(path) as archive:
        sheet = archive.read("xl/worksheets/sheet1.xml").decode()
    assert "<f>" not in sheet  # no formula anywhere in the sheet
    cells = openpyxl.load_workbook(path)["ranking"]
    assert [c.value for c in cells["A"][1:]] == HOSTILE
    assert all(c.data_type == "s" and c.quotePrefix for c in cells["A"][1:])
    got = np.array([c.value for c in cells["B"][1:]], dtype=float)
    np.testing.assert_allclose(got, values, rtol=XLSX_RTOL, atol=0)
    assert [c.value for c in cells["C"][1:]] == list(range(len(HOSTILE)))
    assert [c.value for c in cells["E"][1:]] == [None, 1.0, "inf", "-inf", 2.0]
    assert looks_like_formula("-x") and not looks_like_formula("CPD-1")


def test_rank_writes_a_workbook_and_xlsx_is_read_as_input(tmp_path):
    table, _ = ik.simulate_campaign(2, seed=5)
    table = table.rename(columns={"compound": "Compound", "substrate_uM": "Substrate (uM)",
                                  "inhibitor_nM": "Inhibitor [nM]", "rate": "Rate (mOD/min)"})
    table.loc[table["Compound"] == table["Compound"].iloc[0], "Compound"] = "=CPD+1"
    write_workbook({"grid": table}, tmp_path / "grid.xlsx")
    assert main(["rank", "--grid", str(tmp_path / "grid.xlsx"), "-o",
                 str(tmp_path / "ranking.xlsx"), "--quiet"]) == 0
    book = openpyxl.load_workbook(tmp_path / "ranking.xlsx")
    assert book.sheetnames == ["ranking", "parameters"]
    ranking = read_any_table(tmp_path / "ranking.xlsx")
    assert sorted(ranking["compound"]) == sorted(["=CPD+1", table["Compound"].iloc[-1]])
    assert ranking["pki"].dtype == float
    # Issue 17, item 6: concentrations for people, one unit per column stated in the
    # header, the numbers still numbers (the CSV keeps ki_M, in M, for machines).
    assert main(["rank", "--grid", str(tmp_path / "grid.xlsx"), "-o",
                 str(tmp_path / "ranking.csv"), "--quiet"]) == 0
    molar = ik.read_table(tmp_path / "ranking.csv")
    unit = ranking_ki_unit(molar)
    assert "ki_M" in molar.columns and "ki_M" not in ranking.columns
    np.testing.assert_allclose(ranking[f"ki ({unit})"], molar["ki_M"] / to_molar(1.0, unit),
                               rtol=XLSX_RTOL)
    assert all(f" {unit} [" in t for t in ranking["ki_reported"])
    params = read_any_table(tmp_path / "ranking.xlsx", sheet="parameters")
    assert set(params.loc[params["parameter"] == "km", "unit"]) == {"µM"}


def test_xlsx_plate_matrix_and_damaged_files(tmp_path, rng):
    values = rng.uniform(size=(8, 12))
    rows = [["Reader export"], [], ["plate X", None], [None, *range(1, 13)]]
    rows += [[chr(65 + r), *values[r]] for r in range(8)]
    book = openpyxl.Workbook()
    for row in rows:
        book.active.append(row)
    book.save(tmp_path / "plate.xlsx")
    read = read_any_table(tmp_path / "plate.xlsx")
    assert read["plate"].unique().tolist() == ["X"]
    np.testing.assert_allclose(read["signal"], values.ravel(), rtol=XLSX_RTOL, atol=0)
    assert read_workbook_rows(tmp_path / "plate.xlsx")[0][:2] == ["Reader export", None]
    (tmp_path / "cut.xlsx").write_bytes((tmp_path / "plate.xlsx").read_bytes()[:300])
    with pytest.raises(DataError, match=r"unreadable \.xlsx file"):
        read_any_table(tmp_path / "cut.xlsx")
    book = openpyxl.Workbook()
    book.active.append(["compound", None, "rate"])
    book.active.append(["a", 1, 2])
    book.save(tmp_path / "gap.xlsx")
    with pytest.raises(DataError, match=r"sheet row 1: header cells \[2\] are empty"):
        read_any_table(tmp_path / "gap.xlsx")
