"""The grid route of a campaign: each compound's substrate × inhibitor grid fitted, one row.

:func:`fit_grid_chunk` is what a worker runs: it fits every compound of a chunk (one
lmfit fit after another, or all at once through the batched engine) and turns each
:class:`~inhibkin.mechanism.fit.MechanismFit` into a ranking row (:func:`grid_row`).
One bad compound fails only its own row.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..core.bound import Bound
from ..core.compare import TIME_DEPENDENT
from ..core.models import MODELS, ONE_CONSTANT_MODELS
from ..core.weighting import SD_WEIGHTINGS
from ..engine import fit_mechanism_arrays, pad
from ..errors import InhibkinError
from ..mechanism.fit import MechanismFit, with_time_dependence
from ..potency.conversion import CONVERSIONS
from ..units import to_molar
from ..validate import check_grid
from .ranking import empty_row, failed_row, unexpected_row

__all__ = ["GridSettings", "RATE_FLAGS", "REFITS", "fit_grid_compound", "fit_grid_chunk",
           "grid_row", "split_grid_chunk", "lost_grid_chunk", "grid_mechanism"]

#: The rates stage's column of well flags; a grid table that carries it is checked for
#: wells flagged time_dependent (rule 6 of inhibkin.core.compare).
RATE_FLAGS = "flags"
#: Where a ranking row carries, between worker and gatherer, the number of fits the
#: lmfit path redid for the engine (removed before the table is built).
REFITS = "_lmfit_refits"


@dataclass(frozen=True)
class GridSettings:
    """Everything a worker needs to fit one compound's grid (picklable)."""

    engine: Callable
    substrate: str
    inhibitor: str
    rate: str
    sd: str | None
    substrate_unit: str
    inhibitor_unit: str
    fit_options: tuple
    batched: bool = False


def _molar_grid(frame, settings: GridSettings, context):
    """One compound's grid validated, in M, and the fit options (sd column added)."""
    rate_se = dict(settings.fit_options).get("weighting") == "rate_se"
    s, i, v, sigma = check_grid(frame, substrate=settings.substrate,
                                inhibitor=settings.inhibitor, rate=settings.rate,
                                sd=settings.sd, context=context, allow_zero_sd=rate_se)
    data = pd.DataFrame({"substrate": to_molar(s, settings.substrate_unit),
                         "inhibitor": to_molar(i, settings.inhibitor_unit), "rate": v},
                        index=frame.index)
    options = dict(settings.fit_options)
    if sigma is not None:
        data["sd"] = sigma
        options["sd"] = "sd"
    if RATE_FLAGS in frame.columns:
        data[RATE_FLAGS] = frame[RATE_FLAGS].to_numpy()
    return data, options


def fit_grid_compound(frame, settings: GridSettings, *, context=None) -> MechanismFit:
    """Validate one compound's rows, convert concentrations to molar, call the engine.

    Parameters
    ----------
    frame : pandas.DataFrame
        The compound's rows, columns as named in ``settings``.
    settings : GridSettings
        Column names, declared units, the engine and its options.
    context : str, optional
        The compound, for error messages.

    Returns
    -------
    MechanismFit
        With substrate and inhibitor in M, so every constant is in M.
    """
    data, options = _molar_grid(frame, settings, context)
    return settings.engine(data, substrate="substrate", inhibitor="inhibitor", rate="rate",
                           context=context, **options)


def _pick_constant(constants: pd.DataFrame, mechanism: str) -> str:
    """The parameter whose value ranks the compound (see :mod:`inhibkin.campaign`)."""
    names = [n for n in MODELS[mechanism].ranking if n in constants.index]
    determined = [n for n in names if bool(constants.loc[n, "determined"])]
    if determined:
        return min(determined, key=lambda n: constants.loc[n, "estimate"])
    # None set: the weakest claim ("Ki > smallest lower limit") holds for every one.
    return min(names, key=lambda n: np.nan_to_num(constants.loc[n, "ci_low"], nan=np.inf))


def _inactive_bound(fit: MechanismFit) -> Bound | None:
    """The lower limit that every one-constant mechanism puts on Ki when no inhibition
    was detected (the smallest of their lower interval limits), or None when one of them
    sets none (a zero or missing limit, as log-scale Wald intervals of a constant far past
    the tested range often give; profile intervals usually set one)."""
    limits = []
    for name in ONE_CONSTANT_MODELS:
        (constant,) = MODELS[name].ranking
        model = fit.models.get(name)
        if model is None or not model.converged:
            return None
        limits.append(float(model.params.loc[constant, "ci_low"]))
    limits = np.array(limits)
    if not (np.all(np.isfinite(limits)) and np.all(limits > 0)):
        return None
    return Bound(">", limits.min())


def grid_row(compound, fit: MechanismFit, caught: list[str]) -> dict:
    """One ranking row from one compound's mechanism fit (constants in M)."""
    flags = list(caught)
    flags += [f"{name} fit did not converge" for name, m in fit.models.items()
              if not m.converged]
    row = empty_row(compound)
    row.update(verdict=fit.verdict, reason=fit.reason, ki_source="grid fit")
    if fit.verdict == "failed":
        row.update(status="failed", verdict="failed", flags=tuple(flags))
        return row
    if fit.verdict == TIME_DEPENDENT:
        row.update(status="time_dependent", ki_reported="not a steady-state Ki: fit kobs",
                   flags=(*flags, "time_dependent"))
        return row
    best = fit.best_fit
    if best is not None and "km" in best.params.index and not best.params.loc["km",
                                                                              "determined"]:
        flags.append("km not determined within the tested substrate range")
    if fit.verdict == "none" or fit.best == "none":
        i_max = float(fit.data["inhibitor"].max())
        row.update(status="inactive", mechanism="none",
                   ki_reported=f"no inhibition detected up to {i_max:.3g} M")
        bound = _inactive_bound(fit)
        if bound is not None:
            row.update(ki_low_M=bound.low, ki_high_M=bound.high, ki_parameter="ki",
                       ki_reported=f"{row['ki_reported']}; Ki {bound.text('M')} whatever "
                                   f"the mechanism")
        row["flags"] = tuple(flags)
        return row
    if fit.verdict == "inadequate":
        # No law fits (rule 5 of the verdict): no constant is a result.
        row.update(status="inadequate", mechanism=fit.best,
                   ki_reported="no constant: the data fit no model (lack of fit)",
                   flags=tuple(flags))
        return row
    if fit.verdict == "ambiguous":
        flags.append(f"mechanism ambiguous between {', '.join(fit.candidates)}; {fit.basis}")
        row["established"] = fit.established.text(molar=True)
    constants = fit.constants()
    mechanism = fit.best
    chosen = _pick_constant(constants, mechanism)
    # noncompetitive has one constant, ki = kic = kiu.
    for column, names in (("kic_M", ("kic", "ki")), ("kiu_M", ("kiu", "ki"))):
        for name in names:
            if name not in constants.index:
                continue
            if bool(constants.loc[name, "determined"]):
                row[column] = float(constants.loc[name, "estimate"])
            else:
                flags.append(f"{name} not determined within the tested range")
    if "alpha" in constants.index and bool(constants.loc["alpha", "determined"]):
        row["alpha"] = float(constants.loc["alpha", "estimate"])
    estimate, low, high, determined = constants.loc[
        chosen, ["estimate", "ci_low", "ci_high", "determined"]]
    row.update(mechanism=mechanism, ki_parameter=chosen)
    if bool(determined):
        row.update(status="determined", ki_M=float(estimate), ki_low_M=float(low),
                   ki_high_M=float(high), pki=-math.log10(estimate),
                   pki_low=-math.log10(high), pki_high=-math.log10(low),
                   ki_reported=f"{estimate:.3g} M [{low:.3g}, {high:.3g}]")
    elif np.isfinite(low) and low > 0:
        bound = Bound(">", low)
        row.update(status="bound", ki_low_M=bound.low, ki_high_M=bound.high,
                   pki_high=-math.log10(bound.value), ki_reported=bound.text("M"))
    else:
        row.update(status="bound", ki_reported="not determined within the tested range")
    row["flags"] = tuple(dict.fromkeys(flags))
    return row


def fit_grid_chunk(chunk, settings: GridSettings, keep_fits: bool):
    """Fit every compound of one chunk; each failure is caught and recorded.

    Returns a list of (compound, row, fit or None) in the chunk's order.
    """
    if settings.batched:
        return _fit_chunk_batched(chunk, settings, keep_fits)
    out = []
    for compound, frame in chunk:
        context = f"compound {compound!r}"
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                fit = fit_grid_compound(frame, settings, context=context)
                row = grid_row(compound, fit, [str(w.message) for w in caught])
            except InhibkinError as err:
                fit, row = None, failed_row(compound, str(err))
            except Exception as err:  # isolation: an unforeseen error fails one compound only
                fit, row = None, unexpected_row(compound, err)
        out.append((compound, row, fit if keep_fits else None))
    return out


def _fit_chunk_batched(chunk, settings: GridSettings, keep_fits: bool):
    """:func:`fit_grid_chunk` with every compound of the chunk fitted at once by the engine.

    Each compound is validated and converted exactly as on the lmfit path (the same
    checks, in the same order, so a bad compound fails with the same reason); the
    valid ones go to :func:`inhibkin.engine.fit_mechanism_arrays` together.
    """
    out, ready, flags = {}, [], {}
    for compound, frame in chunk:
        context = f"compound {compound!r}"
        try:
            data, options = _molar_grid(frame, settings, context)
            # The check fit_mechanisms makes of the converted table.
            s, i, v, sigma = check_grid(data, substrate="substrate", inhibitor="inhibitor",
                                        rate="rate", sd=options.get("sd"), context=context)
            ready.append((compound, data.index, (s, i, v, np.ones_like(v) if sigma is None
                                                 else sigma)))
            if RATE_FLAGS in data.columns:
                flags[compound] = data[RATE_FLAGS].to_numpy()
        except InhibkinError as err:
            out[compound] = (compound, failed_row(compound, str(err)), None)
        except Exception as err:  # isolation, as on the lmfit path
            out[compound] = (compound, unexpected_row(compound, err), None)
    for compound, row, fit in _engine_fits(ready, settings, flags):
        out[compound] = (compound, row, fit if keep_fits else None)
    return [out[compound] for compound, _ in chunk]


def _engine_fits(ready, settings: GridSettings, flags):
    """Ranking rows and fits of validated compounds from one engine batch.

    A warning or an unforeseen error in a batch cannot be traced to its compound, so
    then each compound is fitted again as a batch of its own: the engine's answer for
    a compound does not depend on its neighbours, and the warning lands in the flags
    of (or the error fails) the compound that caused it, as on the lmfit path.
    """
    if not ready:
        return []
    options = {k: value for k, value in settings.fit_options if k != "intervals"}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            s, i, v, sd, mask = pad([arrays for _, _, arrays in ready])
            batch = fit_mechanism_arrays(
                s, i, v, mask, sd=sd if options["weighting"] in SD_WEIGHTINGS else None,
                **options)
            fits = batch.to_mechanism_fits(data_index=[index for _, index, _ in ready])
            error = None
        except Exception as err:  # isolation: see below
            error = err
    if (caught or error is not None) and len(ready) > 1:
        return [item for one in ready for item in _engine_fits([one], settings, flags)]
    if error is not None:
        compound = ready[0][0]
        row = (failed_row(compound, str(error)) if isinstance(error, InhibkinError)
               else unexpected_row(compound, error))
        return [(compound, row, None)]
    messages = [str(w.message) for w in caught]
    out = []
    for c, ((compound, _, _), fit) in enumerate(zip(ready, fits)):
        if compound in flags:
            fit = with_time_dependence(fit, flags[compound])
        row = grid_row(compound, fit, messages)
        # Model fits the lmfit path redid, and a relative weighting it set.
        row[REFITS] = int(sum(bool(m.fallback[c]) for m in batch.models.values())
                          + bool(batch.weight_fallback[c]))
        out.append((compound, row, fit))
    return out


def split_grid_chunk(chunk):
    """A grid chunk as one-compound chunks."""
    return [[item] for item in chunk]


def lost_grid_chunk(chunk, reason):
    """Failed results for the compounds of a grid chunk that could not be run."""
    return [(compound, failed_row(compound, reason), None) for compound, _ in chunk]


def grid_mechanism(row: dict):
    """The mechanism (and alpha) a grid row hands to the IC50 conversion, or None."""
    if row["verdict"] not in CONVERSIONS:
        return None
    if row["verdict"] == "mixed":
        return ("mixed", row["alpha"]) if np.isfinite(row["alpha"]) else None
    return row["verdict"]
