"""One set of answers: a campaign through the batched engine and through the lmfit path.

The lmfit path is the reference (its fits are checked against NIST StRD data and
published fits in test_fitting.py, test_potency.py and test_engine.py); here the whole
campaign — grids and dose-response curves, 5 % CV — goes through both, and the ranked
table, the verdicts and every well-determined estimate must agree.
"""

import functools

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from test_engine import _check_against_lmfit

import inhibkin.campaign.grid as grid_route
from inhibkin.campaign import AUTO_ENGINE_MIN_COMPOUNDS, fit_campaign
from inhibkin.core.logistic import logistic4, logistic4_jacobian
from inhibkin.errors import DataError
from inhibkin.simulate import simulate_campaign, simulate_dose_campaign

SEED = 20261215
CV = 0.05
N_GRIDS = 100
N_CURVES = 100
N_SHARED = 50  # compounds with both a grid and a curve: 150 compounds in all
KM_M = 20e-6
# The acceptance levels (issue 7): estimates to 1e-6 relative, verdicts on
# at least 99.5 % of the compounds.
AGREEMENT_RTOL = 1e-6
VERDICT_AGREEMENT = 0.995
# Polishing a solution with scipy far past both optimisers' stopping rules.
POLISH_TOL = 1e-15
# The ranking columns that carry estimates (M, or log10 units).
ESTIMATE_COLUMNS = ("ki_M", "ki_low_M", "ki_high_M", "pki", "pki_low", "pki_high", "kic_M",
                    "kiu_M", "alpha", "ic50_M", "ic50_low_M", "ic50_high_M", "pic50", "hill")


def _inputs(n_grids, n_curves, n_shared, seed):
    grid, _ = simulate_campaign(n_grids, seed=seed, cv=CV)
    names = list(pd.unique(grid["compound"]))[:n_shared]
    names += [f"DR-{k:04d}" for k in range(n_curves - n_shared)]
    plates, _ = simulate_dose_campaign(names, seed=seed + 1, cv=CV)
    return grid, plates


@pytest.fixture(scope="module")
def both_paths():
    grid, plates = _inputs(N_GRIDS, N_CURVES, N_SHARED, SEED)
    # Equal weights, named since the default became relative (issue 12).
    common = dict(dose_response=plates, km=KM_M, quiet=True, weighting="uniform")
    engine = fit_campaign(grid, engine="batched", **common)
    reference = fit_campaign(grid, engine="lmfit", **common)
    return engine, reference


def _by_compound(campaign):
    return campaign.ranking.set_index("compound")


def test_both_paths_were_taken(both_paths):
    engine, reference = both_paths
    assert (engine.options["grid_engine"], engine.options["dose_engine"]) == ("batched",) * 2
    assert (reference.options["grid_engine"], reference.options["dose_engine"]) == \
        ("lmfit",) * 2
    assert reference.options["n_fallback"] == 0
    assert engine.options["n_fallback"] == (engine.options["n_fallback_grid"]
                                            + engine.options["n_fallback_dose"])
    assert len(engine.ranking) == N_GRIDS + N_CURVES - N_SHARED


def test_verdicts_agree(both_paths, capsys):
    engine, reference = both_paths
    a, b = _by_compound(engine), _by_compound(reference).loc[_by_compound(engine).index]
    same = (a["verdict"] == b["verdict"]) & (a["status"] == b["status"])
    with capsys.disabled():
        print(f"\ncampaign engine vs lmfit path: verdict and status agree on "
              f"{int(same.sum())}/{len(same)} compounds; the engine's fallbacks: "
              f"{engine.options['n_fallback_grid']} grid model fits, "
              f"{engine.options['n_fallback_dose']} curves")
        for name in same.index[~same]:
            print(f"  {name}: engine {a.loc[name, 'verdict']}/{a.loc[name, 'status']} "
                  f"({a.loc[name, 'reason']}); lmfit {b.loc[name, 'verdict']}/"
                  f"{b.loc[name, 'status']} ({b.loc[name, 'reason']})")
    assert same.mean() >= VERDICT_AGREEMENT


def _grid_comparison(engine, reference):
    """(fits compared, [(compound, model, largest difference)] where the lmfit path
    stopped short), asserting agreement everywhere else."""
    compared, off = 0, []
    assert set(engine.fits) == set(reference.fits)
    for name, fit in engine.fits.items():
        ref = reference.fits[name]
        data = fit.data
        pd.testing.assert_frame_equal(data, ref.data)
        s, i, v, w = (data[c].to_numpy() for c in ("substrate", "inhibitor", "rate", "weight"))
        for model, mine in fit.models.items():
            theirs = ref.models[model]
            assert mine.converged == theirs.converged, (name, model)
            if not theirs.converged:
                continue
            np.testing.assert_array_equal(mine.params["determined"], theirs.params["determined"])
            compared += 1
            worst = _check_against_lmfit(model, s, i, v, w, mine.params["estimate"].to_numpy(),
                                         mine.ssr, theirs)
            if worst is not None:
                off.append((name, model, worst))
    return compared, off


def test_grid_estimates_agree(both_paths, capsys):
    """Every converged model fit of every compound: the determined estimates to 1e-6,
    or — where they differ more — the lmfit path is the one that stopped short of the
    optimum (test_engine._check_against_lmfit: the engine's SSR is no larger, and scipy
    polishing from the engine's solution stays on it)."""
    engine, reference = both_paths
    compared, off = _grid_comparison(engine, reference)
    with capsys.disabled():
        print(f"\n{compared} converged model fits compared; {len(off)} beyond "
              f"{AGREEMENT_RTOL:g}, where the lmfit path stopped short: {off}")
    assert compared >= 4 * len(engine.fits)
    assert len(off) <= 0.01 * compared


def _polished_4pl(fit):
    """curve_fit from the engine's solution, far past both stopping rules."""
    free = ~fit.params.loc[["top", "bottom", "log_ic50", "hill"], "fixed"].to_numpy()
    theta = fit.params.loc[["top", "bottom", "log_ic50", "hill"], "estimate"].to_numpy()
    x = np.log10(fit.conc)
    popt, _ = optimize.curve_fit(logistic4, x, fit.response, p0=theta[free],
                                 jac=lambda xx, *p: logistic4_jacobian(xx, *p),
                                 xtol=POLISH_TOL, ftol=POLISH_TOL, gtol=POLISH_TOL)
    return popt


def _dose_comparison(engine, reference):
    """The curves where the lmfit path stopped short, asserting agreement everywhere
    else: top, bottom, log IC50 and Hill to 1e-6 (top and bottom relative to the
    curve's span, as bottom can sit at zero; test_engine._assert_4pl_close), the
    standard errors to 1e-4, the same flags."""
    names = ["top", "bottom", "log_ic50", "hill"]
    off = []
    for name, fit in engine.potency_fits.items():
        ref = reference.potency_fits[name]
        assert fit.flags == ref.flags and fit.ic50_bound == ref.ic50_bound, name
        if ref.curve_class == "inactive":
            # A flat curve's SSR has several minima and an inactive curve reports none of
            # its estimates (its IC50 is a bound, its efficacy read off the data): what
            # it reports must agree, which optimum either path found need not.
            assert fit.curve_class == "inactive" and fit.class_reason == ref.class_reason
            assert np.isfinite(fit.ssr), name
            continue
        mine = fit.params.loc[names, "estimate"].to_numpy(dtype=float)
        theirs = ref.params.loc[names, "estimate"].to_numpy(dtype=float)
        scale = np.abs(theirs)
        scale[:2] = np.maximum(scale[:2], abs(theirs[0] - theirs[1]))
        if not np.all(np.abs(mine - theirs) <= AGREEMENT_RTOL * scale):
            # The lmfit path stopped short: the engine's SSR is no larger, and scipy
            # started from the engine's solution stays on it.
            assert fit.ssr <= ref.ssr, name
            free = ~fit.params.loc[names, "fixed"].to_numpy(dtype=bool)
            np.testing.assert_allclose(_polished_4pl(fit), mine[free], rtol=AGREEMENT_RTOL)
            off.append((name, float(np.max(np.abs(mine - theirs) / scale))))
            continue
        se_mine = fit.params.loc[names, "se"].to_numpy(dtype=float)
        se_ref = ref.params.loc[names, "se"].to_numpy(dtype=float)
        np.testing.assert_allclose(se_mine, se_ref, rtol=1e-4, equal_nan=True)
    return off


def test_dose_response_estimates_agree(both_paths, capsys):
    engine, reference = both_paths
    assert set(engine.potency_fits) == set(reference.potency_fits)
    off = _dose_comparison(engine, reference)
    with capsys.disabled():
        print(f"\n{len(engine.potency_fits)} curves compared; {len(off)} beyond "
              f"{AGREEMENT_RTOL:g}, where the lmfit path stopped short: {off}")
    assert len(off) <= 0.05 * len(engine.potency_fits)
    by_engine = sum(fit.message.startswith("batched engine")
                    for fit in engine.potency_fits.values())
    # Most curves are the engine's own; the rest are counted as fallbacks.
    assert by_engine + engine.options["n_fallback_dose"] == len(engine.potency_fits)
    assert by_engine >= 0.8 * len(engine.potency_fits)


def test_ranking_tables_agree(both_paths):
    """The ranked tables: the same compounds in the same order (except where verdicts
    differ), the same text columns, the estimates to 1e-6 (except for the compounds
    whose fits the lmfit path stopped short, established above)."""
    engine, reference = both_paths
    short = {name for name, *_ in _grid_comparison(engine, reference)[1]}
    short |= {name for name, _ in _dose_comparison(engine, reference)}
    a, b = engine.ranking, reference.ranking
    differ = set(a.loc[a.set_index("compound")["verdict"].ne(
        b.set_index("compound")["verdict"].reindex(a["compound"])).to_numpy(), "compound"])
    keep_a, keep_b = ~a["compound"].isin(differ), ~b["compound"].isin(differ)
    assert a.loc[keep_a, "compound"].tolist() == b.loc[keep_b, "compound"].tolist()
    a, b = a[keep_a].reset_index(drop=True), b[keep_b].reset_index(drop=True)
    text = [c for c in a.columns if c not in ESTIMATE_COLUMNS and c != "ki_reported"]
    pd.testing.assert_frame_equal(a[text], b[text])
    settled = ~a["compound"].isin(short)
    assert settled.mean() >= 0.95
    for column in ESTIMATE_COLUMNS:
        np.testing.assert_allclose(a.loc[settled, column], b.loc[settled, column],
                                   rtol=AGREEMENT_RTOL, equal_nan=True, err_msg=column)


def test_engine_output_does_not_depend_on_workers_or_chunks():
    """Serial, two local workers, and small chunks: the same table, exactly."""
    grid, plates = _inputs(30, 30, 10, SEED + 2)
    common = dict(dose_response=plates, km=KM_M, quiet=True, engine="batched")
    serial = fit_campaign(grid, **common)
    local = fit_campaign(grid, workers=2, chunk_size=7, **common)
    pd.testing.assert_frame_equal(serial.ranking, local.ranking, check_exact=True)
    pd.testing.assert_frame_equal(serial.parameters(), local.parameters(), check_exact=True)
    pd.testing.assert_frame_equal(serial.plates, local.plates, check_exact=True)
    assert serial.options["n_fallback"] == local.options["n_fallback"]


def test_auto_takes_the_engine_at_screening_scale_only():
    small, _ = simulate_campaign(AUTO_ENGINE_MIN_COMPOUNDS - 1, seed=3)
    large, _ = simulate_campaign(AUTO_ENGINE_MIN_COMPOUNDS, seed=3)
    assert fit_campaign(small, quiet=True).options["grid_engine"] == "lmfit"
    auto = fit_campaign(large, quiet=True)
    assert (auto.options["engine"], auto.options["grid_engine"]) == ("auto", "batched")
    assert auto.options["dose_engine"] == ""
    # Profile intervals stay on the lmfit path, whatever was asked.
    few, _ = simulate_campaign(2, seed=3)
    profile = fit_campaign(few, quiet=True, engine="batched", intervals="profile")
    assert profile.options["grid_engine"] == "lmfit"
    with pytest.raises(DataError, match="engine must be one of"):
        fit_campaign(few, quiet=True, engine="fast")


def test_bad_compounds_fail_alike_on_both_paths():
    from test_batch import _bad_compounds

    grid, _ = simulate_campaign(6, seed=4)
    table = pd.concat([grid, _bad_compounds()], ignore_index=True)
    engine = fit_campaign(table, quiet=True, engine="batched").ranking
    reference = fit_campaign(table, quiet=True, engine="lmfit").ranking
    failed = engine["status"] == "failed"
    assert failed.sum() == 4
    pd.testing.assert_frame_equal(engine.loc[failed, ["compound", "reason"]],
                                  reference.loc[reference["status"] == "failed",
                                                ["compound", "reason"]])


def test_engine_fits_it_cannot_converge_are_refitted_and_counted(monkeypatch):
    """Two iterations are not enough for most fits: the lmfit path redoes them, the
    count says how many, and the answers are the reference's."""
    grid, _ = simulate_campaign(8, seed=6)
    starved = functools.partial(grid_route.fit_mechanism_arrays, max_iterations=2)
    monkeypatch.setattr(grid_route, "fit_mechanism_arrays", starved)
    campaign = fit_campaign(grid, quiet=True, engine="batched", weighting="uniform")
    refitted = sum(m.message.startswith("refitted by the lmfit path")
                   for fit in campaign.fits.values() for m in fit.models.values())
    assert campaign.options["n_fallback_grid"] == refitted > 0
    reference = fit_campaign(grid, quiet=True, engine="lmfit", weighting="uniform").ranking
    assert campaign.ranking["verdict"].tolist() == reference["verdict"].tolist()


def test_a_warning_lands_on_the_compound_that_raised_it(monkeypatch):
    """A warning inside a batch is traced to its compound by fitting each alone."""
    import warnings

    grid, _ = simulate_campaign(5, seed=8)
    real = grid_route.fit_mechanism_arrays

    def warns_on_third(s, i, v, mask, **options):
        # Warn when CPD-3's first rate is among the batch's rates.
        if np.any(np.isclose(v, grid.loc[grid["compound"] == "CPD-3", "rate"].iloc[0])):
            warnings.warn("odd grid", RuntimeWarning, stacklevel=1)
        return real(s, i, v, mask, **options)

    monkeypatch.setattr(grid_route, "fit_mechanism_arrays", warns_on_third)
    ranking = fit_campaign(grid, quiet=True, engine="batched").ranking.set_index("compound")
    assert "odd grid" in ranking.loc["CPD-3", "flags"]
    assert not ranking.drop(index="CPD-3")["flags"].str.contains("odd grid").any()


def test_campaign_benchmark_smoke():
    from benchmarks.bench_campaign import main

    text = main(smoke=True)
    assert "lmfit path" in text and "batched engine" in text and "ratio" in text
    assert "verdict and status agree" in text and "refitted by the lmfit path" in text


def test_one_negative_well_does_not_fail_a_compound_on_either_path():
    """Issue 12, item 4: a flat well read slightly below zero is kept as data."""
    grid, _ = simulate_campaign(6, seed=5)
    slowest = grid.groupby("compound")["rate"].idxmin()
    grid.loc[slowest, "rate"] = -0.001
    for engine in ("batched", "lmfit"):
        ranking = fit_campaign(grid, quiet=True, engine=engine).ranking
        assert (ranking["status"] != "failed").all(), ranking["reason"].tolist()


def _same_facts(a, b):
    """Two GridFacts equal field by field, numbers as floats and NaN equal to NaN."""
    import dataclasses

    def plain(value):
        if isinstance(value, dict):
            return {k: plain(v) for k, v in value.items()}
        if isinstance(value, tuple):
            return tuple(plain(v) for v in value)
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        if isinstance(value, (float, np.floating)):
            return "nan" if np.isnan(value) else float(value)
        return value

    return all(plain(getattr(a, f.name)) == plain(getattr(b, f.name))
               for f in dataclasses.fields(a))


def test_rows_read_from_the_engine_arrays_are_those_of_its_fits():
    """facts_from_batch reads from the arrays what facts_from_fit reads from the
    MechanismFit the batch builds, so the rows need no per-compound objects."""
    from inhibkin.engine import fit_mechanism_arrays, pad

    grid, _ = _inputs(40, 0, 0, SEED + 3)
    groups = [(g["substrate_uM"].to_numpy() * 1e-6, g["inhibitor_nM"].to_numpy() * 1e-9,
               g["rate"].to_numpy()) for _, g in grid.groupby("compound", sort=False)]
    batch = fit_mechanism_arrays(*pad(groups))
    tried = batch.models_tried()
    compared = 0
    for c in range(len(batch)):
        if batch.verdict[c] == "ambiguous":
            continue  # the route builds the whole fit for these
        assert _same_facts(grid_route.facts_from_batch(batch, c, tried[c]),
                           grid_route.facts_from_fit(batch.mechanism_fit(c))), c
        compared += 1
    assert compared >= 30


def test_engine_fits_are_built_on_access_and_equal_the_eager_ones():
    import pickle

    from inhibkin.campaign.lazy import BatchFit
    from inhibkin.mechanism.fit import MechanismFit

    grid, _ = _inputs(AUTO_ENGINE_MIN_COMPOUNDS, 0, 0, SEED + 4)
    campaign = fit_campaign(grid, engine="batched", quiet=True)
    assert any(isinstance(v, BatchFit) for v in campaign.fits._items.values())
    again = pickle.loads(pickle.dumps(campaign))
    for name, fit in campaign.fits.items():
        assert isinstance(fit, MechanismFit)
        assert campaign.fits[name] is fit  # built once
        other = again.fits[name]
        assert (other.verdict, other.best, other.reason) == (fit.verdict, fit.best, fit.reason)
        pd.testing.assert_frame_equal(other.comparison, fit.comparison)
    with pytest.raises(TypeError):
        campaign.fits["x"] = None
