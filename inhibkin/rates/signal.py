"""From detector signal to concentration: Beer–Lambert, standard curves, blank subtraction.

An initial rate is a slope, so what :mod:`inhibkin.rates.initial` needs from a conversion is its
*sensitivity* (signal per unit concentration), the concentration unit it yields, and the
signal range over which it may be trusted. Two conversions provide that:

* :class:`BeerLambert` — absorbance A = ε·l·c (ε in M⁻¹cm⁻¹, path length l in cm), so the
  sensitivity is ε·l per molar. :data:`CHROMOPHORES` lists a few common chromophores with
  their molar absorption coefficients and the source of each value.
* :class:`StandardCurve` — a straight line signal = intercept + slope·c fitted by least
  squares to standard wells (:func:`fit_standard_curve`), with its R² and the range of the
  standards; reads outside that range are flagged by :func:`inhibkin.rates.initial.initial_rates`.

:func:`blank_signal` gives, for every read of a sample well, the mean signal of the blank
wells (no enzyme) of the same plate and substrate level at the same time, interpolated
linearly in time where the blanks were read at other times; subtracting it removes the
background and any non-enzymatic drift from the slope.
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import DataError, Problem
from ..units import normalise_unit
from ..validate import check_columns, numeric_column

__all__ = [
    "Chromophore",
    "CHROMOPHORES",
    "BeerLambert",
    "StandardCurve",
    "fit_standard_curve",
    "blank_signal",
]


@dataclass(frozen=True)
class Chromophore:
    """A light-absorbing species and its molar absorption coefficient.

    Attributes
    ----------
    name : str
    wavelength_nm : float
        Wavelength of the coefficient (nm).
    epsilon : float
        Molar absorption coefficient (M⁻¹cm⁻¹).
    conditions : str
        Solvent, pH or other condition the value holds for.
    source : str
        Where the value comes from; ``from memory`` marks a value recalled from the
        source named rather than read from it while writing this table.
    """

    name: str
    wavelength_nm: float
    epsilon: float
    conditions: str
    source: str


# Each value below was recalled from the publication named, not re-read from it while
# writing this table (hence "from memory"); check the source before relying on a digit.
CHROMOPHORES = {
    "NADH": Chromophore(
        "NADH", 340.0, 6220.0, "aqueous buffer, neutral pH",
        "Horecker, B. L. & Kornberg, A. (1948) J. Biol. Chem. 175:385-390 (from memory)"),
    "NADPH": Chromophore(
        "NADPH", 340.0, 6220.0, "aqueous buffer, neutral pH",
        "Horecker, B. L. & Kornberg, A. (1948) J. Biol. Chem. 175:385-390 (from memory)"),
    "TNB": Chromophore(
        "TNB (2-nitro-5-thiobenzoate, Ellman's assay)", 412.0, 14150.0, "pH 7.3-8",
        "Riddles, P. W., Blakeley, R. L. & Zerner, B. (1979) Anal. Biochem. 94:75-81 "
        "(from memory)"),
    "p-nitroaniline": Chromophore(
        "p-nitroaniline", 410.0, 8800.0, "aqueous buffer",
        "Erlanger, B. F., Kokowsky, N. & Cohen, W. (1961) Arch. Biochem. Biophys. "
        "95:271-278 (from memory)"),
}


def _positive(name, value):
    number = float(value)
    if not np.isfinite(number) or number <= 0:
        raise DataError(Problem(name, None, value, "must be a positive finite number"))
    return number


@dataclass(frozen=True)
class BeerLambert:
    """Absorbance to concentration by Beer–Lambert: A = ε·l·c.

    Parameters
    ----------
    epsilon : float
        Molar absorption coefficient of the species read (M⁻¹cm⁻¹).
    path_length : float
        Optical path length (cm). In a microplate it depends on the well volume;
        measure it or use the reader's path-length correction.
    label : str
        Name of the species, for reports.

    Notes
    -----
    The concentration unit produced is molar (``unit = "M"``); :attr:`sensitivity` is
    absorbance per molar, ε·l.
    """

    epsilon: float
    path_length: float = 1.0
    label: str = "chromophore"

    def __post_init__(self):
        _positive("epsilon", self.epsilon)
        _positive("path_length", self.path_length)

    @classmethod
    def of(cls, chromophore, *, path_length=1.0) -> BeerLambert:
        """The conversion for one entry of :data:`CHROMOPHORES` (e.g. ``"NADH"``)."""
        if chromophore not in CHROMOPHORES:
            raise DataError(Problem(None, None, chromophore,
                                    f"unknown chromophore; known: {', '.join(CHROMOPHORES)}"))
        entry = CHROMOPHORES[chromophore]
        return cls(entry.epsilon, path_length, entry.name)

    @property
    def unit(self) -> str:
        """Concentration unit produced: molar."""
        return "M"

    @property
    def sensitivity(self) -> float:
        """Absorbance per molar, ε·l."""
        return self.epsilon * self.path_length

    @property
    def signal_range(self):
        """None: Beer–Lambert has no calibrated range of its own (see ``ceiling``)."""
        return None

    def concentration(self, absorbance):
        """Concentration (M) of the species for absorbance values (blank-corrected)."""
        return np.asarray(absorbance, dtype=float) / self.sensitivity

    def summary(self) -> str:
        return (f"Beer–Lambert: {self.label}, ε = {self.epsilon:g} M⁻¹cm⁻¹, "
                f"l = {self.path_length:g} cm, sensitivity {self.sensitivity:g} per M")

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"label": self.label, "epsilon": self.epsilon,
                              "path_length": self.path_length, "unit": self.unit}])

    def _repr_html_(self) -> str:
        return f"<p>{html.escape(self.summary())}</p>"


@dataclass(frozen=True)
class StandardCurve:
    """A straight-line standard curve, signal = intercept + slope·concentration.

    Attributes
    ----------
    slope : float
        Signal per concentration unit (the sensitivity).
    intercept : float
        Signal at zero concentration.
    slope_se, intercept_se : float
        Least-squares standard errors.
    r_squared : float
        Coefficient of determination of the line.
    n_standards : int
    concentration_range, signal_range : tuple of float
        Lowest and highest standard concentration and signal (fitted line at the
        extremes), the range over which the curve was calibrated.
    unit : str or None
        Concentration unit of the standards.
    """

    slope: float
    intercept: float
    slope_se: float
    intercept_se: float
    r_squared: float
    n_standards: int
    concentration_range: tuple[float, float]
    signal_range: tuple[float, float]
    unit: str | None = None

    @property
    def sensitivity(self) -> float:
        """Signal per concentration unit (the slope)."""
        return self.slope

    def concentration(self, signal):
        """Concentration for raw signal values, (signal − intercept) / slope."""
        return (np.asarray(signal, dtype=float) - self.intercept) / self.slope

    def outside(self, signal):
        """True where a signal lies outside the range spanned by the standards."""
        low, high = self.signal_range
        values = np.asarray(signal, dtype=float)
        return (values < low) | (values > high)

    def summary(self) -> str:
        unit = self.unit or "concentration unit"
        return (f"Standard curve: signal = {self.intercept:.4g} + {self.slope:.4g}·c "
                f"(slope se {self.slope_se:.2g}), R² = {self.r_squared:.5f}, "
                f"{self.n_standards} standards from {self.concentration_range[0]:g} to "
                f"{self.concentration_range[1]:g} {unit}")

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{
            "slope": self.slope, "slope_se": self.slope_se, "intercept": self.intercept,
            "intercept_se": self.intercept_se, "r_squared": self.r_squared,
            "n_standards": self.n_standards, "concentration_low": self.concentration_range[0],
            "concentration_high": self.concentration_range[1],
            "signal_low": self.signal_range[0], "signal_high": self.signal_range[1],
            "unit": self.unit}])

    def _repr_html_(self) -> str:
        return f"<p>{html.escape(self.summary())}</p>"


def fit_standard_curve(standards, *, concentration="concentration", signal="signal",
                       unit=None) -> StandardCurve:
    """Fit signal = intercept + slope·concentration to standard wells by least squares.

    Parameters
    ----------
    standards : pandas.DataFrame
        One row per standard reading (replicates as separate rows).
    concentration, signal : str
        Column names.
    unit : str, optional
        Concentration unit of the standards (one of :data:`inhibkin.units.CONCENTRATION_UNITS`).

    Returns
    -------
    StandardCurve

    Raises
    ------
    DataError
        Missing columns, text or NaN, fewer than three standards or fewer than two
        distinct concentrations, or a flat curve (slope not above zero).
    """
    check_columns(standards, [concentration, signal], "standard curve")
    problems: list[Problem] = []
    c = numeric_column(standards, concentration, problems)
    y = numeric_column(standards, signal, problems, allow_negative=True)
    if problems:
        raise DataError(problems, "standard curve")
    if len(c) < 3 or np.unique(c).size < 2:
        raise DataError(Problem(concentration, None, len(c),
                                "need at least 3 standards at 2 or more concentrations"),
                        "standard curve")
    unit = normalise_unit(unit) if unit is not None else None
    n = len(c)
    c_mean = c.mean()
    sxx = np.sum((c - c_mean) ** 2)
    slope = np.sum((c - c_mean) * (y - y.mean())) / sxx
    intercept = y.mean() - slope * c_mean
    residual = y - (intercept + slope * c)
    ssr = float(residual @ residual)
    sst = float(np.sum((y - y.mean()) ** 2))
    s2 = ssr / (n - 2) if n > 2 else np.nan
    if not slope > 0:
        raise DataError(Problem(signal, None, float(slope),
                                "the standard curve does not rise with concentration; "
                                "check the standards"), "standard curve")
    c_low, c_high = float(c.min()), float(c.max())
    return StandardCurve(
        slope=float(slope), intercept=float(intercept),
        slope_se=float(np.sqrt(s2 / sxx)),
        intercept_se=float(np.sqrt(s2 * (1.0 / n + c_mean**2 / sxx))),
        r_squared=1.0 - ssr / sst if sst > 0 else np.nan,
        n_standards=n, concentration_range=(c_low, c_high),
        signal_range=(float(intercept + slope * c_low), float(intercept + slope * c_high)),
        unit=unit)


def blank_signal(time, signal, group, is_blank):
    """Mean blank signal of each read's group, at the read's time.

    Parameters
    ----------
    time, signal : numpy.ndarray
        One entry per read (time in any one unit).
    group : numpy.ndarray of int
        Blank group of each read (plate × substrate level), ``-1`` for reads that take
        no blank.
    is_blank : numpy.ndarray of bool
        Reads that come from blank wells.

    Returns
    -------
    numpy.ndarray
        The blank signal to subtract from each read; NaN where the read's group has no
        blank reads (the caller flags those wells).

    Notes
    -----
    Blanks of one group are averaged at each time they were read, and the mean curve
    is interpolated linearly to the times of the other reads (held constant beyond its
    first and last time). The loop runs over groups (plates × substrate levels, a few
    dozen at most), not over wells.
    """
    out = np.full(len(time), np.nan)
    usable = is_blank & np.isfinite(signal) & (group >= 0)
    for g in np.unique(group[group >= 0]):
        in_group = group == g
        blank_reads = usable & in_group
        if not blank_reads.any():
            continue
        curve = (pd.DataFrame({"t": time[blank_reads], "y": signal[blank_reads]})
                 .groupby("t", sort=True)["y"].mean())
        out[in_group] = np.interp(time[in_group], curve.index.to_numpy(dtype=float),
                                  curve.to_numpy(dtype=float))
    return out
