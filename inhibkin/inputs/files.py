"""One reader for every table a lab hands over: CSV, Parquet, Excel or a plate matrix.

:func:`read_any_table` decides by the file's suffix and, for text files, by its content:
a text file whose lines hold a plate block (a line of column numbers followed by row A;
see :mod:`inhibkin.inputs.plate_matrix`) is read as a plate matrix, any other as CSV.
An ``.xlsx`` sheet is read as a table, or as plate blocks when it holds them.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import DataError
from .plate_matrix import looks_like_plate_matrix, parse_plate_matrix

__all__ = ["read_any_table", "READABLE_SUFFIXES"]

#: Suffixes :func:`read_any_table` reads.
READABLE_SUFFIXES = (".csv", ".txt", ".tsv", ".parquet", ".pq", ".xlsx")
# Lines looked at when deciding whether a text file holds plate blocks.
_SNIFF_LINES = 2000


def read_any_table(path, *, sheet=None, plate=None, missing=(), text_columns=()):
    """Read a table from CSV, Parquet, ``.xlsx`` or a plate-reader matrix.

    Parameters
    ----------
    path : str or os.PathLike
    sheet : str, optional
        Worksheet of an ``.xlsx`` file (default the first).
    plate : str, optional
        Plate name of matrix blocks that name none (default the file's stem).
    missing : iterable of str
        Further cell texts of a matrix read as a missing read.
    text_columns : iterable of str
        Columns of a CSV file read as exact text besides :data:`inhibkin.inputs.io.TEXT_COLUMNS`
        (see :func:`inhibkin.inputs.io.read_table`).

    Returns
    -------
    pandas.DataFrame
        The table as it stands, or the tidy table of the plate blocks (plate, well,
        time_s or time, signal).

    Raises
    ------
    DataError
        When the file is missing, of an unknown kind, or cannot be read; the message
        names the file and, where it applies, the line.
    """
    from .io import read_table

    path = Path(path)
    context = f"file {str(path)!r}"
    suffix = path.suffix.lower()
    if suffix not in READABLE_SUFFIXES:
        raise DataError(f"unknown table format {path.suffix!r}; use one of "
                        f"{', '.join(READABLE_SUFFIXES)}", context)
    if not path.is_file():
        raise DataError("no such file", context)
    if suffix == ".xlsx":
        from .excel import read_workbook_rows, rows_to_table

        rows = read_workbook_rows(path, sheet=sheet)
        if looks_like_plate_matrix(rows):
            return parse_plate_matrix(rows, plate=plate or path.stem, missing=missing,
                                      context=context)
        return rows_to_table(rows, context=context)
    if suffix in (".parquet", ".pq"):
        return read_table(path, text_columns=text_columns)
    try:
        with open(path, encoding="utf-8-sig") as handle:
            head = [line for _, line in zip(range(_SNIFF_LINES), handle)]
    except UnicodeDecodeError as err:
        raise DataError(f"not UTF-8 text (byte {err.start})", context) from None
    if looks_like_plate_matrix(head):
        from .plate_matrix import read_plate_matrix

        return read_plate_matrix(path, plate=plate, missing=missing)
    if suffix == ".csv":
        return read_table(path, text_columns=text_columns)
    raise DataError("a text file that holds no plate block (a line of column numbers "
                    "followed by row A); a tidy table must be a .csv file", context)
