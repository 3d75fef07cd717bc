"""How often can the reads grid reject rule 4's alpha edge at all? The power of the test.

``python -m benchmarks.edge_power_study [--out docs/validation.md]``. A one-constant
verdict of :mod:`inhibkin.core.compare` needs the data to reject mixed with alpha =
kiu/kic held at the edge of its region (1/5 for uncompetitive, 5 for competitive, both
for noncompetitive). Whatever the estimator, the power of that test on a grid is set by
the noncentrality λ: the weighted sum of squares by which the best edge model misses
the truth's noise-free data, in units of the data's noise (the likelihood-ratio
statistic on noise-free data; common practice). Two bounds, each for the truths of
:mod:`benchmarks.reads_study` on its grid (8 × 6 in duplicate):

* **rates at the floor**: the true initial rates of the quasi-steady-state law (which
  the mass-action ODE follows to 1.1e-4, docs/validation.md), each with the standard
  error of an unbiased straight line through all 31 reads of its noise-free ODE curve
  (:func:`benchmarks.initial_rate_study.line_floor`): no initial-rate estimator does
  better on these reads;
* **whole curves**: every noise-free ODE read of every well against the edge model's
  integrated Michaelis–Menten curve (its apparent constants in the closed form, written
  here with scipy's Lambert W; Schnell & Mendoza 1997, J. Theor. Biol. 187:207), each
  well's offset free, noise READ_CV × signal.

Both leave out pipetting scatter and treat the noise as known, so the real tests have
less power. Power at level 0.05: two-sided P(χ²₁(λ) > χ²₁,0.95) and one-sided
Φ(√λ − z0.95) (scipy.stats). Noise-free fits by scipy.optimize.least_squares over
vmax, km and the edge model's free constant (log scale).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, special, stats

from benchmarks.initial_rate_study import TIMES, line_floor
from benchmarks.reads_study import TRUTHS, markdown, write_section

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from grid_ode import (  # noqa: E402
    BASELINE,
    EPSILON_PATH,
    INHIBITOR,
    READ_CV,
    REPLICATES,
    SUBSTRATE,
    product_curve,
)

START = "<!-- edge-power-study -->"
END = "<!-- /edge-power-study -->"
LEVEL = 0.05
#: The edges each truth's name must reject (rule 4 with alpha_factor 5).
EDGES = {"competitive": (5.0,), "uncompetitive": (0.2,), "noncompetitive": (0.2, 5.0)}


def mixed_rate(vmax, km, kic, kiu, s, i):
    """The mixed law (µM/s), kic or kiu inf for the one-constant laws."""
    return vmax * s / (km * (1 + i / kic) + s * (1 + i / kiu))


def _grid():
    s, i = np.meshgrid(SUBSTRATE, INHIBITOR, indexing="ij")
    return s.ravel(), i.ravel()


def _edge_constants(theta, alpha):
    """vmax, km, kic, kiu of the edge model from its log parameters (kiu free)."""
    vmax, km, kiu = np.exp(theta)
    return vmax, km, kiu / alpha, kiu


def _noncentrality(residuals, start):
    fit = optimize.least_squares(residuals, np.log(start), xtol=1e-14, ftol=1e-14,
                                 gtol=1e-14)
    return REPLICATES * float(np.sum(fit.fun ** 2))


def rates_noncentrality(truth, alpha):
    m = TRUTHS[truth]
    s, i = _grid()
    true_rate = mixed_rate(m.vmax, m.km, m.kic, m.kiu, s, i)
    floor = np.array([line_floor(product_curve(m, a, b)(TIMES)[6]) for a, b in zip(s, i)])

    def residuals(theta):
        return (mixed_rate(*_edge_constants(theta, alpha), s, i) - true_rate) / floor
    return _noncentrality(residuals, [m.vmax, m.km, min(m.kic, m.kiu)])


def _closed_form(vapp, kapp, s0):
    w = special.lambertw(s0 / kapp * np.exp((s0 - vapp * TIMES) / kapp)).real
    return s0 - kapp * w


def curves_noncentrality(truth, alpha):
    m = TRUTHS[truth]
    s, i = _grid()
    reads = np.array([product_curve(m, a, b)(TIMES)[6] for a, b in zip(s, i)])
    sigma = READ_CV * (BASELINE + EPSILON_PATH * reads)
    weight = sigma ** -2.0

    def residuals(theta):
        vmax, km, kic, kiu = _edge_constants(theta, alpha)
        vapp = vmax / (1 + i / kiu)
        kapp = km * (1 + i / kic) / (1 + i / kiu)
        miss = EPSILON_PATH * (np.array([_closed_form(v, k, a) for v, k, a in
                                         zip(vapp, kapp, s)]) - reads)
        # Each well's offset is free: its weighted mean miss is projected out.
        offset = np.sum(weight * miss, axis=1) / np.sum(weight, axis=1)
        return ((miss - offset[:, None]) / sigma).ravel()
    return _noncentrality(residuals, [m.vmax, m.km, min(m.kic, m.kiu)])


def power(noncentrality):
    two = stats.ncx2.sf(stats.chi2.ppf(1 - LEVEL, 1), 1, noncentrality)
    one = stats.norm.sf(stats.norm.ppf(1 - LEVEL) - np.sqrt(noncentrality))
    return float(two), float(one)


def run() -> pd.DataFrame:
    rows = []
    for truth, edges in EDGES.items():
        for alpha in edges:
            for route, noncentrality in (("rates at the floor", rates_noncentrality),
                                         ("whole curves", curves_noncentrality)):
                lam = noncentrality(truth, alpha)
                two, one = power(lam)
                rows.append({"truth": truth, "edge (alpha)": f"{alpha:g}", "bound": route,
                             "λ": f"{lam:.1f}", "power, two-sided": f"{two:.0%}",
                             "power, one-sided": f"{one:.0%}"})
    return pd.DataFrame(rows)


def section(table: pd.DataFrame, seconds: float) -> str:
    need = optimize.brentq(lambda lam: power(lam)[0] - 0.9, 0.1, 100.0)
    return "\n".join([
        START,
        "## Can this grid reject the alpha edge? The power of rule 4's test",
        "",
        f"`python -m benchmarks.edge_power_study` ({seconds:.0f} s). The most power any "
        "estimator has for rule 4's edge test on the reads study's grid: λ is the "
        "weighted sum of squares by which the best edge model (alpha held at the edge, "
        "vmax, km and one constant free) misses the truth's noise-free data, either as "
        "true initial rates each with the floor standard error of a straight line "
        "through all 31 reads, or as every read of every well (closed-form curves, "
        "offsets free), noise 3 % of the signal; pipetting scatter left out and the "
        "noise taken as known, so real tests have less power. Power at level 0.05 "
        f"(scipy.stats). A call right on 90 % of plates needs λ ≥ {need:.1f} "
        "(two-sided).",
        "",
        markdown(table),
        END,
    ])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, help="Markdown file whose section is replaced")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    table = run()
    seconds = time.perf_counter() - started
    text = section(table, seconds)
    if args.out:
        write_section(text, args.out, START, END)
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
