"""Lack of fit and the substrate-inhibited laws: the pure-error F-test against
statsmodels, noise-free recovery by both solvers, and a mass-action ODE reference."""

from functools import cache

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import solve_ivp

import inhibkin as ik
from inhibkin.core.lack_of_fit import (
    ALONG_S,
    FALLS_AT_HIGH_S,
    LEVELS_OFF,
    pure_error_test,
    residual_pattern,
    runs_test,
)
from inhibkin.core.models import EXTENDED_MODELS, MODELS
from inhibkin.engine import fit_mechanisms_batch

# Both solvers settle noise-free fits to about 1e-10 relative (the check is 1e-6).
RECOVERY_RTOL = 1e-6
# The F statistic is the same arithmetic as statsmodels' to rounding.
F_RTOL = 1e-10

S_LEVELS = np.array([10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0, 2000.0])  # uM
I_LEVELS = np.array([0.0, 1.0, 2.0, 5.0, 10.0, 20.0])  # uM
TRUTH = {"vmax": 10.0, "km": 100.0, "kic": 3.0, "kiu": 8.0, "ki": 3.0, "ksi": 300.0,
         "enzyme": 4.0, "beta": 0.3}


def _grid(replicates=2):
    s, i = np.meshgrid(S_LEVELS, I_LEVELS)
    return np.repeat(s.ravel(), replicates), np.repeat(i.ravel(), replicates)


def test_pure_error_f_matches_statsmodels_anova_of_line_against_cell_means():
    # Draper & Smith, Applied Regression Analysis, section 2.1: the lack-of-fit F is the
    # F of the straight line against the cell-means model; statsmodels' anova_lm
    # computes that comparison independently.
    smf = pytest.importorskip("statsmodels.formula.api")
    from statsmodels.stats.anova import anova_lm

    rng = np.random.default_rng(5)
    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0, 6.0], 3)
    y = 2.0 + 0.5 * x + 0.08 * x**2 + rng.normal(0, 0.2, x.size)
    frame = pd.DataFrame({"x": x, "y": y})
    line = smf.ols("y ~ x", frame).fit()
    cells = smf.ols("y ~ C(x)", frame).fit()
    table = anova_lm(line, cells)
    f_ref, p_ref = table["F"].iloc[1], table["Pr(>F)"].iloc[1]
    f_value, p_value, df_lack, df_pure = pure_error_test(
        line.resid.to_numpy()[None], x[None], np.zeros((1, x.size)),
        np.ones((1, x.size), bool), 2)
    np.testing.assert_allclose(f_value[0], f_ref, rtol=F_RTOL)
    np.testing.assert_allclose(p_value[0], p_ref, rtol=F_RTOL)
    assert (df_lack[0], df_pure[0]) == (4, 12)


def test_runs_test_sees_a_systematic_pattern_and_not_alternation():
    # Wald & Wolfowitz 1940: 2 runs in 16 signs are far fewer than chance (~9).
    s = np.tile(np.arange(1.0, 17.0), 1)[None]
    i = np.zeros_like(s)
    mask = np.ones(s.shape, bool)
    pattern = np.where(s < 9, 1.0, -1.0)
    alternating = np.where(s % 2 == 0, 1.0, -1.0)
    assert runs_test(pattern, s, i, mask)[1][0] < 1e-3
    assert runs_test(alternating, s, i, mask)[1][0] > 0.5


@pytest.mark.parametrize("law, truth, pattern", [
    # Partial noncompetitive: v = vmax*S/(km + S)*(1 + beta*I/ki)/(1 + I/ki) levels off at
    # beta*vmax*S/(km + S); substrate inhibition: v falls past S = sqrt(km*ksi) (the
    # textbook laws; common practice).
    ("noncompetitive_partial", {"ki": 3.0, "beta": 0.3}, LEVELS_OFF),
    ("competitive_si", {"kic": 3.0, "ksi": 300.0}, FALLS_AT_HIGH_S),
])
def test_a_classical_fit_leaves_the_pattern_of_the_law_it_misses(law, truth, pattern):
    s, i = _grid(replicates=2)
    model = MODELS[law]
    v = model.rate(s, i, *({"vmax": 10.0, "km": 100.0, **truth}[p] for p in model.param_names))
    fit = ik.fit_mechanisms(pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v}),
                            models=("none", "competitive", "uncompetitive", "noncompetitive",
                                    "mixed"), weighting="uniform", intervals="wald",
                            lack_of_fit_alpha=0.0)
    residuals = fit.models[fit.best].residuals
    found = residual_pattern(residuals[None], s[None], np.ones((1, s.size), bool), i[None])[0]
    assert found == pattern
    # Without the inhibitor levels only the substrate pattern can be named.
    plain = residual_pattern(residuals[None], s[None], np.ones((1, s.size), bool))[0]
    assert plain == (pattern if pattern == FALLS_AT_HIGH_S else ALONG_S)


@pytest.mark.parametrize("name", EXTENDED_MODELS)
def test_noise_free_extended_laws_recovered_by_both_solvers(name):
    law = MODELS[name]
    s, i = _grid(replicates=1)
    v = law.rate(s, i, *(TRUTH[p] for p in law.param_names))
    data = pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v})
    lmfit_fit = ik.fit_mechanisms(data, models=(law.extends, name), weighting="uniform",
                                  intervals="wald", lack_of_fit_alpha=0.0)
    engine_fit = fit_mechanisms_batch([data], models=(law.extends, name),
                                      weighting="uniform", lack_of_fit_alpha=0.0)[0]
    for fit in (lmfit_fit, engine_fit):
        estimate = fit.models[name].params["estimate"]
        np.testing.assert_allclose(estimate[list(law.param_names)],
                                   [TRUTH[p] for p in law.param_names], rtol=RECOVERY_RTOL)


# --- mass-action reference: E + S <-> ES -> E + P, E + I <-> EI, ES + S <-> SES (dead end)
# Rate constants (uM, s): km = (k_off + kcat)/k_on = 100, Kic = 30/10 = 3, Ksi = 3000/10 = 300.
K_ON, K_OFF, KCAT = 10.0, 999.0, 1.0
KI_ON, KI_OFF = 10.0, 30.0
KS_ON, KS_OFF = 10.0, 3000.0
ENZYME = 1e-3  # uM, far below every constant: no depletion of inhibitor
READ_TIMES = np.linspace(0.0, 20.0, 11)  # s; < 0.2 % of the lowest S converted
READ_NOISE = 0.03  # relative noise on each well's rate


@cache
def _ode_rate(s0, i0):
    """Initial rate of one well from the mass-action ODE (Radau, tight tolerances)."""
    def rhs(_, y):
        e, s, i, es, ei, ses, p = y
        bind, cat = K_ON * e * s - K_OFF * es, KCAT * es
        inhibit = KI_ON * e * i - KI_OFF * ei
        dead = KS_ON * es * s - KS_OFF * ses
        return [-bind + cat - inhibit, -bind - dead, -inhibit, bind - cat - dead, inhibit,
                dead, cat]

    y0 = [ENZYME, s0, i0, 0.0, 0.0, 0.0, 0.0]
    sol = solve_ivp(rhs, (0.0, READ_TIMES[-1]), y0, method="Radau", t_eval=READ_TIMES,
                    rtol=1e-10, atol=1e-15)
    return float(np.polyfit(READ_TIMES[1:], sol.y[6][1:], 1)[0])


def _ode_plate(seed):
    s, i = _grid(replicates=2)
    rng = np.random.default_rng(seed)
    v = np.array([_ode_rate(a, b) for a, b in zip(s, i)]) * 1e3  # nM/s
    v = v * (1 + READ_NOISE * rng.standard_normal(v.size))
    return pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v})


@pytest.mark.parametrize("seed", [1, 2])
def test_substrate_inhibited_ode_plates_are_named_right(seed):
    # Before rule 5 these plates were called "competitive" with km 16-18 (true 100).
    data = _ode_plate(seed)
    fit = ik.fit_mechanisms(data, intervals="wald")
    assert fit.verdict == "competitive with substrate inhibition", fit.reason
    params = fit.best_fit.params["estimate"]
    # Within 20 % of the chemistry's constants (3 % noise on 96 wells).
    np.testing.assert_allclose(params[["km", "kic", "ksi"]], [100.0, 3.0, 300.0], rtol=0.2)
    engine = fit_mechanisms_batch([data])[0]
    assert engine.verdict == fit.verdict


def test_an_unfit_pattern_is_inadequate_and_gives_no_constant():
    # Rates that rise again at high S fit no law here: the verdict is inadequate.
    s, i = _grid(replicates=2)
    law = MODELS["competitive"]
    v = law.rate(s, i, 10.0, 100.0, 3.0) * (1 + 0.6 * (s >= 1000)) \
        * (1 + 0.01 * np.random.default_rng(3).standard_normal(s.size))
    fit = ik.fit_mechanisms(pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v}),
                            intervals="wald")
    assert fit.verdict == "inadequate", fit.reason
    assert fit.constants().empty


def test_an_inadequate_compound_is_ranked_without_a_ki():
    # The campaign never presents a Ki for a grid that no law fits.
    s, i = _grid(replicates=2)
    v = MODELS["competitive"].rate(s, i, 10.0, 100.0, 3.0) * (1 + 0.6 * (s >= 1000)) \
        * (1 + 0.01 * np.random.default_rng(3).standard_normal(s.size))
    grid = pd.DataFrame({"compound": "C1", "substrate_uM": s, "inhibitor_uM": i, "rate": v})
    row = ik.fit_campaign(grid, intervals="wald").ranking.iloc[0]
    assert row["status"] == "inadequate" and row["verdict"] == "inadequate"
    assert not np.isfinite(row["ki_M"])
