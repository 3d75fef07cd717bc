"""Tables in and out: CSV or Parquet, read with clear errors, written atomically.

Reading refuses a file that cannot be trusted — missing, empty, not text, a row with
more or fewer fields than the header, a CSV that does not end with a line break (the
trace of a cut, even one inside the last value) — with a
:class:`~inhibkin.errors.DataError` that names the file and the line. Writing goes to a
temporary file in the destination's directory and is then renamed over the destination
(:func:`os.replace`, atomic on POSIX and Windows), so an interrupted run never leaves a
half-written table behind.

Identifiers are text. The columns named in :data:`TEXT_COLUMNS` (and any the caller
adds) are read as the exact text of the file: ``007`` stays ``007``, ``1``, ``1.0`` and
``1e0`` stay three identifiers, and words such as ``NA``, ``None``, ``null``, ``nan`` or
``#N/A`` are identifiers too; only an empty cell is a missing identifier. A table read
from a CSV file is indexed by the file's line numbers (the header is line 1, the first
row line 2, index name ``"line"``), so messages about a row name the line to look at.

CSV outputs neutralise text cells a spreadsheet would run as a formula (a first
character ``=``, ``+``, ``-``, ``@``, tab or carriage return, as OWASP recommends for CSV
files): such a cell is written with a leading apostrophe. Numbers, and text that is a
plain number such as ``-2``, are written as they are; Parquet outputs are never changed.
"""

from __future__ import annotations

import csv
import os
import re
import stat
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, Problem

__all__ = ["read_table", "write_table", "TABLE_FORMATS", "TEXT_COLUMNS", "LINE_INDEX",
           "neutralise_formulas", "plain_scalar"]

# File suffix to format. Anything else is refused rather than guessed.
TABLE_FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}

#: Columns read as text, whatever they look like: identifiers, never numbers.
TEXT_COLUMNS = frozenset({"compound", "plate", "well", "role"})
#: Index name of a table read from CSV: its labels are the file's line numbers.
LINE_INDEX = "line"
# Cells pandas reads as missing in the number columns (its own defaults); in the text
# columns only an empty cell is missing.
_NA_WORDS = ("", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan",
             "1.#IND", "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan",
             "null")
# First characters a spreadsheet reads as the start of a formula (OWASP, CSV injection).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
# Separators a CSV may have been saved with by mistake, and their names.
_OTHER_SEPARATORS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}

# How many malformed lines a message lists before it summarises the rest.
_MAX_LINES_LISTED = 5


def _format_of(path: Path) -> str:
    fmt = TABLE_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise DataError(f"unknown table format {path.suffix!r}; use one of "
                        f"{', '.join(TABLE_FORMATS)}", context=f"file {str(path)!r}")
    return fmt


def _check_header(header: list, context: str) -> None:
    """Refuse a header that names one column twice (also after trimming spaces).

    pandas would rename the second ``rate`` to ``rate.1`` and fit the first without a
    word; which one was meant cannot be known.
    """
    seen = {}
    for position, name in enumerate(header, start=1):
        key = name.strip()
        if key in seen:
            raise DataError(Problem(name, 1, None,
                                    f"the header names column {key!r} twice (fields "
                                    f"{seen[key]} and {position}); rename or drop one",
                                    "line"), context)
        seen[key] = position


def _separator_hint(header: list) -> str:
    """A sentence naming the separator a one-field header seems to use, or ''."""
    if len(header) != 1:
        return ""
    for separator, name in _OTHER_SEPARATORS.items():
        if separator in header[0]:
            return (f"; the header has one field and contains {name} ({separator!r}): the "
                    f"file seems to be separated by {name}. inhibkin reads comma-separated "
                    f"CSV with a point as decimal mark: save it as such")
    return ""


def _check_csv_shape(path: Path, context: str) -> list:
    """Every record must have as many fields as the header; the file must not stop mid-row.

    pandas pads a short row with NaN without a word, which would turn a truncated
    download into missing values; this pass makes that an error instead. Returns the
    header.
    """
    problems = []
    with open(path, newline="", encoding="utf-8-sig") as handle:
        reader = csv.reader(handle)
        header = next(reader, None)
        if header is None:
            raise DataError("the file is empty", context)
        _check_header(header, context)
        width = len(header)
        last_line, last_fields = reader.line_num, width
        for record in reader:
            last_line, last_fields = reader.line_num, len(record)
            if record and len(record) != width:
                problems.append(Problem(None, None, None,
                                        f"line {reader.line_num}: {len(record)} fields, the "
                                        f"header has {width}{_separator_hint(header)}"))
    with open(path, "rb") as raw:
        raw.seek(0, os.SEEK_END)
        size = raw.tell()
        raw.seek(max(size - 1, 0))
        ends_with_newline = raw.read(1) in (b"\n", b"\r")
    if not ends_with_newline:
        # A file cut inside its last value still has every field, so the missing line
        # break is the only trace of the cut; refusing it is safer than reading 0.12
        # where the file said 0.1234.
        raise DataError(f"the file ends in the middle of line {last_line} ({last_fields} of "
                        f"{width} fields, no final line break); it looks truncated. If it "
                        f"is complete, end it with a line break", context)
    if problems:
        extra = len(problems) - _MAX_LINES_LISTED
        problems = problems[:_MAX_LINES_LISTED]
        if extra > 0:
            problems.append(Problem(None, None, None, f"and {extra} more malformed lines"))
        raise DataError(problems, context)
    return header


def _check_is_file(path: Path, context: str) -> None:
    """A clear message for a path that is missing or is not a regular file."""
    if not path.exists():
        raise DataError("no such file", context)
    if path.is_dir():
        raise DataError("is a directory, not a table file; give the path of the .csv or "
                        ".parquet file inside it", context)
    mode = path.stat().st_mode
    if not stat.S_ISREG(mode):
        kind = "a named pipe (FIFO)" if stat.S_ISFIFO(mode) else "not a regular file"
        raise DataError(f"is {kind}; inhibkin reads tables from regular files (a pipe "
                        f"cannot be checked before it is read): save the table to a file",
                        context)


def _read_csv(path: Path, header: list, text_columns) -> pd.DataFrame:
    """pandas.read_csv with the text columns as exact text and rows labelled by line."""
    # Matched as the column mapping matches headers (case and surrounding spaces aside),
    # so a "Compound" column is as much text as a "compound" one.
    wanted = {str(name).strip().lower() for name in text_columns}
    text = [name for name in header if str(name).strip().lower() in wanted]
    na_values = {name: ([""] if name in text else list(_NA_WORDS)) for name in header}
    table = pd.read_csv(path, encoding="utf-8-sig", dtype={name: str for name in text},
                        keep_default_na=False, na_values=na_values)
    table.index = pd.RangeIndex(2, len(table) + 2, name=LINE_INDEX)
    return table


def read_table(path, *, text_columns=()) -> pd.DataFrame:
    """Read a CSV or Parquet table.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.csv``, ``.parquet`` or ``.pq`` file. CSV is read as UTF-8 (a byte-order
        mark is allowed), comma-separated, first line the header.
    text_columns : iterable of str
        Columns read as exact text besides :data:`TEXT_COLUMNS` (e.g. a compound column
        with another name). Only an empty cell of a text column is missing.

    Returns
    -------
    pandas.DataFrame
        From CSV, indexed by the file's line numbers (index name ``"line"``; the first
        row is line 2).

    Raises
    ------
    DataError
        When the file is missing, a directory or a pipe, empty, its header names a
        column twice, not UTF-8 text, malformed (a row whose number
        of fields differs from the header's), truncated (a CSV without a final line
        break counts as truncated), an unreadable Parquet file, or
        has a header but no rows. The message names the file (and the line for CSV).
    """
    path = Path(path)
    context = f"file {str(path)!r}"
    fmt = _format_of(path)
    _check_is_file(path, context)
    text_columns = TEXT_COLUMNS | set(text_columns)
    if fmt == "csv":
        try:
            header = _check_csv_shape(path, context)
            table = _read_csv(path, header, text_columns)
        except UnicodeDecodeError as err:
            raise DataError(f"not UTF-8 text (byte {err.start}); save the table as UTF-8 CSV",
                            context) from None
        except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error) as err:
            raise DataError(f"malformed CSV: {str(err).strip()}", context) from None
    else:
        try:
            table = pd.read_parquet(path)
        except ImportError:
            raise DataError("reading Parquet needs pyarrow: pip install 'inhibkin[parquet]'",
                            context) from None
        except Exception as err:  # pyarrow raises its own types for every kind of damage
            raise DataError(f"unreadable Parquet file ({type(err).__name__}: "
                            f"{str(err).strip()}); it may be truncated", context) from None
    if len(table) == 0:
        raise DataError("the table has a header but no rows", context)
    return table


@contextmanager
def atomic_output(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` when the block ends.

    On any failure the temporary file is removed and ``path`` is left as it was (absent or
    the previous version). The file gets the permissions a plain ``open`` would give it
    (0o666 less the umask), not the private ones of a temporary file.
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    if not directory.is_dir():
        raise DataError("the output directory does not exist", context=f"file {str(path)!r}")
    descriptor, name = tempfile.mkstemp(dir=directory, prefix=f".{path.name}.", suffix=".tmp")
    os.close(descriptor)
    temporary = Path(name)
    try:
        yield temporary
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        # Flush to disk before the rename, so a crash cannot leave the new name pointing
        # at an empty file.
        with open(temporary, "rb+") as handle:
            os.fsync(handle.fileno())
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise


def _is_formula(cell) -> bool:
    return (isinstance(cell, str) and cell[:1] in _FORMULA_START
            and not _PLAIN_NUMBER.fullmatch(cell))


def neutralise_formulas(table: pd.DataFrame) -> pd.DataFrame:
    """The table with every text cell a spreadsheet would run prefixed by an apostrophe.

    Only text (object or string) columns are touched; a cell that is a plain number
    written as text (``-2``, ``+1.5e3``) is left alone, since a spreadsheet reads it as
    that number and runs nothing.
    """
    out = None
    for column in _text_columns_of(table):
        values = table[column]
        hit = values.map(_is_formula).to_numpy(dtype=bool)
        if hit.any():
            out = table.copy() if out is None else out
            out[column] = values.mask(hit, "'" + values.astype(str))
    return table if out is None else out


def _text_columns_of(table: pd.DataFrame) -> list:
    return list(table.columns[[pd.api.types.is_object_dtype(dtype)
                               or pd.api.types.is_string_dtype(dtype)
                               for dtype in table.dtypes]])


def _csv_quoting(table: pd.DataFrame) -> int:
    """QUOTE_MINIMAL, or QUOTE_NONNUMERIC when a text cell holds a carriage return.

    pandas quotes a cell holding a line feed but not one holding a lone carriage return,
    which a reader then takes for the end of the line; quoting every text cell keeps
    such a cell whole.
    """
    for column in _text_columns_of(table):
        if table[column].map(lambda cell: isinstance(cell, str) and "\r" in cell).any():
            return csv.QUOTE_NONNUMERIC
    return csv.QUOTE_MINIMAL


def write_table(table, path) -> Path:
    """Write a DataFrame as CSV or Parquet, atomically.

    The table goes to a temporary file in the same directory, which is then renamed
    onto ``path``; on any failure the temporary file is removed and ``path`` is left
    as it was (absent or the previous version). In CSV, text cells that start like a
    spreadsheet formula (``=``, ``+``, ``-``, ``@``, tab, carriage return) get a leading
    apostrophe (see :func:`neutralise_formulas`).

    Parameters
    ----------
    table : pandas.DataFrame
    path : str or os.PathLike
        Destination; the suffix (``.csv``, ``.parquet``, ``.pq``) sets the format.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    fmt = _format_of(path)
    with atomic_output(path) as temporary:
        if fmt == "csv":
            safe = neutralise_formulas(table)
            safe.to_csv(temporary, index=False, quoting=_csv_quoting(safe))
        else:
            try:
                table.to_parquet(temporary, index=False)
            except ImportError:
                raise DataError("writing Parquet needs pyarrow: pip install 'inhibkin[parquet]'",
                                context=f"file {str(path)!r}") from None
    return path


def plain_scalar(value):
    """A table value as a plain Python value, for writers that take no numpy or pandas
    scalars (a worksheet, JSON): missing values (None, NA, NaT) as None; numpy booleans,
    integers and floats as bool, int and float; anything else as it is."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value)
    return value
