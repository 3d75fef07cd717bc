"""The public entry of a campaign: :func:`fit_campaign`.

It builds the checked options (:mod:`~inhibkin.campaign.options`), checks both tables
once (:mod:`~inhibkin.campaign.prepare`), runs the grid route
(:mod:`~inhibkin.campaign.grid`) and then the dose-response route
(:mod:`~inhibkin.campaign.dose`) chunk by chunk (:mod:`~inhibkin.campaign.execute`),
and ranks the rows (:mod:`~inhibkin.campaign.ranking`) into a
:class:`~inhibkin.campaign.result.Campaign`. What a status means and how a compound is
ranked: see :mod:`inhibkin.campaign`.
"""

from __future__ import annotations

import time
from functools import partial

from ..core.compare import EDGE_SIDES
from ..core.options import check_fit_enzyme
from ..errors import DataError
from ..mechanism.fit import fit_mechanisms
from ..units import parse_concentration
from ..validate import check_options
from . import dose as dose_route
from . import grid as grid_route
from .dose import DoseSettings, dose_chunks, dose_row, lost_dose_chunk, split_dose_chunk
from .execute import MAX_ROWS_PER_CHUNK, grid_chunks, run
from .grid import REFITS, GridSettings, grid_mechanism, lost_grid_chunk, split_grid_chunk
from .lazy import LazyFits
from .options import CampaignOptions
from .prepare import DoseTable, GridTable, prepare_dose, prepare_grid, unique_index
from .ranking import add_efficiencies, compound_properties, merge, rank, written_out
from .result import Campaign, check_time_dependent, plates_frame

__all__ = ["fit_campaign"]


def fit_campaign(table=None, *, dose_response=None, compound="compound",
                 substrate="substrate", inhibitor="inhibitor", rate="rate", sd=None,
                 plate="plate", role="role", response="signal", km=None, enzyme=None,
                 units=None, weighting=None, intervals="wald", level=0.95, alpha=0.05,
                 min_delta_aicc=2.0, determination_factor=10.0, potency_options=None,
                 heavy_atoms="heavy_atoms", logp="logp", engine="auto", workers=None,
                 client=None, quiet=False, chunk_size=None,
                 keep_fits=True, time_dependent=None, edge_sides=EDGE_SIDES,
                 fit_enzyme=False) -> Campaign:
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
        Active enzyme concentration (a number in M, text with its unit, or a column of the
        dose-response table with a declared unit): enables the dose route's tight-binding
        flag, and a number or text is the [E] of every grid fit (its tight-binding laws
        hold it, or fit it from it with ``fit_enzyme``; see
        :func:`~inhibkin.mechanism.fit.fit_mechanisms`).
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
    level, alpha, min_delta_aicc, determination_factor, edge_sides
        Passed to the grid engine (see :func:`~inhibkin.mechanism.fit.fit_mechanisms`;
        ``edge_sides`` 1 makes rule 4's edge test one-sided, 2 by default).
    fit_enzyme : bool
        The grid fits' tight-binding laws fit [E] from the given ``enzyme`` (a number
        or text: the grid route reads no per-compound column) instead of holding it,
        on every engine (:func:`~inhibkin.mechanism.fit.fit_mechanisms`). With a grid
        table and no such [E], an ``OptionError`` before any work.
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
        Compounds per task; by default 32 on the lmfit path, and with the batched
        engine 256 on workers or a cluster, or in this process the table in two
        chunks of at least 1,024 (each chunk of the engine costs a fixed time of its
        own). The answers do not depend on it.
    keep_fits : bool
        Keep every fit in :attr:`Campaign.fits` and :attr:`Campaign.potency_fits` (turn
        off at very large scale to save memory; the ranking is the same).
    time_dependent : TimeDependentRanking, optional
        The time-dependent compounds, ranked apart
        (:func:`inhibkin.fit_time_dependent_ranking`), carried as
        :attr:`Campaign.time_dependent` so that the results store, the ``.xlsx``
        workbook and the report hold them beside the pKi ranking (never merged into it).

    Returns
    -------
    Campaign

    Raises
    ------
    OptionError
        For an option outside its allowed values (weighting, intervals, level, alpha,
        min_delta_aicc, determination_factor, edge_sides, fit_enzyme (also without [E]),
        potency_options, engine, workers, chunk_size, km missing with a dose-response
        table), before any work
        (:class:`~inhibkin.campaign.options.CampaignOptions`).
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
    >>> from inhibkin import fit_campaign, simulate_campaign
    >>> table, truth = simulate_campaign(5, seed=1)
    >>> campaign = fit_campaign(table, quiet=True)
    >>> len(campaign.ranking)
    5
    """
    if table is None and dose_response is None:
        raise DataError("give a grid table, a dose_response table, or both")
    check_time_dependent(time_dependent)
    # Every option is checked here, once, before any compound is fitted: a bad one is
    # one error, not the same failure repeated for every compound.
    options = CampaignOptions.build(
        grid_columns=getattr(table, "columns", ()),
        has_dose=dose_response is not None, km=km, weighting=weighting, sd=sd,
        intervals=intervals, level=level, alpha=alpha, min_delta_aicc=min_delta_aicc,
        determination_factor=determination_factor, potency_options=potency_options,
        engine=engine, workers=workers, client=client, chunk_size=chunk_size, quiet=quiet,
        keep_fits=keep_fits, edge_sides=edge_sides, fit_enzyme=fit_enzyme)
    table, dose_response = unique_index(table), unique_index(dose_response)
    # Both tables are checked as wholes before the first fit.
    grid = None if table is None else prepare_grid(
        table, compound=compound, substrate=substrate, inhibitor=inhibitor, rate=rate,
        units=units)
    dose = None if dose_response is None else prepare_dose(
        dose_response, compound=compound, inhibitor=inhibitor, substrate=substrate,
        plate=plate, role=role, response=response, km=km, enzyme=enzyme, units=units,
        z_prime_threshold=options.z_prime_threshold)
    grid_e = None if grid is None else grid_enzyme(enzyme, grid.table)
    if grid is not None:
        check_fit_enzyme(options.fit.fit_enzyme, grid_e, "grid table",
                         "enzyme= as a number in M or text with its unit: the grid route "
                         "reads no per-compound column")
    started = time.perf_counter()
    declared = {}
    grid_rows, grid_fits, grid_refits, grid_engine = {}, {}, 0, ""
    if grid is not None:
        declared.update({f"grid {substrate}": grid.substrate_unit,
                         f"grid {inhibitor}": grid.inhibitor_unit})
        grid_rows, grid_fits, grid_refits, grid_engine = _fit_grids(
            grid, compound, rate, options, grid_e)
    dose_rows, potency_fits, dose_refits, dose_engine = {}, {}, 0, ""
    plates = plates_frame(None)
    if dose is not None:
        declared.update({f"dose-response {k}": v for k, v in dose.units.items()})
        plates = dose.plates
        mechanisms = {n: m for n, r in grid_rows.items()
                      if (m := grid_mechanism(r)) is not None}
        dose_rows, potency_fits, dose_refits, dose_engine = _fit_doses(
            dose, compound, role, plate, mechanisms, options)
    rows = [(merge(row, dose_rows[n]) if n in dose_rows else row)
            for n, row in grid_rows.items()]
    rows += [row for n, row in dose_rows.items() if n not in grid_rows]
    ranking = rank(rows)
    properties = {}
    for source in (table, dose_response):
        if source is not None:
            for key, value in compound_properties(source, compound,
                                                  (heavy_atoms, logp)).items():
                properties.setdefault(key, value)
    add_efficiencies(ranking, properties, heavy_atoms, logp)
    fit_options = options.fit
    run_options = {
        "weighting": fit_options.weighting, "intervals": fit_options.intervals,
        "level": fit_options.level, "alpha": fit_options.alpha,
        "min_delta_aicc": fit_options.min_delta_aicc,
        "determination_factor": fit_options.determination_factor,
        "edge_sides": fit_options.edge_sides, "fit_enzyme": fit_options.fit_enzyme,
        "z_prime_threshold": options.z_prime_threshold,
        "engine": options.engine_label(),
        "grid_engine": grid_engine, "dose_engine": dose_engine,
        "n_fallback": grid_refits + dose_refits, "n_fallback_grid": grid_refits,
        "n_fallback_dose": dose_refits,
        "units": declared, "seconds": time.perf_counter() - started,
    }
    return Campaign(written_out(ranking), LazyFits(grid_fits), run_options, potency_fits,
                    plates, time_dependent)


def grid_enzyme(enzyme, table):
    """The enzyme= option as the grid route takes it: one [E] in M for every compound
    (a number in M or text with its unit), None when not given or when it names a
    column (the dose-response route's; the grid route reads no per-compound column)."""
    if enzyme is None or (isinstance(enzyme, str) and any(
            str(c) == enzyme or str(c).startswith(f"{enzyme}_") for c in table.columns)):
        return None
    value = parse_concentration(enzyme) if isinstance(enzyme, str) else float(enzyme)
    check_options({"enzyme": value})
    return value


def _fit_grids(grid: GridTable, compound, rate, options: CampaignOptions, enzyme=None):
    """Rows, fits, lmfit refits and the path taken, for every compound of the grid table;
    ``enzyme`` ([E] in M) goes to every grid fit (the tight-binding laws)."""
    groups = grid.table.groupby(compound, sort=False)
    batched = options.batched(groups.ngroups)
    fitter = options.engine if callable(options.engine) else fit_mechanisms
    fit_options = options.grid_options() + ((("enzyme", enzyme),) if enzyme else ())
    settings = GridSettings(fitter, grid.substrate, grid.inhibitor, rate, options.sd,
                            grid.substrate_unit, grid.inhibitor_unit, fit_options, batched)
    chunks = list(grid_chunks(groups, options.chunk_size_for(batched, groups.ngroups),
                              None if options.serial else MAX_ROWS_PER_CHUNK))
    rows, fits, refits = {}, {}, 0
    for name, row, fit in run(grid_route.fit_grid_chunk, chunks, (settings, options.keep_fits),
                              sizes=[len(c) for c in chunks], split=split_grid_chunk,
                              lost=lost_grid_chunk, **options.execution()):
        refits += row.pop(REFITS, 0)
        rows[name] = row
        if fit is not None:
            fits[name] = fit
    return rows, fits, refits, options.engine_label(batched)


def _fit_doses(dose: DoseTable, compound, role, plate, mechanisms, options: CampaignOptions):
    """Rows, fits, lmfit refits and the path taken, for every compound of the
    dose-response table."""
    frame = dose.frame
    n_curves = int(frame.loc[frame[role] == "sample", compound].nunique())
    batched = options.batched(n_curves)
    chunks, sizes = dose_chunks(frame, compound, role, plate,
                                options.chunk_size_for(batched, n_curves))
    potency = dict(options.potency)
    potency.update(intervals=options.fit.intervals, level=options.fit.level)
    settings = DoseSettings(compound, dose.columns, dose.km, dose.enzyme,
                            tuple(sorted(potency.items())), batched)
    rows, fits, refits = {}, {}, 0
    for name, record, fit in run(dose_route.fit_dose_chunk, chunks,
                                 (settings, mechanisms, options.keep_fits), sizes=sizes,
                                 split=partial(split_dose_chunk, compound),
                                 lost=lost_dose_chunk, **options.execution()):
        refits += record.pop(REFITS, 0)
        rows[name] = dose_row(name, record)
        if fit is not None:
            fits[name] = fit
    return rows, fits, refits, "batched" if batched else "lmfit"
