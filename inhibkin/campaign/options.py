"""The options of a campaign, as one frozen object checked once at the public entry.

:meth:`CampaignOptions.build` is called by :func:`~inhibkin.campaign.fit.fit_campaign`
before any table is read: an option outside its allowed values raises one
:class:`~inhibkin.errors.InhibkinError` naming it, so a bad ``weighting`` or ``level``
is one error, not the same failure repeated for every compound. Everything past the
entry (the chunk runners, the workers) receives the object's values and trusts them.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

from ..core.compare import EDGE_SIDES
from ..core.options import FitOptions
from ..core.weighting import SD_WEIGHTINGS, resolve_weighting
from ..errors import DataError, OptionError
from ..potency.table import check_potency_options, potency_table
from ..rates.plates import Z_PRIME_THRESHOLD

__all__ = ["CampaignOptions", "ENGINES", "AUTO_ENGINE_MIN_COMPOUNDS"]

#: The named choices of ``fit_campaign(engine=)`` (a function is the fourth).
ENGINES = ("auto", "batched", "lmfit")
#: With ``engine="auto"`` a table (grids, or dose-response curves) of at least this many
#: compounds goes through the batched engine: below it the lmfit loop costs under a
#: second or so, and the engine's per-batch set-up gains little.
AUTO_ENGINE_MIN_COMPOUNDS = 20
# A chunk closes at this many compounds (the ``chunk_size`` default) ...
DEFAULT_CHUNK_SIZE = 32
# ... or this many with the batched engine on workers or a cluster: numpy's per-call cost
# is then spread over more compounds (about 1.6 times the grid throughput of 32-compound
# chunks) ...
BATCHED_CHUNK_SIZE = 256
# ... or, with the batched engine in this process, where chunks only pace the progress
# bar, at least this many and otherwise the campaign in SERIAL_BATCHED_CHUNKS chunks.
# Each chunk pays a per-call cost of its own (the extended laws, the fixed-alpha tests
# and the slowest problems' last iterations run once per chunk on a few dozen
# compounds): 2,000 benchmark grids took 15–18 s in chunks of 256, 13.6 s in chunks of
# 1,024 and 9.5 s in one batch; 10,000 took 94 s in chunks of 1,024 against 50 s in one
# batch (measured, one process, busy machine).
SERIAL_BATCHED_CHUNK_SIZE = 1024
SERIAL_BATCHED_CHUNKS = 2


def serial_chunk_size(n_compounds) -> int:
    """Compounds per chunk of the batched engine in this process, for a table of
    ``n_compounds`` (see :data:`SERIAL_BATCHED_CHUNKS`)."""
    return max(SERIAL_BATCHED_CHUNK_SIZE, -(-n_compounds // SERIAL_BATCHED_CHUNKS))


# potency_table's options that fit_campaign sets itself (columns, units, Km, the fitter).
_POTENCY_OPTIONS_SET_HERE = ("df", "compound", "plate", "role", "concentration", "response",
                             "substrate", "substrate_unit", "km", "enzyme", "mechanisms",
                             "fitter", "intervals", "level")


def _positive_int(name, value):
    if value is not None and (isinstance(value, bool) or not isinstance(value, int)
                              or value < 1):
        raise OptionError(f"{name} must be a positive integer, got {value!r}")


def _potency_options(options) -> Mapping:
    """``potency_options`` as keywords potency_table takes, checked once (read-only)."""
    if options is None:
        return MappingProxyType({})
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
    return MappingProxyType(dict(options))


@dataclass(frozen=True)
class CampaignOptions:
    """How a campaign is fitted and run; built by :meth:`build`, which checks it.

    Attributes
    ----------
    fit : FitOptions
        The grid fits' options (weighting, intervals, level, alpha, ...).
    sd : str or None
        The column of rate standard deviations the weighting reads (None: none).
    engine : str or callable
        One of :data:`ENGINES`, or a per-compound grid fitter.
    potency : Mapping
        Further keywords of :func:`~inhibkin.potency.table.potency_table` (read-only).
    z_prime_threshold : float
        Z'-factor below which a plate is flagged.
    workers, chunk_size : int or None
        Local processes, compounds per task (None: the default of the path taken).
    client : dask.distributed.Client or None
    quiet, keep_fits : bool
    """

    fit: FitOptions
    sd: str | None
    engine: str | Callable
    potency: Mapping
    z_prime_threshold: float
    workers: int | None = None
    client: object = None
    chunk_size: int | None = None
    quiet: bool = False
    keep_fits: bool = True

    @classmethod
    def build(cls, *, grid_columns=(), has_dose=False, km=None, weighting=None, sd=None,
              intervals="wald", level=0.95, alpha=0.05, min_delta_aicc=2.0,
              determination_factor=10.0, potency_options=None, engine="auto",
              workers=None, client=None, chunk_size=None, quiet=False,
              keep_fits=True, edge_sides=EDGE_SIDES, fit_enzyme=False) -> CampaignOptions:
        """The checked options of one ``fit_campaign`` call.

        ``grid_columns`` (the grid table's headers) settles the default weighting;
        ``has_dose`` and ``km`` check that a dose-response table can be converted.

        Raises
        ------
        OptionError
            Naming the first option outside its allowed values.
        """
        if workers is not None and client is not None:
            raise OptionError("give workers= (local processes) or client= (Dask), not both")
        _positive_int("workers", workers)
        _positive_int("chunk_size", chunk_size)
        if has_dose and km is None:
            raise OptionError("the dose-response table needs km= (a number in M, or a "
                              "column) to convert IC50 to Ki")
        if not (callable(engine) or (isinstance(engine, str) and engine in ENGINES)):
            raise OptionError(f"engine must be one of {ENGINES} or a function like "
                              f"fit_mechanisms, got {engine!r}")
        weighting, sd = resolve_weighting(weighting, grid_columns, sd)
        fit = FitOptions(weighting=weighting, intervals=intervals, level=level, alpha=alpha,
                         min_delta_aicc=min_delta_aicc,
                         determination_factor=determination_factor, edge_sides=edge_sides,
                         fit_enzyme=fit_enzyme)
        potency = _potency_options(potency_options)
        return cls(fit=fit, sd=sd if weighting in SD_WEIGHTINGS else None, engine=engine,
                   potency=potency,
                   z_prime_threshold=potency.get("z_prime_threshold", Z_PRIME_THRESHOLD),
                   workers=workers, client=client, chunk_size=chunk_size, quiet=quiet,
                   keep_fits=keep_fits)

    def batched(self, n_compounds) -> bool:
        """Whether a table of ``n_compounds`` goes through the batched engine (Wald
        intervals only: profile intervals stay on the lmfit path; with a fitter function
        both the grids and the curves take the lmfit path)."""
        if self.fit.intervals != "wald" or callable(self.engine):
            return False
        return self.engine == "batched" or (self.engine == "auto"
                                            and n_compounds >= AUTO_ENGINE_MIN_COMPOUNDS)

    @property
    def serial(self) -> bool:
        """Whether the chunks run in this process (no workers, no cluster)."""
        return self.client is None and (self.workers is None or self.workers <= 1)

    def chunk_size_for(self, batched, n_compounds) -> int:
        """Compounds per task on the path taken (and where it runs) for a table of
        ``n_compounds``."""
        if self.chunk_size is not None:
            return self.chunk_size
        if not batched:
            return DEFAULT_CHUNK_SIZE
        if not self.serial:
            return BATCHED_CHUNK_SIZE
        return serial_chunk_size(n_compounds)

    def engine_label(self, batched=None) -> str:
        """The engine as asked (``batched=None``) or the path a table took."""
        if callable(self.engine):
            return getattr(self.engine, "__name__", repr(self.engine))
        if batched is None:
            return self.engine
        return "batched" if batched else "lmfit"

    def grid_options(self) -> tuple:
        """The keywords of the grid fitter, as a picklable tuple."""
        return tuple((k, v) for k, v in self.fit.as_dict().items() if k != "alpha_factor")

    def execution(self) -> dict:
        """Where the chunks run (keywords of :func:`~inhibkin.campaign.execute.run`)."""
        return dict(workers=self.workers, client=self.client, quiet=self.quiet)
