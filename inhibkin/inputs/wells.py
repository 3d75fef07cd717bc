"""Well names: ``A1``, ``A01`` and ``a001`` are one well, written ``A1``.

Rows are lettered A–Z then AA–AF (32 rows of a 1536-well plate); columns are numbered
from 1. Plate formats are 96 (8 × 12), 384 (16 × 24) and 1536 (32 × 48) wells.
"""

from __future__ import annotations

import re

import pandas as pd

from ..errors import DataError, Problem

__all__ = ["PLATE_FORMATS", "row_letter", "row_index", "parse_well", "well_name",
           "normalise_wells", "plate_format_for"]

#: Wells of a plate -> (rows, columns).
PLATE_FORMATS = {96: (8, 12), 384: (16, 24), 1536: (32, 48)}
_MAX_ROWS, _MAX_COLUMNS = PLATE_FORMATS[1536]

_WELL = re.compile(r"^\s*([A-Za-z]{1,2})\s*0*([0-9]+)\s*$")


def row_letter(index: int) -> str:
    """Row letter of the 0-based row ``index``: 0 -> 'A', 25 -> 'Z', 26 -> 'AA'."""
    return chr(65 + index) if index < 26 else "A" + chr(65 + index - 26)


def row_index(letters: str) -> int | None:
    """0-based row of ``letters`` ('A' -> 0, 'AF' -> 31), or None when not a plate row."""
    text = letters.strip().upper()
    if len(text) == 1 and "A" <= text <= "Z":
        return ord(text) - 65
    if len(text) == 2 and text[0] == "A" and "A" <= text[1] <= "F":
        return 26 + ord(text[1]) - 65
    return None


def parse_well(text) -> tuple[int, int] | None:
    """(0-based row, 1-based column) of a well name, or None when it is not one."""
    match = _WELL.match(str(text))
    if not match:
        return None
    row, column = row_index(match.group(1)), int(match.group(2))
    if row is None or not 1 <= column <= _MAX_COLUMNS:
        return None
    return row, column


def well_name(row: int, column: int) -> str:
    """The canonical name of the well at 0-based ``row`` and 1-based ``column``."""
    return f"{row_letter(row)}{column}"


def normalise_wells(values, *, column="well", context=None) -> pd.Series:
    """Every well name of ``values`` written canonically (``A01`` -> ``A1``).

    Raises
    ------
    DataError
        Naming the rows whose value is not a well name (at most five are listed).
    """
    series = pd.Series(values)
    parsed = series.map(parse_well)
    bad = parsed.isna()
    if bad.any():
        rows = series.index[bad]
        problems = [Problem(column, row, series[row],
                            "not a well name; write a row letter A-AF and a column number, "
                            "e.g. A1 or B07") for row in rows[:5]]
        if len(rows) > 5:
            problems.append(Problem(column, None, None, f"and {len(rows) - 5} more rows"))
        raise DataError(problems, context)
    return parsed.map(lambda rc: well_name(*rc)).rename(series.name)


def plate_format_for(n_rows: int, n_columns: int) -> int:
    """The smallest plate format (96, 384, 1536) that holds ``n_rows`` × ``n_columns``."""
    for wells, (rows, columns) in PLATE_FORMATS.items():
        if n_rows <= rows and n_columns <= columns:
            return wells
    raise DataError(f"{n_rows} rows × {n_columns} columns is larger than a 1536-well plate")
