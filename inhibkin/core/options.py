"""The options of the mechanism fits, as one frozen object checked once.

:class:`FitOptions` is built at every public entry (``fit_mechanisms``, the batched
engine, ``fit_campaign``) before any work: an option outside its allowed values raises
one :class:`~inhibkin.errors.OptionError` naming the option, what it may be and what
arrived. Code past the entry receives the object (or its values) and trusts it.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from ..errors import OptionError
from .determined import DETERMINATION_FACTOR
from .weighting import DEFAULT_WEIGHTING, WEIGHTINGS

__all__ = ["FitOptions", "INTERVAL_METHODS"]

#: Interval methods: profile likelihood, or the log-scale Wald interval.
INTERVAL_METHODS = ("profile", "wald")


def _number(name, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or \
            not math.isfinite(value):
        raise OptionError(f"{name} must be a finite number, got {value!r}")
    return float(value)


def _checked(name, value, allowed, what):
    x = _number(name, value)
    if not allowed(x):
        raise OptionError(f"{name} must be {what}, got {value!r}")
    return x


@dataclass(frozen=True)
class FitOptions:
    """How the mechanisms of a grid are fitted and decided.

    Parameters
    ----------
    weighting : {"relative", "uniform", "sd"}
        See :func:`inhibkin.mechanism.fit_mechanisms`.
    intervals : {"profile", "wald"}
        Interval method.
    level : float
        Confidence level of the intervals, strictly between 0 and 1 (0.95, not 95).
    alpha : float
        Level of the nested F-tests, strictly between 0 and 1.
    min_delta_aicc : float
        AICc lead (≥ 0) needed to pick one of the one-constant mechanisms.
    alpha_factor : float
        Where the regions of alpha = kiu/kic begin (> 1).
    determination_factor : float
        Multiple (≥ 1) of the tested range past which a constant is not determined.

    Raises
    ------
    OptionError
        Naming the first option outside its allowed values.
    """

    weighting: str = DEFAULT_WEIGHTING
    intervals: str = "profile"
    level: float = 0.95
    alpha: float = 0.05
    min_delta_aicc: float = 2.0
    alpha_factor: float = 5.0
    determination_factor: float = DETERMINATION_FACTOR

    def __post_init__(self):
        if self.weighting not in WEIGHTINGS:
            raise OptionError(f"weighting must be one of {WEIGHTINGS}, got {self.weighting!r}")
        if self.intervals not in INTERVAL_METHODS:
            raise OptionError(f"intervals must be one of {INTERVAL_METHODS}, got "
                              f"{self.intervals!r}")
        rules = {
            "level": (lambda x: 0 < x < 1, "strictly between 0 and 1 (e.g. 0.95 for 95 %)"),
            "alpha": (lambda x: 0 < x < 1, "strictly between 0 and 1"),
            "min_delta_aicc": (lambda x: x >= 0, "≥ 0"),
            "alpha_factor": (lambda x: x > 1, "greater than 1"),
            "determination_factor": (lambda x: x >= 1, "≥ 1"),
        }
        for name, (allowed, what) in rules.items():
            # Frozen: the checked float replaces what arrived (an int stays a number).
            object.__setattr__(self, name, _checked(name, getattr(self, name), allowed, what))

    def as_dict(self) -> dict:
        """The options as keyword arguments of ``fit_mechanisms``."""
        return asdict(self)
