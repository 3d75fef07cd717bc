"""Plain-text tables for the ``summary()`` methods and the command line.

One rule for every printed table: a missing value (NaN, None, pandas' NA) prints as
:data:`MISSING`, never as ``NaN`` or ``<NA>``, and numbers print with a fixed format.
"""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd

from ..units import CONCENTRATION_UNITS, family_unit, significant_text

__all__ = ["MISSING", "format_estimate", "text_table", "ranking_ki_unit", "ki_texts"]

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


def ranking_ki_unit(ranking: pd.DataFrame) -> str:
    """The one unit of a ranked table's Ki column, chosen by magnitude from its Ki values
    and limits (:func:`inhibkin.units.family_unit`)."""
    return family_unit(ranking[c] for c in ("ki_M", "ki_low_M", "ki_high_M")
                       if c in ranking.columns)


def ki_texts(ranking: pd.DataFrame, unit: str) -> list[tuple[str, float]]:
    """Each ranked row's Ki as written under a header that states ``unit``: the value and
    interval (``"1.65 [1.49, 1.82]"``), a limit (``"> 30"``, ``"< 0.5"``) or, without a
    number, the row's ``ki_reported`` text; with the molar value the row sorts by (NaN
    when none)."""
    per_unit = 1.0 / CONCENTRATION_UNITS[unit]

    def number(x) -> str:
        return significant_text(float(x) * per_unit)

    out = []
    for r in ranking.to_dict("records"):
        ki, low, high = (float(r.get(c, np.nan)) for c in ("ki_M", "ki_low_M", "ki_high_M"))
        status = r.get("status")
        if status == "determined" and np.isfinite(ki):
            out.append((f"{number(ki)} [{number(low)}, {number(high)}]", ki))
        elif status == "bound" and low > 0 and not np.isfinite(high):
            out.append((f"> {number(low)}", low))
        elif status == "bound" and np.isfinite(high) and not low > 0:
            out.append((f"< {number(high)}", high))
        else:
            text = r.get("ki_reported", "")
            out.append((text if isinstance(text, str) else "", np.nan))
    return out
