"""The demo runs the whole flow on data_demo/ and writes a report a browser can open."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_report import assert_self_contained, render_in_browser

from inhibkin.demo import DEMO_DATA

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo as `make demo` runs it: the console script, in a subprocess."""
    out = tmp_path_factory.mktemp("demo")
    done = subprocess.run([sys.executable, "-m", "inhibkin.cli", "demo", "--out", str(out)],
                          capture_output=True, text=True, stdin=subprocess.DEVNULL, timeout=600)
    assert done.returncode == 0, done.stderr
    return out, done.stdout.rstrip("\n")


def _demo_compounds() -> set:
    plate_map = pd.read_csv(DEMO_DATA / "invented_moa_plate_map.csv")
    screen = pd.read_csv(DEMO_DATA / "invented_screen_wells.csv")
    return set(plate_map["compound"].dropna()) | set(screen["compound"].dropna())


def test_demo_ends_with_the_report_path(demo):
    out, text = demo
    last = text.splitlines()[-1]
    assert last == f"Report written to {(out / 'report.html').resolve()}"
    for name in ("initial_rates.csv", "mechanism_ranking.csv", "potency_ranking.csv",
                 "report.html"):
        assert (out / name).stat().st_size > 0


def test_demo_calls_the_invented_mechanisms(demo):
    out, _ = demo
    ranking = pd.read_csv(out / "mechanism_ranking.csv")
    truth = pd.read_csv(DEMO_DATA / "invented_moa_truth.csv")
    called = dict(zip(ranking["compound"], ranking["verdict"]))
    assert set(called) == set(truth["compound"])
    # The well-determined compounds (tested across their constants) are called right.
    for compound in ("INV-0007", "INV-0019", "INV-0023", "INV-0031", "INV-0042"):
        expected = truth.set_index("compound").loc[compound, "mechanism"]
        assert called[compound] == expected, compound


def test_demo_potency_ranking_is_molar_and_ranks_no_flat_compound(demo):
    # Issue 12, items 1 and 2: the ranked-table columns the README documents, pIC50 and
    # pKi as −log10(value / 1 M), and no inactive compound of the screen's truth reported
    # as a bound below the tested range or ranked among the actives.
    from inhibkin.campaign import RANKING_COLUMNS

    out, _ = demo
    ranking = pd.read_csv(out / "potency_ranking.csv")
    assert list(ranking.columns[:len(RANKING_COLUMNS)]) == list(RANKING_COLUMNS)
    assert not {"km", "substrate", "ic50", "ki"} & set(ranking.columns)
    screen = pd.read_csv(DEMO_DATA / "invented_screen_wells.csv")
    assert sorted(ranking["compound"]) == sorted(screen["compound"].dropna().unique())
    fitted = ranking.dropna(subset=["ic50_M"])
    np.testing.assert_allclose(fitted["pic50"], -np.log10(fitted["ic50_M"]), rtol=1e-12)
    determined = ranking[ranking["status"] == "determined"]
    np.testing.assert_allclose(determined["pki"], -np.log10(determined["ki_M"]), rtol=1e-12)
    # The screen was tested up to 30 µM: every determined pKi lies well above 4.
    assert (determined["pki"] > 4).all() and (determined["pki"] < 12).all()
    truth = pd.read_csv(DEMO_DATA / "invented_screen_truth.csv").set_index("compound")
    flat = ranking[ranking["compound"].map(~truth["active"])]
    assert not flat["ki_reported"].astype(str).str.startswith("<").any()
    assert not (flat["status"] == "determined").any()
    assert (flat["status"] == "inactive").mean() > 0.95
    last_active = ranking.index[ranking["status"].isin(["determined", "bound"])].max()
    assert (ranking.index[ranking["status"] == "inactive"] > last_active).all()


def test_demo_report_names_every_compound_and_the_poor_plate(demo):
    out, _ = demo
    text = (out / "report.html").read_text(encoding="utf-8")
    assert_self_contained(text)
    missing = [c for c in _demo_compounds() if c not in text]
    assert not missing
    assert "Flagged plates: SCR-P04" in text
    assert "invented" in text


def test_demo_report_ranks_the_invented_covalent_series_apart(demo):
    # The invented covalent series (data_demo/invented_covalent_truth.csv) has its own
    # section, ranked by kinact/KI in the order of the invented truth, with its figures.
    out, text = demo
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count('<section id="time-dependent">') == 1
    section = page[page.index('<section id="time-dependent">'):]
    section = section[:section.index("</section>")]
    table = section[section.index('id="time-dependent-table"'):section.index("</table>")]
    truth = pd.read_csv(DEMO_DATA / "invented_covalent_truth.csv")
    expected = list(truth.sort_values("kinact_over_ki_per_uM_per_s",
                                      ascending=False)["compound"])
    assert sorted(table.index(c) for c in expected) == [table.index(c) for c in expected]
    assert all(f"<figcaption>{c}</figcaption>" in section for c in expected)
    assert "ranked apart in the report" in text


def test_demo_report_renders_in_a_browser(demo):
    out, _ = demo
    shot = out / "report.png"
    dom = render_in_browser(out / "report.html", shot)
    assert shot.stat().st_size > 10_000
    missing = [c for c in _demo_compounds() if c not in dom]
    assert not missing


def test_demo_data_script_is_reproducible(tmp_path):
    # The committed files are exactly what the committed script writes (fixed seed).
    subprocess.run([sys.executable, str(ROOT / "scripts" / "make_demo_data.py"), "--out",
                    str(tmp_path)], check=True, cwd=ROOT)
    for path in sorted(DEMO_DATA.glob("invented_*.csv")):
        assert (tmp_path / path.name).read_bytes() == path.read_bytes(), path.name
