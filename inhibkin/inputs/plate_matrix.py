"""Plate-reader matrices: one block of rows × columns per plate and read time -> a tidy table.

The block format
----------------
A file holds one or more *blocks*; anything between blocks (blank lines, instrument
settings, notes) is skipped. A block is::

    plate P01, time 30 s                      <- optional header line
         1      2      3    ...   12          <- column line: 1..12, 1..24 or 1..48
    A    0.051  0.049  0.050 ...  0.048       <- one line per row, A..H, A..P or A..AF
    B    ...
    ...
    H    ...

* **Column line**: the numbers 1 to n in order (n = 12, 24 or 48); its first cell may be
  empty, free text, or the read time (``0:00:30``, ``30 s``).
* **Rows**: a row letter then n values, every row of the plate in order (8 rows for
  12 columns, 16 for 24, 32 for 48). An empty cell, ``NaN``, ``NA`` or ``-`` is a
  missing read; other text is refused unless named in ``missing``.
* **Header line** (the non-blank line just above the column line, optional): ``plate
  NAME`` and/or ``time VALUE`` as ``key value``, ``key: value`` or ``key=value``, several
  separated by commas, semicolons or tabs. A time is a number with a unit (``s``, ``ms``,
  ``min``, ``h``), ``mm:ss`` or ``h:mm:ss``, or a bare number (unit then undeclared).
* **Cells** are separated by tabs, commas, semicolons or spaces (decided per line);
  with tabs or semicolons a decimal comma (``0,051``) is read as a decimal point.
* A block without a plate name belongs to the plate of the block before it (the first
  one to ``plate``, by default the file's name), so a kinetic run can name its plate
  once. Two blocks of one plate at one time (or both without a time) are refused.

Output: columns ``plate``, ``well`` (``A1`` … ``AF48``), ``time_s`` (when the times carry
units; ``time`` when they are bare numbers; absent for an endpoint read of blocks without
a time) and ``signal``, sorted by plate, time, row and column: the reads table of
:func:`inhibkin.initial_rates`, or the signal column of a dose-response table.

Anything that cannot be read is refused with a :class:`~inhibkin.errors.DataError` that
names the line and the reason.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..units import TIME_UNITS, to_seconds
from .wells import PLATE_FORMATS, row_index, row_letter, well_name

__all__ = ["read_plate_matrix", "parse_plate_matrix", "looks_like_plate_matrix",
           "write_plate_matrix", "MISSING_MARKS"]

#: Cell texts read as a missing read (compared case-insensitively).
MISSING_MARKS = ("", "nan", "na", "n/a", "-")
_ROWS_FOR_COLUMNS = {columns: rows for rows, columns in PLATE_FORMATS.values()}
_HEADER_KEY = re.compile(r"(?i)\b(plate|time)\b\s*[:=]?\s*"
                         r"([^,;\t]*?)(?=\s+(?:plate|time)\b|[,;\t]|$)")
_CLOCK = re.compile(r"^\s*(?:(\d+):)?(\d+):(\d+(?:\.\d*)?)\s*$")
_TIME_WITH_UNIT = re.compile(r"^\s*([-+]?[0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*([A-Za-z]*)\s*$")


@dataclass(frozen=True)
class _Block:
    plate: str | None
    time: float | None
    time_unit: str | None
    line: int
    values: np.ndarray  # rows × columns, float


def _split(line: str) -> tuple[list[str], bool]:
    """Cells of a text line, and whether a decimal comma may be used."""
    if "\t" in line:
        return line.rstrip("\r\n").split("\t"), True
    if ";" in line:
        return line.rstrip("\r\n").split(";"), True
    if "," in line:
        return line.rstrip("\r\n").split(","), False
    return line.split(), False


def _records(lines):
    """(line number, cells as text, decimal comma allowed) for every line."""
    for number, line in enumerate(lines, start=1):
        if isinstance(line, str):
            cells, comma = _split(line)
        else:  # already split (a spreadsheet row): keep numbers exact
            cells, comma = ["" if c is None else c for c in line], False
        yield number, cells, comma


def _text(cell) -> str:
    return cell.strip() if isinstance(cell, str) else repr(cell)


def _integer(cell) -> int | None:
    if isinstance(cell, (int, np.integer)) and not isinstance(cell, bool):
        return int(cell)
    if isinstance(cell, float) and cell.is_integer():
        return int(cell)
    # ASCII digits only: str.isdigit accepts superscripts such as '²', which int() refuses.
    if isinstance(cell, str) and cell.strip().isascii() and cell.strip().isdigit():
        return int(cell.strip())
    return None


def _trim(cells) -> list:
    cells = list(cells)
    while cells and (cells[-1] is None or (isinstance(cells[-1], str) and not cells[-1].strip())):
        cells.pop()
    return cells


def _column_line(cells) -> tuple[int, object] | None:
    """(number of columns, corner cell) when ``cells`` are 1..n, else None."""
    cells = _trim(cells)
    if len(cells) < 2:
        return None
    corner = None
    if _integer(cells[0]) != 1:
        corner, cells = cells[0], cells[1:]
    numbers = [_integer(c) for c in cells]
    if len(numbers) < 2 or numbers != list(range(1, len(numbers) + 1)):
        return None
    return len(numbers), corner


def _parse_time(text) -> tuple[float, str | None] | None:
    """A time as (value, unit or None); clock times are in seconds."""
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        return float(text), None
    text = str(text).strip()
    clock = _CLOCK.match(text)
    if clock:
        hours, minutes, seconds = clock.groups()
        return int(hours or 0) * 3600 + int(minutes) * 60 + float(seconds), "s"
    match = _TIME_WITH_UNIT.match(text)
    if not match:
        return None
    unit = match.group(2) or None
    if unit is not None:
        unit = {"sec": "s", "second": "s", "seconds": "s", "mins": "min", "minute": "min",
                "minutes": "min", "hr": "h", "hour": "h", "hours": "h"}.get(unit.lower(), unit)
        if unit not in TIME_UNITS:
            return None
    return float(match.group(1)), unit


def _header(cells, number, context) -> dict:
    """plate / time of a header line (empty when the line is not one)."""
    text = cells if isinstance(cells, str) else "\t".join(_text(c) for c in _trim(cells))
    found = {}
    for key, value in _HEADER_KEY.findall(text):
        key, value = key.lower(), value.strip()
        if key == "plate" and value:
            found["plate"] = value
        elif key == "time":
            parsed = _parse_time(value)
            if parsed is None:
                raise DataError(Problem(None, None, value,
                                        f"line {number}: the block header's time cannot be "
                                        f"read; write e.g. 'time 30 s', 'time 0.5 min' or "
                                        f"'time 0:00:30' (units: {', '.join(TIME_UNITS)})"),
                                context)
            found["time"] = parsed
    return found


def _value(cell, comma, missing, number, column_label, context) -> float:
    if isinstance(cell, (int, float, np.number)) and not isinstance(cell, bool):
        return float(cell)
    text = str(cell).strip()
    if text.lower() in missing:
        return math.nan
    if comma:
        text = text.replace(",", ".")
    try:
        return float(text)
    except ValueError:
        raise DataError(Problem(None, None, str(cell).strip(),
                                f"line {number}, well {column_label}: not a number; "
                                f"to read it as a missing read pass "
                                f"missing=[{str(cell).strip()!r}]"), context) from None


def _blocks(lines, missing, context):
    lines = list(lines)
    records = list(_records(lines))
    previous_nonblank = None
    k = 0
    while k < len(records):
        number, cells, comma = records[k]
        found = _column_line(cells)
        if found is None:
            if _trim(cells):
                raw = lines[number - 1]
                previous_nonblank = (number, raw if isinstance(raw, str) else cells)
            k += 1
            continue
        n_columns, corner = found
        if n_columns not in _ROWS_FOR_COLUMNS and not _row_a_follows(records, k):
            # A line of numbers in the free text between blocks ("1,2,3" of a setting).
            previous_nonblank = (number, lines[number - 1] if isinstance(
                lines[number - 1], str) else cells)
            k += 1
            continue
        if n_columns not in _ROWS_FOR_COLUMNS:
            raise DataError(f"line {number}: a column line numbered 1 to {n_columns}; a plate "
                            f"has 12, 24 or 48 columns", context)
        n_rows = _ROWS_FOR_COLUMNS[n_columns]
        header = (_header(previous_nonblank[1], previous_nonblank[0], context)
                  if previous_nonblank is not None else {})
        if corner is not None and _text(corner) and "time" not in header:
            parsed = _parse_time(_text(corner).split(None, 1)[-1]
                                 if _text(corner).lower().startswith("time") else corner)
            if parsed is not None:
                header["time"] = parsed
        values = np.full((n_rows, n_columns), np.nan)
        for r in range(n_rows):
            k += 1
            if k >= len(records):
                raise DataError(f"line {number}: the block ends after {r} rows; a plate of "
                                f"{n_columns} columns has {n_rows} rows (A-"
                                f"{row_letter(n_rows - 1)}); the file looks cut", context)
            row_number, row_cells, row_comma = records[k]
            letter = _text(row_cells[0]) if row_cells else ""
            if row_index(letter) != r:
                raise DataError(Problem(None, None, letter,
                                        f"line {row_number}: expected row {row_letter(r)} of "
                                        f"the block that starts at line {number} (a plate of "
                                        f"{n_columns} columns has rows A-"
                                        f"{row_letter(n_rows - 1)})"), context)
            row_values = list(row_cells[1:])
            if len(row_values) > n_columns:
                # Empty cells past the last column are separators, not values.
                row_values = _trim(row_values)
            if len(row_values) != n_columns:
                raise DataError(f"line {row_number}: row {letter} has {len(row_values)} "
                                f"cells, the column line (line {number}) has {n_columns}; "
                                f"write an empty cell or NaN for a missing read", context)
            for c, cell in enumerate(row_values):
                values[r, c] = _value(cell, row_comma, missing, row_number,
                                      well_name(r, c + 1), context)
        time, unit = header.get("time", (None, None))
        yield _Block(header.get("plate"), time, unit, number, values)
        previous_nonblank = None
        k += 1


def parse_plate_matrix(lines, *, plate="plate", missing=(), context=None) -> pd.DataFrame:
    """Read plate-reader blocks (see the module notes) into a tidy table.

    Parameters
    ----------
    lines : iterable of str or of sequences
        Text lines, or rows of cells already split (e.g. a spreadsheet's rows).
    plate : str
        Plate name of the first blocks that name none.
    missing : iterable of str
        Further cell texts read as a missing read (e.g. ``["OVRFLW"]``), besides
        :data:`MISSING_MARKS`.
    context : str, optional
        Put in front of error messages (e.g. the file name).

    Returns
    -------
    pandas.DataFrame
        ``plate``, ``well``, ``time_s`` or ``time`` (kinetic reads only), ``signal``.

    Raises
    ------
    DataError
        No block found, a block cut short, a cell that is not a number, a time that
        cannot be read, two blocks of one plate and time; the message names the line.
    """
    marks = {m.lower() for m in MISSING_MARKS} | {str(m).strip().lower() for m in missing}
    blocks = list(_blocks(lines, marks, context))
    if not blocks:
        raise DataError("no plate block found: a block is a line of column numbers "
                        "(1 to 12, 24 or 48) followed by one line per row (A, B, ...)",
                        context)
    timed = [b.time is not None for b in blocks]
    if any(timed) and not all(timed):
        line = blocks[timed.index(False)].line
        raise DataError(f"line {line}: this block has no read time but others have; give "
                        f"every block of a kinetic run its time", context)
    units = {b.time_unit for b in blocks} if all(timed) else set()
    if None in units and len(units) > 1:
        line = next(b.line for b in blocks if b.time_unit is None)
        raise DataError(f"line {line}: this block's time has no unit but others have one; "
                        f"write the unit on every block (e.g. 'time 30 s')", context)
    seen = {}
    frames = []
    current = plate
    for block in blocks:
        current = block.plate or current
        key = (current, block.time)
        if key in seen:
            when = f"at time {block.time:g}" if block.time is not None else "without a time"
            raise DataError(f"line {block.line}: a second block of plate {current!r} {when} "
                            f"(the first is at line {seen[key]}); name each plate with a "
                            f"header line 'plate NAME' or give each read its time", context)
        seen[key] = block.line
        n_rows, n_columns = block.values.shape
        wells = [well_name(r, c) for r in range(n_rows) for c in range(1, n_columns + 1)]
        frame = pd.DataFrame({"plate": current, "well": wells,
                              "signal": block.values.ravel()})
        if block.time is not None:
            time = block.time if block.time_unit is None else float(
                to_seconds(block.time, block.time_unit))
            frame.insert(2, "time", time)
        frames.append(frame)
    table = pd.concat(frames, ignore_index=True)
    if all(timed):
        table = table.sort_values(["plate", "time"], kind="stable", ignore_index=True)
        if None not in units:
            table = table.rename(columns={"time": "time_s"})
    return table


def _row_a_follows(records, k) -> bool:
    following = _trim(records[k + 1][1]) if k + 1 < len(records) else []
    return bool(following) and row_index(_text(following[0])) == 0


def looks_like_plate_matrix(lines) -> bool:
    """Whether ``lines`` hold a column line of 12, 24 or 48 columns directly followed by a
    row ``A``."""
    records = list(_records(lines))
    for k, (_, cells, _) in enumerate(records[:-1]):
        found = _column_line(cells)
        if found and found[0] in _ROWS_FOR_COLUMNS and _row_a_follows(records, k):
            return True
    return False


def read_plate_matrix(path, *, plate=None, missing=()) -> pd.DataFrame:
    """Read a plate-reader matrix file (text; see the module notes).

    Parameters
    ----------
    path : str or os.PathLike
        A text file of blocks (UTF-8; a byte-order mark is allowed).
    plate : str, optional
        Plate name of the first blocks that name none; default the file's stem.
    missing : iterable of str
        Further cell texts read as a missing read.

    Returns
    -------
    pandas.DataFrame
        See :func:`parse_plate_matrix`.
    """
    path = Path(path)
    context = f"file {str(path)!r}"
    if not path.is_file():
        raise DataError("no such file", context)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as err:
        raise DataError(f"not UTF-8 text (byte {err.start})", context) from None
    return parse_plate_matrix(text.splitlines(), plate=plate or path.stem, missing=missing,
                              context=context)


def write_plate_matrix(table, path, *, signal="signal", time="time_s") -> Path:
    """Write a tidy table (plate, well, [time], signal) as blocks of the format above.

    The inverse of :func:`read_plate_matrix`: every plate (and read time) becomes one
    block, tab-separated, values written with ``repr`` so that they read back exactly.
    Each plate's block has the smallest standard format that holds its wells.
    """
    from .io import atomic_output
    from .wells import parse_well, plate_format_for

    has_time = time in table.columns
    lines = []
    groups = table.groupby(["plate", time] if has_time else ["plate"], sort=False)
    for key, group in groups:
        key = key if isinstance(key, tuple) else (key,)
        positions = [parse_well(w) for w in group["well"]]
        wells = PLATE_FORMATS[plate_format_for(max(p[0] for p in positions) + 1,
                                               max(p[1] for p in positions))]
        grid = np.full(wells, np.nan)
        for (r, c), v in zip(positions, group[signal].to_numpy(dtype=float)):
            grid[r, c - 1] = v
        unit = " s" if time == "time_s" else ""
        head = f"plate {key[0]}" + (f"\ttime {key[1]!r}{unit}" if has_time else "")
        lines += [head, "\t" + "\t".join(str(c) for c in range(1, wells[1] + 1))]
        for r in range(wells[0]):
            lines.append(row_letter(r) + "\t" + "\t".join(
                "" if np.isnan(v) else repr(float(v)) for v in grid[r]))
        lines.append("")
    path = Path(path)
    with atomic_output(path) as temporary:
        temporary.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path
