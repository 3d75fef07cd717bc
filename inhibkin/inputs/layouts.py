"""Plate layouts: which compound, substrate and inhibitor each well holds, and its role.

A layout is a table, one row per well: ``plate``, ``well``, ``compound``,
``substrate_<unit>``, ``inhibitor_<unit>``, ``role`` — the plate map of
:func:`inhibkin.initial_rates` and the well columns of a dose-response table. The usual
layouts are written in one call:

* :func:`dilution_layout` — one compound per row, a dilution series along the columns,
  control columns named by role (by default column 11 ``max``, no inhibitor, and column
  12 ``min``, no enzyme);
* :func:`grid_layout` — one compound's substrate × inhibitor grid, substrate levels along
  the rows and inhibitor levels along the columns.

:func:`plate_grid` prints a layout as a plate for review; :func:`join_layout` joins a
layout to endpoint reads (plate, well, signal).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..units import normalise_unit
from .columns import did_you_mean, find_column
from .wells import PLATE_FORMATS, normalise_wells, parse_well, row_letter, well_name

__all__ = ["dilution_layout", "grid_layout", "plate_grid", "join_layout"]


def _format(wells) -> tuple[int, int]:
    if wells not in PLATE_FORMATS:
        raise DataError(Problem("wells", None, wells,
                                f"a plate has {', '.join(map(str, PLATE_FORMATS))} wells"))
    return PLATE_FORMATS[wells]


def dilution_layout(compounds, *, top, factor, unit, plate="P1", wells=96, substrate=None,
                    substrate_unit="uM", first_column=1, controls=None) -> pd.DataFrame:
    """One compound per row, a dilution series along the columns, control columns.

    Parameters
    ----------
    compounds : sequence of str
        One per row, from row A; at most the plate's number of rows.
    top : float
        Highest inhibitor concentration (in ``unit``), in ``first_column``.
    factor : float
        Dilution factor from one column to the next (> 1).
    unit : str
        Concentration unit of ``top`` (e.g. ``"uM"``).
    plate : str
    wells : {96, 384, 1536}
    substrate : float, optional
        The assay's substrate concentration (in ``substrate_unit``), on every well.
    first_column : int
        Column of the top concentration (1-based).
    controls : dict, optional
        Role -> columns, default ``{"max": [11], "min": [12]}`` on a 96-well plate (the
        last two columns of any plate); the series fills the columns from
        ``first_column`` up to the first control column. Control wells have no inhibitor.

    Returns
    -------
    pandas.DataFrame
        plate, well, compound, inhibitor_<unit>, [substrate_<unit>], role.
    """
    n_rows, n_columns = _format(wells)
    unit = normalise_unit(unit)
    compounds = list(compounds)
    if not 1 <= len(compounds) <= n_rows:
        raise DataError(Problem("compounds", None, len(compounds),
                                f"give 1 to {n_rows} compounds (one per row)"))
    if not factor > 1:
        raise DataError(Problem("factor", None, factor, "a dilution factor is > 1"))
    controls = controls if controls is not None else {"max": [n_columns - 1],
                                                       "min": [n_columns]}
    control_of = {c: role for role, cols in controls.items() for c in cols}
    last = min(control_of, default=n_columns + 1) - 1
    rows = []
    for r, compound in enumerate(compounds):
        for column in range(1, n_columns + 1):
            if column in control_of:
                role, inhibitor = control_of[column], 0.0
            elif first_column <= column <= last:
                role, inhibitor = "sample", top / factor ** (column - first_column)
            else:
                continue
            rows.append({"plate": plate, "well": well_name(r, column), "compound": compound,
                         f"inhibitor_{unit}": inhibitor, "role": role})
    table = pd.DataFrame(rows)
    if substrate is not None:
        table.insert(4, f"substrate_{normalise_unit(substrate_unit)}", float(substrate))
    return table


def grid_layout(compound, *, substrate, inhibitor, substrate_unit="uM", inhibitor_unit="nM",
                plate="P1", wells=96, replicates=1) -> pd.DataFrame:
    """One compound's substrate × inhibitor grid: substrate along rows, inhibitor along columns.

    Parameters
    ----------
    compound : str
    substrate, inhibitor : sequence of float
        Levels (in ``substrate_unit`` / ``inhibitor_unit``); substrate level k fills
        row k, inhibitor level j fills columns j·replicates + 1 … (j + 1)·replicates.
    replicates : int
        Adjacent wells per (substrate, inhibitor) pair.

    Returns
    -------
    pandas.DataFrame
        plate, well, compound, substrate_<unit>, inhibitor_<unit>, role (``sample``).
    """
    n_rows, n_columns = _format(wells)
    s_unit, i_unit = normalise_unit(substrate_unit), normalise_unit(inhibitor_unit)
    if len(substrate) > n_rows or len(inhibitor) * replicates > n_columns:
        raise DataError(f"{len(substrate)} substrate levels × {len(inhibitor)} inhibitor "
                        f"levels × {replicates} replicates do not fit a {wells}-well plate "
                        f"({n_rows} rows × {n_columns} columns)")
    rows = [{"plate": plate, "well": well_name(r, j * replicates + k + 1),
             "compound": compound, f"substrate_{s_unit}": float(s),
             f"inhibitor_{i_unit}": float(i), "role": "sample"}
            for r, s in enumerate(substrate) for j, i in enumerate(inhibitor)
            for k in range(replicates)]
    return pd.DataFrame(rows)


def plate_grid(layout, *, value="compound", plate=None, width=10) -> str:
    """A layout drawn as a plate: rows A…, columns 1…, each well's ``value`` (cut to
    ``width`` characters; ``.`` for a well the layout does not list).

    Parameters
    ----------
    layout : pandas.DataFrame
        plate, well and the ``value`` column.
    value : str
        Column shown in the wells (e.g. ``"compound"``, ``"role"``, ``"inhibitor_uM"``),
        matched as the other stages match headers: ``"substrate"`` finds
        ``substrate_uM`` or ``Substrate (uM)``.
    plate : str, optional
        Which plate (default: every plate, one grid after another).
    """
    found = find_column(layout.columns, value, label_ok=True)
    if found is None:
        raise DataError(Problem(value, None, None, "no such column in the layout; "
                                                   + did_you_mean(layout.columns, value)))
    value = found[0]
    plates = [plate] if plate is not None else list(pd.unique(layout["plate"]))
    blocks = []
    for name in plates:
        one = layout[layout["plate"] == name]
        positions = [parse_well(w) for w in normalise_wells(one["well"])]
        n_rows, n_columns = next(f for f in PLATE_FORMATS.values()
                                  if max(p[0] for p in positions) < f[0]
                                  and max(p[1] for p in positions) <= f[1])
        cells = np.full((n_rows, n_columns), ".", dtype=object)
        for (r, c), v in zip(positions, one[value]):
            text = f"{v:.4g}" if isinstance(v, (float, np.floating)) else str(v)
            cells[r, c - 1] = text[:width]
        lines = [f"plate {name} ({value})",
                 "   " + " ".join(f"{c:>{width}}" for c in range(1, n_columns + 1))]
        lines += [f"{row_letter(r):<3}" + " ".join(f"{cells[r, c]:>{width}}"
                                                   for c in range(n_columns))
                  for r in range(n_rows)]
        blocks.append("\n".join(lines))
    return "\n\n".join(blocks)


def join_layout(reads, layout, *, signal="signal") -> pd.DataFrame:
    """Endpoint reads (plate, well, signal) joined to a layout: one row per layout well.

    Wells of the reads that the layout does not list are dropped (empty wells of the
    plate); a layout well without a read is refused, naming it.
    """
    keys = ["plate", "well"]
    layout = layout.assign(plate=layout["plate"].astype(str),
                           well=normalise_wells(layout["well"], context="layout").to_numpy())
    reads = reads.assign(plate=reads["plate"].astype(str))
    joined = layout.merge(reads[keys + [signal]], on=keys, how="left", indicator=True)
    missing = joined["_merge"] == "left_only"
    if missing.any():
        first = joined.loc[missing, keys].head(5)
        raise DataError([Problem("well", None, f"{p} {w}", "the layout lists this well but "
                                 "the reads have no value for it")
                         for p, w in zip(first["plate"], first["well"])], "layout")
    return joined.drop(columns="_merge")
