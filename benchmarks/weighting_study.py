"""Uniform against relative weighting of rate tables: the measurement behind the default.

``python -m benchmarks.weighting_study [--n N]`` fits seeded 8 × 6 grids (the package's
standard design, duplicates; vmax 10, Km 2, Kic 0.5, Kiu 0.5 or 2.5 for mixed) with both
weightings on the batched engine and prints, per noise model and mechanism, how often the
verdict names the true mechanism and the RMSE of pKic when it does. The README's
"Weighting default" paragraph quotes its output for N = 200.
"""

from __future__ import annotations

import argparse

import numpy as np

from inhibkin.engine import fit_mechanisms_batch
from inhibkin.simulate import simulate_grid

#: Noise models: constant coefficient of variation, constant standard deviation.
NOISE = {"cv": {"cv": 0.05}, "sd": {"sd": 0.25}}
KIC = 0.5
ALPHA_MIXED = 5.0
SEED0 = 1000


def main(n=200) -> str:
    lines = []
    for noise, options in NOISE.items():
        for mechanism in ("competitive", "mixed"):
            kiu = KIC * (ALPHA_MIXED if mechanism == "mixed" else 1.0)
            grids = {f"{mechanism}-{k}": simulate_grid(mechanism, vmax=10.0, km=2.0, kic=KIC,
                                                       kiu=kiu, seed=SEED0 + k, **options)
                     for k in range(n)}
            for weighting in ("uniform", "relative"):
                fits = fit_mechanisms_batch(grids, weighting=weighting)
                right = np.mean([f.verdict == mechanism for f in fits.values()])
                errors = np.array([np.log10(KIC) - np.log10(f.constants().loc["kic", "estimate"])
                                   for f in fits.values() if f.best == mechanism])
                lines.append(f"{noise:>3} {mechanism:<12} {weighting:<9} correct "
                             f"{100 * right:5.1f} %  pKic RMSE "
                             f"{np.sqrt(np.mean(errors ** 2)):.3f} (n={errors.size})")
    return "\n".join(lines)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=200, help="data sets per cell")
    print(main(parser.parse_args().n))
