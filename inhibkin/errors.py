"""One family of exceptions and warnings for everything inhibkin refuses or doubts.

Every error a user can trigger with bad input is an :class:`InhibkinError`. Input
problems carry a list of :class:`Problem` records (column, row, value, what is wrong),
so a pipeline can report all of them at once instead of the first one only.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "InhibkinError",
    "DataError",
    "UnitsError",
    "OptionError",
    "FitError",
    "Problem",
    "InhibkinWarning",
    "FitWarning",
]

# Long values (a whole array pasted into a cell) are cut in messages.
_MAX_VALUE_CHARS = 40


def _plain(x):
    """A numpy scalar as the Python value it holds, so messages read 2, not np.int64(2)."""
    item = getattr(x, "item", None)
    return item() if callable(item) and getattr(x, "ndim", 1) == 0 else x


@dataclass(frozen=True)
class Problem:
    """One thing wrong with one input.

    Parameters
    ----------
    column : str or None
        The column at fault, or None when the problem concerns the whole table.
    row : object or None
        The row label (the DataFrame index value) at fault, or None.
    value : object
        The offending value, as found.
    message : str
        What is wrong and, where possible, how to fix it.
    row_kind : str
        How ``row`` is printed: ``"row"`` (a DataFrame label) or ``"line"`` (the line
        of the file the table was read from).
    """

    column: str | None
    row: object
    value: object
    message: str
    row_kind: str = "row"

    def __str__(self) -> str:
        where = []
        if self.column is not None:
            # Command-line options ('--level') are named as options, not columns.
            kind = "option" if str(self.column).startswith("--") else "column"
            where.append(f"{kind} {self.column!r}")
        if self.row is not None:
            where.append(f"{self.row_kind} {_plain(self.row)!r}")
        text = repr(_plain(self.value))
        if len(text) > _MAX_VALUE_CHARS:
            text = text[: _MAX_VALUE_CHARS - 3] + "..."
        prefix = ", ".join(where)
        if self.value is not None:
            prefix = f"{prefix} (value {text})" if prefix else f"value {text}"
        return f"{prefix}: {self.message}" if prefix else self.message


class InhibkinError(Exception):
    """Base class of every error raised by inhibkin on purpose."""


class DataError(InhibkinError, ValueError):
    """The input table cannot be used as it stands.

    Parameters
    ----------
    problems : list of Problem or str
        Every problem found; a plain string becomes a table-level problem.
    context : str, optional
        What was being read, e.g. ``"compound 'CPD-7'"``, put in front of the message.
    """

    def __init__(self, problems, context: str | None = None):
        if isinstance(problems, (str, Problem)):
            problems = [problems]
        self.problems = tuple(
            p if isinstance(p, Problem) else Problem(None, None, None, str(p)) for p in problems
        )
        self.context = context
        head = f"{context}: " if context else ""
        if len(self.problems) == 1:
            text = f"{head}{self.problems[0]}"
        else:
            lines = "\n".join(f"  - {p}" for p in self.problems)
            text = f"{head}{len(self.problems)} problems in the input:\n{lines}"
        super().__init__(text)


class OptionError(DataError):
    """An option (a keyword argument, not the data) is outside its allowed values."""


class UnitsError(DataError):
    """A concentration unit is missing, unknown or contradictory."""


class FitError(InhibkinError, RuntimeError):
    """A fit could not be carried out or gave no usable answer."""


class InhibkinWarning(UserWarning):
    """Base class of inhibkin's warnings."""


class FitWarning(InhibkinWarning):
    """A fit finished but one of its results should be read with care."""
