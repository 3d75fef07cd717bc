"""Time-dependent inhibition against a mass-action simulation (tests/td_ode.py).

Every plate is a solve_ivp (LSODA, rtol 1e-10) integration of the elementary steps, read
as a signal with Gaussian noise; each ODE is solved once per session (functools.cache).
Units: µM and s. The many-seed coverage study is benchmarks/time_dependent_study.py.
"""

import dataclasses

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from td_ode import Scheme, plate_reads, preincubated, product_curve

import inhibkin as ik
from inhibkin.errors import DataError
from inhibkin.rates.time_dependence import time_dependent_grid
from inhibkin.time_dependent import plots
from inhibkin.time_dependent.kobs import kobs_arrays
from inhibkin.time_dependent.preincubation import ic50_at_time
from inhibkin.time_dependent.schemes import SCHEMES, progress_curve

TIMES = tuple(np.linspace(0.0, 3600.0, 61))
SUBSTRATE = 100.0
INHIBITORS = (0.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0)
NOISE = 0.001                      # µM, about 0.1 % of the control's 3600-s product
# KI ≈ 1 µM, kinact 0.002/s; little enzyme, so the controls convert only 0.3 % of S (the
# progress-curve equation assumes no depletion; docs/time_dependent.md measures 1.6 %).
COVALENT = Scheme(kon=10.0, koff=10.0, k5=0.002, enzyme=1e-6)
COVALENT_NOISE = 2e-4      # µM, the same read signal-to-noise as NOISE at 5× the enzyme
SLOW_ONE_STEP = Scheme(kon=2e-4, koff=2e-4)                 # Ki 1 µM, slow both ways
SLOW_TWO_STEP = Scheme(kon=10.0, koff=10.0, k5=0.003, k6=0.0003)
RAPID = Scheme(kon=10.0, koff=10.0)

# Relative tolerances, named where they are used.
EXACT_RTOL = 1e-6
ODE_KOBS_RTOL = 0.03     # substrate depletion and the ES steady state
IC50_SHAPE_RTOL = 0.12   # a 4PL only approximates 100·exp(−kobs·t) (preincubation.py notes)


def ki_two_step(scheme):
    """KI of the two-step scheme, (koff + k5)/kon (Copeland; the steady-state KI)."""
    return (scheme.koff + scheme.k5) / scheme.kon


def reads_of(scheme, seed, inhibitors=INHIBITORS):
    noise = COVALENT_NOISE if scheme == COVALENT else NOISE
    return plate_reads(scheme, SUBSTRATE, inhibitors, TIMES, noise_sd=noise, seed=seed)


@pytest.fixture(scope="module")
def covalent_fit():
    return ik.fit_time_dependent(reads_of(COVALENT, 11), substrate=SUBSTRATE, km=COVALENT.km,
                                 compound="COV-1")


def test_progress_curve_limits_are_vi_and_vs():
    # Exact algebra of the progress curve (Morrison & Walsh 1988): slope vi at t = 0,
    # slope vs as t → ∞.
    vi, vs, k = 2.0, 0.3, 0.01
    h = 1e-4
    start = (progress_curve(h, 0.0, vi, vs, k) - progress_curve(0.0, 0.0, vi, vs, k)) / h
    late = (progress_curve(1e5 + h, 0, vi, vs, k) - progress_curve(1e5, 0, vi, vs, k)) / h
    assert start == pytest.approx(vi, rel=1e-4)
    assert late == pytest.approx(vs, rel=1e-4)
    assert progress_curve(50.0, 1.0, vi, vs, 0.0) == pytest.approx(1.0 + vi * 50.0,
                                                                   rel=EXACT_RTOL)


def test_kobs_at_ki_app_is_half_kinact_in_the_ode():
    # Exact algebra: kobs = kinact·I/(KI,app + I) is kinact/2 at I = KI,app (common
    # practice); the ODE of the elementary steps, with KI,app = KI(1 + S/Km), agrees.
    ki_app = ki_two_step(COVALENT) * (1 + SUBSTRATE / COVALENT.km)
    assert SCHEMES["two_step"].function(ki_app, 0.002, ki_app) == pytest.approx(0.001,
                                                                                rel=EXACT_RTOL)
    product = product_curve(COVALENT, SUBSTRATE, ki_app, TIMES)
    t = np.asarray(TIMES)[None, :]
    fitted = kobs_arrays(t, product[None, :], np.ones_like(t, dtype=bool))
    assert fitted["kobs"].iloc[0] == pytest.approx(COVALENT.k5 / 2, rel=ODE_KOBS_RTOL)


def test_kobs_per_well_matches_scipy_curve_fit_and_covers_the_truth():
    reads = reads_of(COVALENT, 3)
    fit = ik.fit_time_dependent(reads, global_fit=False)
    ki_app = ki_two_step(COVALENT) * (1 + SUBSTRATE / COVALENT.km)
    for _, row in fit.kobs[fit.kobs["inhibitor"] > 0].iterrows():
        well = reads[reads["well"] == row["well"]]
        # Independent general-purpose library: scipy's curve_fit on the same well.
        popt, _ = optimize.curve_fit(lambda t, p0, vi, k: progress_curve(t, p0, vi, 0.0, k),
                                     well["time"], well["signal"],
                                     p0=[0.0, row["vi"] * 1.1, row["kobs"] * 0.8])
        assert row["kobs"] == pytest.approx(popt[2], rel=1e-5)
        truth = COVALENT.k5 * row["inhibitor"] / (ki_app + row["inhibitor"])
        assert row["kobs_low"] / (1 + ODE_KOBS_RTOL) < truth < row["kobs_high"] * (
            1 + ODE_KOBS_RTOL)


# A few seeds per claim (the many-seed study is benchmarks/time_dependent_study.py): with
# 95 % intervals covering at the nominal rate, 8 or more of 10 cover with probability
# 0.988 (binomial).
SEEDS = tuple(range(11, 21))
MIN_COVERED = 8


@pytest.fixture(scope="module")
def covalent_fits():
    return [ik.fit_time_dependent(reads_of(COVALENT, seed), substrate=SUBSTRATE,
                                  km=COVALENT.km) for seed in SEEDS]


def test_covalent_two_step_recovers_kinact_ki_and_kinact_over_ki(covalent_fits):
    # Truth from the elementary steps (KI = (koff + kinact)/kon; S/Km corrected).
    truth = {"k5": COVALENT.k5, "ki": ki_two_step(COVALENT),
             "k5_over_ki": COVALENT.k5 / ki_two_step(COVALENT)}
    assert all(fit.scheme == "two_step" for fit in covalent_fits)
    for route in ("constants", "global_constants"):
        for name, value in truth.items():
            covered = sum(getattr(fit, route).loc[name, "ci_low"] < value
                          < getattr(fit, route).loc[name, "ci_high"] for fit in covalent_fits)
            assert covered >= MIN_COVERED, (route, name, covered)


ONE_STEP_COVALENT = Scheme(kon=2e-5, koff=0.0)     # kobs = kon·[I], no first complex
# Every scheme the global fit covers: (ODE scheme, irreversible, the scheme to be called).
GLOBAL_CASES = {"covalent two-step": (COVALENT, True, "two_step"),
                "covalent one-step": (ONE_STEP_COVALENT, True, "one_step"),
                "slow one-step": (SLOW_ONE_STEP, False, "one_step"),
                "slow two-step": (SLOW_TWO_STEP, False, "two_step")}


@pytest.mark.parametrize("case", list(GLOBAL_CASES))
def test_global_fit_and_kobs_route_agree_on_every_scheme(case):
    scheme, irreversible, called = GLOBAL_CASES[case]
    fit = ik.fit_time_dependent(reads_of(scheme, 11), irreversible=irreversible,
                                substrate=SUBSTRATE, km=scheme.km)
    assert fit.scheme == called
    c, g = fit.constants, fit.global_constants
    assert list(g.index) == list(c.index)        # the same scheme's constants
    for name in c.index:
        # Each route's estimate inside the other route's interval.
        assert g.loc[name, "ci_low"] < c.loc[name, "estimate"] < g.loc[name, "ci_high"], name
        assert c.loc[name, "ci_low"] < g.loc[name, "estimate"] < c.loc[name, "ci_high"], name


def test_one_step_ki_interval_is_fieller_against_statsmodels():
    """Fieller's interval of koff/kon (Fieller 1954, J. R. Stat. Soc. B 16:175): at each
    end r the t statistic of koff − r·kon = 0 in the weighted line kobs = koff + kon·[I]
    equals the t quantile. The line refitted by statsmodels WLS (weights 1/SE²)."""
    import statsmodels.api as sm
    from scipy import stats

    fit = ik.fit_time_dependent(reads_of(SLOW_ONE_STEP, 5), irreversible=False)
    wells = fit.kobs[(fit.kobs["inhibitor"] > 0) & np.isfinite(fit.kobs["kobs_low"])]
    se = wells["kobs"] * wells["log_kobs_se"]
    wls = sm.WLS(wells["kobs"].to_numpy(), sm.add_constant(wells["inhibitor"].to_numpy()),
                 weights=1 / se.to_numpy() ** 2).fit()
    koff, kon = wls.params
    c = fit.constants
    assert c.loc["ki", "estimate"] == pytest.approx(koff / kon, rel=1e-5)
    tq = stats.t.ppf(0.975, wls.df_resid)
    for end in ("ci_low", "ci_high"):
        r = c.loc["ki", end]
        t_value = float(np.asarray(wls.t_test(np.array([[1.0, -r]])).tvalue).ravel()[0])
        assert abs(t_value) == pytest.approx(tq, rel=1e-4)


@pytest.fixture(scope="module")
def slow_one_step_fits():
    return [ik.fit_time_dependent(reads_of(SLOW_ONE_STEP, seed), irreversible=False,
                                  substrate=SUBSTRATE, km=SLOW_ONE_STEP.km, global_fit=False)
            for seed in SEEDS]


def test_one_step_ki_covers_koff_over_kon_on_ode_plates(slow_one_step_fits):
    # Ki = koff/kon of the elementary step (td_ode.Scheme.ki), S/Km corrected.
    covered = sum(f.constants.loc["ki", "ci_low"] < SLOW_ONE_STEP.ki
                  < f.constants.loc["ki", "ci_high"] for f in slow_one_step_fits)
    assert covered >= MIN_COVERED, covered
    table = ik.rank_time_dependent(reads_of(SLOW_ONE_STEP, 5).assign(compound="S-1"),
                                   irreversible=False, substrate=SUBSTRATE,
                                   km=SLOW_ONE_STEP.km)
    row = table.iloc[0]
    assert row["ki_star_low"] < SLOW_ONE_STEP.ki < row["ki_star_high"]
    assert row["score"] == pytest.approx(-np.log10(row["ki_star"]))


def test_one_step_slow_binding_is_called_one_step_with_kon_koff_and_residence_time():
    fit = ik.fit_time_dependent(reads_of(SLOW_ONE_STEP, 5), irreversible=False,
                                substrate=SUBSTRATE, km=SLOW_ONE_STEP.km)
    assert fit.scheme == "one_step"
    c = fit.constants
    assert c.loc["kon", "ci_low"] < SLOW_ONE_STEP.kon < c.loc["kon", "ci_high"]
    assert c.loc["koff", "ci_low"] < SLOW_ONE_STEP.koff < c.loc["koff", "ci_high"]
    tau = 1 / SLOW_ONE_STEP.koff
    assert c.loc["residence_time", "ci_low"] < tau < c.loc["residence_time", "ci_high"]


def test_two_step_slow_binding_gives_ki_star_and_residence_time():
    fit = ik.fit_time_dependent(reads_of(SLOW_TWO_STEP, 7), irreversible=False,
                                substrate=SUBSTRATE, km=SLOW_TWO_STEP.km)
    assert fit.scheme == "two_step"
    c = fit.constants
    s = SLOW_TWO_STEP
    ki_star = s.ki * s.k6 / (s.k5 + s.k6)      # Copeland: Ki* = Ki·k6/(k5 + k6)
    assert c.loc["ki_star", "ci_low"] < ki_star < c.loc["ki_star", "ci_high"]
    assert c.loc["residence_time", "ci_low"] < 1 / s.k6 < c.loc["residence_time", "ci_high"]


def test_rates_stage_flags_slow_binding_but_not_rapid_equilibrium():
    def rates(scheme):
        reads = reads_of(scheme, 2, inhibitors=(0.0, 0.0, 5.0, 20.0, 50.0, 200.0))
        plate_map = reads.drop_duplicates("well")[["well", "substrate", "inhibitor"]].assign(
            plate=1, compound="X")
        res = ik.initial_rates(reads.assign(plate=1)[["plate", "well", "time", "signal"]],
                               plate_map, method="curve")
        return res.table.set_index("inhibitor")["flags"].str.contains("time_dependent")

    slow, rapid = rates(SLOW_ONE_STEP), rates(RAPID)
    assert slow[slow.index >= 20].all() and not slow[slow.index == 0].any()
    assert not rapid.any()
    # The hook a grid fit asks before reporting a steady-state Ki.
    flags = slow.map({True: "time_dependent", False: ""})
    assert time_dependent_grid(pd.DataFrame({"inhibitor": slow.index, "flags": flags}))
    assert not time_dependent_grid(pd.DataFrame({"inhibitor": rapid.index, "flags": ""}))


def test_preincubation_ic50_shift_gives_kinact_and_ki():
    rng = np.random.default_rng(20261202)
    conc = np.geomspace(0.003, 30.0, 10)
    rows = []
    for tp in (1800.0, 3600.0, 5400.0, 7200.0):
        for i in conc:
            active = preincubated(COVALENT, float(i), tp)[1]   # read after jump dilution
            rows.append({"inhibitor": i, "preincubation": tp,
                         "activity": 100 * active + rng.normal(0, 1.0)})
    fit = ik.fit_preincubation(pd.DataFrame(rows), compound="COV-1")
    assert fit.time_dependent and fit.flags == ("ic50_shift",)
    c = fit.constants
    assert c.loc["kinact", "ci_low"] < COVALENT.k5 < c.loc["kinact", "ci_high"]
    assert c.loc["ki", "ci_low"] < ki_two_step(COVALENT) < c.loc["ki", "ci_high"]
    assert c.loc["kinact_over_ki", "ci_low"] < COVALENT.k5 / ki_two_step(COVALENT) < c.loc[
        "kinact_over_ki", "ci_high"]
    # The relation IC50(t) = KI·ln2/(kinact·t − ln2) (derived in
    # inhibkin/time_dependent/preincubation.py) at the true constants matches each IC50
    # read by the 4PL, within the 4PL's shape error (5–8 % measured on these curves).
    predicted = ic50_at_time(fit.ic50s["time"], COVALENT.k5, ki_two_step(COVALENT))
    np.testing.assert_allclose(fit.ic50s["ic50"], predicted, rtol=IC50_SHAPE_RTOL)


def test_rapid_reversible_inhibitor_shows_no_ic50_shift():
    rng = np.random.default_rng(20261203)
    conc = np.geomspace(0.03, 300.0, 10)
    rows = [{"inhibitor": i, "preincubation": tp,
             "activity": 100 * preincubated(RAPID, float(i), tp)[0] + rng.normal(0, 1.0)}
            for tp in (1800.0, 3600.0, 7200.0) for i in conc]
    fit = ik.fit_preincubation(pd.DataFrame(rows))
    assert not fit.time_dependent and fit.flags == ()


def test_results_are_immutable_and_report_themselves(covalent_fit):
    fit = covalent_fit
    with pytest.raises(dataclasses.FrozenInstanceError):
        fit.scheme = "one_step"
    assert "two_step" in fit.summary() and "kinact/KI" in fit.summary()
    assert "<table" in fit._repr_html_()
    frame = fit.to_frame()
    assert set(frame["route"]) == {"two_step", "one_step", "global"}
    assert frame.loc[frame["route"] == "two_step", "chosen"].all()
    assert fit.kinact_over_ki == pytest.approx(fit.constants.loc["k5_over_ki", "estimate"])


def test_figures_return_axes(covalent_fit):
    for draw in (plots.progress_curves, plots.kobs_against_inhibitor):
        ax = draw(covalent_fit)
        assert ax.get_title() and ax.lines


def test_bad_input_names_column_and_value():
    reads = reads_of(COVALENT, 1).copy()
    reads.loc[reads.index[5], "inhibitor"] = 7.0
    with pytest.raises(DataError, match="'inhibitor'.*more than one inhibitor"):
        ik.fit_time_dependent(reads)
    with pytest.raises(DataError, match="give both substrate and km"):
        ik.fit_time_dependent(reads_of(COVALENT, 1), substrate=100.0)
    few = reads_of(COVALENT, 1, inhibitors=(0.0, 5.0, 20.0))
    with pytest.raises(DataError, match="at least 4 inhibited wells"):
        ik.fit_time_dependent(few)


def test_cli_stage_isolates_a_bad_compound(tmp_path):
    from inhibkin.cli import EXIT_SOME_FAILED, main

    good = reads_of(COVALENT, 13).assign(compound="COV-1")
    bad = reads_of(COVALENT, 13, inhibitors=(0.0, 5.0)).assign(compound="cov 2 (bad)")
    source = tmp_path / "reads.csv"
    pd.concat([good, bad]).to_csv(source, index=False)
    out, kobs = tmp_path / "constants.csv", tmp_path / "kobs.csv"
    status = main(["inactivation", str(source), "-o", str(out), "--kobs", str(kobs),
                   "--substrate-conc", "100", "--km", str(COVALENT.km), "--quiet"])
    assert status == EXIT_SOME_FAILED
    table = pd.read_csv(out)
    assert list(table["compound"]) == ["COV-1", "cov 2 (bad)"]
    assert list(table["status"]) == ["ok", "failed"]
    assert "at least 4 inhibited wells" in table["error"].iloc[1]
    assert table["k5_over_ki_low"].iloc[0] < table["k5_over_ki"].iloc[0]
    assert set(pd.read_csv(kobs)["compound"]) == {"COV-1"}


def test_inactivation_stage_reads_substrate_and_km_with_their_units(tmp_path):
    # The other stages take concentrations with their units; so does this one, and two
    # bare numbers of one unit give the same constants (only S/Km enters; common practice).
    from inhibkin.cli import main

    source = tmp_path / "reads.csv"
    reads_of(COVALENT, 13).assign(compound="COV-1").to_csv(source, index=False)
    tables = []
    for substrate, km in (("100uM", f"{COVALENT.km:g}uM"), ("100", f"{COVALENT.km:g}")):
        out = tmp_path / f"constants_{len(tables)}.csv"
        assert main(["inactivation", str(source), "-o", str(out), "--substrate-conc",
                     substrate, "--km", km, "--quiet"]) == 0
        tables.append(pd.read_csv(out))
    pd.testing.assert_frame_equal(tables[0], tables[1])
    assert main(["inactivation", str(source), "-o", str(tmp_path / "x.csv"),
                 "--substrate-conc", "100uM", "--km", "10", "--quiet"]) == 2
    assert not (tmp_path / "x.csv").exists()


def test_inactivation_stage_carries_substrate_depletion_as_the_python_fit_does(tmp_path):
    # --product-per-signal is the CLI's product_per_signal: the stage's constants are the
    # Python fit's, and carrying depletion moves them (tests/test_time_dependent_depletion.py
    # checks the depleting curve itself against the mass-action ODE).
    from inhibkin.cli import main

    reads = reads_of(COVALENT, 13)
    source = tmp_path / "reads.csv"
    reads.assign(compound="COV-1").to_csv(source, index=False)
    out, plain = tmp_path / "carried.csv", tmp_path / "plain.csv"
    base = ["--substrate-conc", "100", "--km", f"{COVALENT.km:g}", "--quiet"]
    assert main(["inactivation", str(source), "-o", str(out), "--product-per-signal", "1",
                 *base]) == 0
    assert main(["inactivation", str(source), "-o", str(plain), *base]) == 0
    fit = ik.fit_time_dependent(reads, substrate=100.0, km=COVALENT.km, product_per_signal=1.0)
    carried = pd.read_csv(out)
    assert carried["k5_over_ki"].iloc[0] == pytest.approx(
        fit.constants.loc["k5_over_ki", "estimate"], rel=1e-9)
    assert carried["k5_over_ki"].iloc[0] != pd.read_csv(plain)["k5_over_ki"].iloc[0]
    # With units on some options and not on others the stage refuses before any work.
    assert main(["inactivation", str(source), "-o", str(tmp_path / "x.csv"),
                 "--substrate-conc", "100uM", "--km", "10uM", "--product-per-signal", "1",
                 "--quiet"]) == 2
    assert not (tmp_path / "x.csv").exists()
