"""Results are immutable all the way down (STYLE.md rule 4): the tables and mappings
inside a frozen result cannot be edited in place."""

import pickle

import numpy as np
import pandas as pd
import pytest

import inhibkin as ik
from inhibkin.campaign import fit_campaign
from inhibkin.core.readonly import ReadOnlyFrame
from inhibkin.simulate import simulate_campaign


@pytest.fixture(scope="module")
def fit():
    data = ik.simulate_grid("competitive", vmax=10, km=2, kic=0.5, cv=0.02, seed=1)
    return ik.fit_mechanisms(data, intervals="wald", weighting="uniform")


@pytest.fixture(scope="module")
def campaign():
    return fit_campaign(simulate_campaign(2, seed=1)[0], quiet=True)


EDITS = [
    lambda f: f.models["mixed"].params.loc.__setitem__(("kic", "estimate"), 1.0),
    lambda f: f.models["mixed"].params.__setitem__("estimate", 1.0),
    lambda f: f.models["mixed"].params.iloc.__setitem__((0, 0), 1.0),
    lambda f: f.models.__setitem__("mixed", None),
    lambda f: f.comparison.at.__setitem__(("mixed", "aicc"), 0.0),
    lambda f: f.ftests.insert(0, "x", 1),
    lambda f: f.data.fillna(0, inplace=True),
]


@pytest.mark.parametrize("edit", EDITS)
def test_a_mechanism_fit_cannot_be_edited_in_place(fit, edit):
    before = fit.to_frame()
    with pytest.raises(TypeError):
        edit(fit)
    assert fit.to_frame().equals(before)


def test_arrays_inside_a_model_fit_are_read_only(fit):
    with pytest.raises(ValueError, match="read-only"):
        fit.models["mixed"].fitted[0] = 0.0
    with pytest.raises(ValueError, match="read-only"):
        fit.models["mixed"].params["estimate"].to_numpy()[0] = 0.0


def test_a_campaign_cannot_be_edited_in_place(campaign):
    with pytest.raises(TypeError):
        campaign.ranking.loc[0, "pki"] = 99.0
    with pytest.raises(TypeError):
        campaign.options["units"]["grid substrate"] = "M"
    with pytest.raises(TypeError):
        campaign.options["level"] = 0.5
    with pytest.raises(TypeError):
        campaign.fits["x"] = None


def test_copies_are_ordinary_editable_frames(fit, campaign):
    table = campaign.to_frame()
    assert type(table) is not ReadOnlyFrame
    table.loc[0, "pki"] = 99.0
    assert campaign.ranking.loc[0, "pki"] != 99.0
    params = fit.models["mixed"].params.copy()
    params.loc["kic", "estimate"] = 1.0


def test_read_only_results_survive_pickling(fit, campaign):
    again = pickle.loads(pickle.dumps(fit))
    assert again.to_frame().equals(fit.to_frame())
    with pytest.raises(TypeError):
        again.models["mixed"] = None
    assert pickle.loads(pickle.dumps(campaign)).ranking.equals(campaign.ranking)


def test_a_dose_response_fit_cannot_be_edited_in_place():
    conc = np.geomspace(1e-3, 10.0, 10)
    # A four-parameter logistic, IC50 = 0.3, Hill slope 1 (the model's own definition).
    response = 100.0 / (1.0 + conc / 0.3)
    fit = ik.fit_dose_response(conc, response)
    with pytest.raises(TypeError):
        fit.params.loc["ic50", "estimate"] = 1.0
    with pytest.raises(ValueError, match="read-only"):
        fit.fitted[0] = 0.0


def test_a_morrison_fit_cannot_be_edited_in_place():
    from inhibkin.potency.morrison import morrison

    conc = np.r_[0.0, np.geomspace(0.01, 100.0, 12)]
    # Noise-free Morrison (1969) rates, [E] = 1, Ki,app = 0.5.
    fit = ik.fit_morrison(conc, morrison(conc, 100.0, 0.5, 1.0), enzyme=1.0,
                          intervals="wald")
    before = fit.to_frame()
    with pytest.raises(TypeError):
        fit.params.loc["ki_app", "estimate"] = 1.0
    with pytest.raises(TypeError):
        fit.params["estimate"] = 1.0
    for name in ("conc", "response", "fitted"):
        with pytest.raises(ValueError, match="read-only"):
            getattr(fit, name)[0] = 0.0
    assert fit.to_frame().equals(before)
    copy = fit.to_frame()
    copy.loc[0, "estimate"] = 1.0  # the copy is editable
    assert fit.to_frame().equals(before)


def test_initial_rates_cannot_be_edited_in_place():
    times = np.arange(30) * 10.0
    wells = ["A1", "A2"]
    # Two straight progress curves (slopes 0.01 and 0.02 signal units per s).
    reads = pd.DataFrame({"plate": 1, "well": np.repeat(wells, times.size),
                          "time": np.tile(times, 2),
                          "signal": np.r_[0.1 + 0.01 * times, 0.1 + 0.02 * times]})
    plate_map = pd.DataFrame({"plate": 1, "well": wells, "compound": "CPD-1",
                              "substrate": [10.0, 20.0], "inhibitor": 0.0, "role": "sample"})
    rates = ik.initial_rates(reads, plate_map)
    with pytest.raises(TypeError):
        rates.table.loc[0, "rate"] = 99.0
    with pytest.raises(TypeError):
        rates.table["rate"] = 0.0
    with pytest.raises(TypeError):
        rates.controls.insert(0, "x", 1)
    with pytest.raises(TypeError):
        rates.unmatched.loc[0, "reason"] = "edited"
    with pytest.raises(TypeError):
        rates.units["rate"] = "M/s"
    table = rates.to_frame()
    table.loc[0, "rate"] = 99.0
    assert rates.table.loc[0, "rate"] != 99.0
    assert pickle.loads(pickle.dumps(rates)).table.equals(rates.table)


def test_every_table_of_a_campaign_is_read_only():
    from inhibkin.simulate import simulate_dose_campaign

    dose, _ = simulate_dose_campaign(["A", "B"], seed=2)
    campaign = fit_campaign(dose_response=dose, km="20uM", quiet=True)
    with pytest.raises(TypeError):
        campaign.plates.loc[0, "z_prime"] = 1.0
    with pytest.raises(TypeError):
        campaign.potency_fits["A"] = None
    with pytest.raises(TypeError):
        campaign.potency_fits["A"].params.loc["ic50", "estimate"] = 1.0
    with pytest.raises(TypeError):
        campaign.options["units"]["dose-response inhibitor"] = "M"
