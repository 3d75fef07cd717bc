"""The 4PL curve: shape, analytic Jacobian and starting values."""

import numpy as np
import pytest

from inhibkin.core.logistic import PARAM_NAMES, logistic4, logistic4_jacobian, logistic4_start

# Central differences of a smooth function agree with the analytic derivative to about
# the square of the step; 1e-6 relative leaves room for rounding.
JACOBIAN_RTOL = 1e-6
STEP = 1e-6


@pytest.mark.parametrize("hill", [1.3, -0.7])
def test_jacobian_matches_central_differences(hill):
    x = np.linspace(-3, 2, 11)
    theta = np.array([95.0, 4.0, -0.4, hill])
    analytic = logistic4_jacobian(x, *theta)
    assert analytic.shape == (x.size, 4)
    for j, name in enumerate(PARAM_NAMES):
        h = STEP * max(1.0, abs(theta[j]))
        up, down = theta.copy(), theta.copy()
        up[j] += h
        down[j] -= h
        numeric = (logistic4(x, *up) - logistic4(x, *down)) / (2 * h)
        np.testing.assert_allclose(analytic[:, j], numeric, rtol=JACOBIAN_RTOL, atol=1e-7,
                                   err_msg=name)


def test_midpoint_and_plateaus():
    # By definition of the parametrisation: half-way between top and bottom at log_ic50.
    assert logistic4(-1.0, 100.0, 0.0, -1.0, 1.0) == pytest.approx(50.0, rel=1e-15)
    assert logistic4(-9.0, 100.0, 0.0, -1.0, 1.0) == pytest.approx(100.0, rel=1e-7)
    assert logistic4(7.0, 100.0, 0.0, -1.0, 1.0) == pytest.approx(0.0, abs=1e-6)


def test_jacobian_stays_finite_far_from_the_midpoint():
    jac = logistic4_jacobian(np.array([-400.0, 400.0]), 100.0, 0.0, 0.0, 2.0)
    assert np.all(np.isfinite(jac))


def test_starting_values_bracket_the_midpoint():
    x = np.log10(np.repeat(np.logspace(-3, 1, 9), 2))
    y = logistic4(x, 100.0, 5.0, -1.2, 1.0)
    start = logistic4_start(x, y)
    assert start["top"] > start["bottom"]
    assert start["hill"] == 1.0
    assert abs(start["log_ic50"] - (-1.2)) < 0.5
    rising = logistic4_start(x, logistic4(x, 5.0, 100.0, -1.2, 1.0))
    assert rising["hill"] == -1.0
