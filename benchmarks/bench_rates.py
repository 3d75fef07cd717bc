"""Initial rates: one vectorised pass over a 384-well plate against a per-well Python loop.

Both columns run the same window fits (:func:`inhibkin.rates.initial._rates_core`); the loop calls
it once per well, the vectorised pass once per plate, so the ratio is the gain from
vectorising alone. ``initial_rates`` adds the table checks, blank handling and assembly.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from inhibkin.rates.initial import _rates_core, initial_rates

_SEED = 20261204
_FULL = {"wells": 384, "reads": 60, "repeats": 3}
_SMOKE = {"wells": 24, "reads": 20, "repeats": 1}


def _plate(n_wells, n_reads, rng):
    times = np.arange(n_reads) * 15.0  # s
    s0 = rng.choice([5.0, 10.0, 20.0, 50.0, 100.0, 200.0], n_wells)  # µM
    vmax = rng.uniform(0.005, 0.2, n_wells)  # µM/s
    km = 30.0
    # First-order-in-depletion curves are enough for timing; noise 0.1 % of S0.
    rate0 = vmax * s0 / (km + s0)
    k = rate0 / s0
    signal = s0[:, None] * (1 - np.exp(-k[:, None] * times[None, :]))
    signal += 1e-3 * s0[:, None] * rng.standard_normal((n_wells, n_reads))
    wells = [f"W{i:03d}" for i in range(n_wells)]
    reads = pd.DataFrame({"plate": 1, "well": np.repeat(wells, n_reads),
                          "time": np.tile(times, n_wells), "signal": signal.ravel()})
    plate_map = pd.DataFrame({"plate": 1, "well": wells, "compound": "CPD", "substrate": s0,
                              "inhibitor": 0.0})
    return times, signal, s0, reads, plate_map


def _best_of(repeats, job):
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        job()
        best = min(best, time.perf_counter() - start)
    return best


def main(smoke: bool = False) -> str:
    """Wells per second of the vectorised pass, the per-well loop and initial_rates."""
    size = _SMOKE if smoke else _FULL
    rng = np.random.default_rng(_SEED)
    times, signal, s0, reads, plate_map = _plate(size["wells"], size["reads"], rng)
    n = size["wells"]
    t = np.tile(times, (n, 1))
    valid = np.ones_like(t, dtype=bool)
    ceiling_at = np.full(n, size["reads"])
    lines = [f"{n} wells x {size['reads']} reads, best of {size['repeats']}",
             f"{'method':<8} {'vectorised':>14} {'per-well loop':>14} {'ratio':>7} "
             f"{'initial_rates':>14}"]
    for method in ("linear", "curve"):
        options = dict(method=method, alpha=0.05, max_bias=0.01, max_conversion=0.1,
                       min_points=6)

        def vectorised(options=options):
            _rates_core(t, signal, valid, ceiling_at, s0, **options)

        def loop(options=options):
            for w in range(n):
                _rates_core(t[w:w + 1], signal[w:w + 1], valid[w:w + 1], ceiling_at[w:w + 1],
                            s0[w:w + 1], **options)

        def public(method=method):
            initial_rates(reads, plate_map, method=method, signal_unit="uM",
                          substrate_unit="uM")

        fast = n / _best_of(size["repeats"], vectorised)
        slow = n / _best_of(size["repeats"], loop)
        full = n / _best_of(size["repeats"], public)
        lines.append(f"{method:<8} {fast:>10.0f} w/s {slow:>10.0f} w/s {fast / slow:>6.1f}x "
                     f"{full:>10.0f} w/s")
    return "\n".join(lines)
