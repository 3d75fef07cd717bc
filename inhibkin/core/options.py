"""The options of the mechanism fits, as one frozen object checked once.

:class:`FitOptions` is built at every public entry (``fit_mechanisms``, the batched
engine, ``fit_campaign``) before any work: an option outside its allowed values raises
one :class:`~inhibkin.errors.OptionError` naming the option, what it may be and what
arrived. Code past the entry receives the object (or its values) and trusts it.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from ..errors import OptionError
from .compare import EDGE_SIDES, check_edge_sides
from .determined import DETERMINATION_FACTOR
from .lack_of_fit import LACK_OF_FIT_ALPHA
from .limits import check_options
from .weighting import DEFAULT_WEIGHTING, WEIGHTINGS

__all__ = ["FitOptions", "INTERVAL_METHODS", "check_fit_enzyme"]

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
    fit_enzyme : bool
        With the active enzyme concentration [E] given, fit it in the tight-binding laws
        (the given value as the start) instead of holding it there (False, default);
        needs [E] (:func:`check_fit_enzyme`).

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
    fit_enzyme: bool = False

    def __post_init__(self):
        if self.weighting not in WEIGHTINGS:
            raise OptionError(f"weighting must be one of {WEIGHTINGS}, got {self.weighting!r}")
        if self.intervals not in INTERVAL_METHODS:
            raise OptionError(f"intervals must be one of {INTERVAL_METHODS}, got "
                              f"{self.intervals!r}")
        check_options({name: getattr(self, name) for name in _NUMERIC}, none_allowed=False)
        check_edge_sides(self.edge_sides)
        if not isinstance(self.fit_enzyme, (bool, np.bool_)):
            raise OptionError(f"fit_enzyme must be True or False, got {self.fit_enzyme!r}")
        object.__setattr__(self, "fit_enzyme", bool(self.fit_enzyme))
        for name in _NUMERIC:
            # Frozen: the checked float replaces what arrived (an int stays a number).
            object.__setattr__(self, name, float(getattr(self, name)))

    def as_dict(self) -> dict:
        """The options as keyword arguments of ``fit_mechanisms``."""
        return asdict(self)


def check_fit_enzyme(fit_enzyme, enzyme, context=None,
                     sources="enzyme=, or a column enzyme_<unit>") -> None:
    """Refuse ``fit_enzyme=True`` without an active enzyme concentration.

    Without [E] the tight-binding laws fit it anyway (from the automatic start), so the
    option would change nothing; asked for, it means [E] was meant to be given and was
    not (a forgotten ``enzyme=`` or ``enzyme_<unit>`` column), which a silent no-op would
    hide.

    Parameters
    ----------
    fit_enzyme : bool
    enzyme : float or None
        The [E] found for the fit (None: none).
    context : str, optional
        What was being fitted, put in front of the message.
    sources : str
        Where the entry reads [E] from, named in the message.

    Raises
    ------
    OptionError
        When ``fit_enzyme`` is true and ``enzyme`` is None.
    """
    if fit_enzyme and enzyme is None:
        raise OptionError(f"fit_enzyme=True needs the active enzyme concentration "
                          f"({sources}): it is the fit's start; without it [E] is fitted "
                          "in the tight-binding laws anyway", context)
