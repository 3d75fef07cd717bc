"""Single-model fits: certified and published references, scipy agreement, intervals."""

import numpy as np
import pytest
from reference_values import MISRA1D, PUROMYCIN_TREATED
from scipy import optimize, stats

import inhibkin as ik
from inhibkin.core.models import MODEL_NAMES, MODELS
from inhibkin.mechanism.one_model import _make_problem, _solve, fit_model

# NIST's own yardstick: at least 6 significant digits in the estimates, 4 in the errors.
ESTIMATE_RTOL = 1e-6
STD_ERROR_RTOL = 1e-4
RSS_RTOL = 1e-8
SCIPY_AGREEMENT_RTOL = 1e-6
TRUE = {"vmax": 10.0, "km": 2.0, "kic": 0.5, "kiu": 1.5, "ki": 0.8}


def _misra_fit(data, start=None):
    s, v = data["x"].to_numpy(), data["y"].to_numpy()
    starts = None if start is None else [{"vmax": start["b1"], "km": 1.0 / start["b2"]}]
    return fit_model("none", s, np.zeros_like(s), v, starts=starts)


@pytest.mark.parametrize("start", [None, *MISRA1D["starts"]], ids=["automatic", "nist1", "nist2"])
def test_misra1d_certified_values(misra1d, start):
    # NIST StRD nonlinear regression dataset Misra1d (Misra 1978), certified values;
    # the model b1*b2*x/(1+b2*x) is Michaelis–Menten with vmax = b1, km = 1/b2.
    fit = _misra_fit(misra1d, start)
    p = fit.params
    assert fit.converged
    assert p.loc["vmax", "estimate"] == pytest.approx(MISRA1D["b1"], rel=ESTIMATE_RTOL)
    assert 1.0 / p.loc["km", "estimate"] == pytest.approx(MISRA1D["b2"], rel=ESTIMATE_RTOL)
    assert p.loc["vmax", "se"] == pytest.approx(MISRA1D["b1_sd"], rel=STD_ERROR_RTOL)
    # Delta method: se(km) = se(b2)/b2**2 (the reference README derives 32.1053287).
    km_se = MISRA1D["b2_sd"] / MISRA1D["b2"] ** 2
    assert p.loc["km", "se"] == pytest.approx(km_se, rel=STD_ERROR_RTOL)
    assert fit.ssr == pytest.approx(MISRA1D["rss"], rel=RSS_RTOL)
    assert np.sqrt(fit.ssr / fit.dof) == pytest.approx(MISRA1D["residual_sd"], rel=RSS_RTOL)


def test_puromycin_published_fit(puromycin):
    # Puromycin, treated cells (Treloar 1974), least-squares fit published in
    # Bates & Watts (1988), Nonlinear Regression Analysis and Its Applications:
    # Vm = 212.68 (SE 6.947), K = 0.06412 (SE 0.008281), residual SE 10.93 on 10 df.
    fit = ik.fit_michaelis_menten(puromycin["conc"], puromycin["rate"])
    p = fit.params
    assert f"{p.loc['vmax', 'estimate']:.5g}" == "212.68"
    assert f"{p.loc['km', 'estimate']:.4g}" == "0.06412"
    assert f"{p.loc['vmax', 'se']:.4g}" == "6.947"
    assert f"{p.loc['km', 'se']:.4g}" == "0.008281"
    assert f"{np.sqrt(fit.ssr / fit.dof):.4g}" == "10.93"
    assert fit.dof == PUROMYCIN_TREATED["df"]
    # Full precision as printed by R's nls on the same data.
    assert p.loc["vmax", "estimate"] == pytest.approx(PUROMYCIN_TREATED["vmax"], rel=1e-6)
    assert p.loc["km", "estimate"] == pytest.approx(PUROMYCIN_TREATED["km"], rel=1e-6)
    assert fit.ssr == pytest.approx(PUROMYCIN_TREATED["rss"], rel=1e-6)


@pytest.mark.parametrize("weighted", [False, True], ids=["uniform", "weighted"])
@pytest.mark.parametrize("name", MODEL_NAMES)
def test_agrees_with_scipy_curve_fit(name, weighted):
    # Independent reference: scipy.optimize.curve_fit (MINPACK LM) on the same data and
    # weights, started from the truth, with tolerances tighter than ours.
    law = MODELS[name]
    data = ik.simulate_grid("mixed", vmax=10, km=2, kic=0.5, kiu=1.5, cv=0.05, seed=11)
    s, i, v = (data[c].to_numpy() for c in ("substrate", "inhibitor", "rate"))
    w = 1.0 / (0.05 * data["true_rate"].to_numpy()) if weighted else None
    fit = fit_model(name, s, i, v, w)
    p0 = [TRUE[n] for n in law.param_names]

    def f(x, *p):
        return law.rate(x[0], x[1], *p)

    popt, pcov = optimize.curve_fit(f, np.vstack([s, i]), v, p0=p0,
                                    sigma=None if w is None else 1.0 / w, method="lm",
                                    ftol=1e-15, xtol=1e-15, maxfev=20000)
    est = fit.params.loc[list(law.param_names), "estimate"].to_numpy()
    np.testing.assert_allclose(est, popt, rtol=SCIPY_AGREEMENT_RTOL)
    se = fit.params.loc[list(law.param_names), "se"].to_numpy()
    np.testing.assert_allclose(se, np.sqrt(np.diag(pcov)), rtol=1e-4)


def test_fitted_curve_passes_half_vmax_at_km():
    # The defining property of km (common practice): v(S = km) = vmax/2 on the fitted curve.
    data = ik.simulate_grid("none", vmax=10, km=2, cv=0.05, seed=3)
    fit = ik.fit_michaelis_menten(data["substrate"], data["rate"])
    vmax, km = fit.best_values["vmax"], fit.best_values["km"]
    assert MODELS["none"].rate(km, 0.0, vmax, km) == pytest.approx(vmax / 2, rel=1e-12)


def test_profile_limits_lie_on_the_likelihood_threshold():
    # Self-consistency of the profile interval: refitting with the parameter fixed at
    # either limit gives SSR = SSR_min (1 + F(0.95; 1, n-k)/(n-k)) (Bates & Watts 1988, §6.1).
    data = ik.simulate_grid("competitive", vmax=10, km=2, kic=0.5, cv=0.05, seed=5)
    s, i, v = (data[c].to_numpy() for c in ("substrate", "inhibitor", "rate"))
    fit = fit_model("competitive", s, i, v)
    problem = _make_problem("competitive", s, i, v, np.ones_like(v))
    target = fit.ssr * (1 + stats.f.ppf(0.95, 1, fit.dof) / fit.dof)
    theta_hat = np.log(fit.params["estimate"].to_numpy())
    for j, name in enumerate(MODELS["competitive"].param_names):
        for limit in fit.params.loc[name, ["ci_low", "ci_high"]]:
            A = np.delete(np.eye(3), j, axis=1)
            b = np.zeros(3)
            b[j] = np.log(limit)
            _, ssr, _, ok, _ = _solve(problem, theta_hat, A, b)
            assert ok
            assert ssr == pytest.approx(target, rel=1e-5)


def test_profile_interval_is_asymmetric_for_a_weak_constant():
    # kic at 3x the top inhibitor concentration: the likelihood is skewed toward large
    # kic, so the upper arm of the interval is longer than the lower one.
    s = 2.0 * np.geomspace(0.2, 10, 8)
    i = np.linspace(0, 1.5, 6)
    data = ik.simulate_grid("competitive", vmax=10, km=2, kic=4.5, s=s, i=i, cv=0.05, seed=2)
    fit = fit_model("competitive", *(data[c].to_numpy() for c in ("substrate", "inhibitor",
                                                                   "rate")))
    row = fit.params.loc["kic"]
    assert row["ci_high"] - row["estimate"] > 1.2 * (row["estimate"] - row["ci_low"])


def test_constant_past_tested_range_is_a_bound_not_a_number():
    data = ik.simulate_grid("competitive", vmax=10, km=2, kic=500.0, s=2 * np.geomspace(0.2, 10, 8),
                            i=np.linspace(0, 2, 6), cv=0.05, seed=4)
    fit = fit_model("competitive", *(data[c].to_numpy() for c in ("substrate", "inhibitor",
                                                                   "rate")))
    row = fit.params.loc["kic"]
    assert not row["determined"]
    assert "not determined" in fit.summary() or ">" in fit.summary()
    from inhibkin.display.text import format_estimate
    text = format_estimate(row)
    assert text.startswith(">") or text == "not determined"


def test_wald_intervals_are_symmetric_in_log():
    data = ik.simulate_grid("competitive", vmax=10, km=2, kic=0.5, cv=0.05, seed=6)
    fit = fit_model("competitive", *(data[c].to_numpy() for c in ("substrate", "inhibitor",
                                                                   "rate")), intervals="wald")
    p = fit.params
    np.testing.assert_allclose(np.log(p["ci_high"]) - np.log(p["estimate"]),
                               np.log(p["estimate"]) - np.log(p["ci_low"]), rtol=1e-10)
    t = stats.t.ppf(0.975, fit.dof)
    np.testing.assert_allclose(np.log(p["ci_high"] / p["estimate"]), t * p["se"] / p["estimate"],
                               rtol=1e-10)


def test_michaelis_menten_bad_input_names_the_value():
    with pytest.raises(ik.DataError, match=r"column 'v', row 2 \(value 'abc'\): not a number"):
        ik.fit_michaelis_menten([1, 2, 3, 4], [1, 2, "abc", 4])
    with pytest.raises(ik.DataError, match="differ in length"):
        ik.fit_michaelis_menten([1, 2, 3], [1, 2])
    with pytest.raises(ik.DataError, match="negative value"):
        ik.fit_michaelis_menten([1, 2, -3, 4], [1, 2, 3, 4])
    with pytest.raises(ik.DataError, match=r"column 'v' \(value -0.25\): the rates carry no "
                                           "signal"):
        ik.fit_michaelis_menten([1, 2, 3, 4], [-1, 0.5, -0.5, 0])
    # One rate read below zero is data (issue 12, item 4).
    fit = ik.fit_michaelis_menten([0.1, 1, 2, 5, 10, 20], [-0.05, 3.3, 5.0, 7.1, 8.3, 9.1])
    assert fit.converged


def test_starts_follow_the_scale_of_small_and_negative_rates():
    """Rates of order 1e-3 with negative wells (issue 12, item 4): the fallback start of
    vmax is on the rates' scale, not 1.1, and a compound starts at the same place alone and
    inside a batch (the engine's starts are the same rule over (B, n) arrays)."""
    from inhibkin.core.starts import michaelis_menten_start, starting_values
    from inhibkin.engine.starts import mechanism_starts

    s = np.array([1.0, 2.0, 4.0, 8.0])
    vmax, km = michaelis_menten_start(s, [0.004, -0.001, 0.003, 0.002])
    assert vmax == pytest.approx(1.1 * 0.004) and km > 0
    vmax, km = michaelis_menten_start(s, [-0.004, -0.001, -0.003, -0.002])
    assert vmax == pytest.approx(1.1 * 0.004) and km > 0
    i = np.array([0.0, 0.0, 1.0, 1.0])
    v = np.array([0.004, -0.001, 0.003, -0.002])
    # A neighbour on another scale must not move this compound's start.
    batch = [np.stack([x, y]) for x, y in ((s, 3 * s), (i, 2 * i), (v, 50 * np.abs(v)))]
    for model in ("none", "competitive", "mixed"):
        expected = starting_values(model, s, i, v)
        got = mechanism_starts(model, *batch, np.ones((2, 4), bool))[0]
        np.testing.assert_allclose(got, list(expected.values()), rtol=1e-12)
        assert all(np.isfinite(x) and x > 0 for x in expected.values())
