"""The options of the mechanism fits, as one frozen object checked once.

:class:`FitOptions` is built at every public entry (``fit_mechanisms``, the batched
engine, ``fit_campaign``) before any work: an option outside its allowed values raises
one :class:`~inhibkin.errors.OptionError` naming the option, what it may be and what
arrived. Code past the entry receives the object (or its values) and trusts it.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

from ..errors import OptionError
from .compare import EDGE_SIDES, check_edge_sides
from .determined import DETERMINATION_FACTOR
from .lack_of_fit import LACK_OF_FIT_ALPHA
from .limits import check_options
from .weighting import DEFAULT_WEIGHTING, WEIGHTINGS

__all__ = ["FitOptions", "INTERVAL_METHODS"]

#: Interval methods: profile likelihood, or the log-scale Wald interval.
INTERVAL_METHODS = ("profile", "wald")


# The numeric options; their limits are declared once, in core/limits.py (OPTION_LIMITS).
_NUMERIC = ("level", "alpha", "min_delta_aicc", "alpha_factor", "determination_factor",
            "lack_of_fit_alpha")


@dataclass(frozen=True)
class FitOptions:
    """How the mechanisms of a grid are fitted and decided.

    Parameters
    ----------
    weighting : {"relative", "uniform", "sd"}
        See :func:`inhibkin.mechanism.fit.fit_mechanisms`.
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
    lack_of_fit_alpha : float
        Level (0 ≤ x < 1) of the lack-of-fit test of the verdict's model; 0 turns it off.
    edge_sides : {1, 2}
        Rule 4's edge test: 2 (default) two-sided, 1 one-sided
        (:class:`inhibkin.core.compare.VerdictOptions`).

    Raises
    ------
    OptionError
        Naming every option outside its allowed values (the limits of
        :data:`inhibkin.core.limits.OPTION_LIMITS`).
    """

    weighting: str = DEFAULT_WEIGHTING
    intervals: str = "profile"
    level: float = 0.95
    alpha: float = 0.05
    min_delta_aicc: float = 2.0
    alpha_factor: float = 5.0
    determination_factor: float = DETERMINATION_FACTOR
    lack_of_fit_alpha: float = LACK_OF_FIT_ALPHA
    edge_sides: int = EDGE_SIDES

    def __post_init__(self):
        if self.weighting not in WEIGHTINGS:
            raise OptionError(f"weighting must be one of {WEIGHTINGS}, got {self.weighting!r}")
        if self.intervals not in INTERVAL_METHODS:
            raise OptionError(f"intervals must be one of {INTERVAL_METHODS}, got "
                              f"{self.intervals!r}")
        check_options({name: getattr(self, name) for name in _NUMERIC}, none_allowed=False)
        check_edge_sides(self.edge_sides)
        for name in _NUMERIC:
            # Frozen: the checked float replaces what arrived (an int stays a number).
            object.__setattr__(self, name, float(getattr(self, name)))

    def as_dict(self) -> dict:
        """The options as keyword arguments of ``fit_mechanisms``."""
        return asdict(self)
