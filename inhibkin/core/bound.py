"""A one-sided limit on a quantity: a value and a side, kept as numbers until written out.

When the data set only a limit (an IC50 above the highest concentration tested, a Ki
below what the lowest one could see), the result carries a :class:`Bound`; it becomes
text (``"> 30"``) only in a table or a summary, so no stage parses another's text.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Bound", "SIDES"]

#: ">": the quantity lies above ``value``; "<": below it.
SIDES = (">", "<")


@dataclass(frozen=True)
class Bound:
    """The quantity lies beyond ``value`` on ``side``.

    Parameters
    ----------
    side : {">", "<"}
    value : float
        Positive, in the quantity's unit.
    """

    side: str
    value: float

    def __post_init__(self):
        if self.side not in SIDES:
            raise ValueError(f"side must be one of {SIDES}, got {self.side!r}")
        object.__setattr__(self, "value", float(self.value))

    @property
    def low(self) -> float:
        """The lower end of the values the bound allows (0 below, value above)."""
        return self.value if self.side == ">" else 0.0

    @property
    def high(self) -> float:
        """The upper end of the values the bound allows (value below, inf above)."""
        return math.inf if self.side == ">" else self.value

    def scaled(self, factor: float) -> Bound:
        """The same bound on factor × the quantity (factor > 0), e.g. IC50 → Ki."""
        return Bound(self.side, self.value * factor)

    def text(self, unit: str = "") -> str:
        """As written in tables: ``"> 30"``, or ``"> 3e-05 M"`` with a unit."""
        return f"{self.side} {self.value:.3g}" + (f" {unit}" if unit else "")

    def __str__(self) -> str:
        return self.text()
