"""Plate controls: percent activity per well and the Z'-factor per plate.

Role vocabulary (the ``role`` column of a dose-response table):

``"sample"``
    A well with compound at a stated concentration.
``"max"``
    Full activity: enzyme and substrate, no inhibitor (100 % activity).
``"min"``
    Zero activity: no enzyme, or a saturating reference inhibitor (0 % activity).

Percent activity of a well is 100·(signal − mean(min))/(mean(max) − mean(min)), with the
means of the control wells on the same plate. The Z'-factor of a plate is

    Z' = 1 − 3·(σ_max + σ_min) / |μ_max − μ_min|

(Zhang, Chung & Oldenburg 1999, J. Biomol. Screen. 4:67–73), with sample standard
deviations (ddof = 1). A plate whose Z' is below :data:`Z_PRIME_THRESHOLD` (0.5, the
usual acceptance limit; common practice) is flagged ``"low_z_prime"``.
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..validate import check_columns, normalise_roles, numeric_column, row_kind

__all__ = ["ROLES", "Z_PRIME_THRESHOLD", "PlateQC", "z_prime", "plate_qc", "percent_activity",
           "no_controls", "ZERO_SPREAD"]

#: The role names understood in the ``role`` column.
ROLES = ("sample", "max", "min")

#: Plates with Z' below this are flagged (common practice).
Z_PRIME_THRESHOLD = 0.5

#: The flag of a compound on a plate whose control wells of one kind read exactly alike:
#: Z' = 1 then says nothing about the assay's noise (a saturated detector, copied values).
ZERO_SPREAD = "controls_without_spread"

# Control wells needed of each kind for a standard deviation.
_MIN_CONTROLS = 2


def _control_signals(values, name) -> np.ndarray:
    """Control signals as a float array, or a DataError naming what is wrong."""
    problems: list[Problem] = []
    frame = pd.DataFrame({name: np.atleast_1d(np.asarray(values, dtype=object)).ravel()})
    signal = numeric_column(frame, name, problems, allow_negative=True)
    if problems:
        raise DataError(problems, "z_prime")
    if signal.size < _MIN_CONTROLS:
        raise DataError(Problem(name, None, signal.size, f"{signal.size} control wells; a "
                                                         f"standard deviation needs at least "
                                                         f"{_MIN_CONTROLS}"), "z_prime")
    return signal


def z_prime(max_signal, min_signal) -> float:
    """Z'-factor from the two kinds of control wells of one plate.

    Parameters
    ----------
    max_signal, min_signal : array_like
        Signals of the full-activity and zero-activity control wells (any one unit).

    Returns
    -------
    float
        1 − 3(σ_max + σ_min)/|μ_max − μ_min| (Zhang, Chung & Oldenburg 1999), sample
        standard deviations; −inf when the two means are equal.

    Raises
    ------
    DataError
        When a signal is not a finite number, or either kind has fewer than two wells
        (a standard deviation needs two).
    """
    return _z_prime_of(_control_signals(max_signal, "max_signal"),
                       _control_signals(min_signal, "min_signal"))


def _z_prime_of(hi, lo) -> float:
    """Z' of two checked float arrays of at least two control signals each."""
    window = abs(hi.mean() - lo.mean())
    spread = 3.0 * (hi.std(ddof=1) + lo.std(ddof=1))
    if window == 0:
        return -np.inf
    return float(1.0 - spread / window)


@dataclass(frozen=True)
class PlateQC:
    """Control statistics and Z'-factor of every plate.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per plate (index ``plate``): n_max, mean_max, sd_max, n_min, mean_min,
        sd_min (signal units), z_prime, flagged (Z' below ``threshold``, or the plate
        could not be normalised), problem (why not, else empty).
    threshold : float
    """

    table: pd.DataFrame
    threshold: float = Z_PRIME_THRESHOLD

    @property
    def flagged(self) -> tuple:
        """Plates whose Z' is below the threshold (or that could not be normalised)."""
        return tuple(self.table.index[self.table["flagged"]])

    @property
    def no_spread(self) -> tuple:
        """Plates whose control wells of one kind read exactly alike (flagged; see
        :data:`ZERO_SPREAD`)."""
        table = self.table
        alike = (table["sd_max"] == 0) | (table["sd_min"] == 0)
        return tuple(table.index[alike.to_numpy()])

    @property
    def unusable(self) -> dict:
        """Plate to the reason it could not be normalised."""
        bad = self.table["problem"] != ""
        return dict(zip(self.table.index[bad], self.table["problem"][bad]))

    def to_frame(self) -> pd.DataFrame:
        """The per-plate table with ``plate`` as a column."""
        return self.table.reset_index()

    def summary(self) -> str:
        """Plain-text report."""
        head = (f"Plate QC: {len(self.table)} plates, Z' threshold {self.threshold:g}, "
                f"{len(self.flagged)} flagged")
        return head + "\n" + self.table.to_string(float_format=lambda x: f"{x:.4g}")

    def _repr_html_(self) -> str:
        return (f"<p><b>Plate QC</b> — Z' threshold {self.threshold:g}, "
                f"{len(self.flagged)} flagged: {html.escape(', '.join(map(str, self.flagged)))}"
                f"</p>" + self.table.to_html(float_format="{:.4g}".format))


@dataclass(frozen=True)
class _Controls:
    """Validated columns of a plate table."""

    plate: np.ndarray
    role: np.ndarray
    signal: np.ndarray


def no_controls(kind, role="role") -> Problem:
    """The problem of a table without a single ``kind`` ("max" or "min") control well."""
    return Problem(role, None, kind,
                   f"the table has no {kind!r} control wells; roles are 'max' (no inhibitor, "
                   f"full activity) and 'min' (no enzyme or full inhibition)")


def _read(df, *, plate, role, response) -> _Controls:
    check_columns(df, [plate, role, response])
    if len(df) == 0:
        raise DataError("the table has no rows")
    problems: list[Problem] = []
    signal = numeric_column(df, response, problems, allow_negative=True)
    given = df[role].to_numpy(dtype=object)
    roles = normalise_roles(df[role]).to_numpy(dtype=object)
    labels = df.index.to_numpy()
    unknown = ~np.isin(roles, ROLES)
    for row, value in list(zip(labels[unknown], given[unknown]))[:5]:
        problems.append(Problem(role, row, value, f"unknown role; use one of {ROLES}",
                                row_kind(df)))
    if problems:
        raise DataError(problems)
    return _Controls(df[plate].to_numpy(dtype=object), roles, signal)


def _wells_by_plate(plates):
    """(plate, row numbers of its wells in table order) for every plate, in order of
    first appearance: one sort of the table instead of a scan of it per plate (a
    10,000-compound campaign has thousands of plates). A missing plate name matches no
    well, as an element-wise comparison with it would."""
    codes, names = pd.factorize(plates, use_na_sentinel=False)
    order = np.argsort(codes, kind="stable")
    edges = np.searchsorted(codes[order], np.arange(len(names) + 1))
    empty = np.zeros(0, dtype=order.dtype)
    for k, name in enumerate(names):
        yield name, (empty if pd.isna(name) else order[edges[k]:edges[k + 1]])


def _plate_problems(name, hi, lo, *, role, response) -> list[Problem]:
    problems = []
    for kind, values in (("max", hi), ("min", lo)):
        if values.size < _MIN_CONTROLS:
            problems.append(Problem(role, None, values.size,
                                    f"plate {name!r} has {values.size} {kind!r} control wells; "
                                    f"at least {_MIN_CONTROLS} are needed"))
    if not problems and hi.mean() == lo.mean():
        problems.append(Problem(response, None, float(hi.mean()),
                                f"plate {name!r}: 'max' and 'min' controls have the same mean "
                                f"signal; activity cannot be normalised"))
    return problems


def plate_qc(df, *, plate="plate", role="role", response="signal",
             threshold=Z_PRIME_THRESHOLD, strict=True) -> PlateQC:
    """Z'-factor and control statistics of every plate.

    Parameters
    ----------
    df : pandas.DataFrame
        Tidy well table, one row per well.
    plate, role, response : str
        Column names; ``role`` holds ``"sample"``, ``"max"`` or ``"min"`` (see module
        docstring).
    threshold : float
        Plates with Z' below this are flagged.
    strict : bool
        When True (default) a plate that cannot be normalised raises; when False it
        gets NaN statistics and its reason in the ``problem`` column, so a batch can
        fail the compounds on that plate and go on with the others.

    Returns
    -------
    PlateQC

    Raises
    ------
    DataError
        When a plate lacks at least two ``max`` or two ``min`` control wells, or its
        control means are equal (naming the plate, the column and the value), and
        always when the whole table has no control wells of one kind.
    """
    check_columns(df, [plate, role, response])
    if len(df) == 0:
        # A campaign passes the control wells alone; none at all is a missing kind.
        raise DataError(no_controls("max", role))
    data = _read(df, plate=plate, role=role, response=response)
    for kind in ("max", "min"):
        if not np.any(data.role == kind):
            raise DataError(no_controls(kind, role))
    rows, problems = [], []
    for name, wells in _wells_by_plate(data.plate):
        hi = data.signal[wells[data.role[wells] == "max"]]
        lo = data.signal[wells[data.role[wells] == "min"]]
        found = _plate_problems(name, hi, lo, role=role, response=response)
        problems += found
        row = {"plate": name, "n_max": hi.size, "mean_max": np.nan, "sd_max": np.nan,
               "n_min": lo.size, "mean_min": np.nan, "sd_min": np.nan, "z_prime": np.nan,
               "flagged": True, "problem": "; ".join(str(p) for p in found)}
        if not found:
            # hi and lo are checked numbers already (_read, _plate_problems).
            z = _z_prime_of(hi, lo)
            row.update(mean_max=hi.mean(), sd_max=hi.std(ddof=1), mean_min=lo.mean(),
                       sd_min=lo.std(ddof=1), z_prime=z, flagged=bool(z < threshold))
            if row["sd_max"] == 0 or row["sd_min"] == 0:
                # Identical readings give Z' = 1 without measuring any noise: a saturated
                # detector or copied values, not a perfect assay. The plate can still be
                # normalised, so it is flagged, not unusable.
                row.update(flagged=True)
        rows.append(row)
    if problems and strict:
        raise DataError(problems)
    return PlateQC(pd.DataFrame(rows).set_index("plate"), threshold)


def percent_activity(df, qc: PlateQC, *, plate="plate", response="signal") -> np.ndarray:
    """Percent activity of every well from its plate's control means.

    Parameters
    ----------
    df : pandas.DataFrame
        The well table given to :func:`plate_qc`.
    qc : PlateQC
        Its result.
    plate, response : str
        Column names.

    Returns
    -------
    numpy.ndarray
        100·(signal − mean(min))/(mean(max) − mean(min)), one entry per row of ``df``.
    """
    signal = pd.to_numeric(df[response], errors="coerce").to_numpy(dtype=float)
    stats = qc.table.loc[df[plate].to_numpy(dtype=object)]
    top = stats["mean_max"].to_numpy(dtype=float)
    bottom = stats["mean_min"].to_numpy(dtype=float)
    return 100.0 * (signal - bottom) / (top - bottom)
