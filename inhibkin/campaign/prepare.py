"""The checks a campaign makes of its tables, once, at the boundary.

A problem of a whole table (a missing column, an undeclared unit, rows without a
compound, unknown roles, unreadable controls) raises one
:class:`~inhibkin.errors.DataError` here, before any fit; past this point the workers
trust the tables, and a problem of one compound's data fails that compound only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..rates.plates import ROLES, plate_qc
from ..units import CONCENTRATION_UNITS, parse_concentration, resolve_units
from ..validate import check_columns, check_options, normalise_roles, row_kind
from .result import plates_frame

__all__ = ["GridTable", "DoseTable", "prepare_grid", "prepare_dose", "unique_index"]

# Rows named in an error about rows without a compound.
_ROWS_SHOWN = 5


def unique_index(table):
    """The table itself, or a copy labelled 0…n-1 when its index labels repeat.

    Rows are picked by label past the boundary; repeated labels (``pd.concat`` without
    ``ignore_index``) would pick several rows for one.
    """
    if table is None or not isinstance(table, pd.DataFrame) or table.index.is_unique:
        return table
    return table.reset_index(drop=True)


@dataclass(frozen=True)
class GridTable:
    """The grid table checked: its full substrate and inhibitor headers and their units."""

    table: pd.DataFrame
    substrate: str
    substrate_unit: str
    inhibitor: str
    inhibitor_unit: str


def prepare_grid(table, *, compound, substrate, inhibitor, rate, units) -> GridTable:
    """Check the grid table as a whole: columns, declared units, a compound on every row."""
    check_columns(table, [compound, rate], "grid table")
    resolved = resolve_units(table.columns, [substrate, inhibitor], units=units,
                             context="grid table")
    (s_column, s_unit), (i_column, i_unit) = resolved[substrate], resolved[inhibitor]
    unnamed = table.index[table[compound].isna().to_numpy()]
    if len(unnamed):
        more = len(unnamed) - _ROWS_SHOWN
        raise DataError([Problem(compound, r, None, "row has no compound; fill it in or "
                                                    "drop the row", row_kind(table))
                         for r in unnamed[:_ROWS_SHOWN]]
                        + ([Problem(compound, None, None, f"and {more} more rows")]
                           if more > 0 else []), "grid table")
    return GridTable(table, s_column, s_unit, i_column, i_unit)


def _molar_column(values: pd.Series, unit: str) -> pd.Series:
    """Numbers converted to M; anything that is not a number kept as found, so the
    validation downstream can name it."""
    numeric = pd.to_numeric(values, errors="coerce")
    if numeric.notna().sum() == values.notna().sum():
        return numeric * CONCENTRATION_UNITS[unit]
    return values.astype(object).where(numeric.isna(), numeric * CONCENTRATION_UNITS[unit])


def _check_dose_table(frame, *, compound, plate, role, response, context):
    """Problems of the whole dose-response table, found before it is split."""
    roles = frame[role].to_numpy(dtype=object)
    unknown = ~np.isin(roles, ROLES)
    if unknown.any():
        rows = frame.index[unknown]
        raise DataError([Problem(role, r, roles[k], f"unknown role; use one of {ROLES}",
                                 row_kind(frame))
                         for r, k in zip(rows[:_ROWS_SHOWN],
                                         np.flatnonzero(unknown)[:_ROWS_SHOWN])], context)
    samples = frame[roles == "sample"]
    if samples.empty:
        raise DataError(Problem(role, None, "sample", "the table has no 'sample' wells"),
                        context)
    nameless = samples.index[samples[compound].isna().to_numpy()]
    if len(nameless):
        raise DataError([Problem(compound, r, None, "a 'sample' well has no compound",
                                 row_kind(frame)) for r in nameless[:_ROWS_SHOWN]], context)
    # The controls of every plate must be readable; a damaged plate fails its compounds.
    plate_qc(frame[roles != "sample"], plate=plate, role=role, response=response,
             strict=False)


def _concentration_option(name, value, table):
    """km= / enzyme=: a column name of ``table`` kept as it is, else a checked number in M.

    Text that names no column is read as a concentration with its unit ("40uM").
    """
    if value is None:
        return None
    if isinstance(value, str):
        if any(c == value or c.startswith(f"{value}_") or c.startswith(f"{value} ")
               for c in map(str, table.columns)):
            return value
        value = parse_concentration(value)
    check_options({name: value})
    return float(value)


@dataclass(frozen=True)
class DoseTable:
    """The dose-response table checked, every concentration column in M.

    Attributes
    ----------
    frame : pandas.DataFrame
        The table, roles normalised, concentrations in M.
    columns : tuple
        (role, header) pairs: plate, role, response, inhibitor, substrate.
    km, enzyme : float, str or None
        A number in M, or the header of a column in M.
    units : dict
        The unit each concentration column was declared in.
    plates : pandas.DataFrame
        Control statistics of every plate (:data:`~inhibkin.campaign.result.PLATE_COLUMNS`).
    """

    frame: pd.DataFrame
    columns: tuple
    km: object
    enzyme: object
    units: dict
    plates: pd.DataFrame


def _campaign_plates(frame, *, plate, role, response, threshold) -> pd.DataFrame:
    """Plate QC of the whole dose-response table, computed once.

    Every chunk's potency table carries all the control wells of its plates, so its
    plate rows equal these; computing them here once also covers plates that no chunk
    sees (controls only). Sample wells only name their plate: their signals play no part
    in Z' and are not read (a bad sample signal fails its compound, not the plate).
    """
    wells = frame[[plate, role, response]].copy()
    samples = (wells[role] == "sample").to_numpy()
    wells[response] = wells[response].astype(object).where(~samples, 0.0)
    return plates_frame(plate_qc(wells, plate=plate, role=role, response=response,
                                 threshold=threshold, strict=False))


def prepare_dose(dose_response, *, compound, inhibitor, substrate, plate, role, response,
                 km, enzyme, units, z_prime_threshold) -> DoseTable:
    """Check the dose-response table as a whole and convert its concentrations to M."""
    context = "dose-response table"
    check_columns(dose_response, [], context)
    km = _concentration_option("km", km, dose_response)
    enzyme = _concentration_option("enzyme", enzyme, dose_response)
    check_columns(dose_response, [compound, plate, role, response], context)
    names = [inhibitor, substrate] + [c for c in (km, enzyme) if isinstance(c, str)]
    resolved = resolve_units(dose_response.columns, names, units=units, context=context)
    frame = dose_response.copy()
    frame[role] = normalise_roles(frame[role]).to_numpy(dtype=object)
    for name in names:
        column, unit = resolved[name]
        frame[column] = _molar_column(frame[column], unit)
    _check_dose_table(frame, compound=compound, plate=plate, role=role, response=response,
                      context=context)
    columns = (("plate", plate), ("role", role), ("response", response),
               ("inhibitor", resolved[inhibitor][0]), ("substrate", resolved[substrate][0]))
    return DoseTable(
        frame, columns,
        km=resolved[km][0] if isinstance(km, str) else km,
        enzyme=resolved[enzyme][0] if isinstance(enzyme, str) else enzyme,
        units={n: resolved[n][1] for n in names},
        plates=_campaign_plates(frame, plate=plate, role=role, response=response,
                                threshold=z_prime_threshold))
