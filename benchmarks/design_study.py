"""The grid planner against the naive grid, over seeds: does the design win, and how often?

``python -m benchmarks.design_study [--n N] [--seeds K]`` runs :func:`inhibkin.plan_grid`
on a few priors and dilution series (the ``inhibkin design --help`` example, the
plan_a_grid notebook's prior, and a series that already sits on the prior) with ``K``
seeds and ``N`` simulated data sets per grid, and prints per set-up the design's and the
naive grid's correct-call rate and pKi RMSE (mean over seeds, on the plan's fresh draws)
and how often the plan says the design beats the naive grid. docs/design.md quotes its
output.
"""

from __future__ import annotations

import argparse

import numpy as np

from inhibkin.design import plan_grid

SETUPS = {
    "help example (Ki 0.05-0.5, 3-fold from 0.001)": dict(
        km_range=(1.0, 5.0), ki_range=(0.05, 0.5), n_wells=48,
        substrate_choices=[0.01 * 2**k for k in range(12)],
        inhibitor_choices=[0.001 * 3**k for k in range(8)]),
    "notebook (Km 10-100, Ki 20-2000, 2-fold)": dict(
        km_range=(10.0, 100.0), ki_range=(20.0, 2000.0), n_wells=48,
        substrate_choices=list(2.5 * 2.0 ** np.arange(9)),
        inhibitor_choices=list(10.0 * 2.0 ** np.arange(10))),
    "series on the prior (Km 1-4, Ki 0.1-1)": dict(
        km_range=(1.0, 4.0), ki_range=(0.1, 1.0), n_wells=48,
        substrate_choices=[0.5, 1, 2, 4, 8, 16], inhibitor_choices=[0.1, 0.3, 1, 3]),
}


def main(n=200, seeds=5) -> str:
    lines = [f"{'set-up':<48} {'design':>15} {'naive':>15} {'beats':>6}",
             f"{'':<48} {'correct  RMSE':>15} {'correct  RMSE':>15}"]
    for name, setup in SETUPS.items():
        scores, naive, beats = [], [], 0
        for seed in range(seeds):
            plan = plan_grid(**setup, n_simulations=n, seed=seed)
            scores.append(plan.score)
            naive.append(plan.naive_score)
            beats += bool(plan.beats_naive)
        (c, r), (nc, nr) = np.mean(scores, axis=0), np.mean(naive, axis=0)
        lines.append(f"{name:<48} {100 * c:6.1f} % {r:6.3f} {100 * nc:6.1f} % {nr:6.3f} "
                     f"{beats:>3}/{seeds}")
    return "\n".join(lines)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--n", type=int, default=200, help="simulated data sets per grid")
    parser.add_argument("--seeds", type=int, default=5, help="plans per set-up")
    args = parser.parse_args()
    print(main(args.n, args.seeds))
