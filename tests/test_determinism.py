"""Determinism: the same input gives byte-identical CSV output, run after run and on one
process or several."""

import hashlib
import subprocess
import sys

import pytest
from test_batch import KM_M, _bad_compounds, _dose_plates

from inhibkin.campaign import fit_campaign
from inhibkin.inputs.io import read_table, write_table
from inhibkin.simulate import simulate_campaign

# Generous: a subprocess imports numpy, pandas, scipy and lmfit before it starts.
TIMEOUT_SECONDS = 180


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    import pandas as pd

    folder = tmp_path_factory.mktemp("determinism")
    grid, _ = simulate_campaign(10, seed=17)
    grid = pd.concat([grid, _bad_compounds()], ignore_index=True)
    plates = _dose_plates({"CPD-02": 1e-7, "DR-1": 3e-8, "DR-2": 4e-7}, seed=9, per_plate=2)
    write_table(grid, folder / "grid.csv")
    write_table(plates, folder / "plates.csv")
    return folder


def _cli(*args, cwd):
    done = subprocess.run([sys.executable, "-m", "inhibkin.cli", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=TIMEOUT_SECONDS)
    assert done.returncode in (0, 1), done.stderr
    return done


def test_cli_output_is_byte_identical_across_runs_and_worker_counts(inputs, tmp_path):
    """Three separate processes: serial, serial again, two workers; one SHA-256."""
    common = ["rank", "--grid", inputs / "grid.csv", "--dose-response", inputs / "plates.csv",
              "--km", f"{KM_M * 1e6:g}uM", "--chunk-size", 4, "--quiet"]
    _cli(*common, "-o", tmp_path / "serial_1.csv", cwd=tmp_path)
    _cli(*common, "-o", tmp_path / "serial_2.csv", cwd=tmp_path)
    _cli(*common, "-o", tmp_path / "workers_2.csv", "--workers", 2, cwd=tmp_path)
    digests = {name: _digest(tmp_path / name)
               for name in ("serial_1.csv", "serial_2.csv", "workers_2.csv")}
    assert len(set(digests.values())) == 1, digests
    # The table is not trivially empty: it holds every compound and the failures.
    ranking = read_table(tmp_path / "serial_1.csv")
    assert len(ranking) == 10 + 4 + 2
    assert (ranking["status"] == "failed").sum() >= 4


def test_api_output_is_byte_identical_for_any_chunking(inputs, tmp_path):
    """In one process: chunk sizes 1, 3 and 32 write the same bytes (the per-compound
    computation does not depend on its neighbours)."""
    import pandas as pd

    grid = pd.read_csv(inputs / "grid.csv")
    digests = set()
    for chunk_size in (1, 3, 32):
        campaign = fit_campaign(grid, quiet=True, chunk_size=chunk_size)
        path = write_table(campaign.ranking, tmp_path / f"chunks_{chunk_size}.csv")
        params = write_table(campaign.parameters(), tmp_path / f"params_{chunk_size}.csv")
        digests.add((_digest(path), _digest(params)))
    assert len(digests) == 1
