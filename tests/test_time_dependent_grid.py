"""A grid fit on time-dependent wells says so (rule 6 of inhibkin.core.compare).

Reads from the mass-action ODE of tests/td_ode.py (solve_ivp, LSODA, rtol 1e-10, each
curve solved once per session), through the rates stage (``initial_rates``, which flags
wells ``time_dependent``), into the mechanism fit, the campaign and the CLI. Units: µM, s.
"""

import numpy as np
import pandas as pd
import pytest
from td_ode import Scheme, product_curve

import inhibkin as ik
from inhibkin.core.compare import TIME_DEPENDENT, TIME_DEPENDENT_REASON

TIMES = tuple(np.linspace(0.0, 3600.0, 61))
SUBSTRATES = (5.0, 10.0, 20.0, 50.0, 100.0)          # Km of the scheme is 10 µM
INHIBITORS = (0.0, 0.0, 2.0, 5.0, 20.0, 50.0)
NOISE = 0.001                                        # µM read noise, as test_time_dependent
# One-step binding competitive with substrate, Ki = koff/kon = 1 µM in both: slow (binding
# half-time about an hour at 1 µM) and rapid equilibrium.
SLOW = Scheme(kon=2e-4, koff=2e-4)
RAPID = Scheme(kon=10.0, koff=10.0)
UNITS = {"substrate": "uM", "inhibitor": "uM"}


def _plate(scheme, compound, seed):
    rng = np.random.default_rng(seed)
    reads, wells = [], []
    for a, s in enumerate(SUBSTRATES):
        for b, i in enumerate(INHIBITORS):
            well = f"{'ABCDE'[a]}{b + 1}"
            signal = product_curve(scheme, s, i, TIMES) + rng.normal(0.0, NOISE, len(TIMES))
            reads.append(pd.DataFrame({"plate": compound, "well": well, "time": TIMES,
                                       "signal": signal}))
            wells.append({"plate": compound, "well": well, "substrate": s, "inhibitor": i,
                          "compound": compound})
    return pd.concat(reads, ignore_index=True), pd.DataFrame(wells)


@pytest.fixture(scope="module")
def rates():
    """The rates stage's table of one slow-binding and one rapid-equilibrium plate."""
    (slow_reads, slow_map), (rapid_reads, rapid_map) = (_plate(SLOW, "SLOW-1", 1),
                                                        _plate(RAPID, "RAPID 2", 2))
    result = ik.initial_rates(pd.concat([slow_reads, rapid_reads]),
                              pd.concat([slow_map, rapid_map]), method="curve")
    return result.table


def _compound(table, name):
    return table[table["compound"] == name]


def test_rates_stage_flags_the_slow_plate_only(rates):
    flagged = rates["flags"].str.split(";").apply(lambda f: "time_dependent" in f)
    inhibited = rates["inhibitor"] > 0
    slow = (rates["compound"] == "SLOW-1").to_numpy()
    assert flagged[slow & inhibited].mean() >= 0.9
    assert not flagged[~slow].any()
    assert not flagged[~inhibited].any()


def test_grid_fit_on_flagged_wells_reports_no_steady_state_ki(rates):
    slow = ik.fit_mechanisms(_compound(rates, "SLOW-1"))
    assert slow.verdict == TIME_DEPENDENT
    assert slow.reason.startswith(TIME_DEPENDENT_REASON)
    assert "inhibkin inactivation" in slow.summary()
    assert slow.constants().empty
    # The same rates without the flags: with the lack-of-fit test off they are read as a
    # steady-state grid with a Ki far from the true Ki = koff/kon = 1 µM (td_ode.Scheme),
    # the error the verdict prevents; with it on (the default) the grid is `inadequate`
    # (its residuals run in patterns along S) and no constant is a result either.
    unflagged = _compound(rates, "SLOW-1").drop(columns="flags")
    steady = ik.fit_mechanisms(unflagged, lack_of_fit_alpha=0)
    assert steady.verdict != TIME_DEPENDENT
    assert steady.constants()["estimate"].min() > 5.0
    assert ik.fit_mechanisms(unflagged).verdict == "inadequate"



def test_linear_rates_of_the_slow_plate_are_time_dependent():
    """The default rates method (linear) flags the slow plate too, and its grid is called
    time_dependent (the curves are the fixture's, solved once per session); the rapid
    plate keeps no flag."""
    slow = ik.initial_rates(*_plate(SLOW, "SLOW-1", 1)).table
    rapid = ik.initial_rates(*_plate(RAPID, "RAPID 2", 2)).table
    assert slow["flags"][slow["inhibitor"] > 0].str.contains("time_dependent").mean() >= 0.9
    assert not rapid["flags"].str.contains("time_dependent").any()
    assert ik.fit_mechanisms(slow).verdict == TIME_DEPENDENT
    assert ik.fit_mechanisms(rapid).verdict != TIME_DEPENDENT

def test_rapid_equilibrium_grid_keeps_its_ki(rates):
    fit = ik.fit_mechanisms(_compound(rates, "RAPID 2"))
    assert fit.verdict == "competitive"
    low, high = fit.constants().loc["kic", ["ci_low", "ci_high"]]
    assert low < RAPID.ki < high          # Ki = koff/kon (td_ode.Scheme)


@pytest.mark.parametrize("engine", ["lmfit", "batched"])
def test_campaign_does_not_rank_a_time_dependent_grid(rates, engine):
    campaign = ik.fit_campaign(rates, units=UNITS, engine=engine, quiet=True)
    table = campaign.ranking.set_index("compound")
    assert list(campaign.ranking["compound"]) == ["RAPID 2", "SLOW-1"]
    slow, rapid = table.loc["SLOW-1"], table.loc["RAPID 2"]
    assert slow["status"] == "time_dependent" and slow["verdict"] == TIME_DEPENDENT
    assert slow["reason"].startswith(TIME_DEPENDENT_REASON)
    assert pd.isna(slow["rank"]) and np.isnan(slow["ki_M"]) and np.isnan(slow["pki"])
    assert rapid["status"] == "determined" and rapid["rank"] == 1
    assert campaign.counts["time_dependent"] == 1


def test_cli_rank_reads_the_rates_stage_flags(rates, tmp_path):
    from inhibkin.cli import main

    grid = tmp_path / "rates.csv"
    rates.to_csv(grid, index=False)
    out = tmp_path / "ranked.csv"
    status = main(["rank", "--grid", str(grid), "-o", str(out), "--units", "substrate=uM",
                   "--units", "inhibitor=uM", "--quiet"])
    assert status == 0
    table = pd.read_csv(out, dtype={"compound": str}).set_index("compound")
    assert table.loc["SLOW-1", "status"] == "time_dependent"
    assert table.loc["SLOW-1", "reason"].startswith(TIME_DEPENDENT_REASON)
    assert table.loc["RAPID 2", "status"] == "determined"


# Covalent two-step schemes (KI = (koff + k5)/kon ≈ 1 µM; Copeland), kinact/KI 2000 and
# 500 /M/s: the stronger must rank first, a compound with too few wells fails alone.
STRONG = Scheme(kon=10.0, koff=10.0, k5=0.002, enzyme=1e-6)
WEAK = Scheme(kon=10.0, koff=10.0, k5=0.0005, enzyme=1e-6)
COVALENT_INHIBITORS = (0.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0)


def _reads(scheme, compound, inhibitors, seed):
    from td_ode import plate_reads

    return plate_reads(scheme, 100.0, inhibitors, TIMES, noise_sd=2e-4,
                       seed=seed).assign(compound=compound)


def test_time_dependent_ranking_is_its_own_table_by_kinact_over_ki():
    reads = pd.concat([_reads(WEAK, "cov-weak", COVALENT_INHIBITORS, 3),
                       _reads(STRONG, "007", COVALENT_INHIBITORS, 4),
                       _reads(STRONG, "cov bad", (0.0, 5.0), 5)])
    table = ik.rank_time_dependent(reads, substrate=100.0, km=STRONG.km)
    assert list(table["compound"]) == ["007", "cov-weak", "cov bad"]    # exact input text
    assert list(table["status"]) == ["determined", "determined", "failed"]
    assert list(table["rank"].iloc[:2]) == [1, 2] and pd.isna(table["rank"].iloc[2])
    assert set(table["metric"]) == {"log10(kinact/KI)"}
    for name, scheme in (("007", STRONG), ("cov-weak", WEAK)):
        row = table.set_index("compound").loc[name]
        truth = scheme.k5 / ((scheme.koff + scheme.k5) / scheme.kon)    # µM⁻¹ s⁻¹
        assert row["kinact_over_ki_low"] < truth < row["kinact_over_ki_high"]
        assert row["score"] == pytest.approx(np.log10(row["kinact_over_ki"]))
    assert "at least 4 inhibited wells" in table["reason"].iloc[2]


def test_cli_rank_writes_the_time_dependent_section_apart(rates, tmp_path, capsys):
    from inhibkin.cli import EXIT_OK, EXIT_SOME_FAILED, main

    grid, reads = tmp_path / "rates.csv", tmp_path / "reads.csv"
    rates.to_csv(grid, index=False)
    pd.concat([_reads(STRONG, "007", COVALENT_INHIBITORS, 4),
               _reads(STRONG, "cov bad", (0.0, 5.0), 5)]).to_csv(reads, index=False)
    out, covalent = tmp_path / "ranked.csv", tmp_path / "covalent.csv"
    status = main(["rank", "--grid", str(grid), "-o", str(out), "--units", "substrate=uM",
                   "--units", "inhibitor=uM", "--time-dependent", str(reads),
                   "--time-dependent-output", str(covalent), "--quiet"])
    assert status == EXIT_SOME_FAILED          # "cov bad" failed, alone
    table = pd.read_csv(covalent, dtype={"compound": str})
    assert list(table["compound"]) == ["007", "cov bad"]
    assert list(table["status"]) == ["determined", "failed"]
    assert "pki" not in table.columns and "score" not in pd.read_csv(out).columns
    status = main(["rank", "--grid", str(grid), "-o", str(out), "--time-dependent", str(reads)])
    assert status != EXIT_OK
    assert "give --time-dependent and --time-dependent-output together" in capsys.readouterr().err


def test_report_shows_the_time_dependent_ranking_as_its_own_section(rates, tmp_path):
    campaign = ik.fit_campaign(rates, units=UNITS, quiet=True)
    covalent = ik.rank_time_dependent(pd.concat([
        _reads(STRONG, "007", COVALENT_INHIBITORS, 4),
        _reads(WEAK, "cov-weak", COVALENT_INHIBITORS, 3)]))
    path = ik.report(campaign, tmp_path / "report.html", time_dependent=covalent,
                     detail="none", quiet=True)
    text = path.read_text()
    ranked, apart = text.split('id="ranking-table"')[1], text.split('id="time-dependent"')[1]
    section = apart.split("</section>")[0]
    assert "ranked apart" in section and "log10(kinact/KI)" in section
    assert section.index(">007<") < section.index(">cov-weak<")
    assert ">007<" not in ranked.split("</table>")[0]


def test_cli_report_takes_the_time_dependent_reads(rates, tmp_path):
    from inhibkin.cli import EXIT_OK, main

    grid, reads = tmp_path / "rates.csv", tmp_path / "reads.csv"
    rates.to_csv(grid, index=False)
    _reads(STRONG, "007", COVALENT_INHIBITORS, 4).to_csv(reads, index=False)
    out = tmp_path / "report.html"
    status = main(["report", "--grid", str(grid), "-o", str(out), "--units", "substrate=uM",
                   "--units", "inhibitor=uM", "--time-dependent", str(reads),
                   "--detail", "none", "--quiet"])
    assert status == EXIT_OK
    section = out.read_text().split('id="time-dependent"')[1].split("</section>")[0]
    assert ">007<" in section


@pytest.mark.parametrize("n_reads", [11, 20])
def test_linear_wells_are_flagged_at_about_the_stated_level(n_reads):
    """Null case: a constant rate (product linear in time, no depletion) with Gaussian read
    noise. The test referred the ratio of two slopes, each from 3–6 reads, to the normal
    distribution: at 11 reads 5.8 % of such wells were flagged at the 0.1 % level (every
    grid of 60+ inhibited wells then lost its Ki). With Student's t and Welch–Satterthwaite
    degrees of freedom the rate is near the level (binomial: 3000 wells at 0.1 % give more
    than 15 with probability < 1e-6)."""
    from inhibkin.rates.time_dependence import LEVEL, time_dependence

    rng = np.random.default_rng(3)
    n = 4000
    t = np.tile(np.linspace(0.0, 600.0, n_reads), (n, 1))
    y = 0.05 + 1e-4 * t + rng.normal(0.0, 0.002, t.shape)
    inhibitor = np.where(np.arange(n) % 4 == 0, 0.0, 10.0)
    flagged = time_dependence(t, y, np.ones_like(t, bool), substrate=np.full(n, 20.0),
                              inhibitor=inhibitor, group=np.zeros(n))["time_dependent"]
    assert LEVEL == 1e-3 and flagged[inhibitor > 0].sum() <= 15


def test_compound_decision_corrects_for_the_number_of_wells():
    """72 inhibited wells each flagged at the 0.1 % level hold a false flag with
    probability 1 − 0.999⁷² = 6.9 % (binomial): the compound-level count rule asks for as
    many flags as that level gives with probability ≤ 5 % (rates/time_dependence.py),
    here two, which 72 wells at 0.1 % reach with probability 0.24 % (binomial). Wells
    flagged at exactly the nominal level (Bernoulli draws, seed 16), 4000 compounds of
    72: any flag marks about 276, the count rule about 10. Bounds: more than 200 before
    (5 %), at most 40 after (1 %). Then null wells through the test itself (20 reads,
    constant rate, Gaussian noise), 600 compounds: at most 15 (2.5 %) after."""
    from scipy import stats

    from inhibkin.rates.time_dependence import (
        COMPOUND_LEVEL,
        LEVEL,
        flagged_inhibited,
        min_flagged,
        time_dependence,
    )

    for n in (1, 20, 51, 52, 72, 355, 356):
        k = min_flagged(n)
        assert stats.binom.sf(k - 1, n, LEVEL) <= COMPOUND_LEVEL
        assert k == 1 or stats.binom.sf(k - 2, n, LEVEL) > COMPOUND_LEVEL
    assert [min_flagged(n) for n in (51, 52, 355, 356)] == [1, 2, 2, 3]
    rng = np.random.default_rng(16)
    at_level = rng.random((4000, 72)) < LEVEL
    counted = np.array([flagged_inhibited(np.where(row, "time_dependent", ""),
                                          np.full(72, 10.0))[0] > 0 for row in at_level])
    assert at_level.any(axis=1).sum() > 200
    assert counted.sum() <= 40
    n_compounds, n_wells = 600, 72
    # Each compound's 72 inhibited wells and 24 references without inhibitor.
    inhibitor = np.tile(np.r_[np.full(n_wells, 10.0), np.zeros(24)], n_compounds)
    t = np.tile(np.linspace(0.0, 600.0, 20), (len(inhibitor), 1))
    y = 0.05 + 1e-4 * t + rng.normal(0.0, 0.002, t.shape)
    flagged = time_dependence(t, y, np.ones_like(t, bool), substrate=np.full(len(t), 20.0),
                              inhibitor=inhibitor, group=np.repeat(np.arange(n_compounds),
                                                                   n_wells + 24),
                              )["time_dependent"].to_numpy()
    flags = flagged[inhibitor > 0].reshape(n_compounds, n_wells)
    counted = np.array([flagged_inhibited(np.where(row, "time_dependent", ""),
                                          np.full(n_wells, 10.0))[0] > 0 for row in flags])
    assert counted.sum() <= 15
    # A slow-binding grid still fires: 60 of 72 inhibited wells flagged.
    many = np.where(np.arange(n_wells) < 60, "time_dependent", "")
    assert flagged_inhibited(many, np.full(n_wells, 10.0)) == (60, 72)
    one = np.where(np.arange(n_wells) == 0, "time_dependent;low_signal", "")
    assert flagged_inhibited(one, np.full(n_wells, 10.0)) == (0, 72)
    assert flagged_inhibited(one[:20], np.full(20, 10.0)) == (1, 20)
