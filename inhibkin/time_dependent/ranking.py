"""The ranked table of time-dependent compounds, kept apart from the pKi ranking.

A covalent inhibitor ranks by log10(kinact/KI) (second-order inactivation efficiency;
from the two-step scheme, or the slope kobs/[I] when the one-step scheme is chosen), a
slow-binding reversible inhibitor by its overall constant Ki* (pKi* = −log10 Ki*, most
potent first) with its residence time beside it. Neither is put on one axis with the pKi
of rapid reversible inhibitors: :func:`rank_time_dependent` gives its own table, shown as
its own section by the report and written as its own file by ``inhibkin rank``.

:func:`fit_time_dependent_ranking` gives the same table inside a
:class:`TimeDependentRanking`, which also keeps every compound's
:class:`~inhibkin.time_dependent.TimeDependentFit` (the report draws its progress curves
and kobs against [I] from them). Handed to :func:`inhibkin.fit_campaign` as
``time_dependent=``, it travels with the :class:`~inhibkin.Campaign` into the results
store (table ``time_dependent``) and the ``.xlsx`` workbook (sheet ``time-dependent``).
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..core.readonly import readonly_frame, readonly_mapping
from ..errors import InhibkinError
from .depletion import check_depletion
from .results import fit_time_dependent

__all__ = ["rank_time_dependent", "fit_time_dependent_ranking", "TimeDependentRanking",
           "TIME_DEPENDENT_COLUMNS", "CLASSES"]

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
            # One-step slow binding: the overall constant is Ki = koff/kon itself.
            for suffix, source in (("", "estimate"), ("_low", "ci_low"), ("_high", "ci_high")):
                row["ki_star" + suffix] = _value(c, "ki", source)
            row["note"] = "one-step: Ki* = Ki = koff/kon (Fieller interval)"
        row["score"] = -math.log10(row["ki_star"]) if row["ki_star"] > 0 else np.nan
    if not np.isfinite(row["score"]):
        row.update(status="failed", reason=f"{CLASSES['covalent' if covalent else 'slow binding']}"
                                           " could not be set from the fit")
    return row


def rank_time_dependent(reads, *, compound="compound", well="well", time="time",
                        signal="signal", inhibitor="inhibitor", irreversible=True,
                        substrate=None, km=None, product_per_signal=None,
                        level=0.95) -> pd.DataFrame:
    """Fit every compound's kinetic reads and rank them within their class.

    The table of :func:`fit_time_dependent_ranking` (same arguments), as an ordinary
    DataFrame.
    """
    return fit_time_dependent_ranking(
        reads, compound=compound, well=well, time=time, signal=signal, inhibitor=inhibitor,
        irreversible=irreversible, substrate=substrate, km=km,
        product_per_signal=product_per_signal, level=level).to_frame()


@dataclass(frozen=True)
class TimeDependentRanking:
    """The time-dependent compounds ranked within their class, and their fits.

    Attributes
    ----------
    table : pandas.DataFrame
        Columns :data:`TIME_DEPENDENT_COLUMNS`, one row per input compound (see
        :func:`fit_time_dependent_ranking`).
    fits : Mapping
        compound → :class:`~inhibkin.time_dependent.TimeDependentFit` of every compound
        whose fit succeeded.
    """

    table: pd.DataFrame
    fits: Mapping = field(default_factory=dict, repr=False)

    def __post_init__(self):
        object.__setattr__(self, "table", readonly_frame(self.table))
        object.__setattr__(self, "fits", readonly_mapping(self.fits, nested=False))

    def to_frame(self) -> pd.DataFrame:
        """The ranked table (an ordinary, editable copy)."""
        return self.table.copy()

    def summary(self) -> str:
        """Plain text: the class's metric and the ranked table."""
        shown = self.table[["rank", "compound", "status", "scheme", "score",
                            "kinact_over_ki", "ki_star", "residence_time"]]
        metrics = ", ".join(sorted(set(self.table["metric"].astype(str))))
        return "\n".join([f"Time-dependent compounds ranked by {metrics}",
                          shown.to_string(index=False,
                                          float_format=lambda x: f"{x:.4g}")])

    def _repr_html_(self) -> str:
        head = html.escape(f"Time-dependent ranking of {len(self.table)} compounds")
        return (f"<div><p><b>{head}</b></p>"
                + self.table.to_html(float_format="{:.4g}".format, max_rows=40) + "</div>")


def fit_time_dependent_ranking(reads, *, compound="compound", well="well", time="time",
                               signal="signal", inhibitor="inhibitor", irreversible=True,
                               substrate=None, km=None, product_per_signal=None,
                               level=0.95) -> TimeDependentRanking:
    """Fit every compound's kinetic reads, rank them within their class, keep the fits.

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
    product_per_signal : float, optional
        Product (substrate's unit) per signal unit: carry each well's substrate
        depletion (:func:`inhibkin.fit_time_dependent`; irreversible only).
    level : float
        Confidence level of the intervals.

    Returns
    -------
    TimeDependentRanking
        ``table``: columns :data:`TIME_DEPENDENT_COLUMNS`, one row per input compound
        under its exact input text: ``determined`` rows ranked by ``score`` (the class's
        metric, higher is more potent), then ``failed`` rows with their ``reason``.
        kinact and 1/residence time are per the reads' time unit, KI and Ki* in the
        inhibitor's unit, kinact/KI per inhibitor unit per time unit.
    """
    covalent = bool(irreversible)
    check_depletion(product_per_signal, substrate, km, covalent)
    label = "covalent" if covalent else "slow binding"
    rows, fits = [], {}
    for name, part in reads.groupby(compound, sort=False):
        try:
            fit = fit_time_dependent(part, well=well, time=time, signal=signal,
                                     inhibitor=inhibitor, irreversible=covalent,
                                     substrate=substrate, km=km,
                                     product_per_signal=product_per_signal, level=level,
                                     global_fit=False, compound=name)
            row = _row(name, fit, covalent)
            fits[name] = fit
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
    return TimeDependentRanking(table, fits)
