"""Excel workbooks in and out (``.xlsx``, through openpyxl, the optional ``excel`` extra).

Out: :func:`write_workbook` writes one sheet per table, numbers as numbers (a missing
value as an empty cell), and every text cell as text — including text that starts with
``=``, ``+``, ``-``, ``@`` (or a tab or carriage return), which a spreadsheet would
otherwise run as a formula (formula injection: a compound named ``=HYPERLINK(...)``).
Such cells are written as strings with the quote-prefix style, so the workbook shows the
exact input text and never evaluates it. :func:`campaign_sheets` gives a campaign's
ranked table, parameters and plate QC. Concentrations are written for people: one unit
per column chosen by magnitude and stated in the header (``ki (nM)``, ``ic50 (µM)``), a
parameter table's constants with a ``unit`` column; CSV and Parquet keep molar ``_M``
columns for machines. Numbers carry 16 significant digits (openpyxl's
number format; Excel shows 15): for copies exact to the bit use Parquet, CSV or the
results store.

In: :func:`read_workbook_rows` gives a sheet's rows of cell values (what the formulas
last computed, never the formulas); :func:`rows_to_table` turns them into a table.
"""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd

from ..errors import DataError
from ..units import readable_units
from .io import plain_scalar

__all__ = ["FORMULA_PREFIXES", "looks_like_formula", "write_workbook", "campaign_sheets",
           "read_workbook_rows", "rows_to_table"]

#: First characters that make a spreadsheet read a cell as a formula (OWASP's list of
#: CSV-injection triggers, common practice).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
# Excel's longest sheet name.
_SHEET_NAME_CHARS = 31


def _openpyxl(context):
    try:
        import openpyxl
    except ImportError:
        raise DataError("reading and writing .xlsx needs openpyxl: pip install "
                        "'inhibkin[excel]'", context) from None
    return openpyxl


def looks_like_formula(text) -> bool:
    """Whether a spreadsheet would take ``text`` for a formula."""
    return isinstance(text, str) and text.startswith(FORMULA_PREFIXES)


def _cell_value(value):
    """A table value as openpyxl should store it (None: an empty cell)."""
    value = plain_scalar(value)
    if isinstance(value, float):
        if math.isnan(value):
            return None
        # A worksheet cannot hold an infinity; its text keeps the meaning.
        return value if math.isfinite(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, pd.Timestamp):
        return value.to_pydatetime()
    return value if value is None or isinstance(value, (bool, int)) else str(value)


def write_workbook(sheets, path, *, readable=True) -> Path:
    """Write tables as the sheets of one ``.xlsx`` workbook, atomically.

    Parameters
    ----------
    sheets : dict
        Sheet name -> pandas.DataFrame, in order (names are cut to 31 characters).
    path : str or os.PathLike
    readable : bool
        Write molar columns (``ki_M``…) and a parameter table's constants in one unit per
        column chosen by magnitude, stated in the header (``ki (nM)``) or in a ``unit``
        column (:func:`inhibkin.units.readable_units`); False writes the tables as they
        are.

    Returns
    -------
    pathlib.Path
    """
    from .io import atomic_output

    path = Path(path)
    context = f"file {str(path)!r}"
    openpyxl = _openpyxl(context)
    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, table in sheets.items():
        if readable:
            table = readable_units(table)
        sheet = book.create_sheet(str(name)[:_SHEET_NAME_CHARS])
        sheet.append([str(c) for c in table.columns])
        for row in table.itertuples(index=False, name=None):
            sheet.append([_cell_value(v) for v in row])
        for row in sheet.iter_rows():
            for cell in row:
                if looks_like_formula(cell.value):
                    cell.data_type = "s"
                    cell.quotePrefix = True
        sheet.freeze_panes = "A2"
    with atomic_output(path) as temporary:
        book.save(temporary)
    return path


def campaign_sheets(campaign) -> dict:
    """The sheets of a campaign's workbook: ranking, parameters, plate QC (when the
    campaign had dose-response plates), time-dependent (when it carried time-dependent
    compounds: their own ranked table, in the reads' units)."""
    sheets = {"ranking": campaign.ranking, "parameters": campaign.parameters()}
    if len(campaign.plates):
        sheets["plate QC"] = campaign.plates
    time_dependent = getattr(campaign, "time_dependent", None)
    if time_dependent is not None:
        sheets["time-dependent"] = time_dependent.table
    return sheets


def read_workbook_rows(path, *, sheet=None) -> list[list]:
    """Every row of one sheet as a list of cell values (None for an empty cell)."""
    path = Path(path)
    context = f"file {str(path)!r}"
    openpyxl = _openpyxl(context)
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as err:  # zipfile and openpyxl raise their own types for damage
        raise DataError(f"unreadable .xlsx file ({type(err).__name__}: {str(err).strip()})",
                        context) from None
    try:
        if sheet is not None and sheet not in book.sheetnames:
            raise DataError(f"no sheet {sheet!r}; the workbook has {book.sheetnames}", context)
        worksheet = book[sheet] if sheet is not None else book.worksheets[0]
        return [list(row) for row in worksheet.iter_rows(values_only=True)]
    finally:
        book.close()


def rows_to_table(rows, *, context=None) -> pd.DataFrame:
    """A table from sheet rows: the first non-empty row is the header; empty rows and
    empty trailing columns are dropped.

    Raises
    ------
    DataError
        No header, an empty or repeated header cell (naming the sheet row), no rows.
    """
    numbered = [(k, row) for k, row in enumerate(rows, start=1)
                if any(v is not None and str(v).strip() for v in row)]
    if not numbered:
        raise DataError("the sheet is empty", context)
    header_line, header = numbered[0]
    while header and (header[-1] is None or not str(header[-1]).strip()):
        header = header[:-1]
    names = [None if v is None else str(v).strip() for v in header]
    if any(not n for n in names):
        empty = [k + 1 for k, n in enumerate(names) if not n]
        raise DataError(f"sheet row {header_line}: header cells {empty} are empty", context)
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise DataError(f"sheet row {header_line}: repeated headers {repeated}", context)
    body = [list(row[:len(names)]) + [None] * (len(names) - len(row))
            for _, row in numbered[1:]]
    if not body:
        raise DataError("the table has a header but no rows", context)
    table = pd.DataFrame(body, columns=names)
    return table.infer_objects()
