"""Write the invented demo data set in data_demo/ (fixed seed; run from the repository root).

Everything here is invented: the enzyme ("FCT-7", an imaginary NAD⁺-dependent
dehydrogenase called fictase-7), its constants, the compounds (IDs starting ``INV-``)
and every read. The files exist to show the whole inhibkin flow, not to describe any
real assay. See data_demo/README.md.

    python scripts/make_demo_data.py [--out data_demo]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

from inhibkin.core.logistic import logistic4
from inhibkin.core.models import MODELS

SEED = 20261201

# The invented enzyme: Km of its substrate (µM) and Vmax in the MoA wells (µM/s).
KM_UM = 40.0
VMAX_UM_PER_S = 0.02
# Reads every 15 s for 10 min, starting at the reaction start.
READ_TIMES_S = np.arange(0.0, 601.0, 15.0)
# Integration step of the progress curves (s).
_DT = 0.5
# Product read as a concentration (µM) from an invented calibrated readout, with a
# constant background, a slow non-enzymatic drift (seen in the blanks too) and read noise.
BACKGROUND_UM = 0.6
DRIFT_UM_PER_S = 2e-4
READ_NOISE_UM = 0.015
# Well-to-well variation of the enzyme amount (coefficient of variation).
PIPETTING_CV = 0.03

# Substrate levels from 0.2 to 10 × Km and inhibitor levels 0 to 4 × the expected Ki.
SUBSTRATE_UM = KM_UM * np.geomspace(0.2, 10.0, 8)
INHIBITOR_MULTIPLES = np.array([0.0, 0.5, 1.0, 2.0, 4.0])

# Mechanism-of-action compounds: invented IDs, their true mechanism and constants (nM).
MOA_COMPOUNDS = (
    ("INV-0007", "competitive", {"kic": 35.0}),
    ("INV-0019", "uncompetitive", {"kiu": 120.0}),
    ("INV-0023", "noncompetitive", {"kic": 60.0}),
    ("INV-0031", "mixed", {"kic": 25.0, "kiu": 250.0}),
    ("INV-0042", "none", {}),
    # Weak and tested at too low a range: a likely "ambiguous" or bounded result.
    ("INV-0056", "competitive", {"kic": 1500.0}),
    # Weak, mixed close to noncompetitive, tested far below its constants: the data
    # may not separate the mechanisms.
    ("INV-0063", "mixed", {"kic": 900.0, "kiu": 1400.0}),
)
# Inhibitor range (nM) each compound was planned with (the 4 × Ki top level).
MOA_EXPECTED_KI_NM = {"INV-0007": 40.0, "INV-0019": 100.0, "INV-0023": 50.0,
                      "INV-0031": 30.0, "INV-0042": 100.0, "INV-0056": 150.0,
                      "INV-0063": 60.0}

# The screen: 10-point, 3-fold dilution from 30 µM, singlicate; 32 compounds and
# 16 + 16 control wells per 384-well plate.
SCREEN_COMPOUNDS = 300
SCREEN_TOP_UM = 30.0
SCREEN_POINTS = 10
COMPOUNDS_PER_PLATE = 32
CONTROLS_PER_KIND = 16
SCREEN_SUBSTRATE_UM = KM_UM
SIGNAL_MAX = 20000.0
SIGNAL_MIN = 1500.0
SIGNAL_CV = 0.04
# The plate whose controls were dispensed badly (its Z' falls well below 0.5).
POOR_PLATE = "SCR-P04"
POOR_PLATE_CV = 0.13
# Fraction of screen compounds with real activity.
ACTIVE_FRACTION = 0.35


def _rate(mechanism, params, s_um, i_nm, vmax):
    """Initial rate (µM/s) under the mechanism; constants in nM, inhibitor in nM."""
    law = MODELS[mechanism]
    values = {"vmax": vmax, "km": KM_UM, **params}
    if mechanism == "noncompetitive":
        values["ki"] = params["kic"]
    return law.rate(s_um, i_nm, *[values[p] for p in law.param_names])


def progress_curves(mechanism, params, s0_um, i_nm, vmax):
    """Product (µM) at READ_TIMES_S for every well, substrate depleted as it is consumed.

    Classical fourth-order Runge–Kutta on dP/dt = v(S0 − P), vectorised over wells.
    """
    n_steps = int(round(READ_TIMES_S[-1] / _DT))
    keep = np.rint(READ_TIMES_S / _DT).astype(int)
    product = np.zeros_like(s0_um)
    out = np.empty((len(s0_um), len(READ_TIMES_S)))
    out[:, 0] = 0.0

    def f(p):
        return _rate(mechanism, params, np.clip(s0_um - p, 0.0, None), i_nm, vmax)

    position = 1
    for step in range(1, n_steps + 1):
        k1 = f(product)
        k2 = f(product + 0.5 * _DT * k1)
        k3 = f(product + 0.5 * _DT * k2)
        k4 = f(product + _DT * k3)
        product = product + _DT / 6.0 * (k1 + 2 * k2 + 2 * k3 + k4)
        if position < len(keep) and step == keep[position]:
            out[:, position] = product
            position += 1
    return out


def _wells(n):
    rows = "ABCDEFGHIJKLMNOP"
    return [f"{rows[k // 24]}{k % 24 + 1}" for k in range(n)]


def make_moa(rng):
    """Kinetic reads and plate map of the mechanism-of-action grid (one plate per compound)."""
    maps, reads = [], []
    for number, (compound, mechanism, params) in enumerate(MOA_COMPOUNDS, start=1):
        plate = f"MOA-P{number:02d}"
        i_levels = MOA_EXPECTED_KI_NM[compound] * INHIBITOR_MULTIPLES
        s, i = np.meshgrid(SUBSTRATE_UM, i_levels, indexing="ij")
        s = np.repeat(s.ravel(), 2)
        i = np.repeat(i.ravel(), 2)
        vmax = VMAX_UM_PER_S * (1.0 + PIPETTING_CV * rng.standard_normal(s.size))
        law = mechanism if mechanism != "none" else "none"
        product = progress_curves(law, params, s, i, vmax)
        # Blanks: no enzyme, one per substrate level.
        s_all = np.concatenate([s, SUBSTRATE_UM])
        i_all = np.concatenate([i, np.zeros(SUBSTRATE_UM.size)])
        roles = ["sample"] * s.size + ["blank"] * SUBSTRATE_UM.size
        product = np.vstack([product, np.zeros((SUBSTRATE_UM.size, READ_TIMES_S.size))])
        wells = _wells(s_all.size)
        signal = (BACKGROUND_UM + DRIFT_UM_PER_S * READ_TIMES_S[None, :] + product
                  + READ_NOISE_UM * rng.standard_normal(product.shape))
        maps.append(pd.DataFrame({
            "plate": plate, "well": wells,
            "compound": [compound if r == "sample" else "" for r in roles],
            "substrate_uM": np.round(s_all, 4), "inhibitor_nM": np.round(i_all, 4),
            "role": roles}))
        reads.append(pd.DataFrame({
            "plate": plate, "well": np.repeat(wells, READ_TIMES_S.size),
            "time_s": np.tile(READ_TIMES_S, len(wells)),
            "product_uM": np.round(signal.ravel(), 4)}))
    return pd.concat(maps, ignore_index=True), pd.concat(reads, ignore_index=True)


def _moa_ic50_nm(compound) -> float:
    """IC50 (nM) at the screen's substrate level implied by a MoA compound's true constants.

    For the linear mechanisms v0/v = (km(1 + I/kic) + S(1 + I/kiu))/(km + S), so the
    half-activity concentration is (km + S)/(km/kic + S/kiu) (Cheng & Prusoff 1973,
    Biochem. Pharmacol. 22:3099, in its general form).
    """
    mechanism, params = next((m, p) for c, m, p in MOA_COMPOUNDS if c == compound)
    if mechanism == "none":
        return np.inf
    kic = params.get("kic", np.inf) if mechanism != "uncompetitive" else np.inf
    kiu = (params.get("kiu", params.get("kic")) if mechanism != "competitive" else np.inf)
    s = SCREEN_SUBSTRATE_UM
    return (KM_UM + s) / (KM_UM / kic + s / kiu)


def make_screen(rng):
    """Dose-response wells of the screen and the invented truth behind each compound."""
    conc = SCREEN_TOP_UM / 3.0 ** np.arange(SCREEN_POINTS)
    moa_ids = [c for c, _, _ in MOA_COMPOUNDS]
    ids = moa_ids + [f"INV-{k:04d}" for k in range(100, 100 + SCREEN_COMPOUNDS - len(moa_ids))]
    frames, truth = [], []
    n_plates = int(np.ceil(len(ids) / COMPOUNDS_PER_PLATE))
    for p in range(n_plates):
        plate = f"SCR-P{p + 1:02d}"
        cv = POOR_PLATE_CV if plate == POOR_PLATE else SIGNAL_CV
        window = SIGNAL_MAX - SIGNAL_MIN
        chunk = ids[p * COMPOUNDS_PER_PLATE:(p + 1) * COMPOUNDS_PER_PLATE]
        rows = []
        for compound in chunk:
            if compound in moa_ids:
                ic50_nm = _moa_ic50_nm(compound)
                active = np.isfinite(ic50_nm)
                pic50 = 9.0 - np.log10(ic50_nm) if active else np.nan
                hill = 1.0 if active else np.nan
            else:
                active = rng.random() < ACTIVE_FRACTION
                pic50 = rng.uniform(5.0, 8.0) if active else np.nan
                hill = rng.normal(1.0, 0.15) if active else np.nan
            activity = (logistic4(np.log10(conc), 100.0, 0.0, np.log10(1e6 * 10 ** -pic50),
                                  hill) if active else np.full(conc.size, 100.0))
            signal = SIGNAL_MIN + window * activity / 100.0
            signal = signal + cv * window * rng.standard_normal(conc.size)
            rows += [{"compound": compound, "role": "sample", "inhibitor_uM": c, "signal": y}
                     for c, y in zip(conc, signal)]
            truth.append({"compound": compound, "active": active, "true_pic50": pic50,
                          "true_hill": hill, "plate": plate})
        for kind, level in (("max", SIGNAL_MAX), ("min", SIGNAL_MIN)):
            values = level + cv * window * rng.standard_normal(CONTROLS_PER_KIND)
            rows += [{"compound": "", "role": kind, "inhibitor_uM": 0.0, "signal": y}
                     for y in values]
        frame = pd.DataFrame(rows)
        frame.insert(0, "plate", plate)
        frame.insert(1, "well", _wells(len(frame)))
        frame["substrate_uM"] = SCREEN_SUBSTRATE_UM
        frame["signal"] = frame["signal"].round(1)
        frame["inhibitor_uM"] = frame["inhibitor_uM"].round(6)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True), pd.DataFrame(truth)


def moa_truth() -> pd.DataFrame:
    rows = []
    for compound, mechanism, params in MOA_COMPOUNDS:
        rows.append({"compound": compound, "mechanism": mechanism,
                     "kic_nM": params.get("kic", np.nan) if mechanism != "uncompetitive"
                     else np.nan,
                     "kiu_nM": params.get("kiu", params.get("kic", np.nan))
                     if mechanism in ("uncompetitive", "noncompetitive", "mixed") else np.nan,
                     "tested_up_to_nM": 4 * MOA_EXPECTED_KI_NM[compound]})
    return pd.DataFrame(rows)


# Invented covalent series: (ID, kinact per s, KI µM), read as progress curves at one
# substrate level; the inhibitor competes with substrate (KI,app = KI(1 + S/Km)).
COVALENT_COMPOUNDS = (("INV-C101", 0.004, 0.5), ("INV-C102", 0.001, 2.0),
                      ("INV-C103", 0.003, 5.0))
COVALENT_SUBSTRATE_UM = 200.0
COVALENT_V0_UM_PER_S = 0.002
COVALENT_TIMES_S = np.arange(0.0, 3601.0, 60.0)
COVALENT_MULTIPLES = np.array([0.0, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0])
COVALENT_NOISE_UM = 0.005


def make_covalent(rng):
    """Progress curves of the invented covalent series and its truth (slow-onset equation)."""
    from inhibkin.time_dependent import progress_curve

    factor = 1.0 + COVALENT_SUBSTRATE_UM / KM_UM
    reads, truth = [], []
    for compound, kinact, ki in COVALENT_COMPOUNDS:
        ki_app = ki * factor
        for j, conc in enumerate(COVALENT_MULTIPLES * ki_app):
            vi = COVALENT_V0_UM_PER_S / (1.0 + conc / ki_app)
            kobs = kinact * conc / (ki_app + conc)
            product = progress_curve(COVALENT_TIMES_S, 0.0, vi, 0.0, kobs)
            reads.append(pd.DataFrame({
                "compound": compound, "well": f"{compound[-3:]}-{j + 1:02d}",
                "time_s": COVALENT_TIMES_S, "inhibitor_uM": round(float(conc), 4),
                "product_uM": np.round(product + rng.normal(0.0, COVALENT_NOISE_UM,
                                                            product.size), 5)}))
        truth.append({"compound": compound, "kinact_per_s": kinact, "ki_uM": ki,
                      "kinact_over_ki_per_uM_per_s": kinact / ki})
    return pd.concat(reads, ignore_index=True), pd.DataFrame(truth)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default="data_demo", help="output directory")
    args = parser.parse_args(argv)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    plate_map, reads = make_moa(rng)
    screen, screen_truth = make_screen(rng)
    plate_map.to_csv(out / "invented_moa_plate_map.csv", index=False)
    reads.to_csv(out / "invented_moa_reads.csv", index=False)
    screen.to_csv(out / "invented_screen_wells.csv", index=False)
    moa_truth().to_csv(out / "invented_moa_truth.csv", index=False)
    screen_truth.to_csv(out / "invented_screen_truth.csv", index=False)
    # Its own generator, so the files above stay as they were.
    covalent, covalent_truth = make_covalent(np.random.default_rng(SEED + 16))
    covalent.to_csv(out / "invented_covalent_reads.csv", index=False)
    covalent_truth.to_csv(out / "invented_covalent_truth.csv", index=False)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
