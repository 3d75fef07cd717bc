"""The one "determined" rule (inhibkin.core.determined), on hand-made arrays.

Every expectation follows from the rule's definition: a constant past the tested range,
at a bound or with an open interval is not determined (DESIGN.md, "not determined within
the tested range"; common practice).
"""

import numpy as np

from inhibkin.core.determined import AT_BOUND, determined_flags
from inhibkin.core.models import MODELS

MIXED = MODELS["mixed"]
S = np.array([[1.0, 2.0, 5.0, 10.0, 20.0]])
I = np.array([[0.0, 0.5, 1.0, 2.0, 4.0]])
MASK = np.ones_like(S, bool)
LOWER = np.log([[1e-3, 1e-4, 1e-4, 1e-4]])
UPPER = np.log([[1e4, 2e5, 4e6, 4e6]])


def _flags(estimate, *, ci_high=None, lower=LOWER, upper=UPPER, s=S, factor=10.0):
    theta = np.log(np.atleast_2d(estimate))
    se = np.full(theta.shape, 0.1)
    low = np.exp(theta) * 0.8
    high = np.exp(theta) * 1.2 if ci_high is None else np.atleast_2d(ci_high)
    return determined_flags(MIXED, theta, lower, upper, low, high, se, s, I, MASK,
                            factor=factor)


def test_constants_inside_the_tested_range_are_determined():
    flags = _flags([10.0, 5.0, 1.0, 3.0])
    assert flags.shape == (1, 5)  # vmax, km, kic, kiu, then alpha
    assert flags.all()


def test_an_inhibition_constant_past_the_range_is_not_determined_and_neither_is_alpha():
    flags = _flags([10.0, 5.0, 1.0, 41.0])[0]  # kiu > 10 x the largest I (4)
    assert flags.tolist() == [True, True, True, False, False]


def test_km_far_above_every_substrate_level_takes_vmax_with_it():
    flags = _flags([10.0, 201.0, 1.0, 3.0])[0]  # km > 10 x the largest S (20)
    assert flags.tolist() == [False, False, True, True, True]


def test_km_with_an_open_upper_limit_takes_vmax_with_it():
    flags = _flags([10.0, 5.0, 1.0, 3.0], ci_high=[12.0, np.inf, 1.2, 3.6])[0]
    assert flags.tolist() == [False, False, True, True, True]


def test_km_far_below_every_substrate_level_is_below_resolution():
    flags = _flags([10.0, 0.09, 1.0, 3.0])[0]  # km x 10 < the smallest S (1)
    assert flags.tolist() == [True, False, True, True, True]


def test_a_constant_at_its_bound_is_not_determined():
    lower = LOWER.copy()
    lower[0, 2] = np.log(1.0) - AT_BOUND / 2
    flags = _flags([10.0, 5.0, 1.0, 3.0], lower=lower)[0]
    assert flags.tolist() == [True, True, False, True, False]


def test_a_batch_gives_the_rows_one_at_a_time():
    rows = [[10.0, 5.0, 1.0, 3.0], [10.0, 201.0, 1.0, 41.0], [10.0, 0.09, 1.0, 3.0]]
    batch = determined_flags(
        MIXED, np.log(rows), np.repeat(LOWER, 3, 0), np.repeat(UPPER, 3, 0),
        np.array(rows) * 0.8, np.array(rows) * 1.2, np.full((3, 4), 0.1),
        np.repeat(S, 3, 0), np.repeat(I, 3, 0), np.repeat(MASK, 3, 0))
    one_by_one = np.vstack([_flags(r) for r in rows])
    np.testing.assert_array_equal(batch, one_by_one)


def test_padding_is_ignored():
    s = np.array([[1.0, 2.0, 5.0, 10.0, 20.0, 1e6]])
    i = np.array([[0.0, 0.5, 1.0, 2.0, 4.0, 1e6]])
    mask = np.array([[True] * 5 + [False]])
    theta = np.log([[10.0, 201.0, 1.0, 41.0]])
    flags = determined_flags(MIXED, theta, LOWER, UPPER, np.exp(theta) * 0.8,
                             np.exp(theta) * 1.2, np.full((1, 4), 0.1), s, i, mask)
    assert flags[0].tolist() == [False, False, True, False, False]
