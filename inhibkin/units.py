"""Concentration and time units in and out; inside inhibkin everything is molar and seconds.

Units are always declared, never guessed: either in a column header (``inhibitor_nM``,
``substrate_uM``) or by an explicit option (``units={"inhibitor": "nM"}``). A table whose
concentration columns carry no unit is refused with a message that says how to declare one.
"""

from __future__ import annotations

import re

import numpy as np

from .errors import Problem, UnitsError

__all__ = [
    "CONCENTRATION_UNITS",
    "TIME_UNITS",
    "to_molar",
    "from_molar",
    "molar_unit",
    "column_unit",
    "restate_molar",
    "family_unit",
    "significant_text",
    "readable_units",
    "unit_label",
    "to_seconds",
    "split_unit",
    "header_column",
    "resolve_units",
    "normalise_unit",
    "parse_concentration",
]

# Factor that turns one of each unit into molar. Both the micro sign (U+00B5) and the
# Greek small mu (U+03BC) are accepted because keyboards and spreadsheets produce either.
CONCENTRATION_UNITS = {
    "M": 1.0,
    "mM": 1e-3,
    "uM": 1e-6,
    "µM": 1e-6,
    "μM": 1e-6,
    "nM": 1e-9,
    "pM": 1e-12,
}

# Factor that turns one of each unit into seconds.
TIME_UNITS = {
    "s": 1.0,
    "ms": 1e-3,
    "min": 60.0,
    "h": 3600.0,
}

_HOW_TO_DECLARE = (
    "declare the unit in the column header (e.g. 'inhibitor_nM', 'substrate_uM') or pass it "
    "as an option (units={{'{name}': 'nM'}}, or --units {name}=nM on the command line); "
    "known units: " + ", ".join(CONCENTRATION_UNITS)
)

# "inhibitor_nM", "substrate uM", "substrate (mM)", "S [µM]" (as the column mapping reads).
_SUFFIX = re.compile(r"^(?P<base>.+?)(?:_|\s*\((?=.*\)$)|\s*\[(?=.*\]$)|\s)"
                     r"(?P<unit>[A-Za-zµμ]+)[)\]]?$")


def normalise_unit(unit, *, kind="concentration"):
    """The canonical spelling of ``unit`` (``"µM"`` and ``"μM"`` become ``"uM"``).

    Parameters
    ----------
    unit : str
        A unit as written by the user.
    kind : {"concentration", "time"}
        Which family of units to look in.

    Raises
    ------
    UnitsError
        When the unit is not known; the message lists the known ones.
    """
    table = CONCENTRATION_UNITS if kind == "concentration" else TIME_UNITS
    text = str(unit).strip() if unit is not None else ""
    if text in table:
        return "uM" if text in ("µM", "μM") else text
    raise UnitsError(Problem(None, None, unit,
                             f"unknown {kind} unit; use one of: {', '.join(table)}"))


def to_molar(values, unit):
    """Concentrations in ``unit`` converted to molar.

    Parameters
    ----------
    values : float or array_like
        Concentrations in ``unit``.
    unit : str
        One of :data:`CONCENTRATION_UNITS`.

    Returns
    -------
    numpy.ndarray or float
        Concentrations in M (a float when ``values`` is a scalar).
    """
    factor = CONCENTRATION_UNITS[normalise_unit(unit)]
    out = np.asarray(values, dtype=float) * factor
    return float(out) if out.ndim == 0 else out


def from_molar(values, unit):
    """Molar concentrations expressed in ``unit`` (the inverse of :func:`to_molar`)."""
    factor = CONCENTRATION_UNITS[normalise_unit(unit)]
    out = np.asarray(values, dtype=float) / factor
    return float(out) if out.ndim == 0 else out


# Units a molar concentration is written in for people, largest first.
_DISPLAY_UNITS = ("M", "mM", "µM", "nM", "pM")


def molar_unit(value_molar: float) -> str:
    """The unit in which a concentration (M) reads at least 1 (0.36 mM -> µM), pM at
    the smallest; for one number written for people."""
    for unit in _DISPLAY_UNITS:
        if abs(value_molar) >= to_molar(1.0, unit) * (1 - 1e-12):
            return unit
    return _DISPLAY_UNITS[-1]


def column_unit(values_molar) -> str:
    """One unit for a table column of concentrations (M): the unit of the median of its
    finite positive values, so the typical entry reads between 1 and 1000 (µM when the
    column holds none)."""
    values = np.asarray(values_molar, dtype=float)
    values = values[np.isfinite(values) & (values > 0)]
    return molar_unit(float(np.median(values))) if values.size else "µM"


# A concentration written in molar in a text: "3.05e-05 M", and the interval that may follow
# it, "[2.9e-05, 3.2e-05]" (the form the ranked table's texts are written in).
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_MOLAR_TEXT = re.compile(rf"(?<![\w.])(?P<value>{_NUMBER}) M(?![\w])"
                         rf"(?P<interval> \[(?P<low>{_NUMBER}), (?P<high>{_NUMBER})\])?")


def unit_label(unit) -> str:
    """A concentration unit as printed for people (``uM`` as ``µM``)."""
    return "µM" if unit == "uM" else str(unit)


def significant_text(value, digits=3) -> str:
    """``value`` to ``digits`` significant digits, written without an exponent between
    0.001 and a million (``12300``, ``0.0305``), with one outside."""
    if np.isfinite(value) and 1e-3 <= abs(value) < 1e6:
        return np.format_float_positional(value, precision=digits, unique=False,
                                          fractional=False, trim="-")
    return f"{value:.{digits}g}"


def restate_molar(text, unit):
    """A text with every concentration written in molar (``"3.05e-05 M"``, and the
    interval ``"[2.9e-05, 3.2e-05]"`` right after one) restated in ``unit``, three
    significant digits as written.

    Examples
    --------
    >>> restate_molar("3.05e-05 M [2.9e-05, 3.2e-05]", "uM")
    '30.5 µM [29, 32]'
    >>> restate_molar("no inhibition detected up to 1e-05 M; Ki > 2e-06 M", "nM")
    'no inhibition detected up to 10000 nM; Ki > 2000 nM'
    """
    if not isinstance(text, str):
        return text
    canonical = normalise_unit(unit)
    shown = unit_label(canonical)
    per_unit = 1.0 / CONCENTRATION_UNITS[canonical]

    def number(written):
        return significant_text(float(written) * per_unit)

    def restated(match):
        out = f"{number(match.group('value'))} {shown}"
        if match.group("interval"):
            out += f" [{number(match.group('low'))}, {number(match.group('high'))}]"
        return out

    return _MOLAR_TEXT.sub(restated, text)


def family_unit(columns) -> str:
    """One unit (:func:`column_unit`) for an estimate and its interval together: the
    columns of molar values (e.g. a ranked table's ``ki_M``, ``ki_low_M``,
    ``ki_high_M``), so a bound (only ``ki_low_M``) counts as much as a value."""
    arrays = [np.asarray(c, dtype=float).ravel() for c in columns]
    return column_unit(np.concatenate(arrays) if arrays else np.array([]))


# A molar column's header: "ki_M", and its interval columns "ki_low_M", "ki_high_M".
_MOLAR_HEADER = re.compile(r"^(?P<base>.+?)(?P<part>_low|_high)?_M$")


def readable_units(frame):
    """A table for people: every molar column in one unit chosen by magnitude and stated
    in its header, the numbers still numbers.

    A column ``x_M`` becomes ``x (unit)`` in the unit of :func:`column_unit`; an estimate
    and its interval (``ki_M``, ``ki_low_M``, ``ki_high_M``) share one unit. In a tidy
    parameter table (columns ``parameter`` and ``estimate``) each concentration constant
    (km, kic, kiu, ki) takes one unit over all its rows, named in a ``unit`` column
    beside ``parameter``; the ranked table's ``ki_reported`` text follows the unit of
    ``ki``. The machine-readable tables (CSV, Parquet, the store) stay in molar.

    Parameters
    ----------
    frame : pandas.DataFrame
        Concentrations in M (columns ``*_M``; a parameter table's constants in M).

    Returns
    -------
    pandas.DataFrame
        A new table (``frame`` is not changed).
    """
    import pandas as pd

    out = frame.copy()
    families: dict = {}
    for column in out.columns:
        match = _MOLAR_HEADER.match(str(column))
        if match:
            families.setdefault(match.group("base"), []).append((column, match.group("part")))
    renames = {}
    for base, members in families.items():
        values = {c: pd.to_numeric(out[c], errors="coerce") for c, _ in members}
        if all(v.isna().all() and out[c].notna().any() for c, v in values.items()):
            continue  # text, not numbers
        unit = family_unit(values.values())
        shown = unit_label(unit)
        for column, part in members:
            out[column] = values[column] / CONCENTRATION_UNITS[unit]
            renames[column] = f"{base}{part or ''} ({shown})"
        if base == "ki" and "ki_reported" in out.columns:
            out["ki_reported"] = [restate_molar(t, unit) for t in out["ki_reported"]]
    out = out.rename(columns=renames)
    if {"parameter", "estimate"} <= set(out.columns) and "unit" not in out.columns:
        out = _readable_parameters(out)
    return out


def _readable_parameters(table):
    from .core.models import MODELS

    concentrations = {name for law in MODELS.values()
                      for name, role in zip(law.param_names, law.roles)
                      if role in ("substrate", "inhibitor")}
    numbers = [c for c in ("estimate", "se", "ci_low", "ci_high") if c in table.columns]
    table = table.astype({c: float for c in numbers})
    units = [""] * len(table)
    names = table["parameter"].astype(str).to_numpy()
    for name in sorted(set(names) & concentrations):
        rows = names == name
        unit = column_unit(table.loc[rows, "estimate"].to_numpy(dtype=float))
        table.loc[rows, numbers] = table.loc[rows, numbers] / CONCENTRATION_UNITS[unit]
        for k in np.flatnonzero(rows):
            units[k] = unit_label(unit)
    table.insert(list(table.columns).index("parameter") + 1, "unit", units)
    return table


def to_seconds(values, unit):
    """Times in ``unit`` (s, ms, min, h) converted to seconds."""
    factor = TIME_UNITS[normalise_unit(unit, kind="time")]
    out = np.asarray(values, dtype=float) * factor
    return float(out) if out.ndim == 0 else out


def split_unit(column_name, *, kind="concentration"):
    """Split a header into its base name and declared unit.

    Parameters
    ----------
    column_name : str
        A header such as ``"inhibitor_nM"``, ``"substrate uM"`` or ``"time_min"``.
    kind : {"concentration", "time"}
        Which family of units the suffix must belong to.

    Returns
    -------
    (str, str or None)
        The base name and the unit as written, or ``(column_name, None)`` when the
        header carries no known unit.

    Examples
    --------
    >>> split_unit("inhibitor_nM")
    ('inhibitor', 'nM')
    >>> split_unit("rate")
    ('rate', None)
    """
    table = CONCENTRATION_UNITS if kind == "concentration" else TIME_UNITS
    match = _SUFFIX.match(str(column_name))
    if match and match.group("unit") in table:
        return match.group("base"), match.group("unit")
    return str(column_name), None


def header_column(columns, name, *, kind="concentration"):
    """The column that holds ``name``, and the unit its header declares, if any.

    The Python path's counterpart of :func:`resolve_units`: a plain header (``substrate``)
    is accepted without a unit (the values are then in the column's own unit), while a
    header that declares one (``substrate_uM``, ``substrate (mM)``) is found by its base
    name, so a table written by the command line or :func:`inhibkin.simulate_campaign`
    can be passed as it stands.

    Parameters
    ----------
    columns : iterable of str
        The headers of the table.
    name : str
        The column asked for: a base name (``"substrate"``) or a full header
        (``"inhibitor_nM"``).
    kind : {"concentration", "time"}
        Which family of units a header suffix must belong to.

    Returns
    -------
    (str, str or None)
        The column and its canonical unit, or ``(name, None)`` when the header declares
        none (or no column matches: the caller's column check then names it).

    Raises
    ------
    UnitsError
        When several headers declare ``name`` with a unit and none is ``name`` itself.

    Examples
    --------
    >>> header_column(["compound", "substrate_uM", "rate"], "substrate")
    ('substrate_uM', 'uM')
    >>> header_column(["substrate", "rate"], "substrate")
    ('substrate', None)
    """
    columns = [str(c) for c in columns]
    if name in columns:
        unit = split_unit(name, kind=kind)[1]
        return name, normalise_unit(unit, kind=kind) if unit else None
    with_unit = [c for c in columns
                 if split_unit(c, kind=kind)[0] == name and split_unit(c, kind=kind)[1]]
    if len(with_unit) > 1:
        raise UnitsError(Problem(name, None, None,
                                 f"several columns declare {name!r}: {with_unit}; keep one "
                                 f"or name it in full"))
    if with_unit:
        return with_unit[0], normalise_unit(split_unit(with_unit[0], kind=kind)[1], kind=kind)
    return name, None


def resolve_units(columns, names, *, units=None, context=None):
    """Find the column and the declared unit of each named concentration.

    Parameters
    ----------
    columns : iterable of str
        The headers of the table (e.g. ``df.columns``).
    names : iterable of str
        Base names of the concentration columns to resolve, e.g.
        ``["substrate", "inhibitor"]`` (a full header such as ``"inhibitor_nM"`` is
        taken as it stands).
    units : dict, optional
        Units declared as an option, ``{base name: unit}``. The column is then the plain
        header (``"inhibitor"``) or a header that carries the same unit; a header that
        carries a different unit is a contradiction and is refused.
    context : str, optional
        Put in front of error messages (e.g. the file name).

    Returns
    -------
    dict
        ``{base name: (column, canonical unit)}``.

    Raises
    ------
    UnitsError
        Listing every concentration whose unit is missing, unknown, ambiguous or
        contradictory, each with how to declare it.
    """
    columns = [str(c) for c in columns]
    units = dict(units or {})
    problems = []
    found = {}
    for name in names:
        own_unit = split_unit(name)[1]
        if own_unit and name in columns and name not in units:
            # The caller named the full header, unit included ("inhibitor_nM").
            found[name] = (name, normalise_unit(own_unit))
            continue
        with_unit = [c for c in columns if split_unit(c)[0] == name and split_unit(c)[1]]
        plain = name in columns
        declared = units.get(name)
        if declared is not None:
            try:
                canonical = normalise_unit(declared)
            except UnitsError as err:
                problems.extend(err.problems)
                continue
            header_units = {normalise_unit(split_unit(c)[1]) for c in with_unit}
            if header_units - {canonical}:
                problems.append(Problem(with_unit[0], None, declared,
                                        f"unit given as an option ({declared}) contradicts the "
                                        f"header {with_unit[0]!r}"))
            elif plain:
                found[name] = (name, canonical)
            elif with_unit:
                found[name] = (with_unit[0], canonical)
            else:
                problems.append(Problem(name, None, None,
                                        f"no column {name!r} (nor {name}_<unit>) in the table"))
            continue
        if len(with_unit) > 1:
            problems.append(Problem(name, None, None,
                                    f"several columns declare {name!r}: {with_unit}; keep one"))
        elif with_unit:
            found[name] = (with_unit[0], normalise_unit(split_unit(with_unit[0])[1]))
        elif plain:
            problems.append(Problem(name, None, None,
                                    "concentration unit not declared; "
                                    + _HOW_TO_DECLARE.format(name=name)))
        else:
            problems.append(Problem(name, None, None,
                                    f"no column {name!r} or {name}_<unit> in the table; "
                                    + _HOW_TO_DECLARE.format(name=name)))
    if problems:
        raise UnitsError(problems, context)
    return found


def parse_concentration(text) -> float:
    """A concentration written with its unit ("20 uM", "5nM", "4e-5 M") in M.

    Raises
    ------
    UnitsError
        When the unit is missing or unknown; never guessed.
    """
    match = re.fullmatch(r"\s*([-+0-9.eE]+)\s*([A-Za-zµμ]*)\s*", str(text))
    if not match or not match.group(2):
        raise UnitsError(Problem(None, None, text, "write a concentration with its unit, "
                                                   "e.g. '20uM' or '5 nM'"))
    try:
        value = float(match.group(1))
    except ValueError:
        raise UnitsError(Problem(None, None, text, "not a number")) from None
    return to_molar(value, normalise_unit(match.group(2)))
