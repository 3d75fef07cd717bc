"""The batched engine against certified values, scipy, and the lmfit path it stands in for."""

import warnings

import numpy as np
import pandas as pd
import pytest
from reference_values import MISRA1D
from scipy import optimize

import inhibkin as ik
from inhibkin.core import compare
from inhibkin.core.logistic import PARAM_NAMES, logistic4, logistic4_jacobian, logistic4_start
from inhibkin.core.models import FAMILIES, MODEL_NAMES, MODELS, extension_of
from inhibkin.core.starts import log_bounds, starting_values
from inhibkin.engine import lm
from inhibkin.engine.dose_response import _Logistic, fit_logistic_batch
from inhibkin.engine.mechanisms import (
    _LogRateLaw,
    fit_mechanism_arrays,
    fit_mechanisms_batch,
    pad,
)
from inhibkin.engine.starts import logistic_starts, mechanism_log_bounds, mechanism_starts
from inhibkin.mechanism.fit import relative_weights
from inhibkin.mechanism.one_model import fit_model
from inhibkin.potency.curve import dose_response_from_estimates

# NIST's yardstick for the certified values: 6 significant digits in the estimates,
# 4 in the standard errors, and the residual sum of squares to 1e-8.
ESTIMATE_RTOL = 1e-6
STD_ERROR_RTOL = 1e-4
RSS_RTOL = 1e-8
# Engine against the lmfit path and against scipy on the same problem (issue 7).
AGREEMENT_RTOL = 1e-6
VERDICT_AGREEMENT = 0.995
# The per-problem rules and the vectorised ones differ only by rounding.
SAME_RULE_RTOL = 1e-12
# One problem fitted padded and unpadded: only the order of additions differs, which
# moves the stopping point by rounding; the stopping rule (lm.FTOL, lm.XTOL) settles a
# poorly determined estimate to about 1e-7, a tenth of the agreement tolerance. Padding
# that leaked (NaN, 1e300 below) would show as differences of order one.
PADDING_RTOL = 1e-7
# Polishing a solution with scipy far past both optimisers' stopping rules.
POLISH_TOL = 1e-15
CV = 0.05
N_GRIDS = 200
N_CURVES = 300
SEED = 20261201


def _simulated_tables(n, seed):
    """Seeded grids of all five mechanisms (5 % CV) on the standard 8 × 6 design."""
    rng = np.random.default_rng(seed)
    tables, truth = [], []
    for c in range(n):
        mechanism = MODEL_NAMES[c % 5]
        km, ki = 10 ** rng.uniform(-1, 1), 10 ** rng.uniform(-1, 1)
        kw = {"vmax": 10 ** rng.uniform(0, 2), "km": km}
        if mechanism in ("competitive", "noncompetitive"):
            kw["kic"] = ki
        elif mechanism == "uncompetitive":
            kw["kiu"] = ki
        elif mechanism == "mixed":
            kw.update(kic=ki, kiu=ki * 10 ** rng.uniform(-0.7, 0.7))
        s, i = ik.standard_design(km, ki)
        tables.append(ik.simulate_grid(mechanism, s=s, i=i, cv=CV, seed=rng.integers(2**31),
                                       **kw))
        truth.append(mechanism)
    return tables, truth


def _arrays(tables):
    return pad([(t["substrate"].to_numpy(), t["inhibitor"].to_numpy(), t["rate"].to_numpy())
                for t in tables])


def _simulated_curves(n, seed, points=10):
    """Seeded 4PL inhibition curves, noise 5 % of the span."""
    rng = np.random.default_rng(seed)
    x = np.tile(np.linspace(-9.0, -4.5, points), (n, 1))
    top = rng.uniform(90, 110, n)
    bottom = rng.uniform(-5, 10, n)
    log_ic50 = rng.uniform(-8.0, -5.5, n)
    hill = rng.uniform(0.6, 1.8, n)
    truth = np.stack([top, bottom, log_ic50, hill], axis=1)
    y = logistic4(x, *(truth[:, [j]] for j in range(4)))
    y = y + CV * (top - bottom)[:, None] * rng.standard_normal(x.shape)
    return x, y, truth


@pytest.fixture(scope="module")
def grid_set():
    tables, truth = _simulated_tables(N_GRIDS, SEED)
    s, i, v, mask = _arrays(tables)
    # Equal weights, named since the default became relative (issue 12): the agreement
    # of the two paths under relative weighting is its own test below.
    batch = fit_mechanism_arrays(s, i, v, mask, weighting="uniform")
    reference = [ik.fit_mechanisms(t, intervals="wald", weighting="uniform") for t in tables]
    return tables, truth, batch, reference


# --- certified values ----------------------------------------------------------------

def _misra_arrays(misra1d):
    s = misra1d["x"].to_numpy()[None, :]
    return s, np.zeros_like(s), misra1d["y"].to_numpy()[None, :]


@pytest.mark.parametrize("start", [None, *MISRA1D["starts"]], ids=["automatic", "nist1", "nist2"])
def test_misra1d_certified_values(misra1d, start):
    # NIST StRD nonlinear regression, Misra1d (Misra 1978), certified values; the model
    # b1*b2*x/(1+b2*x) is the 'none' rate law with vmax = b1, km = 1/b2.
    s, i, v = _misra_arrays(misra1d)
    if start is None:
        # NIST StRD certified values are for unweighted least squares.
        batch = fit_mechanism_arrays(s, i, v, models=("none",), weighting="uniform")
        model = batch.models["none"]
        vmax, km = model.estimate[0, :2]
        vmax_se, km_se = model.se[0, :2]
        ssr = model.ssr[0]
        assert model.converged[0]
    else:
        theta0 = np.log([[start["b1"], 1.0 / start["b2"]]])
        result = lm.solve(_LogRateLaw("none"), theta0, (s, i), v)
        assert result.converged[0], result.reason[0]
        vmax, km = np.exp(result.theta[0])
        vmax_se, km_se = np.exp(result.theta[0]) * result.std_err[0]
        ssr = result.ssr[0]
    assert vmax == pytest.approx(MISRA1D["b1"], rel=ESTIMATE_RTOL)
    assert 1.0 / km == pytest.approx(MISRA1D["b2"], rel=ESTIMATE_RTOL)
    assert vmax_se == pytest.approx(MISRA1D["b1_sd"], rel=STD_ERROR_RTOL)
    # Delta method: se(km) = se(b2)/b2**2 (the reference README derives 32.1053287).
    assert km_se == pytest.approx(MISRA1D["b2_sd"] / MISRA1D["b2"] ** 2, rel=STD_ERROR_RTOL)
    assert ssr == pytest.approx(MISRA1D["rss"], rel=RSS_RTOL)


def test_misra1d_agrees_with_scipy_and_lmfit_path(misra1d):
    s, i, v = _misra_arrays(misra1d)
    model = fit_mechanism_arrays(s, i, v, models=("none",),
                                 weighting="uniform").models["none"]
    # scipy.optimize.curve_fit (MINPACK LM), an independent implementation.
    popt, pcov = optimize.curve_fit(lambda x, b1, b2: b1 * b2 * x / (1 + b2 * x), s[0], v[0],
                                    p0=[500.0, 1e-4], xtol=POLISH_TOL, ftol=POLISH_TOL)
    assert model.estimate[0, 0] == pytest.approx(popt[0], rel=AGREEMENT_RTOL)
    assert 1.0 / model.estimate[0, 1] == pytest.approx(popt[1], rel=AGREEMENT_RTOL)
    assert model.se[0, 0] == pytest.approx(np.sqrt(pcov[0, 0]), rel=STD_ERROR_RTOL)
    reference = fit_model("none", s[0], i[0], v[0], intervals="wald")
    np.testing.assert_allclose(model.estimate[0], reference.params["estimate"],
                               rtol=AGREEMENT_RTOL)
    np.testing.assert_allclose(model.ci_low[0], reference.params["ci_low"], rtol=STD_ERROR_RTOL)
    np.testing.assert_allclose(model.ci_high[0], reference.params["ci_high"],
                               rtol=STD_ERROR_RTOL)


def test_dnase_published_4pl():
    # Davidian & Giltinan (1995), Nonlinear Models for Repeated Measurement Data, §5.2.4
    # (R datasets::DNase, run 1): A = -0.007897, B = 2.377239, xmid = 1.507403,
    # scal = 1.062579 on log(conc); in this parameterisation bottom = A, top = B,
    # log_ic50 = xmid/ln 10 and hill = -1/scal (a rising curve). Published to 4-7 digits.
    conc = np.repeat([0.04882812, 0.1953125, 0.390625, 0.78125, 1.5625, 3.125, 6.25, 12.5], 2)
    density = np.array([0.017, 0.018, 0.121, 0.124, 0.206, 0.215, 0.377, 0.374, 0.614, 0.609,
                        1.019, 1.001, 1.334, 1.364, 1.730, 1.710])
    fit = fit_logistic_batch(np.log10(conc)[None], density[None])
    assert fit.converged[0]
    top, bottom, log_ic50, hill = fit.estimate[0]
    assert bottom == pytest.approx(-0.007897, abs=1e-6)
    assert top == pytest.approx(2.377239, rel=1e-6)
    assert log_ic50 * np.log(10) == pytest.approx(1.507403, rel=1e-6)
    assert -1.0 / hill == pytest.approx(1.062579, rel=1e-6)
    assert fit.ssr[0] == pytest.approx(0.00470725, rel=1e-5)
    assert fit.se[0, 0] == pytest.approx(0.109516, rel=1e-4)


# --- the same rules as the lmfit path -------------------------------------------------

def test_starts_and_bounds_follow_the_per_problem_rules():
    tables, _ = _simulated_tables(12, SEED + 1)
    # Drop some points so that rows differ in length and padding is exercised.
    tables = [t.iloc[: len(t) - 7 * (c % 3)] for c, t in enumerate(tables)]
    s, i, v, mask = _arrays(tables)
    w = np.where(mask, np.random.default_rng(SEED).uniform(0.5, 2.0, s.shape), 0.0)
    for name in MODEL_NAMES:
        starts = mechanism_starts(name, s, i, v, mask, w)
        lower, upper = mechanism_log_bounds(name, s, i, v, mask)
        for c in range(len(tables)):
            keep = mask[c]
            expected = starting_values(name, s[c, keep], i[c, keep], v[c, keep], w[c, keep])
            np.testing.assert_allclose(starts[c], [expected[p] for p in MODELS[name].param_names],
                                       rtol=SAME_RULE_RTOL)
            bounds = log_bounds(name, s[c, keep], i[c, keep], v[c, keep])
            np.testing.assert_allclose(lower[c], [b[0] for b in bounds.values()],
                                       rtol=SAME_RULE_RTOL)
            np.testing.assert_allclose(upper[c], [b[1] for b in bounds.values()],
                                       rtol=SAME_RULE_RTOL)
    x, y, _ = _simulated_curves(40, SEED)
    x = np.concatenate([x, np.repeat(x[:, :5], 2, axis=1)[:, :10]])  # replicated levels too
    y = np.concatenate([y, y[:, ::-1]])
    mask = np.ones(x.shape, bool)
    mask[::3, -2:] = False
    starts = logistic_starts(x, y, mask)
    for c in range(len(x)):
        expected = logistic4_start(x[c, mask[c]], y[c, mask[c]])
        np.testing.assert_allclose(starts[c], [expected[p] for p in PARAM_NAMES],
                                   rtol=SAME_RULE_RTOL)


def _polished(model, s, i, v, w, theta):
    """scipy's least_squares (trust-region reflective, inside the same log bounds) run
    from ``theta`` far past the usual tolerances: where it ends is an independent
    verdict on whether ``theta`` is the optimum."""
    law = MODELS[model]
    bounds = log_bounds(model, s, i, v)
    lower = np.array([bounds[p][0] for p in law.param_names])
    upper = np.array([bounds[p][1] for p in law.param_names])
    start = np.clip(theta, lower + POLISH_TOL, upper - POLISH_TOL)
    sol = optimize.least_squares(lambda th: w * (v - law.rate(s, i, *np.exp(th))), start,
                                 bounds=(lower, upper), method="trf", xtol=POLISH_TOL,
                                 ftol=POLISH_TOL, gtol=POLISH_TOL)
    return np.exp(sol.x)


def _check_against_lmfit(name, s, i, v, w, estimate, ssr, ref):
    """Engine estimates (the determined ones) against a ModelFit of the lmfit path.

    Returns None when they agree to AGREEMENT_RTOL. Otherwise it checks that the lmfit
    path is the one that stopped short of the optimum (MINPACK's ftol/xtol in
    fitting.py) — the engine's SSR is no larger, and scipy started from the engine's
    solution stays on it — and returns the largest relative difference.
    """
    k = MODELS[name].n_params
    well = ref.params["determined"].to_numpy()[:k]
    ref_est = ref.params["estimate"].to_numpy()[:k]
    rel = np.abs(estimate[:k] - ref_est) / np.abs(ref_est)
    if np.all(rel[well] <= AGREEMENT_RTOL):
        return None
    assert ssr <= ref.ssr, (name, ssr, ref.ssr)
    polished = _polished(name, s, i, v, w, np.log(estimate[:k]))
    np.testing.assert_allclose(estimate[:k][well], polished[well], rtol=AGREEMENT_RTOL)
    return float(rel[well].max())


def test_agreement_with_lmfit_path(grid_set, capsys):
    tables, truth, batch, reference = grid_set
    agree = [batch.verdict[c] == reference[c].verdict for c in range(len(tables))]
    compared, off = 0, []
    for c, t in enumerate(tables):
        # Extended laws are fitted only where the lack-of-fit test failed: the same
        # compounds must have tried the same laws on both paths.
        assert set(batch.mechanism_fit(c).models) == set(reference[c].models), c
        for name, model in batch.models.items():
            if name not in reference[c].models:
                continue
            ref = reference[c].models[name]
            assert model.converged[c] == ref.converged, (c, name)
            if not ref.converged:
                continue
            np.testing.assert_array_equal(model.determined[c], ref.params["determined"])
            compared += 1
            s, i, v = (t[col].to_numpy() for col in ("substrate", "inhibitor", "rate"))
            worst = _check_against_lmfit(name, s, i, v, np.ones_like(v), model.estimate[c],
                                         model.ssr[c], ref)
            if worst is not None:
                off.append((c, name, worst))
    with capsys.disabled():
        print(f"\nengine vs lmfit path on {len(tables)} grids: verdicts agree on "
              f"{sum(agree)}/{len(agree)}; {compared} converged fits compared, "
              f"{len(off)} beyond {AGREEMENT_RTOL:g} where lmfit stopped short: {off}")
        for c in np.flatnonzero(~np.array(agree)):
            print(f"  verdict differs, compound {c} (truth {truth[c]}): engine "
                  f"{batch.verdict[c]} ({batch.reason[c]}); lmfit {reference[c].verdict} "
                  f"({reference[c].reason})")
    assert np.mean(agree) >= VERDICT_AGREEMENT
    assert len(off) <= 0.01 * compared


def test_vectorised_verdicts_equal_compare_rules(grid_set):
    tables, _, _, reference = grid_set
    fits = fit_mechanisms_batch({f"C{c}": t for c, t in enumerate(tables[:60])},
                                weighting="uniform")
    assert list(fits) == [f"C{c}" for c in range(60)]
    for c, fit in enumerate(fits.values()):
        # The tables built from arrays are the ones inhibkin.core.compare builds from the fits.
        pd.testing.assert_frame_equal(fit.comparison, compare.comparison_table(fit.models))
        nested = compare.f_test_table(fit.models)
        pd.testing.assert_frame_equal(fit.ftests.iloc[:len(nested)], nested)
        # The rest are the fixed-alpha rows of the verdict's rule 4: mixed's, then those
        # of each family's general law the compound tried (rule 4 within the family).
        generals = [g for g in (extension_of("mixed", f) for f in FAMILIES) if g in fit.models]
        assert list(fit.ftests["reduced"].iloc[len(nested):]) == [
            fit.options.alpha_row(a, law) for law in ("mixed", *generals)
            for a in fit.options.alpha_values]
        decided = compare.decide(fit.comparison, fit.ftests, fit.options)
        if len(fit.lack_of_fit) > 1:
            # Rule 5 tried the extended laws: the verdict is theirs or "inadequate".
            assert fit.verdict in ("inadequate", "ambiguous") \
                or MODELS[fit.best].family != "classical"
            continue
        assert (fit.verdict, fit.best, fit.candidates, fit.reason) == \
            (decided.verdict, decided.best, decided.candidates, decided.reason)
        lm_fit = reference[c]
        assert fit.verdict == lm_fit.verdict
        pd.testing.assert_index_equal(fit.models["mixed"].params.index,
                                      lm_fit.models["mixed"].params.index)
    first = next(iter(fits.values()))
    assert first.summary() and first._repr_html_() and len(first.to_frame())


def test_relative_weighting_follows_lmfit_path():
    tables, _ = _simulated_tables(30, SEED + 2)
    s, i, v, mask = _arrays(tables)
    batch = fit_mechanism_arrays(s, i, v, mask, weighting="relative")
    off = 0
    for c, t in enumerate(tables):
        sc, ic, vc = (t[col].to_numpy() for col in ("substrate", "inhibitor", "rate"))
        # The weights come from three reweighted mixed fits; each solution is settled
        # only to the lmfit path's own stopping rule, so compare at 1e-5.
        np.testing.assert_allclose(batch.weights[c, mask[c]], relative_weights(sc, ic, vc),
                                   rtol=1e-5)
        # Given the same weights, every fit agrees as closely as the unweighted ones.
        w = batch.weights[c, mask[c]]
        for name in ("none", "competitive", "uncompetitive", "noncompetitive"):
            model = batch.models[name]
            ref = fit_model(name, sc, ic, vc, w, intervals="wald")
            if _check_against_lmfit(name, sc, ic, vc, w, model.estimate[c], model.ssr[c],
                                    ref) is not None:
                off += 1
    reference = [ik.fit_mechanisms(t, intervals="wald", weighting="relative") for t in tables]
    agree = np.mean([batch.verdict[c] == reference[c].verdict for c in range(len(tables))])
    assert agree >= VERDICT_AGREEMENT
    assert off <= 0.05 * 4 * len(tables)


def test_engine_4pl_is_the_logistic_module_curve():
    x, _, truth = _simulated_curves(50, SEED)
    theta = truth.T.copy()
    theta[3, ::2] *= -1  # rising curves too
    pred, jac = _Logistic()(theta, x.T.copy())
    np.testing.assert_allclose(pred, logistic4(x.T, *theta), rtol=SAME_RULE_RTOL)
    np.testing.assert_allclose(jac, np.moveaxis(logistic4_jacobian(x.T, *theta), -1, 0),
                               rtol=1e-10, atol=1e-10)


def _assert_4pl_close(estimate, reference, span):
    """Relative agreement; top and bottom are responses and bottom can sit at zero, so
    their differences count relative to the curve's span, the scale of the response."""
    scale = np.abs(reference).copy()
    scale[:2] = np.maximum(scale[:2], abs(span))
    assert np.all(np.abs(estimate - reference) <= AGREEMENT_RTOL * scale), (estimate, reference)


def test_4pl_agrees_with_curve_fit(capsys):
    x, y, _ = _simulated_curves(N_CURVES, SEED)
    fit = fit_logistic_batch(x, y)
    assert fit.converged.all(), fit.summary()
    compared = 0
    for c in range(N_CURVES):
        # scipy.optimize.curve_fit, from the same automatic start.
        p0 = [logistic4_start(x[c], y[c])[p] for p in PARAM_NAMES]
        popt, pcov = optimize.curve_fit(logistic4, x[c], y[c], p0=p0,
                                        jac=lambda xx, *p: logistic4_jacobian(xx, *p),
                                        xtol=POLISH_TOL, ftol=POLISH_TOL, gtol=POLISH_TOL)
        se = np.sqrt(np.diag(pcov))
        # Well determined: the midpoint inside the tested range.
        if not (x[c].min() < popt[2] < x[c].max()):
            continue
        compared += 1
        _assert_4pl_close(fit.estimate[c], popt, fit.estimate[c, 0] - fit.estimate[c, 1])
        np.testing.assert_allclose(fit.se[c], se, rtol=STD_ERROR_RTOL)
    with capsys.disabled():
        print(f"\n4PL: {compared}/{N_CURVES} curves compared with curve_fit")
    assert compared >= 0.9 * N_CURVES


# A flat curve (duplicate wells, ten concentrations) of the 2,000-compound benchmark
# campaign (benchmarks/bench_campaign.py, seed 20261216): fitted without bounds, its
# midpoint runs about 30 decades below the data, where JᵀJ's top entry is subnormal.
FLAT_LOG_CONC = [-9.678640308758, -9.350391141042, -9.022141973327, -8.693892805611,
                 -8.365643637896, -8.03739447018, -7.709145302465, -7.380896134749,
                 -7.052646967034, -6.724397799318]
FLAT_RESPONSE = [97.3357635686, 99.5788151632, 87.7959877873, 88.9798311467, 97.4194297595,
                 89.6717101164, 94.5330052462, 90.4712293628, 97.7059217076, 102.1997942282,
                 97.0246371069, 103.5982481369, 95.1476952592, 90.5811009023,
                 101.2105405393, 95.3307926187, 96.7510900526, 93.6355539058,
                 98.8000741525, 96.2105736125]


def test_singular_covariance_is_nan_without_a_warning():
    """A singular covariance is NaN, as the lmfit path's rule finds it, and computing it
    raises no RuntimeWarning (before: "overflow encountered in divide", which a campaign
    wrote into the compound's flags)."""
    x = np.repeat(FLAT_LOG_CONC, 2)[None]
    y = np.array(FLAT_RESPONSE)[None]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_logistic_batch(x, y)
    assert fit.converged[0] and fit.estimate[0, 2] < x.min() - 20, fit.estimate
    assert np.isnan(fit.se).all() and np.isnan(fit.covariance).all()
    reference = dose_response_from_estimates(10 ** x[0], y[0],
                                             dict(zip(PARAM_NAMES, fit.estimate[0])))
    assert reference.covariance is None


def test_4pl_started_at_its_solution_stops_within_a_few_steps():
    """At its minimum a problem's steps are at the SSR's rounding: the solver stops there
    instead of damping them until xtol holds (before: up to ten rejected steps)."""
    x, y, _ = _simulated_curves(N_CURVES, SEED)
    fit = fit_logistic_batch(x, y)
    again = fit_logistic_batch(x, y, start=fit.estimate)
    assert again.converged.all(), again.summary()
    assert again.iterations.max() <= 3, np.bincount(again.iterations)
    for c in range(N_CURVES):
        _assert_4pl_close(again.estimate[c], fit.estimate[c],
                          fit.estimate[c, 0] - fit.estimate[c, 1])


@pytest.mark.parametrize("fix", ["top", "bottom", "both"])
def test_4pl_fixed_plateaus(fix):
    x, y, _ = _simulated_curves(20, SEED + 3)
    top = 100.0 if fix in ("top", "both") else None
    bottom = 0.0 if fix in ("bottom", "both") else None
    fit = fit_logistic_batch(x, y, fix_top=top, fix_bottom=bottom)
    assert fit.converged.all()
    held = [top is not None, bottom is not None, False, False]
    np.testing.assert_array_equal(fit.free, ~np.array(held)[None].repeat(20, axis=0))
    for c in range(20):
        start = logistic4_start(x[c], y[c])

        def curve(xx, *free, c=c):
            it = iter(free)
            p = [top if held[0] else next(it), bottom if held[1] else next(it), next(it),
                 next(it)]
            return logistic4(xx, *p)

        p0 = [start[p] for p, h in zip(PARAM_NAMES, held) if not h]
        popt, _ = optimize.curve_fit(curve, x[c], y[c], p0=p0, xtol=POLISH_TOL,
                                     ftol=POLISH_TOL)
        reference = fit.estimate[c].copy()
        reference[~np.array(held)] = popt
        _assert_4pl_close(fit.estimate[c], reference, reference[0] - reference[1])
        np.testing.assert_array_equal(fit.estimate[c, :2][held[:2]],
                                      np.array([top, bottom])[held[:2]])
        assert np.isnan(fit.se[c][np.array(held)]).all()
    assert fit.n_params[0] == 4 - sum(held)


# --- batch mechanics ------------------------------------------------------------------

def _same_mechanisms(a, b, rows_a, rows_b):
    for name in a.models:
        for key in ("estimate", "se", "ssr", "aicc", "iterations"):
            np.testing.assert_array_equal(getattr(a.models[name], key)[rows_a],
                                          getattr(b.models[name], key)[rows_b])
    np.testing.assert_array_equal(a.verdict[rows_a], b.verdict[rows_b])
    np.testing.assert_array_equal(a.reason[rows_a], b.reason[rows_b])


def test_mixed_lengths_masks_and_nan_do_not_leak():
    tables, _ = _simulated_tables(6, SEED + 4)
    tables = [t.iloc[: len(t) - 11 * c] for c, t in enumerate(tables)]
    s, i, v, mask = _arrays(tables)
    # Masked points hold garbage; it must not matter.
    s[~mask], i[~mask], v[~mask] = np.nan, -1.0, 1e300
    # One extra compound with a NaN among its real points.
    bad = tables[0].copy()
    bad.iloc[3, bad.columns.get_loc("rate")] = np.nan
    s2, i2, v2, mask2 = (np.concatenate([a, b]) for a, b in
                         zip((s, i, v, mask), _arrays([bad, *tables[:1]])))
    batch = fit_mechanism_arrays(s2, i2, v2, mask2, weighting="uniform")
    assert batch.verdict[6] == "failed" and "non-finite" in batch.reason[6]
    assert not batch.valid[6] and batch.valid[:6].all()
    for c in range(6):
        single = fit_mechanism_arrays(*(a[[c]][:, mask[c]] for a in (s, i, v)),
                                      weighting="uniform")
        for name in batch.models:
            padded, alone = batch.models[name], single.models[name]
            np.testing.assert_array_equal(padded.determined[c], alone.determined[0])
            well = alone.determined[0]
            np.testing.assert_allclose(padded.estimate[c][well], alone.estimate[0][well],
                                       rtol=PADDING_RTOL)
            np.testing.assert_allclose(padded.ssr[c], alone.ssr[0], rtol=SAME_RULE_RTOL)
        assert batch.verdict[c] == single.verdict[0]
    # The same compound fitted alone and in a padded batch: same answer.
    _same_mechanisms(batch, batch, [0], [7])


def test_nan_curve_is_reported_and_others_untouched():
    x, y, _ = _simulated_curves(8, SEED + 5)
    clean = fit_logistic_batch(x, y)
    y_bad = y.copy()
    y_bad[2, 4] = np.nan
    x_bad = x.copy()
    x_bad[5] = -7.0  # one concentration only
    dirty = fit_logistic_batch(x_bad, y_bad)
    assert not dirty.converged[2] and "non-finite" in dirty.reason[2]
    assert not dirty.converged[5] and "two distinct" in dirty.reason[5]
    others = [0, 1, 3, 4, 6, 7]
    np.testing.assert_array_equal(dirty.estimate[others], clean.estimate[others])
    assert np.isnan(dirty.estimate[[2, 5]]).all()
    assert len(dirty.to_frame()) == 8 and "converged" in dirty.summary()


def test_batch_of_one_and_of_zero():
    tables, _ = _simulated_tables(1, SEED + 6)
    one = fit_mechanisms_batch(tables)
    assert len(one) == 1
    ref = ik.fit_mechanisms(tables[0], intervals="wald")
    assert one[0].verdict == ref.verdict
    np.testing.assert_allclose(one[0].models["none"].params["estimate"],
                               ref.models["none"].params["estimate"], rtol=AGREEMENT_RTOL)
    assert fit_mechanisms_batch([]) == [] and fit_mechanisms_batch({}) == {}
    empty = fit_mechanism_arrays(np.zeros((0, 5)), np.zeros((0, 5)), np.zeros((0, 5)))
    assert len(empty) == 0 and empty.models["mixed"].estimate.shape == (0, 5)
    assert len(fit_logistic_batch(np.zeros((0, 10)), np.zeros((0, 10)))) == 0
    x, y, _ = _simulated_curves(1, SEED)
    assert fit_logistic_batch(x[0], y[0]).converged.tolist() == [True]
    result = lm.solve(_LogRateLaw("none"), np.zeros((0, 2)), (np.zeros((0, 3)),) * 2,
                      np.zeros((0, 3)))
    assert result.theta.shape == (0, 2)


def test_bad_tables_fail_alone():
    tables, _ = _simulated_tables(3, SEED + 7)
    negative = tables[1].copy()
    negative.loc[5, "inhibitor"] = -2.0
    missing = tables[2].drop(columns="inhibitor")
    fits = fit_mechanisms_batch([tables[0], negative, missing])
    assert [f.verdict == "failed" for f in fits] == [False, True, True]
    assert "'inhibitor'" in fits[1].reason and "row 5" in fits[1].reason
    assert "-2.0" in fits[1].reason
    assert "'inhibitor'" in fits[2].reason and "missing" in fits[2].reason
    assert fits[0].verdict == ik.fit_mechanisms(tables[0], intervals="wald").verdict
    with pytest.raises(ik.DataError, match="weighting"):
        fit_mechanisms_batch(tables, weighting="proportional")


def test_parameter_beyond_the_data_ends_at_its_bound():
    # Rates that curve upwards: the best hyperbola is the straight-line limit, km and vmax
    # → ∞ together. The engine must stop at a bound, converged, with km not determined,
    # and fit no worse than the lmfit path.
    s = np.geomspace(0.1, 10, 8)[None]
    v = 3.0 * s * (1 + 0.02 * s)
    model = fit_mechanism_arrays(s, np.zeros_like(s), v, models=("none",)).models["none"]
    ref = fit_model("none", s[0], np.zeros(8), v[0], intervals="wald")
    assert model.converged[0] and ref.converged
    assert not model.determined[0, 1] and not ref.params.loc["km", "determined"]
    _, upper = mechanism_log_bounds("none", s, np.zeros_like(s), v, np.ones(s.shape, bool))
    assert np.any(np.abs(model.theta[0] - upper[0]) < 1e-9)
    assert model.ssr[0] <= ref.ssr * (1 + 1e-9)


def test_fallback_refits_with_lmfit_and_counts():
    tables, _ = _simulated_tables(5, SEED + 8)
    s, i, v, mask = _arrays(tables)
    batch = fit_mechanism_arrays(s, i, v, mask, max_iterations=2, weighting="uniform")
    assert batch.n_fallback == sum(int(m.fallback.sum()) for m in batch.models.values()) > 0
    for c, t in enumerate(tables):
        ref = ik.fit_mechanisms(t, intervals="wald", weighting="uniform")
        assert batch.verdict[c] == ref.verdict
        for name, model in batch.models.items():
            if model.fallback[c]:
                assert model.reason[c].startswith("refitted by the lmfit path")
                np.testing.assert_allclose(model.estimate[c], ref.models[name].params["estimate"],
                                           rtol=AGREEMENT_RTOL)
    without = fit_mechanism_arrays(s, i, v, mask, max_iterations=2, fallback=False,
                                   weighting="uniform")
    assert without.n_fallback == 0
    assert (without.models["mixed"].reason == lm.STATUS_REASONS[lm.FAILED_ITERATIONS]).all()


def test_chunked_and_dask_equal_local():
    distributed = pytest.importorskip("dask.distributed")
    tables, _ = _simulated_tables(23, SEED + 9)
    s, i, v, mask = _arrays(tables)
    local = fit_mechanism_arrays(s, i, v, mask)
    chunked = fit_mechanism_arrays(s, i, v, mask, chunk_size=5)
    _same_mechanisms(local, chunked, slice(None), slice(None))
    x, y, _ = _simulated_curves(101, SEED)
    curves = fit_logistic_batch(x, y)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = fit_mechanism_arrays(s, i, v, mask, client=client, chunk_size=6)
        remote_curves = fit_logistic_batch(x, y, client=client, chunk_size=20)
    _same_mechanisms(local, remote, slice(None), slice(None))
    for key in ("estimate", "se", "ssr", "status", "iterations"):
        np.testing.assert_array_equal(getattr(curves, key), getattr(remote_curves, key))


def test_benchmark_smoke():
    from benchmarks.bench_engine import main

    text = main(smoke=True)
    assert "curve_fit loop" in text and "lmfit loop" in text
    assert text.count("ratio") >= 2 and "peak memory" in text


@pytest.mark.parametrize("weighting", ["uniform", "relative"])
def test_negative_rates_are_fitted_as_on_the_lmfit_path(weighting):
    """A slightly negative well is data on both solvers (issue 12, item 4); rates with no
    signal at all fail on both, with the same reason."""
    tables, _ = _simulated_tables(10, SEED + 11)
    for table in tables:
        table.loc[table["true_rate"].idxmin(), "rate"] = -0.01 * table["rate"].max()
    silent = tables[0].assign(rate=np.random.default_rng(SEED).normal(-0.01, 0.05,
                                                                      len(tables[0])))
    fits = fit_mechanisms_batch([*tables, silent], weighting=weighting)
    reference = [ik.fit_mechanisms(t, intervals="wald", weighting=weighting) for t in tables]
    assert [f.verdict for f in fits[:-1]] == [r.verdict for r in reference]
    assert "failed" not in [f.verdict for f in fits[:-1]]
    for fit, ref in zip(fits, reference):
        np.testing.assert_allclose(fit.data["weight"], ref.data["weight"], rtol=1e-5)
    assert fits[-1].verdict == "failed" and "no signal" in fits[-1].reason
    # The array entry point checks the same rule without a table.
    s, i, v, mask = _arrays([silent])
    assert "no signal" in fit_mechanism_arrays(s, i, v, mask).reason[0]
