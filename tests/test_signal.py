"""Signal to concentration: Beer–Lambert, standard curves, blank curves."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from inhibkin.errors import DataError
from inhibkin.rates.initial import initial_rates
from inhibkin.rates.signal import CHROMOPHORES, BeerLambert, blank_signal, fit_standard_curve

# Agreement with scipy.stats.linregress (same least-squares line, other code).
LINREGRESS_RTOL = 1e-10


def test_nadh_beer_lambert_worked_example():
    # NADH at 340 nm, ε = 6220 M⁻¹cm⁻¹ (Horecker & Kornberg 1948, J. Biol. Chem.
    # 175:385–390, from memory). A = ε·l·c: A = 0.311 over l = 0.5 cm is
    # c = 0.311 / (6220 × 0.5) M = 1.0e-4 M = 100 µM.
    assert CHROMOPHORES["NADH"].epsilon == 6220.0
    nadh = BeerLambert.of("NADH", path_length=0.5)
    assert nadh.sensitivity == pytest.approx(3110.0)
    assert nadh.concentration(0.311) == pytest.approx(1.0e-4, rel=1e-12)
    assert "NADH" in nadh.summary()


def test_every_chromophore_names_its_source():
    for entry in CHROMOPHORES.values():
        assert entry.epsilon > 0 and entry.wavelength_nm > 0
        assert "(19" in entry.source or "(20" in entry.source


def test_beer_lambert_refuses_bad_constants():
    with pytest.raises(DataError, match="epsilon"):
        BeerLambert(-1.0)
    with pytest.raises(DataError, match="unknown chromophore"):
        BeerLambert.of("NADX")


def test_standard_curve_matches_linregress():
    rng = np.random.default_rng(31)
    c = np.repeat([0.0, 5.0, 10.0, 20.0, 40.0], 2)  # µM
    y = 120.0 + 35.0 * c + 8.0 * rng.standard_normal(c.size)
    curve = fit_standard_curve(pd.DataFrame({"concentration": c, "signal": y}), unit="uM")
    # scipy.stats.linregress: ordinary least squares with standard errors (independent code).
    ref = stats.linregress(c, y)
    assert curve.slope == pytest.approx(ref.slope, rel=LINREGRESS_RTOL)
    assert curve.intercept == pytest.approx(ref.intercept, rel=LINREGRESS_RTOL)
    assert curve.slope_se == pytest.approx(ref.stderr, rel=LINREGRESS_RTOL)
    assert curve.intercept_se == pytest.approx(ref.intercept_stderr, rel=LINREGRESS_RTOL)
    assert curve.r_squared == pytest.approx(ref.rvalue**2, rel=LINREGRESS_RTOL)
    assert curve.concentration_range == (0.0, 40.0)
    assert curve.concentration(curve.intercept + curve.slope * 12.5) == pytest.approx(12.5)
    assert list(curve.outside([curve.signal_range[0] - 1, 500.0, 5000.0])) == [True, False, True]
    assert curve.to_frame()["unit"].iloc[0] == "uM"


def test_standard_curve_refuses_bad_standards():
    with pytest.raises(DataError, match="at least 3 standards"):
        fit_standard_curve(pd.DataFrame({"concentration": [1.0, 1.0, 1.0],
                                         "signal": [1.0, 2.0, 3.0]}))
    with pytest.raises(DataError, match=r"column 'signal', row 1 \(value 'high'\)"):
        fit_standard_curve(pd.DataFrame({"concentration": [0.0, 1.0, 2.0],
                                         "signal": [1.0, "high", 3.0]}))
    with pytest.raises(DataError, match="does not rise"):
        fit_standard_curve(pd.DataFrame({"concentration": [0.0, 1.0, 2.0],
                                         "signal": [3.0, 2.0, 1.0]}))


def test_rates_through_a_standard_curve_and_its_range():
    # Fluorescence standard curve 100 + 50·c (c in µM); a well forming 0.02 µM/s.
    standards = pd.DataFrame({"concentration": [0.0, 2.0, 4.0, 8.0],
                              "signal": [100.0, 200.0, 300.0, 500.0]})
    curve = fit_standard_curve(standards, unit="uM")
    times = np.arange(30) * 10.0
    signal = np.concatenate([100.0 + 50.0 * 0.02 * times, 300.0 + 50.0 * 0.02 * times])
    reads = pd.DataFrame({"plate": 1, "well": np.repeat(["A1", "A2"], 30),
                          "time": np.tile(times, 2), "signal": signal})
    plate_map = pd.DataFrame({"plate": 1, "well": ["A1", "A2"], "compound": "X",
                              "substrate_uM": [500.0, 500.0], "inhibitor_uM": 0.0})
    table = initial_rates(reads, plate_map, conversion=curve, substrate="substrate_uM",
                          inhibitor="inhibitor_uM").table
    np.testing.assert_allclose(table["rate"], [0.02, 0.02], rtol=1e-9)
    # A2 climbs past the highest standard (500) inside its window.
    assert "out_of_range" not in table["flags"].iloc[0]
    assert "out_of_range" in table["flags"].iloc[1]


def test_blank_curve_is_averaged_and_interpolated():
    time = np.array([0.0, 10.0, 0.0, 10.0, 5.0, 5.0])
    signal = np.array([1.0, 2.0, 3.0, 4.0, 9.0, 9.0])
    group = np.array([0, 0, 0, 0, 0, 1])
    is_blank = np.array([True, True, True, True, False, False])
    out = blank_signal(time, signal, group, is_blank)
    # Mean blank curve (0 s: 2.0, 10 s: 3.0), interpolated at 5 s: 2.5; group 1 has none.
    assert out[4] == pytest.approx(2.5)
    assert np.isnan(out[5])
