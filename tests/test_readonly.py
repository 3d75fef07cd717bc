"""Results are immutable all the way down (STYLE.md rule 4): the tables and mappings
inside a frozen result cannot be edited in place."""

import pickle

import numpy as np
import pytest

import inhibkin as ik
from inhibkin.campaign.batch import fit_campaign, simulate_campaign
from inhibkin.core.readonly import ReadOnlyFrame


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
