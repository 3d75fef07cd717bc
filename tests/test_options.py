"""Options are checked once, at the public entry, before any work (HOUSE_RULES:
"options are checked once, before any work")."""

import numpy as np
import pandas as pd
import pytest

import inhibkin as ik
from inhibkin.campaign import fit_campaign
from inhibkin.core.options import FitOptions
from inhibkin.engine import fit_mechanism_arrays, fit_mechanisms_batch
from inhibkin.errors import OptionError
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign

CALLS = []


def counting_fitter(data, **options):
    """A grid fitter that records that it was called (module level: picklable)."""
    CALLS.append(options)
    return ik.fit_mechanisms(data, **options)


@pytest.fixture(scope="module")
def table():
    return simulate_campaign(2, seed=1)[0]


BAD = [
    (dict(weighting="bogus"), "weighting must be one of"),
    (dict(intervals="bogus"), "intervals must be one of"),
    # The numeric limits are validate.OPTION_LIMITS, shared with the command line.
    (dict(level=5), r"level must be a number in \(0, 1\); 5 looks like a percent"),
    (dict(level=float("nan")), r"level must be a number in \(0, 1\)"),
    (dict(alpha=1.5), r"alpha must be a number in \(0, 1\)"),
    (dict(min_delta_aicc=-1), r"min_delta_aicc must be a number in \[0, inf\)"),
    (dict(determination_factor=0.5), r"determination_factor must be a number in \[1, inf\)"),
    (dict(edge_sides=3), r"edge_sides must be 1 \(one-sided\) or 2 \(two-sided\), not 3"),
    (dict(fit_enzyme="yes"), "fit_enzyme must be True or False, got 'yes'"),
]


@pytest.mark.parametrize("option, message", BAD)
def test_a_bad_option_fails_the_campaign_before_any_compound_is_fitted(table, option,
                                                                      message):
    CALLS.clear()
    with pytest.raises(OptionError, match=message):
        fit_campaign(table, quiet=True, engine=counting_fitter, **option)
    assert CALLS == []


@pytest.mark.parametrize("option, message", BAD[:1] + BAD[2:])
def test_every_grid_entry_checks_the_same_options(table, option, message):
    one = table[table["compound"] == table["compound"].iloc[0]]
    data = one.rename(columns={"substrate_uM": "substrate", "inhibitor_nM": "inhibitor"})
    with pytest.raises(OptionError, match=message):
        ik.fit_mechanisms(data, **option)
    with pytest.raises(OptionError, match=message):
        fit_mechanisms_batch([data], **option)
    s, i, v = (data[c].to_numpy()[None] for c in ("substrate", "inhibitor", "rate"))
    with pytest.raises(OptionError, match=message):
        fit_mechanism_arrays(s, i, v, **option)


def test_an_unknown_potency_option_is_named():
    dose, _ = simulate_dose_campaign(["A"], seed=1)
    with pytest.raises(OptionError, match="unknown option.*'z_prime'"):
        fit_campaign(dose_response=dose, km="20uM", quiet=True,
                     potency_options={"z_prime": 0.3})


@pytest.mark.parametrize("option, message", [
    ({"default_mechanism": "bogus"}, "default_mechanism.*must be one of"),
    ({"tight_binding": "bogus"}, "tight_binding must be"),
    ({"z_prime_threshold": "0.3"}, "z_prime_threshold must be a number"),
])
def test_bad_potency_option_values_fail_before_any_curve_is_fitted(option, message):
    dose, _ = simulate_dose_campaign(["A"], seed=1)
    with pytest.raises(OptionError, match=message):
        fit_campaign(dose_response=dose, km="20uM", quiet=True, potency_options=option)


def test_the_options_are_stored_as_checked(table):
    campaign = fit_campaign(table, quiet=True, level=0.9, alpha=0.01)
    assert campaign.options["level"] == 0.9
    assert campaign.options["alpha"] == 0.01
    assert campaign.options["z_prime_threshold"] == 0.5


def test_a_custom_z_prime_threshold_reaches_the_options_and_the_report():
    from inhibkin.reporting.report import _campaign_potency_context

    dose, _ = simulate_dose_campaign(["A", "B"], seed=2)
    campaign = fit_campaign(dose_response=dose, km="20uM", quiet=True,
                            potency_options={"z_prime_threshold": 0.3})
    assert campaign.options["z_prime_threshold"] == 0.3
    context = _campaign_potency_context(campaign, max_figures=0)
    assert context["z_threshold"] == 0.3


def test_fit_options_are_frozen_floats():
    options = FitOptions(level=1 - 0.05, determination_factor=10)
    assert isinstance(options.determination_factor, float)
    with pytest.raises(AttributeError):
        options.level = 0.5
    assert np.isclose(options.as_dict()["level"], 0.95)


@pytest.fixture(scope="module")
def edge_grids():
    """Uncompetitive grids with the inhibitor only up to kiu (seeds 4 and 12, as
    tests/test_drift.py): the two-sided edge test leaves both ambiguous, the one-sided
    test calls both uncompetitive (its F-test p between 0.05 and 0.10)."""
    return {f"seed {seed}": ik.simulate_grid(
        "uncompetitive", vmax=10.0, km=2.0, kiu=2.0, cv=0.10, seed=seed,
        i=np.array([0.0, 0.4, 0.8, 1.2, 1.6, 2.0])) for seed in (4, 12)}


EDGE_VERDICTS = {2: "ambiguous", 1: "uncompetitive"}


@pytest.mark.parametrize("sides", [2, 1])
def test_edge_sides_reaches_the_verdict_of_every_grid_entry(edge_grids, sides):
    expected = EDGE_VERDICTS[sides]
    batch = fit_mechanisms_batch(edge_grids, weighting="relative", lack_of_fit_alpha=0,
                                 edge_sides=sides)
    for name, grid in edge_grids.items():
        one = ik.fit_mechanisms(grid, weighting="relative", intervals="wald",
                                lack_of_fit_alpha=0, edge_sides=sides)
        assert one.options.edge_sides == batch[name].options.edge_sides == sides
        assert one.verdict == batch[name].verdict == expected, name
    table = pd.concat([g.assign(compound=name) for name, g in edge_grids.items()]).rename(
        columns={"substrate": "substrate_uM", "inhibitor": "inhibitor_uM"})
    for engine in ("lmfit", "batched"):
        campaign = fit_campaign(table, quiet=True, engine=engine, weighting="relative",
                                edge_sides=sides)
        assert campaign.options["edge_sides"] == sides
        assert campaign.ranking["verdict"].tolist() == [expected, expected], engine


def test_the_command_line_passes_edge_sides_and_checks_it_before_any_work(edge_grids,
                                                                          tmp_path):
    from inhibkin.cli import main

    table = pd.concat([g.assign(compound=name) for name, g in edge_grids.items()]).rename(
        columns={"substrate": "substrate_uM", "inhibitor": "inhibitor_uM"})
    grid = tmp_path / "grid.csv"
    table.drop(columns=["true_rate", "replicate"]).to_csv(grid, index=False)
    for sides, expected in EDGE_VERDICTS.items():
        out = tmp_path / f"ranked_{sides}.csv"
        assert main(["mechanism", str(grid), "-o", str(out), "--weighting", "relative",
                     "--quiet", "--edge-sides", str(sides)]) == 0
        assert pd.read_csv(out)["verdict"].tolist() == [expected, expected]
    bad = tmp_path / "bad.csv"
    with pytest.raises(SystemExit) as stop:
        main(["mechanism", str(grid), "-o", str(bad), "--edge-sides", "3"])
    assert stop.value.code == 2
    assert not bad.exists()


def test_fit_progress_curves_checks_edge_sides_before_reading():
    # The option is refused before the (empty) tables are looked at.
    with pytest.raises(OptionError, match="edge_sides must be 1"):
        ik.fit_progress_curves(pd.DataFrame(), pd.DataFrame(), edge_sides=0)
