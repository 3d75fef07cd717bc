"""Whole progress curves fitted globally (inhibkin/mechanism/progress_curves.py) and the
product curve they fit (inhibkin/mechanism/product_curve.py).

References: the closed form is checked against a numerical integration of the
Michaelis–Menten rate law (scipy.integrate.solve_ivp, independent of the Lambert W
form; Schnell & Mendoza 1997, J. Theor. Biol. 187:207 give the form) and against the
mass-action ODE of tests/grid_ode.py; the product-inhibited curve against the implicit
integrated equation Vt = (1 − Km/Kp)·P + Km(1 + S0/Kp)·ln(S0/(S0 − P)) for competitive
product inhibition (textbook integrated rate equation, e.g. Segel, Enzyme Kinetics;
`from memory`); the whole fit against the mass-action plates of tests/grid_ode.py.
"""

import numpy as np
import pandas as pd
import pytest
from grid_ode import EPSILON_PATH, Mechanism, plate, product_curve
from scipy.integrate import solve_ivp

import inhibkin as ik
from inhibkin.mechanism.product_curve import (
    CLOSED_FORM,
    ODE,
    closed_form_product,
    closed_form_sensitivities,
    product_formed,
)

# The closed form against a tight numerical integration of the same law.
CLOSED_FORM_RTOL = 1e-7
# Against the mass-action ODE: the quasi-steady state holds to E0/(Km + S) ~ 2e-6
# and the pre-steady state lasts < 1 ms of a 600 s curve.
MASS_ACTION_RTOL = 1e-3
ODE_RTOL = 1e-6
CONVERSION = ik.BeerLambert(EPSILON_PATH * 1e6)
COLUMNS = dict(substrate="substrate_uM", inhibitor="inhibitor_uM", conversion=CONVERSION)


def test_closed_form_matches_numerical_integration():
    vmax, km = 2e-3, 10.0
    t = np.linspace(0.0, 3000.0, 31)
    for start in (2.0, 10.0, 100.0):
        sol = solve_ivp(lambda _t, p, s0=start: [vmax * (s0 - p[0]) / (km + s0 - p[0])],
                        (0, t[-1]), [0.0], t_eval=t, rtol=1e-12, atol=1e-15, method="LSODA")
        closed = closed_form_product(t, start, vmax, km)
        assert closed == pytest.approx(sol.y[0], rel=CLOSED_FORM_RTOL, abs=1e-12)


def test_closed_form_does_not_overflow_far_above_km():
    # S0/Kapp = 1e6: exp((S0 − V t)/Kapp) overflows a double; the Wright omega form does
    # not. The rate is V·S0/(Kapp + S0) = 1 − 1e-6 per s and stays so over 10 s; P = S0 − S
    # loses the digits below eps·S0 ≈ 2e-10.
    product = closed_form_product(np.array([0.0, 10.0]), 1e6, 1.0, 1.0)
    assert product == pytest.approx([0.0, 10.0 * (1 - 1e-6)], abs=1e-8)


def test_sensitivities_match_finite_differences():
    # The solver's Jacobian is built from these; central differences are the reference.
    t, s0, v, k = np.linspace(0.0, 3000.0, 31), 5.0, 2e-3, 10.0
    d_v, d_k = closed_form_sensitivities(t, s0, v, k)
    h = 1e-6
    assert d_v == pytest.approx((closed_form_product(t, s0, v * (1 + h), k)
                                 - closed_form_product(t, s0, v * (1 - h), k)) / (2 * h * v),
                                rel=1e-5, abs=1e-9)
    assert d_k == pytest.approx((closed_form_product(t, s0, v, k * (1 + h))
                                 - closed_form_product(t, s0, v, k * (1 - h))) / (2 * h * k),
                                rel=1e-5, abs=1e-9)


@pytest.mark.parametrize("substrate, inhibitor", [(2.0, 0.0), (10.0, 4.0), (100.0, 8.0)])
def test_mixed_law_curve_matches_mass_action(substrate, inhibitor):
    m = Mechanism(kic=1.0, kiu=5.0)
    t = np.linspace(20.0, 600.0, 30)
    expected = product_curve(m, substrate, inhibitor)(t)[6]
    params = {"vmax": m.vmax, "km": m.km, "kic": m.kic, "kiu": m.kiu}
    got = product_formed("mixed", params, t, np.full_like(t, substrate),
                         np.full_like(t, inhibitor))
    assert got == pytest.approx(expected, rel=MASS_ACTION_RTOL)


def test_ode_route_matches_closed_form_and_product_inhibition_equation():
    t = np.tile(np.linspace(0.0, 3000.0, 16), 2)
    s = np.repeat([5.0, 50.0], 16)
    i = np.repeat([0.0, 2.0], 16)
    params = {"vmax": 2e-3, "km": 10.0, "kic": 1.0}
    closed = product_formed("competitive", params, t, s, i)
    ode = product_formed("competitive", params, t, s, i, integration="ode")
    assert ode == pytest.approx(closed, rel=ODE_RTOL, abs=1e-10)
    kp = 3.0
    inhibited = product_formed("none", {"vmax": 2e-3, "km": 10.0}, t, s, i, product_ki=kp)
    p, s0 = inhibited[t > 0], s[t > 0]
    implicit = (1 - 10.0 / kp) * p + 10.0 * (1 + s0 / kp) * np.log(s0 / (s0 - p))
    assert implicit / 2e-3 == pytest.approx(t[t > 0], rel=1e-5)


@pytest.mark.parametrize("model, constants, substrate", [
    ("competitive", {"kic": 1.0}, 5.0),
    ("mixed", {"kic": 1.0, "kiu": 5.0}, 5.0),
    ("noncompetitive", {"ki": 2.0}, 5.0),
    ("competitive_si", {"kic": 1.0, "ksi": 30.0}, 50.0),
])
def test_product_inhibited_curve_matches_mass_action(model, constants, substrate):
    # Reference: the mass-action ODE of tests/grid_ode.py with E + P <-> EP, exclusive
    # with ES and EI, so P/Kp adds to the free-enzyme term, km*(1 + I/kic + P/Kp).
    # At S = 5, I = 2, Kp = 1 uM a product that scaled km*(1 + I/kic) as a whole
    # (km*(1 + P/Kp)*(1 + I/kic)) gives 4 % less product by the last read (competitive).
    tied = {"kic": constants.get("kic", constants.get("ki", np.inf)),
            "kiu": constants.get("kiu", constants.get("ki", np.inf))}
    m = Mechanism(**tied, ksi=constants.get("ksi", np.inf), kp=1.0)
    t = np.linspace(20.0, 600.0, 30)
    expected = product_curve(m, substrate, 2.0)(t)[6]
    params = {"vmax": m.vmax, "km": m.km, **constants}
    got = product_formed(model, params, t, np.full_like(t, substrate),
                         np.full_like(t, 2.0), product_ki=1.0)
    assert got == pytest.approx(expected, rel=MASS_ACTION_RTOL)


@pytest.fixture(scope="session")
def mixed_plate():
    return plate(Mechanism(kic=1.0, kiu=5.0), 11)


@pytest.fixture(scope="session")
def mixed_fit(mixed_plate):
    reads, plate_map = mixed_plate
    return ik.fit_progress_curves(reads, plate_map, **COLUMNS)


def test_mass_action_plate_gives_the_mechanism_and_covers_the_truth(mixed_fit):
    assert mixed_fit.verdict == "mixed"
    assert mixed_fit.integration == CLOSED_FORM
    params = mixed_fit.models["mixed"].params
    for name, truth in {"kic": 1e-6, "kiu": 5e-6, "alpha": 5.0, "km": 1e-5,
                        "vmax": 2e-9}.items():
        assert params.loc[name, "ci_low"] <= truth <= params.loc[name, "ci_high"], name
    assert mixed_fit.models["mixed"].n_params == 4 + 96  # the offsets are counted
    # The read noise is 3 % of the signal (tests/grid_ode.py): the variance model finds it.
    assert mixed_fit.variance_model[1] == pytest.approx(0.03, rel=0.15)


def test_progress_intervals_are_narrower_than_the_rate_path(mixed_plate, mixed_fit):
    # One plate; the many-plate comparison (coverage too) is benchmarks/reads_study.py.
    reads, plate_map = mixed_plate
    rates = ik.initial_rates(reads, plate_map, **COLUMNS).table
    by_rates = ik.fit_mechanisms(rates, substrate="substrate_uM",
                                 inhibitor="inhibitor_uM").models["mixed"].params
    whole = mixed_fit.models["mixed"].params
    for name in ("kic", "kiu"):
        assert (whole.loc[name, "ci_high"] / whole.loc[name, "ci_low"]
                < by_rates.loc[name, "ci_high"] / by_rates.loc[name, "ci_low"]), name


def test_result_is_frozen_and_reports(mixed_fit):
    with pytest.raises(AttributeError):
        mixed_fit.verdict = "none"
    with pytest.raises((TypeError, ValueError)):
        mixed_fit.comparison.iloc[0, 0] = 1.0
    text = mixed_fit.summary()
    assert "Lambert W" in text and "mixed" in text
    frame = mixed_fit.to_frame()
    assert set(frame["compound"]) == {"CPD"}
    assert frame.loc[frame["parameter"] == "kic", "unit"].iloc[0] == "M"
    assert "<div>" in mixed_fit._repr_html_()
    assert list(mixed_fit.constants().index) == ["kic", "kiu", "alpha"]


def test_several_compounds_need_a_choice(mixed_plate):
    reads, plate_map = mixed_plate
    two = plate_map.assign(compound=np.where(plate_map.index % 2, "A", "B"))
    with pytest.raises(ik.DataError, match="compound_id"):
        ik.fit_progress_curves(reads, two, **COLUMNS)


def test_product_must_share_the_substrate_scale(mixed_plate):
    reads, plate_map = mixed_plate
    with pytest.raises(ik.DataError, match="conversion"):
        ik.fit_progress_curves(reads, plate_map, substrate="substrate_uM",
                               inhibitor="inhibitor_uM")


@pytest.mark.parametrize("option, value", [("integration", "exact"), ("product_ki", -1.0),
                                           ("intervals", "bootstrap"), ("models", ["none"])])
def test_bad_options_are_refused_before_any_work(option, value):
    with pytest.raises(ik.DataError, match=option):
        ik.fit_progress_curves(pd.DataFrame(), pd.DataFrame(), **{option: value})


def test_product_inhibition_is_integrated_and_said(mixed_plate):
    reads, plate_map = mixed_plate
    small = plate_map[plate_map["substrate_uM"].isin([5.0, 50.0])
                      & plate_map["inhibitor_uM"].isin([0.0, 2.0, 8.0])]
    fit = ik.fit_progress_curves(reads[reads["well"].isin(small["well"])], small,
                                 models=("none", "competitive", "mixed"), intervals="wald",
                                 product_ki=1e4, **COLUMNS)
    assert fit.integration.startswith(ODE) and "product inhibition" in fit.integration
    assert "product inhibition" in fit.summary()


def test_cli_stage_fits_each_compound_and_keeps_the_bad_one(mixed_plate, tmp_path):
    from inhibkin.cli import main
    from inhibkin.inputs.io import read_table

    reads, plate_map = mixed_plate
    good = plate_map["substrate_uM"].isin([3.5, 10.0, 50.0])
    # Compound BAD has one inhibitor level only: refused alone, the other still fitted.
    bad = plate_map["substrate_uM"].isin([5.0, 20.0]) & (plate_map["inhibitor_uM"] == 0.0)
    chosen = plate_map[good | bad].assign(compound=np.where(bad[good | bad], "BAD", "CPD-1"))
    reads[reads["well"].isin(chosen["well"])].to_csv(tmp_path / "reads.csv", index=False)
    chosen.to_csv(tmp_path / "map.csv", index=False)
    status = main(["progress", str(tmp_path / "reads.csv"), "--plate-map",
                   str(tmp_path / "map.csv"), "--signal", "signal", "--intervals", "wald",
                   "--chromophore", "NADH", "-o", str(tmp_path / "out.csv"), "--params",
                   str(tmp_path / "params.csv"), "--quiet"])
    assert status == 1
    out = read_table(tmp_path / "out.csv").set_index("compound")
    assert sorted(out.index) == ["BAD", "CPD-1"]
    assert out.loc["BAD", "verdict"] == "failed" and "inhibitor" in out.loc["BAD", "reason"]
    assert out.loc["CPD-1", "verdict"] != "failed"
    params = read_table(tmp_path / "params.csv")
    assert set(params["compound"]) == {"CPD-1"} and "unit" in params


def test_no_inhibitor_is_called_none_and_a_missing_read_is_no_trouble():
    reads, plate_map = plate(Mechanism(), 5)  # kic = kiu = inf: no inhibition at all
    reads = reads.copy()
    reads.loc[7, "signal"] = np.nan  # one read lost: the well keeps its other reads
    fit = ik.fit_progress_curves(reads, plate_map, intervals="wald", **COLUMNS)
    assert fit.verdict == "none"
    assert len(fit.data) == len(reads) - 1 and len(fit.offsets) == 96
