"""The ranked table of time-dependent compounds, kept apart from the pKi ranking.

A covalent inhibitor ranks by log10(kinact/KI) (second-order inactivation efficiency;
from the two-step scheme, or the slope kobs/[I] when the one-step scheme is chosen), a
slow-binding reversible inhibitor by its overall constant Ki* (pKi* = −log10 Ki*, most
potent first) with its residence time beside it. Neither is put on one axis with the pKi
of rapid reversible inhibitors: :func:`rank_time_dependent` gives its own table, shown as
its own section by the report and written as its own file by ``inhibkin rank``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..errors import InhibkinError
from .results import fit_time_dependent

__all__ = ["rank_time_dependent", "TIME_DEPENDENT_COLUMNS", "CLASSES"]

#: The two classes and the quantity each ranks by.
CLASSES = {"covalent": "log10(kinact/KI)", "slow binding": "pKi* = -log10(Ki*)"}

TIME_DEPENDENT_COLUMNS = (
    "rank", "compound", "status", "class", "metric", "scheme", "score",
    "kinact_over_ki", "kinact_over_ki_low", "kinact_over_ki_high", "kinact", "ki",
    "ki_star", "ki_star_low", "ki_star_high", "residence_time", "residence_time_low",
    "residence_time_high", "note", "reason",
)


def _value(constants, name, column="estimate"):
    return float(constants.loc[name, column]) if name in constants.index else np.nan


def _row(name, fit, covalent) -> dict:
    c = fit.constants
    row = dict.fromkeys(TIME_DEPENDENT_COLUMNS, np.nan)
    row.update(compound=name, status="determined", scheme=fit.scheme, note="", reason="")
    # One-step covalent: kobs = k·[I], so the slope is kinact/KI itself.
    efficiency = "k5_over_ki" if "k5_over_ki" in c.index else "kon"
    row.update(kinact_over_ki=_value(c, efficiency),
               kinact_over_ki_low=_value(c, efficiency, "ci_low"),
               kinact_over_ki_high=_value(c, efficiency, "ci_high"),
               kinact=_value(c, "k5"), ki=_value(c, "ki"))
    for column in ("residence_time", "ki_star"):
        for suffix, source in (("", "estimate"), ("_low", "ci_low"), ("_high", "ci_high")):
            row[column + suffix] = _value(c, column, source)
    if covalent:
        score = row["kinact_over_ki"]
        row["score"] = math.log10(score) if score > 0 else np.nan
    else:
        if "ki_star" not in c.index and "koff" in c.index:
            # One-step slow binding: Ki* = Ki = koff/kon (no interval is propagated).
            row["ki_star"] = _value(c, "koff") / _value(c, "kon")
            row["note"] = "one-step: Ki* = koff/kon, point estimate only"
        row["score"] = -math.log10(row["ki_star"]) if row["ki_star"] > 0 else np.nan
    if not np.isfinite(row["score"]):
        row.update(status="failed", reason=f"{CLASSES['covalent' if covalent else 'slow binding']}"
                                           " could not be set from the fit")
    return row


def rank_time_dependent(reads, *, compound="compound", well="well", time="time",
                        signal="signal", inhibitor="inhibitor", irreversible=True,
                        substrate=None, km=None, level=0.95) -> pd.DataFrame:
    """Fit every compound's kinetic reads and rank them within their class.

    Parameters
    ----------
    reads : pandas.DataFrame
        Tidy kinetic reads of many compounds (as :func:`inhibkin.fit_time_dependent`
        takes for one), with a ``compound`` column.
    compound, well, time, signal, inhibitor : str
        Column names.
    irreversible : bool
        Covalent (rank by log10(kinact/KI)) or reversible slow binding (rank by Ki*).
    substrate, km : float, optional
        Assay substrate and Km (same unit) for KI = KI,app/(1 + S/Km); without them the
        constants are apparent (the order of substrate-competitive compounds assayed at
        one S is the same).
    level : float
        Confidence level of the intervals.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TIME_DEPENDENT_COLUMNS`, one row per input compound under its exact
        input text: ``determined`` rows ranked by ``score`` (the class's metric, higher is
        more potent), then ``failed`` rows with their ``reason``. kinact and 1/residence
        time are per the reads' time unit, KI and Ki* in the inhibitor's unit, kinact/KI
        per inhibitor unit per time unit.
    """
    covalent = bool(irreversible)
    label = "covalent" if covalent else "slow binding"
    rows = []
    for name, part in reads.groupby(compound, sort=False):
        try:
            fit = fit_time_dependent(part, well=well, time=time, signal=signal,
                                     inhibitor=inhibitor, irreversible=covalent,
                                     substrate=substrate, km=km, level=level,
                                     global_fit=False, compound=name)
            row = _row(name, fit, covalent)
        except InhibkinError as err:
            row = dict.fromkeys(TIME_DEPENDENT_COLUMNS, np.nan)
            row.update(compound=name, status="failed", scheme="", note="", reason=str(err))
        rows.append(row | {"class": label, "metric": CLASSES[label]})
    table = pd.DataFrame(rows, columns=list(TIME_DEPENDENT_COLUMNS))
    failed = (table["status"] != "determined").to_numpy()
    key = np.nan_to_num(-table["score"].to_numpy(dtype=float), nan=np.inf)
    table = table.iloc[np.lexsort((np.arange(len(table)), key, failed))].reset_index(drop=True)
    ranked = table["status"] == "determined"
    table["rank"] = pd.array([pd.NA] * len(table), dtype="Int64")
    table.loc[ranked, "rank"] = np.arange(1, int(ranked.sum()) + 1)
    return table
