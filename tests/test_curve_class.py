"""Curve classes (issue 12, item 1): a flat curve is inactive, never a potent bound; a
parameter at its fitting bound is never a result; one rule for the lmfit path and the
batched engine."""

import numpy as np
import pandas as pd
import pytest

from inhibkin.campaign import fit_campaign
from inhibkin.core.curve_class import (
    CURVE_CLASSES,
    CurveClassRules,
    classify_curves,
    observed_efficacy,
)
from inhibkin.core.logistic import logistic4
from inhibkin.demo import DEMO_DATA
from inhibkin.display.text import ranking_ki_unit
from inhibkin.engine import fit_logistic_batch
from inhibkin.errors import DataError
from inhibkin.potency.curve import dose_response_from_estimates, fit_dose_response
from inhibkin.rates.plates import percent_activity, plate_qc
from inhibkin.units import from_molar, significant_text

# Demo compounds whose activity stays flat near 100 % (invented_screen_truth.csv marks
# them inactive) that were reported "bound, Ki < 7.6e-10 M" with Hill ≈ 20 (issue 12).
FLAT_DEMO = ("INV-0113", "INV-0144", "INV-0245", "INV-0331")
# Real actives of the same screen, for the ranking.
ACTIVE_DEMO = ("INV-0296", "INV-0263")
NOISE = 5.0  # % activity, the standard deviation of the simulated wells below


def _demo_wells(compounds):
    screen = pd.read_csv(DEMO_DATA / "invented_screen_wells.csv")
    samples = screen[screen["compound"].isin(compounds)]
    controls = screen[(screen["role"] != "sample") & screen["plate"].isin(samples["plate"])]
    return pd.concat([samples, controls])


def _percent(wells, compound):
    qc = plate_qc(wells, plate="plate", role="role", response="signal", strict=False)
    y = percent_activity(wells, qc, plate="plate", response="signal")
    here = (wells["compound"] == compound).to_numpy()
    return wells.loc[here, "inhibitor_uM"].to_numpy(float), y[here]


def test_flat_demo_compounds_are_inactive_and_ranked_after_every_active():
    campaign = fit_campaign(dose_response=_demo_wells(FLAT_DEMO + ACTIVE_DEMO), km=40e-6,
                            engine="lmfit", quiet=True)
    ranking = campaign.ranking.set_index("compound")
    # The Ki column's one unit (issue 17): the top tested concentration, 30 µM, in it.
    unit = ranking_ki_unit(campaign.ranking)
    top = significant_text(from_molar(3e-5, unit))
    for name in FLAT_DEMO:
        row = ranking.loc[name]
        assert row["status"] == "inactive", (name, row["status"], row["ki_reported"])
        assert row["ki_reported"].startswith(f"inactive: IC50 > {top} {unit}")
        assert np.isnan(row["ki_M"]) and np.isnan(row["pki"]) and np.isnan(row["hill"])
        assert "<" not in row["ki_reported"]
    order = list(campaign.ranking["compound"])
    assert max(order.index(n) for n in ACTIVE_DEMO) < min(order.index(n) for n in FLAT_DEMO)


def test_flat_curve_reports_no_parameter_at_its_bound():
    wells = _demo_wells(("INV-0113",))
    conc, y = _percent(wells, "INV-0113")
    fit = fit_dose_response(conc, y, direction="falling", full_activity=100.0,
                            intervals="wald")
    assert fit.curve_class == "inactive"
    assert str(fit.ic50_bound) == "> 30" and np.isnan(fit.ic50)
    assert np.isnan(fit.hill) and np.isnan(fit.top) and np.isnan(fit.bottom)
    assert "inactive" in fit.flags and "ic50_below_range" not in fit.flags
    assert any(text.startswith("hill:") for text in fit.not_determined)


def test_hill_at_its_fitting_bound_is_not_determined():
    # A step between two tested concentrations: the slope runs to the bound (20).
    conc = np.geomspace(1e-3, 10, 9)
    y = np.where(conc < 0.05, 100.0, 0.0)
    fit = fit_dose_response(conc, y, direction="falling", full_activity=100.0,
                            intervals="wald")
    assert fit.estimates["hill"] == pytest.approx(20.0, rel=1e-3)
    assert np.isnan(fit.hill) and "hill_at_bound" in fit.flags
    assert "hill: at its fitting bound (20)" in fit.not_determined


@pytest.mark.parametrize("case, expected", [
    ("complete", "complete"), ("midpoint past the top", "incomplete"),
    ("top dose only", "single_point"), ("flat", "inactive"), ("weak", "inactive"),
    ("potent, below range", "incomplete"),
])
def test_each_class_from_simulated_curves(case, expected):
    rng = np.random.default_rng(12)
    x = np.log10(np.geomspace(1e-3, 30, 10))
    truth = {"complete": (100, 0, -1.0, 1.0), "midpoint past the top": (100, 0, 1.2, 1.0),
             "top dose only": (100, 0, 1.35, 6.0), "flat": (100, 100, 0.0, 1.0),
             "weak": (100, 85, -1.0, 1.0), "potent, below range": (100, 0, -4.5, 1.0)}[case]
    y = logistic4(np.repeat(x, 2), *truth) + rng.normal(0, NOISE, 2 * x.size)
    fit = fit_dose_response(10 ** np.repeat(x, 2), y, direction="falling",
                            full_activity=100.0, intervals="wald")
    assert fit.curve_class == expected, fit.class_reason
    if expected == "inactive":
        assert str(fit.ic50_bound) == "> 30"


def test_engine_and_lmfit_path_share_the_rule():
    rng = np.random.default_rng(3)
    x = np.tile(np.log10(np.geomspace(1e-3, 30, 10)), (4, 1))
    mids = np.array([[-1.0], [0.5], [3.0], [-2.0]])
    y = 100 / (1 + 10 ** (x - mids)) + rng.normal(0, NOISE, x.shape)
    y[2] = 100 + rng.normal(0, NOISE, x.shape[1])  # flat
    batch = fit_logistic_batch(x, y)
    classes = classify_curves(x, y, np.ones(x.shape, bool), batch.estimate,
                              n_free=batch.n_params, full_activity=100.0)
    for k in range(len(x)):
        one = classify_curves(x[k:k + 1], y[k:k + 1], np.ones((1, x.shape[1]), bool),
                              batch.estimate[k:k + 1], full_activity=100.0)
        assert one.curve_class[0] == classes.curve_class[k]
        # The batch's row, as the engine's potency fits take it (not reclassified).
        pd.testing.assert_frame_equal(classes.subset([k]).to_frame(), one.to_frame())
    assert classes.curve_class[2] == "inactive"
    assert set(classes.curve_class) <= set(CURVE_CLASSES)
    assert "4 curves" in classes.summary() and len(classes.to_frame()) == 4


def test_inactive_efficacy_is_the_mean_at_the_top_concentration():
    # Hand-checked: the two wells at 10 read 90 and 86 % activity, mean 88, so 12 % of
    # the 0–100 control window is removed; their standard deviation is sqrt(8) and the
    # standard error of the mean sqrt(8) / sqrt(2) = 2 %.
    conc = np.repeat([0.01, 0.1, 1.0, 10.0], 2)
    y = np.array([101.0, 99.0, 98.0, 102.0, 100.0, 97.0, 90.0, 86.0])
    efficacy, std_err, rise, n_points = observed_efficacy(
        np.log10(conc)[None, :], y[None, :], np.ones((1, 8), bool), full_activity=100.0,
        falling_only=True)
    assert efficacy[0] == pytest.approx(0.12, abs=1e-12)
    assert std_err[0] == pytest.approx(0.02, abs=1e-12)
    assert rise[0] == pytest.approx(-0.12, abs=1e-12) and n_points[0] == 2
    # Without a full-activity level the mean at the lowest concentration (100) stands in,
    # its standard error (sqrt(2) / sqrt(2) = 1 %) added in quadrature: sqrt(5) %.
    _, std_err, _, _ = observed_efficacy(np.log10(conc), y, np.ones(8, bool))
    assert std_err[0] == pytest.approx(np.sqrt(5) / 100, abs=1e-12)
    fit = fit_dose_response(conc, y, direction="falling", full_activity=100.0,
                            intervals="wald")
    assert fit.curve_class == "inactive"
    assert fit.class_reason.startswith(
        "inactive: 12 ± 2 % of the control window removed at the highest concentration "
        "(mean of 2 points), below 25 %"), fit.class_reason
    # Two minima of a flat curve (a step at 20 past the top, a shallow slope reaching
    # the top dose) report the same, being read off the data.
    for estimates in ({"top": 100.0, "bottom": 88.0, "log_ic50": 0.5, "hill": 20.0},
                      {"top": 100.5, "bottom": 60.0, "log_ic50": 1.6, "hill": 0.4}):
        other = dose_response_from_estimates(conc, y, estimates, direction="falling",
                                             full_activity=100.0, converged=False)
        assert other.curve_class == "inactive"
        assert other.class_reason == fit.class_reason
        # No estimate of an inactive curve is reported: where the optimiser stopped is
        # no flag of it.
        assert "not_converged" not in other.flags


def test_rules_are_checked():
    with pytest.raises(DataError, match="min_efficacy"):
        CurveClassRules(min_efficacy=1.5)


def _rising_plate(seed=3):
    """One plate: an activator (activity rising to 200 % by the top dose, midpoint 100 nM),
    a competitive inhibitor (IC50 100 nM) and a flat compound, 10 concentrations in
    duplicate, 4 controls of each kind; noise 2 % of the control window (invented)."""
    rng = np.random.default_rng(seed)
    high, low, sd = 1000.0, 50.0, 20.0
    rows = []
    conc = np.repeat(np.geomspace(1, 1e4, 10), 2)
    activity = {"ACT-1": 1.0 + (conc / 100) / (1 + conc / 100),
                "INH-1": 1.0 / (1 + conc / 100), "FLAT-1": np.ones_like(conc)}
    for name, act in activity.items():
        signal = low + (high - low) * act + sd * rng.normal(size=conc.size)
        rows += [(name, "P1", "sample", c, y, 20.0) for c, y in zip(conc, signal)]
    for kind, level in (("max", high), ("min", low)):
        rows += [(None, "P1", kind, 0.0, level + sd * rng.normal(), 20.0) for _ in range(4)]
    return pd.DataFrame(rows, columns=["compound", "plate", "role", "inhibitor_nM", "signal",
                                       "substrate_uM"])


@pytest.mark.parametrize("engine", ["lmfit", "batched"])
def test_rising_activity_is_inactive_not_a_potency(engine):
    # Percent activity that rises with the compound is activation: no inhibition, so no
    # IC50, and ranked with the inactive compounds (was: class complete, flag rising,
    # a Ki bound ranked before the flat compound).
    campaign = fit_campaign(dose_response=_rising_plate(), km="20uM", engine=engine,
                            quiet=True)
    ranking = campaign.ranking.set_index("compound")
    row = ranking.loc["ACT-1"]
    assert row["status"] == "inactive"
    assert row["ki_reported"].startswith("inactive")
    assert np.isnan(row["ic50_M"]) and np.isnan(row["ki_M"]) and np.isnan(row["pki"])
    assert "activity rises" in row["reason"]
    assert list(campaign.ranking["compound"]) == ["INH-1", "ACT-1", "FLAT-1"]
    assert campaign.potency_fits["ACT-1"].curve_class == "inactive"


def test_rising_curve_without_direction_keeps_its_midpoint():
    # A readout allowed to rise (direction="any", e.g. a signal that grows as activity
    # falls) is still a curve: the rule above is for activity, which inhibitors lower.
    conc = np.geomspace(1, 1e4, 10)
    y = logistic4(np.log10(conc), 0.0, 100.0, 2.0, 1.0)
    fit = fit_dose_response(conc, y, intervals="wald")
    assert fit.curve_class == "complete" and "rising" in fit.flags
