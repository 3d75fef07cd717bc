"""initial_rates(method="integrated"): each well's v0 from its whole curve.

References: the integrated Michaelis–Menten equation in closed form (Schnell & Mendoza
1997, J. Theor. Biol. 187:207), evaluated here with scipy.special.lambertw; the
mass-action ODE of tests/grid_ode.py (independent of inhibkin's rate laws).
"""

import numpy as np
import pandas as pd
from grid_ode import Mechanism, product_curve
from scipy.special import lambertw

from inhibkin.core.integrated_rate_law import closed_form_product
from inhibkin.rates.initial import initial_rates

TIMES = np.arange(31) * 20.0  # s, the reads study's schedule
SUBSTRATE = (2.0, 5.0, 10.0, 20.0, 50.0)  # µM
# Noise-free closed-form reads: the integrated rate must be the true v0 to this.
CLOSED_FORM_RTOL = 1e-3
# Noise-free mass-action reads: the ODE's slope just after the pre-steady state, against
# the integrated rate; the quasi-steady state holds to about E0/(km + S) ~ 1e-6 and the
# early slope is taken over 0.5–1 s (depletion there < 0.05 %).
MASS_ACTION_RTOL = 2e-3
# Calibration of rate_se on noisy reads: share of |z| ≤ 1.96 and the sd of z.
COVERED_AT_LEAST = 0.90
Z_SD_RANGE = (0.8, 1.25)


def mm_product(t, s0, vmax, km):
    """P(t) = S0 − km·W[(S0/km)·exp((S0 − vmax·t)/km)] (Schnell & Mendoza 1997)."""
    return s0 - km * np.real(lambertw(s0 / km * np.exp((s0 - vmax * t) / km)))


def reads_of(curves, substrate, inhibitor=0.0):
    wells = [f"W{k:03d}" for k in range(len(curves))]
    reads = pd.DataFrame({"plate": 1, "well": np.repeat(wells, len(TIMES)),
                          "time": np.tile(TIMES, len(curves)),
                          "signal": np.concatenate(curves)})
    plate_map = pd.DataFrame({"plate": 1, "well": wells, "compound": "X",
                              "substrate": np.asarray(substrate, float),
                              "inhibitor": inhibitor})
    return reads, plate_map


def rates(reads, plate_map, method):
    return initial_rates(reads, plate_map, method=method, signal_unit="uM",
                         substrate_unit="uM", inhibitor_unit="uM").table


def test_wright_omega_form_is_the_lambert_w_form():
    # The package's closed form (Wright omega) against scipy's Lambert W.
    t = TIMES[:, None]
    s0 = np.array(SUBSTRATE)[None, :]
    np.testing.assert_allclose(closed_form_product(t, s0, 0.01, 10.0),
                               mm_product(t, s0, 0.01, 10.0), rtol=1e-10, atol=1e-12)


def test_closed_form_reads_give_the_true_initial_rate_past_ten_percent_conversion():
    vmax, km = 0.01, 10.0  # µM/s, µM: up to ~45 % of S = 2 µM converted in 600 s
    curves = [0.05 + mm_product(TIMES, s, vmax, km) for s in SUBSTRATE]
    reads, plate_map = reads_of(curves, SUBSTRATE)
    truth = vmax * np.array(SUBSTRATE) / (km + np.array(SUBSTRATE))
    integrated = rates(reads, plate_map, "integrated")
    linear = rates(reads, plate_map, "linear")
    np.testing.assert_allclose(integrated["rate"], truth, rtol=CLOSED_FORM_RTOL)
    assert (integrated["n_points"] == len(TIMES)).all()  # every read, not a window
    assert integrated["conversion"].iloc[0] > 0.3
    assert not integrated["flags"].str.contains("conversion|nonlinear|linear_rate").any()
    # The linear method on the same wells is capped at 10 % conversion: fewer reads, and
    # its slope is corrected for depletion to second order only (tests/test_depletion.py).
    assert linear["n_points"].iloc[0] < len(TIMES)
    np.testing.assert_allclose(linear["rate"], truth, rtol=10 * CLOSED_FORM_RTOL)


def test_mass_action_reads_give_the_ode_initial_rate():
    m = Mechanism(kic=1.0)  # competitive, Ki 1 µM; a row at I = 1 µM
    curves = [0.05 + product_curve(m, s, 1.0)(TIMES)[6] for s in SUBSTRATE]
    reads, plate_map = reads_of(curves, SUBSTRATE, inhibitor=1.0)
    early = np.array([np.diff(product_curve(m, s, 1.0)([0.5, 1.0])[6])[0] / 0.5
                      for s in SUBSTRATE])
    table = rates(reads, plate_map, "integrated")
    np.testing.assert_allclose(table["rate"], early, rtol=MASS_ACTION_RTOL)


def test_standard_errors_are_calibrated_on_noisy_reads():
    vmax, km, noise = 0.01, 10.0, 0.002  # read noise sd 0.002 µM
    rng = np.random.default_rng(7)
    z = []
    for _ in range(40):
        curves = [mm_product(TIMES, s, vmax, km) + noise * rng.standard_normal(len(TIMES))
                  for s in SUBSTRATE for _ in range(2)]
        s = np.repeat(SUBSTRATE, 2)
        table = rates(*reads_of(curves, s), "integrated")
        z.append(((table["rate"] - vmax * s / (km + s)) / table["rate_se"]).to_numpy())
    z = np.concatenate(z)
    assert np.mean(np.abs(z) <= 1.96) >= COVERED_AT_LEAST
    assert Z_SD_RANGE[0] <= np.std(z) <= Z_SD_RANGE[1]


def test_a_row_with_too_few_levels_keeps_the_linear_rate_and_says_so():
    vmax, km = 0.01, 10.0
    substrate = (2.0, 50.0)  # two levels: no Kapp of its own
    curves = [mm_product(TIMES, s, vmax, km) for s in substrate]
    reads, plate_map = reads_of(curves, substrate)
    integrated = rates(reads, plate_map, "integrated")
    linear = rates(reads, plate_map, "linear")
    assert integrated["flags"].str.contains("linear_rate").all()
    np.testing.assert_array_equal(integrated["rate"], linear["rate"])
    assert (integrated["method"] == "integrated").all()
