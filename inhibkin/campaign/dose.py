"""The dose-response route of a campaign: IC50 curves on plates, converted to Ki, one row.

:func:`fit_dose_chunk` is what a worker runs: :func:`~inhibkin.potency.table.potency_table`
on a chunk of compounds with the control wells of their plates. :func:`dose_row` turns
one compound's potency record into a ranking row, its bounds as
:class:`~inhibkin.core.bound.Bound` values and its flags as a tuple.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.models import MODELS
from ..errors import InhibkinError
from ..potency.conversion import CONVERSIONS
from ..potency.table import EngineFitter, potency_table
from .grid import REFITS
from .ranking import empty_row, ranking_constant

__all__ = ["DoseSettings", "fit_dose_chunk", "dose_results", "dose_row", "dose_chunks",
           "split_dose_chunk", "lost_dose_chunk"]


@dataclass(frozen=True)
class DoseSettings:
    """Everything a worker needs to run potency_table on one chunk (picklable).

    Concentration columns of the chunk are already in M.
    """

    compound: str
    columns: tuple
    km: object
    enzyme: object
    options: tuple
    batched: bool = False


def _failed(name, reason):
    return (name, {"status": "failed", "reason": reason}, None)


def fit_dose_chunk(chunk, settings: DoseSettings, mechanisms, keep_fits):
    """potency_table on one chunk: the compounds' sample wells plus the control wells of
    their plates. When the chunk as a whole is refused, each compound is run alone, so
    the problem stays with the compound that caused it."""
    frame, names = chunk
    try:
        outcome = [dose_results(frame, names, settings, mechanisms, keep_fits)]
    except InhibkinError:
        outcome = []
        for alone, (name,) in split_dose_chunk(settings.compound, chunk):
            try:
                outcome.append(dose_results(alone, [name], settings, mechanisms, keep_fits))
            except InhibkinError as err:
                outcome.append([_failed(name, str(err))])
    return [item for part in outcome for item in part]


def split_dose_chunk(compound, chunk):
    """A dose-response chunk as one-compound chunks, each with the chunk's controls."""
    frame, names = chunk
    by_compound = frame[compound]
    controls = frame[by_compound.isna() | ~by_compound.isin(names)]
    return [(pd.concat([frame[by_compound == name], controls]), [name]) for name in names]


def lost_dose_chunk(chunk, reason):
    """Failed results for the compounds of a dose-response chunk that could not be run."""
    return [_failed(name, reason) for name in chunk[1]]


def dose_results(frame, names, settings: DoseSettings, mechanisms, keep_fits):
    """(compound, potency record, fit or None) for each of ``names``, from one
    potency_table call on ``frame``."""
    columns = dict(settings.columns)
    fitter = EngineFitter() if settings.batched else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = potency_table(frame, compound=settings.compound, plate=columns["plate"],
                               role=columns["role"], concentration=columns["inhibitor"],
                               response=columns["response"], substrate=columns["substrate"],
                               substrate_unit="M", km=settings.km, enzyme=settings.enzyme,
                               mechanisms={n: mechanisms[n] for n in names if n in mechanisms},
                               fitter=fitter, **dict(settings.options))
    # Flags travel as tuples (a warning's text may hold commas) and bounds as Bound values,
    # from the potency table's records rather than its written-out text.
    extra = tuple(dict.fromkeys(str(w.message) for w in caught))
    refitted = set(fitter.refitted) if fitter is not None else set()
    rows = result.table.set_index("compound", drop=False)
    out = []
    for name in names:
        row = rows.loc[name].to_dict()
        row.update(result.records.get(name, {"ic50_bound": None, "ki_bound": None,
                                             "flags": ()}))
        row["flags"] = tuple(dict.fromkeys(row["flags"] + extra))
        row[REFITS] = int(name in refitted)
        out.append((name, row, result.fits.get(name) if keep_fits else None))
    return out


def dose_row(compound, potency: dict) -> dict:
    """A ranking row from one compound's potency record (concentrations in M)."""
    row = empty_row(compound)
    row.update(ki_source="converted IC50", reason=potency.get("reason", ""),
               mechanism=potency.get("mechanism", "") or "")
    flags = list(potency.get("flags", ()))
    if potency.get("status") != "ok":
        row.update(status="failed", verdict="failed", ki_source="", mechanism="",
                   flags=tuple(flags))
        return row
    for key, column in (("ic50", "ic50_M"), ("ic50_low", "ic50_low_M"),
                        ("ic50_high", "ic50_high_M"), ("pic50", "pic50"), ("hill", "hill")):
        row[column] = float(potency.get(key, np.nan))
    if potency.get("mechanism_source") == "default":
        flags.append(f"mechanism assumed ({row['mechanism']}) for the IC50 conversion")
    if potency.get("ki_method") == "morrison":
        flags.append("Ki from a Morrison tight-binding fit")
    mechanism = potency.get("mechanism", "") or ""
    alpha = float(potency.get("alpha", np.nan))
    if mechanism == "mixed" and np.isfinite(alpha):
        row["alpha"] = alpha
    # The converted IC50 is the mechanism's constant (kic for mixed); the ranking
    # constant follows the rule of ranking_constant, as on the grid route.
    parameter, factor = (ranking_constant(mechanism, alpha) if mechanism in CONVERSIONS
                         else ("", 1.0))
    ki, bound = float(potency.get("ki", np.nan)), potency.get("ki_bound")
    ic50_bound = potency.get("ic50_bound")
    if potency.get("curve_class") == "inactive":
        # No curve: not a potency, whatever the fitted midpoint.
        top = ic50_bound.value if ic50_bound is not None else np.nan
        row.update(status="inactive", ic50_M=np.nan, ic50_low_M=np.nan, ic50_high_M=np.nan,
                   pic50=np.nan, hill=np.nan, ki_parameter=parameter,
                   ki_reported=f"inactive: IC50 > {top:.3g} M, the highest concentration "
                               f"tested")
        if bound is not None:
            bound = bound.scaled(factor)
            row.update(ki_low_M=bound.low, ki_high_M=bound.high)
            row["ki_reported"] += f" (Ki {bound.text('M')})"
    elif np.isfinite(ki) and ki > 0:
        ki = ki * factor
        low, high = float(potency["ki_low"]) * factor, float(potency["ki_high"]) * factor
        row.update(status="determined", ki_M=ki, ki_low_M=low, ki_high_M=high,
                   pki=-math.log10(ki), pki_low=-math.log10(high) if high > 0 else np.nan,
                   pki_high=-math.log10(low) if low > 0 else np.nan,
                   ki_parameter=parameter, ki_reported=f"{ki:.3g} M [{low:.3g}, {high:.3g}]")
    elif bound is not None:
        bound = bound.scaled(factor)
        row.update(status="bound", ki_parameter=parameter, ki_reported=bound.text("M"),
                   ki_low_M=bound.low, ki_high_M=bound.high)
        if bound.side == ">":
            row.update(pki_high=-math.log10(bound.value))
        else:
            row.update(pki_low=-math.log10(bound.value))
    else:
        row.update(status="failed", verdict="failed",
                   reason=row["reason"] or "the IC50 could not be converted to a Ki")
    if row["status"] == "determined":
        law = MODELS.get(mechanism)
        if law is not None and len(law.ranking) == 1:
            # The one constant, and those of mixed it stands for (noncompetitive's ki is
            # kic = kiu).
            (constant,) = law.ranking
            for name in law.stands_for(constant):
                if f"{name}_M" in ("kic_M", "kiu_M"):
                    row[f"{name}_M"] = row["ki_M"]
        if mechanism == "mixed" and np.isfinite(alpha):
            kic = row["ki_M"] / factor
            row.update(kic_M=kic, kiu_M=alpha * kic)
    row["flags"] = tuple(dict.fromkeys(flags))
    return row


def dose_chunks(frame, compound, role, plate, chunk_size):
    """Chunks of compounds (sample wells) with the control wells of their plates, and
    the number of compounds in each."""
    samples = frame[frame[role] == "sample"]
    controls = frame[frame[role] != "sample"]
    controls_by_plate = {p: g for p, g in controls.groupby(plate, sort=False)}
    groups = list(samples.groupby(compound, sort=False))
    chunks, sizes = [], []
    for k in range(0, len(groups), chunk_size):
        part = groups[k:k + chunk_size]
        names = [name for name, _ in part]
        plates = pd.unique(pd.concat([g[plate] for _, g in part]))
        pieces = [g for _, g in part] + [controls_by_plate[p] for p in plates
                                         if p in controls_by_plate]
        chunks.append((pd.concat(pieces), names))
        sizes.append(len(names))
    return chunks, sizes
