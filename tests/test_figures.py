"""Figures: every function on every mechanism's simulated data and on a failed fit."""

import matplotlib.colors as mcolors
import numpy as np
import pandas as pd
import pytest
from grid_ode import EPSILON_PATH, SUBSTRATE, Mechanism, plate
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from inhibkin import BeerLambert, initial_rates
from inhibkin.core.logistic import logistic4
from inhibkin.display import figures
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.potency.curve import fit_dose_response
from inhibkin.simulate import simulate_grid

SEED = 20261201
CONSTANTS = {"none": {}, "competitive": {"kic": 0.5}, "uncompetitive": {"kiu": 0.5},
             "noncompetitive": {"kic": 0.5}, "mixed": {"kic": 0.5, "kiu": 2.0}}
S_LEVELS = [0.4, 1.0, 2.0, 4.0, 8.0, 16.0]
I_LEVELS = [0.0, 0.5, 1.0, 2.0]
UNITS = figures.AxisUnits("µM", "nM", "µM/min")
AXES_FUNCTIONS = (figures.plot_global_fit, figures.plot_residuals, figures.plot_double_reciprocal,
                  figures.plot_dixon, figures.plot_s_over_v)
FIGURE_FUNCTIONS = (figures.plot_residual_grid, figures.plot_diagnostics,
                    figures.plot_mechanism_overview)
# Relative agreement of the delta-method band with a Monte Carlo of the parameters.
BAND_RTOL = 0.05
MONTE_CARLO_DRAWS = 20_000


@pytest.fixture(scope="module")
def fits():
    out = {}
    for k, (mechanism, constants) in enumerate(CONSTANTS.items()):
        data = simulate_grid(mechanism, vmax=10.0, km=2.0, s=S_LEVELS, i=I_LEVELS, cv=0.04,
                             seed=SEED + k, **constants)
        out[mechanism] = fit_mechanisms(data, weighting="relative", intervals="wald")
    return out


@pytest.fixture(scope="module")
def failed_fit():
    # Without the mixed model the verdict cannot be reached: a real "failed" result.
    data = simulate_grid("competitive", vmax=10.0, km=2.0, kic=0.5, s=S_LEVELS, i=I_LEVELS,
                         cv=0.04, seed=SEED)
    fit = fit_mechanisms(data, models=("none", "competitive"), intervals="wald")
    assert fit.verdict == "failed"
    return fit


def _texts(ax):
    return " ".join(t.get_text() for t in ax.texts) + " " + ax.get_title()


@pytest.mark.parametrize("mechanism", list(CONSTANTS))
@pytest.mark.parametrize("function", AXES_FUNCTIONS, ids=lambda f: f.__name__)
def test_axes_functions_on_every_mechanism(fits, mechanism, function):
    ax = function(fits[mechanism], units=UNITS)
    assert isinstance(ax, Axes)
    assert ax.get_title()
    assert ax.get_xlabel() and ax.get_ylabel()


@pytest.mark.parametrize("mechanism", list(CONSTANTS))
@pytest.mark.parametrize("function", FIGURE_FUNCTIONS, ids=lambda f: f.__name__)
def test_figure_functions_on_every_mechanism(fits, mechanism, function):
    fig = function(fits[mechanism], units=UNITS)
    assert isinstance(fig, Figure)
    assert len(fig.axes) >= 3


@pytest.mark.parametrize("mechanism", list(CONSTANTS))
def test_akaike_weights_bars_sum_to_one(fits, mechanism):
    ax = figures.plot_akaike_weights(fits[mechanism])
    widths = [p.get_width() for p in ax.patches]
    assert len(widths) == 5
    assert sum(widths) == pytest.approx(1.0)
    assert fits[mechanism].verdict in ax.get_title()


def test_global_fit_draws_one_curve_per_inhibitor_level(fits):
    ax = figures.plot_global_fit(fits["competitive"], units=UNITS)
    curves = [line for line in ax.lines if len(line.get_xdata()) > len(S_LEVELS)]
    assert len(curves) == len(I_LEVELS)
    # Duplicates in every cell: error bars are drawn.
    assert any(len(c.get_segments()) for c in ax.collections)
    assert ax.get_xlabel() == "substrate (µM)"
    assert ax.get_ylabel() == "initial rate (µM/min)"


def test_global_fit_curve_is_the_fitted_model(fits):
    fit = fits["mixed"]
    ax = figures.plot_global_fit(fit)
    curve = next(line for line in ax.lines if len(line.get_xdata()) > len(S_LEVELS))
    s = np.asarray(curve.get_xdata())
    p = fit.models["mixed"].best_values
    expected = p["vmax"] * s / (p["km"] * (1 + 0 / p["kic"]) + s * (1 + 0 / p["kiu"]))
    np.testing.assert_allclose(curve.get_ydata(), expected, rtol=1e-12)


def test_global_fit_of_an_extended_verdict_draws_the_extended_law():
    # A mass-action plate (tests/grid_ode.py: SES a dead end, Ksi = 3 Km, kic = 1 uM) read
    # through initial_rates and named by rule 5: the curves are the extended law's own,
    # v = vmax*S/(km*(1 + I/kic) + S + S**2/ksi) (the textbook law; common practice),
    # and the title names the law drawn and the verdict with its family.
    reads, plate_map = plate(Mechanism(kic=1.0, ksi=30.0), 0)
    table = initial_rates(reads, plate_map, substrate="substrate_uM", inhibitor="inhibitor_uM",
                          conversion=BeerLambert(EPSILON_PATH * 1e6)).table
    fit = fit_mechanisms(table, substrate="substrate_uM", inhibitor="inhibitor_uM",
                         intervals="wald")
    assert fit.verdict == "competitive with substrate inhibition", fit.reason
    ax = figures.plot_global_fit(fit)
    curves = [line for line in ax.lines if len(line.get_xdata()) > len(SUBSTRATE)]
    assert len(curves) == 6
    p = fit.models["competitive_si"].best_values
    x = np.asarray(curves[0].get_xdata())
    # The first curve is the uninhibited level: the substrate-inhibited law, which falls
    # at high S where the classical one would not.
    expected = p["vmax"] * x / (p["km"] + x + x**2 / p["ksi"])
    np.testing.assert_allclose(curves[0].get_ydata(), expected, rtol=1e-12)
    assert "competitive_si" in ax.get_title()
    assert "verdict: competitive with substrate inhibition" in ax.get_title()


@pytest.mark.parametrize("function", (figures.plot_double_reciprocal, figures.plot_dixon,
                                      figures.plot_s_over_v), ids=lambda f: f.__name__)
def test_linearised_views_are_titled_as_diagnostics(fits, function):
    ax = function(fits["competitive"], units=UNITS)
    assert ax.get_title().startswith(figures.DIAGNOSTIC_PREFIX)
    assert "not the fit" in ax.get_title()


def test_failed_fit_shows_data_and_reason(failed_fit):
    for function in AXES_FUNCTIONS:
        ax = function(failed_fit, units=UNITS)
        assert isinstance(ax, Axes)
    ax = figures.plot_global_fit(failed_fit, units=UNITS)
    assert len(ax.containers) == len(I_LEVELS)  # the data, one errorbar series per level
    assert not [line for line in ax.lines if len(line.get_xdata()) > len(S_LEVELS)]
    assert failed_fit.reason in _texts(ax).replace("\n", " ")
    weights = figures.plot_akaike_weights(failed_fit)
    assert "did not converge" in _texts(weights)
    for function in FIGURE_FUNCTIONS:
        assert isinstance(function(failed_fit, units=UNITS), Figure)


def test_data_only_tables_are_drawn():
    data = simulate_grid("uncompetitive", vmax=5.0, km=1.0, kiu=1.0, s=S_LEVELS, i=I_LEVELS,
                         seed=SEED)
    ax = figures.plot_global_fit(data)
    assert ax.get_title() == "Data"
    assert figures.plot_dixon(data).get_title().startswith(figures.DIAGNOSTIC_PREFIX)


def test_zero_substrate_is_left_out_of_reciprocal_views():
    data = simulate_grid("competitive", vmax=5.0, km=1.0, kic=1.0, s=[0.0] + S_LEVELS,
                         i=I_LEVELS, seed=SEED)
    ax = figures.plot_double_reciprocal(data)
    assert "S = 0" in ax.get_title()
    # The cell means are marker lines (no line between them), one per inhibitor level.
    points = [line for line in ax.lines if line.get_linestyle() == "None"]
    assert len(points) == len(I_LEVELS)
    for line in points:
        assert np.all(np.isfinite(line.get_xydata()))


def test_level_palette_lightness_is_monotone():
    # Readable in grey: relative luminance (sRGB weights of ITU-R BT.709, common practice)
    # falls strictly from the lowest to the highest inhibitor level.
    rgb = np.array([mcolors.to_rgb(c) for c in figures.level_palette(8)])
    luminance = rgb @ np.array([0.2126, 0.7152, 0.0722])
    assert np.all(np.diff(luminance) < 0)
    assert luminance[0] - luminance[-1] > 0.4


def test_marker_and_line_styles_distinguish_levels():
    assert len(set(figures.LEVEL_MARKERS)) == len(figures.LEVEL_MARKERS)
    assert len(set(map(str, figures.LEVEL_LINES))) == len(figures.LEVEL_LINES)
    assert len(set(figures.MODEL_HATCHES.values())) == len(figures.MODEL_HATCHES)


@pytest.fixture(scope="module")
def dose_fit():
    rng = np.random.default_rng(SEED)
    conc = np.repeat(30.0 / 3.0 ** np.arange(10), 2)
    y = logistic4(np.log10(conc), 100.0, 0.0, np.log10(0.3), 1.0) + 4.0 * rng.standard_normal(
        conc.size)
    return fit_dose_response(conc, y, compound="INV-TEST", intervals="wald")


def test_dose_response_figure_with_band(dose_fit):
    ax = figures.plot_dose_response(dose_fit, conc_unit="µM")
    assert isinstance(ax, Axes)
    assert "INV-TEST" in ax.get_title() and "µM" in ax.get_title()
    assert any("band" in t.get_text() for t in ax.get_legend().get_texts())


def test_dose_response_band_matches_monte_carlo(dose_fit):
    # The delta-method band against an independent Monte Carlo of the same normal
    # approximation of the parameters: they agree when the curve is nearly linear in
    # the parameters over their uncertainty.
    x = np.linspace(-2.0, 1.0, 7)
    low, high = figures.dose_response_band(x, dose_fit.estimates, dose_fit.covariance,
                                           free=dose_fit.free)
    rng = np.random.default_rng(SEED)
    theta = rng.multivariate_normal([dose_fit.estimates[n] for n in dose_fit.free],
                                    dose_fit.covariance, size=MONTE_CARLO_DRAWS)
    draws = logistic4(x[None, :], *[theta[:, k, None] for k in range(4)])
    sd = draws.std(axis=0)
    np.testing.assert_allclose((high - low) / 2, figures._Z95 * sd, rtol=BAND_RTOL)


def test_dose_response_without_fit_shows_points_and_reason():
    frame = pd.DataFrame({"conc": [0.0, 0.1, 1.0, 10.0], "response": [100.0, 90.0, 50.0, 5.0]})
    ax = figures.plot_dose_response(frame, conc_unit="µM", reason="plate SCR-9 has no controls")
    assert "plate SCR-9 has no controls" in _texts(ax)
    assert len(ax.collections) == 2  # the wells with compound, and the one without


@pytest.mark.parametrize("function", FIGURE_FUNCTIONS)
def test_fixed_layout_keeps_every_label_inside_the_figure(fits, function):
    # The report's figures are laid out by fixed margins, not measured: every axes'
    # drawn extent (tick labels, axis labels, titles) stays inside the figure and no
    # two panels' extents overlap, on the mechanism with the longest names shown.
    fig = function(fits["mixed"], units=UNITS, layout="fixed")
    assert fig.get_layout_engine() is None
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    inside = fig.bbox
    boxes = [ax.get_tightbbox(renderer) for ax in fig.axes]
    for box in boxes:
        assert box.x0 >= inside.x0 and box.x1 <= inside.x1
        assert box.y0 >= inside.y0 and box.y1 <= inside.y1
    for k, a in enumerate(boxes):
        for b in boxes[k + 1:]:
            assert not a.overlaps(b)


def test_unknown_layout_is_refused(fits):
    with pytest.raises(ValueError, match="layout"):
        figures.plot_diagnostics(fits["mixed"], layout="tight")


def _pixels(fig):
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return np.asarray(canvas.buffer_rgba()).copy()


@pytest.mark.parametrize("function", FIGURE_FUNCTIONS)
def test_a_pooled_figure_draws_the_pixels_of_a_new_one(fits, failed_fit, function):
    # The report draws each compound on the figure kept from the last (FigurePool): every
    # mechanism, then a failed fit (notes instead of curves), then one with curves again.
    pool = figures.FigurePool()
    order = [*fits.values(), failed_fit, fits["mixed"], fits["none"]]
    for fit in order:
        fresh = _pixels(function(fit, units=UNITS, layout="fixed"))
        pooled = function(fit, units=UNITS, layout="fixed", pool=pool)
        assert np.array_equal(_pixels(pooled), fresh)
    # One figure per view, reused: its axes are the same objects each time.
    assert function(fits["mixed"], units=UNITS, layout="fixed", pool=pool) is pooled
