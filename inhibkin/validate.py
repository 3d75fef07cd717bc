"""Input checks at the public boundary.

Each check collects every problem it finds (column, row label, value, what is wrong)
and raises one :class:`~inhibkin.errors.DataError` listing them all. Code past these
checks trusts its inputs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .core.limits import MAX_MAGNITUDE, MIN_MAGNITUDE, OPTION_LIMITS, Limit, check_options
from .errors import DataError, Problem
from .inputs.io import LINE_INDEX

__all__ = ["check_columns", "numeric_column", "numeric_rows", "check_grid", "grid_rule_problems",
           "check_michaelis_menten",
           "NO_SIGNAL", "ALL_EQUAL", "row_kind", "check_options", "OPTION_LIMITS", "Limit",
           "normalise_roles"]

# How many bad rows of one kind a message lists before it summarises the rest.
_MAX_ROWS_LISTED = 5
#: Why a table whose rates average to zero or less is refused (the value is the mean).
NO_SIGNAL = ("the rates carry no signal: their mean (value shown) is ≤ 0, so no enzyme "
             "activity is seen; nothing to fit")
#: Why a grid whose rates are all equal is refused (both solvers give this reason).
ALL_EQUAL = ("all rates are equal: they depend on neither substrate nor inhibitor, so km "
             "and the inhibition constants cannot be determined")


def row_kind(df) -> str:
    """``"line"`` for a table read from a file (labels are its lines), else ``"row"``."""
    return "line" if getattr(df.index, "name", None) == LINE_INDEX else "row"


def normalise_roles(values) -> pd.Series:
    """Role labels as the one rule reads them everywhere: trimmed, lower case.

    ``"MAX"``, ``" Sample"`` and ``"min "`` are the roles ``max``, ``sample``, ``min`` in
    plate maps and dose-response tables alike; a missing role stays missing.
    """
    values = pd.Series(values)
    return values.where(values.isna(), values.astype(str).str.strip().str.lower())


def check_columns(df, columns, context=None) -> None:
    """Raise when ``df`` is not a DataFrame, names a column twice, or lacks any of ``columns``."""
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"expected a pandas DataFrame, got {type(df).__name__}", context)
    twice = pd.unique(df.columns[df.columns.duplicated()])
    if len(twice):
        raise DataError([Problem(c, None, None, "the table has two columns of this name; "
                                                "rename or drop one") for c in twice], context)
    missing = [c for c in columns if c not in df.columns]
    if missing:
        # Imported here: inhibkin.inputs reads tables through this module.
        from .inputs.columns import did_you_mean

        raise DataError([Problem(c, None, None,
                                 f"column is missing; {did_you_mean(df.columns, c)}")
                         for c in missing], context)


def _listed(problems, column, rows, values, message, kind="row"):
    for row, value in list(zip(rows, values))[:_MAX_ROWS_LISTED]:
        problems.append(Problem(column, row, value, message, kind))
    extra = len(rows) - _MAX_ROWS_LISTED
    if extra > 0:
        problems.append(Problem(column, None, None, f"and {extra} more rows: {message}"))


def _number_faults(raw, values):
    """(what is wrong, mask) for every kind of bad entry of a number column, in the order
    the messages list them; the one rule of :func:`numeric_column` and
    :func:`numeric_rows`."""
    text = np.isnan(values) & raw.notna().to_numpy()
    with np.errstate(invalid="ignore"):
        magnitude = np.abs(values)
        huge = np.isfinite(values) & (magnitude > MAX_MAGNITUDE)
        tiny = (magnitude > 0) & (magnitude < MIN_MAGNITUDE)
        negative = values < 0
    return (("not a number", text),
            ("missing value (NaN)", np.isnan(values) & ~text),
            ("infinite value", np.isinf(values)),
            (f"too large to fit (magnitude above {MAX_MAGNITUDE:g}); rescale the column, "
             f"e.g. express it in another unit", huge),
            (f"too small to fit (magnitude below {MIN_MAGNITUDE:g}); rescale the column, "
             f"e.g. express it in another unit", tiny),
            ("negative value; concentrations and rates must be ≥ 0", negative))


def _allowed(message, allow_negative, allow_nan):
    return not ((allow_nan and message.startswith("missing"))
                or (allow_negative and message.startswith("negative")))


def numeric_column(df, column, problems, *, allow_negative=False, allow_nan=False):
    """The column as a float array; appends a Problem for every bad entry.

    Text that is not a number, NaN/inf (unless ``allow_nan``) and negative values
    (unless ``allow_negative``) are problems.
    """
    raw = df[column]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    labels = df.index.to_numpy()
    kind = row_kind(df)
    for message, wrong in _number_faults(raw, values):
        if wrong.any() and _allowed(message, allow_negative, allow_nan):
            shown = raw.to_numpy()[wrong] if message == "not a number" else values[wrong]
            _listed(problems, column, labels[wrong], shown, message, kind)
    return values


def numeric_rows(df, column, *, allow_negative=False, allow_nan=False):
    """The column as a float array and, per row, whether :func:`numeric_column` would
    report it: one pass over a whole table, so a batch checks every compound at once
    and lists the problems (with :func:`numeric_column`) only for the compounds that
    have some."""
    raw = df[column]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    bad = np.zeros(len(values), dtype=bool)
    for message, wrong in _number_faults(raw, values):
        if _allowed(message, allow_negative, allow_nan):
            bad |= wrong
    return values, bad


def check_grid(df, *, substrate, inhibitor, rate, sd=None, need_inhibition=True, context=None,
               allow_zero_sd=False):
    """Validate one compound's substrate × inhibitor table.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per observed rate.
    substrate, inhibitor, rate : str
        Column names.
    sd : str, optional
        Column of standard deviations of the rates (must be > 0).
        Rates may be zero or negative (noise around zero); the table is refused only
        when they carry no signal at all (all zero, mean ≤ 0, or all equal).
    need_inhibition : bool
        When True, at least two inhibitor levels (one of them may be 0) are required.
    context : str, optional
        Put in front of the message (e.g. the compound).
    allow_zero_sd : bool
        Accept sd = 0 (standard errors of exactly linear reads; the ``rate_se``
        weighting floors them).

    Returns
    -------
    s, i, v, sd : numpy.ndarray (sd is None when not given)

    Raises
    ------
    DataError
        Listing every problem found.
    """
    columns = [substrate, inhibitor, rate] + ([sd] if sd is not None else [])
    check_columns(df, columns, context)
    problems: list[Problem] = []
    if len(df) == 0:
        raise DataError("the table has no rows", context)
    s = numeric_column(df, substrate, problems)
    i = numeric_column(df, inhibitor, problems)
    # Rates scattered around zero are data: a flat (fully inhibited or blank-corrected)
    # well reads slightly negative as often as slightly positive.
    v = numeric_column(df, rate, problems, allow_negative=True)
    sigma = None
    if sd is not None:
        sigma = numeric_column(df, sd, problems)
        labels = df.index.to_numpy()
        zero = (sigma == 0) & (not allow_zero_sd)
        if zero.any():
            _listed(problems, sd, labels[zero], sigma[zero], "standard deviation must be > 0",
                    row_kind(df))
    if problems:
        raise DataError(problems, context)
    (problems,) = grid_rule_problems(s[None], i[None], v[None], np.ones((1, v.size), bool),
                                     need_inhibition=need_inhibition,
                                     columns=(substrate, inhibitor, rate))
    if problems:
        raise DataError(problems, context)
    return s, i, v, sigma


def grid_rule_problems(s, i, v, mask, *, need_inhibition=True,
                       columns=("substrate", "inhibitor", "rate")) -> list[list[Problem]]:
    """The rules every grid meets once its values are numbers, for many compounds at once.

    The one definition read by :func:`check_grid` (one compound) and by the batched
    engine's array check (:mod:`inhibkin.engine.mechanisms`): two substrate levels, two
    inhibitor levels when inhibition is fitted, rates that carry a signal, a substrate
    level above zero, more points than the largest model has parameters.

    Parameters
    ----------
    s, i, v : numpy.ndarray, shape (B, n)
        Substrate, inhibitor and rate of B compounds (finite where ``mask``).
    mask : numpy.ndarray of bool, shape (B, n)
        Which entries are points.
    need_inhibition : bool
        Whether the inhibitor must vary (inhibition models are fitted).
    columns : (str, str, str)
        The names the problems give the substrate, inhibitor and rate.

    Returns
    -------
    list of list of Problem
        Every problem of each compound, in a fixed order (empty: the grid can be fitted).
    """
    from .core.starts import count_unique

    substrate, inhibitor, rate = columns
    n_points = mask.sum(axis=1)
    first = np.argmax(mask, axis=1)
    rows = np.arange(s.shape[0])
    s0, i0, v0 = s[rows, first], i[rows, first], v[rows, first]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.sum(np.where(mask, v, 0.0), axis=1) / n_points
    one_substrate = count_unique(s, mask) < 2
    one_inhibitor = (count_unique(i, mask) < 2) if need_inhibition else np.zeros_like(mask[:, 0])
    all_zero = np.all((v == 0) | ~mask, axis=1)
    no_signal = ~(mean > 0)
    all_equal = np.all((v == v0[:, None]) | ~mask, axis=1)
    zero_substrate = np.all((s == 0) | ~mask, axis=1)
    n_params = 4 if need_inhibition else 2
    out = []
    for c in rows:
        problems = []
        if one_substrate[c]:
            problems.append(Problem(substrate, None, float(s0[c]),
                                    "need at least two substrate concentrations"))
        if one_inhibitor[c]:
            problems.append(Problem(inhibitor, None, float(i0[c]),
                                    "only one inhibitor level; inhibition models need at "
                                    "least two (include the uninhibited rate, I = 0)"))
        if all_zero[c]:
            problems.append(Problem(rate, None, 0.0, "all rates are zero; nothing to fit"))
        elif no_signal[c]:
            problems.append(Problem(rate, None, float(mean[c]), NO_SIGNAL))
        elif all_equal[c]:
            problems.append(Problem(rate, None, float(v0[c]), ALL_EQUAL))
        if zero_substrate[c]:
            problems.append(Problem(substrate, None, 0.0,
                                    "all substrate concentrations are zero"))
        if n_points[c] <= n_params:
            problems.append(Problem(None, None, int(n_points[c]),
                                    f"{int(n_points[c])} points; the largest model has "
                                    f"{n_params} "
                                    f"parameters and needs more points than that"))
        out.append(problems)
    return out


def check_michaelis_menten(s, v, weights=None):
    """Validate arrays for a Michaelis–Menten fit; return float arrays (s, v, weights)."""
    table = {"s": np.atleast_1d(np.asarray(s, dtype=object)),
             "v": np.atleast_1d(np.asarray(v, dtype=object))}
    if table["s"].shape != table["v"].shape:
        raise DataError(f"s and v differ in length: {table['s'].size} and {table['v'].size}")
    if weights is not None:
        table["weights"] = np.atleast_1d(np.asarray(weights, dtype=object))
        if table["weights"].shape != table["s"].shape:
            raise DataError("weights must have one entry per point")
    frame = pd.DataFrame(table)
    problems: list[Problem] = []
    s_arr = numeric_column(frame, "s", problems)
    v_arr = numeric_column(frame, "v", problems, allow_negative=True)
    w_arr = None if weights is None else numeric_column(frame, "weights", problems)
    if problems:
        raise DataError(problems)
    if len(s_arr) < 3:
        raise DataError(Problem("s", None, len(s_arr), "need at least 3 points for 2 parameters"))
    if np.unique(s_arr).size < 2:
        raise DataError(Problem("s", None, float(s_arr[0]),
                                "need at least two substrate concentrations"))
    if np.all(v_arr == 0):
        raise DataError(Problem("v", None, 0.0, "all rates are zero; nothing to fit"))
    if not np.mean(v_arr) > 0:
        raise DataError(Problem("v", None, float(np.mean(v_arr)), NO_SIGNAL))
    if np.all(v_arr == v_arr[0]):
        raise DataError(Problem("v", None, float(v_arr[0]),
                                "all rates are equal: they do not depend on the substrate, so "
                                "km cannot be determined"))
    return s_arr, v_arr, w_arr


