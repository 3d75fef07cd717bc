"""Campaigns: every compound once, failures isolated, ranking by pKi, same result on any
number of workers or on a Dask cluster, declared units."""

import pickle

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from inhibkin.campaign import LE_KCAL_PER_PKI, RANKING_COLUMNS, STATUSES, Campaign, fit_campaign
from inhibkin.errors import DataError, UnitsError
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.simulate import simulate_campaign, simulate_grid

CAMPAIGN_SEED = 20260501
N_COMPOUNDS = 200
CV = 0.05
# The acceptance level for the rank agreement of fitted and true pKi at 5 % CV.
MIN_SPEARMAN = 0.95
# Same data in two units: the fits differ only by rounding of the unit conversion.
UNIT_RTOL = 1e-6


def _grid(name, mechanism, *, ki_nM, i_max_nM, cv, seed, n_inhibitor=5):
    s = 20.0 * np.geomspace(0.2, 10.0, 6)
    i = np.linspace(0.0, i_max_nM, n_inhibitor)
    data = simulate_grid(mechanism, vmax=100.0, km=20.0, kic=ki_nM, kiu=ki_nM, s=s, i=i,
                         cv=cv, seed=seed)
    return pd.DataFrame({"compound": name, "substrate_uM": data["substrate"],
                         "inhibitor_nM": data["inhibitor"], "rate": data["rate"]})


def _bad_compounds():
    """NaN rates, a single inhibitor level, all-zero rates, text in a number column."""
    nan = _grid("BAD-NAN", "competitive", ki_nM=50, i_max_nM=200, cv=CV, seed=1)
    nan.loc[nan.index[[3, 7]], "rate"] = np.nan
    one_level = _grid("BAD-ONE-LEVEL", "competitive", ki_nM=50, i_max_nM=200, cv=CV, seed=2)
    one_level["inhibitor_nM"] = 100.0
    zero = _grid("BAD-ZERO", "competitive", ki_nM=50, i_max_nM=200, cv=CV, seed=3)
    zero["rate"] = 0.0
    text = _grid("BAD-TEXT", "competitive", ki_nM=50, i_max_nM=200, cv=CV, seed=4)
    text["substrate_uM"] = text["substrate_uM"].astype(object)
    text.loc[text.index[5], "substrate_uM"] = "n/a"
    return pd.concat([nan, one_level, zero, text], ignore_index=True)


def _dose_plates(kis_M, *, seed, s_uM=20.0, km_uM=20.0, per_plate=6, noise=0.03):
    """Dose-response plates of competitive inhibitors: 10 concentrations in duplicate per
    compound, 4 'max' and 4 'min' control wells per plate, Gaussian noise as a fraction
    of the control window. IC50 = Ki (1 + S/Km), the competitive case of Cheng & Prusoff
    (1973, Biochem. Pharmacol. 22:3099)."""
    rng = np.random.default_rng(seed)
    high, low = 1000.0, 50.0
    rows = []
    for k, (name, ki) in enumerate(kis_M.items()):
        plate = f"P{k // per_plate + 1}"
        ic50_nM = ki * (1.0 + s_uM / km_uM) * 1e9
        guess = ic50_nM * 10.0 ** rng.uniform(-0.5, 0.5)
        for conc in np.repeat(guess * np.geomspace(1 / 30, 30, 10), 2):
            activity = 1.0 / (1.0 + conc / ic50_nM)
            signal = low + (high - low) * activity + noise * (high - low) * rng.normal()
            rows.append((name, plate, "sample", conc, signal, s_uM))
    for plate in sorted({r[1] for r in rows}):
        for kind, level in (("max", high), ("min", low)):
            for _ in range(4):
                rows.append((None, plate, kind, 0.0,
                             level + noise * (high - low) * rng.normal(), s_uM))
    return pd.DataFrame(rows, columns=["compound", "plate", "role", "inhibitor_nM", "signal",
                                       "substrate_uM"])


KM_M = 20e-6
# pKi from a 10-point duplicate curve at 3 % noise: a tenth of a log unit or better.
DOSE_PKI_ATOL = 0.15


BAD_REASONS = {"BAD-NAN": "missing value", "BAD-ONE-LEVEL": "only one inhibitor level",
               "BAD-ZERO": "all rates are zero", "BAD-TEXT": "not a number"}


@pytest.fixture(scope="module")
def campaign_200():
    table, truth = simulate_campaign(N_COMPOUNDS, seed=CAMPAIGN_SEED, cv=CV)
    bad = _bad_compounds()
    # Bad compounds in the middle of the table, not at the end.
    half = table["compound"].isin(truth["compound"][: N_COMPOUNDS // 2])
    mixed_in = pd.concat([table[half], bad, table[~half]], ignore_index=True)
    campaign = fit_campaign(mixed_in, weighting="relative", quiet=True)
    return campaign, truth, mixed_in


def test_every_compound_appears_exactly_once(campaign_200):
    campaign, _, table = campaign_200
    ranking = campaign.ranking
    assert ranking["compound"].is_unique
    assert set(ranking["compound"]) == set(table["compound"])
    assert list(ranking.columns[: len(RANKING_COLUMNS)]) == list(RANKING_COLUMNS)
    assert set(ranking["status"]) <= set(STATUSES)


def test_bad_compounds_fail_with_their_reason(campaign_200):
    ranking = campaign_200[0].ranking.set_index("compound")
    for name, reason in BAD_REASONS.items():
        assert ranking.loc[name, "status"] == "failed"
        assert reason in ranking.loc[name, "reason"]
        assert name in ranking.loc[name, "reason"]  # the message names the compound
        assert np.isnan(ranking.loc[name, "pki"])
    good = ranking.drop(index=list(BAD_REASONS))
    assert (good["status"] != "failed").all()


def test_fitted_pki_ranks_like_the_truth(campaign_200):
    campaign, truth, _ = campaign_200
    merged = campaign.ranking.merge(truth, on="compound", suffixes=("", "_true"))
    determined = merged[merged["status"] == "determined"]
    assert len(determined) >= 0.95 * N_COMPOUNDS
    # Spearman's rank correlation (Spearman 1904, Am. J. Psychol. 15:72), computed by scipy.
    rho = stats.spearmanr(determined["pki"], determined["pki_true"]).statistic
    assert rho > MIN_SPEARMAN
    # The true pKi lies inside the reported 95 % interval for most compounds.
    covered = (determined["pki_low"] <= determined["pki_true"]) & (
        determined["pki_true"] <= determined["pki_high"])
    assert covered.mean() > 0.85


def test_ranking_order_and_ranks(campaign_200):
    ranking = campaign_200[0].ranking
    order = ranking["status"].map({s: k for k, s in enumerate(STATUSES)})
    assert order.is_monotonic_increasing
    determined = ranking[ranking["status"] == "determined"]
    assert determined["pki"].is_monotonic_decreasing
    assert determined["rank"].tolist() == list(range(1, len(determined) + 1))
    assert ranking.loc[ranking["status"] != "determined", "rank"].isna().all()


def test_summary_and_html(campaign_200):
    campaign = campaign_200[0]
    assert isinstance(campaign, Campaign)
    text = campaign.summary()
    assert f"Campaign of {N_COMPOUNDS + len(BAD_REASONS)} compounds" in text
    assert "BAD-ZERO: " in text
    assert "<table" in campaign._repr_html_()
    # The ranking is read-only (a DataFrame subclass), to_frame() an ordinary copy.
    pd.testing.assert_frame_equal(campaign.ranking, campaign.to_frame())
    assert set(campaign.fits) == set(campaign.ranking["compound"]) - set(BAD_REASONS)


def test_bounds_and_inactive_are_never_numbers():
    table = pd.concat([
        _grid("POTENT", "competitive", ki_nM=10, i_max_nM=40, cv=0.02, seed=5),
        # Tested up to 1/16 of Ki: inhibition is seen, the constant lies past the tested range.
        _grid("WEAK", "competitive", ki_nM=1000, i_max_nM=60, cv=0.01, seed=6),
        _grid("INERT", "none", ki_nM=None, i_max_nM=40, cv=0.02, seed=7),
    ], ignore_index=True)
    ranking = fit_campaign(table, weighting="relative", quiet=True).ranking
    assert ranking["compound"].tolist() == ["POTENT", "WEAK", "INERT"]
    assert ranking["status"].tolist() == ["determined", "bound", "inactive"]
    weak = ranking.iloc[1]
    assert np.isnan(weak["ki_M"]) and np.isnan(weak["pki"])
    assert weak["ki_reported"].startswith("> ") and weak["ki_low_M"] > 0
    inert = ranking.iloc[2]
    assert np.isnan(inert["ki_M"]) and inert["verdict"] == "none"


def test_same_data_in_nM_and_uM_gives_the_same_ki_in_molar():
    table, _ = simulate_campaign(6, seed=11)
    in_uM = table.rename(columns={"inhibitor_nM": "inhibitor_uM"})
    in_uM["inhibitor_uM"] = table["inhibitor_nM"] / 1000.0
    declared = table.rename(columns={"inhibitor_nM": "inhibitor"})
    a = fit_campaign(table, quiet=True).ranking
    b = fit_campaign(in_uM, quiet=True).ranking
    c = fit_campaign(declared, units={"inhibitor": "nM"}, quiet=True).ranking
    assert a["compound"].tolist() == b["compound"].tolist() == c["compound"].tolist()
    np.testing.assert_allclose(a["ki_M"], b["ki_M"], rtol=UNIT_RTOL)
    np.testing.assert_allclose(a["ki_M"], c["ki_M"], rtol=UNIT_RTOL)
    # And Ki in M is the Ki in the table's own unit times 1e-9 (a fit of the raw nM grid).
    first = table[table["compound"] == a["compound"].iloc[0]]
    # (plain headers: the values stay in the table's own units, nM for the inhibitor)
    raw = fit_mechanisms(first.rename(columns={"substrate_uM": "substrate",
                                               "inhibitor_nM": "inhibitor"}),
                         intervals="wald")
    raw_ki = raw.constants().loc[a["ki_parameter"].iloc[0], "estimate"]
    assert a["ki_M"].iloc[0] == pytest.approx(raw_ki * 1e-9, rel=UNIT_RTOL)


def test_undeclared_units_refuse_the_table():
    table, _ = simulate_campaign(2, seed=3)
    plain = table.rename(columns={"inhibitor_nM": "inhibitor", "substrate_uM": "substrate"})
    with pytest.raises(UnitsError, match="unit not declared"):
        fit_campaign(plain, quiet=True)


def test_rows_without_compound_refuse_the_table():
    table, _ = simulate_campaign(2, seed=3)
    table.loc[4, "compound"] = None
    with pytest.raises(DataError, match="row has no compound"):
        fit_campaign(table, quiet=True)


def test_bad_options_are_refused():
    table, _ = simulate_campaign(2, seed=3)
    with pytest.raises(DataError, match="not both"):
        fit_campaign(table, workers=2, client=object(), quiet=True)
    with pytest.raises(DataError, match="workers must be"):
        fit_campaign(table, workers=0, quiet=True)


def _flaky_engine(data, **options):
    """An engine that breaks in an unforeseen way on one compound."""
    if options["context"] == "compound 'CPD-2'":
        raise ZeroDivisionError("boom")
    return fit_mechanisms(data, **options)


def test_any_engine_error_fails_only_its_compound():
    table, _ = simulate_campaign(3, seed=3)
    campaign = fit_campaign(table, engine=_flaky_engine, quiet=True)
    ranking = campaign.ranking.set_index("compound")
    assert ranking.loc["CPD-2", "status"] == "failed"
    assert "ZeroDivisionError" in ranking.loc["CPD-2", "reason"]
    assert (ranking.drop(index="CPD-2")["status"] == "determined").all()
    assert campaign.options["engine"] == "_flaky_engine"


def test_ligand_and_lipophilic_efficiency():
    table, _ = simulate_campaign(4, seed=9)
    heavy = {"CPD-1": 30, "CPD-2": 25, "CPD-3": 40, "CPD-4": 0}
    logp = {"CPD-1": 2.5, "CPD-2": 4.0, "CPD-3": 1.0, "CPD-4": 3.0}
    table["heavy_atoms"] = table["compound"].map(heavy)
    table["logp"] = table["compound"].map(logp)
    table.loc[table.index[table["compound"] == "CPD-3"][0], "logp"] = 1.5  # inconsistent
    ranking = fit_campaign(table, quiet=True).ranking.set_index("compound")
    # LE = 1.37 pKi / heavy atoms (Hopkins, Groom & Alex 2004, Drug Discov. Today 9:430);
    # LipE = pKi − logP (Leeson & Springthorpe 2007, Nat. Rev. Drug Discov. 6:881).
    for name in ("CPD-1", "CPD-2"):
        row = ranking.loc[name]
        assert row["le"] == pytest.approx(LE_KCAL_PER_PKI * row["pki"] / heavy[name])
        assert row["lipe"] == pytest.approx(row["pki"] - logp[name])
    assert np.isnan(ranking.loc["CPD-4", "le"])  # zero heavy atoms: no efficiency
    assert np.isnan(ranking.loc["CPD-3", "lipe"])
    assert "logp differs between rows" in ranking.loc["CPD-3", "flags"]


def test_progress_bar_is_silent_off_a_terminal(capsys):
    table, _ = simulate_campaign(2, seed=3)
    fit_campaign(table, quiet=False)
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""


def test_serial_processes_and_dask_give_identical_rankings():
    distributed = pytest.importorskip("distributed")
    table, _ = simulate_campaign(16, seed=21)
    table = pd.concat([table, _bad_compounds()], ignore_index=True)
    plates = _dose_plates({"CPD-01": 1e-7, "DR-1": 3e-8, "DR-2": 4e-7}, seed=5, per_plate=2)
    both = dict(dose_response=plates, km=KM_M, quiet=True, chunk_size=3)
    serial = fit_campaign(table, **both)
    local = fit_campaign(table, workers=2, **both)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = fit_campaign(table, client=client, **both)
    pd.testing.assert_frame_equal(serial.ranking, local.ranking, check_exact=True)
    pd.testing.assert_frame_equal(serial.ranking, remote.ranking, check_exact=True)
    assert len(serial.ranking) == 22
    # The compounds of a chunk share one batch of arrays; from Dask as from the process
    # pool, not one copy per compound (which took the client past 20 GB at 10,000).
    assert len(pickle.dumps(remote.fits)) < 1.2 * len(pickle.dumps(local.fits))


def test_dose_response_only_campaign_converts_ic50():
    kis = {f"DR-{k}": 10.0 ** -p for k, p in enumerate(np.linspace(6.0, 8.5, 8))}
    plates = _dose_plates(kis, seed=31)
    ranking = fit_campaign(dose_response=plates, km=KM_M, quiet=True).ranking
    assert sorted(ranking["compound"]) == sorted(kis)
    assert (ranking["status"] == "determined").all()
    assert (ranking["ki_source"] == "converted IC50").all()
    assert ranking["flags"].str.contains("mechanism assumed").all()
    truth = -np.log10(ranking["compound"].map(kis))
    np.testing.assert_allclose(ranking["pki"], truth, atol=DOSE_PKI_ATOL)
    # Ki = IC50 / (1 + S/Km) with S = Km: half the IC50 (Cheng & Prusoff 1973).
    np.testing.assert_allclose(ranking["ki_M"], ranking["ic50_M"] / 2.0, rtol=1e-9)


def test_grid_and_dose_response_together():
    grid, _ = simulate_campaign(3, seed=41, mechanisms=("competitive",))
    broken = _grid("BOTH-BAD-GRID", "competitive", ki_nM=50, i_max_nM=200, cv=CV, seed=8)
    broken["rate"] = 0.0
    grid = pd.concat([grid, broken], ignore_index=True)
    kis = {"CPD-1": 1e-7, "BOTH-BAD-GRID": 5e-8, "ONLY-DOSE": 2e-8, "DOSE-NAN": 1e-7}
    plates = _dose_plates(kis, seed=42)
    nan_well = plates.index[(plates["compound"] == "DOSE-NAN")][3]
    plates.loc[nan_well, "signal"] = np.nan
    campaign = fit_campaign(grid, dose_response=plates, km=KM_M, quiet=True)
    ranking = campaign.ranking.set_index("compound")
    assert ranking.index.is_unique
    assert set(ranking.index) == set(grid["compound"]) | set(kis)
    # In both tables with a good grid: Ki from the grid, IC50 from the curve.
    assert ranking.loc["CPD-1", "ki_source"] == "grid fit"
    assert np.isfinite(ranking.loc["CPD-1", "ic50_M"])
    # Grid unusable: Ki from the converted IC50, and the grid's failure is flagged.
    assert ranking.loc["BOTH-BAD-GRID", "ki_source"] == "converted IC50"
    assert ranking.loc["BOTH-BAD-GRID", "status"] == "determined"
    assert "all rates are zero" in ranking.loc["BOTH-BAD-GRID", "flags"]
    assert ranking.loc["ONLY-DOSE", "ki_source"] == "converted IC50"
    # A NaN signal fails that compound alone, with a reason naming it.
    assert ranking.loc["DOSE-NAN", "status"] == "failed"
    assert "NaN" in ranking.loc["DOSE-NAN", "reason"]
    assert set(campaign.potency_fits) >= {"CPD-1", "ONLY-DOSE", "BOTH-BAD-GRID"}
    # CPD-2 and CPD-3 have no curve: no IC50, Ki from the grid.
    assert np.isnan(ranking.loc["CPD-2", "ic50_M"])


def test_dose_response_needs_km_and_declared_units():
    plates = _dose_plates({"A": 1e-7}, seed=1)
    with pytest.raises(DataError, match="needs km="):
        fit_campaign(dose_response=plates, quiet=True)
    plain = plates.rename(columns={"inhibitor_nM": "inhibitor"})
    with pytest.raises(UnitsError, match="unit not declared"):
        fit_campaign(dose_response=plain, km=KM_M, quiet=True)
    plates.loc[0, "role"] = "blank"
    with pytest.raises(DataError, match="unknown role"):
        fit_campaign(dose_response=plates, km=KM_M, quiet=True)


def test_campaign_carries_the_plate_qc_table():
    from inhibkin.campaign import PLATE_COLUMNS
    from inhibkin.potency.table import potency_table
    from inhibkin.rates.plates import z_prime

    kis = {f"Q-{k}": 10.0 ** -p for k, p in enumerate(np.linspace(6.5, 8.0, 7))}
    plates = _dose_plates(kis, seed=51, per_plate=3)  # plates P1..P3
    # P2's 'max' controls spread by ±300 of a 950 window: Z' < 0.5, the plate is flagged.
    noisy = (plates["plate"] == "P2") & (plates["role"] == "max")
    plates.loc[noisy, "signal"] = [700.0, 1300.0, 800.0, 1200.0]
    # A plate of controls alone and a plate with one 'min' well (cannot be normalised).
    extra = pd.DataFrame({"compound": None, "plate": ["P9"] * 4 + ["P8"] * 3,
                          "role": ["max", "max", "min", "min", "max", "max", "min"],
                          "inhibitor_nM": 0.0, "signal": [990, 1010, 45, 55, 1000, 1005, 50],
                          "substrate_uM": 20.0})
    sample = plates[plates["role"] == "sample"].iloc[:2].assign(compound="Q-P8", plate="P8")
    table = pd.concat([plates, extra, sample], ignore_index=True)
    # chunk_size=2: plates are shared by chunks; each plate must still appear once.
    campaign = fit_campaign(dose_response=table, km=KM_M, quiet=True, chunk_size=2)
    qc = campaign.plates
    assert list(qc.columns) == list(PLATE_COLUMNS)
    assert qc["plate"].tolist() == ["P1", "P2", "P3", "P9", "P8"]
    for _, row in qc.iterrows():
        wells = table[table["plate"] == row["plate"]]
        hi = wells.loc[wells["role"] == "max", "signal"]
        lo = wells.loc[wells["role"] == "min", "signal"]
        assert (row["n_max"], row["n_min"]) == (len(hi), len(lo))
        if row["plate"] == "P8":
            assert row["flagged"] and "1 'min' control wells" in row["problem"]
            assert np.isnan(row["z_prime"])
            continue
        # Z' = 1 - 3(sd_max + sd_min)/|mean_max - mean_min| (Zhang, Chung & Oldenburg
        # 1999, J. Biomol. Screen. 4:67), recomputed from the wells with numpy.
        expected = 1 - 3 * (hi.std(ddof=1) + lo.std(ddof=1)) / abs(hi.mean() - lo.mean())
        assert row["z_prime"] == pytest.approx(expected, rel=1e-12)
        assert row["z_prime"] == pytest.approx(z_prime(hi, lo), rel=1e-12)
        assert row["flagged"] == (row["z_prime"] < 0.5) and row["problem"] == ""
    assert qc.set_index("plate").loc["P2", "flagged"]
    assert not qc.set_index("plate").loc["P1", "flagged"]
    # The same numbers the potency table of the whole table reports.
    molar = table.assign(inhibitor=table["inhibitor_nM"] * 1e-9,
                         substrate=table["substrate_uM"] * 1e-6)
    direct = potency_table(molar[molar["plate"] != "P8"], km=KM_M, intervals="wald").plates
    pd.testing.assert_frame_equal(qc[qc["plate"] != "P8"].reset_index(drop=True),
                                  direct.to_frame()[list(PLATE_COLUMNS)])
    assert "5 dose-response plates, 2 flagged" in campaign.summary()
    # The compound on the unusable plate fails with the plate's reason; the others do not.
    ranking = campaign.ranking.set_index("compound")
    assert ranking.loc["Q-P8", "status"] == "failed"
    assert "'min' control wells" in ranking.loc["Q-P8", "reason"]
    # Grids only: an empty table with the same columns.
    grid, _ = simulate_campaign(2, seed=3)
    empty = fit_campaign(grid, quiet=True).plates
    assert empty.empty and list(empty.columns) == list(PLATE_COLUMNS)


def test_one_ki_rule_for_a_mixed_inhibitor_on_both_routes():
    # Issue 12, item 3: the grid route and the IC50 route rank a mixed inhibitor by the
    # same constant, the tighter of kic and kiu, and say which.
    kic_nM, kiu_nM, km_uM, s_uM = 50.0, 10.0, 20.0, 20.0
    grid = simulate_grid("mixed", vmax=100.0, km=km_uM, kic=kic_nM, kiu=kiu_nM,
                         s=km_uM * np.geomspace(0.2, 10.0, 8),
                         i=np.array([0.0, 5.0, 10.0, 20.0, 40.0]), cv=0.02, seed=5)
    grid = pd.DataFrame({"compound": "MIX", "substrate_uM": grid["substrate"],
                         "inhibitor_nM": grid["inhibitor"], "rate": grid["rate"]})
    # The mixed-inhibition IC50, (Km + S)/(Km/kic + S/kiu) (Cheng & Prusoff 1973;
    # Cortés et al. 2001, Biochem. J. 357:263).
    ic50_nM = (km_uM + s_uM) / (km_uM / kic_nM + s_uM / kiu_nM)
    rng = np.random.default_rng(11)
    conc = np.repeat(ic50_nM * np.geomspace(1 / 100, 100, 11), 2)
    rows = [{"compound": None, "plate": "P1", "role": role, "inhibitor_nM": np.nan,
             "signal": level + rng.normal(0, 5.0), "substrate_uM": np.nan}
            for role, level in (("max", 1000.0), ("min", 0.0)) for _ in range(8)]
    rows += [{"compound": "MIX", "plate": "P1", "role": "sample", "inhibitor_nM": c,
              "signal": 1000.0 / (1 + c / ic50_nM) + rng.normal(0, 5.0), "substrate_uM": s_uM}
             for c in conc]
    by_grid = fit_campaign(grid, quiet=True).ranking.iloc[0]
    by_ic50 = fit_campaign(dose_response=pd.DataFrame(rows), km=km_uM * 1e-6, quiet=True,
                           potency_options={"default_mechanism": "mixed",
                                            "default_alpha": kiu_nM / kic_nM}).ranking.iloc[0]
    assert by_grid["mechanism"] == by_ic50["mechanism"] == "mixed"
    assert by_grid["ki_parameter"] == by_ic50["ki_parameter"] == "kiu"
    # Both near the true kiu (pKi 8.0); 0.1 log units covers the 2 % noise of either.
    assert by_grid["pki"] == pytest.approx(8.0, abs=0.1)
    assert by_ic50["pki"] == pytest.approx(8.0, abs=0.1)
    assert by_ic50["kiu_M"] == pytest.approx(by_ic50["ki_M"], rel=1e-12)
    assert by_ic50["kic_M"] == pytest.approx(by_ic50["ki_M"] * kic_nM / kiu_nM, rel=1e-12)


def test_km_takes_one_declared_unit_in_potency_table_and_fit_campaign():
    # Issue 12, item 2: km as text with its unit, or a number in M, means the same in both.
    from inhibkin.potency.table import potency_table

    rng = np.random.default_rng(4)
    rows = [{"compound": None, "plate": "P1", "role": role, "inhibitor_uM": np.nan,
             "signal": level + rng.normal(0, 5.0), "substrate_uM": np.nan}
            for role, level in (("max", 1000.0), ("min", 0.0)) for _ in range(8)]
    rows += [{"compound": "A", "plate": "P1", "role": "sample", "inhibitor_uM": c,
              "signal": 1000.0 / (1 + c / 0.2) + rng.normal(0, 5.0), "substrate_uM": 40.0}
             for c in np.repeat(np.geomspace(1e-3, 30, 10), 2)]
    plates = pd.DataFrame(rows)
    options = dict(concentration="inhibitor_uM", substrate="substrate_uM", intervals="wald")
    as_text = potency_table(plates, km="40uM", **options).table.iloc[0]
    as_molar = potency_table(plates, km=40e-6, **options).table.iloc[0]
    # Competitive, S = Km: Ki = IC50/2 (Cheng & Prusoff 1973).
    assert as_text["ki"] == pytest.approx(as_text["ic50"] / 2, rel=1e-12)
    assert as_molar["ki"] == pytest.approx(as_text["ki"], rel=1e-12)
    campaign = fit_campaign(dose_response=plates, km="40uM", intervals="wald", quiet=True)
    again = fit_campaign(dose_response=plates, km=40e-6, intervals="wald", quiet=True)
    assert campaign.ranking.iloc[0]["ki_M"] == pytest.approx(as_text["ki"] * 1e-6, rel=1e-9)
    assert again.ranking.iloc[0]["ki_M"] == pytest.approx(campaign.ranking.iloc[0]["ki_M"],
                                                          rel=1e-12)
    with pytest.raises(DataError, match="declares none"):
        potency_table(plates.rename(columns={"substrate_uM": "substrate"}), km="40uM",
                      concentration="inhibitor_uM", substrate="substrate")


def test_default_weighting_is_one_rule_everywhere(tmp_path, capsys):
    # Issue 12, item 6: one default for rate tables (README, "Weighting"); issue 15:
    # that default is rate_se + variance model when the table carries rate_se, else
    # relative, decided at every entry by the same rule (core.weighting.resolve_weighting).
    import inspect

    from inhibkin.cli import main
    from inhibkin.engine import fit_mechanisms_batch

    for function in (fit_mechanisms, fit_campaign, fit_mechanisms_batch):
        assert inspect.signature(function).parameters["weighting"].default is None
    table, _ = simulate_campaign(2, seed=3)
    assert "rate_se" not in table.columns
    assert fit_campaign(table, quiet=True).options["weighting"] == "relative"
    table.to_csv(tmp_path / "grid.csv", index=False)
    main(["rank", "--grid", str(tmp_path / "grid.csv"), "-o", str(tmp_path / "r.csv")])
    assert "relative weighting" in capsys.readouterr().out
    with_se = table.assign(rate_se=0.01 + 0.03 * table["rate"].abs())
    assert fit_campaign(with_se, quiet=True).options["weighting"] == "rate_se"
