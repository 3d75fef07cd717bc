"""plan_grid: the criterion, the search, the simulated comparison, the result, bad input."""

import dataclasses
import itertools

import numpy as np
import pytest
from scipy import stats

from inhibkin.core.models import MODELS
from inhibkin.design import (
    WINDOW_FACTOR,
    GridPlan,
    call_outcome,
    design_criterion,
    naive_levels,
    plan_grid,
)
from inhibkin.errors import DataError

CRITERION_RTOL = 1e-6
FINITE_DIFFERENCE_STEP = 1e-6
# A dilution-series set-up where evenly spaced levels waste most wells: the series span
# far more than the prior ranges (2-fold substrate 0.01-164, 3-fold inhibitor 1e-4-159).
SCENARIO = dict(
    km_range=(1.0, 5.0),
    ki_range=(0.05, 0.5),
    n_wells=48,
    substrate_choices=[0.01 * 2**k for k in range(15)],
    inhibitor_choices=[1e-4 * 3**k for k in range(14)],
    cv=0.05,
    replicates=2,
)
N_SIMULATIONS = 120
SIGNIFICANCE = 0.05


@pytest.fixture(scope="module")
def plan() -> GridPlan:
    return plan_grid(**SCENARIO, n_simulations=N_SIMULATIONS, seed=8)


def _criterion_by_finite_differences(s, i, *, km_range, ki_range, cv, floor_sd, replicates,
                                     n_prior, seed):
    """The same criterion from central differences of the rate (not the analytic
    Jacobian), with the same prior draws."""
    rng = np.random.default_rng(seed)
    lo = np.log([km_range[0], ki_range[0], ki_range[0]])
    hi = np.log([km_range[1], ki_range[1], ki_range[1]])
    draws = np.exp(lo + (hi - lo) * rng.random((n_prior, 3)))
    ss, ii = (a.ravel() for a in np.meshgrid(s, i, indexing="ij"))
    rate = MODELS["mixed"].rate
    values = []
    for km, kic, kiu in draws:
        theta = np.log([1.0, km, kic, kiu])
        v = rate(ss, ii, *np.exp(theta))
        sigma = np.sqrt((cv * v) ** 2 + floor_sd**2)
        cols = []
        for k in range(4):
            step = np.zeros(4)
            step[k] = FINITE_DIFFERENCE_STEP
            up = rate(ss, ii, *np.exp(theta + step))
            down = rate(ss, ii, *np.exp(theta - step))
            cols.append((up - down) / (2 * FINITE_DIFFERENCE_STEP))
        g = np.stack(cols, axis=1) / sigma[:, None]
        m = replicates * g.T @ g
        values.append(np.linalg.slogdet(m)[1] - np.linalg.slogdet(m[:2, :2])[1])
    return float(np.mean(values))


def test_criterion_matches_finite_difference_information():
    s = np.array([0.5, 1, 2, 4, 8, 16])
    i = np.array([0, 0.1, 0.3, 1.0])
    common = dict(km_range=(1, 5), ki_range=(0.05, 0.5), cv=0.05, floor_sd=0.01,
                  replicates=2, n_prior=16, seed=3)
    got = design_criterion(s, i, **common)
    assert got == pytest.approx(_criterion_by_finite_differences(s, i, **common),
                                rel=CRITERION_RTOL)


def test_criterion_is_minus_infinity_without_inhibitor():
    value = design_criterion([1, 2, 4, 8], [0.0], km_range=(1, 5), ki_range=(0.1, 1))
    assert value == -np.inf


def test_naive_levels_span_the_series_evenly():
    series = [1, 2, 4, 8, 16, 32, 64]
    assert naive_levels(series, 4).tolist() == [1, 4, 16, 64]


def test_plan_beats_naive_grid_on_its_own_criterion(plan):
    assert plan.criterion_value > plan.naive_criterion_value
    # the naive value is the criterion of the naive grid, recomputed independently
    again = design_criterion(plan.naive_substrate, plan.naive_inhibitor,
                             km_range=SCENARIO["km_range"], ki_range=SCENARIO["ki_range"],
                             cv=SCENARIO["cv"], replicates=SCENARIO["replicates"], seed=8)
    assert again == pytest.approx(plan.naive_criterion_value, rel=CRITERION_RTOL)


def test_plan_beats_naive_grid_in_simulation(plan):
    # Paired on the same truths and noise draws. pKi: one-sided Wilcoxon signed-rank test
    # of the naive grid's absolute pKi errors against the proposal's (scipy.stats.wilcoxon).
    errors = plan.simulations.pivot(index="simulation", columns="grid", values="pki_error")
    test = stats.wilcoxon(errors["naive"], errors["proposed"], alternative="greater",
                          nan_policy="omit")
    outcomes = plan.simulations.pivot(index="simulation", columns="grid", values="outcome")
    better = int(((outcomes["proposed"] == "correct") & (outcomes["naive"] != "correct")).sum())
    worse = int(((outcomes["proposed"] != "correct") & (outcomes["naive"] == "correct")).sum())
    print(f"pKi RMSE proposed {plan.pki_rmse('proposed'):.3f}, naive "
          f"{plan.pki_rmse('naive'):.3f} (p = {test.pvalue:.2g}); correct calls proposed "
          f"{plan.correct_rate:.1%}, naive {plan.naive_correct_rate:.1%} ({better} better, "
          f"{worse} worse)")
    assert test.pvalue < SIGNIFICANCE
    assert plan.pki_rmse("proposed") < plan.pki_rmse("naive")
    # The verdicts must not get worse: sign test on the discordant pairs.
    assert stats.binomtest(worse, better + worse, 0.5, alternative="greater").pvalue > \
        SIGNIFICANCE
    assert plan.correct_rate >= plan.naive_correct_rate


def test_plan_is_a_local_optimum_within_budget_and_window(plan):
    assert plan.wells_used <= SCENARIO["n_wells"]
    assert set(plan.substrate) <= set(SCENARIO["substrate_choices"])
    assert 0.0 in plan.inhibitor
    assert set(plan.inhibitor) - {0.0} <= set(SCENARIO["inhibitor_choices"])
    common = dict(km_range=SCENARIO["km_range"], ki_range=SCENARIO["ki_range"],
                  cv=SCENARIO["cv"], replicates=SCENARIO["replicates"], seed=8)
    assert design_criterion(plan.substrate, plan.inhibitor, **common) == \
        pytest.approx(plan.criterion_value, rel=CRITERION_RTOL)
    # Every Ds-optimal candidate: no single swap within the window improves it.
    low, high = (SCENARIO["km_range"][0] / WINDOW_FACTOR,
                 SCENARIO["km_range"][1] * WINDOW_FACTOR)
    allowed = [x for x in SCENARIO["substrate_choices"] if low <= x <= high]
    ds = plan.candidates[plan.candidates["kind"] == "ds-optimal"]
    assert len(ds)
    for _, row in ds.iterrows():
        s, i = list(row["substrate"]), list(row["inhibitor"])
        best = design_criterion(s, i, **common)
        assert best == pytest.approx(row["criterion"], rel=CRITERION_RTOL)
        for pos, new in itertools.product(range(len(s)), allowed):
            if new in s:
                continue
            trial = sorted([*s[:pos], new, *s[pos + 1:]])
            assert design_criterion(trial, i, **common) <= best + 1e-6 * abs(best)


def test_exchange_finds_the_exhaustive_optimum_on_a_small_problem():
    s_choices = [0.25, 0.5, 1, 2, 4, 8, 16]
    i_choices = [0.03, 0.1, 0.3, 1, 3]
    small = dict(km_range=(1, 4), ki_range=(0.1, 1), cv=0.05, replicates=1, seed=5)
    plan = plan_grid(n_wells=12, substrate_choices=s_choices, inhibitor_choices=i_choices,
                     n_simulations=0, **small)
    best = -np.inf
    for n_s, n_i in ((4, 3),):
        for s in itertools.combinations(s_choices, n_s):
            for i in itertools.combinations(i_choices, n_i - 1):
                best = max(best, design_criterion(s, (0.0, *i), **small))
    assert plan.criterion_value == pytest.approx(best, rel=CRITERION_RTOL)


def test_result_reports_and_is_frozen(plan):
    text = plan.summary()
    assert "design substrate" in text and "naive" in text and "Ds-optimality" in text
    assert "<pre>" in plan._repr_html_()
    frame = plan.to_frame()
    assert set(frame["grid"]) == {"proposed", "naive"}
    assert len(frame) == 2 * (len(plan.substrate) + len(plan.inhibitor))
    layout = plan.layout()
    assert len(layout) == plan.wells_used
    rates = plan.rates()
    assert rates.loc[("proposed", "all"), "n"] == N_SIMULATIONS
    assert rates.loc[("proposed", "all"), "correct"] == pytest.approx(plan.correct_rate)
    with pytest.raises(dataclasses.FrozenInstanceError):
        plan.replicates = 3


def test_same_seed_same_plan():
    kw = dict(SCENARIO, n_simulations=4, seed=11)
    a, b = plan_grid(**kw), plan_grid(**kw)
    assert a.substrate == b.substrate and a.inhibitor == b.inhibitor
    assert a.simulations.equals(b.simulations)


@pytest.mark.parametrize(
    "edit, pattern",
    [
        ({"km_range": (5, 1)}, "km_range must satisfy 0 < low <= high"),
        ({"ki_range": "tight"}, "ki_range must be a pair"),
        ({"substrate_choices": [1, 2, -4, 8]}, "substrate_choices must hold finite"),
        ({"substrate_choices": [1, 2, 4]}, "substrate_choices has 3 distinct levels"),
        ({"inhibitor_choices": [0.1]}, "inhibitor_choices has 1 non-zero levels"),
        ({"n_wells": 10}, "n_wells = 10 cannot hold the smallest grid"),
        ({"cv": 0}, "cv must be a positive number"),
        ({"replicates": 1.5}, "replicates must be an integer"),
    ],
)
def test_bad_input_raises_data_error_naming_the_argument(edit, pattern):
    with pytest.raises(DataError, match=pattern):
        plan_grid(**{**SCENARIO, **edit, "n_simulations": 0})


def test_every_input_problem_is_listed():
    with pytest.raises(DataError) as info:
        plan_grid(**{**SCENARIO, "km_range": (0, 1), "cv": -1, "n_simulations": 0})
    assert len(info.value.problems) == 2


@pytest.mark.parametrize(
    "truth, verdict, expected",
    [
        ("competitive", "competitive", "correct"),
        ("competitive", "mixed", "larger"),
        ("none", "competitive", "larger"),
        ("competitive", "none", "missed"),
        ("competitive", "noncompetitive", "wrong"),
        ("mixed", "competitive", "wrong"),
        ("mixed", "ambiguous", "ambiguous"),
    ],
)
def test_call_outcome_classes(truth, verdict, expected):
    assert call_outcome(truth, verdict) == expected


# The `inhibkin design --help` example: a prior of Ki 0.05-0.5 and a 3-fold series from
# 0.001. The earlier planner put I = 0.001 in its proposal, 50 times below the prior.
HELP_EXAMPLE = dict(km_range=(1.0, 5.0), ki_range=(0.05, 0.5), n_wells=48,
                    substrate_choices=[0.01 * 2**k for k in range(12)],
                    inhibitor_choices=[0.001 * 3**k for k in range(8)], cv=0.05)


def test_no_candidate_level_far_outside_the_prior():
    plan = plan_grid(**HELP_EXAMPLE, n_simulations=0, seed=0)
    for _, row in plan.candidates.iterrows():
        if row["kind"] == "naive":
            continue
        for levels, series, (low, high) in (
                (row["substrate"], HELP_EXAMPLE["substrate_choices"], HELP_EXAMPLE["km_range"]),
                ([x for x in row["inhibitor"] if x > 0], HELP_EXAMPLE["inhibitor_choices"],
                 HELP_EXAMPLE["ki_range"])):
            low, high = low / WINDOW_FACTOR, high * WINDOW_FACTOR
            outside = [x for x in levels if not low <= x <= high]
            # Outside the window only when the window holds too few levels for the shape,
            # and then only the nearest ones.
            inside = [x for x in series if low <= x <= high]
            assert not outside or len(inside) < len(levels), (row, outside)
            nearest = sorted(series, key=lambda x: max(np.log(low / x), np.log(x / high), 0))
            assert set(outside) <= set(nearest[:len(levels)]), (row, outside)
    assert 0.001 not in plan.inhibitor


def test_plan_says_whether_it_beats_the_naive_grid(plan):
    (correct, rmse), (naive_correct, naive_rmse) = plan.score, plan.naive_score
    assert plan.beats_naive == (correct >= naive_correct and rmse <= naive_rmse
                                and (correct > naive_correct or rmse < naive_rmse))
    assert plan.choice == ("design" if plan.beats_naive else "naive")
    assert plan.candidates["chosen"].sum() == 1
    assert {"ds-optimal", "window"} <= set(plan.candidates["kind"])


def test_a_design_that_cannot_beat_the_naive_grid_proposes_it():
    # One grid fills the budget (4 substrate x 3 inhibitor levels): the design is the naive
    # grid, so it does not beat it, and the plan says so and proposes the naive grid.
    plan = plan_grid(km_range=(1, 4), ki_range=(0.1, 1), n_wells=24, replicates=2,
                     substrate_choices=[0.5, 1, 2, 4], inhibitor_choices=[0.1, 0.5],
                     n_simulations=8, seed=2, substrate_unit="uM", inhibitor_unit="uM")
    assert plan.beats_naive is False and plan.choice == "naive"
    assert "does not beat the naive grid" in plan.summary()
    assert plan.layout()["substrate_uM"].unique().tolist() == list(plan.naive_substrate)


def test_layout_names_wells_units_and_replicates_from_one():
    plan = plan_grid(**HELP_EXAMPLE, n_simulations=0, seed=0, substrate_unit="uM",
                     inhibitor_unit="nM")
    layout = plan.layout()
    assert list(layout.columns) == ["plate", "well", "substrate_uM", "inhibitor_nM",
                                    "replicate"]
    assert layout["well"].iloc[0] == "A1" and layout["well"].iloc[12] == "B1"
    assert layout["well"].is_unique and sorted(layout["replicate"].unique()) == [1, 2]
