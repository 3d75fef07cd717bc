"""A campaign scaled out on Dask: in this process, then a LocalCluster of 1 and 2 workers.

One seeded campaign (6 × 5 duplicate grids plus a ten-point duplicate dose-response curve
per compound, 5 % CV) goes through ``fit_campaign`` (batched engine, Wald intervals) in
this process and on local clusters of one and of two worker processes (one thread
each). Prints compounds per second, throughput per worker, the 2-worker / 1-worker
ratio and the overhead of one worker against the in-process run, and checks that the
three rankings agree exactly. The ratios mean what they say only on a machine with two
cores free; on a shared machine they read low.
"""

from __future__ import annotations

import time

from inhibkin.campaign import fit_campaign
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign

_SEED = 20261220
_CV = 0.05
_KM_M = 20e-6
_FULL = 10_000
_SMOKE = 24
# Compounds per task: enough tasks for two workers to share, few enough to amortise.
_CHUNK = 256


def _campaign(n):
    grid, _ = simulate_campaign(n, seed=_SEED, cv=_CV)
    names = list(dict.fromkeys(grid["compound"]))
    plates, _ = simulate_dose_campaign(names, seed=_SEED + 1, cv=_CV)
    return grid, plates


def main(smoke: bool = False) -> str:
    """Throughput in process and on 1 and 2 Dask workers, side by side."""
    return run(_SMOKE if smoke else _FULL)


def run(n: int) -> str:
    """:func:`main` for a campaign of ``n`` compounds."""
    try:
        import distributed
    except ImportError:
        return "dask.distributed is not installed (pip install 'inhibkin[dask]'): skipped"
    grid, plates = _campaign(n)
    options = dict(dose_response=plates, km=_KM_M, intervals="wald", engine="batched",
                   quiet=True, chunk_size=max(1, min(_CHUNK, n // 4)))
    seconds, rankings = {}, {}
    started = time.perf_counter()
    rankings["in process"] = fit_campaign(grid, **options).ranking
    seconds["in process"] = time.perf_counter() - started
    for workers in (1, 2):
        with distributed.LocalCluster(n_workers=workers, threads_per_worker=1,
                                      host="127.0.0.1", dashboard_address=None) as cluster, \
                distributed.Client(cluster) as client:
            started = time.perf_counter()
            rankings[workers] = fit_campaign(grid, client=client, **options).ranking
            seconds[workers] = time.perf_counter() - started
    same = all(r.equals(rankings["in process"]) for r in rankings.values())
    lines = [f"{n} compounds (grid + curve each), chunks of {options['chunk_size']}",
             f"{'run':<14}{'seconds':>10}{'compounds/s':>14}{'per worker':>12}"]
    for name, s in seconds.items():
        per_worker = n / s / (name if isinstance(name, int) else 1)
        label = name if isinstance(name, str) else f"{name} worker" + ("s" * (name > 1))
        lines.append(f"{label:<14}{s:>10.2f}{n / s:>14.1f}{per_worker:>12.1f}")
    lines.append(f"2 workers / 1 worker speed-up {seconds[1] / seconds[2]:.2f}x; 1 worker / in "
                 f"process time {seconds[1] / seconds['in process']:.2f}x; rankings identical: "
                 f"{same}")
    return "\n".join(lines)


if __name__ == "__main__":
    print(main())
