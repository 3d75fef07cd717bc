"""kobs of every well: the batched grid profile alone, and with the per-well refinement.

``kobs_arrays`` profiles every well over a common kobs·T grid in one numpy pass (batched
normal equations), then refines each well with scipy.optimize.least_squares. The columns
time the grid pass alone and the whole call, so the share of the per-well refinement is
visible, on plates of slow-onset curves with noise.
"""

from __future__ import annotations

import time

import numpy as np

from inhibkin.time_dependent.kobs import grid_profile, kobs_arrays
from inhibkin.time_dependent.schemes import progress_curve

_SEED = 20261216
_FULL = {"wells": (96, 384), "reads": 61, "repeats": 3}
_SMOKE = {"wells": (8,), "reads": 21, "repeats": 1}


def _plate(n_wells, n_reads, rng):
    t = np.linspace(0.0, 3600.0, n_reads)
    kobs = rng.uniform(2e-4, 3e-3, n_wells)
    vi = rng.uniform(0.001, 0.01, n_wells)
    y = progress_curve(t[None, :], 0.0, vi[:, None], 0.0, kobs[:, None])
    y = y + rng.normal(0.0, 1e-3, y.shape)
    return np.broadcast_to(t, y.shape).copy(), y


def _best(fn, args, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - start)
    return min(times)


def main(smoke: bool = False) -> str:
    size = _SMOKE if smoke else _FULL
    rng = np.random.default_rng(_SEED)
    lines = [f"{'wells':>6} {'grid pass (s)':>14} {'whole kobs_arrays (s)':>22} "
             f"{'per well (ms)':>14}"]
    for n in size["wells"]:
        t, y = _plate(n, size["reads"], rng)
        valid = np.isfinite(y)
        grid = _best(grid_profile, (t, y, valid, True), size["repeats"])
        whole = _best(kobs_arrays, (t, y, valid), size["repeats"])
        lines.append(f"{n:>6} {grid:>14.3f} {whole:>22.3f} {1e3 * whole / n:>14.2f}")
    return "\n".join(lines)
