"""The rate_se weighting rule: the variance model, the default it sets, what results say.

The variance model is checked against data drawn from the model itself: the expectation
of a sample variance is the variance (textbook), so with many replicates a² and b²
must come back near the values drawn from.
"""

import numpy as np
import pandas as pd
import pytest

import inhibkin as ik
from inhibkin.core.weighting import (
    DEFAULT_WEIGHTING,
    MIN_REPLICATE_GROUPS,
    SD_FLOOR,
    rate_se_weights,
    resolve_weighting,
    variance_model,
    weighting_label,
)

# 48 groups of 8 replicates: the sample variances pool 336 degrees of freedom, so a²
# and b² come back within about a fifth of the truth (relative sd of a pooled variance
# ~ sqrt(2/336) ≈ 8 %, wider for two constants shared between groups).
VARIANCE_RTOL = 0.35
A_TRUE, B_TRUE = 0.05, 0.04


def _grid(replicates, seed, se=0.02):
    rng = np.random.default_rng(seed)
    s, i = np.meshgrid(np.geomspace(0.4, 20.0, 8), np.linspace(0.0, 2.0, 6))
    s, i = (np.repeat(x.ravel(), replicates) for x in (s, i))
    mean = 10.0 * s / (2.0 * (1 + i / 0.5) + s)
    sd = np.sqrt(se ** 2 + A_TRUE ** 2 + (B_TRUE * mean) ** 2)
    return s, i, mean + sd * rng.standard_normal(s.size), np.full(s.size, se)


def test_variance_model_recovers_the_constant_and_proportional_parts():
    s, i, v, se = _grid(8, seed=11)
    a2, b2 = variance_model(s, i, v, se)
    np.testing.assert_allclose([a2, b2], [A_TRUE ** 2, B_TRUE ** 2], rtol=VARIANCE_RTOL)


def test_too_few_replicated_points_leave_rate_se_alone():
    s, i, v, se = _grid(1, seed=12)
    # Replicate only MIN_REPLICATE_GROUPS - 1 points: no variance model.
    s, i, v, se = (np.concatenate([x, x[:MIN_REPLICATE_GROUPS - 1]]) for x in (s, i, v, se))
    assert variance_model(s, i, v, se) == (0.0, 0.0)
    mask = np.ones((1, s.size), bool)
    w = rate_se_weights(s[None], i[None], v[None], se[None], mask)
    # Equal standard errors and no variance model: equal weights.
    np.testing.assert_allclose(w, 1.0)


def test_default_is_rate_se_only_for_tables_that_carry_it():
    assert resolve_weighting(None, ["rate", "rate_se"]) == ("rate_se", "rate_se")
    assert resolve_weighting(None, ["rate"]) == (DEFAULT_WEIGHTING, None)
    # A named sd column keeps the old default; a weighting asked for by name is kept.
    assert resolve_weighting(None, ["rate", "rate_se", "sd"], "sd") == (DEFAULT_WEIGHTING,
                                                                       None)
    assert resolve_weighting("uniform", ["rate_se"]) == ("uniform", None)
    assert weighting_label("rate_se") == "rate_se + variance model"


@pytest.fixture(scope="module")
def table():
    s, i, v, se = _grid(2, seed=13)
    return pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v, "rate_se": se})


def test_fit_says_which_weighting_it_used(table):
    fit = ik.fit_mechanisms(table, intervals="wald")
    assert fit.weighting == "rate_se + variance model"
    assert "rate_se + variance model weighting" in fit.summary()
    plain = ik.fit_mechanisms(table.drop(columns="rate_se"), intervals="wald")
    assert plain.weighting == "relative"


def test_weights_follow_the_variance_model(table):
    fit = ik.fit_mechanisms(table, intervals="wald")
    a2, b2 = variance_model(*(table[c].to_numpy() for c in ("substrate", "inhibitor",
                                                            "rate", "rate_se")))
    mean = table.groupby(["substrate", "inhibitor"])["rate"].transform("mean").to_numpy()
    expected = 1.0 / np.sqrt(table["rate_se"].to_numpy() ** 2 + a2 + b2 * mean ** 2)
    expected /= np.exp(np.mean(np.log(expected)))
    np.testing.assert_allclose(fit.data["weight"], expected, rtol=1e-12)


def test_campaign_and_cli_summary_name_the_weighting(table, tmp_path, capsys):
    from inhibkin.cli import main

    grid = table.rename(columns={"substrate": "substrate_uM", "inhibitor": "inhibitor_uM"})
    grid = grid.assign(compound="CPD-1")
    campaign = ik.fit_campaign(grid)
    assert campaign.options["weighting"] == "rate_se"
    assert "rate_se + variance model weighting" in campaign.summary()
    path = tmp_path / "rates.csv"
    grid.to_csv(path, index=False)
    assert main(["mechanism", str(path), "-o", str(tmp_path / "out.csv")]) == 0
    assert "rate_se + variance model weighting" in capsys.readouterr().out


def test_a_zero_standard_error_is_floored_not_refused(table):
    from inhibkin.engine import fit_mechanisms_batch

    # One replicate per point: no variance model, so the zero standard error alone sets
    # that point's sd, and the floor (SD_FLOOR x the median sd) is what stops it.
    single = table.drop_duplicates(["substrate", "inhibitor"]).reset_index(drop=True)
    exact = single.assign(rate_se=single["rate_se"].where(single.index != 5, 0.0))
    lmfit = ik.fit_mechanisms(exact, intervals="wald")
    engine = fit_mechanisms_batch([exact])[0]
    assert engine.verdict == lmfit.verdict != "failed"
    np.testing.assert_allclose(engine.data["weight"], lmfit.data["weight"], rtol=1e-12)
    weights = lmfit.data["weight"].to_numpy()
    others = np.delete(weights, 5)
    np.testing.assert_allclose(others, others[0], rtol=1e-12)
    assert weights[5] / others[0] == pytest.approx(1 / SD_FLOOR, rel=1e-12)
