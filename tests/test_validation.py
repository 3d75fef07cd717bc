"""The validation study: its Monte Carlo machinery on a known answer, and a small study
whose confidently-wrong rate and interval coverage must stay within the targets."""

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from benchmarks.validation import (
    OUTCOMES,
    TARGET_COVERAGE,
    TARGET_WRONG_MAX,
    Case,
    clopper_pearson,
    coverage_table,
    fit_case,
    fit_cases_engine,
    monte_carlo,
    outcome,
    outcome_table,
    pki_table,
    rate_table,
)

# Known answer: for y = b0 + b1*x + N(0, σ²) the OLS t interval covers each coefficient
# with probability exactly 1 - a (e.g. Seber & Lee 2003, "Linear Regression Analysis",
# §5.1; from memory). Checked on statsmodels' OLS conf_int.
LINEAR_X = np.linspace(0.0, 1.0, 8)
LINEAR_BETA = (1.0, -2.0)
LINEAR_SIGMA = 0.3
N_LINEAR = 2000
INTERVAL_ATOL = 1e-10
# Bands on Monte Carlo rates are exact binomial (Clopper–Pearson) at this level.
BAND = 0.99


@dataclass(frozen=True)
class LinearCase:
    level: float
    n: int = N_LINEAR
    key_names = ("level",)

    @property
    def key(self):
        return (self.level,)


def _ols_case(case, rng):
    y = LINEAR_BETA[0] + LINEAR_BETA[1] * LINEAR_X + LINEAR_SIGMA * rng.standard_normal(
        LINEAR_X.size)
    X = sm.add_constant(LINEAR_X)
    ci = sm.OLS(y, X).fit().conf_int(alpha=1 - case.level)
    # The same interval from the textbook formula, so the machinery's input is checked too.
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ beta
    dof = y.size - 2
    cov = resid @ resid / dof * np.linalg.inv(X.T @ X)
    half = stats.t.ppf(0.5 + case.level / 2, dof) * np.sqrt(np.diag(cov))
    record = {"formula_agrees": bool(np.allclose(ci[:, 0], beta - half, atol=INTERVAL_ATOL)
                                     and np.allclose(ci[:, 1], beta + half,
                                                     atol=INTERVAL_ATOL))}
    for k, truth in enumerate(LINEAR_BETA):
        record[f"b{k}_covered"] = bool(ci[k, 0] <= truth <= ci[k, 1])
    return record


@pytest.fixture(scope="module")
def linear_records():
    return monte_carlo([LinearCase(0.95), LinearCase(0.90)], _ols_case, seed=5, workers=1)


def test_ols_intervals_are_the_textbook_t_intervals(linear_records):
    assert linear_records["formula_agrees"].all()


@pytest.mark.parametrize("coefficient", ["b0", "b1"])
def test_machinery_measures_the_exact_95_percent_coverage(linear_records, coefficient):
    table = rate_table(linear_records, f"{coefficient}_covered", ["level"])
    row = table.loc[0.95]
    low, high = clopper_pearson(row["k"], row["n"], level=BAND)
    assert row["n"] == N_LINEAR
    assert low <= 0.95 <= high, f"coverage {row['rate']:.3f} of a 95 % interval"


def test_machinery_detects_intervals_that_are_too_short(linear_records):
    # 90 % intervals passed off as 95 % ones: the band must exclude 0.95.
    row = rate_table(linear_records, "b1_covered", ["level"]).loc[0.90]
    low, high = clopper_pearson(row["k"], row["n"], level=BAND)
    assert high < 0.95


def test_results_do_not_depend_on_the_number_of_workers():
    cases = [LinearCase(0.95, n=60)]
    one = monte_carlo(cases, _ols_case, seed=9, workers=1, chunk=7)
    two = monte_carlo(cases, _ols_case, seed=9, workers=2, chunk=11)
    pd.testing.assert_frame_equal(one, two)


def test_clopper_pearson_matches_scipy():
    # scipy.stats.binomtest(...).proportion_ci(method="exact") is the Clopper–Pearson
    # interval (SciPy documentation).
    ours = clopper_pearson(37, 50, level=0.95)
    ref = stats.binomtest(37, 50).proportion_ci(confidence_level=0.95, method="exact")
    assert ours[0] == pytest.approx(ref.low) and ours[1] == pytest.approx(ref.high)


@pytest.mark.parametrize(
    "truth, verdict, expected",
    [
        ("noncompetitive", "noncompetitive", "correct"),
        ("noncompetitive", "mixed", "larger"),
        ("none", "uncompetitive", "larger"),
        ("uncompetitive", "none", "missed"),
        ("uncompetitive", "competitive", "wrong"),
        ("mixed", "noncompetitive", "wrong"),
        ("mixed", "ambiguous", "ambiguous"),
    ],
)
def test_outcome_classes(truth, verdict, expected):
    assert outcome(truth, verdict) == expected


# A small version of the study: standard 8 x 6 design, 5 % CV, constant-CV weights,
# log-Wald intervals; every truth, N_SMALL seeded data sets each (240 fits).
N_SMALL = 40
SMALL_TRUTHS = ("none", "competitive", "uncompetitive", "noncompetitive", "mixed_a0.2",
                "mixed_a5")


def _wald_case(case, rng):
    return fit_case(case, rng, intervals="wald")


@pytest.fixture(scope="module")
def small_study():
    cases = [Case(t, "cv5", "standard", N_SMALL) for t in SMALL_TRUTHS]
    return monte_carlo(cases, _wald_case, seed=20261208, workers=1)


def test_small_study_confidently_wrong_rate_within_target(small_study):
    wrong = int((small_study["outcome"] == "wrong").sum())
    n = len(small_study)
    low, _ = clopper_pearson(wrong, n, level=BAND)
    print(f"confidently wrong: {wrong}/{n}")
    assert low <= TARGET_WRONG_MAX


def test_small_study_mixed_called_for_nested_truths_near_the_f_test_level(small_study):
    # Each one-constant model is F-tested against mixed at alpha = 0.05.
    nested = small_study[small_study["truth"].isin(
        ["competitive", "uncompetitive", "noncompetitive"])]
    larger = int((nested["outcome"] == "larger").sum())
    assert stats.binomtest(larger, len(nested), 0.05, alternative="greater").pvalue > 0.01


def test_small_study_interval_coverage_within_target(small_study):
    cov = coverage_table(small_study)
    pooled_k, pooled_n = int(cov["k"].sum()), int(cov["n"].sum())
    low, high = clopper_pearson(pooled_k, pooled_n, level=BAND)
    print(cov[["k", "n", "rate"]])
    target_low, target_high = TARGET_COVERAGE
    # The pooled rate's band must overlap the target range ...
    assert high >= target_low and low <= target_high
    # ... and no single parameter may be far below nominal.
    for key, row in cov.iterrows():
        _, row_high = clopper_pearson(row["k"], row["n"], level=BAND)
        assert row_high >= target_low, f"{key}: coverage {row['rate']:.2f}"


def test_small_study_tables(small_study):
    out = outcome_table(small_study)
    assert list(out.columns) == [*OUTCOMES, "n"]
    assert (out["n"] == N_SMALL).all()
    assert np.allclose(out[list(OUTCOMES)].sum(axis=1), 1.0)
    pki = pki_table(small_study)
    assert {"bias", "sd", "rmse"} <= set(pki.columns)
    assert (pki["n"] > 0).all()


N_AGREEMENT = 12


@pytest.mark.parametrize("truth, design", [("mixed_a5", "standard"),
                                           ("competitive", "low_substrate")])
def test_engine_path_gives_the_lmfit_records(truth, design):
    # The full study runs on the batched engine; it must agree with the lmfit path.
    case = Case(truth, "cv5", design, N_AGREEMENT)
    lmfit_records = monte_carlo([case], _wald_case, seed=3)
    engine_records = monte_carlo([case], fit_cases_engine, seed=3, batched=True)
    assert (lmfit_records["verdict"] == engine_records["verdict"]).all()
    flags = [c for c in lmfit_records if c.endswith("_covered")]
    assert (lmfit_records[flags] == engine_records[flags]).all().all()
