"""Plain-text tables for the ``summary()`` methods and the command line.

One rule for every printed table: a missing value (NaN, None, pandas' NA) prints as
:data:`MISSING`, never as ``NaN`` or ``<NA>``, and numbers print with a fixed format.
"""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd

__all__ = ["MISSING", "format_estimate", "text_table"]

#: How a missing value is printed.
MISSING = "-"


def _cell(value, float_format):
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return MISSING
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        return float_format(float(value))
    return str(value)


def text_table(frame: pd.DataFrame, *, float_format=lambda x: f"{x:.4g}", index=True) -> str:
    """``frame`` as fixed-width text, missing values as :data:`MISSING`.

    Parameters
    ----------
    frame : pandas.DataFrame
    float_format : callable
        Float to text (integers and booleans print as they are).
    index : bool
        Print the index as the first column.
    """
    cells = frame.astype(object).map(lambda x: _cell(x, float_format))
    if index:
        cells.index = pd.Index([_cell(x, float_format) for x in frame.index],
                               name=frame.index.name)
    return cells.to_string(index=index)


def format_estimate(row) -> str:
    """An estimate as text: the number when determined, else the bound ("> x")."""
    if row["determined"]:
        return f"{row['estimate']:.4g}"
    if np.isfinite(row["ci_low"]) and row["ci_low"] > 0:
        return f"> {row['ci_low']:.3g}"
    return "not determined"
