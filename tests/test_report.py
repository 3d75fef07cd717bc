"""The HTML report: self-contained, escaped, complete, written atomically; notebook views."""

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from inhibkin.campaign import fit_campaign
from inhibkin.core.logistic import logistic4
from inhibkin.display.text import ranking_ki_unit
from inhibkin.errors import DataError
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.potency.curve import fit_dose_response
from inhibkin.potency.table import potency_table
from inhibkin.reporting.report import (
    CAUTIONS,
    campaign_html,
    check_detail,
    dose_response_html,
    fit_html,
    render_report,
    report,
    select_detail,
)
from inhibkin.simulate import simulate_campaign, simulate_grid
from inhibkin.units import column_unit, from_molar, significant_text

SEED = 20261202
HOSTILE = "<script>alert(1)</script>"
BROWSER_TIMEOUT_S = 120
BROWSER_FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync")


def find_browser():
    """Debian's chromium (or another Chromium build) on PATH, else None."""
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def render_in_browser(html_path: Path, screenshot: Path) -> str:
    """Open the file in headless Chromium: write a screenshot, return the rendered DOM."""
    browser = find_browser()
    if browser is None:
        pytest.skip("no Chromium browser on PATH (Debian: apt-get install -y chromium)")
    url = html_path.resolve().as_uri()
    with tempfile.TemporaryDirectory() as profile:
        common = [browser, *BROWSER_FLAGS, f"--user-data-dir={profile}",
                  "--window-size=1280,2000"]
        subprocess.run([*common, f"--screenshot={screenshot}", url], check=True,
                       capture_output=True, timeout=BROWSER_TIMEOUT_S)
        dom = subprocess.run([*common, "--dump-dom", url], check=True, capture_output=True,
                             text=True, timeout=BROWSER_TIMEOUT_S).stdout
    return dom


def assert_self_contained(text: str) -> None:
    assert "http://" not in text and "https://" not in text
    sources = re.findall(r"""\b(?:src|href)\s*=\s*["']([^"']*)["']""", text)
    for source in sources:
        assert source.startswith(("data:", "#")), source
    assert "@import" not in text and "url(" not in text


@pytest.fixture(scope="module")
def campaign():
    table, _ = simulate_campaign(3, seed=SEED, n_substrate=5, n_inhibitor=4)
    table["compound"] = table["compound"].replace({"CPD-1": HOSTILE})
    bad = table[table["compound"] == "CPD-2"].copy()
    bad["compound"] = "BAD & <b>bold</b>"
    bad["rate"] = -1.0  # negative rates: this compound fails, the others go on
    return fit_campaign(pd.concat([table, bad], ignore_index=True), quiet=True)


@pytest.fixture(scope="module")
def potency():
    rng = np.random.default_rng(SEED)
    rows = []
    conc = 30.0 / 3.0 ** np.arange(8)
    for plate, spread in (("P1", 0.03), ("P2", 0.2)):
        for k, compound in enumerate((f"{plate}-A", f"{plate}-B")):
            y = logistic4(np.log10(conc), 100.0, 0.0, np.log10(0.5 + k), 1.0)
            signal = 1000 + 90 * y + 9000 * spread * rng.standard_normal(conc.size)
            rows += [dict(plate=plate, role="sample", compound=compound, conc=c, signal=s,
                          substrate=40.0) for c, s in zip(conc, signal)]
        for role, level in (("max", 10000.0), ("min", 1000.0)):
            rows += [dict(plate=plate, role=role, compound=None, conc=0.0, signal=s,
                          substrate=40.0)
                     for s in level + 9000 * spread * rng.standard_normal(8)]
    return potency_table(pd.DataFrame(rows), concentration="conc", km=40.0, intervals="wald")


@pytest.fixture(scope="module")
def written(campaign, potency, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "report.html"
    # One compound in full (the matplotlib figures), the others as sketches.
    report(campaign, path, potency=potency, rate_unit="µM/min", potency_unit="µM",
           detail=[HOSTILE])
    return path


def test_report_is_one_self_contained_file(written, campaign):
    text = written.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    assert_self_contained(text)
    assert text.count("data:image/png;base64,") == 3  # three figures of the one in full
    n_sketched = len(campaign.fits) - 1
    # Each sketched compound: the global fit and its residuals as inline SVG.
    assert text.count('<svg class="sketch"') >= 2 * n_sketched
    assert sorted(p.name for p in written.parent.iterdir()) == ["report.html"]  # no temp file


def test_hostile_compound_ids_are_escaped(written):
    text = written.read_text(encoding="utf-8")
    assert HOSTILE not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "<b>bold</b>" not in text and "BAD &amp; &lt;b&gt;bold&lt;/b&gt;" in text
    assert text.count("<script") == 1  # the report's own sorting code, nothing else


def test_report_holds_every_section(written, campaign, potency):
    text = written.read_text(encoding="utf-8")
    for caution in CAUTIONS:
        assert caution in text
    for heading in ("Ranked compounds", "Quality control", "Dose-response screen",
                    "Model comparison", "Nested F-tests", "Parameters of",
                    "Linearised views (diagnostic only, not the fit)"):
        assert heading in text
    assert 'class="sortable" id="ranking-table"' in text
    assert "P2" in potency.plates.flagged and "Flagged plates: P2" in text
    failed = campaign.ranking[campaign.ranking["status"] == "failed"]
    assert len(failed) == 1
    reason = failed["reason"].iloc[0]
    assert reason.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace(
        "'", "&#39;") in text


def test_campaign_without_potency_and_mapping_of_fits(tmp_path):
    data = simulate_grid("competitive", vmax=10.0, km=2.0, kic=0.5, s=[0.5, 1, 2, 4, 8],
                         i=[0, 0.5, 1, 2], cv=0.03, seed=SEED)
    fits = {"X-1": fit_mechanisms(data, intervals="wald"),
            "X-2": fit_mechanisms(data, models=("none", "competitive"), intervals="wald")}
    path = report(fits, tmp_path / "fits.html", units={"substrate": "mM", "inhibitor": "µM"},
                  detail=["X-1"])
    text = path.read_text(encoding="utf-8")
    assert_self_contained(text)
    assert "X-1" in text and "X-2" in text and "the mixed fit did not converge" in text
    # X-2 is sketched: its axes are SVG text in the display units asked for.
    assert "substrate (mM)" in text and "0.5 µM" in text


def test_report_refuses_other_inputs_and_missing_directories(campaign, tmp_path):
    with pytest.raises(DataError, match="needs a Campaign"):
        render_report([1, 2, 3])
    with pytest.raises(DataError, match="output directory does not exist"):
        report(campaign, tmp_path / "missing" / "r.html")
    assert not (tmp_path / "missing").exists()


def test_report_replaces_an_existing_file_whole(campaign, tmp_path):
    path = tmp_path / "r.html"
    path.write_text("old")
    report(campaign, path, detail="none")
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["r.html"]


def test_notebook_views_are_compact_and_escaped(campaign):
    fit = campaign.fits[HOSTILE]
    html = fit_html(fit)
    assert "Verdict: " in html and "data:image/png;base64," in html
    assert len(html) < 200_000
    view = campaign_html(campaign)
    assert HOSTILE not in view and "&lt;script&gt;" in view
    assert "data:image/png;base64," in view


def test_dose_response_view():
    conc = 30.0 / 3.0 ** np.arange(10)
    fit = fit_dose_response(conc, logistic4(np.log10(conc), 100, 0, -0.5, 1.0) + 0.5
                            * np.random.default_rng(SEED).standard_normal(10),
                            compound=HOSTILE, intervals="wald")
    html = dose_response_html(fit, conc_unit="µM")
    assert HOSTILE not in html and "&lt;script&gt;" in html and "IC50" in html


def test_hostile_report_renders_as_text_in_a_browser(written, tmp_path):
    shot = tmp_path / "hostile.png"
    dom = render_in_browser(written, shot)
    assert shot.stat().st_size > 10_000
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in dom  # shown as text in the page
    assert dom.count("<script") == 1


def test_report_of_a_campaign_shows_its_own_dose_response_screen(tmp_path):
    # A campaign that fitted curves itself carries their fits and its plates' Z'; the
    # report draws both without a separate potency table.
    from test_batch import KM_M, _dose_plates

    plates = _dose_plates({"DR-A": 3e-8, "DR-B": 4e-7, "DR-C": 2e-6}, seed=4, per_plate=2)
    campaign = fit_campaign(dose_response=plates, km=KM_M, quiet=True)
    path = report(campaign, tmp_path / "screen.html")
    text = path.read_text(encoding="utf-8")
    assert "Z'-factor" in text and "Dose-response curves" in text
    for plate in ("P1", "P2"):
        assert plate in text
    for compound in ("DR-A", "DR-B", "DR-C"):
        assert text.count(compound) >= 2  # ranked table and the screen table
    # Issue 17: one unit for the IC50 column, chosen by the size of its values (median
    # 0.4 µM -> nM), never raw molar.
    assert "IC50 (nM) [95% CI]" in text and "IC50 (M)" not in text
    assert_self_contained(text)


def test_detail_chooses_rules_and_compound_ids():
    ranking = pd.DataFrame({"compound": ["A", "flagged", "C", "D"],
                            "flags": ["", "", "noisy", ""]})
    assert select_detail("top:2", ranking) == {"A", "flagged"}
    assert select_detail("none", ranking) == set()
    assert select_detail("all", ranking) == {"A", "flagged", "C", "D"}
    assert select_detail(["top:1", "D"], ranking) == {"A", "D"}
    # An item that is a compound's exact text names the compound, not the rule.
    assert select_detail("flagged", ranking) == {"flagged"}
    assert select_detail("flagged", ranking.assign(compound=list("ABCD"))) == {"C"}
    with pytest.raises(DataError, match="neither a compound of the campaign nor a rule"):
        select_detail(["A", "Z-9"], ranking)
    with pytest.raises(DataError, match="top:N needs a whole number"):
        check_detail("top:ten")
    with pytest.raises(DataError, match="as text"):
        check_detail([3])


def test_sketched_report_has_no_raster_and_valid_svg(campaign, tmp_path):
    import xml.etree.ElementTree as ET

    text = render_report(campaign, detail="none")
    assert "data:image/png" not in text
    assert_self_contained(text)
    sketches = re.findall(r'<svg class="sketch".*?</svg>', text, flags=re.S)
    assert len(sketches) >= 2 * len(campaign.fits)
    for svg in sketches:
        ET.fromstring(svg)  # well-formed: every text escaped, every element closed
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text and HOSTILE not in text
    # Budget of the issue: 1,000 compounds in at most 20 MB.
    assert len(text.encode("utf-8")) / len(campaign.ranking) < 20_000


def test_full_figures_are_embedded_at_twice_the_resolution_they_are_shown_at(written):
    """Issue 17, item 6: the report's figures at twice the former 72 dpi, shown at the
    same size, so each CSS pixel holds 2 × 2 image pixels (sharp on high-density screens)."""
    import base64
    import io

    from PIL import Image

    text = written.read_text(encoding="utf-8")
    images = re.findall(r'<img [^>]*src="data:image/png;base64,([^"]+)" '
                        r'width="(\d+)" height="(\d+)"', text)
    assert len(images) == text.count("data:image/png;base64,") == 3
    for data, width, height in images:
        size = Image.open(io.BytesIO(base64.b64decode(data))).size
        assert size[0] == 2 * int(width) and abs(size[1] - 2 * int(height)) <= 1


def test_parameter_tables_write_each_concentration_in_a_unit_for_people(campaign):
    """Issue 17, item 6: a campaign's constants (held in M) are written in the unit their
    size suggests, named in a unit column, never as raw molar like 3.049e-05."""
    text = render_report(campaign, detail="none", quiet=True)
    rows = re.findall(r"<tr><td>(km|kic|kiu|ki)</td><td>([^<]*)</td><td>([^<]*)</td>", text)
    assert len(rows) >= len(campaign.fits)
    # A constant the data set no limit on ("not determined") keeps M.
    assert {unit for _, unit, x in rows if x != "not determined"} <= {"mM", "µM", "nM", "pM"}
    numbers = [float(x) for _, _, x in rows if x and x[0].isdigit()]
    assert numbers and all(1 <= x <= 1000 for x in numbers)


def _png_sizes(html):
    """(pixel size, shown width, shown height) of each inline PNG of a page."""
    import base64
    import io

    from PIL import Image

    images = re.findall(r'<img [^>]*src="data:image/png;base64,([^"]+)" '
                        r'width="(\d+)" height="(\d+)"', html)
    assert len(images) == html.count("data:image/png;base64,") >= 1
    return [(Image.open(io.BytesIO(base64.b64decode(d))).size, int(w), int(h))
            for d, w, h in images]


def test_notebook_figures_are_as_sharp_as_the_report_s(campaign):
    """Issue 17, item 6: the notebook views' figures were 60 dpi shown at their pixel size;
    now 2 × 2 image pixels per CSS pixel, shown at the same size as before."""
    fit = campaign.fits[HOSTILE]
    for html, inches in ((fit_html(fit), None), (campaign_html(campaign), (4.2, 2.6))):
        for (px_w, px_h), width, height in _png_sizes(html):
            assert px_w == 2 * width and abs(px_h - 2 * height) <= 1
            if inches is not None:  # the same size on the page as the former 60 dpi figure
                assert (width, height) == (round(inches[0] * 60), round(inches[1] * 60))


def test_ranking_ki_column_has_one_unit_chosen_by_magnitude(campaign):
    """Issue 17, item 6: the report's and the notebook's Ki column was fixed in nM; now the
    unit its values read in (column_unit of the Ki values and limits), stated in the
    header, with each number the ranked table's ki_M in that unit."""
    ranking = campaign.ranking
    unit = ranking_ki_unit(ranking)
    assert unit == column_unit(ranking[["ki_M", "ki_low_M", "ki_high_M"]].to_numpy().ravel())
    for html in (render_report(campaign, detail="none", quiet=True), campaign_html(campaign)):
        assert f"Ki ({unit}) [95% CI]" in html
        for r in ranking[ranking["status"] == "determined"].itertuples():
            assert f">{significant_text(from_molar(r.ki_M, unit))} [" in html
    # An explicit unit still wins.
    assert "Ki (pM) [95% CI]" in render_report(campaign, detail="none", quiet=True,
                                               ki_unit="pM")


def test_summary_states_the_ki_unit_once_and_the_ranked_text_follows_it(campaign):
    """Issue 17, item 6: the printed summary had ki_reported in raw M ('3.27e-08 M
    [3.08e-08, 3.48e-08]'); now one unit, in the header, and ki_reported in that unit."""
    unit = ranking_ki_unit(campaign.ranking)
    text = campaign.summary()
    assert f"Ki ({unit}) [95% CI]" in text and " M [" not in text and "e-0" not in text
    for r in campaign.ranking[campaign.ranking["status"] == "determined"].itertuples():
        ki, low, high = (significant_text(from_molar(x, unit))
                         for x in (r.ki_M, r.ki_low_M, r.ki_high_M))
        assert f"{ki} [{low}, {high}]" in text
        assert r.ki_reported == f"{ki} {unit} [{low}, {high}]"


def test_report_names_the_family_of_an_extended_verdict(tmp_path):
    # A substrate-inhibited grid (v = vmax*S/(km + S + S**2/ksi), the textbook law;
    # common practice) is named by rule 5; the report says which family it used.
    s, i = (x.ravel() for x in np.meshgrid([10.0, 20, 50, 100, 200, 500, 1000, 2000],
                                           [0.0, 1, 2, 5, 10, 20]))
    s, i = np.repeat(s, 2), np.repeat(i, 2)
    v = 10 * s / (100 * (1 + i / 3) + s + s**2 / 300)
    v = v * (1 + 0.02 * np.random.default_rng(SEED).standard_normal(v.size))
    fit = fit_mechanisms(pd.DataFrame({"substrate": s, "inhibitor": i, "rate": v}),
                         intervals="wald")
    assert fit.verdict == "competitive with substrate inhibition", fit.reason
    text = report({"SI-1": fit}, tmp_path / "si.html").read_text(encoding="utf-8")
    assert "Model family: <b>substrate inhibition</b>" in text
    assert "S**2/ksi" in text
