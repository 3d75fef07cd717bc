"""The inline SVG sketches: well-formed, escaped, drawn from the fit, same ramp as the figures."""

import dataclasses
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from inhibkin.core.logistic import logistic4
from inhibkin.display.figures import AxisUnits, level_palette
from inhibkin.display.sketch import (
    dose_response_sketch,
    grid_sketch,
    level_colours,
    residual_sketch,
)
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.potency.curve import fit_dose_response
from inhibkin.simulate import simulate_grid

SEED = 20261219
HOSTILE = "<script>alert(1)</script>"
# Channels of the ramp within one step of 8-bit rounding of seaborn's interpolated
# colormap (seaborn samples a 256-point map; the sketch evaluates the formula).
RAMP_TOLERANCE = 2 / 255


@pytest.fixture(scope="module")
def fit():
    data = simulate_grid("competitive", vmax=10.0, km=2.0, kic=0.5, s=[0.5, 1, 2, 4, 8],
                         i=[0, 0.5, 1, 2], cv=0.03, seed=SEED)
    return fit_mechanisms(data, intervals="wald")


def _parse(svg: str) -> ET.Element:
    assert svg.startswith("<svg ") and svg.endswith("</svg>")
    assert "http" not in svg  # inline SVG needs no namespace address
    return ET.fromstring(svg)


def test_level_colours_follow_the_figures_ramp():
    for n in (1, 4, 8):
        hexes = level_colours(n)
        rgb = np.array([[int(h[k:k + 2], 16) / 255 for k in (1, 3, 5)] for h in hexes])
        np.testing.assert_allclose(rgb, np.asarray(level_palette(n)), atol=RAMP_TOLERANCE)


def test_grid_sketch_draws_a_curve_and_the_cells_of_every_level(fit):
    root = _parse(grid_sketch(fit, units=AxisUnits("µM", "µM", "µM/min"), label=HOSTILE))
    assert root.find("title").text == HOSTILE  # parsed back: it was escaped in the text
    n_levels = fit.data["inhibitor"].nunique()
    assert len(root.findall("polyline")) == n_levels  # one fitted curve per level
    dots = [p for p in root.findall("path") if p.get("stroke-linecap") == "round"]
    n_cells = len(fit.data.groupby(["substrate", "inhibitor"]))
    assert sum(p.get("d").count("h0") for p in dots) == n_cells
    assert fit.best in "".join(root.itertext())


def test_residual_sketch_has_a_dot_per_observation(fit):
    root = _parse(residual_sketch(fit, units=AxisUnits()))
    dots = [p for p in root.findall("path") if p.get("stroke-linecap") == "round"]
    assert sum(p.get("d").count("h0") for p in dots) == len(fit.data)


def test_dose_response_sketch_with_and_without_a_curve():
    conc = 30.0 / 3.0 ** np.arange(10)
    rng = np.random.default_rng(SEED)
    good = fit_dose_response(conc, logistic4(np.log10(conc), 100, 0, -0.5, 1.0)
                             + 2 * rng.standard_normal(10), intervals="wald")
    root = _parse(dose_response_sketch(good, conc_unit="µM"))
    assert len(root.findall("polyline")) == 2  # the curve and the IC50 marker
    failed = dataclasses.replace(good, converged=False, message="did not converge")
    text = dose_response_sketch(failed, conc_unit="µM")
    root = _parse(text)
    assert not root.findall("polyline") and "no fitted curve" in text
    assert len(re.findall(r"h0", text)) == 10  # every well, fitted or not
