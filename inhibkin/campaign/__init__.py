"""Campaigns: many compounds fitted in isolation, on one core, many, or a Dask cluster.

:func:`fit_campaign` (:mod:`~inhibkin.campaign.fit`) splits a tidy table by compound,
fits each compound on its own (one bad compound never stops the others), and gathers
one ranked table with one row per input compound. The work travels in chunks of
``chunk_size`` compounds, so the
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

from .fit import fit_campaign
from .grid import RATE_FLAGS
from .options import AUTO_ENGINE_MIN_COMPOUNDS, ENGINES, CampaignOptions
from .ranking import LE_KCAL_PER_PKI, RANKING_COLUMNS, STATUSES, ranking_constant
from .result import PLATE_COLUMNS, Campaign

__all__ = ["Campaign", "CampaignOptions", "fit_campaign", "ranking_constant",
           "RANKING_COLUMNS", "PLATE_COLUMNS", "STATUSES", "RATE_FLAGS", "LE_KCAL_PER_PKI",
           "ENGINES", "AUTO_ENGINE_MIN_COMPOUNDS"]
