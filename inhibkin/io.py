"""Tables in and out: CSV or Parquet, read with clear errors, written atomically.

Reading refuses a file that cannot be trusted — missing, empty, not text, a row with
more or fewer fields than the header, a CSV that does not end with a line break (the
trace of a cut, even one inside the last value) — with a
:class:`~inhibkin.errors.DataError` that names the file and the line. Writing goes to a
temporary file in the destination's directory and is then renamed over the destination
(:func:`os.replace`, atomic on POSIX and Windows), so an interrupted run never leaves a
half-written table behind.
"""

from __future__ import annotations

import csv
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path

import pandas as pd

from .errors import DataError, Problem

__all__ = ["read_table", "write_table", "TABLE_FORMATS"]

# File suffix to format. Anything else is refused rather than guessed.
TABLE_FORMATS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}

# How many malformed lines a message lists before it summarises the rest.
_MAX_LINES_LISTED = 5


def _format_of(path: Path) -> str:
    fmt = TABLE_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise DataError(f"unknown table format {path.suffix!r}; use one of "
                        f"{', '.join(TABLE_FORMATS)}", context=f"file {str(path)!r}")
    return fmt


def _check_csv_shape(path: Path, context: str) -> None:
    """Every record must have as many fields as the header; the file must not stop mid-row.

    pandas pads a short row with NaN without a word, which would turn a truncated
    download into missing values; this pass makes that an error instead.
    """
    problems = []
    with open(path, newline="", encoding="utf-8-sig") as handle:
        reader = csv.reader(handle)
        header = next(reader, None)
        if header is None:
            raise DataError("the file is empty", context)
        width = len(header)
        last_line, last_fields = reader.line_num, width
        for record in reader:
            last_line, last_fields = reader.line_num, len(record)
            if record and len(record) != width:
                problems.append(Problem(None, None, None,
                                        f"line {reader.line_num}: {len(record)} fields, the "
                                        f"header has {width}"))
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


def read_table(path) -> pd.DataFrame:
    """Read a CSV or Parquet table.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.csv``, ``.parquet`` or ``.pq`` file. CSV is read as UTF-8 (a byte-order
        mark is allowed), comma-separated, first line the header.

    Returns
    -------
    pandas.DataFrame

    Raises
    ------
    DataError
        When the file is missing, empty, not UTF-8 text, malformed (a row whose number
        of fields differs from the header's), truncated (a CSV without a final line
        break counts as truncated), an unreadable Parquet file, or
        has a header but no rows. The message names the file (and the line for CSV).
    """
    path = Path(path)
    context = f"file {str(path)!r}"
    fmt = _format_of(path)
    if not path.is_file():
        raise DataError("no such file", context)
    if fmt == "csv":
        try:
            _check_csv_shape(path, context)
            table = pd.read_csv(path, encoding="utf-8-sig")
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


def write_table(table, path) -> Path:
    """Write a DataFrame as CSV or Parquet, atomically.

    The table goes to a temporary file in the same directory, which is then renamed
    onto ``path``; on any failure the temporary file is removed and ``path`` is left
    as it was (absent or the previous version).

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
            table.to_csv(temporary, index=False)
        else:
            try:
                table.to_parquet(temporary, index=False)
            except ImportError:
                raise DataError("writing Parquet needs pyarrow: pip install 'inhibkin[parquet]'",
                                context=f"file {str(path)!r}") from None
    return path
