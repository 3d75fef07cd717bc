"""A whole campaign: end to end against the solvers alone, and the lmfit path against the
batched engine, side by side.

End to end against the solvers (issue 19, item 1): ``fit_campaign`` with the batched
engine (in this process) at 500 and at 10,000 compounds, then, in the same run, the
solvers alone on the same work: :func:`~inhibkin.engine.fit_mechanism_arrays` on every
compound's grid (padded arrays in M, the campaign's weighting) plus
:func:`~inhibkin.engine.fit_logistic_batch` on every curve (the percent activities the
campaign fitted). The ratio is what everything around the solvers costs. Each size runs
in a fresh process, whose peak resident set size is the campaign's peak memory.

Then one seeded campaign of compounds that each have a substrate × inhibitor grid (6 × 5
levels in duplicate) and a ten-point duplicate dose-response curve, 5 % CV, goes through
``fit_campaign`` with ``engine="lmfit"`` and with ``engine="batched"`` (in this process,
no workers, so the ratio is the engine's and not the scheduler's). Prints compounds per
second for each, their ratio, the agreement of verdicts and of the ranking's estimates,
and how many fits the engine handed back to the lmfit path.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import time

import numpy as np

from inhibkin.campaign import fit_campaign
from inhibkin.campaign.options import serial_chunk_size
from inhibkin.engine import fit_logistic_batch, fit_mechanism_arrays, pad
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign

_SEED = 20261216
_CV = 0.05
_KM_M = 20e-6
_FULL = 1_000
_SMOKE = 12
# Campaign sizes of the end-to-end / solvers ratio (issue 19), and its goal.
_END_TO_END_SIZES = (500, 10_000)
_END_TO_END_SMOKE = (20,)
_END_TO_END_GOAL = 2.0
# Agreement asked of the engine (issue 7).
_AGREEMENT_RTOL = 1e-6
_VERDICT_AGREEMENT = 0.995
# SSRs equal to rounding (the sums of squares are formed in different orders).
_SSR_ROUNDING = 1e-14
# Compounds whose disagreements are listed.
_SHOWN = 10


def _campaign(n):
    grid, _ = simulate_campaign(n, seed=_SEED, cv=_CV)
    names = list(dict.fromkeys(grid["compound"]))
    plates, _ = simulate_dose_campaign(names, seed=_SEED + 1, cv=_CV)
    return grid, plates


def _timed(run):
    started = time.perf_counter()
    out = run()
    return time.perf_counter() - started, out


def _timed_cpu(run):
    """(wall seconds, CPU seconds of this process, result): on a shared machine the CPU
    seconds leave out the time spent waiting for a core."""
    wall, cpu = time.perf_counter(), time.process_time()
    out = run()
    return time.perf_counter() - wall, time.process_time() - cpu, out


def _largest_difference(a, b, column):
    """Largest relative difference of ``column`` where both tables hold a number."""
    x, y = a[column].to_numpy(dtype=float), b[column].to_numpy(dtype=float)
    both = np.isfinite(x) & np.isfinite(y) & (x != 0)
    return float(np.max(np.abs(x[both] - y[both]) / np.abs(x[both]), initial=0.0))


def _curve_agreement(engine, reference):
    """(curves beyond 1e-6, of which the engine's SSR is no larger): top, bottom, log
    IC50 and Hill, top and bottom relative to the curve's span (bottom can sit at 0)."""
    names = ["top", "bottom", "log_ic50", "hill"]
    beyond = engine_lower = 0
    for name, fit in engine.potency_fits.items():
        ref = reference.potency_fits[name]
        mine = fit.params.loc[names, "estimate"].to_numpy(dtype=float)
        theirs = ref.params.loc[names, "estimate"].to_numpy(dtype=float)
        scale = np.abs(theirs)
        scale[:2] = np.maximum(scale[:2], abs(theirs[0] - theirs[1]))
        if np.any(np.abs(mine - theirs) > _AGREEMENT_RTOL * scale):
            beyond += 1
            engine_lower += fit.ssr <= ref.ssr * (1 + _SSR_ROUNDING)
    return beyond, engine_lower


def _solver_inputs(grid, campaign):
    """The solvers' own inputs for the work of ``campaign``: every grid padded (M), and
    every curve it fitted (log10 M, percent activity)."""
    groups = [(g["substrate_uM"].to_numpy() * 1e-6, g["inhibitor_nM"].to_numpy() * 1e-9,
               g["rate"].to_numpy()) for _, g in grid.groupby("compound", sort=False)]
    curves = [(np.log10(fit.conc), fit.response) for fit in campaign.potency_fits.values()]
    x, y, mask = pad(curves)
    return pad(groups), (x, y, mask)


def _solvers(grids, curves, weighting, chunk_size=None):
    s, i, v, mask = grids
    fit_mechanism_arrays(s, i, v, mask, weighting=weighting, chunk_size=chunk_size)
    fit_logistic_batch(*curves, chunk_size=chunk_size)


def end_to_end(n: int) -> dict:
    """Seconds of ``fit_campaign`` (batched, in this process) and of the solvers alone on
    the same grids and curves, and this process's peak resident set size (bytes)."""
    grid, plates = _campaign(n)
    t_campaign, cpu_campaign, campaign = _timed_cpu(
        lambda: fit_campaign(grid, dose_response=plates, km=_KM_M, engine="batched",
                             quiet=True))
    grids, curves = _solver_inputs(grid, campaign)
    t_solvers, cpu_solvers, _ = _timed_cpu(
        lambda: _solvers(grids, curves, campaign.options["weighting"]))
    # The same work in chunks of the campaign's default size, as fit_campaign runs it.
    t_chunked, _ = _timed(lambda: _solvers(grids, curves, campaign.options["weighting"],
                                           serial_chunk_size(n)))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux
    return {"n": n, "campaign": t_campaign, "solvers": t_solvers, "chunked": t_chunked,
            "campaign_cpu": cpu_campaign, "solvers_cpu": cpu_solvers, "peak_bytes": peak,
            "fallback_dose": int(campaign.options["n_fallback_dose"]),
            "curves": len(campaign.potency_fits)}


def _end_to_end_lines(sizes):
    lines = ["end to end against the solvers alone (batched engine, one process per size; "
             f"goal ≤ {_END_TO_END_GOAL:g}x):"]
    for n in sizes:
        # A fresh process per size: its peak memory is this campaign's alone.
        done = subprocess.run([sys.executable, "-m", "benchmarks.bench_campaign",
                               "--end-to-end", str(n)], capture_output=True, text=True,
                              check=True)
        r = json.loads(done.stdout.splitlines()[-1])
        lines.append(
            f"  {n:>7,} compounds: fit_campaign {r['campaign']:8.2f} s, solvers "
            f"{r['solvers']:7.2f} s, ratio {r['campaign'] / r['solvers']:5.2f}x wall, "
            f"{r['campaign_cpu'] / r['solvers_cpu']:.2f}x CPU "
            f"({r['campaign_cpu']:.1f} / {r['solvers_cpu']:.1f} CPU s) (solvers in "
            f"chunks of {serial_chunk_size(n):,}, as the campaign runs them: {r['chunked']:.2f} s, "
            f"{r['campaign'] / r['chunked']:.1f}x); "
            f"peak memory {r['peak_bytes'] / 2**30:.2f} GiB (max RSS); "
            f"{r['fallback_dose']} of {r['curves']:,} curves refitted by the lmfit path")
    return lines


def main(smoke: bool = False) -> str:
    """End to end against the solvers; compounds per second on both paths, the ratio,
    agreement and fallbacks."""
    head = _end_to_end_lines(_END_TO_END_SMOKE if smoke else _END_TO_END_SIZES)
    return "\n".join(head + [_comparison(smoke)])


def _comparison(smoke: bool) -> str:
    """The lmfit path against the batched engine on one campaign."""
    n = _SMOKE if smoke else _FULL
    grid, plates = _campaign(n)
    common = dict(dose_response=plates, km=_KM_M, quiet=True)
    t_lmfit, reference = _timed(lambda: fit_campaign(grid, engine="lmfit", **common))
    t_engine, engine = _timed(lambda: fit_campaign(grid, engine="batched", **common))
    t_small, _ = _timed(lambda: fit_campaign(grid, engine="batched", chunk_size=32, **common))
    a = engine.ranking.set_index("compound")
    b = reference.ranking.set_index("compound").loc[a.index]
    same = (a["verdict"] == b["verdict"]) & (a["status"] == b["status"])
    keep = ~a.index.isin(a.index[~same])
    determined = ((a["status"] == "determined") & (b["status"] == "determined")).to_numpy()
    order_same = (engine.ranking["compound"][engine.ranking["compound"].isin(a.index[keep])]
                  .tolist() == reference.ranking["compound"][
                      reference.ranking["compound"].isin(a.index[keep])].tolist())
    beyond, lower = _curve_agreement(engine, reference)
    lines = [
        f"campaign benchmark ({'smoke' if smoke else 'full'} size), seed {_SEED}, "
        f"python {sys.version.split()[0]}: {n:,} compounds, each a 60-point grid and a "
        f"20-well curve, {_CV:.0%} CV; serial, one process",
        f"  {'lmfit path':<32} {t_lmfit:8.2f} s {n / t_lmfit:9.1f} compounds/s",
        f"  {f'batched engine (chunks of {serial_chunk_size(n):,})':<32} {t_engine:8.2f} s "
        f"{n / t_engine:9.1f} compounds/s",
        f"  {'batched engine (chunks of 32)':<32} {t_small:8.2f} s "
        f"{n / t_small:9.1f} compounds/s",
        f"  ratio batched / lmfit          {t_lmfit / t_engine:8.1f}x "
        f"(chunks of 32: {t_lmfit / t_small:.1f}x)",
        f"  verdict and status agree on {int(same.sum()):,}/{n:,} compounds "
        f"({same.mean():.2%}; asked ≥ {_VERDICT_AGREEMENT:.1%}); ranking order "
        f"{'identical' if order_same else 'DIFFERENT'} outside the disagreements",
        f"  same reported Ki (text) on {int((a['ki_reported'] == b['ki_reported']).sum()):,}"
        f"/{n:,}, same flags on {int((a['flags'] == b['flags']).sum()):,}/{n:,}",
        f"  largest relative difference over the {int(determined.sum()):,} compounds "
        "determined on both paths: "
        + ", ".join(f"{c} {_largest_difference(a[determined], b[determined], c):.1e}"
                    for c in ("ki_M", "ki_low_M", "ki_high_M", "ic50_M", "hill"))
        + f" (asked ≤ {_AGREEMENT_RTOL:g})",
        f"  curves beyond {_AGREEMENT_RTOL:g} (top, bottom relative to the span): {beyond} of "
        f"{len(engine.potency_fits):,}; on {lower} of them the engine's SSR is no larger "
        f"(within {_SSR_ROUNDING:g}): the lmfit path stopped short",
        f"  refitted by the lmfit path: {engine.options['n_fallback_grid']} grid model fits "
        f"(of {5 * len(engine.fits):,}), {engine.options['n_fallback_dose']} curves "
        f"(of {len(engine.potency_fits):,})",
    ]
    for name in list(a.index[~same])[:_SHOWN]:
        lines.append(f"    {name}: engine {a.loc[name, 'verdict']}/{a.loc[name, 'status']} "
                     f"({a.loc[name, 'reason']}); lmfit {b.loc[name, 'verdict']}/"
                     f"{b.loc[name, 'status']} ({b.loc[name, 'reason']})")
    return "\n".join(lines)


if __name__ == "__main__":
    if "--end-to-end" in sys.argv[1:]:
        print(json.dumps(end_to_end(int(sys.argv[sys.argv.index("--end-to-end") + 1]))))
    else:
        print(main(smoke="--smoke" in sys.argv[1:]))
