"""The results store (issue 17, item 5): provenance, exact round trips, versions,
transactions, concurrent writers, a compound's history and the MSR, on SQLite and on a
real PostgreSQL server."""

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf

import inhibkin as ik
from inhibkin.cli import main
from inhibkin.store import ResultStore, StoreError, minimum_significant_ratio
from inhibkin.store.msr import MSR_Z

pytest.importorskip("sqlalchemy")

N_COMPOUNDS = 6
# The pooled SD of a simulated study with known between-run SD is within this relative
# error of it (2000 compounds × 2 runs: 2000 degrees of freedom, SE of an SD ≈ 1.6 %).
SD_RTOL = 0.06


def _exact(got: pd.DataFrame, expected: pd.DataFrame) -> None:
    """Equal tables, every float equal to the bit (NaN where NaN)."""
    expected = expected.reset_index(drop=True)
    pd.testing.assert_frame_equal(got, expected, check_exact=True)
    for column in expected.columns:
        if expected[column].dtype == np.float64:
            np.testing.assert_array_equal(got[column].to_numpy().view(np.int64),
                                          expected[column].to_numpy().view(np.int64))


@pytest.fixture(scope="module")
def campaigns(tmp_path_factory):
    """Two campaigns of the same compounds: the second is a re-run, the rates re-measured
    with fresh 5 % noise."""
    folder = tmp_path_factory.mktemp("store")
    table, _ = ik.simulate_campaign(N_COMPOUNDS, seed=11)
    rng = np.random.default_rng(17)
    rerun = table.assign(rate=table["rate"] * (1 + 0.05 * rng.standard_normal(len(table))))
    paths = [folder / "week1.csv", folder / "week2.csv"]
    ik.write_table(table, paths[0])
    ik.write_table(rerun, paths[1])
    fitted = [ik.fit_campaign(t, quiet=True, engine="batched") for t in (table, rerun)]
    return fitted, paths


def test_round_trip_to_the_bit_with_provenance(tmp_path, campaigns):
    (first, _), (path, _) = campaigns
    store_path = tmp_path / "results.sqlite"
    with ResultStore(store_path) as store:
        written = store.write(first, name="week 1", inputs=[path], notes="kinase X, 1 mM ATP",
                              options={"km": "20uM"})
        for table, expected in (("ranking", first.ranking), ("parameters", first.parameters()),
                                ("plates", first.plates)):
            _exact(store.campaign_table("week 1", table), expected)
        comparisons = store.campaign_table("week 1", "comparisons")
        assert sorted(comparisons["compound"].unique()) == sorted(first.fits)
        provenance = store.provenance("week 1")
    import hashlib

    assert provenance["inputs"] == [{"path": str(path),
                                     "sha256": hashlib.sha256(path.read_bytes()).hexdigest(),
                                     "n_bytes": path.stat().st_size}]
    assert provenance["notes"] == "kinase X, 1 mM ATP"
    assert provenance["options"]["km"] == "20uM"
    assert provenance["options"]["weighting"] == first.options["weighting"]
    assert provenance["package_version"] == ik.__version__
    assert provenance["created_utc"] == written.created_utc and written.version == 1


def test_rewriting_a_campaign_adds_a_version_or_is_refused(tmp_path, campaigns):
    (first, second), _ = campaigns
    with ResultStore(tmp_path / "s.sqlite") as store:
        assert store.write(first, name="w").version == 1
        assert store.write(second, name="w").version == 2
        with pytest.raises(StoreError, match=r"campaign 'w' is already in the store \(version 2"):
            store.write(first, name="w", on_existing="refuse")
        _exact(store.campaign_table("w", version=1), first.ranking)
        _exact(store.campaign_table("w"), second.ranking)  # the latest by default
        assert store.campaigns()["version"].tolist() == [1, 2]
        with pytest.raises(StoreError, match=r"no campaign 'w' version 3"):
            store.campaign_table("w", version=3)
    with pytest.raises(StoreError, match="no results store at"):
        ResultStore(tmp_path / "absent.sqlite", create=False)


def _counts(path):
    import sqlite3

    with sqlite3.connect(path) as connection:
        return {t: connection.execute(f"select count(*) from {t}").fetchone()[0]
                for t in ("campaign", "campaign_input", "result", "stored_table", "stored_row")}


def test_an_interrupted_write_leaves_the_store_as_it_was(tmp_path, campaigns, monkeypatch):
    (first, _), _ = campaigns
    path = tmp_path / "s.sqlite"
    with ResultStore(path) as store:
        store.write(first, name="kept")
    before = _counts(path)
    calls = []

    def fail_on_third(connection, campaign_id, key, columns, rows):
        calls.append(key)
        if len(calls) == 3:
            raise KeyboardInterrupt  # as if the user pressed Ctrl-C mid-write
        return original(connection, campaign_id, key, columns, rows)

    original = ResultStore._write_table
    monkeypatch.setattr(ResultStore, "_write_table", staticmethod(fail_on_third))
    with ResultStore(path) as store, pytest.raises(KeyboardInterrupt):
        store.write(first, name="lost")
    assert _counts(path) == before
    monkeypatch.undo()
    with ResultStore(path) as store:
        assert store.campaigns()["name"].tolist() == ["kept"]


_WRITER = """
import sys, time
import inhibkin as ik
from inhibkin.store import ResultStore
# The ranked table alone (no fits to refit): the write is what is under test.
campaign = ik.Campaign(ranking=ik.read_table(sys.argv[1]), fits={})
original = ResultStore._write_table
def slow(connection, campaign_id, key, columns, rows):
    original(connection, campaign_id, key, columns, rows)
    open(sys.argv[3], "w").close()  # mid-transaction now: the parent kills us
    time.sleep(60)
ResultStore._write_table = staticmethod(slow)
with ResultStore(sys.argv[2]) as store:
    store.write(campaign, name="shared")
"""


def _writer(args):
    return subprocess.Popen([sys.executable, "-c", _WRITER, *map(str, args)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_a_killed_writer_and_concurrent_writers(tmp_path, campaigns):
    """A writer process killed (SIGKILL) mid-transaction leaves nothing behind and does not
    block the next writers; two writers of one name at once get distinct versions."""
    (first, _), _ = campaigns
    path, flag, grid = tmp_path / "s.sqlite", tmp_path / "mid", tmp_path / "ranking.parquet"
    ik.write_table(first.ranking, grid)
    with ResultStore(path) as store:
        store.write(first, name="before")
    before = _counts(path)
    hanging = _writer([grid, path, flag])
    deadline = time.monotonic() + 120
    while not flag.exists() and hanging.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert flag.exists(), hanging.communicate()[1]
    os.kill(hanging.pid, signal.SIGKILL)
    hanging.wait()
    assert _counts(path) == before

    # Two writers at once, each with its own connections (threads: the SQLite file lock
    # is what serialises them, as between processes).
    _write_concurrently(path, first, name="shared", writes_each=3)
    with ResultStore(path) as store:
        kept = store.campaigns()
        assert sorted(kept.loc[kept["name"] == "shared", "version"]) == [1, 2, 3, 4, 5, 6]
        for version in range(1, 7):
            _exact(store.campaign_table("shared", version=version), first.ranking)


def test_history_and_msr_from_two_campaigns(tmp_path, campaigns, capsys):
    """Issue 17, done-when: two campaigns written through the CLI give a compound's
    history and an MSR, and the MSR is the replicate-experiment formula applied by hand
    to the two ranked tables."""
    (first, second), paths = campaigns
    store = tmp_path / "results.sqlite"
    for k, path in enumerate(paths, start=1):
        assert main(["rank", "--grid", str(path), "-o", str(tmp_path / f"r{k}.csv"), "--quiet",
                     "--engine", "batched", "--store", str(store), "--campaign", f"week {k}",
                     "--notes", "re-run"]) == 0
    compound = first.ranking["compound"].iloc[0]
    assert main(["store", str(store), "history", compound, "-o",
                 str(tmp_path / "history.csv")]) == 0
    history = ik.read_table(tmp_path / "history.csv")
    assert history["campaign"].tolist() == ["week 1", "week 2"]
    expected = [r.loc[r["compound"] == compound, "pki"].item() for r in (first.ranking,
                                                                          second.ranking)]
    assert history["pki"].tolist() == expected
    assert main(["store", str(store), "msr", "-o", str(tmp_path / "msr.csv")]) == 0
    msr = ik.read_table(tmp_path / "msr.csv").set_index("quantity")
    both = first.ranking.merge(second.ranking, on="compound")
    both = both[(both["status_x"] == "determined") & (both["status_y"] == "determined")]
    d = (both["pki_x"] - both["pki_y"]).to_numpy()
    # Eastwood et al. 2006 (J. Biomol. Screen. 11:253): MSR = 10^(2 s_d), MR = 10^mean(d),
    # limits of agreement 10^(mean(d) ± 2 s_d) — from memory.
    s_d = np.std(d, ddof=1)
    assert msr.loc["pki", "n_compounds"] == len(d) >= 4
    np.testing.assert_allclose(msr.loc["pki", "msr_pairs"], 10 ** (2 * s_d), rtol=1e-12)
    np.testing.assert_allclose(msr.loc["pki", "mean_ratio"], 10 ** np.mean(d), rtol=1e-12)
    np.testing.assert_allclose(msr.loc["pki", "upper_limit"], 10 ** (np.mean(d) + 2 * s_d),
                               rtol=1e-12)
    assert main(["store", str(store), "campaigns"]) == 0
    assert "re-run" in capsys.readouterr().out
    # A store that cannot be opened is refused before the fits, and nothing is written.
    assert main(["rank", "--grid", str(paths[0]), "-o", str(tmp_path / "r3.csv"), "--quiet",
                 "--store", str(tmp_path / "no" / "such" / "dir.sqlite")]) == 2
    assert "cannot open the results store" in capsys.readouterr().err
    assert not (tmp_path / "r3.csv").exists()
    assert main(["store", str(tmp_path / "absent.sqlite"), "campaigns"]) == 2


def test_msr_pooled_sd_against_statsmodels_and_a_known_sd():
    """The pooled SD is the residual SD of a one-way analysis of variance (statsmodels
    OLS with a compound factor), and on a simulated study with known between-run SD s
    the MSR comes out near 10^(2·√2·s) (Eastwood et al. 2006, from memory)."""
    rng = np.random.default_rng(2006)
    runs = 3
    true = rng.uniform(5, 9, 60)
    table = pd.DataFrame({"compound": np.repeat([f"C{k}" for k in range(60)], runs),
                          "campaign": np.tile([f"run{k}" for k in range(runs)], 60),
                          "pki": np.repeat(true, runs) + rng.normal(0, 0.2, 60 * runs)})
    table.loc[[0, 1], "pki"] = np.nan  # C0 measured once: not counted
    estimate = minimum_significant_ratio(table, quantities=("pki",)).estimates[0]
    anova = smf.ols("pki ~ C(compound)", data=table[table["compound"] != "C0"]).fit()
    np.testing.assert_allclose(estimate.sd, np.sqrt(anova.mse_resid), rtol=1e-10)
    assert estimate.df == int(anova.df_resid) and estimate.n_compounds == 59

    s = 0.2
    big = pd.DataFrame({"compound": np.repeat(np.arange(2000), 2),
                        "campaign": np.tile(["a", "b"], 2000),
                        "pki": np.repeat(rng.uniform(5, 9, 2000), 2)
                        + rng.normal(0, s, 4000)})
    estimate = minimum_significant_ratio(big, quantities=("pki",)).estimates[0]
    np.testing.assert_allclose(estimate.sd, s, rtol=SD_RTOL)
    np.testing.assert_allclose(np.log10(estimate.msr), MSR_Z * np.sqrt(2) * s,
                               rtol=SD_RTOL)
    np.testing.assert_allclose(np.log10(estimate.msr_pairs), MSR_Z * np.sqrt(2) * s,
                               rtol=SD_RTOL)


# ---------------------------------------------------------------- PostgreSQL


@pytest.fixture(scope="module")
def postgres_url():
    url = os.environ.get("INHIBKIN_TEST_POSTGRES_URL")
    if url:
        yield url
        return
    sys.path.insert(0, str(Path(__file__).parent))
    import postgres_server

    server, why = postgres_server.start()
    if server is None:
        pytest.skip(f"no PostgreSQL server could be started: {why}")
    try:
        yield server.url
    finally:
        server.stop()


def test_postgresql_round_trip_versions_and_concurrent_writers(postgres_url, campaigns):
    (first, second), (path, _) = campaigns
    with ResultStore(postgres_url) as store:
        store.write(first, name="pg", inputs=[path], notes="on a server")
        _exact(store.campaign_table("pg"), first.ranking)
        _exact(store.campaign_table("pg", "parameters"), first.parameters())
        _write_concurrently(postgres_url, second, name="pg", writes_each=2)
        kept = store.campaigns()
        assert sorted(kept["version"]) == [1, 2, 3, 4, 5]
        _exact(store.campaign_table("pg", version=5), second.ranking)
        history = store.history(first.ranking["compound"].iloc[0], all_versions=True)
        assert history["version"].tolist() == [1, 2, 3, 4, 5]
        assert json.loads(json.dumps(store.provenance("pg", version=1)["inputs"]))[0][
            "path"] == str(path)


def _write_concurrently(url, campaign, *, name, writes_each, writers=2):
    """``writers`` threads, each with its own store connection, writing ``campaign`` under
    ``name`` ``writes_each`` times; an error in any thread fails the test."""
    errors = []

    def write():
        try:
            with ResultStore(url) as own:
                for _ in range(writes_each):
                    own.write(campaign, name=name)
        except Exception as err:  # reported below, not lost in the thread
            errors.append(err)

    threads = [threading.Thread(target=write) for _ in range(writers)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert not errors, errors
