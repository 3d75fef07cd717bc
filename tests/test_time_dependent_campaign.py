"""Time-dependent compounds inside a campaign: the store, the workbook, the report's
figures, the substrate correction in rank and report (issue 16, item 5).

Reads from the mass-action ODE of tests/td_ode.py (solve_ivp, LSODA, rtol 1e-10, each
curve solved once per session). Units: µM and s.
"""

import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pytest
from td_ode import Scheme, plate_reads

import inhibkin as ik
from inhibkin.errors import DataError, OptionError

TIMES = tuple(np.linspace(0.0, 3600.0, 61))
SUBSTRATE = 100.0
INHIBITORS = (0.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0)
# Covalent two-step schemes (KI = (koff + k5)/kon ≈ 1 µM, Copeland), kinact/KI 2000 and
# 500 /M/s; little enzyme, so the controls convert 0.3 % of S.
STRONG = Scheme(kon=10.0, koff=10.0, k5=0.002, enzyme=1e-6)
WEAK = Scheme(kon=10.0, koff=10.0, k5=0.0005, enzyme=1e-6)
# 1 + S/Km: the substrate-competitive correction, S = 100 µM and Km = 10 µM (td_ode).
FACTOR = 1.0 + SUBSTRATE / STRONG.km
# openpyxl writes numbers with 16 significant digits (tests/test_excel.py).
XLSX_RTOL = 5e-16
# A sketch is a few kilobytes of SVG whatever the read count (display/sketch.py).
MAX_SKETCH_BYTES = 12_000


def _reads(scheme, compound, inhibitors, seed):
    return plate_reads(scheme, SUBSTRATE, inhibitors, TIMES, noise_sd=2e-4,
                       seed=seed).assign(compound=compound)


def _ki(scheme):
    return (scheme.koff + scheme.k5) / scheme.kon


@pytest.fixture(scope="module")
def reads():
    return pd.concat([_reads(WEAK, "=cov-weak", INHIBITORS, 3),
                      _reads(STRONG, "007", INHIBITORS, 4),
                      _reads(STRONG, "cov bad", (0.0, 5.0), 5)])


@pytest.fixture(scope="module")
def ranking(reads):
    return ik.fit_time_dependent_ranking(reads, substrate=SUBSTRATE, km=STRONG.km)


@pytest.fixture(scope="module")
def campaign(ranking):
    table, _ = ik.simulate_campaign(3, seed=1)
    return ik.fit_campaign(table, quiet=True, engine="batched", time_dependent=ranking)


def test_ranking_keeps_its_fits_and_equals_rank_time_dependent(reads, ranking):
    assert list(ranking.table["compound"]) == ["007", "=cov-weak", "cov bad"]
    assert set(ranking.fits) == {"007", "=cov-weak"}             # the failed one has none
    pd.testing.assert_frame_equal(
        ranking.to_frame(), ik.rank_time_dependent(reads, substrate=SUBSTRATE, km=STRONG.km))
    with pytest.raises(TypeError):
        ranking.table.loc[0, "score"] = 0.0
    assert "log10(kinact/KI)" in ranking.summary() and "<table" in ranking._repr_html_()


def test_campaign_carries_the_time_dependent_ranking_apart(campaign, ranking):
    assert campaign.time_dependent is ranking
    assert not set(campaign.ranking["compound"]) & set(ranking.table["compound"])
    with pytest.raises(OptionError, match="TimeDependentRanking"):
        ik.fit_campaign(ik.simulate_campaign(1, seed=1)[0], quiet=True,
                        time_dependent=ranking.table)


def test_campaign_summary_counts_the_time_dependent_compounds(campaign):
    text = " ".join(campaign.summary().split())
    assert ("3 time-dependent compounds (2 determined, 1 failed) ranked apart by "
            "log10(kinact/KI)") in text
    assert "Campaign.time_dependent.table" in text
    lines = campaign.summary().splitlines()
    first = next(j for j, line in enumerate(lines) if "time-dependent compounds" in line)
    assert all(len(line) <= 78 for line in lines[first:first + 3])      # wrapped to 78
    plain = ik.fit_campaign(ik.simulate_campaign(1, seed=1)[0], quiet=True)
    assert "time-dependent" not in plain.summary()


def test_ranking_carries_substrate_depletion_and_checks_it_once(reads):
    # product_per_signal checked before any compound is fitted (not once per compound).
    with pytest.raises(DataError, match="product_per_signal"):
        ik.fit_time_dependent_ranking(reads, product_per_signal=1.0)
    carried = ik.fit_time_dependent_ranking(reads, substrate=SUBSTRATE, km=STRONG.km,
                                            product_per_signal=1.0)
    assert (carried.fits["007"].kobs["depletion_factor"].dropna() > 1).all()


def test_store_round_trip_of_the_time_dependent_table(tmp_path, campaign):
    pytest.importorskip("sqlalchemy")
    from inhibkin.store import ResultStore, StoreError

    with ResultStore(tmp_path / "s.sqlite") as store:
        store.write(campaign, name="with covalent")
        store.write(ik.Campaign(ranking=campaign.ranking, fits={}), name="without")
        got = store.campaign_table("with covalent", "time_dependent")
        with pytest.raises(StoreError, match="holds no 'time_dependent' table"):
            store.campaign_table("without", "time_dependent")
    expected = campaign.time_dependent.to_frame()
    pd.testing.assert_frame_equal(got, expected, check_exact=True)
    for column in expected.select_dtypes("float64"):
        # Every float to the bit (NaN where NaN).
        np.testing.assert_array_equal(got[column].to_numpy().view(np.int64),
                                      expected[column].to_numpy().view(np.int64))


def test_workbook_round_trip_of_the_time_dependent_sheet(tmp_path, campaign):
    pytest.importorskip("openpyxl")
    from inhibkin.inputs.excel import (
        campaign_sheets,
        read_workbook_rows,
        rows_to_table,
        write_workbook,
    )

    path = write_workbook(campaign_sheets(campaign), tmp_path / "c.xlsx")
    got = rows_to_table(read_workbook_rows(path, sheet="time-dependent"))
    expected = campaign.time_dependent.to_frame()
    assert list(got.columns) == list(expected.columns)
    assert list(got["compound"]) == list(expected["compound"])     # "=cov-weak" as text
    for column in ("kinact_over_ki", "kinact_over_ki_low", "ki", "score"):
        np.testing.assert_allclose(got[column].astype(float), expected[column],
                                   rtol=XLSX_RTOL, equal_nan=True)
    assert list(got["status"]) == list(expected["status"])


def _section(text):
    return text.split('id="time-dependent"')[1].split("</section>")[0]


def test_report_draws_progress_curves_and_kobs_for_every_fitted_compound(tmp_path,
                                                                           campaign):
    text = ik.report(campaign, tmp_path / "r.html", detail="none", quiet=True).read_text()
    section = _section(text)
    svgs = section.split("<svg")[1:]
    assert len(svgs) == 4                       # two per fitted compound, none for the failed
    for name in ("007", "=cov-weak"):
        assert f"<title>progress curves of {name}</title>" in section
        assert f"<title>kobs against [I] of {name}</title>" in section
    assert "progress curves of cov bad" not in section
    for piece in svgs:
        svg = "<svg" + piece.split("</svg>")[0] + "</svg>"
        ET.fromstring(svg)                      # well-formed
        assert len(svg.encode()) < MAX_SKETCH_BYTES
    # A bare table (rank_time_dependent) gives the table without figures.
    bare = ik.report(campaign, tmp_path / "b.html", detail="none", quiet=True,
                     time_dependent=campaign.time_dependent.to_frame()).read_text()
    assert "<svg" not in _section(bare) and ">007<" in _section(bare)


def test_rank_and_report_apply_the_substrate_correction(tmp_path, reads):
    """KI = KI,app/(1 + S/Km) and kinact/KI × (1 + S/Km) (Copeland; dependence.py), through
    the CLI's rank and report stages, the truth of the ODE inside the corrected intervals."""
    from inhibkin.cli import main

    grid, path = tmp_path / "grid.csv", tmp_path / "reads.csv"
    ik.simulate_campaign(2, seed=2)[0].to_csv(grid, index=False)
    reads.to_csv(path, index=False)
    tables = {}
    for label, extra in (("apparent", []),
                         ("corrected", ["--time-dependent-substrate", "100uM",
                                        "--time-dependent-km", f"{STRONG.km:g}uM"])):
        out = tmp_path / f"{label}.parquet"      # exact text (CSV neutralises "=cov-weak")
        main(["rank", "--grid", str(grid), "-o", str(tmp_path / "r.csv"), "--quiet",
              "--time-dependent", str(path), "--time-dependent-output", str(out), *extra])
        tables[label] = pd.read_parquet(out).set_index("compound")
    apparent, corrected = tables["apparent"], tables["corrected"]
    for name, scheme in (("007", STRONG), ("=cov-weak", WEAK)):
        a, c = apparent.loc[name], corrected.loc[name]
        assert c["kinact_over_ki"] == pytest.approx(a["kinact_over_ki"] * FACTOR, rel=1e-9)
        assert c["ki"] == pytest.approx(a["ki"] / FACTOR, rel=1e-9)
        assert c["ki"] == pytest.approx(_ki(scheme), rel=0.1)
        truth = scheme.k5 / _ki(scheme)
        assert c["kinact_over_ki_low"] < truth < c["kinact_over_ki_high"]
    html = tmp_path / "r.html"
    main(["report", "--grid", str(grid), "-o", str(html), "--quiet", "--detail", "none",
          "--time-dependent", str(path), "--time-dependent-substrate", "100uM",
          "--time-dependent-km", f"{STRONG.km:g}uM"])
    section = _section(html.read_text())
    assert f"{corrected.loc['007', 'kinact_over_ki']:.3g} [" in section
    assert f"{apparent.loc['007', 'kinact_over_ki']:.3g} [" not in section
    status = main(["rank", "--grid", str(grid), "-o", str(tmp_path / "r.csv"), "--quiet",
                   "--time-dependent", str(path), "--time-dependent-output",
                   str(tmp_path / "x.csv"), "--time-dependent-km", "10uM"])
    assert status != 0 and not (tmp_path / "x.csv").exists()


def test_cli_rank_stores_and_writes_the_time_dependent_table(tmp_path, reads):
    pytest.importorskip("sqlalchemy")
    pytest.importorskip("openpyxl")
    from inhibkin.cli import main
    from inhibkin.inputs.excel import read_workbook_rows
    from inhibkin.store import ResultStore

    grid, path = tmp_path / "grid.csv", tmp_path / "reads.csv"
    ik.simulate_campaign(2, seed=2)[0].to_csv(grid, index=False)
    reads.to_csv(path, index=False)
    out, td = tmp_path / "ranked.xlsx", tmp_path / "td.parquet"
    main(["rank", "--grid", str(grid), "-o", str(out), "--quiet", "--time-dependent",
          str(path), "--time-dependent-output", str(td), "--store",
          str(tmp_path / "s.sqlite"), "--campaign", "week 1"])
    written = pd.read_parquet(td)
    with ResultStore(tmp_path / "s.sqlite") as store:
        stored = store.campaign_table("week 1", "time_dependent")
    pd.testing.assert_frame_equal(stored, written, check_dtype=False)
    rows = read_workbook_rows(out, sheet="time-dependent")
    assert [r[1] for r in rows[1:]] == list(written["compound"])
    again = tmp_path / "again.parquet"
    assert main(["store", str(tmp_path / "s.sqlite"), "campaign", "week 1", "--table",
                 "time_dependent", "-o", str(again), "--quiet"]) == 0
    pd.testing.assert_frame_equal(pd.read_parquet(again), written, check_dtype=False)


def test_kobs_sketch_is_scaled_to_the_wells_and_the_chosen_scheme(ranking):
    from inhibkin.display.sketch import kobs_sketch

    fit = ranking.fits["007"]
    used = fit.kobs[(fit.kobs["inhibitor"] > 0) & np.isfinite(fit.kobs["kobs_low"])]
    curves = fit.fitted_kobs(30)
    chosen = curves[curves["chosen"]]
    assert set(chosen["scheme"]) == {fit.scheme}
    top = max(used["kobs_high"].max(), chosen["kobs"].max()) * 1.05
    svg = kobs_sketch(used, curves, label="k")
    assert f">{top:.3g}<" in svg                   # the y axis ends just above the data
    # Both schemes drawn, the chosen one solid; the other one cut where it leaves the axis.
    assert svg.count("<polyline") == len(used) + 2
    assert svg.count('stroke-dasharray="3 2"') == 1
