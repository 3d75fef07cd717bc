"""Per-compound figures as files (issue 17, item 6): PNG at 150 dpi or more, SVG, an
index that keeps every compound's exact text."""

import numpy as np
import pandas as pd
import pytest
from PIL import Image
from test_batch import KM_M, _dose_plates

import inhibkin as ik
from inhibkin.cli import main
from inhibkin.errors import DataError
from inhibkin.reporting.figure_files import write_figures


@pytest.fixture(scope="module")
def campaign():
    grid, _ = ik.simulate_campaign(2, seed=8)
    grid.loc[grid["compound"] == grid["compound"].iloc[0], "compound"] = "a/b: ü"
    return ik.fit_campaign(grid, quiet=True)


def test_png_and_svg_figures_with_an_index(tmp_path, campaign):
    index = write_figures(campaign, tmp_path / "png", dpi=150)
    assert list(index["compound"]) == list(campaign.ranking["compound"])
    assert "a_b_mechanism.png" in set(index["mechanism_figure"])
    for name in index["mechanism_figure"]:
        with Image.open(tmp_path / "png" / name) as image:
            assert np.allclose(image.info["dpi"], 150, atol=0.5)
    back = ik.read_table(tmp_path / "png" / "index.csv")
    assert sorted(back["compound"]) == sorted(campaign.ranking["compound"])
    svg = write_figures(campaign, tmp_path / "svg", format="svg")
    text = (tmp_path / "svg" / svg["mechanism_figure"].iloc[0]).read_text()
    assert "<svg" in text
    with pytest.raises(DataError, match="150 dpi or more"):
        write_figures(campaign, tmp_path / "low", dpi=72)


def test_cli_figures_for_dose_response_curves(tmp_path):
    _dose_plates({"CPD-1": 50e-9}, seed=4).to_csv(tmp_path / "plates.csv", index=False)
    assert main(["potency", str(tmp_path / "plates.csv"), "--km", f"{KM_M * 1e6}uM", "-o",
                 str(tmp_path / "p.csv"), "--figures", str(tmp_path / "fig"), "--quiet"]) in (0, 1)
    index = pd.read_csv(tmp_path / "fig" / "index.csv", keep_default_na=False)
    drawn = index[index["dose_response_figure"] != ""]
    assert len(drawn) >= 1
    assert (tmp_path / "fig" / drawn["dose_response_figure"].iloc[0]).stat().st_size > 1000
    assert main(["potency", str(tmp_path / "plates.csv"), "--km", "20uM", "-o",
                 str(tmp_path / "q.csv"), "--figures", str(tmp_path / "no" / "fig")]) == 2
