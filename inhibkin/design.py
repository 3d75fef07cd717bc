"""Choosing substrate × inhibitor levels that pin down the mechanism and Ki.

:func:`plan_grid` picks substrate and inhibitor levels from the dilution series a lab
can actually pipette, within a plate budget, by a Bayesian Ds-optimality criterion:

    criterion(design) = mean over prior draws θ of [log det M − log det M₁₁],
    M = Σ_points g gᵀ / σ²,   g = ∂v / ∂ log (vmax, km, kic, kiu),
    σ² = (cv·v)² + (floor_sd·vmax)²

with M the Fisher information of the mixed model's log-parameters and M₁₁ its
(vmax, km) block. The difference is minus the log det of the covariance of
(log kic, log kiu) with vmax and km as nuisance parameters: Ds-optimality (Atkinson,
Donev & Tobias 2007, "Optimum Experimental Designs, with SAS"; from memory), averaged
over log-uniform prior draws of km, kic and kiu (vmax = 1; the criterion does not
depend on it). The mixed model contains all the others, so a grid that determines both
of its constants separates competitive from uncompetitive from noncompetitive and pins
down Ki on the log scale that pKi is reported on. The noise has a constant-CV part and
a floor: without the floor, constant-CV noise would make a rate a thousand times below
vmax as informative as one near it, and the search would run to the ends of the
dilution series. The Jacobian is the analytic one of :mod:`inhibkin.core.models`; the
search is a level exchange (swap one level for an unused one while the criterion
improves) over every grid shape that fills the budget, among the levels of the series
within :data:`WINDOW_FACTOR` of the prior ranges (the window).

The criterion is a proxy, so it only proposes candidates: for every grid shape its
optimum within the window, and levels evenly spaced within the window. The choice among
them is made on what users care about, estimated by simulation: the share of correct
verdicts and the RMS pKi error of the batched engine (the rules of
:func:`inhibkin.fit_mechanisms` with Wald intervals; weights from the assumed noise
model) on data drawn from the prior, each of the four inhibition mechanisms in turn.
The chosen design is then compared, on fresh draws (the same truths and noise for
both), with a naive grid of the same shape whose levels are evenly spaced through the
whole series; when the design does not beat it on both counts, the plan says so and
proposes the naive grid.
"""

from __future__ import annotations

import html
import itertools
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from .core.models import INHIBITION_MODELS, MODELS
from .engine import fit_mechanism_arrays
from .errors import DataError
from .simulate import simulate_grid

__all__ = ["GridPlan", "plan_grid", "call_outcome", "design_criterion", "naive_levels",
           "CALL_OUTCOMES", "SIMULATED_MECHANISMS"]

#: Fewest substrate levels, and inhibitor levels counting I = 0, a plan may use.
MIN_SUBSTRATE_LEVELS = 4
MIN_INHIBITOR_LEVELS = 3
#: The mechanisms the simulated correct-call rate cycles through: every classical law
#: with an inhibition constant (:data:`~inhibkin.core.models.INHIBITION_MODELS`).
SIMULATED_MECHANISMS = INHIBITION_MODELS
#: Outcome classes of a verdict against a known truth (see :func:`call_outcome`).
CALL_OUTCOMES = ("correct", "ambiguous", "wrong", "larger", "missed", "failed")
#: Level of the Clopper–Pearson bands on the simulated rates.
BAND_LEVEL = 0.95
# A 96-well plate, filled row by row (A1, A2, … H12).
_PLATE_ROWS, _PLATE_COLUMNS = "ABCDEFGH", 12
_PLATE_WELLS = len(_PLATE_ROWS) * _PLATE_COLUMNS
#: Candidate levels lie within this factor of the prior ranges (below the low end of the
#: km or Ki range, above its high end): a level far outside the prior (I = 0.001 for Ki
#: between 0.05 and 0.5) spends wells on rates that tell nothing the prior allows apart.
WINDOW_FACTOR = 5.0
# Passes of the level exchange; each pass tries every swap, and the search stops at the
# first pass without improvement (a handful suffice in practice).
_MAX_EXCHANGE_PASSES = 20
# An exchange must improve the criterion by more than this (log-det units) to count,
# so rounding noise cannot make the search cycle.
_MIN_GAIN = 1e-9


def call_outcome(truth: str, verdict: str) -> str:
    """Class of a verdict given the true mechanism.

    ``correct``: the truth. ``ambiguous``: no choice made. ``larger``: a model that nests
    the truth (mixed for a one-constant truth, any inhibitor model for ``none``), the
    nested F-tests' type-I outcome, expected at about their level. ``missed``: ``none``
    for an inhibitor (no inhibition detected). ``wrong``: any other definite verdict, a
    mechanism that neither is nor nests the truth (*confidently wrong*). ``failed``.
    """
    if verdict == truth:
        return "correct"
    if verdict in ("ambiguous", "failed"):
        return verdict
    if verdict in MODELS[truth].nests_in:
        return "larger"
    if verdict == "none":
        return "missed"
    return "wrong"


def _prior_draws(km_range, ki_range, n, rng) -> np.ndarray:
    """(n, 3) log-uniform draws of km, kic, kiu."""
    lo = np.log([km_range[0], ki_range[0], ki_range[0]])
    hi = np.log([km_range[1], ki_range[1], ki_range[1]])
    return np.exp(lo + (hi - lo) * rng.random((n, 3)))


def _cell_information(s, i, draws, cv, floor_sd) -> np.ndarray:
    """Information contributions of every (S, I) cell: shape (draws, nS, nI, 4, 4)."""
    law = MODELS["mixed"]
    km, kic, kiu = (draws[:, k][:, None, None] for k in range(3))
    ss, ii = np.meshgrid(s, i, indexing="ij")
    ss, ii = ss[None], ii[None]
    v = law.rate(ss, ii, 1.0, km, kic, kiu)
    theta = np.stack(np.broadcast_arrays(np.ones_like(km), km, kic, kiu), axis=-1)
    # dv / d log p = (dv/dp) * p, scaled by the point's noise SD (vmax = 1)
    sigma = np.sqrt((cv * v) ** 2 + floor_sd**2)
    g = law.jacobian(ss, ii, 1.0, km, kic, kiu) * theta / sigma[..., None]
    return g[..., :, None] * g[..., None, :]


def _log_det(info, s_idx, i_idx, replicates) -> float:
    """Mean over draws of log det of the (kic, kiu) block of the inverse information,
    negated: log det M − log det M[vmax, km] (the Schur complement)."""
    m = replicates * info[:, s_idx][:, :, i_idx].sum(axis=(1, 2))
    sign, logdet = np.linalg.slogdet(m)
    sign_nuisance, logdet_nuisance = np.linalg.slogdet(m[:, :2, :2])
    value = np.where((sign > 0) & (sign_nuisance > 0), logdet - logdet_nuisance, -np.inf)
    return float(np.mean(value))


def design_criterion(substrate, inhibitor, *, km_range, ki_range, cv=0.05, floor_sd=0.01,
                     replicates=2, n_prior=64, seed=None) -> float:
    """Ds criterion of a grid: mean over the prior of −log det Cov(log kic, log kiu).

    Parameters
    ----------
    substrate, inhibitor : array_like
        Levels of the grid (substrate and inhibitor units; I = 0 may be included).
    km_range, ki_range : (float, float)
        Prior ranges of km (substrate units) and of kic and kiu (inhibitor units).
    cv : float
        Coefficient of variation of each rate.
    floor_sd : float
        Constant part of the noise SD, as a fraction of vmax.
    replicates : int
        Points per grid cell.
    n_prior : int
        Number of log-uniform prior draws.
    seed : int or numpy.random.Generator, optional

    Returns
    -------
    float
        Larger is better; −inf when the grid cannot determine the four parameters.
    """
    rng = np.random.default_rng(seed)
    draws = _prior_draws(km_range, ki_range, n_prior, rng)
    s = np.asarray(substrate, dtype=float)
    i = np.asarray(inhibitor, dtype=float)
    info = _cell_information(s, i, draws, cv, floor_sd)
    return _log_det(info, np.arange(s.size), np.arange(i.size), replicates)


def naive_levels(choices, n) -> np.ndarray:
    """``n`` levels evenly spaced (by position) through a sorted series, both ends kept."""
    choices = np.sort(np.asarray(choices, dtype=float))
    idx = np.unique(np.round(np.linspace(0, choices.size - 1, n)).astype(int))
    return choices[idx]


def _window(choices, low, high, n) -> np.ndarray:
    """Indices of the sorted ``choices`` within [low / WINDOW_FACTOR, high · WINDOW_FACTOR];
    when fewer than ``n`` lie there, the ``n`` nearest to it on the log scale."""
    log_c = np.log(choices)
    distance = (np.maximum(np.log(low / WINDOW_FACTOR) - log_c, 0.0)
                + np.maximum(log_c - np.log(high * WINDOW_FACTOR), 0.0))
    inside = np.flatnonzero(distance == 0)
    if inside.size >= n:
        return inside
    return np.sort(np.argsort(distance, kind="stable")[:n])


def _exchange(info, s_idx, i_idx, s_allowed, i_allowed, replicates):
    """Swap single levels for unused allowed ones while the criterion improves.

    Index 0 of the inhibitor axis is I = 0 and always stays in the design.
    """
    s_idx, i_idx = list(s_idx), list(i_idx)
    best = _log_det(info, s_idx, i_idx, replicates)
    for _ in range(_MAX_EXCHANGE_PASSES):
        improved = False
        for axis, current, allowed in (("s", s_idx, s_allowed), ("i", i_idx, i_allowed)):
            for pos in range(len(current)):
                if axis == "i" and current[pos] == 0:
                    continue
                for cand in allowed:
                    cand = int(cand)
                    if cand in current or (axis == "i" and cand == 0):
                        continue
                    trial = current.copy()
                    trial[pos] = cand
                    trial.sort()
                    value = (_log_det(info, trial, i_idx, replicates) if axis == "s"
                             else _log_det(info, s_idx, trial, replicates))
                    if value > best + _MIN_GAIN:
                        best, current[:] = value, trial
                        improved = True
        if not improved:
            break
    return s_idx, i_idx, best


def _shapes(n_s_all, n_i_all, n_wells, replicates):
    """Grid shapes (substrate levels, inhibitor levels incl. 0) that fill the budget:
    within it, and with no room to add a level to either factor."""
    cells = n_wells // replicates
    out = []
    for n_s, n_i in itertools.product(range(MIN_SUBSTRATE_LEVELS, n_s_all + 1),
                                      range(MIN_INHIBITOR_LEVELS, n_i_all + 1)):
        if n_s * n_i > cells:
            continue
        grow_s = n_s < n_s_all and (n_s + 1) * n_i <= cells
        grow_i = n_i < n_i_all and n_s * (n_i + 1) <= cells
        if not (grow_s or grow_i):
            out.append((n_s, n_i))
    return out


def _check_range(name, value, problems):
    try:
        lo, hi = (float(x) for x in value)
    except (TypeError, ValueError):
        problems.append(f"{name} must be a pair (low, high) of positive numbers; got {value!r}")
        return
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo <= hi):
        problems.append(f"{name} must satisfy 0 < low <= high; got {value!r}")


def _check_series(name, value, problems, *, allow_zero):
    try:
        arr = np.asarray(value, dtype=float).ravel()
    except (TypeError, ValueError):
        problems.append(f"{name} must be a list of concentrations; got {value!r}")
        return None
    bad = arr[~np.isfinite(arr) | (arr < 0) | ((arr == 0) & (not allow_zero))]
    if bad.size:
        problems.append(f"{name} must hold finite concentrations "
                        f"{'>= 0' if allow_zero else '> 0'}; found {bad[0]!r}")
        return None
    return np.unique(arr)


def _check_inputs(km_range, ki_range, n_wells, substrate_choices, inhibitor_choices, cv,
                  floor_sd, replicates, n_prior, n_simulations):
    problems: list[str] = []
    _check_range("km_range", km_range, problems)
    _check_range("ki_range", ki_range, problems)
    s = _check_series("substrate_choices", substrate_choices, problems, allow_zero=False)
    i = _check_series("inhibitor_choices", inhibitor_choices, problems, allow_zero=True)
    for name, value, low in (("n_wells", n_wells, 1), ("replicates", replicates, 1),
                             ("n_prior", n_prior, 1), ("n_simulations", n_simulations, 0)):
        if not isinstance(value, (int, np.integer)) or value < low:
            problems.append(f"{name} must be an integer >= {low}; got {value!r}")
    if not (isinstance(cv, (int, float)) and np.isfinite(cv) and cv > 0):
        problems.append(f"cv must be a positive number (0.05 = 5 %); got {cv!r}")
    if not (isinstance(floor_sd, (int, float)) and np.isfinite(floor_sd) and floor_sd >= 0):
        problems.append(f"floor_sd must be a number >= 0 (a fraction of vmax); got "
                        f"{floor_sd!r}")
    if problems:
        raise DataError(problems, "plan_grid")
    i = np.union1d(i, [0.0])
    if s.size < MIN_SUBSTRATE_LEVELS:
        problems.append(f"substrate_choices has {s.size} distinct levels; a plan needs at "
                        f"least {MIN_SUBSTRATE_LEVELS}")
    if i.size < MIN_INHIBITOR_LEVELS:
        problems.append(f"inhibitor_choices has {i.size - 1} non-zero levels; a plan needs "
                        f"at least {MIN_INHIBITOR_LEVELS - 1} besides I = 0")
    smallest = MIN_SUBSTRATE_LEVELS * MIN_INHIBITOR_LEVELS * replicates
    if n_wells < smallest:
        problems.append(f"n_wells = {n_wells} cannot hold the smallest grid "
                        f"({MIN_SUBSTRATE_LEVELS} x {MIN_INHIBITOR_LEVELS} levels x "
                        f"{replicates} replicates = {smallest} wells)")
    if problems:
        raise DataError(problems, "plan_grid")
    return s, i


def _simulate_calls(grids, *, km_range, ki_range, cv, floor_sd, replicates, n_simulations,
                    rng):
    """Verdict outcomes of fit_mechanisms on prior-drawn truths, the same truths and noise
    seeds for every grid (common random numbers sharpen the comparison)."""
    rows = []
    draws = _prior_draws(km_range, ki_range, n_simulations, rng)
    noise_seeds = rng.integers(0, 2**63, size=n_simulations)
    truths = []
    for k in range(n_simulations):
        mechanism = SIMULATED_MECHANISMS[k % len(SIMULATED_MECHANISMS)]
        km, kic, kiu = draws[k]
        # Each constant of the law takes the draw of the first mixed-law constant it
        # stands for (noncompetitive's ki takes kic's).
        drawn = {"kic": kic, "kiu": kiu}
        constants = {first: drawn[first] for first in
                     (MODELS[mechanism].stands_for(c)[0]
                      for c in MODELS[mechanism].inhibition_constants)}
        truths.append((mechanism, km, constants))
    for grid, (s, i) in grids.items():
        columns = []
        for k, (mechanism, km, constants) in enumerate(truths):
            data = simulate_grid(mechanism, vmax=1.0, km=km, s=s, i=i, replicates=replicates,
                                 cv=cv, sd=floor_sd, seed=int(noise_seeds[k]), **constants)
            # Weights from the noise model itself, the same rule for every grid, so the
            # comparison is about the levels and not about a weighting that suits one.
            # Readings below zero (the noise floor on fully inhibited wells) are data.
            sd = np.sqrt((cv * data["true_rate"]) ** 2 + floor_sd**2)
            columns.append((data["substrate"], data["inhibitor"], data["rate"], sd))
        if not columns:
            continue
        # The batched engine: the rules of fit_mechanisms(..., intervals="wald"), every
        # data set of the grid at once (its verdicts agree with the lmfit path,
        # tests/test_engine.py); read from its arrays, without a MechanismFit per set.
        s_, i_, v_, sd_ = (np.stack([np.asarray(c[j], dtype=float) for c in columns])
                           for j in range(4))
        batch = fit_mechanism_arrays(s_, i_, v_, np.ones(v_.shape, bool), sd=sd_,
                                     weighting="sd")
        for k, (mechanism, _, constants) in enumerate(truths):
            verdict = str(batch.verdict[k])
            rows.append({"simulation": k, "grid": grid, "mechanism": mechanism,
                         "verdict": verdict, "outcome": call_outcome(mechanism, verdict),
                         "pki_error": _pki_error(batch.models[mechanism], k, constants)})
    return pd.DataFrame(rows, columns=["simulation", "grid", "mechanism", "verdict",
                                       "outcome", "pki_error"])


def _preference(candidate):
    """Order of the candidates on the selection draws: those at least as good as the
    naive grid of their shape on both counts first; then the share of correct verdicts
    less the RMS pKi error (log10 units: 0.01 in pKi weighs as one call in a hundred),
    so neither figure is bought with the other; the criterion breaks ties."""
    return (candidate["dominates"], candidate["correct"] - candidate["pki_rmse"],
            candidate["criterion"])


def _score(sims, grid):
    """(share of correct verdicts, RMS pKi error) of ``grid`` in a simulation table."""
    here = sims[sims["grid"] == grid]
    if not len(here):
        return np.nan, np.nan
    errors = here["pki_error"].to_numpy(dtype=float)
    rmse = float(np.sqrt(np.nanmean(errors**2))) if np.isfinite(errors).any() else np.inf
    return float((here["outcome"] == "correct").mean()), rmse


def _pki_error(model_batch, k, constants) -> float:
    """Largest |pKi error| (log10 units) over the inhibition constants of the true
    model's fit to data set ``k``; NaN when it did not converge."""
    if not model_batch.converged[k]:
        return np.nan
    names = list(model_batch.names)
    truth = {"ki": constants["kic"]} if "ki" in names else dict(constants)
    return float(max(abs(np.log10(model_batch.estimate[k, names.index(n)] / v))
                     for n, v in truth.items()))


@dataclass(frozen=True)
class GridPlan:
    """A proposed substrate × inhibitor grid, and how it compares with a naive one.

    Attributes
    ----------
    substrate, inhibitor : tuple of float
        Proposed levels (substrate and inhibitor units; the inhibitor levels include 0).
    replicates : int
        Wells per grid cell.
    n_wells : int
        The plate budget the plan was made for.
    criterion : str
        What was optimised.
    criterion_value : float
        Its value for the proposed grid (larger is better).
    naive_substrate, naive_inhibitor : tuple of float
        The naive grid: same shape, levels evenly spaced through the allowed series.
    naive_criterion_value : float
    cv, floor_sd : float
        Noise assumed: coefficient of variation, and constant SD as a fraction of vmax.
    km_range, ki_range : tuple of float
        The prior ranges.
    simulations : pandas.DataFrame
        One row per simulated data set and grid: simulation, grid ("proposed" or
        "naive"), mechanism, verdict, outcome (see :func:`call_outcome`), pki_error
        (largest |pKi error| of the true model's constants, log10 units). These draws
        are fresh: not the ones the candidates were chosen on.
    seed : int or None
    candidates : pandas.DataFrame
        Every grid considered, one row each: candidate, kind ("ds-optimal" within the
        window around the prior, "window" evenly spaced within it, "naive"), n_substrate,
        n_inhibitor, substrate, inhibitor (tuples of levels), criterion, correct and
        pki_rmse (on the selection draws), chosen.
    beats_naive : bool or None
        Whether the design beats the naive grid on the fresh draws: at least as many
        correct verdicts *and* an RMS pKi error no larger, one of them strictly better.
        None without simulations.
    choice : {"design", "naive"}
        The grid the plan proposes: the naive one when the design does not beat it.
    substrate_unit, inhibitor_unit : str or None
        Units of the levels, for the layout's headers.
    """

    substrate: tuple[float, ...]
    inhibitor: tuple[float, ...]
    replicates: int
    n_wells: int
    criterion: str
    criterion_value: float
    naive_substrate: tuple[float, ...]
    naive_inhibitor: tuple[float, ...]
    naive_criterion_value: float
    cv: float
    floor_sd: float
    km_range: tuple[float, float]
    ki_range: tuple[float, float]
    simulations: pd.DataFrame = field(repr=False)
    seed: int | None = None
    candidates: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)
    beats_naive: bool | None = None
    choice: str = "design"
    substrate_unit: str | None = None
    inhibitor_unit: str | None = None

    @property
    def chosen_substrate(self) -> tuple[float, ...]:
        """Substrate levels of the grid the plan proposes (:attr:`choice`)."""
        return self.naive_substrate if self.choice == "naive" else self.substrate

    @property
    def chosen_inhibitor(self) -> tuple[float, ...]:
        """Inhibitor levels of the grid the plan proposes (:attr:`choice`)."""
        return self.naive_inhibitor if self.choice == "naive" else self.inhibitor

    @property
    def naive_score(self) -> tuple[float, float]:
        """(share of correct verdicts, RMS pKi error) of the naive grid, fresh draws."""
        return self._rate("naive"), self.pki_rmse("naive")

    @property
    def score(self) -> tuple[float, float]:
        """(share of correct verdicts, RMS pKi error) of the design, fresh draws."""
        return self._rate("proposed"), self.pki_rmse("proposed")

    @property
    def wells_used(self) -> int:
        """Wells the proposed grid needs."""
        return len(self.substrate) * len(self.inhibitor) * self.replicates

    def _rate(self, grid, outcome="correct"):
        sims = self.simulations[self.simulations["grid"] == grid]
        return float((sims["outcome"] == outcome).mean()) if len(sims) else np.nan

    @property
    def correct_rate(self) -> float:
        """Simulated share of correct verdicts on the proposed grid."""
        return self._rate("proposed")

    @property
    def naive_correct_rate(self) -> float:
        """Simulated share of correct verdicts on the naive grid."""
        return self._rate("naive")

    def rates(self) -> pd.DataFrame:
        """Share of each outcome per grid and mechanism (and "all"), with n, a
        Clopper–Pearson band on the correct-call rate and the RMS pKi error (log10)."""
        sims = self.simulations
        if sims.empty:
            return pd.DataFrame()
        both = pd.concat([sims, sims.assign(mechanism="all")])
        table = pd.crosstab([both["grid"], both["mechanism"]], both["outcome"])
        table = table.reindex(columns=list(CALL_OUTCOMES), fill_value=0)
        n = table.sum(axis=1)
        out = table.div(n, axis=0)
        out["n"] = n
        k = table["correct"].to_numpy(dtype=float)
        a = (1 - BAND_LEVEL) / 2
        out["correct_low"] = np.where(k > 0, stats.beta.ppf(a, k, n - k + 1), 0.0)
        out["correct_high"] = np.where(k < n, stats.beta.ppf(1 - a, k + 1, n - k), 1.0)
        out["pki_rmse"] = both.groupby(["grid", "mechanism"])["pki_error"].apply(
            lambda e: float(np.sqrt(np.nanmean(e**2))))
        return out

    def layout(self) -> pd.DataFrame:
        """The proposed plate (:attr:`choice`): one row per well.

        Columns plate (1, 2, … for every 96 wells), well (A1 … H12, row by row),
        substrate and inhibitor (headers ``substrate_<unit>`` and ``inhibitor_<unit>``
        when the units are known, as every stage reads them), replicate (1, 2, …).
        """
        s, i, r = np.meshgrid(self.chosen_substrate, self.chosen_inhibitor,
                              np.arange(1, self.replicates + 1), indexing="ij")
        n = s.size
        position = np.arange(n) % _PLATE_WELLS
        wells = [f"{_PLATE_ROWS[p // _PLATE_COLUMNS]}{p % _PLATE_COLUMNS + 1}"
                 for p in position]

        def header(name, unit):
            return f"{name}_{unit}" if unit else name

        return pd.DataFrame({"plate": np.arange(n) // _PLATE_WELLS + 1, "well": wells,
                             header("substrate", self.substrate_unit): s.ravel(),
                             header("inhibitor", self.inhibitor_unit): i.ravel(),
                             "replicate": r.ravel()})

    def to_frame(self) -> pd.DataFrame:
        """Tidy levels of both grids: grid, factor, level."""
        rows = [("proposed", "substrate", x) for x in self.substrate]
        rows += [("proposed", "inhibitor", x) for x in self.inhibitor]
        rows += [("naive", "substrate", x) for x in self.naive_substrate]
        rows += [("naive", "inhibitor", x) for x in self.naive_inhibitor]
        return pd.DataFrame(rows, columns=["grid", "factor", "level"])

    def pki_rmse(self, grid="proposed") -> float:
        """Simulated RMS error of pKi (log10 units) on ``grid``."""
        sims = self.simulations[self.simulations["grid"] == grid]
        return float(np.sqrt(np.nanmean(sims["pki_error"] ** 2))) if len(sims) else np.nan

    def _comparison_lines(self):
        lines = [f"  {'':<10} {'criterion':>10} {'correct':>8} {'wrong':>7} {'ambiguous':>10} "
                 f"{'pKi RMSE':>9}"]
        for grid, value in (("proposed", self.criterion_value),
                            ("naive", self.naive_criterion_value)):
            label = "design" if grid == "proposed" else grid
            lines.append(f"  {label:<10} {value:>10.2f} {self._rate(grid):>8.1%} "
                         f"{self._rate(grid, 'wrong'):>7.1%} "
                         f"{self._rate(grid, 'ambiguous'):>10.1%} {self.pki_rmse(grid):>9.3f}")
        return lines

    def summary(self) -> str:
        """Plain-text report: both grids, the criterion and the simulated call rates."""
        def fmt(levels):
            return ", ".join(f"{x:.4g}" for x in levels)

        n_sim = self.simulations["simulation"].nunique() if len(self.simulations) else 0
        lines = [
            f"Grid plan: {len(self.substrate)} substrate x {len(self.inhibitor)} inhibitor "
            f"levels x {self.replicates} replicates = {self.wells_used} of {self.n_wells} wells",
            f"  prior: km in [{self.km_range[0]:.4g}, {self.km_range[1]:.4g}], "
            f"Ki in [{self.ki_range[0]:.4g}, {self.ki_range[1]:.4g}]; noise: CV "
            f"{self.cv:.1%} plus SD {self.floor_sd:.1%} of vmax",
            f"  design substrate:   {fmt(self.substrate)}",
            f"  design inhibitor:   {fmt(self.inhibitor)}",
            f"  naive substrate:    {fmt(self.naive_substrate)}",
            f"  naive inhibitor:    {fmt(self.naive_inhibitor)}",
            f"  criterion: {self.criterion}",
            f"  simulated verdicts ({n_sim} prior draws, mechanisms "
            f"{', '.join(SIMULATED_MECHANISMS)} in turn):",
            *self._comparison_lines(),
            f"  {self._conclusion()}",
        ]
        return "\n".join(lines)

    def _conclusion(self) -> str:
        if self.beats_naive is None:
            return ("not checked by simulation (n_simulations=0): the design is proposed on "
                    "its criterion alone")
        (correct, rmse), (naive_correct, naive_rmse) = self.score, self.naive_score
        figures = (f"correct {correct:.1%} vs {naive_correct:.1%}, pKi RMSE {rmse:.3f} vs "
                   f"{naive_rmse:.3f}")
        if self.beats_naive:
            return f"the design beats the naive grid ({figures}): proposed"
        return (f"the design does not beat the naive grid for this prior ({figures}): the "
                f"naive grid is proposed")

    def _repr_html_(self) -> str:
        return ("<div><pre>" + html.escape(self.summary()) + "</pre>"
                + (self.rates().to_html(float_format="%.3g") if len(self.simulations) else "")
                + "</div>")


CRITERION = ("Bayesian Ds-optimality: mean over log-uniform prior draws of "
             "-log det Cov(log kic, log kiu) in the mixed model, vmax and km as nuisance")


def plan_grid(*, km_range, ki_range, n_wells, substrate_choices, inhibitor_choices, cv=0.05,
              floor_sd=0.01, replicates=2, n_prior=64, n_simulations=200, seed=None,
              substrate_unit=None, inhibitor_unit=None) -> GridPlan:
    """Propose substrate and inhibitor levels that determine the mechanism and Ki.

    Parameters
    ----------
    km_range : (float, float)
        Prior range of km, substrate units (log-uniform between the two).
    ki_range : (float, float)
        Prior range of the inhibition constants kic and kiu, inhibitor units.
    n_wells : int
        Plate budget: wells available for this compound.
    substrate_choices : array_like
        The substrate concentrations that can be made (e.g. a 2-fold dilution series).
    inhibitor_choices : array_like
        The inhibitor concentrations that can be made; I = 0 is always added.
    cv : float
        Expected coefficient of variation of a rate (0.05 = 5 %).
    floor_sd : float
        Expected constant part of the noise SD, as a fraction of vmax (the reader's
        floor; 0.01 = 1 % of the uninhibited maximal rate).
    replicates : int
        Wells per grid cell.
    n_prior : int
        Prior draws averaged in the criterion.
    n_simulations : int
        Simulated data sets per grid, for choosing among the candidates and again,
        fresh, for the comparison with the naive grid (0 skips both: the design is then
        the best candidate on the criterion, and ``beats_naive`` is None).
    seed : int, optional
        Seed of every random draw (prior and noise).
    substrate_unit, inhibitor_unit : str, optional
        Units of the substrate and inhibitor levels, carried into :meth:`GridPlan.layout`
        headers (``substrate_uM``); the planner itself works in any one unit per factor.

    Returns
    -------
    GridPlan

    Raises
    ------
    DataError
        When a range, series or budget cannot make a grid; every problem is listed.

    Notes
    -----
    The criterion and the choice are described in the module docstring. The naive grid
    has the design's numbers of levels, evenly spaced by position through each series
    (so, for a dilution series, evenly on the log scale), ends included.

    Examples
    --------
    >>> from inhibkin.design import plan_grid
    >>> plan = plan_grid(km_range=(5, 20), ki_range=(0.1, 1), n_wells=48,
    ...                  substrate_choices=[0.5 * 2**k for k in range(10)],
    ...                  inhibitor_choices=[0.01 * 3**k for k in range(9)],
    ...                  n_simulations=0, seed=1)
    >>> plan.criterion_value > plan.naive_criterion_value
    True
    """
    s_all, i_all = _check_inputs(km_range, ki_range, n_wells, substrate_choices,
                                 inhibitor_choices, cv, floor_sd, replicates, n_prior,
                                 n_simulations)
    rng = np.random.default_rng(seed)
    draws = _prior_draws(km_range, ki_range, n_prior, rng)
    info = _cell_information(s_all, i_all, draws, cv, floor_sd)
    candidates, naive_of_shape = [], {}
    for n_s, n_i in _shapes(s_all.size, i_all.size, n_wells, replicates):
        s0 = np.searchsorted(s_all, naive_levels(s_all, n_s))
        i0 = np.concatenate([[0], np.searchsorted(i_all, naive_levels(i_all[1:], n_i - 1))])
        # Candidate levels: the series within the window around the prior.
        s_win = _window(s_all, *km_range, n_s)
        i_win = np.concatenate([[0], 1 + _window(i_all[1:], *ki_range, n_i - 1)])
        s_even = s_win[np.round(np.linspace(0, s_win.size - 1, n_s)).astype(int)]
        i_even = np.concatenate([[0], i_win[1:][np.round(
            np.linspace(0, i_win.size - 2, n_i - 1)).astype(int)]])
        s_idx, i_idx, value = _exchange(info, s_even, i_even, s_win, i_win[1:], replicates)
        for kind, (s, i) in (("ds-optimal", (s_idx, i_idx)), ("window", (s_even, i_even))):
            s, i = sorted(set(map(int, s))), sorted(set(map(int, i)))
            candidates.append({"kind": kind, "s": s, "i": i,
                               "criterion": _log_det(info, s, i, replicates)})
        naive_of_shape[n_s, n_i] = {"kind": "naive", "s": list(map(int, s0)),
                                    "i": list(map(int, i0)),
                                    "criterion": _log_det(info, s0, i0, replicates)}
    # Drop repeats (the window can leave a shape only one way to fill it).
    unique = {}
    for c in candidates:
        unique.setdefault((tuple(c["s"]), tuple(c["i"])), c)
    candidates = list(unique.values())
    if n_simulations:
        # Choose on one set of draws, compare with the naive grid on fresh ones, so the
        # reported figures carry no selection bias.
        grids = {f"candidate {k}": (s_all[c["s"]], i_all[c["i"]])
                 for k, c in enumerate(candidates)}
        grids.update({f"naive {n_s}x{n_i}": (s_all[c["s"]], i_all[c["i"]])
                      for (n_s, n_i), c in naive_of_shape.items()})
        selection = _simulate_calls(grids, km_range=km_range, ki_range=ki_range, cv=cv,
                                    floor_sd=floor_sd, replicates=replicates,
                                    n_simulations=n_simulations, rng=rng)
        for k, c in enumerate(candidates):
            c["correct"], c["pki_rmse"] = _score(selection, f"candidate {k}")
            naive_correct, naive_rmse = _score(selection,
                                               f"naive {len(c['s'])}x{len(c['i'])}")
            c["dominates"] = c["correct"] >= naive_correct and c["pki_rmse"] <= naive_rmse
        best = max(candidates, key=_preference)
    else:
        for c in candidates:
            c["correct"], c["pki_rmse"] = np.nan, np.nan
        best = max((c for c in candidates if c["kind"] == "ds-optimal"),
                   key=lambda c: c["criterion"])
    # The naive grid has the shape of the design: the comparison is about the levels.
    naive = naive_of_shape[len(best["s"]), len(best["i"])]
    grids = {"proposed": (s_all[best["s"]], i_all[best["i"]]),
             "naive": (s_all[naive["s"]], i_all[naive["i"]])}
    sims = _simulate_calls(grids, km_range=km_range, ki_range=ki_range, cv=cv,
                           floor_sd=floor_sd, replicates=replicates,
                           n_simulations=n_simulations, rng=rng)
    beats = None
    if n_simulations:
        (correct, rmse), (naive_correct, naive_rmse) = (_score(sims, "proposed"),
                                                        _score(sims, "naive"))
        beats = bool(correct >= naive_correct and rmse <= naive_rmse
                     and (correct > naive_correct or rmse < naive_rmse))
    table = pd.DataFrame([{
        "candidate": k, "kind": c["kind"], "n_substrate": len(c["s"]),
        "n_inhibitor": len(c["i"]),
        "substrate": tuple(float(x) for x in s_all[c["s"]]),
        "inhibitor": tuple(float(x) for x in i_all[c["i"]]),
        "criterion": c["criterion"], "correct": c["correct"], "pki_rmse": c["pki_rmse"],
        "chosen": c is best} for k, c in enumerate(candidates)])
    return GridPlan(
        substrate=tuple(float(x) for x in s_all[best["s"]]),
        inhibitor=tuple(float(x) for x in i_all[best["i"]]),
        replicates=int(replicates), n_wells=int(n_wells), criterion=CRITERION,
        criterion_value=best["criterion"],
        naive_substrate=tuple(float(x) for x in s_all[naive["s"]]),
        naive_inhibitor=tuple(float(x) for x in i_all[naive["i"]]),
        naive_criterion_value=naive["criterion"], cv=float(cv), floor_sd=float(floor_sd),
        km_range=(float(km_range[0]), float(km_range[1])),
        ki_range=(float(ki_range[0]), float(ki_range[1])),
        simulations=sims, seed=seed, candidates=table, beats_naive=beats,
        choice="naive" if beats is False else "design",
        substrate_unit=substrate_unit, inhibitor_unit=inhibitor_unit,
    )
