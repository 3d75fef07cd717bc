"""Adding a model is one entry: a toy model registered in MODELS alone runs through the
starts, bounds, "determined" rule and both solvers.

The toy is the uncompetitive rate law under another name with its constant called
``kix``: whatever reads the entry must treat it exactly as uncompetitive (same starts,
bounds, determined flags, estimates), and nothing may depend on the constant's name.
"""

import numpy as np
import pytest

import inhibkin as ik
from inhibkin.core.models import MODELS, RateLaw
from inhibkin.engine import fit_mechanisms_batch

# Both solvers settle estimates to about 1e-12 relative; the same problem under two names
# must agree far tighter than this.
ESTIMATE_RTOL = 1e-6


def _toy_rate(s, i, vmax, km, kix):
    return vmax * s / (km + s * (1 + i / kix))


def _toy_jacobian(s, i, vmax, km, kix):
    d = km + s * (1 + i / kix)
    g = vmax * s / d**2
    return np.stack([s / d, -g, g * s * i / kix**2], axis=-1)


TOY = RateLaw("toy", ("vmax", "km", "kix"), _toy_rate, _toy_jacobian, nests_in=("mixed",),
              equation="v = vmax*S / (km + S*(1 + I/kix))",
              roles=("rate", "substrate", "inhibitor"), ranking=("kix",),
              alpha_edges=("low",))


@pytest.fixture()
def toy(monkeypatch):
    monkeypatch.setitem(MODELS, "toy", TOY)
    # In models.py the toy's entry would come with "toy" added to none's nests_in.
    monkeypatch.setitem(MODELS["none"].__dict__, "nests_in",
                        MODELS["none"].nests_in + ("toy",))


@pytest.fixture(scope="module")
def data():
    return ik.simulate_grid("uncompetitive", vmax=10.0, km=2.0, kiu=0.8, cv=0.03, seed=11)


MODELS_FITTED = ("none", "uncompetitive", "toy", "mixed")


def test_the_toy_is_fitted_as_the_law_it_copies_by_both_solvers(toy, data):
    lmfit = ik.fit_mechanisms(data, models=MODELS_FITTED, intervals="wald",
                              weighting="uniform")
    engine = fit_mechanisms_batch([data], models=MODELS_FITTED, weighting="uniform")[0]
    for fit in (lmfit, engine):
        toy_params = fit.models["toy"].params
        reference = fit.models["uncompetitive"].params
        assert toy_params.index.tolist() == ["vmax", "km", "kix"]
        np.testing.assert_allclose(toy_params["estimate"], reference["estimate"],
                                   rtol=ESTIMATE_RTOL)
        assert toy_params["determined"].tolist() == reference["determined"].tolist()
        pairs = list(zip(fit.ftests["reduced"], fit.ftests["full"]))
        assert ("none", "toy") in pairs and ("toy", "mixed") in pairs
    np.testing.assert_allclose(engine.models["toy"].params["estimate"],
                               lmfit.models["toy"].params["estimate"], rtol=ESTIMATE_RTOL)



def test_the_toy_converts_an_ic50_once_its_entry_says_which_constant_it_stands_for():
    from dataclasses import replace

    from inhibkin.potency.conversion import conversion_ratios

    # Untied, kix is no constant of the mixed relation IC50 = (Km + S)/(Km/Kic + S/Kiu):
    # no conversion is invented for it.
    assert conversion_ratios(TOY) is None
    # Tied to kiu in its entry, it converts exactly as uncompetitive (Kic infinite).
    tied = replace(TOY, ties=(("kix", ("kiu",)),))
    assert tied.stands_for("kix") == ("kiu",)
    assert conversion_ratios(tied) == ("kix", *conversion_ratios(MODELS["uncompetitive"])[1:])
    assert MODELS["noncompetitive"].stands_for("ki") == ("kic", "kiu")
