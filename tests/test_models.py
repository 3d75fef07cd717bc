"""Rate laws: analytic Jacobians, nesting limits, the defining property of km."""

import numpy as np
import pytest

from inhibkin.core.models import INHIBITION_MODELS, MODEL_NAMES, MODELS, get_model, nested_pairs

JACOBIAN_RTOL = 1e-6
FINITE_DIFFERENCE_STEP = 1e-6
LIMIT_RTOL = 1e-9
TRUE = {"vmax": 7.0, "km": 3.0, "kic": 0.4, "kiu": 1.7, "ki": 0.9}


def _grid():
    s, i = np.meshgrid(np.geomspace(0.3, 30, 7), np.linspace(0, 2, 5))
    return s.ravel(), i.ravel()


@pytest.mark.parametrize("name", MODEL_NAMES)
def test_analytic_jacobian_matches_central_differences(name):
    law = MODELS[name]
    s, i = _grid()
    p = np.array([TRUE[n] for n in law.param_names])
    analytic = law.jacobian(s, i, *p)
    numeric = np.empty_like(analytic)
    for k in range(len(p)):
        h = FINITE_DIFFERENCE_STEP * p[k]
        up, down = p.copy(), p.copy()
        up[k] += h
        down[k] -= h
        numeric[:, k] = (law.rate(s, i, *up) - law.rate(s, i, *down)) / (2 * h)
    assert analytic.shape == (s.size, law.n_params)
    np.testing.assert_allclose(analytic, numeric, rtol=JACOBIAN_RTOL, atol=1e-10)


def test_nested_models_are_limits_of_mixed():
    s, i = _grid()
    mixed = MODELS["mixed"].rate
    huge = 1e15
    v = TRUE["vmax"], TRUE["km"]
    np.testing.assert_allclose(MODELS["competitive"].rate(s, i, *v, 0.4),
                               mixed(s, i, *v, 0.4, huge), rtol=LIMIT_RTOL)
    np.testing.assert_allclose(MODELS["uncompetitive"].rate(s, i, *v, 1.7),
                               mixed(s, i, *v, huge, 1.7), rtol=LIMIT_RTOL)
    np.testing.assert_allclose(MODELS["noncompetitive"].rate(s, i, *v, 0.9),
                               mixed(s, i, *v, 0.9, 0.9), rtol=LIMIT_RTOL)
    np.testing.assert_allclose(MODELS["none"].rate(s, i, *v), mixed(s, i, *v, huge, huge),
                               rtol=LIMIT_RTOL)


@pytest.mark.parametrize("name", MODEL_NAMES)
def test_half_vmax_at_km_without_inhibitor(name):
    # The defining property of km: v = vmax/2 at S = km when I = 0 (common practice).
    law = MODELS[name]
    p = [TRUE[n] for n in law.param_names]
    assert law.rate(np.array([TRUE["km"]]), np.array([0.0]), *p)[0] == pytest.approx(
        TRUE["vmax"] / 2, rel=1e-12)


def test_nesting_declared():
    pairs = set(nested_pairs())
    for name in INHIBITION_MODELS:
        assert ("none", name) in pairs
    for name in ("competitive", "uncompetitive", "noncompetitive"):
        assert (name, "mixed") in pairs
    assert ("competitive", "uncompetitive") not in pairs
    assert len(pairs) == 7


def test_unknown_model_names_the_known_ones():
    with pytest.raises(KeyError, match="known: none, competitive"):
        get_model("allosteric")
