"""The report against the ranking it shows: time and size per compound, side by side.

One seeded campaign (6 × 5 duplicate grids, 5 % CV) is ranked once (``fit_campaign``,
Wald intervals, the batched engine, in this process), then written as a report four
ways: every compound sketched (``detail="none"``), the default (the five best ranked in
full), the three best in full, and — on the first few compounds
only, since it costs about a second each — every compound in full (``detail="all"``,
what the report drew for every compound before sketches). Prints wall and CPU seconds
(CPU is steadier on a shared machine; all runs are in this one process), the ratio of
rank + report to rank alone, bytes per compound, and the CPU per compound of a sketched
against a full section. Then a 10,000-compound campaign is ranked and reported at the
default detail (that it works, with its ratio and size).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from inhibkin.campaign import fit_campaign
from inhibkin.reporting.report import DEFAULT_DETAIL, report
from inhibkin.simulate import simulate_campaign

_SEED = 20261219
_CV = 0.05
_FULL = 1_000
_SMOKE = 12
# The "10,000 compounds must work": ranked and reported at the default detail
# (a smaller campaign in the smoke run, so the suite still runs this path).
_LARGE = 10_000
_LARGE_SMOKE = 30
# Compounds drawn in full for the per-compound cost of the matplotlib figures.
_IN_FULL = 5
# The goals: report within 3x the ranking, 1,000 compounds within 20 MB.
_RATIO_GOAL = 3.0
_BYTES_GOAL_PER_COMPOUND = 20e6 / 1_000


def _timed(run, *args, **kwargs):
    """(wall seconds, CPU seconds, result)."""
    wall, cpu = time.perf_counter(), time.process_time()
    out = run(*args, **kwargs)
    return time.perf_counter() - wall, time.process_time() - cpu, out


def main(smoke: bool = False) -> str:
    """Seconds and bytes of the report beside the ranking of the same campaign."""
    n = _SMOKE if smoke else _FULL
    grid, _ = simulate_campaign(n, seed=_SEED, cv=_CV)

    def ranked():
        return fit_campaign(grid, intervals="wald", engine="batched", quiet=True)

    rank_s, rank_cpu, campaign = _timed(ranked)
    first = campaign.ranking["compound"].head(_IN_FULL)
    small = type(campaign)(ranking=campaign.ranking.head(_IN_FULL),
                           fits={c: campaign.fits[c] for c in first if c in campaign.fits},
                           options=campaign.options)
    lines = [f"{n} compounds; rank (fit_campaign, batched, wald) {rank_s:.2f} s wall, "
             f"{rank_cpu:.2f} s CPU",
             f"{'report':<28}{'compounds':>10}{'wall s':>8}{'CPU s':>8}{'(rank+report)/rank':>28}"
             f"{'KB/compound':>13}"]
    with tempfile.TemporaryDirectory() as folder:
        per_compound = {}
        for name, which, detail in (("sketches only", campaign, "none"),
                                    (f"default ({DEFAULT_DETAIL} in full)", campaign,
                                     DEFAULT_DETAIL),
                                    ("top:3 in full", campaign, "top:3"),
                                    ("every compound in full", small, "all")):
            path = Path(folder) / "report.html"
            if which is not small:
                # A campaign's per-compound fits are built on first read and kept: each
                # report gets a freshly ranked campaign, as `inhibkin report` would, so
                # that it pays for building them (the ranking is the same every time).
                which = ranked()
            seconds, cpu, _ = _timed(report, which, path, detail=detail)
            count = len(which.ranking)
            per_compound[detail] = cpu / count
            ratio = (f"{(rank_s + seconds) / rank_s:.2f}x wall, "
                     f"{(rank_cpu + cpu) / rank_cpu:.2f}x CPU" if which is not small else "-")
            lines.append(f"{name:<28}{count:>10}{seconds:>8.2f}{cpu:>8.2f}{ratio:>28}"
                         f"{path.stat().st_size / count / 1e3:>13.1f}")
    lines.append(f"CPU per compound: sketched {1e3 * per_compound['none']:.1f} ms, in full "
                 f"{1e3 * per_compound['all']:.0f} ms "
                 f"({per_compound['all'] / per_compound['none']:.0f}x); goals: report + rank "
                 f"<= {_RATIO_GOAL:g}x rank, <= {_BYTES_GOAL_PER_COMPOUND / 1e3:g} KB/compound")
    lines.append(_large(_LARGE_SMOKE if smoke else _LARGE))
    return "\n".join(lines)


def _large(n: int) -> str:
    """Rank and report ``n`` compounds at the default detail: that it works, its time
    against the ranking's and its size."""
    grid, _ = simulate_campaign(n, seed=_SEED + 1, cv=_CV)
    rank_s, rank_cpu, campaign = _timed(fit_campaign, grid, intervals="wald",
                                        engine="batched", quiet=True)
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "report.html"
        seconds, cpu, _ = _timed(report, campaign, path, detail=DEFAULT_DETAIL)
        size = path.stat().st_size
    return (f"{n:,} compounds (default detail): rank {rank_s:.2f} s, report {seconds:.2f} s "
            f"wall ({cpu:.2f} s CPU); (rank+report)/rank {(rank_s + seconds) / rank_s:.2f}x "
            f"wall, {(rank_cpu + cpu) / rank_cpu:.2f}x CPU; {size / 1e6:.1f} MB "
            f"({size / n / 1e3:.1f} KB/compound): works")


if __name__ == "__main__":
    import sys

    print(main(smoke="--smoke" in sys.argv[1:]))
