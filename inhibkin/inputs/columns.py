"""Column mapping: the lab's headers matched to the names inhibkin's stages use.

A header is matched to a role (compound, substrate, inhibitor, rate, time, signal, plate,
well, role) by its *base name*, compared case-insensitively with runs of spaces and
underscores read as one space; a unit after the base name may be written ``_uM``,
`` uM``, ``(uM)`` or ``[uM]``, with ``µM``/``μM`` for uM. So ``Substrate (uM)``,
``substrate_uM`` and ``SUBSTRATE [µM]`` are one column, and ``Rate (mOD/min)`` is the
rate column (a rate's unit is a label; only concentration and time units are read).

:func:`standardise_columns` renames the matched headers to the canonical spellings
(``substrate_uM``, ``inhibitor_nM``, ``time_min``, ``signal``) so that the stages see the
names they expect; a required column that is not found is refused with the closest
headers ("did you mean 'Substrate (uM)'?").
"""

from __future__ import annotations

import difflib
import re

from ..errors import DataError, Problem
from ..units import CONCENTRATION_UNITS, TIME_UNITS, normalise_unit

__all__ = ["ROLES", "split_header", "header_key", "find_column", "did_you_mean",
           "standardise_columns"]

#: Role -> the kind of unit its header may carry (None: a unit is a free label).
ROLES = {"compound": None, "plate": None, "well": None, "role": None,
         "substrate": "concentration", "inhibitor": "concentration",
         "rate": None, "signal": "concentration", "time": "time"}

_UNIT_TAIL = re.compile(r"^(?P<base>.*?)\s*(?:[(\[](?P<bracketed>[^)\]]*)[)\]]"
                        r"|[_ ](?P<plain>[A-Za-zµμ/]+))\s*$")
_CLOSEST = 3
# difflib's similarity a header must reach to be offered: at 0.5 'rate' was offered
# 'Substrat (uM)' (three letters in common); a dropped or swapped letter stays above 0.6.
_CLOSE_ENOUGH = 0.6
# Roles whose header unit may be a detector's label (RFU, mOD) rather than a concentration.
_LABEL_OK = {"signal"}


def split_header(header) -> tuple[str, str | None]:
    """(base name, unit text or None) of a header.

    Examples
    --------
    >>> split_header("Substrate (uM)")
    ('Substrate', 'uM')
    >>> split_header("inhibitor [nM]")
    ('inhibitor', 'nM')
    >>> split_header("substrate_µM")
    ('substrate', 'µM')
    >>> split_header("compound")
    ('compound', None)
    """
    text = str(header).strip()
    match = _UNIT_TAIL.match(text)
    if match and match.group("base"):
        unit = match.group("bracketed")
        if unit is None:
            unit = match.group("plain")
            known = unit in CONCENTRATION_UNITS or unit in TIME_UNITS
            if not known:  # 'compound id' is a name, not 'compound' in unit 'id'
                return text, None
        return match.group("base").strip(), unit.strip()
    return text, None


def header_key(text) -> str:
    """The form in which names are compared: case-folded, spaces/underscores as one space."""
    return re.sub(r"[\s_]+", " ", str(text)).strip().casefold()


def find_column(columns, name, *, kind=None, label_ok=False, context=None, option=None):
    """The header of ``columns`` that is the column ``name``, and its unit.

    Parameters
    ----------
    columns : iterable of str
        The table's headers.
    name : str
        What the caller calls the column: a base name (``"substrate"``) or a full header
        (``"Substrate (uM)"``).
    kind : {"concentration", "time"}, optional
        The unit family the header may carry; its unit is then checked and returned in
        canonical spelling.
    label_ok : bool
        Whether a unit not of ``kind`` is a mere label (a signal in ``RFU``) rather than
        an error.
    context, option : str, optional
        For the message: what was read, and the option that names the column.

    Returns
    -------
    (str, str or None) or None
        The header and its canonical unit, or None when no header matches.

    Raises
    ------
    DataError
        When several headers match, or a matched header's unit is not of ``kind``.
    """
    columns = [str(c) for c in columns]
    exact = [c for c in columns if c == name]
    if exact:
        matches = exact
    else:
        whole = [c for c in columns if header_key(c) == header_key(name)]
        want = header_key(split_header(name)[0])
        matches = whole or [c for c in columns if header_key(split_header(c)[0]) == want]
    if not matches:
        return None
    if len(matches) > 1:
        raise DataError(Problem(option or name, None, None,
                                f"several columns match {name!r}: {matches}; keep one or "
                                f"name the one to use"), context)
    header = matches[0]
    unit = split_header(header)[1]
    if kind is None or unit is None:
        return header, None if kind is not None else unit
    try:
        return header, normalise_unit(unit, kind=kind)
    except DataError:
        if label_ok:  # 'Signal (RFU)': a detector's unit is a label
            return header, None
        known = CONCENTRATION_UNITS if kind == "concentration" else TIME_UNITS
        raise DataError(Problem(header, None, unit, f"unknown {kind} unit in the header; "
                                                    f"use one of {', '.join(known)}"),
                        context) from None


def did_you_mean(columns, name) -> str:
    """The closest headers to ``name`` as a hint ("did you mean 'Substrate (uM)'?"), or
    the table's headers when none is close."""
    columns = [str(c) for c in columns]
    keys = {header_key(split_header(c)[0]): c for c in columns}
    close = difflib.get_close_matches(header_key(split_header(name)[0]), list(keys),
                                      n=_CLOSEST, cutoff=_CLOSE_ENOUGH)
    if close:
        return "did you mean " + " or ".join(repr(keys[k]) for k in close) + "?"
    return "the table has: " + ", ".join(map(repr, columns[:20]))


def standardise_columns(table, *, required=(), context=None, options=None, **names):
    """A copy of ``table`` whose headers are renamed to the stages' canonical names.

    Parameters
    ----------
    table : pandas.DataFrame
    required : iterable of str
        Roles (keys of :data:`ROLES`) that must be found.
    context : str, optional
        Put in front of error messages (e.g. ``"plate map"``).
    options : dict, optional
        Role -> the command-line option that names it, for messages (``"--substrate"``).
    **names : str
        Role -> the name the caller gives that column (default: the role's own name),
        e.g. ``compound="Compound ID", rate="Rate (mOD/min)"``.

    Returns
    -------
    pandas.DataFrame
        The table with each found role's header renamed to the role (``compound``,
        ``rate``, ``signal``), or ``role_<unit>`` for a concentration or time header
        that carries a unit (``substrate_uM``, ``time_min``). Other columns are kept as
        they are. When ``well`` is required its names are normalised (``A01`` -> ``A1``).

    Raises
    ------
    DataError
        Listing every required column not found, each with the closest headers.
    """
    unknown = set(names) - set(ROLES)
    if unknown:
        raise TypeError(f"unknown column roles {sorted(unknown)}; known: {sorted(ROLES)}")
    options = options or {}
    columns = [str(c) for c in table.columns]
    renames, problems = {}, []
    for role, kind in ROLES.items():
        name = names.get(role) or role
        try:
            found = find_column(columns, name, kind=kind, label_ok=role in _LABEL_OK,
                                context=context, option=options.get(role))
        except DataError:
            if role in required or role in names:
                raise
            continue  # a column the stage does not read: left as it is
        if found is None:
            if role in required:
                problems.append(Problem(options.get(role, role), None, name,
                                        f"no such column; {did_you_mean(columns, name)}"
                                        + (f" (name it with {options[role]})"
                                           if role in options else "")))
            continue
        header, unit = found
        canonical = f"{role}_{unit}" if kind is not None and unit is not None else role
        if header != canonical:
            renames[header] = canonical
    if problems:
        raise DataError(problems, context)
    clashes = set(renames.values()) & (set(columns) - set(renames))
    if clashes:
        raise DataError(f"renaming the matched headers would repeat {sorted(clashes)}; "
                        f"rename or drop the other column", context)
    out = table.rename(columns=renames)
    if "well" in required:  # a table that is read by well (reads, plate maps, layouts)
        from .wells import normalise_wells

        out["well"] = normalise_wells(out["well"], context=context).to_numpy()
    return out
