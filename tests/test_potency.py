"""Potency: 4PL fits, Cheng–Prusoff by mechanism, Morrison tight binding, potency table."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from inhibkin.core.logistic import logistic4
from inhibkin.core.models import MODELS
from inhibkin.errors import DataError, InhibkinError
from inhibkin.potency.conversion import cheng_prusoff, ic50_from_ki
from inhibkin.potency.curve import (
    FLAGS,
    DoseResponseFit,
    dose_response_from_estimates,
    fit_dose_response,
)
from inhibkin.potency.morrison import fit_morrison, morrison
from inhibkin.potency.table import EngineFitter, potency_table

DATA = Path(__file__).parent / "data"

# Tolerances, named once.
CURVE_FIT_RTOL = 1e-6       # agreement of estimates with scipy's curve_fit (the ask)
CURVE_FIT_SE_RTOL = 1e-5    # standard errors: same formula, different Jacobian arithmetic
ROUND_TRIP_RTOL = 0.01      # Ki recovered from a noise-free IC50 (the ask)
MORRISON_RTOL = 1e-6        # Ki,app recovered from noise-free Morrison data (the ask)
EXACT = 1e-12               # algebraic identities
PROFILE_SSR_RTOL = 1e-5     # SSR at a profile limit vs its target (limit located to 1e-7)
MONTE_CARLO_RTOL = 0.03     # delta-method SE vs 20 000 draws (sampling error ~0.5 %)


def _digits(value, published: str):
    """|value − published| ≤ half a unit in the published string's last place."""
    decimals = len(published.split(".")[1]) if "." in published else 0
    return abs(value - float(published)) <= 0.5 * 10.0 ** (-decimals) * (1 + 1e-9)


# --------------------------------------------------------------------------- 4PL

def test_dnase_run1_published_four_parameter_fit():
    # Davidian & Giltinan (1995), Nonlinear Models for Repeated Measurement Data, §5.2.4
    # (R datasets::DNase, run 1): density = A + (B − A)/(1 + exp((xmid − log conc)/scal)).
    # On x = log10(conc): top = B, bottom = A, log_ic50 = xmid/ln 10, hill = −1/scal;
    # the SEs map by the delta method, exact for Wald SEs at the optimum.
    df = pd.read_csv(DATA / "dnase_run1.csv")
    fit = fit_dose_response(df["conc"], df["density"])
    p = fit.params
    ln10 = np.log(10)
    hill = p.loc["hill", "estimate"]
    got = {
        "A": (p.loc["bottom", "estimate"], p.loc["bottom", "se"]),
        "B": (p.loc["top", "estimate"], p.loc["top", "se"]),
        "xmid": (p.loc["log_ic50", "estimate"] * ln10, p.loc["log_ic50", "se"] * ln10),
        "scal": (-1 / hill, p.loc["hill", "se"] / hill**2),
    }
    published = {"A": ("-0.007897", "0.017200"), "B": ("2.377239", "0.109516"),
                 "xmid": ("1.507403", "0.102080"), "scal": ("1.062579", "0.056996")}
    for name, (est, se) in got.items():
        assert _digits(est, published[name][0]), (name, est)
        assert _digits(se, published[name][1]), (name, se)
    assert _digits(fit.residual_se, "0.01981")
    assert _digits(fit.ssr, "0.00470725")
    assert fit.dof == 12
    # Same source, Hill form: EC50 = exp(xmid) = 4.51499, Hill slope 1/scal = 0.941107.
    assert _digits(fit.ic50, "4.51499") and _digits(-hill, "0.941107")
    assert "rising" in fit.flags


def _noisy_curve(rng, *, top=100.0, bottom=3.0, ic50=0.2, hill=1.2, sd=3.0):
    conc = np.repeat(np.logspace(-3, 1.5, 10), 3)
    y = logistic4(np.log10(conc), top, bottom, np.log10(ic50), hill) + rng.normal(0, sd,
                                                                                 conc.size)
    return conc, y


@pytest.mark.parametrize("fixed", [{}, {"fix_top": 100.0}, {"fix_top": 100.0, "fix_bottom": 0.0}])
def test_estimates_agree_with_scipy_curve_fit(rng, fixed):
    # Independent least squares: scipy.optimize.curve_fit (MINPACK, numerical Jacobian).
    conc, y = _noisy_curve(rng)
    fit = fit_dose_response(conc, y, intervals="wald", **fixed)
    x = np.log10(conc)
    top, bottom = fixed.get("fix_top"), fixed.get("fix_bottom")
    names = [n for n, f in (("top", top), ("bottom", bottom)) if f is None] + ["log_ic50",
                                                                              "hill"]

    def model(x, *free):
        values = dict(zip(names, free))
        return logistic4(x, values.get("top", top), values.get("bottom", bottom),
                         values["log_ic50"], values["hill"])

    p0 = {"top": 90.0, "bottom": 10.0, "log_ic50": 0.0, "hill": 1.0}
    est, cov = optimize.curve_fit(model, x, y, p0=[p0[n] for n in names], xtol=1e-14,
                                  ftol=1e-14, maxfev=20000)
    for name, value, var in zip(names, est, np.diag(cov)):
        assert fit.params.loc[name, "estimate"] == pytest.approx(value, rel=CURVE_FIT_RTOL)
        assert fit.params.loc[name, "se"] == pytest.approx(np.sqrt(var), rel=CURVE_FIT_SE_RTOL)
    for name in ("top", "bottom"):
        if name not in names:
            assert fit.params.loc[name, "fixed"]


def test_profile_interval_limits_sit_on_the_likelihood_ratio_target(rng):
    # Bates & Watts (1988), §6.1: the profile limit is where the re-optimised SSR equals
    # SSR·(1 + F(level; 1, n − k)/(n − k)). Re-check independently with curve_fit.
    conc, y = _noisy_curve(rng, sd=6.0)
    fit = fit_dose_response(conc, y)
    x = np.log10(conc)
    n, k = len(y), 4
    target = fit.ssr * (1 + stats.f.ppf(0.95, 1, n - k) / (n - k))
    est = fit.estimates
    for limit in fit.params.loc["log_ic50", ["ci_low", "ci_high"]]:
        def model(x, top, bottom, hill, limit=limit):
            return logistic4(x, top, bottom, limit, hill)

        p, _ = optimize.curve_fit(model, x, y, p0=[est["top"], est["bottom"], est["hill"]],
                                  xtol=1e-14, ftol=1e-14, maxfev=20000)
        ssr = float(np.sum((y - model(x, *p)) ** 2))
        assert ssr == pytest.approx(target, rel=PROFILE_SSR_RTOL)
    ic = fit.params.loc["ic50"]
    assert ic["ci_low"] < fit.ic50 < ic["ci_high"]
    # On the IC50 scale the interval is asymmetric (log-scale interval, exponentiated).
    assert ic["ci_high"] - fit.ic50 > fit.ic50 - ic["ci_low"]
    pic = fit.params.loc["pic50"]
    assert pic["ci_low"] == pytest.approx(-np.log10(ic["ci_high"]), rel=EXACT)


def test_result_is_frozen_and_reports(rng):
    conc, y = _noisy_curve(rng)
    fit = fit_dose_response(conc, y, compound="CPD-1")
    with pytest.raises(AttributeError):
        fit.ssr = 0.0
    frame = fit.to_frame()
    assert set(frame["parameter"]) == {"top", "bottom", "ic50", "log_ic50", "pic50", "hill"}
    assert (frame["compound"] == "CPD-1").all()
    assert "CPD-1" in fit.summary() and "IC50" in fit.summary()
    assert "<table" in fit._repr_html_()
    np.testing.assert_allclose(fit.predict(conc), fit.fitted, rtol=EXACT)


# --------------------------------------------------------------------------- flags

def test_curve_not_reaching_half_activity_reports_a_bound():
    conc = np.logspace(-2, np.log10(30), 8)
    y = 100 / (1 + conc / 300.0)  # IC50 = 300, tested up to 30
    fit = fit_dose_response(conc, y, fix_top=100, fix_bottom=0, intervals="wald")
    assert "ic50_above_range" in fit.flags
    assert str(fit.ic50_bound) == "> 30"
    assert np.isnan(fit.ic50) and np.isnan(fit.pic50)
    assert fit.reported_ic50 == "> 30"
    assert not fit.params.loc["ic50", "determined"]


def test_partial_inhibitor_never_halving_activity_is_a_bound():
    # Midpoint inside the range, but activity only falls to 70 %.
    conc = np.logspace(-3, 1, 10)
    y = logistic4(np.log10(conc), 100.0, 70.0, -1.5, 1.0)
    fit = fit_dose_response(conc, y, intervals="wald")
    assert {"partial_efficacy", "ic50_above_range"} <= set(fit.flags)
    assert str(fit.ic50_bound) == "> 10"


@pytest.mark.parametrize("hill,flag", [(3.0, "steep_hill"), (0.35, "shallow_hill")])
def test_hill_outside_half_to_two_is_flagged(hill, flag):
    # Hill slopes outside 0.5–2 suggest aggregation or non-1:1 binding (common practice).
    conc = np.logspace(-4, 2, 13)
    y = logistic4(np.log10(conc), 100.0, 0.0, -1.0, hill)
    fit = fit_dose_response(conc, y, intervals="wald")
    assert fit.hill == pytest.approx(hill, rel=1e-8)
    assert flag in fit.flags and flag in FLAGS


def test_too_few_points_above_the_midpoint():
    conc = np.logspace(-3, 0, 8)  # IC50 = 0.5: only 0.37... above? one level above it
    y = 100 / (1 + conc / 0.5)
    fit = fit_dose_response(conc, y, intervals="wald")
    assert "few_points_above" in fit.flags
    assert "few_points_below" not in fit.flags


# --------------------------------------------------------------------------- bad input

def test_bad_input_names_compound_column_and_value():
    conc = np.array([0.0, 0.1, 1.0, 10.0, 100.0])
    with pytest.raises(DataError, match=r"compound 'X-1'.*column 'conc', row 0 \(value 0\.0\)"
                                        r".*must be > 0"):
        fit_dose_response(conc, [100, 90, 50, 10, 2], compound="X-1")
    with pytest.raises(DataError, match=r"compound 'X-2'.*column 'conc', row 1 \(value -1\.0\)"):
        fit_dose_response([1, -1, 2, 3, 4], [1, 2, 3, 4, 5], compound="X-2")
    with pytest.raises(DataError, match=r"compound 'X-3'.*column 'response' \(value 7\.0\): "
                                        r"all responses are equal"):
        fit_dose_response(np.logspace(-2, 2, 6), [7.0] * 6, compound="X-3")
    with pytest.raises(DataError, match=r"compound 'X-4'.*column 'conc' \(value 5\.0\): "
                                        r"a single concentration"):
        fit_dose_response([5.0] * 6, [1, 2, 3, 4, 5, 6], compound="X-4")
    with pytest.raises(DataError, match=r"column 'response', row 2 \(value 'abc'\): not a num"):
        fit_dose_response([1, 2, 3, 4, 5], [1, 2, "abc", 4, 5])
    with pytest.raises(InhibkinError, match="intervals"):
        fit_dose_response([1, 2, 3, 4, 5], [5, 4, 3, 2, 1], intervals="bootstrap")


# --------------------------------------------------------------------------- Cheng–Prusoff

def test_cheng_prusoff_test_vectors():
    # Mixed-inhibition relation IC50 = (Km + S)/(Km/Kic + S/Kiu) (Cortés, Cascante,
    # Cárdenas & Cornish-Bowden 2001, Biochem. J. 357:263–268); competitive case of
    # Cheng & Prusoff (1973), Biochem. Pharmacol. 22:3099–3108. Km = 10, S = 20:
    # competitive Kic = 1 -> IC50 = 3; uncompetitive Kiu = 1 -> 1.5; mixed Kic = 1,
    # Kiu = 4 -> 2.0; noncompetitive IC50 = Ki.
    km, s = 10.0, 20.0
    assert ic50_from_ki(1.0, s, km, "competitive") == pytest.approx(3.0, rel=EXACT)
    assert ic50_from_ki(1.0, s, km, "uncompetitive") == pytest.approx(1.5, rel=EXACT)
    assert ic50_from_ki(1.0, s, km, "mixed", alpha=4.0) == pytest.approx(2.0, rel=EXACT)
    assert ic50_from_ki(1.0, s, km, "noncompetitive") == pytest.approx(1.0, rel=EXACT)
    assert cheng_prusoff(3.0, s, km, "competitive") == pytest.approx(1.0, rel=EXACT)
    assert cheng_prusoff(1.5, s, km, "uncompetitive") == pytest.approx(1.0, rel=EXACT)
    assert cheng_prusoff(2.0, s, km, "mixed", alpha=4.0) == pytest.approx(1.0, rel=EXACT)
    assert cheng_prusoff(0.7, s, km, "noncompetitive") == pytest.approx(0.7, rel=EXACT)
    # Cheng & Prusoff (1973): Ki = IC50/(1 + S/Km) as printed, at other values.
    ic50, s2, km2 = 0.83, 3.0, 0.4
    assert cheng_prusoff(ic50, s2, km2) == pytest.approx(ic50 / (1 + s2 / km2), rel=EXACT)
    assert cheng_prusoff(ic50, s2, km2, "uncompetitive") == pytest.approx(
        ic50 / (1 + km2 / s2), rel=EXACT)
    # Mixed with alpha = 1 is noncompetitive; large alpha tends to competitive.
    assert cheng_prusoff(ic50, s2, km2, "mixed", alpha=1.0) == pytest.approx(ic50, rel=EXACT)
    assert cheng_prusoff(ic50, s2, km2, "mixed", alpha=1e12) == pytest.approx(
        cheng_prusoff(ic50, s2, km2), rel=1e-9)


def _percent_activity(mechanism, s, km, ki, alpha, conc):
    law = MODELS[mechanism]
    constants = [ki, alpha * ki] if mechanism == "mixed" else [ki]
    v = law.rate(np.full_like(conc, s), conc, 10.0, km, *constants)
    v0 = law.rate(np.array([s]), np.array([0.0]), 10.0, km, *constants)
    return 100 * v / v0


@pytest.mark.parametrize("mechanism,alpha", [("competitive", None), ("uncompetitive", None),
                                             ("noncompetitive", None), ("mixed", 4.0),
                                             ("mixed", 0.3)])
@pytest.mark.parametrize("s_over_km", [0.2, 1.0, 5.0])
def test_round_trip_rate_law_to_ki(mechanism, alpha, s_over_km):
    # Rate laws of inhibkin.core.models (DESIGN.md, "The models") -> dose-response at one S
    # -> 4PL -> Cheng–Prusoff -> the Ki used (the constant binding free enzyme, or Kiu
    # for uncompetitive). Noise-free.
    km, ki = 2.0, 0.05
    s = s_over_km * km
    expected_ic50 = ic50_from_ki(ki, s, km, mechanism, alpha)
    conc = np.geomspace(expected_ic50 / 300, expected_ic50 * 300, 12)
    y = _percent_activity(mechanism, s, km, ki, alpha, conc)
    fit = fit_dose_response(conc, y, intervals="wald")
    recovered = cheng_prusoff(fit.ic50, s, km, mechanism, alpha)
    assert recovered == pytest.approx(ki, rel=ROUND_TRIP_RTOL)
    assert abs(recovered / ki - 1) < 1e-8  # measured; the 1 % above is the bound
    assert fit.hill == pytest.approx(1.0, rel=1e-8)


def test_vectorised_over_arrays_series_and_mechanisms():
    df = pd.DataFrame({"ic50": [3.0, 1.5, 2.0, 0.5], "s": 20.0, "km": 10.0,
                       "mechanism": ["competitive", "uncompetitive", "mixed",
                                     "noncompetitive"],
                       "alpha": [np.nan, np.nan, 4.0, np.nan]}, index=list("abcd"))
    ki = cheng_prusoff(df["ic50"], df["s"], df["km"], df["mechanism"], df["alpha"])
    assert isinstance(ki, pd.Series) and list(ki.index) == list("abcd")
    np.testing.assert_allclose(ki.to_numpy(), [1.0, 1.0, 1.0, 0.5], rtol=EXACT)
    arr = cheng_prusoff(np.array([3.0, 6.0]), 20.0, 10.0)
    np.testing.assert_allclose(arr, [1.0, 2.0], rtol=EXACT)
    back = ic50_from_ki(ki, df["s"], df["km"], df["mechanism"], df["alpha"])
    np.testing.assert_allclose(back.to_numpy(), df["ic50"].to_numpy(), rtol=EXACT)
    assert np.isnan(cheng_prusoff(np.array([np.nan, 3.0]), 20.0, 10.0)[0])


def test_cheng_prusoff_bad_input():
    with pytest.raises(DataError, match=r"column 'km', row 1 \(value -2\.0\)"):
        cheng_prusoff([1.0, 1.0], 1.0, [1.0, -2.0])
    with pytest.raises(DataError, match=r"column 'mechanism', row 0 \(value 'allosteric'\)"):
        cheng_prusoff(1.0, 1.0, 1.0, "allosteric")
    with pytest.raises(DataError, match=r"column 'alpha'.*needs alpha"):
        cheng_prusoff(1.0, 1.0, 1.0, "mixed")
    with pytest.raises(DataError, match=r"column 's', row 0 \(value 0\.0\).*S = 0"):
        cheng_prusoff(1.0, 0.0, 1.0, "uncompetitive")


def test_delta_method_against_monte_carlo():
    # The delta-method SE of ln Ki against Monte Carlo with log-normal IC50 and Km
    # (20 000 draws, seed fixed): an independent check of the propagation.
    ic50, ic50_se, s, km, km_se = 0.4, 0.06, 5.0, 2.0, 0.5
    out = cheng_prusoff(ic50, s, km, "competitive", ic50_se=ic50_se, km_se=km_se)
    rng = np.random.default_rng(11)
    n = 20_000
    draws_ic50 = ic50 * np.exp(rng.normal(0, ic50_se / ic50, n))
    draws_km = km * np.exp(rng.normal(0, km_se / km, n))
    log_ki = np.log(draws_ic50 / (1 + s / draws_km))
    se_log = out["ki_se"].iloc[0] / out["ki"].iloc[0]
    assert se_log == pytest.approx(np.std(log_ki, ddof=1), rel=MONTE_CARLO_RTOL)
    assert out["ki"].iloc[0] == pytest.approx(ic50 / (1 + s / km), rel=EXACT)
    z = stats.norm.ppf(0.975)
    assert out["ki_high"].iloc[0] == pytest.approx(out["ki"].iloc[0] * np.exp(z * se_log),
                                                   rel=EXACT)


# --------------------------------------------------------------------------- Morrison

def test_morrison_recovers_ki_app_and_ic50_relation():
    # Morrison (1969), Biochim. Biophys. Acta 185:269–286, quadratic; [E] comparable
    # to Ki,app. IC50 = Ki,app + [E]/2 (Copeland, Evaluation of Enzyme Inhibitors in
    # Drug Discovery; from memory) — checked here by solving v = v0/2 numerically.
    enzyme, ki_app, v0 = 1.0, 0.5, 100.0
    conc = np.r_[0.0, np.geomspace(0.01, 100, 12)]
    v = morrison(conc, v0, ki_app, enzyme)
    fit = fit_morrison(conc, v, enzyme=enzyme, intervals="wald")
    assert fit.ki_app == pytest.approx(ki_app, rel=MORRISON_RTOL)
    half = optimize.brentq(lambda i: morrison(i, fit.params.loc["v0", "estimate"], fit.ki_app,
                                              enzyme) - fit.params.loc["v0", "estimate"] / 2,
                           1e-6, 1e3, xtol=1e-14)
    assert fit.ic50 == pytest.approx(half, rel=1e-10)
    assert fit.ic50 == pytest.approx(fit.ki_app + enzyme / 2, rel=EXACT)


def test_morrison_quadratic_as_printed_and_its_limit():
    # The form as printed (reference README): v/v0 = 1 − [(E+I+K) − sqrt((E+I+K)² − 4EI)]/(2E).
    e, k = 0.8, 0.3
    i = np.geomspace(0.01, 50, 9)
    printed = 1 - ((e + i + k) - np.sqrt((e + i + k) ** 2 - 4 * e * i)) / (2 * e)
    np.testing.assert_allclose(morrison(i, 1.0, k, e), printed, rtol=1e-10)
    # E -> 0: the classical hyperbola 1/(1 + I/K).
    np.testing.assert_allclose(morrison(i, 1.0, k, 1e-12), 1 / (1 + i / k), rtol=1e-9)


def test_morrison_converts_by_mechanism_and_fits_enzyme(rng):
    enzyme, ki_app = 2.0, 0.4
    conc = np.repeat(np.r_[0.0, np.geomspace(0.05, 50, 10)], 2)
    v = morrison(conc, 100.0, ki_app, enzyme) + rng.normal(0, 0.5, conc.size)
    fit = fit_morrison(conc, v, enzyme=enzyme, s=3.0, km=1.0, mechanism="competitive")
    ki_row = fit.params.loc["ki"]
    assert fit.ki == pytest.approx(cheng_prusoff(fit.ki_app, 3.0, 1.0), rel=EXACT)
    assert ki_row["ci_low"] < fit.ki < ki_row["ci_high"]
    assert fit.ki_app == pytest.approx(ki_app, rel=0.1)
    titrated = fit_morrison(conc, v, enzyme=1.0, fit_enzyme=True)
    assert titrated.enzyme == pytest.approx(enzyme, rel=0.1)
    assert not titrated.params.loc["enzyme", "fixed"]
    assert "Morrison" in fit.summary() and "<table" in fit._repr_html_()


def test_morrison_bad_input():
    with pytest.raises(DataError, match=r"compound 'T'.*column 'enzyme'.*must be > 0"):
        fit_morrison([0, 1, 2, 3], [4, 3, 2, 1], enzyme=0.0, compound="T")
    with pytest.raises(DataError, match=r"column 'conc', row 1 \(value -1\.0\)"):
        fit_morrison([0, -1, 2, 3], [4, 3, 2, 1], enzyme=1.0)


# --------------------------------------------------------------------------- potency table

def _plate_table(rng, compounds, *, plate_of=None, noise=2.0, control_sd=(2.0, 2.0),
                 conc=None):
    """A tidy dose-response table: 4 max and 4 min wells per plate, duplicates."""
    conc = np.geomspace(1e-3, 30, 10) if conc is None else conc
    plate_of = plate_of or {c: "P1" for c in compounds}
    rows = []
    for p in sorted(set(plate_of.values())):
        for _ in range(4):
            rows.append({"plate": p, "role": "max", "compound": None, "inhibitor": np.nan,
                         "signal": 1000 + rng.normal(0, control_sd[0] * 10),
                         "substrate": np.nan})
            rows.append({"plate": p, "role": "min", "compound": None, "inhibitor": np.nan,
                         "signal": 100 + rng.normal(0, control_sd[1] * 10),
                         "substrate": np.nan})
    for name, ic50 in compounds.items():
        for c in conc:
            for _ in range(2):
                activity = 1 / (1 + c / ic50)
                rows.append({"plate": plate_of[name], "role": "sample", "compound": name,
                             "inhibitor": c, "signal": 100 + 900 * activity
                             + rng.normal(0, noise * 10), "substrate": 2.0})
    return pd.DataFrame(rows)


def test_potency_table_one_row_per_compound_with_failures_isolated(rng):
    df = _plate_table(rng, {"A": 0.05, "B": 0.8, "inactive": 1e4})
    bad = pd.DataFrame([{"plate": "P1", "role": "sample", "compound": "Z", "inhibitor": c,
                         "signal": 500.0, "substrate": 2.0} for c in (0.1, 1, 3, 10, 30)])
    df = pd.concat([df, bad], ignore_index=True)
    table = potency_table(df, km=1.0, mechanisms={"B": ("mixed", 2.0)})
    t = table.table.set_index("compound")
    assert list(t.index) == ["A", "B", "inactive", "Z"]
    assert t.loc["Z", "status"] == "failed"
    assert "compound 'Z'" in t.loc["Z", "reason"] and "all responses are equal" in \
        t.loc["Z", "reason"]
    assert (t.loc[["A", "B", "inactive"], "status"] == "ok").all()
    # Competitive default: Ki = IC50/(1 + S/Km), S = 2, Km = 1 (Cheng & Prusoff 1973).
    assert t.loc["A", "ki"] == pytest.approx(t.loc["A", "ic50"] / 3, rel=EXACT)
    assert t.loc["A", "ic50"] == pytest.approx(0.05, rel=0.1)
    assert t.loc["A", "mechanism_source"] == "default"
    assert t.loc["B", "mechanism"] == "mixed" and t.loc["B", "mechanism_source"] == \
        "mechanism fit"
    assert t.loc["B", "ki"] == pytest.approx(
        cheng_prusoff(t.loc["B", "ic50"], 2.0, 1.0, "mixed", 2.0), rel=EXACT)
    assert t.loc["A", "ki_low"] < t.loc["A", "ki"] < t.loc["A", "ki_high"]
    assert t.loc["A", "pki"] == pytest.approx(-np.log10(t.loc["A", "ki"]), rel=EXACT)
    assert t.loc["inactive", "ic50_bound"] == "> 30" and np.isnan(t.loc["inactive", "ki"])
    assert t.loc["inactive", "ki_bound"] == "> 10"
    assert set(table.fits) == {"A", "B", "inactive"}
    assert isinstance(table.fits["A"], DoseResponseFit)
    assert "Z" in table.summary() and "<table" in table._repr_html_()
    assert len(table.failed) == 1


def test_low_z_prime_plate_flags_its_compounds(rng):
    good = _plate_table(rng, {"A": 0.1})
    noisy = _plate_table(rng, {"B": 0.1}, plate_of={"B": "P2"}, control_sd=(15.0, 15.0))
    table = potency_table(pd.concat([good, noisy], ignore_index=True), km=1.0)
    t = table.table.set_index("compound")
    assert table.plates.flagged == ("P2",)
    assert "low_z_prime" in t.loc["B", "flags"] and "low_z_prime" not in t.loc["A", "flags"]


def test_plate_without_controls_fails_only_its_compounds(rng):
    df = _plate_table(rng, {"A": 0.1, "B": 0.2}, plate_of={"A": "P1", "B": "P2"})
    df = df[~((df["plate"] == "P2") & (df["role"] == "min"))]
    t = potency_table(df, km=1.0).table.set_index("compound")
    assert t.loc["A", "status"] == "ok"
    assert t.loc["B", "status"] == "failed"
    assert "plate 'P2' has 0 'min' control wells" in t.loc["B", "reason"]


def test_table_level_bad_input_raises(rng):
    df = _plate_table(rng, {"A": 0.1})
    with pytest.raises(DataError, match=r"column 'role'.*no 'max' control wells"):
        potency_table(df[df["role"] != "max"], km=1.0)
    with pytest.raises(DataError, match=r"column 'conc_uM': column is missing"):
        potency_table(df, concentration="conc_uM", km=1.0)
    with pytest.raises(DataError, match=r"default_mechanism.*'uncompetitiv'"):
        potency_table(df, km=1.0, default_mechanism="uncompetitiv")


def test_tight_binding_flag_and_morrison_option(rng):
    enzyme = 0.05
    conc = np.geomspace(1e-3, 30, 12)
    rows = []
    for _ in range(4):
        rows += [{"plate": "P1", "role": "max", "compound": None, "inhibitor": np.nan,
                  "signal": 100.0 + rng.normal(0, 0.3), "substrate": np.nan},
                 {"plate": "P1", "role": "min", "compound": None, "inhibitor": np.nan,
                  "signal": rng.normal(0, 0.3), "substrate": np.nan}]
    for c in conc:
        rows.append({"plate": "P1", "role": "sample", "compound": "tight", "inhibitor": c,
                     "signal": morrison(c, 100.0, 0.03, enzyme) + rng.normal(0, 0.3),
                     "substrate": 1.0})
    df = pd.DataFrame(rows)
    flagged = potency_table(df, km=1.0, enzyme=enzyme).table.iloc[0]
    assert "tight_binding" in flagged["flags"] and flagged["ki_method"] == "cheng-prusoff"
    fixed = potency_table(df, km=1.0, enzyme=enzyme, tight_binding="morrison")
    row = fixed.table.iloc[0]
    assert row["ki_method"] == "morrison"
    # Ki,app = 0.03 at S = Km, competitive: Ki = 0.015.
    assert row["ki"] == pytest.approx(0.015, rel=0.1)
    assert fixed.morrison_fits["tight"].ki == pytest.approx(row["ki"], rel=EXACT)


def test_fitter_can_be_swapped_for_prefitted_estimates(rng):
    # The hook a batched engine uses: estimates found elsewhere, wald intervals here.
    df = _plate_table(rng, {"A": 0.05, "B": 0.5})
    reference = potency_table(df, km=1.0, intervals="wald")

    def outside(curves, *, fix_top, fix_bottom, intervals, level, class_options):
        out = {}
        for name, (conc, y) in curves.items():
            est = reference.fits[name].estimates
            out[name] = dose_response_from_estimates(conc, y, est, compound=name, level=level,
                                                     **class_options)
        return out

    swapped = potency_table(df, km=1.0, intervals="wald", fitter=outside)
    cols = ["ic50", "ic50_low", "ic50_high", "ki", "hill", "flags"]
    pd.testing.assert_frame_equal(swapped.table[cols], reference.table[cols])


def test_engine_fitter_gives_the_lmfit_answers_and_hands_back_unsettled_curves(rng):
    # Curves of the batched engine (tested against curve_fit and published 4PL fits in
    # test_engine.py) through the potency table: the same table as the lmfit loop. The
    # inactive compound (noise around 100 %) and the one whose IC50 lies past the top
    # concentration (30) are fitted again by the engine as the lmfit path fits them
    # (within its bounds, from its start); only one that fit does not finish (the
    # engine then gives no estimate) is handed to the lmfit path, and recorded.
    compounds = {"A": 0.05, "B": 0.5, "C": 2.0, "inactive": 1e4, "past range": 300.0}
    df = _plate_table(rng, compounds)
    reference = potency_table(df, km=1.0, intervals="wald")
    fitter = EngineFitter()
    engine = potency_table(df, km=1.0, intervals="wald", fitter=fitter)
    assert len(fitter.refitted) <= 1 and set(fitter.refitted) <= {"inactive", "past range"}
    for name in compounds:
        assert engine.fits[name].message.startswith("batched engine") == (
            name not in fitter.refitted), name
    text = ["compound", "status", "ic50_bound", "ki_bound", "flags", "reason"]
    pd.testing.assert_frame_equal(engine.table[text], reference.table[text])
    numbers = [c for c in engine.table.columns if c not in text
               and engine.table[c].dtype.kind == "f"]
    # Estimates to the issue's 1e-6; their Wald limits carry the standard errors' 1e-5.
    np.testing.assert_allclose(engine.table[numbers].to_numpy(dtype=float),
                               reference.table[numbers].to_numpy(dtype=float),
                               rtol=CURVE_FIT_SE_RTOL, equal_nan=True)
    for name in ("A", "B", "C"):
        np.testing.assert_allclose(engine.fits[name].params["estimate"],
                                   reference.fits[name].params["estimate"], rtol=CURVE_FIT_RTOL)
    # Profile intervals: every curve on the lmfit path, none counted as refitted.
    profile_fitter = EngineFitter()
    profiled = potency_table(df, km=1.0, intervals="profile", fitter=profile_fitter)
    assert profile_fitter.refitted == []
    assert all(not f.message.startswith("batched engine") for f in profiled.fits.values())


@pytest.mark.parametrize("seed", [5, 6])
def test_inactive_curves_report_the_same_efficacy_on_both_paths(seed):
    # Noise around full activity and curves whose midpoint lies far past the top dose:
    # inactive on both paths, with the efficacy read off the data (the same text),
    # the same flags; the engine settles them itself (the lmfit path only takes a curve
    # whose engine fit stopped at its iteration limit, with no estimate).
    rng = np.random.default_rng(seed)
    compounds = {f"flat {k}": ic50 for k, ic50 in enumerate([1e4, 3e4, 1e5, 1e6, 3e3, 1e3])}
    compounds["active"] = 0.5
    df = _plate_table(rng, compounds)
    reference = potency_table(df, km=1.0, intervals="wald")
    fitter = EngineFitter()
    engine = potency_table(df, km=1.0, intervals="wald", fitter=fitter)
    inactive = [n for n, f in reference.fits.items() if f.curve_class == "inactive"]
    assert len(inactive) >= 5
    settled = [n for n in inactive if engine.fits[n].message.startswith("batched engine")]
    assert len(settled) >= len(inactive) - 1 and len(fitter.refitted) <= 1
    for name in inactive:
        ours, theirs = engine.fits[name], reference.fits[name]
        assert ours.curve_class == "inactive"
        assert ours.class_reason == theirs.class_reason
        assert "removed at the highest concentration" in ours.class_reason
        assert ours.flags == theirs.flags and "not_converged" not in ours.flags
    text = ["compound", "status", "ic50_bound", "ki_bound", "flags", "reason"]
    pd.testing.assert_frame_equal(engine.table[text], reference.table[text])


def test_estimates_from_elsewhere_follow_the_direction_of_the_fit(rng):
    conc = np.repeat(np.logspace(-2, 2, 9), 2)
    y = 100 / (1 + conc / 0.7) + rng.normal(0, 2, conc.size)
    for direction in ("falling", "any"):
        ref = fit_dose_response(conc, y, direction=direction, intervals="wald")
        again = dose_response_from_estimates(conc, y, ref.estimates, direction=direction)
        assert again.flags == ref.flags
        pd.testing.assert_frame_equal(again.params, ref.params, rtol=EXACT)
    with pytest.raises(InhibkinError, match="direction"):
        dose_response_from_estimates(conc, y, ref.estimates, direction="down")


def test_noise_on_an_inactive_compound_is_a_bound_when_only_falling_curves_are_allowed(rng):
    conc = np.repeat(np.logspace(-2, 2, 9), 2)
    y = 100 + rng.normal(0, 3, conc.size)
    fit = fit_dose_response(conc, y, direction="falling")
    assert str(fit.ic50_bound) == "> 100" and np.isnan(fit.ic50)
    assert fit.estimates["hill"] >= 0 and fit.params.loc["hill", "ci_low"] >= 0
    # A flat curve has no Hill slope to report (issue 12, item 1).
    assert fit.curve_class == "inactive" and np.isnan(fit.hill)


def test_engine_settles_flat_curves_whose_bounded_fit_stops_short():
    # Noise around full activity: on the flat SSR surface the engine's bounded fit often
    # runs out of iterations or stalls. Where it stopped, the curve is classified (in
    # arrays, the rule of core/curve_class.py); inactive there, it is settled by the
    # engine, and the table says what the lmfit path says (an inactive curve reports
    # only its IC50 bound and the efficacy read off its data).
    rng = np.random.default_rng(0)
    compounds = {f"flat {k}": 1e5 for k in range(20)}
    df = _plate_table(rng, compounds)
    reference = potency_table(df, km=1.0, intervals="wald")
    fitter = EngineFitter()
    engine = potency_table(df, km=1.0, intervals="wald", fitter=fitter)
    stopped = [n for n, f in engine.fits.items()
               if f.message.startswith("batched engine: failed")]
    assert stopped, "no bounded engine fit stopped short: the case is not exercised"
    assert fitter.refitted == []
    assert all(engine.fits[n].curve_class == "inactive" for n in stopped)
    assert all("not_converged" not in engine.fits[n].flags for n in stopped)
    text = ["compound", "status", "curve_class", "ic50_bound", "ki_bound", "flags", "reason"]
    pd.testing.assert_frame_equal(engine.table[text], reference.table[text])
