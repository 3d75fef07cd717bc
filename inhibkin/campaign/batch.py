"""Campaigns: many compounds fitted in isolation, on one core, many, or a Dask cluster.

:func:`fit_campaign` splits a tidy table by compound, fits each compound on its own
(one bad compound never stops the others), and gathers one ranked table with one row
per input compound. The work travels in chunks of ``chunk_size`` compounds, so the
same code runs serially, on local processes (``workers=N``) or on a
``dask.distributed`` cluster (``client=``) and gives the same table, row for row: the
per-compound computation is identical and the results are put back in input order
before ranking.

Ranking
-------
``status`` is one of

``determined``
    the inhibition constant is determined within the tested range; ranked by pKi,
    most potent first;
``bound``
    the constant lies beyond what the data can set; reported as "Ki > x"
    (``ki_low_M`` = x, ``ki_M`` and ``pki`` empty), ranked after every determined
    value by that lower limit;
``inactive``
    no inhibition detected (the grid's verdict is ``none``, or the dose-response
    curve's class is ``inactive``: "IC50 > the highest tested concentration");
``time_dependent``
    the grid's rates come from wells the rates stage flagged ``time_dependent`` (their
    progress curves bend: slow binding or inactivation), so no steady-state Ki is
    reported or ranked; ``reason`` says so. Characterise such a compound by kobs
    (:func:`inhibkin.fit_time_dependent`, ``inhibkin inactivation``). The flag is read
    from the grid table's ``flags`` column (:data:`RATE_FLAGS`, as
    :func:`inhibkin.initial_rates` writes it) when the table has one;
``failed``
    the data could not be used or the fit gave no answer; ``reason`` says why.

Bounds, time-dependent compounds and failures never appear as numbers in ``ki_M`` or ``pki``.

The ranking constant is one rule for both routes (:func:`ranking_constant`):
competitive ranks by kic, uncompetitive by kiu, noncompetitive by ki (= kic = kiu),
mixed by the tighter (smaller) of kic and kiu — on the grid route the smaller of the
two the fit determined, on the IC50 route kic·min(1, alpha) with alpha = kiu/kic from
the mechanism fit. ``ki_parameter`` says which constant it is on every row that
reports a Ki or a bound. ``ki_source`` says where the Ki came from: ``grid fit``
(global fit of a substrate × inhibitor grid) or ``converted IC50`` (a dose-response
IC50 converted by :func:`~inhibkin.potency.table.potency_table`, Cheng–Prusoff by mechanism
or a Morrison fit).

Engines
-------
By default (``engine="auto"``) a table of at least :data:`AUTO_ENGINE_MIN_COMPOUNDS`
compounds with Wald intervals goes through the batched engine (:mod:`inhibkin.engine`):
each chunk's grids are fitted together, every model at once, and its dose-response
curves likewise; the lmfit path stays the reference, redoes whatever the engine does
not converge (counted in ``Campaign.options["n_fallback"]``), and computes every profile
interval. Grids and curves decide alone, by their own number of compounds, and a
campaign never mixes the two paths within one table, so its answers do not depend on
the chunking. The two paths agree to 1e-6 relative on every well-determined estimate
and give the same verdicts (``tests/test_campaign_engine.py``); ``engine="lmfit"``
asks for the reference.

Intervals
---------
Campaign fits use log-scale Wald intervals (``intervals="wald"``) by default: about
eight times faster than profile-likelihood intervals (0.04 s against 0.34 s per compound
for a 96-point grid), and close to them when a constant is well determined. Ask for
``intervals="profile"`` when the intervals themselves are the result.
"""

from __future__ import annotations

import inspect
import math
import multiprocessing
import time
import warnings
from collections import deque
from collections.abc import Callable, Mapping
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from functools import partial
from types import MappingProxyType

import numpy as np
import pandas as pd

from ..core.compare import TIME_DEPENDENT
from ..core.models import MODELS, ONE_CONSTANT_MODELS
from ..core.options import FitOptions
from ..core.readonly import readonly_frame, readonly_mapping
from ..core.weighting import SD_WEIGHTINGS, resolve_weighting, weighting_label
from ..display.text import ki_texts, ranking_ki_unit, text_table
from ..engine import fit_mechanism_arrays, pad
from ..errors import DataError, InhibkinError, OptionError, Problem
from ..mechanism.fit import MechanismFit, fit_mechanisms, with_time_dependence
from ..potency.conversion import CONVERSIONS
from ..potency.table import EngineFitter, check_potency_options, potency_table
from ..progress import progress_bar
from ..rates.plates import ROLES, Z_PRIME_THRESHOLD, plate_qc
from ..simulate import simulate_grid
from ..units import (
    CONCENTRATION_UNITS,
    from_molar,
    parse_concentration,
    resolve_units,
    restate_molar,
    to_molar,
)
from ..validate import check_columns, check_grid, check_options, normalise_roles, row_kind

__all__ = [
    "Campaign",
    "fit_campaign",
    "fit_grid_compound",
    "simulate_campaign",
    "simulate_dose_campaign",
    "parse_concentration",
    "ranking_constant",
    "RANKING_COLUMNS",
    "PLATE_COLUMNS",
    "STATUSES",
    "RATE_FLAGS",
    "LE_KCAL_PER_PKI",
    "ENGINES",
    "AUTO_ENGINE_MIN_COMPOUNDS",
]

STATUSES = ("determined", "bound", "inactive", "inadequate", "time_dependent", "failed")
#: The rates stage's column of well flags; a grid table that carries it is checked for
#: wells flagged time_dependent (rule 6 of inhibkin.core.compare).
RATE_FLAGS = "flags"

# Ligand efficiency LE = 1.37 * pKi / heavy atoms, in kcal/mol per heavy atom: 1.37 is
# 2.303·R·T at 298 K in kcal/mol (Hopkins, Groom & Alex 2004, Drug Discov. Today 9:430).
LE_KCAL_PER_PKI = 1.37

RANKING_COLUMNS = (
    "rank", "compound", "status", "verdict", "mechanism", "ki_parameter", "ki_M", "ki_low_M",
    "ki_high_M", "pki", "pki_low", "pki_high", "ki_reported", "kic_M", "kiu_M", "alpha",
    "ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill", "ki_source", "flags", "reason",
    "established",
)
_EFFICIENCY_COLUMNS = ("heavy_atoms", "logp", "le", "lipe")
#: Columns of :attr:`Campaign.plates` (those of :meth:`inhibkin.rates.plates.PlateQC.to_frame`).
PLATE_COLUMNS = ("plate", "n_max", "mean_max", "sd_max", "n_min", "mean_min", "sd_min",
                 "z_prime", "flagged", "problem")

#: The named choices of ``fit_campaign(engine=)`` (a function is the fourth).
ENGINES = ("auto", "batched", "lmfit")
#: With ``engine="auto"`` a table (grids, or dose-response curves) of at least this many
#: compounds goes through the batched engine: below it the lmfit loop costs under a
#: second or so, and the engine's per-batch set-up gains little.
AUTO_ENGINE_MIN_COMPOUNDS = 20
# Where a ranking row carries, between worker and gatherer, the number of fits the lmfit
# path redid for the engine (removed before the table is built).
_REFITS = "_lmfit_refits"
# A chunk closes at this many compounds (the ``chunk_size`` default) or this many rows,
# whichever comes first, so no single task carries a large slice of the table.
_DEFAULT_CHUNK_SIZE = 32
# The same with the batched engine: numpy's per-call cost is then spread over more
# compounds (about 1.6 times the grid throughput of 32-compound chunks).
_BATCHED_CHUNK_SIZE = 256
_MAX_ROWS_PER_CHUNK = 50_000
# Passes of the lost chunks over a full local pool before they are run one at a time.
_PARALLEL_PASSES = 2
# Rows shown by Campaign.summary() and _repr_html_().
_SUMMARY_ROWS = 10


def ranking_constant(mechanism: str, alpha=None) -> tuple[str, float]:
    """Which constant ranks a compound of ``mechanism``, and its ratio to kic.

    The one rule both routes follow: competitive → kic, uncompetitive → kiu,
    noncompetitive → ki, mixed → the tighter of kic and kiu = alpha·kic.

    Parameters
    ----------
    mechanism : str
        One of the four inhibition mechanisms.
    alpha : float, optional
        kiu/kic (mixed only).

    Returns
    -------
    (str, float)
        The parameter name and the factor f with constant = f·(the constant an IC50
        converts to: kic for mixed, the mechanism's own constant otherwise).
    """
    if mechanism == "mixed":
        if alpha is not None and np.isfinite(alpha) and alpha < 1.0:
            return "kiu", float(alpha)
        return "kic", 1.0
    return MODELS[mechanism].ranking[0], 1.0


@dataclass(frozen=True)
class _GridSettings:
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


def _molar_grid(frame, settings: _GridSettings, context):
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


def fit_grid_compound(frame, settings: _GridSettings, *, context=None) -> MechanismFit:
    """Validate one compound's rows, convert concentrations to molar, call the engine.

    Parameters
    ----------
    frame : pandas.DataFrame
        The compound's rows, columns as named in ``settings``.
    settings : _GridSettings
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


def _empty_row(compound) -> dict:
    row = dict.fromkeys(RANKING_COLUMNS, np.nan)
    row.update(compound=compound, rank=pd.NA, verdict="", mechanism="", ki_parameter="",
               ki_reported="", ki_source="", flags="", reason="", established="")
    return row


def _failed_row(compound, reason, flags="") -> dict:
    row = _empty_row(compound)
    row.update(status="failed", verdict="failed", reason=reason, flags=flags)
    return row


def _pick_constant(constants: pd.DataFrame, mechanism: str) -> str:
    """The parameter whose value ranks the compound (see the module docstring)."""
    names = [n for n in MODELS[mechanism].ranking if n in constants.index]
    determined = [n for n in names if bool(constants.loc[n, "determined"])]
    if determined:
        return min(determined, key=lambda n: constants.loc[n, "estimate"])
    # None set: the weakest claim ("Ki > smallest lower limit") holds for every one.
    return min(names, key=lambda n: np.nan_to_num(constants.loc[n, "ci_low"], nan=np.inf))


def _inactive_bound(fit: MechanismFit):
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
    return float(limits.min())


def _grid_row(compound, fit: MechanismFit, caught: list[str]) -> dict:
    """One ranking row from one compound's mechanism fit (constants in M)."""
    flags = list(caught)
    flags += [f"{name} fit did not converge" for name, m in fit.models.items()
              if not m.converged]
    row = _empty_row(compound)
    row.update(verdict=fit.verdict, reason=fit.reason, ki_source="grid fit")
    if fit.verdict == "failed":
        row.update(status="failed", verdict="failed", flags="; ".join(flags))
        return row
    if fit.verdict == TIME_DEPENDENT:
        row.update(status="time_dependent", ki_reported="not a steady-state Ki: fit kobs",
                   flags="; ".join([*flags, "time_dependent"]))
        return row
    best = fit.best_fit
    if best is not None and "km" in best.params.index and not best.params.loc["km",
                                                                              "determined"]:
        flags.append("km not determined within the tested substrate range")
    if fit.verdict == "none" or fit.best == "none":
        i_max = float(fit.data["inhibitor"].max())
        row.update(status="inactive", mechanism="none",
                   ki_reported=f"no inhibition detected up to {i_max:.3g} M")
        low = _inactive_bound(fit)
        if low is not None:
            row.update(ki_low_M=low, ki_high_M=np.inf, ki_parameter="ki",
                       ki_reported=f"{row['ki_reported']}; Ki > {low:.3g} M whatever the "
                                   f"mechanism")
        row["flags"] = "; ".join(flags)
        return row
    if fit.verdict == "inadequate":
        # No law fits (rule 5 of the verdict): no constant is a result.
        row.update(status="inadequate", mechanism=fit.best,
                   ki_reported="no constant: the data fit no model (lack of fit)",
                   flags="; ".join(flags))
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
        row.update(status="bound", ki_low_M=float(low), ki_high_M=np.inf,
                   pki_high=-math.log10(low), ki_reported=f"> {low:.3g} M")
    else:
        row.update(status="bound", ki_reported="not determined within the tested range")
    row["flags"] = "; ".join(dict.fromkeys(flags))
    return row


def _unexpected(compound, err) -> dict:
    return _failed_row(compound, f"unexpected error ({type(err).__name__}): {err}")


def _fit_chunk(chunk, settings: _GridSettings, keep_fits: bool):
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
                row = _grid_row(compound, fit, [str(w.message) for w in caught])
            except InhibkinError as err:
                fit, row = None, _failed_row(compound, str(err))
            except Exception as err:  # isolation: an unforeseen error fails one compound only
                fit, row = None, _unexpected(compound, err)
        out.append((compound, row, fit if keep_fits else None))
    return out


def _fit_chunk_batched(chunk, settings: _GridSettings, keep_fits: bool):
    """:func:`_fit_chunk` with every compound of the chunk fitted at once by the engine.

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
            out[compound] = (compound, _failed_row(compound, str(err)), None)
        except Exception as err:  # isolation, as on the lmfit path
            out[compound] = (compound, _unexpected(compound, err), None)
    for compound, row, fit in _engine_fits(ready, settings, flags):
        out[compound] = (compound, row, fit if keep_fits else None)
    return [out[compound] for compound, _ in chunk]


def _engine_fits(ready, settings: _GridSettings, flags):
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
        row = (_failed_row(compound, str(error)) if isinstance(error, InhibkinError)
               else _unexpected(compound, error))
        return [(compound, row, None)]
    messages = [str(w.message) for w in caught]
    out = []
    for c, ((compound, _, _), fit) in enumerate(zip(ready, fits)):
        if compound in flags:
            fit = with_time_dependence(fit, flags[compound])
        row = _grid_row(compound, fit, messages)
        # Model fits the lmfit path redid, and a relative weighting it set.
        row[_REFITS] = int(sum(bool(m.fallback[c]) for m in batch.models.values())
                           + bool(batch.weight_fallback[c]))
        out.append((compound, row, fit))
    return out


def _split_grid_chunk(chunk):
    """A grid chunk as one-compound chunks."""
    return [[item] for item in chunk]


def _lost_grid_chunk(chunk, reason):
    """Failed results for the compounds of a grid chunk that could not be run."""
    return [(compound, _failed_row(compound, reason), None) for compound, _ in chunk]


def _chunks(groups, chunk_size):
    """Consecutive chunks of at most ``chunk_size`` compounds and about
    ``_MAX_ROWS_PER_CHUNK`` rows."""
    chunk, rows = [], 0
    for compound, frame in groups:
        if chunk and (len(chunk) >= chunk_size or rows + len(frame) > _MAX_ROWS_PER_CHUNK):
            yield chunk
            chunk, rows = [], 0
        chunk.append((compound, frame))
        rows += len(frame)
    if chunk:
        yield chunk


def _run(function, chunks, arguments, *, workers, client, quiet, sizes, split, lost):
    """``function(chunk, *arguments)`` for every chunk, on whatever runs them; the results
    in chunk order. ``sizes`` are the compounds per chunk, for the progress bar.

    A worker process that dies (killed, out of memory, a crash in compiled code) loses
    the chunks it held; they are run again (see :func:`_run_local`, :func:`_run_dask`).
    ``split(chunk)`` cuts a chunk into one-compound chunks, and ``lost(chunk, reason)``
    gives the failed results of a one-compound chunk that killed its worker every time,
    so no compound is ever dropped: each comes back fitted or failed with the reason.
    """
    # Results of the pieces of each chunk, keyed by their place in it: () for the whole
    # chunk, (j,) for its j-th piece after a split; sorted keys give the input order.
    pieces = [{} for _ in chunks]
    with progress_bar(sum(sizes), quiet=quiet, desc="fitting") as bar:
        def done(task, result):
            k, path, _ = task
            pieces[k][path] = result
            bar.update(len(result))

        tasks = [(k, (), chunk) for k, chunk in enumerate(chunks)]
        if client is not None:
            _run_dask(client, function, tasks, arguments, split, lost, done)
        elif workers is not None and workers > 1:
            _run_local(workers, function, tasks, arguments, split, lost, done)
        else:
            for task in tasks:
                done(task, function(task[2], *arguments))
    return [item for parts in pieces for path in sorted(parts) for item in parts[path]]


def _run_local(workers, function, tasks, arguments, split, lost, done):
    """Chunks on local processes, with the chunks of a dead worker run again.

    When a worker dies the pool breaks and every chunk not yet finished is lost, the
    culprit among them. Those chunks get one more pass on a fresh pool (a death from
    outside — memory, a signal — rarely repeats); what is lost again is then run one
    chunk at a time on a single worker, where a death points at the chunk that caused
    it: that chunk is split and its compounds run one by one, and a compound that still
    kills its worker is reported failed.
    """
    from concurrent.futures.process import BrokenProcessPool

    # spawn: a fresh interpreter per worker, safe beside threads (dask, BLAS) and the
    # same on Linux, macOS and Windows.
    context = multiprocessing.get_context("spawn")
    for _ in range(_PARALLEL_PASSES):
        if not tasks:
            return
        lost_tasks = []
        with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
            futures = {pool.submit(function, task[2], *arguments): task for task in tasks}
            for future in as_completed(futures):
                try:
                    result = future.result()
                except BrokenProcessPool:
                    lost_tasks.append(futures[future])
                    continue
                done(futures[future], result)
        tasks = sorted(lost_tasks, key=lambda task: task[:2])
    queue = deque(tasks)
    pool = None
    try:
        while queue:
            task = queue.popleft()
            k, path, chunk = task
            pool = pool or ProcessPoolExecutor(max_workers=1, mp_context=context)
            try:
                result = pool.submit(function, chunk, *arguments).result()
            except BrokenProcessPool as err:
                pool.shutdown()
                pool = None
                parts = split(chunk)
                if len(parts) > 1:
                    queue.extendleft(reversed([(k, path + (j,), part)
                                               for j, part in enumerate(parts)]))
                    continue
                result = lost(chunk, f"the worker process died every time this compound "
                                     f"was fitted, the last time with it alone ({err})")
            done(task, result)
    finally:
        if pool is not None:
            pool.shutdown()


def _run_dask(client, function, tasks, arguments, split, lost, done):
    """Chunks on a Dask cluster, with the chunks of a dead worker run again.

    The scheduler itself reruns the tasks of a worker that dies, until a task has been
    on ``distributed.scheduler.allowed-failures`` dying workers; then it gives up on it
    (``KilledWorker``), whether it caused the deaths or only shared a worker with the
    task that did. Such a chunk is split and its compounds submitted one by one; a
    compound given up on by itself is run once more at the end, alone on the cluster,
    where a death can only be its own, and is reported failed if it dies again.
    """
    from distributed import KilledWorker
    from distributed import as_completed as dask_completed

    futures = {client.submit(function, task[2], *arguments, pure=False): task
               for task in tasks}
    queue = dask_completed(list(futures))
    suspects = []
    for future in queue:
        task = futures.pop(future)
        k, path, chunk = task
        try:
            result = future.result()
        except KilledWorker:
            parts = split(chunk)
            if len(parts) > 1:
                for j, part in enumerate(parts):
                    piece = client.submit(function, part, *arguments, pure=False)
                    futures[piece] = (k, path + (j,), part)
                    queue.add(piece)
            else:
                suspects.append(task)
            continue
        done(task, result)
    for task in sorted(suspects, key=lambda task: task[:2]):
        try:
            result = client.submit(function, task[2], *arguments, pure=False).result()
        except KilledWorker as err:
            result = lost(task[2], f"the Dask workers running this compound died, the last "
                                   f"time with it alone; the scheduler gave up on it ({err})")
        done(task, result)


def _compound_properties(table, compound, columns):
    """Per-compound heavy-atom count and logP; a compound with differing values gets NaN
    and a flag."""
    out = {}
    for column in columns:
        if column not in table.columns:
            continue
        values = pd.to_numeric(table[column], errors="coerce")
        grouped = values.groupby(table[compound], sort=False)
        first, n_unique = grouped.first(), grouped.nunique()
        out[column] = (first.where(n_unique <= 1), n_unique[n_unique > 1].index)
    return out


def _add_efficiencies(ranking, properties, heavy_atoms, logp):
    """LE and LipE from pKi (determined compounds only)."""
    if heavy_atoms in properties:
        values, clashes = properties[heavy_atoms]
        ranking["heavy_atoms"] = ranking["compound"].map(values)
        with np.errstate(divide="ignore", invalid="ignore"):
            le = LE_KCAL_PER_PKI * ranking["pki"] / ranking["heavy_atoms"]
        ranking["le"] = le.where(ranking["heavy_atoms"] > 0)
        _flag(ranking, clashes, f"{heavy_atoms} differs between rows; LE not computed")
    if logp in properties:
        values, clashes = properties[logp]
        ranking["logp"] = ranking["compound"].map(values)
        # LipE = pKi − logP (Leeson & Springthorpe 2007, Nat. Rev. Drug Discov. 6:881).
        ranking["lipe"] = ranking["pki"] - ranking["logp"]
        _flag(ranking, clashes, f"{logp} differs between rows; LipE not computed")


def _flag(ranking, compounds, text):
    hit = ranking["compound"].isin(list(compounds))
    ranking.loc[hit, "flags"] = [f"{f}; {text}" if f else text for f in ranking.loc[hit, "flags"]]


def _rank(rows) -> pd.DataFrame:
    """Sort: determined by pKi (high first), then bounds — "Ki < x" (more potent than
    the tested range) before "Ki > x", each by its limit — then inactive, then
    time-dependent, then failed;
    ties keep the input order."""
    ranking = pd.DataFrame(rows, columns=list(RANKING_COLUMNS))
    status = ranking["status"].to_numpy()
    order = ranking["status"].map({s: k for k, s in enumerate(STATUSES)}).to_numpy()
    pki = ranking["pki"].to_numpy(dtype=float)
    upper = ranking["pki_high"].to_numpy(dtype=float)
    lower = ranking["pki_low"].to_numpy(dtype=float)
    below_range = (status == "bound") & np.isfinite(lower) & ~np.isfinite(upper)
    side = np.where(below_range, 0, 1)
    key = np.where(status == "determined", -pki,
                   np.where(below_range, -lower, np.where(status == "bound", -upper, 0.0)))
    key = np.nan_to_num(key, nan=np.inf)
    position = np.lexsort((np.arange(len(ranking)), key, side, order))
    ranking = ranking.iloc[position].reset_index(drop=True)
    determined = ranking["status"] == "determined"
    ranking["rank"] = pd.array([pd.NA] * len(ranking), dtype="Int64")
    ranking.loc[determined, "rank"] = np.arange(1, int(determined.sum()) + 1)
    for column in ("ki_M", "ki_low_M", "ki_high_M", "pki", "pki_low", "pki_high", "kic_M",
                   "kiu_M", "alpha", "ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill"):
        ranking[column] = ranking[column].astype(float)
    # One unit for the whole Ki column, chosen by magnitude (the rows wrote M).
    unit = ranking_ki_unit(ranking)
    ranking["ki_reported"] = [restate_molar(t, unit) for t in ranking["ki_reported"]]
    return ranking


@dataclass(frozen=True)
class Campaign:
    """Every compound of a campaign, fitted, and the ranked table.

    Attributes
    ----------
    ranking : pandas.DataFrame
        One row per input compound, ranked (see :mod:`inhibkin.campaign.batch`): rank, compound,
        status, verdict, mechanism, ki_parameter, ki_M, ki_low_M, ki_high_M (interval at
        ``level``), pki, pki_low, pki_high, ki_reported (text), kic_M, kiu_M, alpha,
        ic50_M (and interval), pic50, hill, ki_source, flags, reason, established (for an
        ambiguous verdict: the leading mechanism, the determined constants with their
        intervals and the bounds on the others, as text); plus heavy_atoms,
        logp, le (kcal/mol per heavy atom) and lipe when those inputs were given.
        Concentrations in M.
    fits : Mapping
        compound → :class:`~inhibkin.mechanism.fit.MechanismFit` (constants in M) for every
        compound whose grid was fitted; compounds that failed validation have no entry.
    options : Mapping
        The settings of the run: weighting, intervals, level, engine (as asked),
        grid_engine and dose_engine (the path each table took: ``"batched"``,
        ``"lmfit"``, the function's name, or ``""`` without that table), n_fallback
        (fits the lmfit path redid because the batched engine did not converge them:
        n_fallback_grid model fits — plus relative weightings it set — and
        n_fallback_dose curves), declared units, seconds taken.
    potency_fits : Mapping
        compound → :class:`~inhibkin.potency.curve.DoseResponseFit` (concentrations in M) for
        every compound whose dose-response curve was fitted.
    plates : pandas.DataFrame
        Control statistics and Z'-factor of every plate of the dose-response table, one
        row per plate in table order, columns :data:`PLATE_COLUMNS`: plate, n_max,
        mean_max, sd_max, n_min, mean_min, sd_min (signal units), z_prime, flagged (Z'
        below the threshold, or the plate could not be normalised) and problem (why
        not, else empty). The numbers are those :func:`~inhibkin.potency.table.potency_table`
        uses to normalise the wells. Empty (same columns) without a dose-response table.
    """

    ranking: pd.DataFrame
    fits: Mapping = field(repr=False)
    options: Mapping = field(default_factory=dict)
    potency_fits: Mapping = field(default_factory=dict, repr=False)
    plates: pd.DataFrame = field(default_factory=lambda: _plates_frame(None), repr=False)

    def __post_init__(self):
        # Frozen all the way down: campaign.ranking.loc[...] = ... and
        # campaign.options["units"][...] = ... are refused; to_frame() gives a copy to edit.
        for name in ("ranking", "plates"):
            object.__setattr__(self, name, readonly_frame(getattr(self, name)))
        for name in ("fits", "potency_fits"):
            object.__setattr__(self, name, readonly_mapping(getattr(self, name), nested=False))
        object.__setattr__(self, "options", readonly_mapping(self.options))

    @property
    def counts(self) -> dict:
        """Number of compounds per status."""
        counts = self.ranking["status"].value_counts()
        return {s: int(counts.get(s, 0)) for s in STATUSES}

    @property
    def failed(self) -> pd.DataFrame:
        """The failed compounds with their reasons."""
        return self.ranking.loc[self.ranking["status"] == "failed", ["compound", "reason"]]

    def to_frame(self) -> pd.DataFrame:
        """The ranked table (a copy)."""
        return self.ranking.copy()

    def parameters(self) -> pd.DataFrame:
        """Tidy table of every model's parameters for every fitted compound (M)."""
        frames = []
        for compound, fit in self.fits.items():
            frame = fit.to_frame()
            frame.insert(0, "compound", compound)
            frame.insert(1, "verdict", fit.verdict)
            frames.append(frame)
        if not frames:
            return pd.DataFrame(columns=["compound", "verdict", "model", "is_best", "parameter",
                                         "estimate", "se", "ci_low", "ci_high", "determined"])
        return pd.concat(frames, ignore_index=True)

    def _head(self):
        counts = self.counts
        parts = ", ".join(f"{n} {s}" for s, n in counts.items() if n)
        return f"Campaign of {len(self.ranking)} compounds: {parts}"

    def summary(self, rows=_SUMMARY_ROWS) -> str:
        """Plain text: counts by status, the top of the ranking, every failure's reason."""
        width = 78
        shown = self.ranking.head(rows)[["rank", "compound", "status", "verdict", "mechanism",
                                         "pki", "ki_source"]]
        unit = ranking_ki_unit(self.ranking)
        shown.insert(5, f"Ki ({unit}) [95% CI]",
                     [t for t, _ in ki_texts(self.ranking.head(rows), unit)])
        lines = ["=" * width, self._head(),
                 f"({self.options.get('intervals', '')} intervals at "
                 f"{100 * self.options.get('level', 0.95):g}%, "
                 f"{weighting_label(self.options.get('weighting', ''))} weighting)", "-" * width,
                 text_table(shown, index=False, float_format=lambda x: f"{x:.2f}")]
        if len(self.plates):
            flagged = self.plates.loc[self.plates["flagged"], "plate"]
            lines += ["-" * width, f"{len(self.plates)} dose-response plates, {len(flagged)} "
                                   f"flagged (low Z' or unusable controls)"
                                   + (f": {', '.join(map(str, flagged))}" if len(flagged) else "")]
        failed = self.failed
        if len(failed):
            lines += ["-" * width, "Failed:"]
            lines += [f"  {c}: {r}" for c, r in zip(failed["compound"], failed["reason"])]
        lines.append("=" * width)
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from ..display.html import campaign_html

        return campaign_html(self)


def _plates_frame(qc) -> pd.DataFrame:
    """:attr:`Campaign.plates` from a PlateQC (None: the empty table)."""
    if qc is None:
        return pd.DataFrame({name: pd.Series(dtype=dtype) for name, dtype in zip(
            PLATE_COLUMNS, (object, int, float, float, int, float, float, float, bool,
                            object))})
    return qc.to_frame()[list(PLATE_COLUMNS)]


def _campaign_plates(frame, *, plate, role, response, threshold) -> pd.DataFrame:
    """Plate QC of the whole dose-response table, computed once.

    Every chunk's potency table carries all the control wells of its plates, so its
    plate rows equal these; computing them here once also covers plates that no chunk
    sees (controls only). Sample wells only name their plate: their signals play no part
    in Z' and are not read (a bad sample signal fails its compound, not the plate).
    """
    wells = frame[[plate, role, response]].copy()
    samples = (wells[role] == "sample").to_numpy()
    wells[response] = wells[response].astype(object).where(~samples, 0.0)
    return _plates_frame(plate_qc(wells, plate=plate, role=role, response=response,
                                  threshold=threshold, strict=False))


# potency_table's options that fit_campaign sets itself (columns, units, Km, the fitter).
_POTENCY_OPTIONS_SET_HERE = ("df", "compound", "plate", "role", "concentration", "response",
                             "substrate", "substrate_unit", "km", "enzyme", "mechanisms",
                             "fitter", "intervals", "level")


def _check_potency_options(options) -> dict:
    """``potency_options`` as a dict of keywords potency_table takes, checked once."""
    if options is None:
        return {}
    if not isinstance(options, Mapping):
        raise OptionError(f"potency_options must be a dict, got {type(options).__name__}")
    known = [p for p in inspect.signature(potency_table).parameters
             if p not in _POTENCY_OPTIONS_SET_HERE]
    unknown = [k for k in options if k not in known]
    if unknown:
        raise OptionError(f"potency_options: unknown option(s) {', '.join(map(repr, unknown))}"
                          f"; known: {', '.join(known)} (intervals and level are "
                          f"fit_campaign's own options)")
    try:
        check_potency_options(**options)
    except DataError as error:
        raise OptionError(f"potency_options: {error}") from None
    threshold = options.get("z_prime_threshold", Z_PRIME_THRESHOLD)
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or \
            not threshold <= 1:
        raise OptionError(f"potency_options: z_prime_threshold must be a number ≤ 1, got "
                          f"{threshold!r}")
    return dict(options)


def _check_engine(engine):
    if callable(engine) or (isinstance(engine, str) and engine in ENGINES):
        return
    raise DataError(f"engine must be one of {ENGINES} or a function like fit_mechanisms, "
                    f"got {engine!r}")


def _batched(engine, intervals, n_compounds) -> bool:
    """Whether a table of ``n_compounds`` goes through the batched engine (Wald
    intervals only: profile intervals stay on the lmfit path)."""
    if intervals != "wald" or callable(engine):
        return False
    return engine == "batched" or (engine == "auto" and n_compounds >= AUTO_ENGINE_MIN_COMPOUNDS)


def _chunk_size(chunk_size, batched) -> int:
    if chunk_size is not None:
        return chunk_size
    return _BATCHED_CHUNK_SIZE if batched else _DEFAULT_CHUNK_SIZE


def _engine_name(engine, batched) -> str:
    if callable(engine):
        return getattr(engine, "__name__", repr(engine))
    return "batched" if batched else "lmfit"


@dataclass(frozen=True)
class _DoseSettings:
    """Everything a worker needs to run potency_table on one chunk (picklable).

    Concentration columns of the chunk are already in M.
    """

    compound: str
    columns: tuple
    km: object
    enzyme: object
    options: tuple
    batched: bool = False


def _molar_column(values: pd.Series, unit: str) -> pd.Series:
    """Numbers converted to M; anything that is not a number kept as found, so the
    validation downstream can name it."""
    numeric = pd.to_numeric(values, errors="coerce")
    if numeric.notna().sum() == values.notna().sum():
        return numeric * CONCENTRATION_UNITS[unit]
    return values.astype(object).where(numeric.isna(), numeric * CONCENTRATION_UNITS[unit])


def _dose_chunk_fit(chunk, settings: _DoseSettings, mechanisms, keep_fits):
    """potency_table on one chunk: the compounds' sample wells plus the control wells of
    their plates. When the chunk as a whole is refused, each compound is run alone, so
    the problem stays with the compound that caused it."""
    frame, names = chunk
    try:
        outcome = [_dose_results(frame, names, settings, mechanisms, keep_fits)]
    except InhibkinError:
        outcome = []
        for alone, (name,) in _split_dose_chunk(settings.compound, chunk):
            try:
                outcome.append(_dose_results(alone, [name], settings, mechanisms, keep_fits))
            except InhibkinError as err:
                outcome.append([(name, {"status": "failed", "reason": str(err)}, None)])
    return [item for part in outcome for item in part]


def _split_dose_chunk(compound, chunk):
    """A dose-response chunk as one-compound chunks, each with the chunk's controls."""
    frame, names = chunk
    by_compound = frame[compound]
    controls = frame[by_compound.isna() | ~by_compound.isin(names)]
    return [(pd.concat([frame[by_compound == name], controls]), [name]) for name in names]


def _lost_dose_chunk(chunk, reason):
    """Failed results for the compounds of a dose-response chunk that could not be run."""
    return [(name, {"status": "failed", "reason": reason}, None) for name in chunk[1]]


def _dose_results(frame, names, settings, mechanisms, keep_fits):
    columns = dict(settings.columns)
    fitter = EngineFitter() if settings.batched else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = potency_table(frame, compound=settings.compound, plate=columns["plate"],
                               role=columns["role"], concentration=columns["inhibitor"],
                               response=columns["response"], substrate=columns["substrate"],
                               substrate_unit="M", km=settings.km, enzyme=settings.enzyme,
                               mechanisms={n: mechanisms[n] for n in names if n in mechanisms},
                               fitter=fitter, **dict(settings.options))
    # Flags travel as tuples (a warning's text may hold commas) and bounds as Bound values,
    # from the potency table's records rather than its written-out text.
    extra = tuple(dict.fromkeys(str(w.message) for w in caught))
    refitted = set(fitter.refitted) if fitter is not None else set()
    rows = result.table.set_index("compound", drop=False)
    out = []
    for name in names:
        row = rows.loc[name].to_dict()
        row.update(result.records.get(name, {"ic50_bound": None, "ki_bound": None,
                                             "flags": ()}))
        row["flags"] = tuple(dict.fromkeys(row["flags"] + extra))
        row[_REFITS] = int(name in refitted)
        out.append((name, row, result.fits.get(name) if keep_fits else None))
    return out


def _dose_row(compound, potency: dict) -> dict:
    """A ranking row from one compound's potency row (concentrations in M)."""
    row = _empty_row(compound)
    row.update(ki_source="converted IC50", reason=potency.get("reason", ""),
               mechanism=potency.get("mechanism", "") or "")
    flags = list(potency.get("flags", ()))
    if potency.get("status") != "ok":
        row.update(status="failed", verdict="failed", ki_source="", mechanism="",
                   flags="; ".join(flags))
        return row
    for key, column in (("ic50", "ic50_M"), ("ic50_low", "ic50_low_M"),
                        ("ic50_high", "ic50_high_M"), ("pic50", "pic50"), ("hill", "hill")):
        row[column] = float(potency.get(key, np.nan))
    if potency.get("mechanism_source") == "default":
        flags.append(f"mechanism assumed ({row['mechanism']}) for the IC50 conversion")
    if potency.get("ki_method") == "morrison":
        flags.append("Ki from a Morrison tight-binding fit")
    mechanism = potency.get("mechanism", "") or ""
    alpha = float(potency.get("alpha", np.nan))
    if mechanism == "mixed" and np.isfinite(alpha):
        row["alpha"] = alpha
    # The converted IC50 is the mechanism's constant (kic for mixed); the ranking
    # constant follows the rule of ranking_constant, as on the grid route.
    parameter, factor = (ranking_constant(mechanism, alpha) if mechanism in CONVERSIONS
                         else ("", 1.0))
    ki, bound = float(potency.get("ki", np.nan)), potency.get("ki_bound")
    ic50_bound = potency.get("ic50_bound")
    if potency.get("curve_class") == "inactive":
        # No curve: not a potency, whatever the fitted midpoint.
        top = ic50_bound.value if ic50_bound is not None else np.nan
        row.update(status="inactive", ic50_M=np.nan, ic50_low_M=np.nan, ic50_high_M=np.nan,
                   pic50=np.nan, hill=np.nan, ki_parameter=parameter,
                   ki_reported=f"inactive: IC50 > {top:.3g} M, the highest concentration "
                               f"tested")
        if bound is not None:
            value = bound.value * factor
            row.update(ki_low_M=value, ki_high_M=np.inf)
            row["ki_reported"] += f" (Ki > {value:.3g} M)"
    elif np.isfinite(ki) and ki > 0:
        ki = ki * factor
        low, high = float(potency["ki_low"]) * factor, float(potency["ki_high"]) * factor
        row.update(status="determined", ki_M=ki, ki_low_M=low, ki_high_M=high,
                   pki=-math.log10(ki), pki_low=-math.log10(high) if high > 0 else np.nan,
                   pki_high=-math.log10(low) if low > 0 else np.nan,
                   ki_parameter=parameter, ki_reported=f"{ki:.3g} M [{low:.3g}, {high:.3g}]")
    elif bound is not None:
        bound = bound.scaled(factor)
        row.update(status="bound", ki_parameter=parameter, ki_reported=bound.text("M"),
                   ki_low_M=bound.low, ki_high_M=bound.high)
        if bound.side == ">":
            row.update(pki_high=-math.log10(bound.value))
        else:
            row.update(pki_low=-math.log10(bound.value))
    else:
        row.update(status="failed", verdict="failed",
                   reason=row["reason"] or "the IC50 could not be converted to a Ki")
    if row["status"] == "determined":
        law = MODELS.get(mechanism)
        if law is not None and len(law.ranking) == 1:
            # The one constant, and those of mixed it stands for (noncompetitive's ki is
            # kic = kiu).
            (constant,) = law.ranking
            for name in dict(law.ties).get(constant, (constant,)):
                if f"{name}_M" in ("kic_M", "kiu_M"):
                    row[f"{name}_M"] = row["ki_M"]
        if mechanism == "mixed" and np.isfinite(alpha):
            kic = row["ki_M"] / factor
            row.update(kic_M=kic, kiu_M=alpha * kic)
    row["flags"] = "; ".join(dict.fromkeys(flags))
    return row


def _merge(grid: dict, dose: dict) -> dict:
    """One row for a compound with both a grid and a dose-response curve.

    The grid fit gives Ki whenever it determined or bounded it; the curve adds IC50 and
    Hill slope, and gives Ki only when the grid could not. A time-dependent grid keeps
    its status: the curve's IC50 then depends on the read time too, so no Ki is
    converted from it.
    """
    potency = {k: dose[k] for k in ("ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill")}
    if grid["status"] in ("determined", "bound", "time_dependent"):
        out = dict(grid, **potency)
        if dose["status"] == "failed":
            out["flags"] = "; ".join(f for f in (grid["flags"],
                                                 f"dose-response failed: {dose['reason']}") if f)
        return out
    if dose["status"] == "failed":
        out = dict(grid)
        out["flags"] = "; ".join(f for f in (grid["flags"],
                                             f"dose-response failed: {dose['reason']}") if f)
        return out
    out = dict(dose, verdict=grid["verdict"])
    out["flags"] = "; ".join(f for f in (dose["flags"],
                                         f"grid fit {grid['status']}: {grid['reason']}") if f)
    return out


def _dose_chunks(frame, compound, role, plate, chunk_size):
    """Chunks of compounds (sample wells) with the control wells of their plates."""
    samples = frame[frame[role] == "sample"]
    controls = frame[frame[role] != "sample"]
    controls_by_plate = {p: g for p, g in controls.groupby(plate, sort=False)}
    groups = list(samples.groupby(compound, sort=False))
    chunks, sizes = [], []
    for k in range(0, len(groups), chunk_size):
        part = groups[k:k + chunk_size]
        names = [name for name, _ in part]
        plates = pd.unique(pd.concat([g[plate] for _, g in part]))
        pieces = [g for _, g in part] + [controls_by_plate[p] for p in plates
                                         if p in controls_by_plate]
        chunks.append((pd.concat(pieces), names))
        sizes.append(len(names))
    return chunks, sizes


def _check_dose_table(frame, *, compound, plate, role, response, context):
    """Problems of the whole dose-response table, found before it is split."""
    roles = frame[role].to_numpy(dtype=object)
    unknown = ~np.isin(roles, ROLES)
    if unknown.any():
        rows = frame.index[unknown]
        raise DataError([Problem(role, r, roles[k], f"unknown role; use one of {ROLES}",
                                 row_kind(frame))
                         for r, k in zip(rows[:5], np.flatnonzero(unknown)[:5])], context)
    samples = frame[roles == "sample"]
    if samples.empty:
        raise DataError(Problem(role, None, "sample", "the table has no 'sample' wells"),
                        context)
    nameless = samples.index[samples[compound].isna().to_numpy()]
    if len(nameless):
        raise DataError([Problem(compound, r, None, "a 'sample' well has no compound",
                                 row_kind(frame)) for r in nameless[:5]], context)
    # The controls of every plate must be readable; a damaged plate fails its compounds.
    plate_qc(frame[roles != "sample"], plate=plate, role=role, response=response,
             strict=False)


def _prepare_dose(dose_response, *, compound, inhibitor, substrate, plate, role, response,
                  km, enzyme, units):
    """Dose-response table with every concentration column in M, and the settings."""
    context = "dose-response table"
    check_columns(dose_response, [compound, plate, role, response], context)
    names = [inhibitor, substrate] + [c for c in (km, enzyme) if isinstance(c, str)]
    resolved = resolve_units(dose_response.columns, names, units=units, context=context)
    frame = dose_response.copy()
    frame[role] = normalise_roles(frame[role]).to_numpy(dtype=object)
    for name in names:
        column, unit = resolved[name]
        frame[column] = _molar_column(frame[column], unit)
    _check_dose_table(frame, compound=compound, plate=plate, role=role, response=response,
                      context=context)
    columns = (("plate", plate), ("role", role), ("response", response),
               ("inhibitor", resolved[inhibitor][0]), ("substrate", resolved[substrate][0]))
    km_spec = resolved[km][0] if isinstance(km, str) else km
    enzyme_spec = resolved[enzyme][0] if isinstance(enzyme, str) else enzyme
    return frame, columns, km_spec, enzyme_spec, {n: resolved[n][1] for n in names}


def _concentration_option(name, value, table):
    """km= / enzyme=: a column name of ``table`` kept as it is, else a checked number in M.

    Text that names no column is read as a concentration with its unit ("40uM").
    """
    if value is None:
        return None
    if isinstance(value, str):
        if any(c == value or c.startswith(f"{value}_") or c.startswith(f"{value} ")
               for c in map(str, table.columns)):
            return value
        value = parse_concentration(value)
    check_options({name: value})
    return float(value)


def _unique_index(table):
    """The table itself, or a copy labelled 0…n-1 when its index labels repeat.

    Rows are picked by label past the boundary; repeated labels (``pd.concat`` without
    ``ignore_index``) would pick several rows for one.
    """
    if table is None or not isinstance(table, pd.DataFrame) or table.index.is_unique:
        return table
    return table.reset_index(drop=True)


def _grid_mechanism(row: dict):
    """The mechanism (and alpha) a grid fit hands to the IC50 conversion, or None."""
    if row["verdict"] not in CONVERSIONS:
        return None
    if row["verdict"] == "mixed":
        return ("mixed", row["alpha"]) if np.isfinite(row["alpha"]) else None
    return row["verdict"]


def fit_campaign(table=None, *, dose_response=None, compound="compound",
                 substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
                 plate="plate", role="role", response="signal", km=None, enzyme=None,
                 units=None, weighting=None, intervals="wald", level=0.95, alpha=0.05,
                 min_delta_aicc=2.0, determination_factor=10.0, potency_options=None,
                 heavy_atoms="heavy_atoms", logp="logp", engine="auto", workers=None,
                 client=None, quiet=False, chunk_size=None,
                 keep_fits=True) -> Campaign:
    """Fit every compound of a campaign and rank them by pKi.

    Parameters
    ----------
    table : pandas.DataFrame, optional
        Tidy substrate × inhibitor grids, one row per observed initial rate, with a
        compound column. Concentration units must be declared, in the headers
        (``substrate_uM``, ``inhibitor_nM``) or with ``units``.
    dose_response : pandas.DataFrame, optional
        Tidy dose-response wells (see :func:`~inhibkin.potency.table.potency_table`): compound,
        plate, role (``sample``/``max``/``min``), inhibitor concentration, signal and
        the assay's substrate concentration, units declared as for ``table``. A compound
        found in both tables takes its Ki from the grid fit (when the grid determined
        or bounded it), its IC50 and Hill slope from the curve, and the grid's mechanism
        for the IC50 → Ki conversion of any compound it decided.
    compound, substrate, inhibitor, rate : str
        Column names (substrate and inhibitor as base names, without the unit suffix,
        or as full headers); shared by both tables.
    sd : str, optional
        Column of standard deviations of the rates (used with ``weighting="sd"``).
    plate, role, response : str
        Columns of the dose-response table.
    km : float or str
        Michaelis constant for the IC50 → Ki conversion: text with its unit
        (``"40uM"``), a number in **M** (as :func:`~inhibkin.potency.table.potency_table`
        takes it for a table with declared units), or the base name of a column with a
        declared unit. Required with ``dose_response``.
    enzyme : float or str, optional
        Active enzyme concentration (a number in M, or a column with a declared unit);
        enables the tight-binding flag.
    units : dict, optional
        Units declared as an option, e.g. ``{"substrate": "uM", "inhibitor": "nM"}``.
    weighting : {None, "relative", "uniform", "sd", "rate_se"}
        None (default): ``rate_se`` (rate_se + variance model) when the grid table has a
        ``rate_se`` column, as :func:`~inhibkin.rates.initial.initial_rates` writes it, and
        ``sd`` is not given; else ``"relative"``
        (:data:`~inhibkin.mechanism.fit.DEFAULT_WEIGHTING`); see
        :func:`~inhibkin.mechanism.fit.fit_mechanisms`.
    intervals : {"wald", "profile"}
        Interval method of both the grid and the curve fits; ``wald`` by default at
        campaign scale (see the module notes).
    level, alpha, min_delta_aicc, determination_factor
        Passed to the grid engine (see :func:`~inhibkin.mechanism.fit.fit_mechanisms`).
    potency_options : dict, optional
        Further options of :func:`~inhibkin.potency.table.potency_table` (e.g.
        ``default_mechanism``, ``fix_top``, ``tight_binding``).
    heavy_atoms, logp : str
        Optional columns (one value per compound, in either table) that add ligand
        efficiency LE = 1.37·pKi / heavy atoms (kcal/mol per heavy atom) and LipE =
        pKi − logP.
    engine : {"auto", "batched", "lmfit"} or callable
        How the fits are computed (the answers agree to 1e-6 relative; see the module
        notes):

        ``"auto"`` (default)
            the batched engine for a table — the grids, or the dose-response curves,
            each decided alone — of at least :data:`AUTO_ENGINE_MIN_COMPOUNDS`
            compounds when ``intervals="wald"``, else the lmfit path;
        ``"batched"``
            the batched engine (:mod:`inhibkin.engine`) whenever
            ``intervals="wald"``: every chunk's grids in one
            :func:`~inhibkin.engine.fit_mechanism_arrays` call, its curves in one
            :func:`~inhibkin.engine.fit_logistic_batch` call
            (:class:`~inhibkin.potency.table.EngineFitter`); the fits it does not converge are
            refitted by the lmfit path and counted in ``options["n_fallback"]``;
        ``"lmfit"``
            one lmfit fit after another (:func:`~inhibkin.mechanism.fit.fit_mechanisms`,
            :func:`~inhibkin.potency.curve.fit_dose_response`), the reference;
        a function
            the per-compound grid fitter, with the signature of
            :func:`~inhibkin.mechanism.fit.fit_mechanisms`, returning a MechanismFit; it
            must be importable by name (a module-level function) to run on workers.
            The curves take the lmfit path.

        Profile intervals are computed on the lmfit path whatever the engine.
    workers : int, optional
        Local worker processes; None or 1 runs in this process. Scripts that use
        workers need the usual ``if __name__ == "__main__":`` guard.
    client : dask.distributed.Client, optional
        Run the chunks on this cluster instead.
    quiet : bool
        No progress bar (it is also silent when stderr is not a terminal).
    chunk_size : int, optional
        Compounds per task; by default 32 on the lmfit path and 256 with the batched
        engine. The answers do not depend on it.
    keep_fits : bool
        Keep every fit in :attr:`Campaign.fits` and :attr:`Campaign.potency_fits` (turn
        off at very large scale to save memory; the ranking is the same).

    Returns
    -------
    Campaign

    Raises
    ------
    OptionError
        For an option outside its allowed values (weighting, intervals, level, alpha,
        min_delta_aicc, determination_factor, potency_options), before any work.
    DataError
        Only for problems of a whole table (not a DataFrame, a column named twice, a
        missing column, an undeclared unit, rows without a compound, unknown roles,
        unreadable controls) or of an option (outside
        :data:`~inhibkin.validate.OPTION_LIMITS`, e.g. ``level=95`` or ``km=0``), before
        any fit; a problem of one compound's data fails that compound in the ranking
        instead. Compounds are told apart by their exact identifiers: ``"1"`` and
        ``"1.0"`` are two compounds.

    Examples
    --------
    >>> from inhibkin.campaign.batch import fit_campaign, simulate_campaign
    >>> table, truth = simulate_campaign(5, seed=1)
    >>> campaign = fit_campaign(table, quiet=True)
    >>> len(campaign.ranking)
    5
    """
    if table is None and dose_response is None:
        raise DataError("give a grid table, a dose_response table, or both")
    if workers is not None and client is not None:
        raise DataError("give workers= (local processes) or client= (Dask), not both")
    if workers is not None and (not isinstance(workers, int) or workers < 1):
        raise DataError(f"workers must be a positive integer, got {workers!r}")
    if chunk_size is not None and (not isinstance(chunk_size, int) or chunk_size < 1):
        raise DataError(f"chunk_size must be a positive integer, got {chunk_size!r}")
    if dose_response is not None and km is None:
        raise DataError("the dose-response table needs km= (a number in M, or a column) to "
                        "convert IC50 to Ki")
    _check_engine(engine)
    # Every option is checked here, once, before any compound is fitted: a bad one is
    # one error, not the same failure repeated for every compound.
    weighting, sd = resolve_weighting(weighting, () if table is None else table.columns, sd)
    fit_options = FitOptions(weighting=weighting, intervals=intervals, level=level,
                             alpha=alpha, min_delta_aicc=min_delta_aicc,
                             determination_factor=determination_factor)
    potency_options = _check_potency_options(potency_options)
    z_prime_threshold = potency_options.get("z_prime_threshold", Z_PRIME_THRESHOLD)
    table, dose_response = _unique_index(table), _unique_index(dose_response)
    started = time.perf_counter()
    used, refits = {"grid": "", "dose": ""}, {"grid": 0, "dose": 0}
    execution = dict(workers=workers, client=client, quiet=quiet)
    declared, grid_rows, grid_fits = {}, {}, {}
    if table is not None:
        check_columns(table, [compound, rate], "grid table")
        resolved = resolve_units(table.columns, [substrate, inhibitor], units=units,
                                 context="grid table")
        (s_column, s_unit), (i_column, i_unit) = resolved[substrate], resolved[inhibitor]
        declared.update({f"grid {substrate}": s_unit, f"grid {inhibitor}": i_unit})
        unnamed = table.index[table[compound].isna().to_numpy()]
        if len(unnamed):
            raise DataError([Problem(compound, r, None, "row has no compound; fill it in or "
                                                        "drop the row", row_kind(table))
                             for r in unnamed[:5]]
                            + ([Problem(compound, None, None, f"and {len(unnamed) - 5} more "
                                                              "rows")]
                               if len(unnamed) > 5 else []), "grid table")
        grid_options = tuple((k, v) for k, v in fit_options.as_dict().items()
                             if k != "alpha_factor")
        groups = table.groupby(compound, sort=False)
        batched = _batched(engine, intervals, groups.ngroups)
        used["grid"] = _engine_name(engine, batched)
        settings = _GridSettings(engine if callable(engine) else fit_mechanisms, s_column,
                                 i_column, rate, sd if weighting in SD_WEIGHTINGS else None,
                                 s_unit,
                                 i_unit, grid_options, batched)
        chunks = list(_chunks(groups, _chunk_size(chunk_size, batched)))
        for name, row, fit in _run(_fit_chunk, chunks, (settings, keep_fits),
                                   sizes=[len(c) for c in chunks], split=_split_grid_chunk,
                                   lost=_lost_grid_chunk, **execution):
            refits["grid"] += row.pop(_REFITS, 0)
            grid_rows[name] = row
            if fit is not None:
                grid_fits[name] = fit
    dose_rows, potency_fits, plates = {}, {}, _plates_frame(None)
    if dose_response is not None:
        check_columns(dose_response, [], "dose-response table")
        km = _concentration_option("km", km, dose_response)
        enzyme = _concentration_option("enzyme", enzyme, dose_response)
        frame, columns, km_spec, enzyme_spec, dose_units = _prepare_dose(
            dose_response, compound=compound, inhibitor=inhibitor, substrate=substrate,
            plate=plate, role=role, response=response, km=km, enzyme=enzyme, units=units)
        declared.update({f"dose-response {k}": v for k, v in dose_units.items()})
        options = dict(potency_options)
        options.update(intervals=fit_options.intervals, level=fit_options.level)
        plates = _campaign_plates(frame, plate=plate, role=role, response=response,
                                  threshold=z_prime_threshold)
        n_curves = int(frame.loc[frame[role] == "sample", compound].nunique())
        batched = _batched("lmfit" if callable(engine) else engine, intervals, n_curves)
        chunks, sizes = _dose_chunks(frame, compound, role, plate,
                                     _chunk_size(chunk_size, batched))
        used["dose"] = "batched" if batched else "lmfit"
        dose_settings = _DoseSettings(compound, columns, km_spec, enzyme_spec,
                                      tuple(sorted(options.items())), batched)
        mechanisms = {n: m for n, r in grid_rows.items()
                      if (m := _grid_mechanism(r)) is not None}
        for name, potency, fit in _run(_dose_chunk_fit, chunks,
                                       (dose_settings, mechanisms, keep_fits), sizes=sizes,
                                       split=partial(_split_dose_chunk, compound),
                                       lost=_lost_dose_chunk, **execution):
            refits["dose"] += potency.pop(_REFITS, 0)
            dose_rows[name] = _dose_row(name, potency)
            if fit is not None:
                potency_fits[name] = fit
    rows = [(_merge(row, dose_rows[n]) if n in dose_rows else row)
            for n, row in grid_rows.items()]
    rows += [row for n, row in dose_rows.items() if n not in grid_rows]
    ranking = _rank(rows)
    properties = {}
    for source in (table, dose_response):
        if source is not None:
            for key, value in _compound_properties(source, compound,
                                                   (heavy_atoms, logp)).items():
                properties.setdefault(key, value)
    _add_efficiencies(ranking, properties, heavy_atoms, logp)
    run_options = MappingProxyType({
        "weighting": fit_options.weighting, "intervals": fit_options.intervals,
        "level": fit_options.level, "alpha": fit_options.alpha,
        "min_delta_aicc": fit_options.min_delta_aicc,
        "determination_factor": fit_options.determination_factor,
        "z_prime_threshold": z_prime_threshold,
        "engine": getattr(engine, "__name__", repr(engine)) if callable(engine) else engine,
        "grid_engine": used["grid"], "dose_engine": used["dose"],
        "n_fallback": refits["grid"] + refits["dose"], "n_fallback_grid": refits["grid"],
        "n_fallback_dose": refits["dose"],
        "units": declared, "seconds": time.perf_counter() - started,
    })
    return Campaign(ranking, MappingProxyType(grid_fits), run_options,
                    MappingProxyType(potency_fits), plates)


def simulate_campaign(n_compounds, *, seed, cv=0.05, km_uM=20.0, vmax=100.0,
                      pki_range=(5.0, 9.0),
                      mechanisms=("competitive", "uncompetitive", "noncompetitive", "mixed"),
                      design_error=0.5, n_substrate=6, n_inhibitor=5, replicates=2):
    """A campaign of compounds of known mechanism and Ki against one enzyme.

    Each compound gets a mechanism (cycled through ``mechanisms``), a pKi drawn
    uniformly from ``pki_range``, and a grid whose inhibitor levels run from 0 to 4 ×
    an *expected* Ki that is off from the true one by up to ``design_error`` log units
    (the assay is planned from an earlier, rougher estimate, not from the truth).
    Mixed inhibitors get alpha = kiu/kic of 10**±(0.5…1); their pKi is that of the
    tighter constant.

    Parameters
    ----------
    n_compounds : int
    seed : int
        Seed of ``numpy.random.default_rng``.
    cv : float
        Coefficient of variation of the proportional noise on the rates.
    km_uM : float
        Michaelis constant of the enzyme (µM).
    vmax : float
        Maximum rate (any rate unit).
    pki_range : (float, float)
    mechanisms : sequence of str
    design_error : float
        Largest log10 error of the expected Ki that sets each inhibitor range.
    n_substrate, n_inhibitor, replicates : int
        Grid size per compound.

    Returns
    -------
    table : pandas.DataFrame
        compound, substrate_uM, inhibitor_nM, rate.
    truth : pandas.DataFrame
        compound, mechanism, kic_M, kiu_M, ki_M, pki (the true values).
    """
    rng = np.random.default_rng(seed)
    frames, truth = [], []
    s_uM = km_uM * np.geomspace(0.2, 10.0, n_substrate)
    width = len(str(n_compounds))
    for k in range(n_compounds):
        name = f"CPD-{k + 1:0{width}d}"
        mechanism = mechanisms[k % len(mechanisms)]
        pki = rng.uniform(*pki_range)
        ki_nM = from_molar(10.0 ** -pki, "nM")
        kic = kiu = ki_nM
        if mechanism == "mixed":
            ratio = 10.0 ** rng.uniform(0.5, 1.0)
            if rng.random() < 0.5:
                kiu = ki_nM * ratio
            else:
                kic = ki_nM * ratio
        expected = ki_nM * 10.0 ** rng.uniform(-design_error, design_error)
        i_nM = expected * np.linspace(0.0, 4.0, n_inhibitor)
        grid = simulate_grid(mechanism, vmax=vmax, km=km_uM, kic=kic, kiu=kiu, s=s_uM, i=i_nM,
                             replicates=replicates, cv=cv, seed=rng)
        frames.append(pd.DataFrame({"compound": name, "substrate_uM": grid["substrate"],
                                    "inhibitor_nM": grid["inhibitor"], "rate": grid["rate"]}))
        truth.append({"compound": name, "mechanism": mechanism,
                      "kic_M": to_molar(kic, "nM") if mechanism != "uncompetitive" else np.inf,
                      "kiu_M": to_molar(kiu, "nM") if mechanism != "competitive" else np.inf,
                      "ki_M": 10.0 ** -pki, "pki": pki})
    return pd.concat(frames, ignore_index=True), pd.DataFrame(truth)


def simulate_dose_campaign(compounds, *, seed, cv=0.05, km_uM=20.0, s_uM=20.0,
                           pki_range=(5.0, 9.0), inactive_fraction=0.1, design_error=0.5,
                           n_points=10, replicates=2, per_plate=8, n_controls=4,
                           signal_max=1000.0, signal_min=50.0):
    """Dose-response plates of competitive inhibitors of known Ki, with plate controls.

    Each active compound gets a pKi drawn uniformly from ``pki_range`` and a curve of
    ``n_points`` concentrations (a 900-fold range, in ``replicates``) centred on an
    *expected* IC50 off from the true one by up to ``design_error`` log units; an
    inactive one (a share ``inactive_fraction``) has its Ki 1000 times above the top
    concentration, so its wells are noise around full activity. The true IC50 is
    Ki·(1 + S/Km), the competitive case of Cheng & Prusoff (1973, Biochem. Pharmacol.
    22:3099). Signals run from ``signal_min`` (no activity) to ``signal_max`` (full
    activity), with Gaussian noise of ``cv`` times that window; every plate of
    ``per_plate`` compounds has ``n_controls`` 'max' and 'min' wells.

    Parameters
    ----------
    compounds : int or sequence of str
        How many compounds (named ``DR-0001``…), or their names.
    seed : int
        Seed of ``numpy.random.default_rng``.
    cv : float
        Noise as a fraction of the control window.
    km_uM, s_uM : float
        Michaelis constant and assay substrate concentration (µM).
    pki_range : (float, float)
    inactive_fraction : float
    design_error : float
    n_points, replicates, per_plate, n_controls : int
    signal_max, signal_min : float

    Returns
    -------
    plates : pandas.DataFrame
        compound (empty for controls), plate, role, inhibitor_nM, signal, substrate_uM.
    truth : pandas.DataFrame
        compound, active, ki_M, pki (NaN pKi for inactive compounds).
    """
    rng = np.random.default_rng(seed)
    if isinstance(compounds, int):
        width = len(str(compounds))
        compounds = [f"DR-{k + 1:0{width}d}" for k in range(compounds)]
    window = signal_max - signal_min
    samples, truth = [], []
    for k, name in enumerate(compounds):
        plate = f"P{k // per_plate + 1}"
        pki = rng.uniform(*pki_range)
        active = rng.random() >= inactive_fraction
        ic50_nM = from_molar(10.0 ** -pki, "nM") * (1.0 + s_uM / km_uM)
        guess = ic50_nM * 10.0 ** rng.uniform(-design_error, design_error)
        conc = np.repeat(guess * np.geomspace(1 / 30, 30, n_points), replicates)
        if not active:
            ic50_nM = 1000.0 * conc.max()
        activity = 1.0 / (1.0 + conc / ic50_nM)
        signal = signal_min + window * activity + cv * window * rng.standard_normal(conc.size)
        samples.append(pd.DataFrame({"compound": name, "plate": plate, "role": "sample",
                                     "inhibitor_nM": conc, "signal": signal,
                                     "substrate_uM": s_uM}))
        truth.append({"compound": name, "active": active,
                      "ki_M": to_molar(ic50_nM / (1.0 + s_uM / km_uM), "nM"),
                      "pki": pki if active else np.nan})
    controls = []
    for plate in pd.unique(pd.concat(samples)["plate"]) if samples else []:
        for role, level in (("max", signal_max), ("min", signal_min)):
            controls.append(pd.DataFrame({
                "compound": None, "plate": plate, "role": role, "inhibitor_nM": 0.0,
                "signal": level + cv * window * rng.standard_normal(n_controls),
                "substrate_uM": s_uM}))
    columns = ["compound", "plate", "role", "inhibitor_nM", "signal", "substrate_uM"]
    plates = pd.concat(samples + controls, ignore_index=True) if samples else \
        pd.DataFrame(columns=columns)
    return plates[columns], pd.DataFrame(truth, columns=["compound", "active", "ki_M", "pki"])
