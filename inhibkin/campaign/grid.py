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
from ..mechanism.fit import MechanismFit
from ..potency.conversion import CONVERSIONS
from ..units import to_molar
from ..validate import check_grid, grid_rule_problems, numeric_rows
from .lazy import BatchFit
from .ranking import empty_row, failed_row, unexpected_row

__all__ = ["GridSettings", "GridFacts", "RATE_FLAGS", "REFITS", "fit_grid_compound",
           "fit_grid_chunk", "grid_row", "row_from_facts", "facts_from_fit", "facts_from_batch",
           "split_grid_chunk", "lost_grid_chunk", "grid_mechanism"]

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


@dataclass(frozen=True)
class GridFacts:
    """What a ranking row reads from one compound's mechanism fit: built from a
    :class:`~inhibkin.mechanism.fit.MechanismFit` (:func:`facts_from_fit`) or straight
    from the engine's arrays (:func:`facts_from_batch`), so that :func:`row_from_facts`
    is the one rule for both and the engine's rows need no per-compound objects."""

    verdict: str
    reason: str
    best: str | None
    candidates: tuple
    #: Models of the fit that did not converge, in the fit's order.
    not_converged: tuple
    #: The verdict's model has a km that the data do not determine.
    km_undetermined: bool
    #: Highest inhibitor concentration of the grid (M).
    i_max: float
    #: Lower interval limit of each one-constant model's constant, None when one of
    #: them did not converge.
    inactive_limits: tuple | None
    #: The verdict's constants (MechanismFit.constants()): name -> (estimate, ci_low,
    #: ci_high, determined), in the model's order.
    constants: dict
    #: For an ambiguous verdict: what it still establishes (text) and the basis.
    established: str = ""
    basis: str = ""
    #: Warnings on the fit's rates (MechanismFit.warnings: product_inhibition), carried
    #: into the row's flags whatever the verdict.
    warnings: tuple = ()


def facts_from_fit(fit: MechanismFit) -> GridFacts:
    """The facts of a ranking row from a MechanismFit."""
    best = fit.best_fit
    limits = []
    for name in ONE_CONSTANT_MODELS:
        (constant,) = MODELS[name].ranking
        model = fit.models.get(name)
        if model is None or not model.converged:
            limits = None
            break
        limits.append(float(model.params.loc[constant, "ci_low"]))
    constants = fit.constants()
    ambiguous = fit.verdict == "ambiguous"
    return GridFacts(
        fit.verdict, fit.reason, fit.best, tuple(fit.candidates),
        tuple(name for name, m in fit.models.items() if not m.converged),
        best is not None and "km" in best.params.index
        and not best.params.loc["km", "determined"],
        float(fit.data["inhibitor"].max()), None if limits is None else tuple(limits),
        {n: tuple(constants.loc[n, ["estimate", "ci_low", "ci_high", "determined"]])
         for n in constants.index},
        fit.established.text(molar=True) if ambiguous else "",
        fit.basis if ambiguous else "", tuple(fit.warnings))


def facts_from_batch(batch, c, tried) -> GridFacts:
    """The facts of a ranking row for compound ``c`` of a MechanismBatch, read from its
    arrays as :meth:`~inhibkin.engine.MechanismBatch.mechanism_fit` would put them in a
    MechanismFit (``tried``: the compound's entry of ``batch.models_tried()``). Not for an
    ambiguous verdict, whose established constants need the whole fit."""
    shown = {name: batch.models[name] for name in batch.shown_models(c, tried)}
    verdict, best = batch.verdict[c], batch.best[c]
    model = shown.get(best) if best else None
    limits = []
    for name in ONE_CONSTANT_MODELS:
        (constant,) = MODELS[name].ranking
        m = shown.get(name)
        if m is None or not m.converged[c]:
            limits = None
            break
        limits.append(float(m.ci_low[c, m.names.index(constant)]))
    constants = {}
    if model is not None and best != "none" and verdict not in (TIME_DEPENDENT, "inadequate"):
        constants = {n: (model.estimate[c, j], model.ci_low[c, j], model.ci_high[c, j],
                         model.determined[c, j])
                     for j, n in enumerate(model.names) if n not in ("vmax", "km")}
    return GridFacts(
        verdict, batch.reason[c], best, tuple(batch.candidates[c]),
        tuple(name for name, m in shown.items() if not m.converged[c]),
        model is not None and "km" in model.names
        and not model.determined[c, model.names.index("km")],
        float(batch.i[c][batch.mask[c]].max()), None if limits is None else tuple(limits),
        constants)


def _pick_constant(constants: dict, mechanism: str) -> str:
    """The parameter whose value ranks the compound (see :mod:`inhibkin.campaign`)."""
    names = [n for n in MODELS[mechanism].ranking if n in constants]
    determined = [n for n in names if bool(constants[n][3])]
    if determined:
        return min(determined, key=lambda n: constants[n][0])
    # None set: the weakest claim ("Ki > smallest lower limit") holds for every one.
    return min(names, key=lambda n: np.nan_to_num(constants[n][1], nan=np.inf))


def _inactive_bound(limits) -> Bound | None:
    """The lower limit that every one-constant mechanism puts on Ki when no inhibition
    was detected (the smallest of their lower interval limits), or None when one of them
    sets none (a zero or missing limit, as log-scale Wald intervals of a constant far past
    the tested range often give; profile intervals usually set one)."""
    if limits is None:
        return None
    limits = np.array(limits)
    if not (np.all(np.isfinite(limits)) and np.all(limits > 0)):
        return None
    return Bound(">", limits.min())


def grid_row(compound, fit: MechanismFit, caught: list[str]) -> dict:
    """One ranking row from one compound's mechanism fit (constants in M)."""
    return row_from_facts(compound, facts_from_fit(fit), caught)


def row_from_facts(compound, fit: GridFacts, caught: list[str]) -> dict:
    """One ranking row from the facts of one compound's mechanism fit (constants in M)."""
    flags = list(caught) + list(fit.warnings)
    flags += [f"{name} fit did not converge" for name in fit.not_converged]
    row = empty_row(compound)
    row.update(verdict=fit.verdict, reason=fit.reason, ki_source="grid fit")
    if fit.verdict == "failed":
        row.update(status="failed", verdict="failed", flags=tuple(flags))
        return row
    if fit.verdict == TIME_DEPENDENT:
        row.update(status="time_dependent", ki_reported="not a steady-state Ki: fit kobs",
                   flags=(*flags, "time_dependent"))
        return row
    if fit.km_undetermined:
        flags.append("km not determined within the tested substrate range")
    if fit.verdict == "none" or fit.best == "none":
        row.update(status="inactive", mechanism="none",
                   ki_reported=f"no inhibition detected up to {fit.i_max:.3g} M")
        bound = _inactive_bound(fit.inactive_limits)
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
        row["established"] = fit.established
    constants = fit.constants
    mechanism = fit.best
    chosen = _pick_constant(constants, mechanism)
    # noncompetitive has one constant, ki = kic = kiu.
    for column, names in (("kic_M", ("kic", "ki")), ("kiu_M", ("kiu", "ki"))):
        for name in names:
            if name not in constants:
                continue
            if bool(constants[name][3]):
                row[column] = float(constants[name][0])
            else:
                flags.append(f"{name} not determined within the tested range")
    if "alpha" in constants and bool(constants["alpha"][3]):
        row["alpha"] = float(constants["alpha"][0])
    estimate, low, high, determined = constants[chosen]
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
    for (compound, frame), arrays in zip(chunk, _checked_at_once(chunk, settings)):
        context = f"compound {compound!r}"
        if arrays is not None:
            ready.append((compound, frame.index, arrays))
            if RATE_FLAGS in frame.columns:
                flags[compound] = frame[RATE_FLAGS].to_numpy()
            continue
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


def _checked_at_once(chunk, settings: GridSettings) -> list:
    """Every compound of a chunk through the checks of :func:`_fit_chunk_batched` at
    once: per compound (s, i, v, sd) in M, exactly as the per-compound checks give them,
    or None when one of those checks has something to say (that compound is then
    checked on its own, for the message naming its rows)."""
    frames = [frame for _, frame in chunk]
    names = [settings.substrate, settings.inhibitor, settings.rate]
    names += [settings.sd] if settings.sd is not None else []
    if not frames or any(len(f) == 0 or any(n not in f.columns for n in names)
                         for f in frames):
        return [None] * len(frames)
    table = pd.concat([f[names] for f in frames])
    s, bad = numeric_rows(table, settings.substrate)
    i, bad_i = numeric_rows(table, settings.inhibitor)
    v, bad_v = numeric_rows(table, settings.rate, allow_negative=True)
    bad |= bad_i | bad_v
    sigma = None
    if settings.sd is not None:
        sigma, bad_sd = numeric_rows(table, settings.sd)
        # A zero sd fails the check of the converted table whatever the weighting.
        bad |= bad_sd | (sigma == 0)
    s_m, i_m = to_molar(s, settings.substrate_unit), to_molar(i, settings.inhibitor_unit)
    converted = pd.DataFrame({"substrate": s_m, "inhibitor": i_m})
    bad |= numeric_rows(converted, "substrate")[1] | numeric_rows(converted, "inhibitor")[1]
    cuts = np.cumsum([len(f) for f in frames])[:-1]
    pieces = [np.split(a, cuts) for a in (s, i, v, s_m, i_m)]
    sds = np.split(sigma, cuts) if sigma is not None else [None] * len(frames)
    # The grid rules of check_grid, before and after the conversion.
    s_pad, i_pad, v_pad, mask = pad(list(zip(*pieces[:3])))
    sm_pad, im_pad, _, _ = pad(list(zip(pieces[3], pieces[4], pieces[2])))
    ruled = [bool(a or b) for a, b in zip(grid_rule_problems(s_pad, i_pad, v_pad, mask),
                                          grid_rule_problems(sm_pad, im_pad, v_pad, mask))]
    out = []
    for k, rows_bad in enumerate(np.split(bad, cuts)):
        if rows_bad.any() or ruled[k]:
            out.append(None)
            continue
        v_k = pieces[2][k]
        out.append((pieces[3][k], pieces[4][k], v_k,
                    np.ones_like(v_k) if sds[k] is None else sds[k]))
    return out


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
    tried = batch.models_tried()
    out = []
    for c, (compound, index, _) in enumerate(ready):
        fit = BatchFit(batch, c, index, flags.get(compound))
        try:
            if compound in flags or batch.verdict[c] == "ambiguous":
                # The time-dependence rule and what an ambiguous verdict establishes
                # read the whole fit.
                fit = fit.build()
                row = grid_row(compound, fit, messages)
            else:
                row = row_from_facts(compound, facts_from_batch(batch, c, tried[c]),
                                     messages)
        except Exception as err:  # isolation: an unforeseen error fails one compound only
            out.append((compound, unexpected_row(compound, err), None))
            continue
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
