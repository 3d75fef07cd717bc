"""The linear method's substrate-depletion correction (inhibkin/rates/depletion.py).

References: the integrated Michaelis–Menten equation in closed form (Schnell & Mendoza
1997, J. Theor. Biol. 187:207), evaluated with scipy.special.lambertw; the mass-action
ODE of tests/grid_ode.py (independent of inhibkin's rate laws); numpy's least-squares
polynomial fit for the uncorrected slope.
"""

import numpy as np
from grid_ode import Mechanism, product_curve
from test_integrated_rates import TIMES, mm_product, reads_of

from inhibkin.rates.depletion import depletion_corrected, window_curvature
from inhibkin.rates.initial import initial_rates

SUBSTRATE = (2.0, 3.5, 5.0, 10.0, 20.0, 50.0, 100.0)  # µM
VMAX, KM = 0.002, 10.0  # µM/s, µM (tests/grid_ode.py): 10 % of S = 2 µM in 600 s
# Noise-free reads: the corrected rate is the true v0 up to the third-order term of
# P(t), about (c·f)²/3 ≤ 0.4 % at a conversion f ≤ 10 %.
SECOND_ORDER_RTOL = 4e-3
# The uncorrected straight line is low by about c·f/2 (4 % at S = 0.2 × km).
LOWEST_BIAS_AT_LEAST = 0.03


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
