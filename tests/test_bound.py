"""Bounds travel as a value and a side, flags as tuples, until a table writes them out."""

import math
import warnings

import numpy as np
import pytest

import inhibkin.campaign.dose as dose_route
from inhibkin.campaign import fit_campaign
from inhibkin.core.bound import Bound
from inhibkin.simulate import simulate_dose_campaign


def test_a_bound_is_a_value_and_a_side():
    above = Bound(">", 3e-5)
    assert (above.low, above.high) == (3e-5, math.inf)
    assert above.text("M") == "> 3e-05 M" and str(above) == "> 3e-05"
    below = Bound("<", 2.0).scaled(0.5)
    assert (below.side, below.low, below.high) == ("<", 0.0, 1.0)
    with pytest.raises(ValueError, match="side"):
        Bound(">=", 1.0)


@pytest.fixture(scope="module")
def dose():
    # inactive_fraction=1: every curve flat, so every Ki is a bound.
    return simulate_dose_campaign(["A", "B"], seed=3, inactive_fraction=1.0)[0]


def test_the_ranking_takes_the_bound_as_a_number_not_as_rounded_text(dose):
    campaign = fit_campaign(dose_response=dose, km="20uM", quiet=True)
    for name, fit in campaign.potency_fits.items():
        row = campaign.ranking.set_index("compound").loc[name]
        assert row["status"] == "inactive"
        # Competitive, S = Km: Ki = IC50 / (1 + S/Km) = IC50 / 2 (Cheng & Prusoff 1973).
        assert row["ki_low_M"] == pytest.approx(fit.ic50_bound.value / 2, rel=1e-12)


def test_a_warning_with_a_comma_stays_one_flag(dose, monkeypatch):
    real = dose_route.potency_table

    def warning_potency_table(*args, **kwargs):
        warnings.warn("the controls drift, slightly, across the plate", stacklevel=2)
        return real(*args, **kwargs)

    monkeypatch.setattr(dose_route, "potency_table", warning_potency_table)
    campaign = fit_campaign(dose_response=dose, km="20uM", quiet=True)
    flags = campaign.ranking["flags"].to_numpy()
    assert all("the controls drift, slightly, across the plate" in f for f in flags)
    assert not np.any([f.split("; ").count("slightly") for f in flags])
