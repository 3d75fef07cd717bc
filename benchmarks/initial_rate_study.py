"""Initial rates against the truth, well by well: error and standard-error calibration by S.

``python -m benchmarks.initial_rate_study [--n N] [--out docs/validation.md]``. The
plates of :mod:`benchmarks.reads_study` (8 × 6 grid in duplicate, 3 % read noise, 3 %
pipetting scatter, read every 20 s for 600 s) from two sources of product curves:

* **mass action**: the ODE of ``tests/grid_ode.py`` (E, S, I, ES, EI, ESI, P), each
  truth of the reads study. The true initial rate of a well is the ODE's own slope just
  after the pre-steady state, (P(1 s) − P(0.5 s))/0.5 s, times the well's pipetting
  scale (the scale stretches time), so it reads no rate law of inhibkin;
* **closed form**: the integrated Michaelis–Menten equation written here with
  ``scipy.special.lambertw`` (Schnell & Mendoza 1997, J. Theor. Biol. 187:207), no
  inhibitor (Vapp = vmax, Kapp = km of grid_ode), true rate vmax·S/(km + S) times the
  scale.

Each plate goes through ``initial_rates`` with every method of :data:`METHODS`; per
source, method and substrate level: the median relative error of the rate
(rate/true − 1), its root mean square, and the calibration of ``rate_se``: the standard
deviation of z = (rate − true)/rate_se (1 when calibrated) and the share of wells with
|z| ≤ 1.96 (95 % when calibrated).

Like with like: the closed form has no inhibitor, so the first table compares the
uninhibited wells (I = 0) of both sources; the second shows the mass-action wells of the
lowest substrate level by inhibitor level. Beside each, the **floor**: the relative
standard error of an unbiased straight line through every read of the well (31 reads,
weighted least squares under the read noise of ``tests/grid_ode.py``, READ_CV × the
noise-free signal), the precision no rate from these reads beats when the curve is
nearly straight. The read noise is 3 % of a signal that is mostly baseline (0.05 AU
against 0.004 AU of product at S = 2 µM after 600 s), so it is nearly constant in
absolute terms and the floor grows as 1/rate: inhibited low-substrate wells are the
noisiest because their signal is smallest, not because a window drops their reads.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import special

import inhibkin as ik
from benchmarks.reads_study import COLUMNS, EPSILON, SEED, TRUTHS, markdown, write_section

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from grid_ode import (  # noqa: E402
    BASELINE,
    EPSILON_PATH,
    N_READS,
    READ_CV,
    READ_INTERVAL,
    Mechanism,
    plate,
    product_curve,
)

METHODS = ("linear", "curve", "integrated")
START = "<!-- initial-rate-study -->"
END = "<!-- /initial-rate-study -->"
# The ODE's slope is read between these times (s): after the pre-steady state (ES and
# EI form within milliseconds at these rate constants) and before depletion matters.
_SLOPE_TIMES = (0.5, 1.0)


def closed_form_curve(mechanism: Mechanism):
    """P(t) of the integrated Michaelis–Menten equation (Lambert W, scipy), uninhibited."""
    km, vmax = mechanism.km, mechanism.vmax

    def curve(s, _i):
        def product(t):
            w = special.lambertw(s / km * np.exp((s - vmax * t) / km)).real
            return s - km * w
        return product
    return curve


def true_rates(source, mechanism, plate_map):
    """Each well's true initial rate (µM/s)."""
    a, b = _SLOPE_TIMES
    out = []
    for s, i, scale in plate_map[["substrate_uM", "inhibitor_uM", "enzyme_scale"]].to_numpy():
        if source == "closed form":
            rate = mechanism.vmax * s / (mechanism.km + s)
        else:
            p = product_curve(mechanism, s, i)(np.array([a, b]))[6]
            rate = (p[1] - p[0]) / (b - a)
        out.append(scale * rate)
    return np.array(out)


#: The reads' times (s), as tests/grid_ode.py reads a plate.
TIMES = READ_INTERVAL * np.arange(N_READS)


def line_floor(product):
    """The standard error (µM/s) of the weighted straight line through every read of a
    well whose noise-free product is ``product`` (µM at :data:`TIMES`), under the read
    noise READ_CV × signal of tests/grid_ode.py."""
    weight = (READ_CV * (BASELINE + EPSILON_PATH * product)) ** -2.0
    centre = np.sum(weight * TIMES) / np.sum(weight)
    return 1.0 / np.sqrt(np.sum(weight * (TIMES - centre) ** 2)) / EPSILON_PATH


def floor_rates(source, mechanism, curve, plate_map):
    """Each well's floor (µM/s): :func:`line_floor` of its noise-free reads."""
    out = []
    for s, i, scale in plate_map[["substrate_uM", "inhibitor_uM", "enzyme_scale"]].to_numpy():
        product = (curve(s, i)(scale * TIMES) if source == "closed form"
                   else product_curve(mechanism, s, i)(scale * TIMES)[6])
        out.append(line_floor(product))
    return np.array(out)


def run(n: int) -> pd.DataFrame:
    """One record per well, source and method."""
    rows = []
    sources = [("mass action", truth, TRUTHS[truth], None) for truth in TRUTHS]
    sources.append(("closed form", "none", Mechanism(), closed_form_curve(Mechanism())))
    conversion = ik.BeerLambert(EPSILON)
    for k, (source, truth, mechanism, curve) in enumerate(sources):
        for r in range(n):
            seed = SEED + 1000 * k + r
            reads, plate_map = plate(mechanism, seed, curve=curve, with_scale=True)
            truth_rate = true_rates(source, mechanism, plate_map)
            floor = floor_rates(source, mechanism, curve, plate_map) / truth_rate
            for method in METHODS:
                table = ik.initial_rates(reads, plate_map, conversion=conversion,
                                         method=method, **COLUMNS).table
                rate = table["rate"].to_numpy()  # µM/s (the substrate's unit)
                se = table["rate_se"].to_numpy()
                rows.append(pd.DataFrame({
                    "source": source, "truth": truth, "seed": seed, "method": method,
                    "substrate_uM": table["substrate_uM"].to_numpy(),
                    "inhibitor_uM": table["inhibitor_uM"].to_numpy(),
                    "error": rate / truth_rate - 1, "z": (rate - truth_rate) / se,
                    "floor": floor}))
    return pd.concat(rows, ignore_index=True)


def _summary_row(g) -> dict:
    z = g["z"].to_numpy()
    z = z[np.isfinite(z)]
    return {
        "wells": len(g),
        "median error": f"{np.median(g['error']):+.1%}",
        "RMS error": f"{np.sqrt(np.mean(g['error'] ** 2)):.1%}",
        "floor (RMS)": f"{np.sqrt(np.mean(g['floor'] ** 2)):.1%}",
        "sd of z": f"{np.std(z):.2f}",
        "|z| ≤ 1.96": f"{np.mean(np.abs(z) <= 1.96):.0%}",
    }


def summary_table(records: pd.DataFrame) -> pd.DataFrame:
    """Uninhibited wells (I = 0) of both sources, per source, method and substrate
    level: error, the floor and the calibration."""
    out = []
    uninhibited = records[records["inhibitor_uM"] == 0]
    for (source, method, s), g in uninhibited.groupby(["source", "method", "substrate_uM"],
                                                      sort=False):
        out.append({"source": source, "method": method, "S (µM)": f"{s:g}",
                    **_summary_row(g)})
    return pd.DataFrame(out)


def inhibitor_table(records: pd.DataFrame) -> pd.DataFrame:
    """Mass-action wells of the lowest substrate level, per method and inhibitor level."""
    out = []
    ode = records[records["source"] == "mass action"]
    lowest = ode[ode["substrate_uM"] == ode["substrate_uM"].min()]
    for (method, i), g in lowest.groupby(["method", "inhibitor_uM"], sort=False):
        out.append({"method": method, "I (µM)": f"{i:g}", **_summary_row(g)})
    return pd.DataFrame(out)


def section(records: pd.DataFrame, n: int, seconds: float) -> str:
    lowest = records["substrate_uM"].min()
    return "\n".join([
        START,
        "## Initial rates well by well (against each well's true initial rate)",
        "",
        f"`python -m benchmarks.initial_rate_study --n {n}` (seed {SEED}; {seconds:.0f} s). "
        "Plates of the reads study below (mass action: every truth, "
        f"{n} plates each; closed form: the integrated Michaelis–Menten equation by "
        f"scipy's Lambert W, no inhibitor, {n} plates). True rate: the ODE's slope at "
        "0.5–1 s (the closed form's vmax·S/(km + S)) times the well's pipetting scale; "
        "on the four truths' 48 wells it agrees with the quasi-steady-state mixed law "
        "to 1.1e-4. Error = rate/true − 1; z = (rate − true)/rate_se. Floor: the "
        "relative standard error of an unbiased weighted straight line through all 31 "
        "reads under the simulator's read noise (3 % of a signal that is mostly "
        "baseline), the precision no estimator beats on a nearly straight curve.",
        "",
        "Uninhibited wells (I = 0) of both sources, like with like:",
        "",
        markdown(summary_table(records)),
        "",
        f"Mass-action wells at the lowest substrate level ({lowest:g} µM) by inhibitor "
        "level: the absolute error stays the same while the rate falls, so the relative "
        "error follows the floor (an inhibited well's rate is down to 1/7 of the "
        "uninhibited one here). Pooled over every inhibitor level, as this table was "
        "reported before, these wells gave an RMS error of 84 % (linear) against 32 % for "
        "the uninhibited closed-form wells: the two were not like with like.",
        "",
        markdown(inhibitor_table(records)),
        END,
    ])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=20, help="plates per source")
    parser.add_argument("--out", type=Path, help="Markdown file whose section is replaced")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    records = run(args.n)
    text = section(records, args.n, time.perf_counter() - started)
    print(text)
    if args.out:
        write_section(text, args.out, START, END)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
