"""The ranked table of a campaign: its columns, the ranking constant and the sort.

A row travels as a dict of numbers (a bound as ``ki_low_M``/``ki_high_M``, flags as a
tuple) from the grid and dose routes (:mod:`~inhibkin.campaign.grid`,
:mod:`~inhibkin.campaign.dose`) to :func:`rank`; only :func:`written_out` turns the
flags into the text of the table's ``flags`` column.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.models import MODELS
from ..display.text import ranking_ki_unit
from ..units import restate_molar

__all__ = ["RANKING_COLUMNS", "STATUSES", "LE_KCAL_PER_PKI", "ranking_constant", "empty_row",
           "failed_row", "unexpected_row", "merge", "rank", "add_efficiencies",
           "compound_properties", "written_out", "FLAG_SEPARATOR"]

STATUSES = ("determined", "bound", "inactive", "inadequate", "time_dependent", "failed")

# Ligand efficiency LE = 1.37 * pKi / heavy atoms, in kcal/mol per heavy atom: 1.37 is
# 2.303·R·T at 298 K in kcal/mol (Hopkins, Groom & Alex 2004, Drug Discov. Today 9:430).
LE_KCAL_PER_PKI = 1.37

RANKING_COLUMNS = (
    "rank", "compound", "status", "verdict", "mechanism", "ki_parameter", "ki_M", "ki_low_M",
    "ki_high_M", "pki", "pki_low", "pki_high", "ki_reported", "kic_M", "kiu_M", "alpha",
    "ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill", "ki_source", "flags", "reason",
    "established",
)
# The numeric columns of the table (float, NaN where a row has no value).
_NUMBER_COLUMNS = ("ki_M", "ki_low_M", "ki_high_M", "pki", "pki_low", "pki_high", "kic_M",
                   "kiu_M", "alpha", "ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill")
#: How the flags of a row are joined when the table is written out.
FLAG_SEPARATOR = "; "


def ranking_constant(mechanism: str, alpha=None) -> tuple[str, float]:
    """Which constant ranks a compound of ``mechanism``, and its ratio to kic.

    The one rule both routes follow: competitive → kic, uncompetitive → kiu,
    noncompetitive → ki, mixed → the tighter of kic and kiu = alpha·kic.

    Parameters
    ----------
    mechanism : str
        One of the four inhibition mechanisms.
    alpha : float, optional
        kiu/kic (mixed only).

    Returns
    -------
    (str, float)
        The parameter name and the factor f with constant = f·(the constant an IC50
        converts to: kic for mixed, the mechanism's own constant otherwise).
    """
    if mechanism == "mixed":
        if alpha is not None and np.isfinite(alpha) and alpha < 1.0:
            return "kiu", float(alpha)
        return "kic", 1.0
    return MODELS[mechanism].ranking[0], 1.0


def empty_row(compound) -> dict:
    """A ranking row with nothing filled in (no flags)."""
    row = dict.fromkeys(RANKING_COLUMNS, np.nan)
    row.update(compound=compound, rank=pd.NA, verdict="", mechanism="", ki_parameter="",
               ki_reported="", ki_source="", flags=(), reason="", established="")
    return row


def failed_row(compound, reason, flags=()) -> dict:
    """The row of a compound that failed, and why."""
    row = empty_row(compound)
    row.update(status="failed", verdict="failed", reason=reason, flags=tuple(flags))
    return row


def unexpected_row(compound, err) -> dict:
    """The row of a compound whose fit raised an error nobody foresaw."""
    return failed_row(compound, f"unexpected error ({type(err).__name__}): {err}")


def merge(grid: dict, dose: dict) -> dict:
    """One row for a compound with both a grid and a dose-response curve.

    The grid fit gives Ki whenever it determined or bounded it; the curve adds IC50 and
    Hill slope, and gives Ki only when the grid could not. A time-dependent grid keeps
    its status: the curve's IC50 then depends on the read time too, so no Ki is
    converted from it.
    """
    potency = {k: dose[k] for k in ("ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill")}
    dose_failed = (f"dose-response failed: {dose['reason']}",)
    if grid["status"] in ("determined", "bound", "time_dependent"):
        out = dict(grid, **potency)
        if dose["status"] == "failed":
            out["flags"] = grid["flags"] + dose_failed
        return out
    if dose["status"] == "failed":
        return dict(grid, flags=grid["flags"] + dose_failed)
    return dict(dose, verdict=grid["verdict"],
                flags=dose["flags"] + (f"grid fit {grid['status']}: {grid['reason']}",))


def rank(rows) -> pd.DataFrame:
    """Sort: determined by pKi (high first), then bounds — "Ki < x" (more potent than
    the tested range) before "Ki > x", each by its limit — then inactive, then
    time-dependent, then failed; ties keep the input order. Flags stay tuples."""
    ranking = pd.DataFrame(rows, columns=list(RANKING_COLUMNS))
    status = ranking["status"].to_numpy()
    order = ranking["status"].map({s: k for k, s in enumerate(STATUSES)}).to_numpy()
    pki = ranking["pki"].to_numpy(dtype=float)
    upper = ranking["pki_high"].to_numpy(dtype=float)
    lower = ranking["pki_low"].to_numpy(dtype=float)
    below_range = (status == "bound") & np.isfinite(lower) & ~np.isfinite(upper)
    side = np.where(below_range, 0, 1)
    key = np.where(status == "determined", -pki,
                   np.where(below_range, -lower, np.where(status == "bound", -upper, 0.0)))
    key = np.nan_to_num(key, nan=np.inf)
    position = np.lexsort((np.arange(len(ranking)), key, side, order))
    ranking = ranking.iloc[position].reset_index(drop=True)
    determined = ranking["status"] == "determined"
    ranking["rank"] = pd.array([pd.NA] * len(ranking), dtype="Int64")
    ranking.loc[determined, "rank"] = np.arange(1, int(determined.sum()) + 1)
    for column in _NUMBER_COLUMNS:
        ranking[column] = ranking[column].astype(float)
    # One unit for the whole Ki column, chosen by magnitude (the rows wrote M).
    unit = ranking_ki_unit(ranking)
    ranking["ki_reported"] = [restate_molar(t, unit) for t in ranking["ki_reported"]]
    return ranking


def compound_properties(table, compound, columns) -> dict:
    """Per-compound heavy-atom count and logP: column → (values by compound, the
    compounds whose rows differ, whose value is NaN)."""
    out = {}
    for column in columns:
        if column not in table.columns:
            continue
        values = pd.to_numeric(table[column], errors="coerce")
        grouped = values.groupby(table[compound], sort=False)
        first, n_unique = grouped.first(), grouped.nunique()
        out[column] = (first.where(n_unique <= 1), n_unique[n_unique > 1].index)
    return out


def add_efficiencies(ranking, properties, heavy_atoms, logp) -> None:
    """LE and LipE from pKi (determined compounds only), in place."""
    if heavy_atoms in properties:
        values, clashes = properties[heavy_atoms]
        ranking["heavy_atoms"] = ranking["compound"].map(values)
        with np.errstate(divide="ignore", invalid="ignore"):
            le = LE_KCAL_PER_PKI * ranking["pki"] / ranking["heavy_atoms"]
        ranking["le"] = le.where(ranking["heavy_atoms"] > 0)
        _add_flag(ranking, clashes, f"{heavy_atoms} differs between rows; LE not computed")
    if logp in properties:
        values, clashes = properties[logp]
        ranking["logp"] = ranking["compound"].map(values)
        # LipE = pKi − logP (Leeson & Springthorpe 2007, Nat. Rev. Drug Discov. 6:881).
        ranking["lipe"] = ranking["pki"] - ranking["logp"]
        _add_flag(ranking, clashes, f"{logp} differs between rows; LipE not computed")


def _add_flag(ranking, compounds, text):
    hit = ranking["compound"].isin(list(compounds)).to_numpy()
    ranking["flags"] = pd.Series([(*f, text) if h else f for f, h in zip(ranking["flags"], hit)],
                                 index=ranking.index, dtype=object)


def written_out(ranking) -> pd.DataFrame:
    """The table with each row's flags as one text, :data:`FLAG_SEPARATOR` between them."""
    ranking["flags"] = pd.Series([FLAG_SEPARATOR.join(flags) for flags in ranking["flags"]],
                                 index=ranking.index, dtype=object)
    return ranking
