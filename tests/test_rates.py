"""Initial rates from progress curves: accuracy against closed-form curves, flags, input checks."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import lambertw

from inhibkin.errors import DataError
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.rates.initial import _rates_core, _spd_inverse, initial_rates
from inhibkin.rates.signal import BeerLambert

# The initial-rate estimate must be within 2 % of vmax·S0/(km + S0) (the brief's criterion).
RATE_RTOL = 0.02
# Initial-rate conditions: at most 10 % of the substrate converted (common practice).
MAX_CONVERSION = 0.10
# The conversion flag is checked outside a band of ±1 % conversion around the threshold,
# where the fitted estimate of the conversion and the exact one may fall on either side.
CONVERSION_BAND = 0.01
# Agreement of the vectorised pass with statsmodels' OLS and with a per-well run.
OLS_RTOL = 1e-8
TIMES = np.arange(60) * 10.0  # s


def mm_product(t, s0, vmax, km):
    """Product of the integrated Michaelis–Menten equation in closed form,
    P(t) = S0 − km·W[(S0/km)·exp((S0 − vmax·t)/km)], W the principal branch of Lambert's W
    (Schnell & Mendoza 1997, J. Theor. Biol. 187:207–212); scipy.special.lambertw is the
    reference implementation of W."""
    return s0 - km * np.real(lambertw(s0 / km * np.exp((s0 - vmax * t) / km)))


def plate(curves, substrate, inhibitor=None, *, compound="CPD-1", roles=None, plate_id=1):
    """Reads and plate map for a list of signal arrays over TIMES."""
    n = len(curves)
    wells = [f"W{k:03d}" for k in range(n)]
    reads = pd.DataFrame({"plate": plate_id, "well": np.repeat(wells, len(TIMES)),
                          "time": np.tile(TIMES, n), "signal": np.concatenate(curves)})
    plate_map = pd.DataFrame({"plate": plate_id, "well": wells, "compound": compound,
                              "substrate": np.asarray(substrate, dtype=float),
                              "inhibitor": 0.0 if inhibitor is None else inhibitor,
                              "role": "sample" if roles is None else roles})
    return reads, plate_map


def mm_plate(km=50.0, noise=0.0, seed=3):
    """Wells from slow to far too fast at five substrate levels (concentrations in µM)."""
    rng = np.random.default_rng(seed)
    curves, s, truth = [], [], []
    for s0 in (10.0, 25.0, 50.0, 250.0, 500.0):
        for vmax in (0.02, 0.05, 0.1, 0.2, 0.5, 1.0):  # µM/s
            curves.append(mm_product(TIMES, s0, vmax, km) + noise * s0 * rng.standard_normal(60))
            s.append(s0)
            truth.append((vmax, vmax * s0 / (km + s0)))
    reads, plate_map = plate(curves, s)
    return reads, plate_map, np.array(truth), km


def test_lambert_w_curve_solves_the_rate_law():
    # The closed form must satisfy dP/dt = vmax·(S0 − P)/(km + S0 − P) (Michaelis–Menten);
    # checked by central differences, an independent route to the same curve.
    s0, vmax, km, h = 40.0, 0.3, 25.0, 1e-3
    t = np.linspace(1.0, 500.0, 50)
    dpdt = (mm_product(t + h, s0, vmax, km) - mm_product(t - h, s0, vmax, km)) / (2 * h)
    s = s0 - mm_product(t, s0, vmax, km)
    np.testing.assert_allclose(dpdt, vmax * s / (km + s), rtol=1e-6)


@pytest.mark.parametrize("method", ["linear", "curve"])
def test_initial_rate_within_two_percent_at_low_conversion(method):
    reads, plate_map, truth, km = mm_plate()
    table = initial_rates(reads, plate_map, method=method, signal_unit="uM",
                          substrate_unit="uM").table
    s0 = table["substrate"].to_numpy()
    v0 = truth[:, 1]
    low = table["conversion"].to_numpy() <= MAX_CONVERSION
    if method == "linear":
        # A straight line over a window that curves measurably is flagged, not trusted.
        low &= ~table["flags"].str.contains("nonlinear").to_numpy()
    assert low.sum() >= 15
    np.testing.assert_allclose(table["rate"].to_numpy()[low], v0[low], rtol=RATE_RTOL)
    # Exact conversion at the window's end, from the closed form.
    exact = np.array([mm_product(end, s, vmax, km) / s for end, s, vmax in
                      zip(table["window_end"], s0, truth[:, 0])])
    flagged = table["flags"].str.contains("conversion").to_numpy()
    assert (exact > MAX_CONVERSION + CONVERSION_BAND).any()
    assert flagged[exact > MAX_CONVERSION + CONVERSION_BAND].all()
    assert not flagged[exact < MAX_CONVERSION - CONVERSION_BAND].any()


def test_curve_method_standard_errors_cover_the_truth():
    # With read noise 0.1 % of S0 the curve method is unbiased; its standard errors should
    # cover the true initial rate about as often as a normal error would (|z| ≤ 3 in ≥ 95 %).
    z = []
    for seed in range(4):
        reads, plate_map, truth, _ = mm_plate(noise=1e-3, seed=seed)
        table = initial_rates(reads, plate_map, method="curve", signal_unit="uM",
                              substrate_unit="uM").table
        low = table["conversion"].to_numpy() <= MAX_CONVERSION
        z.append(((table["rate"] - truth[:, 1]) / table["rate_se"]).to_numpy()[low])
    z = np.concatenate(z)
    assert np.mean(np.abs(z) <= 3.0) >= 0.95
    assert abs(np.mean(z)) < 0.5


def test_linear_slope_and_se_match_statsmodels_on_the_window():
    # Ordinary least squares over the chosen window, by statsmodels (independent library).
    rng = np.random.default_rng(11)
    curve = 0.2 + 0.01 * TIMES + 0.02 * rng.standard_normal(60)
    reads, plate_map = plate([curve], [100.0])
    row = initial_rates(reads, plate_map).table.iloc[0]
    n = int(row["n_points"])
    ols = sm.OLS(curve[:n], sm.add_constant(TIMES[:n])).fit()
    assert row["rate"] == pytest.approx(ols.params[1], rel=OLS_RTOL)
    assert row["rate_se"] == pytest.approx(ols.bse[1], rel=OLS_RTOL)
    assert n == 60  # a straight line is linear over every read


def test_vectorised_pass_equals_a_per_well_run():
    reads, plate_map, _, _ = mm_plate(noise=1e-3)
    t = np.tile(TIMES, (len(plate_map), 1))
    y = reads["signal"].to_numpy().reshape(len(plate_map), 60)
    valid = np.ones_like(t, dtype=bool)
    ceiling_at = np.full(len(t), 60)
    s0 = plate_map["substrate"].to_numpy()
    options = dict(method="curve", alpha=0.05, max_bias=0.01, max_conversion=0.1, min_points=6)
    together = _rates_core(t, y, valid, ceiling_at, s0, **options)
    for w in range(len(t)):
        alone = _rates_core(t[w:w + 1], y[w:w + 1], valid[w:w + 1], ceiling_at[w:w + 1],
                            s0[w:w + 1], **options)
        assert alone["rate"][0] == pytest.approx(together["rate"][w], rel=OLS_RTOL)
        assert alone["n_points"][0] == together["n_points"][w]


def test_batched_cholesky_inverse_matches_numpy():
    # numpy.linalg.inv (LAPACK) as the independent reference.
    rng = np.random.default_rng(12)
    a = rng.standard_normal((40, 4, 7))
    matrices = a @ a.transpose(0, 2, 1)
    np.testing.assert_allclose(_spd_inverse(matrices), np.linalg.inv(matrices), rtol=1e-9,
                               atol=1e-12)


def test_nadh_consumption_rate_by_beer_lambert():
    # NADH ε340 = 6220 M⁻¹cm⁻¹ (Horecker & Kornberg 1948, J. Biol. Chem. 175:385–390,
    # from memory). Worked example: absorbance falls 0.0622 per min over a 0.5 cm path,
    # so d[NADH]/dt = 0.0622 / (6220 × 0.5) M/min = 2.0e-5 M/min = 20 µM/min.
    curve = 1.2 - 0.0622 * TIMES / 60.0
    reads, plate_map = plate([curve], [200.0])
    result = initial_rates(reads, plate_map, conversion=BeerLambert.of("NADH", path_length=0.5),
                           direction="decrease", substrate_unit="uM", rate_time_unit="min")
    assert result.table["rate"].iloc[0] == pytest.approx(20.0, rel=1e-9)
    assert result.units["rate"] == "uM/min"


def test_blanks_are_subtracted_per_plate_and_substrate_level():
    drift = {10.0: 0.002, 50.0: 0.006}  # non-enzymatic signal per s, by substrate level
    curves, s, roles = [], [], []
    for s0, d in drift.items():
        curves += [0.05 * TIMES * 0.01 + d * TIMES, d * TIMES + 0.3]
        s += [s0, s0]
        roles += ["sample", "blank"]
    curves.append(0.0005 * TIMES)
    s.append(25.0)
    roles.append("sample")
    reads, plate_map = plate(curves, s, roles=roles)
    table = initial_rates(reads, plate_map).table
    np.testing.assert_allclose(table["rate"].to_numpy()[:2], [5e-4, 5e-4], rtol=1e-9)
    assert "no_blank" in table["flags"].iloc[2]
    uncorrected = initial_rates(reads, plate_map, subtract_blanks=False).table
    assert uncorrected["rate"].iloc[0] == pytest.approx(5e-4 + 0.002, rel=1e-9)


def flags_of(curve, **options):
    reads, plate_map = plate([curve], [100.0])
    return initial_rates(reads, plate_map, signal_unit="uM", substrate_unit="uM",
                         **options).table.iloc[0]


def test_lag_is_flagged():
    # Hysteretic lag: P = v·(t − τ(1 − e^(−t/τ))), slope rising from 0 to v.
    rng = np.random.default_rng(5)
    curve = 0.05 * (TIMES - 120 * (1 - np.exp(-TIMES / 120))) + 0.01 * rng.standard_normal(60)
    assert "lag" in flags_of(curve)["flags"]


def test_burst_is_flagged():
    # Burst: a fast first phase (amplitude 2 µM) on a slow steady rate, 0.3 % conversion
    # in the first minutes; substrate depletion cannot bend the curve that much.
    rng = np.random.default_rng(6)
    curve = 2.0 * (1 - np.exp(-TIMES / 40)) + 0.002 * TIMES + 0.01 * rng.standard_normal(60)
    row = flags_of(curve)
    assert "burst" in row["flags"]
    assert "lag" not in row["flags"]


def test_depletion_alone_is_neither_lag_nor_burst():
    rng = np.random.default_rng(7)
    curve = mm_product(TIMES, 100.0, 0.05, 50.0) + 0.01 * rng.standard_normal(60)
    row = flags_of(curve)
    assert row["status"] == "ok", row["flags"]


def test_saturated_detector_is_flagged():
    raw = 0.5 + 0.01 * TIMES
    curve = np.minimum(raw, 3.0)  # the reader clips at 3 absorbance units
    row = flags_of(curve, ceiling=3.0)
    assert "ceiling" in row["flags"]
    assert row["window_end"] < 250.0
    assert row["rate"] == pytest.approx(0.01, rel=1e-9)
    assert "ceiling" not in flags_of(raw, ceiling=100.0)["flags"]


def test_pure_noise_is_flagged_flat():
    rng = np.random.default_rng(8)
    row = flags_of(0.4 + 0.01 * rng.standard_normal(60))
    assert "flat" in row["flags"]
    assert row["status"] == "flagged"


def test_negative_slope_and_too_few_points():
    assert "negative_slope" in flags_of(1.0 - 0.002 * TIMES)["flags"]
    curve = np.full(60, np.nan)
    curve[:4] = [0.1, 0.2, 0.3, 0.4]
    row = flags_of(curve)
    assert row["status"] == "failed" and "too_few_points" in row["flags"]
    assert np.isnan(row["rate"])


def test_unmatched_wells_are_reported_not_dropped():
    reads, plate_map = plate([0.01 * TIMES, 0.02 * TIMES], [10.0, 20.0])
    stray = reads[reads["well"] == "W000"].assign(well="Z99")
    extra_map = pd.DataFrame({"plate": [1], "well": ["Q01"], "compound": ["CPD-1"],
                              "substrate": [30.0], "inhibitor": [0.0], "role": ["sample"]})
    result = initial_rates(pd.concat([reads, stray]), pd.concat([plate_map, extra_map]))
    assert set(zip(result.unmatched["well"], result.unmatched["where"])) == {
        ("Z99", "reads"), ("Q01", "plate map")}
    row = result.table.set_index("well").loc["Q01"]
    assert row["status"] == "failed" and row["flags"] == "no_reads"
    assert len(result.table) == 3


def test_competitive_grid_end_to_end():
    # Competitive inhibition keeps the integrated Michaelis–Menten form with
    # km_app = km·(1 + I/kic) (Schnell & Mendoza 1997 closed form applies unchanged).
    vmax, km, kic = 0.05, 40.0, 2.0  # µM/s, µM, µM
    rng = np.random.default_rng(2026)
    curves, s, inh = [], [], []
    for s0 in km * np.geomspace(0.25, 8.0, 6):
        for i0 in kic * np.array([0.0, 0.5, 1.0, 2.0, 4.0]):
            for _ in range(2):
                p = mm_product(TIMES, s0, vmax, km * (1 + i0 / kic))
                curves.append(0.1 + p + 0.002 * s0 * rng.standard_normal(60))
                s.append(s0)
                inh.append(i0)
    reads, plate_map = plate(curves, s, inh)
    result = initial_rates(reads, plate_map, method="curve", signal_unit="uM",
                           substrate_unit="uM", inhibitor_unit="uM")
    table = result.table[result.table["status"] != "failed"]
    fit = fit_mechanisms(table, substrate="substrate", inhibitor="inhibitor", rate="rate",
                         weighting="relative")
    assert fit.verdict == "competitive", fit.reason
    estimate = fit.models["competitive"].params.loc["kic"]
    assert estimate["ci_low"] <= kic <= estimate["ci_high"]


def test_results_display():
    reads, plate_map, _, _ = mm_plate()
    result = initial_rates(reads, plate_map, signal_unit="uM", substrate_unit="uM")
    text = result.summary()
    assert "Initial rates (linear)" in text and "conversion" in text
    assert "<table" in result._repr_html_()
    frame = result.to_frame()
    assert frame.attrs["units"]["rate"] == "uM/s"
    assert list(frame.columns[:5]) == ["plate", "well", "compound", "substrate", "inhibitor"]


def test_missing_column_is_named():
    reads, plate_map = plate([0.01 * TIMES], [10.0])
    with pytest.raises(DataError, match=r"column 'signal'.*missing"):
        initial_rates(reads.drop(columns="signal"), plate_map)
    with pytest.raises(DataError, match=r"column 'substrate'.*missing"):
        initial_rates(reads, plate_map.drop(columns="substrate"))


def test_non_numeric_time_is_named():
    reads, plate_map = plate([0.01 * TIMES], [10.0])
    reads["time"] = reads["time"].astype(object)
    reads.loc[7, "time"] = "70 s"
    with pytest.raises(DataError, match=r"column 'time', row 7 \(value '70 s'\): not a number"):
        initial_rates(reads, plate_map)


def test_duplicated_read_is_named():
    reads, plate_map = plate([0.01 * TIMES], [10.0])
    reads = pd.concat([reads, reads.iloc[[3]]], ignore_index=True)
    with pytest.raises(DataError, match=r"row 3 \(value \(1, 'W000', 30\.0\)\): duplicated"):
        initial_rates(reads, plate_map)


def test_bad_options_are_refused():
    reads, plate_map = plate([0.01 * TIMES], [10.0])
    with pytest.raises(DataError, match="method"):
        initial_rates(reads, plate_map, method="spline")
    with pytest.raises(DataError, match="min_points"):
        initial_rates(reads, plate_map, min_points=3)


def test_units_are_read_from_the_headers_of_the_reads():
    """Issue 12, item 9: 'time_min' and 'product_uM' declare their units, as the plate
    map's 'substrate_uM' does; a unit given as an option must agree with the header."""
    curve = 0.5 + 0.2 * TIMES  # µM, 0.2 µM/s
    reads, plate_map = plate([curve], [100.0])
    minutes = reads.rename(columns={"signal": "product_uM"}).assign(time_min=TIMES / 60.0)
    minutes = minutes.drop(columns="time")
    plate_map = plate_map.rename(columns={"substrate": "substrate_uM"})
    res = initial_rates(minutes, plate_map, time="time", signal="product_uM",
                        substrate="substrate_uM", rate_time_unit="s")
    assert res.table["rate"].iloc[0] == pytest.approx(0.2, rel=1e-9)
    assert res.units["rate"] == "uM/s" and res.units["time"] == "min"
    with pytest.raises(DataError, match=r"'time_min'.*contradicts"):
        initial_rates(minutes, plate_map, time="time_min", time_unit="s", signal="product_uM",
                      substrate="substrate_uM")
    with pytest.raises(DataError, match=r"'product_uM'.*contradicts"):
        initial_rates(minutes, plate_map, time="time_min", signal="product_uM",
                      signal_unit="nM", substrate="substrate_uM")


@pytest.mark.parametrize("header, factor", [("Time (min)", 60.0), ("time [s]", 1.0),
                                            ("TIME_h", 3600.0), ("Time (s)", 1.0)])
def test_a_bracketed_time_header_gives_the_time_unit(header, factor):
    """Issue 17: the time header is matched as every header is (case, '(min)', '[s]'),
    and its unit read: times in minutes give a rate per second 60 times smaller."""
    curve = 0.5 + 0.2 * TIMES  # µM, 0.2 µM/s
    reads, plate_map = plate([curve], [100.0])
    reads = reads.assign(time=TIMES / factor).rename(columns={"time": header,
                                                              "signal": "Product (uM)"})
    res = initial_rates(reads, plate_map, signal="product", rate_time_unit="s")
    assert res.table["rate"].iloc[0] == pytest.approx(0.2, rel=1e-9)
    assert res.units["rate"] == "uM/s"
    with pytest.raises(DataError, match="contradicts"):
        initial_rates(reads, plate_map, signal="product", time_unit="ms")
