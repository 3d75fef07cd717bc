"""The result of a campaign: :class:`Campaign`, read-only all the way down.

Its tables are :class:`~inhibkin.core.readonly.ReadOnlyFrame` values and its mappings
:class:`~inhibkin.core.readonly.ReadOnlyMapping` values, so nothing reached through a
Campaign can be edited in place; ``to_frame()`` gives the ranked table as an ordinary,
editable copy (as every result's ``to_frame()`` gives its main table).
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping
from dataclasses import dataclass, field

import pandas as pd

from ..core.readonly import readonly_frame, readonly_mapping
from ..core.weighting import weighting_label
from ..display.text import ki_texts, ranking_ki_unit, text_table
from ..errors import OptionError
from .ranking import STATUSES

__all__ = ["Campaign", "PLATE_COLUMNS", "plates_frame", "SUMMARY_ROWS",
           "check_time_dependent"]

#: Columns of :attr:`Campaign.plates` (those of :meth:`inhibkin.rates.plates.PlateQC.to_frame`).
PLATE_COLUMNS = ("plate", "n_max", "mean_max", "sd_max", "n_min", "mean_min", "sd_min",
                 "z_prime", "flagged", "problem")
#: Rows shown by :meth:`Campaign.summary` and ``_repr_html_()``.
SUMMARY_ROWS = 10


@dataclass(frozen=True)
class Campaign:
    """Every compound of a campaign, fitted, and the ranked table.

    Attributes
    ----------
    ranking : pandas.DataFrame
        One row per input compound, ranked (see :mod:`inhibkin.campaign`): rank, compound,
        status, verdict, mechanism, ki_parameter, ki_M, ki_low_M, ki_high_M (interval at
        ``level``), pki, pki_low, pki_high, ki_reported (text), kic_M, kiu_M, alpha,
        ic50_M (and interval), pic50, hill, ki_source, flags, reason, established (for an
        ambiguous verdict: the leading mechanism, the determined constants with their
        intervals and the bounds on the others, as text); plus heavy_atoms,
        logp, le (kcal/mol per heavy atom) and lipe when those inputs were given.
        Concentrations in M.
    fits : Mapping
        compound → :class:`~inhibkin.mechanism.fit.MechanismFit` (constants in M) for every
        compound whose grid was fitted; compounds that failed validation have no entry.
    options : Mapping
        The settings of the run: weighting, intervals, level, engine (as asked),
        grid_engine and dose_engine (the path each table took: ``"batched"``,
        ``"lmfit"``, the function's name, or ``""`` without that table), n_fallback
        (fits the lmfit path redid because the batched engine did not converge them:
        n_fallback_grid model fits — plus relative weightings it set — and
        n_fallback_dose curves), declared units, seconds taken.
    potency_fits : Mapping
        compound → :class:`~inhibkin.potency.curve.DoseResponseFit` (concentrations in M) for
        every compound whose dose-response curve was fitted.
    plates : pandas.DataFrame
        Control statistics and Z'-factor of every plate of the dose-response table, one
        row per plate in table order, columns :data:`PLATE_COLUMNS`: plate, n_max,
        mean_max, sd_max, n_min, mean_min, sd_min (signal units), z_prime, flagged (Z'
        below the threshold, or the plate could not be normalised) and problem (why
        not, else empty). The numbers are those :func:`~inhibkin.potency.table.potency_table`
        uses to normalise the wells. Empty (same columns) without a dose-response table.
    time_dependent : TimeDependentRanking or None
        The time-dependent compounds ranked apart (``fit_campaign(time_dependent=...)``,
        :func:`inhibkin.fit_time_dependent_ranking`): its ``table`` and ``fits``; None
        when the campaign had none.
    """

    ranking: pd.DataFrame
    fits: Mapping = field(repr=False)
    options: Mapping = field(default_factory=dict)
    potency_fits: Mapping = field(default_factory=dict, repr=False)
    plates: pd.DataFrame = field(default_factory=lambda: plates_frame(None), repr=False)
    time_dependent: object = field(default=None, repr=False)

    def __post_init__(self):
        # Frozen all the way down: campaign.ranking.loc[...] = ... and
        # campaign.options["units"][...] = ... are refused; to_frame() gives a copy to edit.
        for name in ("ranking", "plates"):
            object.__setattr__(self, name, readonly_frame(getattr(self, name)))
        for name in ("fits", "potency_fits"):
            object.__setattr__(self, name, readonly_mapping(getattr(self, name), nested=False))
        object.__setattr__(self, "options", readonly_mapping(self.options))

    @property
    def counts(self) -> dict:
        """Number of compounds per status."""
        counts = self.ranking["status"].value_counts()
        return {s: int(counts.get(s, 0)) for s in STATUSES}

    @property
    def failed(self) -> pd.DataFrame:
        """The failed compounds with their reasons."""
        return self.ranking.loc[self.ranking["status"] == "failed", ["compound", "reason"]]

    def to_frame(self) -> pd.DataFrame:
        """The ranked table (a copy)."""
        return self.ranking.copy()

    def parameters(self) -> pd.DataFrame:
        """Tidy table of every model's parameters for every fitted compound (M)."""
        frames = []
        for compound, fit in self.fits.items():
            frame = fit.to_frame()
            frame.insert(0, "compound", compound)
            frame.insert(1, "verdict", fit.verdict)
            frames.append(frame)
        if not frames:
            return pd.DataFrame(columns=["compound", "verdict", "model", "is_best", "parameter",
                                         "estimate", "se", "ci_low", "ci_high", "determined"])
        return pd.concat(frames, ignore_index=True)

    def _head(self):
        counts = self.counts
        parts = ", ".join(f"{n} {s}" for s, n in counts.items() if n)
        return f"Campaign of {len(self.ranking)} compounds: {parts}"

    def summary(self, rows=SUMMARY_ROWS) -> str:
        """Plain text: counts by status, the top of the ranking, the time-dependent
        compounds ranked apart (how many, and where their table is), every failure's
        reason."""
        width = 78
        shown = self.ranking.head(rows)[["rank", "compound", "status", "verdict", "mechanism",
                                         "pki", "ki_source"]]
        unit = ranking_ki_unit(self.ranking)
        shown.insert(5, f"Ki ({unit}) [95% CI]",
                     [t for t, _ in ki_texts(self.ranking.head(rows), unit)])
        lines = ["=" * width, self._head(),
                 f"({self.options.get('intervals', '')} intervals at "
                 f"{100 * self.options.get('level', 0.95):g}%, "
                 f"{weighting_label(self.options.get('weighting', ''))} weighting)", "-" * width,
                 text_table(shown, index=False, float_format=lambda x: f"{x:.2f}")]
        if len(self.plates):
            flagged = self.plates.loc[self.plates["flagged"], "plate"]
            lines += ["-" * width, f"{len(self.plates)} dose-response plates, {len(flagged)} "
                                   f"flagged (low Z' or unusable controls)"
                                   + (f": {', '.join(map(str, flagged))}" if len(flagged) else "")]
        if self.time_dependent is not None:
            lines += ["-" * width, *_time_dependent_lines(self.time_dependent.table, width)]
        failed = self.failed
        if len(failed):
            lines += ["-" * width, "Failed:"]
            lines += [f"  {c}: {r}" for c, r in zip(failed["compound"], failed["reason"])]
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from ..display.html import campaign_html

        return campaign_html(self)


def _time_dependent_lines(table, width) -> list[str]:
    """How many time-dependent compounds were ranked apart, by what, and where to look."""
    determined = int((table["status"] == "determined").sum())
    metrics = ", ".join(sorted(set(table["metric"].dropna().astype(str))))
    return textwrap.wrap(
        f"{len(table)} time-dependent compounds ({determined} determined, "
        f"{len(table) - determined} failed) ranked apart by {metrics}, not in the table "
        "above: Campaign.time_dependent.table, the report's time-dependent section, the "
        "store's time_dependent table, the workbook's time-dependent sheet.", width)


def check_time_dependent(value) -> None:
    """``fit_campaign(time_dependent=...)``: None or a TimeDependentRanking."""
    if value is None:
        return
    from ..time_dependent.ranking import TimeDependentRanking

    if not isinstance(value, TimeDependentRanking):
        raise OptionError(f"time_dependent must be a TimeDependentRanking (from "
                          f"inhibkin.fit_time_dependent_ranking), got {type(value).__name__}")


def plates_frame(qc) -> pd.DataFrame:
    """:attr:`Campaign.plates` from a PlateQC (None: the empty table)."""
    if qc is None:
        return pd.DataFrame({name: pd.Series(dtype=dtype) for name, dtype in zip(
            PLATE_COLUMNS, (object, int, float, float, int, float, float, float, bool,
                            object))})
    return qc.to_frame()[list(PLATE_COLUMNS)]
