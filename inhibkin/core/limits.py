"""The allowed range of every numeric option, declared once for the Python API and the CLI.

At the bottom of the package (it imports only the errors), so that the option objects of
``core/`` and the input checks of :mod:`inhibkin.validate` read the same limits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import OptionError, Problem

__all__ = ["Limit", "OPTION_LIMITS", "check_options", "MAX_MAGNITUDE", "MIN_MAGNITUDE"]

# Largest magnitude accepted in a number column: squares and sums of squares of larger
# values overflow float64 (about 1.8e308) inside the fits; nonzero values below the
# smallest underflow to zero in logarithms and ratios.
MAX_MAGNITUDE = 1e100
MIN_MAGNITUDE = 1e-100


@dataclass(frozen=True)
class Limit:
    """The range an option must lie in: ``low``/``high`` with open or closed ends."""

    low: float
    high: float
    low_open: bool = True
    high_open: bool = True
    hint: str = ""

    def describe(self) -> str:
        left = "(" if self.low_open else "["
        right = ")" if self.high_open else "]"
        return f"a number in {left}{self.low:g}, {self.high:g}{right}"

    def holds(self, value: float) -> bool:
        above = value > self.low if self.low_open else value >= self.low
        below = value < self.high if self.high_open else value <= self.high
        return bool(above and below)


#: The limits of the numeric options, declared once for the Python API and the CLI.
OPTION_LIMITS = {
    "level": Limit(0.0, 1.0, hint="a fraction, e.g. 0.95 for 95 % intervals"),
    "alpha": Limit(0.0, 1.0, hint="a test level, e.g. 0.05"),
    "min_delta_aicc": Limit(0.0, np.inf, low_open=False),
    "determination_factor": Limit(1.0, np.inf, low_open=False),
    "alpha_factor": Limit(1.0, np.inf, hint="where the alpha regions begin, e.g. 5"),
    "lack_of_fit_alpha": Limit(0.0, 1.0, low_open=False,
                               hint="a test level, e.g. 0.01; 0 turns the test off"),
    # Concentrations in M: positive and finite (1e-100 M to 1e100 M, as for table values).
    "km": Limit(MIN_MAGNITUDE, MAX_MAGNITUDE, low_open=False, high_open=False,
                hint="Km in M, or text with its unit such as '20uM'"),
    "enzyme": Limit(MIN_MAGNITUDE, MAX_MAGNITUDE, low_open=False, high_open=False,
                    hint="[E] in M, or text with its unit such as '2nM'"),
}


def _option_problem(name, value):
    limit = OPTION_LIMITS[name.lstrip("-").replace("-", "_")]
    is_number = isinstance(value, (int, float, np.integer, np.floating))
    # An option of the command line is the Problem's column ("option '--level'"); a
    # keyword of the Python API is named in the message.
    column, head = (name, "") if name.startswith("--") else (None, f"{name} ")
    if isinstance(value, (bool, np.bool_)) or not is_number:
        return Problem(column, None, value, f"{head}must be {limit.describe()}, got "
                                            f"{type(value).__name__}")
    if limit.holds(float(value)):
        return None
    hint = f" ({limit.hint})" if limit.hint else ""
    if name.lstrip("-") == "level" and 1 < value < 100:
        hint = f"; {value:g} looks like a percent: write {value / 100:g}"
    return Problem(column, None, value, f"{head}must be {limit.describe()}{hint}")


def check_options(options, *, none_allowed=True) -> None:
    """Raise one OptionError listing every option outside its :data:`OPTION_LIMITS`.

    Parameters
    ----------
    options : dict
        Option name (a key of :data:`OPTION_LIMITS`, or its command-line spelling such as
        ``"--level"``) to value.
    none_allowed : bool
        Whether None means "not given" (skipped) rather than a bad value.
    """
    problems = [p for name, value in options.items() if value is not None or not none_allowed
                if (p := _option_problem(name, value)) is not None]
    if problems:
        raise OptionError(problems, "options")
