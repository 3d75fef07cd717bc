"""The linear method's substrate-depletion correction (inhibkin/rates/depletion.py).

References: the integrated Michaelis–Menten equation in closed form (Schnell & Mendoza
1997, J. Theor. Biol. 187:207), evaluated with scipy.special.lambertw; the mass-action
ODE of tests/grid_ode.py (independent of inhibkin's rate laws), whose early rate is the
steady-state law of dead-end inhibition (tests/test_reads_study.py); numpy's
least-squares polynomial fit for the uncorrected slope.
"""

import numpy as np
from grid_ode import BASELINE, EPSILON_PATH, READ_CV, Mechanism, plate, product_curve
from grid_ode import SUBSTRATE as GRID_SUBSTRATE
from test_integrated_rates import TIMES, mm_product, reads_of

from inhibkin.rates.depletion import depletion_corrected, window_curvature
from inhibkin.rates.initial import initial_rates
from inhibkin.rates.signal import BeerLambert

SUBSTRATE = (2.0, 3.5, 5.0, 10.0, 20.0, 50.0, 100.0)  # µM
VMAX, KM = 0.002, 10.0  # µM/s, µM (tests/grid_ode.py): 10 % of S = 2 µM in 600 s
# Noise-free reads: the corrected rate is the true v0 up to the third-order term of
# P(t), about (c·f)²/3 ≤ 0.4 % at a conversion f ≤ 10 %.
SECOND_ORDER_RTOL = 4e-3
# The uncorrected straight line is low by about c·f/2 (4 % at S = 0.2 × km).
LOWEST_BIAS_AT_LEAST = 0.03
# Calibration of the corrected rates' rate_se on mass-action plates (3 % read noise):
# the sd of z = (rate − v0)/rate_se, and its mean, over the low-substrate wells.
Z_SD_RANGE = (0.8, 1.25)
Z_MEAN_AT_MOST = 0.3
CALIBRATION_SEEDS = range(6)
LOW_SUBSTRATE = 5.0  # µM, 0.5 × km: where the correction is largest
# The conversion cap on noisy reads: wells at S = 2 µM, I = 0 (10 % converted near the
# last read) and, for the row's km, fewer wells at the grid's other levels.
CAP_WELLS, ROW_WELLS, CAP_SEED = 400, 20, 5
# z of calibrated, unbiased rates: mean 0 (3 standard errors of a mean of CAP_WELLS) and
# sd 1 (the sd of the wells that kept every read; a cap that selects on noise truncates it).
CAP_Z_MEAN_AT_MOST = 3 / np.sqrt(CAP_WELLS)
CAP_KEPT_Z_SD_AT_LEAST = 0.85


def linear(reads, plate_map, **units):
    return initial_rates(reads, plate_map, **units).table


def plain_slopes(curves, table):
    """numpy's least-squares slope over each well's window (the uncorrected rate)."""
    return np.array([np.polyfit(TIMES[:n], curve[:n], 1)[0]
                     for curve, n in zip(curves, table["n_points"])])


def test_closed_form_reads_give_the_true_initial_rate():
    curves = [0.05 + mm_product(TIMES, s, VMAX, KM) for s in SUBSTRATE]
    reads, plate_map = reads_of(curves, SUBSTRATE)
    # Noise-free reads show any curvature, so the linearity test alone would end the
    # window at 1 % bias; with max_bias 20 % only the 10 % conversion cap ends it, as
    # read noise does on real plates (docs/validation.md: the whole 31 reads at 2 µM).
    table = linear(reads, plate_map, signal_unit="uM", substrate_unit="uM",
                   inhibitor_unit="uM", max_bias=0.2)
    truth = VMAX * np.array(SUBSTRATE) / (KM + np.array(SUBSTRATE))
    plain = plain_slopes(curves, table)
    assert plain[0] / truth[0] - 1 < -LOWEST_BIAS_AT_LEAST  # what the correction removes
    np.testing.assert_allclose(table["rate"], truth, rtol=SECOND_ORDER_RTOL)
    assert (table["rate_se"] > 0).all()


def test_mass_action_reads_of_an_inhibited_row_give_the_ode_initial_rate():
    m = Mechanism(kic=1.0)  # competitive, Ki 1 µM; a row at I = 1 µM (Kapp 20 µM)
    curves = [0.05 + product_curve(m, s, 1.0)(TIMES)[6] for s in SUBSTRATE]
    reads, plate_map = reads_of(curves, SUBSTRATE, inhibitor=1.0)
    early = np.array([np.diff(product_curve(m, s, 1.0)([0.5, 1.0])[6])[0] / 0.5
                      for s in SUBSTRATE])
    table = linear(reads, plate_map, signal_unit="uM", substrate_unit="uM",
                   inhibitor_unit="uM", max_bias=0.2)
    np.testing.assert_allclose(table["rate"], early, rtol=SECOND_ORDER_RTOL)


def test_without_the_substrate_as_signal_the_slope_is_kept():
    curves = [0.05 + mm_product(TIMES, s, VMAX, KM) for s in SUBSTRATE]
    reads, plate_map = reads_of(curves, SUBSTRATE)
    table = linear(reads, plate_map)  # absorbance, no conversion: no scale for S
    np.testing.assert_allclose(table["rate"], plain_slopes(curves, table), rtol=1e-9)


def test_a_row_without_its_own_km_keeps_the_slope():
    curves = [0.05 + mm_product(TIMES, s, VMAX, KM) for s in SUBSTRATE[:2]]
    reads, plate_map = reads_of(curves, SUBSTRATE[:2])  # two levels: no km of the row
    table = linear(reads, plate_map, signal_unit="uM", substrate_unit="uM",
                   inhibitor_unit="uM", max_bias=0.2)
    np.testing.assert_allclose(table["rate"], plain_slopes(curves, table), rtol=1e-9)


def test_the_correction_and_its_standard_error_by_hand():
    # Evenly spaced reads from 0 to T: beta = T (the slope of t² on t).
    t = TIMES[None, :]
    np.testing.assert_allclose(window_curvature(t, np.ones_like(t, bool)), [TIMES[-1]])
    b, se, s0, kapp = np.array([1e-4]), np.array([1e-6]), np.array([1.0]), np.array([3.0])
    beta, log_var = np.array([TIMES[-1]]), np.array([0.04])
    rate, rate_se = depletion_corrected(b, se, beta, s0, kapp, log_var)
    # The smaller root of b = v0 − a·v0², a = c·beta/(2·S0), c = Kapp/(Kapp + S0).
    c = 0.75
    a = c * beta / (2 * s0)
    np.testing.assert_allclose(rate - a * rate**2, b, rtol=1e-12)
    assert rate[0] > b[0]
    # Its standard error by central differences in b and in c (var c = (c(1-c))²·var ln K).
    h = 1e-9

    def v0(b_, c_):
        a_ = c_ * beta / (2 * s0)
        return (1 - np.sqrt(1 - 4 * a_ * b_)) / (2 * a_)
    d_b = (v0(b + h, c) - v0(b - h, c)) / (2 * h)
    d_c = (v0(b, c + 1e-6) - v0(b, c - 1e-6)) / 2e-6
    expected = np.sqrt((d_b * se) ** 2 + d_c**2 * (c * (1 - c)) ** 2 * log_var)
    np.testing.assert_allclose(rate_se, expected, rtol=1e-5)


def test_corrected_standard_errors_are_calibrated_on_mass_action_plates():
    # The reads study's plates (tests/grid_ode.py: competitive Ki 1 µM, 8 × 6 grid in
    # duplicate, 3 % read noise); each well's true v0 is the steady-state law times its
    # pipetting scale. rate_se carries the read noise of the well's window (the row's
    # km, shared by the row, adds under 0.1 % to it here: docs/validation.md).
    m = Mechanism(kic=1.0)
    z = []
    for seed in CALIBRATION_SEEDS:
        reads, plate_map = plate(m, seed, with_scale=True)
        table = initial_rates(reads, plate_map, conversion=BeerLambert(EPSILON_PATH * 1e6),
                              substrate="substrate_uM", inhibitor="inhibitor_uM").table
        s, i = table["substrate_uM"].to_numpy(), table["inhibitor_uM"].to_numpy()
        v0 = m.vmax * s / (m.km * (1 + i / m.kic) + s) * table["enzyme_scale"].to_numpy()
        low = s <= LOW_SUBSTRATE
        z.append(((table["rate"].to_numpy() - v0) / table["rate_se"].to_numpy())[low])
    z = np.concatenate(z)
    assert Z_SD_RANGE[0] <= np.std(z) <= Z_SD_RANGE[1]
    assert abs(np.mean(z)) <= Z_MEAN_AT_MOST


def test_the_conversion_cap_does_not_select_wells_by_their_noise():
    # Mass-action reads (tests/grid_ode.py, 3 % read noise of the absorbance, no
    # inhibitor): at S = 2 µM about 10 % of the substrate is converted by the last read,
    # so noise alone puts a window's estimated conversion on either side of the cap. A
    # cap read off that bare estimate kept the whole curve where the noise ran low and
    # cut it where the noise ran high (kept wells: mean z −0.75, sd 0.68).
    m = Mechanism(kic=1.0)
    substrate = np.repeat(GRID_SUBSTRATE, [CAP_WELLS] + [ROW_WELLS] * (len(GRID_SUBSTRATE) - 1))
    rng = np.random.default_rng(CAP_SEED)
    curves = []
    for s in substrate:
        signal = BASELINE + EPSILON_PATH * product_curve(m, s, 0.0)(TIMES)[6]
        curves.append(signal + READ_CV * signal * rng.standard_normal(len(TIMES)))
    table = initial_rates(*reads_of(curves, substrate), conversion=BeerLambert(EPSILON_PATH * 1e6),
                          substrate_unit="uM", inhibitor_unit="uM").table
    z = ((table["rate"] - m.vmax * substrate / (m.km + substrate)) / table["rate_se"]).to_numpy()
    at_cap = substrate == GRID_SUBSTRATE[0]
    kept = at_cap & (table["n_points"].to_numpy() == len(TIMES))
    assert abs(np.mean(z[at_cap])) <= CAP_Z_MEAN_AT_MOST
    assert np.std(z[kept]) >= CAP_KEPT_Z_SD_AT_LEAST
