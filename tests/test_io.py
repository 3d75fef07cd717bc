"""Reading and writing tables: clear errors on damaged files, atomic writes."""

import os

import numpy as np
import pandas as pd
import pytest

from inhibkin.errors import DataError
from inhibkin.inputs.io import read_table, write_table


@pytest.fixture
def table():
    return pd.DataFrame({"compound": ["A", "A", "B"], "inhibitor_nM": [0.0, 10.0, np.nan],
                         "rate": [1.5, 0.75, 2.0], "flags": ["", "x; y", "z"]})


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_round_trip(tmp_path, table, suffix):
    path = write_table(table, tmp_path / f"out{suffix}")
    back = read_table(path).reset_index(drop=True)  # CSV rows are labelled by file line
    pd.testing.assert_frame_equal(back[["compound", "inhibitor_nM", "rate"]],
                                  table[["compound", "inhibitor_nM", "rate"]],
                                  check_dtype=False)
    # No temporary file is left beside the result.
    assert [p.name for p in tmp_path.iterdir()] == [f"out{suffix}"]


def test_truncated_csv_names_file_and_line(tmp_path):
    path = tmp_path / "cut.csv"
    path.write_text("compound,inhibitor_nM,rate\nA,0,1.5\nA,10")
    with pytest.raises(DataError, match=r"cut\.csv.*line 3.*truncated"):
        read_table(path)


def test_ragged_csv_lists_every_bad_line(tmp_path):
    path = tmp_path / "ragged.csv"
    path.write_text("compound,inhibitor_nM,rate\nA,0,1.5,9\nA,10\nB,0,2\n")
    with pytest.raises(DataError) as info:
        read_table(path)
    text = str(info.value)
    assert "ragged.csv" in text and "line 2: 4 fields" in text and "line 3: 2 fields" in text


def test_cut_inside_the_last_value_is_caught(tmp_path):
    # Every field is there, but "1.5" was "1.53"; only the missing line break shows it.
    path = tmp_path / "cut.csv"
    path.write_text("compound,rate\nA,1.53\nB,1.5")
    with pytest.raises(DataError, match="truncated.*end it with a line break"):
        read_table(path)
    path.write_text("compound,rate\nA,1.53\nB,1.5\n")
    assert read_table(path)["rate"].tolist() == [1.53, 1.5]


@pytest.mark.parametrize("content, message", [("", "empty"), ("compound,rate\n", "no rows")])
def test_empty_files(tmp_path, content, message):
    path = tmp_path / "e.csv"
    path.write_text(content)
    with pytest.raises(DataError, match=message):
        read_table(path)


def test_binary_garbage_is_not_text(tmp_path):
    path = tmp_path / "b.csv"
    path.write_bytes(b"compound,rate\n\xff\xfe,1\n")
    with pytest.raises(DataError, match="not UTF-8"):
        read_table(path)


def test_truncated_parquet(tmp_path, table):
    whole = write_table(table, tmp_path / "t.parquet").read_bytes()
    cut = tmp_path / "cut.parquet"
    cut.write_bytes(whole[: len(whole) // 2])
    with pytest.raises(DataError, match=r"cut\.parquet.*unreadable Parquet"):
        read_table(cut)


def test_missing_file_and_unknown_format(tmp_path):
    with pytest.raises(DataError, match="no such file"):
        read_table(tmp_path / "absent.csv")
    with pytest.raises(DataError, match="unknown table format"):
        read_table(tmp_path / "sheet.xlsx")


def test_failed_write_keeps_the_old_file_and_leaves_no_temporary(tmp_path, table):
    path = write_table(table, tmp_path / "out.csv")
    before = path.read_bytes()

    class Exploding(pd.DataFrame):
        def to_csv(self, *args, **kwargs):
            raise KeyboardInterrupt  # an interrupted run

    with pytest.raises(KeyboardInterrupt):
        write_table(Exploding(table), path)
    assert path.read_bytes() == before
    assert os.listdir(tmp_path) == ["out.csv"]
