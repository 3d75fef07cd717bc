"""Information criteria and F-tests against statsmodels and scipy; the verdict rules."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.tools import eval_measures

from inhibkin.core.compare import (
    Verdict,
    VerdictOptions,
    akaike_weights,
    decide,
    decide_extended,
    edge_rejected,
    f_test,
    information_criteria,
)
from inhibkin.errors import OptionError

CRITERIA_RTOL = 1e-10


@pytest.fixture
def nested_linear(rng):
    x = np.linspace(0, 10, 40)
    y = 1.0 + 0.5 * x + 0.03 * x**2 + rng.normal(0, 0.4, x.size)
    small = sm.OLS(y, sm.add_constant(x)).fit()
    large = sm.OLS(y, sm.add_constant(np.column_stack([x, x**2]))).fit()
    return small, large


def test_criteria_match_statsmodels_ols(nested_linear):
    # Independent reference: statsmodels OLS results' llf, aic and bic, and
    # statsmodels.tools.eval_measures.aicc.
    for res in nested_linear:
        k = int(res.df_model + 1)
        ours = information_criteria(res.ssr, int(res.nobs), k)
        assert ours["loglik"] == pytest.approx(res.llf, rel=CRITERIA_RTOL)
        assert ours["aic"] == pytest.approx(res.aic, rel=CRITERIA_RTOL)
        assert ours["bic"] == pytest.approx(res.bic, rel=CRITERIA_RTOL)
        assert ours["aicc"] == pytest.approx(eval_measures.aicc(res.llf, res.nobs, k),
                                             rel=CRITERIA_RTOL)


def test_weighted_loglik_matches_statsmodels_wls(rng):
    # statsmodels WLS (weights = 1/σ²) includes ½Σlog(weights); ours takes w = 1/σ.
    x = np.linspace(1, 10, 30)
    sigma = 0.1 * x
    y = 2 + 3 * x + rng.normal(0, sigma)
    res = sm.WLS(y, sm.add_constant(x), weights=1 / sigma**2).fit()
    w = 1 / sigma
    ssr = float(np.sum((w * res.resid) ** 2))
    ours = information_criteria(ssr, 30, 2, float(np.sum(np.log(w))))
    assert ours["loglik"] == pytest.approx(res.llf, rel=CRITERIA_RTOL)
    assert ours["aic"] == pytest.approx(res.aic, rel=CRITERIA_RTOL)


def test_f_test_matches_statsmodels_and_scipy(nested_linear):
    # statsmodels RegressionResults.compare_f_test returns (F, p, df_diff).
    small, large = nested_linear
    f_sm, p_sm, df_sm = large.compare_f_test(small)
    f_value, p_value, df_num, df_den = f_test(small.ssr, small.df_resid, large.ssr,
                                              large.df_resid)
    assert f_value == pytest.approx(f_sm, rel=CRITERIA_RTOL)
    assert p_value == pytest.approx(p_sm, rel=1e-8)
    assert df_num == df_sm == 1
    # scipy.stats.f survival function, the textbook definition of the p-value.
    assert p_value == pytest.approx(stats.f.sf(f_value, 1, large.df_resid), rel=1e-12)


def test_akaike_weights_by_hand():
    # w_i = exp(-Δ_i/2) / Σ exp(-Δ_j/2) (Burnham & Anderson 2002, Model Selection and
    # Multimodel Inference, §2.9).
    w = akaike_weights([10.0, 12.0, np.nan, 20.0])
    expected = np.exp(-0.5 * np.array([0.0, 2.0, 10.0]))
    expected /= expected.sum()
    np.testing.assert_allclose(w[[0, 1, 3]], expected, rtol=1e-12)
    assert w[2] == 0.0


def _tables(aicc, p, free=50.0):
    """Comparison and F-test tables; ``free`` is the free mixed fit's alpha, written in
    the fixed-alpha rows (rule 4 reads on which side of each edge it lies)."""
    comparison = pd.DataFrame({"aicc": aicc, "converged": True})
    rows = [{"reduced": a, "full": b, "p_value": v,
             "free_alpha": free if a.startswith("mixed, alpha") else np.nan}
            for (a, b), v in p.items()]
    return comparison, pd.DataFrame(rows)


def test_decide_follows_the_nesting():
    aicc = {"none": 50.0, "competitive": 0.0, "uncompetitive": 30.0, "noncompetitive": 1.0,
            "mixed": 1.5}
    p = {("none", "mixed"): 1e-9, ("competitive", "mixed"): 0.4,
         ("uncompetitive", "mixed"): 1e-6, ("noncompetitive", "mixed"): 0.2,
         ("mixed, alpha = 0.2", "mixed"): 1e-8, ("mixed, alpha = 5", "mixed"): 1e-3}
    v = decide(*_tables(aicc, p))
    assert v.verdict == "ambiguous" and set(v.candidates) == {"competitive", "noncompetitive"}
    v = decide(*_tables(aicc, p), VerdictOptions(min_delta_aicc=0.5))
    assert v.verdict == "competitive"
    p[("noncompetitive", "mixed")] = 1e-3
    assert decide(*_tables(aicc, p)).verdict == "competitive"
    p[("competitive", "mixed")] = 1e-3
    assert decide(*_tables(aicc, p)).verdict == "mixed"
    p[("none", "mixed")] = 0.3
    assert decide(*_tables(aicc, p)).verdict == "none"


def test_a_one_constant_call_needs_alpha_placed_by_the_data():
    # Rule 4: competitive is called only when mixed with alpha held at 5 is rejected too.
    aicc = {"none": 50.0, "competitive": 0.0, "uncompetitive": 30.0, "noncompetitive": 9.0,
            "mixed": 1.5}
    p = {("none", "mixed"): 1e-9, ("competitive", "mixed"): 0.4,
         ("uncompetitive", "mixed"): 1e-6, ("noncompetitive", "mixed"): 1e-4,
         ("mixed, alpha = 0.2", "mixed"): 1e-8, ("mixed, alpha = 5", "mixed"): 0.3}
    v = decide(*_tables(aicc, p))
    assert v.verdict == "ambiguous" and v.candidates == ("competitive", "mixed")
    assert "alpha = 5" in v.reason
    p[("mixed, alpha = 5", "mixed")] = 0.01
    assert decide(*_tables(aicc, p)).verdict == "competitive"
    # A wider factor moves the edge: alpha held at 20 is a different test.
    assert decide(*_tables(aicc, p), VerdictOptions(alpha_factor=20)).verdict == "ambiguous"


def test_decide_fails_without_the_general_model():
    comparison = pd.DataFrame({"aicc": [1.0, 2.0], "converged": [True, False]},
                              index=["none", "mixed"])
    v = decide(comparison, pd.DataFrame(columns=["reduced", "full", "p_value"]))
    assert v.verdict == "failed" and "mixed" in v.reason


@pytest.mark.parametrize("family_p, classical_p, named", [
    (1e-4, 0.3, True),     # the family's own fit places alpha above 5: named
    (0.3, 1e-4, False),    # only the classical mixed fit does: not enough
])
def test_rule_four_within_a_family_reads_the_familys_own_fixed_alpha_fits(
        family_p, classical_p, named):
    # Rule 4 of an extended verdict: mixed_tb with alpha held at 5 against mixed_tb, not
    # the classical mixed fit (which the data may already have rejected). [E] is given
    # and the constant is within 10 x [E], so the tight-binding family is decided.
    options = VerdictOptions()
    edge = options.alpha_row(options.alpha_factor)
    p = {("none", "mixed_tb"): 1e-20, ("competitive_tb", "mixed_tb"): 0.5,
         ("uncompetitive_tb", "mixed_tb"): 1e-10, ("noncompetitive_tb", "mixed_tb"): 1e-6,
         (options.alpha_row(options.alpha_factor, "mixed_tb"), "mixed_tb"): family_p,
         (edge, "mixed"): classical_p}
    fitted = {"none", "mixed", "competitive_tb", "uncompetitive_tb", "noncompetitive_tb",
              "mixed_tb"}
    aicc = {"competitive_tb": 10.0, "uncompetitive_tb": 40.0, "noncompetitive_tb": 30.0,
            "mixed_tb": 11.0, "mixed": 20.0, "none": 90.0}
    classical = Verdict("mixed", "mixed", ("mixed",), "every one-constant law rejected")
    out = decide_extended(classical, lack_of_fit_p=0.5, pattern="",
                          p_value=lambda a, b: p.get((a, b), np.nan),
                          converged=lambda m: m in fitted, aicc=lambda m: aicc.get(m, np.inf),
                          extended_lack_of_fit_p=lambda m: 0.5, options=options,
                          enzyme=5e-8, tight_constant=2e-8, lowest_inhibitor=2.5e-8,
                          free_alpha=lambda law: 50.0)
    if named:
        assert out.verdict == "competitive, tight binding", out.reason
    else:
        assert out.verdict == "ambiguous" and out.candidates == ("competitive_tb", "mixed_tb")


# Rule 4's edge test one-sided (edge_sides=1): the claim "alpha below 1/5"
# (uncompetitive) is supported by data that put alpha there, at the F-test's p halved.
_UNCOMPETITIVE_AICC = {"none": 50.0, "competitive": 30.0, "uncompetitive": 0.0,
                       "noncompetitive": 9.0, "mixed": 1.5}


def _uncompetitive_p(p_edge):
    return {("none", "mixed"): 1e-9, ("competitive", "mixed"): 1e-6,
            ("uncompetitive", "mixed"): 0.4, ("noncompetitive", "mixed"): 1e-4,
            ("mixed, alpha = 0.2", "mixed"): p_edge, ("mixed, alpha = 5", "mixed"): 1e-8}


@pytest.mark.parametrize("p_edge, free, one_sided, two_sided", [
    (0.08, 0.05, "uncompetitive", "ambiguous"),   # beyond the edge, p/2 = 0.04 < 0.05
    (0.08, 0.5, "ambiguous", "ambiguous"),        # the free alpha on the wrong side
    (0.01, 0.5, "ambiguous", "uncompetitive"),    # significant, but the wrong way
    (0.12, 0.05, "ambiguous", "ambiguous"),       # p/2 = 0.06: not significant
    (0.01, np.nan, "ambiguous", "uncompetitive"),  # no free alpha: nothing rejected
])
def test_the_edge_test_one_sided_on_request(p_edge, free, one_sided, two_sided):
    tables = _tables(_UNCOMPETITIVE_AICC, _uncompetitive_p(p_edge), free=free)
    assert decide(*tables, VerdictOptions(edge_sides=1)).verdict == one_sided
    assert decide(*tables).verdict == two_sided  # the default stays two-sided


def test_one_sided_edge_level_is_the_signed_root_t_test():
    # Under the edge, sign(free - held) * sqrt(F(1, d)) is Student's t with d df, so the
    # one-sided p is stats.t.sf(sqrt(F), d) (scipy), half of stats.f.sf(F, 1, d). The
    # edge is rejected exactly when that one-sided t p-value is below alpha.
    d = 90
    for f_value in (1.5, 2.9, 3.0, 3.9, 4.1, 8.0):
        p_two = float(stats.f.sf(f_value, 1, d))
        p_t = float(stats.t.sf(np.sqrt(f_value), d))
        assert p_two / 2 == pytest.approx(p_t, rel=1e-10)
        one = VerdictOptions(edge_sides=1)
        for free, held, side in ((0.05, 0.2, "below"), (20.0, 5.0, "above"),
                                 (1.0, 0.2, "above"), (1.0, 5.0, "below")):
            assert edge_rejected(p_two, free, held, side, one) == (p_t < 0.05)
            assert edge_rejected(p_two, free, held, side, VerdictOptions()) == (p_two < 0.05)
        # The free alpha on the other side: never rejected in the claimed direction.
        assert not edge_rejected(p_two, 1.0, 0.2, "below", one)
        assert not edge_rejected(p_two, 1.0, 5.0, "above", one)


def test_noncompetitive_needs_alpha_between_the_edges():
    # Both edges, each one-sided towards the inside: alpha above 1/5 and below 5.
    aicc = {"none": 50.0, "competitive": 30.0, "uncompetitive": 30.0, "noncompetitive": 0.0,
            "mixed": 1.5}
    p = {("none", "mixed"): 1e-9, ("competitive", "mixed"): 1e-6,
         ("uncompetitive", "mixed"): 1e-6, ("noncompetitive", "mixed"): 0.4,
         ("mixed, alpha = 0.2", "mixed"): 0.01, ("mixed, alpha = 5", "mixed"): 0.01}
    one = VerdictOptions(edge_sides=1)
    assert decide(*_tables(aicc, p, free=1.0), one).verdict == "noncompetitive"
    for free in (0.1, 10.0):  # outside one edge: that edge's test points the wrong way
        assert decide(*_tables(aicc, p, free=free), one).verdict == "ambiguous"


def test_edge_sides_is_checked():
    with pytest.raises(OptionError, match="edge_sides"):
        VerdictOptions(edge_sides=3)
