"""Time-dependent and covalent inhibition: kobs, kinact, KI, kinact/KI, Ki*, residence time.

Modules, one job each: :mod:`.schemes` (the progress curve and the kobs-against-[I] schemes
as data), :mod:`.kobs` (kobs of every well), :mod:`.dependence` (kobs against [I]: scheme
comparison and derived constants), :mod:`.global_fit` (all progress curves at once),
:mod:`.depletion` (the progress curve of an inactivator while each well's substrate runs
down), :mod:`.preincubation` (IC50 after several pre-incubation times), :mod:`.detect` (the
``time_dependent`` flag of the rates stage), :mod:`.results` (the public entry points and
result objects), :mod:`.ranking` (the ranked table of time-dependent compounds) and
:mod:`.plots` (the figures a reviewer checks).
"""

from .ranking import TimeDependentRanking, fit_time_dependent_ranking, rank_time_dependent
from .results import PreincubationFit, TimeDependentFit, fit_preincubation, fit_time_dependent
from .schemes import SCHEMES, KobsScheme, progress_curve

__all__ = ["PreincubationFit", "TimeDependentFit", "fit_preincubation", "fit_time_dependent",
           "rank_time_dependent", "fit_time_dependent_ranking", "TimeDependentRanking",
           "SCHEMES", "KobsScheme", "progress_curve"]
