"""The command line end to end, in subprocesses: outputs, exit status 0/1/2, messages."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_batch import KM_M, _dose_plates

from inhibkin.cli import SUBCOMMANDS, main
from inhibkin.inputs.io import read_table

# Generous: a subprocess imports numpy, pandas, scipy and lmfit before it starts.
TIMEOUT_SECONDS = 180


def run(*args, cwd):
    return subprocess.run([sys.executable, "-m", "inhibkin.cli", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=TIMEOUT_SECONDS)


@pytest.fixture(scope="module")
def grid_file(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    done = run("simulate", "--compounds", 6, "--seed", 3, "-o", "grid.csv", "--truth",
               "truth.csv", cwd=folder)
    assert done.returncode == 0, done.stderr
    return folder / "grid.csv"


def test_rank_succeeds_with_exit_0(grid_file, tmp_path):
    done = run("rank", "--grid", grid_file, "-o", "ranking.parquet", "--quiet", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout == ""  # --quiet
    ranking = read_table(tmp_path / "ranking.parquet")
    truth = read_table(grid_file.parent / "truth.csv")
    assert sorted(ranking["compound"]) == sorted(truth["compound"])
    assert (ranking["status"] == "determined").all()


def test_some_failed_compounds_give_exit_1_and_all_rows(grid_file, tmp_path):
    table = read_table(grid_file)
    bad = table[table["compound"] == "CPD-1"].assign(compound="ZERO", rate=0.0)
    pd.concat([table, bad]).to_csv(tmp_path / "grid.csv", index=False)
    done = run("mechanism", "grid.csv", "-o", "out.csv", "--params", "params.csv",
               cwd=tmp_path)
    assert done.returncode == 1, done.stderr
    assert "1 of 7 compounds failed" in done.stderr
    assert "Traceback" not in done.stderr
    out = read_table(tmp_path / "out.csv").set_index("compound")
    assert len(out) == 7
    assert out.loc["ZERO", "status"] == "failed"
    assert "all rates are zero" in out.loc["ZERO", "reason"]
    params = read_table(tmp_path / "params.csv")
    assert set(params["compound"]) == set(out.index) - {"ZERO"}


def test_undeclared_units_give_exit_2_and_no_output(grid_file, tmp_path):
    table = read_table(grid_file).rename(columns={"inhibitor_nM": "inhibitor"})
    table.to_csv(tmp_path / "grid.csv", index=False)
    done = run("rank", "--grid", "grid.csv", "-o", "out.csv", cwd=tmp_path)
    assert done.returncode == 2
    assert "unit not declared" in done.stderr and "inhibitor_nM" in done.stderr
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "out.csv").exists()
    # Declaring the unit as an option makes the same file usable.
    fixed = run("rank", "--grid", "grid.csv", "-o", "out.csv", "--units", "inhibitor=nM",
                "--quiet", cwd=tmp_path)
    assert fixed.returncode == 0, fixed.stderr


def test_same_grid_in_nM_and_uM_gives_the_same_ki(grid_file, tmp_path):
    table = read_table(grid_file)
    in_uM = table.rename(columns={"inhibitor_nM": "inhibitor_uM"})
    in_uM["inhibitor_uM"] = table["inhibitor_nM"] / 1000.0
    in_uM.to_csv(tmp_path / "grid_uM.csv", index=False)
    assert main(["rank", "--grid", str(grid_file), "-o", str(tmp_path / "nM.csv"),
                 "--quiet"]) == 0
    assert main(["rank", "--grid", str(tmp_path / "grid_uM.csv"), "-o",
                 str(tmp_path / "uM.csv"), "--quiet"]) == 0
    a, b = read_table(tmp_path / "nM.csv"), read_table(tmp_path / "uM.csv")
    assert a["compound"].tolist() == b["compound"].tolist()
    np.testing.assert_allclose(a["ki_M"], b["ki_M"], rtol=1e-6)


def test_truncated_input_gives_exit_2_and_no_output(grid_file, tmp_path):
    text = grid_file.read_text()
    (tmp_path / "cut.csv").write_text(text[: len(text) // 2 - 3])
    done = run("rank", "--grid", "cut.csv", "-o", "out.csv", cwd=tmp_path)
    assert done.returncode == 2
    assert "cut.csv" in done.stderr and "truncated" in done.stderr
    assert "Traceback" not in done.stderr
    assert not (tmp_path / "out.csv").exists()


def test_malformed_input_gives_exit_2_and_no_output(tmp_path):
    (tmp_path / "bad.csv").write_text("compound,substrate_uM,inhibitor_nM,rate\n"
                                      "A,1,0,5\nA,2,0,7,8,9\nA,4,10\n")
    (tmp_path / "bad.parquet").write_bytes(b"PAR1 this is not a parquet file")
    for name, message in (("bad.csv", "line 3: 6 fields"), ("bad.parquet", "Parquet")):
        done = run("mechanism", name, "-o", "out.csv", cwd=tmp_path)
        assert done.returncode == 2
        assert name in done.stderr and message in done.stderr
        assert "Traceback" not in done.stderr
    assert not (tmp_path / "out.csv").exists()


def test_potency_and_rank_with_dose_response(grid_file, tmp_path):
    plates = _dose_plates({"CPD-1": 1e-7, "DR-A": 3e-8}, seed=9)
    plates.to_csv(tmp_path / "plates.csv", index=False)
    km = f"{KM_M * 1e6:g}uM"
    done = run("potency", "plates.csv", "--km", km, "-o", "potency.csv", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    potency = read_table(tmp_path / "potency.csv")
    assert set(potency["ki_source"]) == {"converted IC50"}
    done = run("rank", "--grid", grid_file, "--dose-response", "plates.csv", "--km", km,
               "-o", "ranking.csv", "--quiet", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    ranking = read_table(tmp_path / "ranking.csv").set_index("compound")
    assert ranking.loc["CPD-1", "ki_source"] == "grid fit"
    assert ranking.loc["DR-A", "ki_source"] == "converted IC50"



def test_km_without_unit_is_refused(tmp_path, capsys):
    _dose_plates({"DR-A": 3e-8}, seed=9).to_csv(tmp_path / "plates.csv", index=False)
    out = tmp_path / "p.csv"
    assert main(["potency", str(tmp_path / "plates.csv"), "--km", "20", "-o", str(out)]) == 2
    assert "with its unit" in capsys.readouterr().err
    assert not out.exists()


def test_rates_stage(tmp_path):
    t = np.arange(0.0, 300.0, 10.0)
    reads = pd.concat([pd.DataFrame({"plate": 1, "well": w, "time": t,
                                     "signal": 0.1 + slope * t})
                       for w, slope in (("A1", 2e-3), ("A2", 1e-3))])
    plate_map = pd.DataFrame({"plate": [1, 1], "well": ["A1", "A2"], "compound": ["X", "X"],
                              "substrate_uM": [100.0, 100.0], "inhibitor_nM": [0.0, 50.0]})
    reads.to_csv(tmp_path / "reads.csv", index=False)
    plate_map.to_csv(tmp_path / "map.csv", index=False)
    done = run("rates", "reads.csv", "--plate-map", "map.csv", "--chromophore", "NADH",
               "-o", "rates.csv", "--quiet", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    rates = read_table(tmp_path / "rates.csv")
    assert len(rates) == 2
    # Twice the slope, twice the rate.
    assert rates["rate"].iloc[0] == pytest.approx(2 * rates["rate"].iloc[1], rel=1e-6)


@pytest.mark.parametrize("name", [c.name for c in SUBCOMMANDS])
def test_help_shows_a_worked_example(name, capsys):
    with pytest.raises(SystemExit) as info:
        main([name, "--help"])
    assert info.value.code == 0
    assert "example:\n  inhibkin " in capsys.readouterr().out


def test_report_stage_writes_html_and_ranking(grid_file, tmp_path):
    done = run("report", "--grid", grid_file, "--intervals", "wald", "-o", "campaign.html",
               "--ranking", "ranking.csv", "--detail", "top:1", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "report written to" in done.stdout
    html_text = (tmp_path / "campaign.html").read_text(encoding="utf-8")
    ranking = read_table(tmp_path / "ranking.csv")
    for compound in ranking["compound"]:
        assert compound in html_text
    # The best ranked in full (three figures), the other five as inline sketches.
    assert html_text.count("data:image/png;base64,") == 3
    assert html_text.count('<svg class="sketch"') >= 2 * 5
    bad = run("report", "--grid", grid_file, "-o", "campaign.csv", cwd=tmp_path)
    assert bad.returncode == 2 and ".html" in bad.stderr


def test_design_stage_writes_a_layout(tmp_path):
    done = run("design", "--km-range", 1, 5, "--ki-range", 0.05, 0.5, "--wells", 24,
               "--substrate", "0.25,0.5,1,2,4,8,16", "--inhibitor", "0.01,0.03,0.1,0.3,1",
               "--simulations", 8, "--substrate-unit", "uM", "--inhibitor-unit", "nM",
               "-o", "layout.csv", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    layout = read_table(tmp_path / "layout.csv")
    assert len(layout) == 24 and "Grid plan" in done.stdout
    # Wells labelled, units in the headers, replicates numbered from 1 (issue 12, item 10).
    assert list(layout.columns) == ["plate", "well", "substrate_uM", "inhibitor_nM",
                                    "replicate"]
    assert layout["well"].iloc[0] == "A1" and layout["replicate"].min() == 1
    unitless = run("design", "--km-range", 1, 5, "--ki-range", 0.05, 0.5, "--wells", 24,
                   "--substrate", "0.25,0.5,1,2,4,8,16", "--inhibitor", "0.01,0.03,0.1,0.3,1",
                   "--simulations", 0, "-o", "layout2.csv", cwd=tmp_path)
    assert unitless.returncode == 2 and "--substrate-unit" in unitless.stderr
    assert not (tmp_path / "layout2.csv").exists()
    bad = run("design", "--km-range", 1, 5, "--ki-range", 0.05, 0.5, "--wells", 24,
              "--substrate", "1,x", "--inhibitor", "1", cwd=tmp_path)
    assert bad.returncode == 2 and "must be numbers" in bad.stderr


def test_summaries_show_the_verdict_and_no_nan(grid_file, tmp_path, capsys):
    """Issue 12, item 5: an ambiguous compound must not read as plain 'competitive', and
    missing values print as '-' (never NaN or <NA>)."""
    table = read_table(grid_file)
    zero = table[table["compound"] == "CPD-1"].assign(compound="ZERO", rate=0.0)
    pd.concat([table, zero]).to_csv(tmp_path / "grid.csv", index=False)
    for stage in (["mechanism", str(tmp_path / "grid.csv")],
                  ["rank", "--grid", str(tmp_path / "grid.csv")]):
        assert main([*stage, "-o", str(tmp_path / "out.csv"), "--weighting", "uniform"]) == 1
        out = capsys.readouterr().out
        header = next(line for line in out.splitlines() if line.lstrip().startswith("rank"))
        assert "verdict" in header.split()
        assert "NaN" not in out and "<NA>" not in out and " nan" not in out


def test_plate_without_control_wells_names_the_controls(tmp_path, capsys):
    """Issue 12, item 8: the CLI says what the Python API says, not 'no rows'."""
    plates = _dose_plates({"DR-A": 3e-8}, seed=9)
    plates[plates["role"] == "sample"].to_csv(tmp_path / "plates.csv", index=False)
    out = tmp_path / "p.csv"
    assert main(["potency", str(tmp_path / "plates.csv"), "--km", "20uM", "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "no 'max' control wells" in err and "no rows" not in err
    assert not out.exists()


def _help(capsys, *argv):
    with pytest.raises(SystemExit):
        main([*argv, "--help"])
    return " ".join(capsys.readouterr().out.split())


def test_help_is_written_for_users(capsys):
    """Issue 12, item 8: no developer text, every option described, each as it is."""
    top = _help(capsys)
    assert "SUBCOMMANDS" not in top and "Adding a stage" not in top and ":data:" not in top
    assert "exit status" in top.lower()
    report = _help(capsys, "report")
    assert "-o OUTPUT, --output OUTPUT the HTML report" in report
    potency = _help(capsys, "potency")
    assert "grid fit weights" not in potency
    assert "dose-response curves are fitted unweighted" in potency
    rates = _help(capsys, "rates")
    for option in ("--method {linear,curve,integrated}", "--direction {increase,decrease}",
                   "--time-unit {s,ms,min,h}", "--rate-time-unit {s,ms,min,h}",
                   "--time COLUMN", "--signal COLUMN", "--rate COLUMN"):
        described = rates.split(option, 1)[-1].split(" --", 1)[0].strip()
        assert option in rates and len(described) > 10, option


DEMO = Path(__file__).resolve().parents[1] / "data_demo"


def test_rates_stage_reads_the_demo_headers(tmp_path):
    """Issue 12, item 9: the demo's own reads (time_s, product_uM) feed the rates stage,
    with the units read from the headers, and the rates equal the Python API's."""
    from inhibkin.rates.initial import initial_rates

    done = run("rates", DEMO / "invented_moa_reads.csv", "--plate-map",
               DEMO / "invented_moa_plate_map.csv", "--signal", "product_uM",
               "--rate-time-unit", "min", "--method", "curve", "--rate", "rate_uM_per_min",
               "-o", "rates.csv", "--quiet", cwd=tmp_path)
    assert done.returncode in (0, 1), done.stderr
    got = read_table(tmp_path / "rates.csv")
    expected = initial_rates(read_table(DEMO / "invented_moa_reads.csv"),
                             read_table(DEMO / "invented_moa_plate_map.csv"), time="time_s",
                             signal="product_uM", substrate="substrate_uM",
                             inhibitor="inhibitor_nM", rate_time_unit="min",
                             signal_unit="uM", method="curve").table
    np.testing.assert_allclose(got["rate_uM_per_min"], expected["rate"], rtol=1e-9)
    # A missing signal column is named with the option that names it.
    done = run("rates", DEMO / "invented_moa_reads.csv", "--plate-map",
               DEMO / "invented_moa_plate_map.csv", "-o", "r.csv", cwd=tmp_path)
    assert done.returncode == 2 and "--signal" in done.stderr and "product_uM" in done.stderr


def test_report_stage_checks_detail_before_any_work(grid_file, tmp_path, capsys):
    from inhibkin.cli import main

    status = main(["report", "--grid", str(grid_file), "-o", str(tmp_path / "r.html"),
                   "--detail", "top:ten"])
    assert status == 2 and "top:N needs a whole number" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []
