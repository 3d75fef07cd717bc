"""Fault injection: workers killed mid-campaign, interrupted command-line runs, truncated
files. Whatever breaks, every input compound comes back exactly once — fitted, or failed
with the reason — and no output path ever holds a partial table."""

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from inhibkin.campaign import fit_campaign
from inhibkin.errors import DataError
from inhibkin.inputs.io import read_table, write_table
from inhibkin.mechanism.fit import fit_mechanisms
from inhibkin.simulate import simulate_campaign

# Environment variable naming the folder where a "die once" compound leaves its mark, so
# the second attempt (on a fresh worker process) goes through. Spawned workers and Dask
# workers inherit the environment of the process that starts them.
MARK_DIR = "INHIBKIN_FAULT_MARKS"
# Compound names the dying engine reacts to.
DIE_ONCE = "DIE-ONCE"
DIE_ALWAYS = "DIE-ALWAYS"
# Generous: a subprocess imports numpy, pandas, scipy and lmfit before it starts.
TIMEOUT_SECONDS = 180


def dying_engine(data, *, context=None, **options):
    """fit_mechanisms, except that it kills its own process for the fault compounds.

    SIGKILL, not an exception: the worker vanishes as it would under the out-of-memory
    killer, with no chance to report anything.
    """
    if DIE_ALWAYS in str(context):
        os.kill(os.getpid(), signal.SIGKILL)
    if DIE_ONCE in str(context):
        mark = Path(os.environ[MARK_DIR]) / "died"
        if not mark.exists():
            mark.touch()
            os.kill(os.getpid(), signal.SIGKILL)
    return fit_mechanisms(data, context=context, **options)


def _campaign_table(fault_names):
    """Five simulated compounds, ``fault_names`` among them (each a real grid): enough for
    two chunks of three, so a lost chunk has neighbours that must come back too."""
    table, _ = simulate_campaign(5, seed=11)
    names = sorted(table["compound"].unique())
    rename = dict(zip(names[2:2 + len(fault_names)], fault_names))
    table["compound"] = table["compound"].replace(rename)
    return table, names, rename


def _assert_every_compound_once(ranking, table):
    assert sorted(ranking["compound"]) == sorted(table["compound"].unique())
    assert not ranking["compound"].duplicated().any()


@pytest.fixture
def marks(tmp_path, monkeypatch):
    monkeypatch.setenv(MARK_DIR, str(tmp_path))
    return tmp_path


def test_local_pool_reruns_lost_chunks_and_fails_only_the_compound_that_kills(marks):
    """One compound kills its worker once (its chunk must be rerun and fitted), another
    kills it every time (it alone must fail, with the reason); the rest is the serial
    table, exactly."""
    table, _, _ = _campaign_table([DIE_ONCE, DIE_ALWAYS])
    ranking = fit_campaign(table, workers=2, quiet=True, chunk_size=3,
                           engine=dying_engine).ranking
    assert (marks / "died").exists()  # the one-off fault really happened
    _assert_every_compound_once(ranking, table)
    killer = ranking.set_index("compound").loc[DIE_ALWAYS]
    assert killer["status"] == "failed"
    assert "worker process died" in killer["reason"]
    others = ranking[ranking["compound"] != DIE_ALWAYS].reset_index(drop=True)
    assert (others["status"] == "determined").all()
    serial = fit_campaign(table[table["compound"] != DIE_ALWAYS], quiet=True,
                          chunk_size=3).ranking
    # The reruns are the same computation as the serial run.
    pd.testing.assert_frame_equal(others.drop(columns="rank"), serial.drop(columns="rank"),
                                  check_exact=True)


def test_dose_response_chunks_survive_a_killed_worker(marks, monkeypatch):
    """The potency path through the same runner: a worker killed while fitting one
    chunk of curves; the chunk is rerun, nothing is lost."""
    from test_batch import KM_M, _dose_plates

    import inhibkin.campaign.dose as dose_route

    kis = {f"DR-{k}": 10.0 ** -p for k, p in enumerate(np.linspace(6.0, 8.0, 6))}
    plates = _dose_plates(kis, seed=7, per_plate=3)
    expected = fit_campaign(dose_response=plates, km=KM_M, quiet=True, chunk_size=2).ranking
    monkeypatch.setattr(dose_route, "fit_dose_chunk", _dying_dose_chunk_fit)
    ranking = fit_campaign(dose_response=plates, km=KM_M, workers=2, quiet=True,
                           chunk_size=2).ranking
    assert (marks / "died").exists()
    pd.testing.assert_frame_equal(ranking, expected, check_exact=True)


def _dying_dose_chunk_fit(chunk, settings, mechanisms, keep_fits):
    """The dose-response chunk fitter, killing its process the first time it sees DR-3."""
    from inhibkin.campaign.dose import dose_results

    frame, names = chunk
    mark = Path(os.environ[MARK_DIR]) / "died"
    if "DR-3" in names and not mark.exists():
        mark.touch()
        os.kill(os.getpid(), signal.SIGKILL)
    return dose_results(frame, names, settings, mechanisms, keep_fits)


@pytest.fixture(scope="module")
def dask_cluster(tmp_path_factory):
    """Two single-threaded worker processes and the folder of their marks. The scheduler
    gives up on a task after it was on one dying worker (allowed-failures 0), so the
    tests need few deaths."""
    distributed = pytest.importorskip("distributed")
    import dask

    marks = tmp_path_factory.mktemp("dask-marks")
    before = os.environ.get(MARK_DIR)
    # Workers read MARK_DIR from the environment they start with.
    os.environ[MARK_DIR] = str(marks)
    try:
        with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
                distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                         dashboard_address=None, processes=True) as cluster, \
                distributed.Client(cluster) as client:
            yield client, marks
    finally:
        if before is None:
            os.environ.pop(MARK_DIR, None)
        else:
            os.environ[MARK_DIR] = before


def test_dask_fails_only_the_compound_that_always_kills_its_worker(dask_cluster):
    client, _ = dask_cluster
    table, _, _ = _campaign_table([DIE_ALWAYS])
    ranking = fit_campaign(table, client=client, quiet=True, chunk_size=3,
                           engine=dying_engine).ranking
    _assert_every_compound_once(ranking, table)
    killer = ranking.set_index("compound").loc[DIE_ALWAYS]
    assert killer["status"] == "failed"
    assert "Dask workers" in killer["reason"] and "died" in killer["reason"]
    others = ranking[ranking["compound"] != DIE_ALWAYS]
    assert (others["status"] == "determined").all()


def test_dask_reruns_the_chunk_of_a_killed_worker(dask_cluster):
    """A worker dies once, holding a chunk of three compounds: the chunk is split and its
    compounds rerun; the table is the serial one."""
    client, marks = dask_cluster
    table, _, _ = _campaign_table([DIE_ONCE])
    ranking = fit_campaign(table, client=client, quiet=True, chunk_size=3,
                           engine=dying_engine).ranking
    assert (marks / "died").exists()
    serial = fit_campaign(table, quiet=True, chunk_size=3).ranking
    pd.testing.assert_frame_equal(ranking, serial, check_exact=True)


# ---------------------------------------------------------------- interrupted writes


def _run_cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "inhibkin.cli", *map(str, args)], cwd=cwd,
                          capture_output=True, text=True, timeout=TIMEOUT_SECONDS)


def _leftovers(folder):
    return sorted(p.name for p in Path(folder).iterdir())


def test_write_interrupted_midway_leaves_the_old_file_and_no_temporary(tmp_path, monkeypatch):
    """KeyboardInterrupt after half the rows are on disk: the destination keeps its old
    content and the temporary file is removed."""
    destination = tmp_path / "ranking.csv"
    write_table(pd.DataFrame({"a": [1, 2]}), destination)
    before = destination.read_bytes()
    real_to_csv = pd.DataFrame.to_csv

    def half_then_interrupt(self, path, **options):
        real_to_csv(self.iloc[: len(self) // 2], path, **options)
        raise KeyboardInterrupt

    monkeypatch.setattr(pd.DataFrame, "to_csv", half_then_interrupt)
    with pytest.raises(KeyboardInterrupt):
        write_table(pd.DataFrame({"a": range(1000)}), destination)
    assert destination.read_bytes() == before
    assert _leftovers(tmp_path) == ["ranking.csv"]


def test_cli_killed_while_writing_leaves_no_output(tmp_path):
    """SIGKILL in the middle of writing the table (no clean-up code can run): the output
    path never appears; at most a hidden temporary file is left."""
    script = textwrap.dedent("""
        import os, signal, sys
        import pandas as pd
        from inhibkin.cli import main

        real_to_csv = pd.DataFrame.to_csv

        def half_then_die(self, path, **options):
            real_to_csv(self.iloc[: len(self) // 2], path, **options)
            os.kill(os.getpid(), signal.SIGKILL)

        pd.DataFrame.to_csv = half_then_die
        sys.exit(main(sys.argv[1:]))
    """)
    done = subprocess.run([sys.executable, "-c", script, "simulate", "--compounds", "50",
                           "--seed", "1", "-o", "grid.csv", "--quiet"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=TIMEOUT_SECONDS)
    assert done.returncode == -signal.SIGKILL
    assert not (tmp_path / "grid.csv").exists()
    assert all(name.startswith(".grid.csv.") for name in _leftovers(tmp_path))


def test_cli_interrupted_while_fitting_leaves_no_output(tmp_path):
    """Ctrl-C (SIGINT) while the campaign is being fitted: no output file, no temporary."""
    done = _run_cli("simulate", "--compounds", 2000, "--seed", 2, "-o", "grid.csv",
                    cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    process = subprocess.Popen([sys.executable, "-m", "inhibkin.cli", "rank", "--grid",
                                "grid.csv", "-o", "ranking.csv", "--quiet"], cwd=tmp_path,
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # Wait until the interpreter is past its imports and fitting (2000 compounds take
    # well over the few seconds the imports take, even on the batched engine), then
    # interrupt.
    deadline = time.monotonic() + TIMEOUT_SECONDS
    while time.monotonic() < deadline and process.poll() is None:
        time.sleep(0.5)
        if _cpu_seconds(process.pid) > _CPU_SECONDS_BEFORE_INTERRUPT:
            break
    assert process.poll() is None, "the run finished before it could be interrupted"
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=TIMEOUT_SECONDS)
    assert process.returncode != 0
    assert "KeyboardInterrupt" in err
    assert _leftovers(tmp_path) == ["grid.csv"]


# CPU time of the child after which it is surely fitting (imports take about 2 s here).
_CPU_SECONDS_BEFORE_INTERRUPT = 4.0


def _cpu_seconds(pid) -> float:
    """User + system CPU seconds of a process, from /proc (Linux)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


# ---------------------------------------------------------------- truncated files


@pytest.fixture
def grid_table():
    table, _ = simulate_campaign(3, seed=5)
    return table


def test_truncated_parquet_is_a_clear_error(tmp_path, grid_table):
    whole = write_table(grid_table, tmp_path / "grid.parquet").read_bytes()
    for fraction in (0.0, 0.1, 0.5, 0.9, 0.99):
        cut = tmp_path / "cut.parquet"
        cut.write_bytes(whole[: int(len(whole) * fraction)])
        with pytest.raises(DataError, match=r"cut\.parquet.*(unreadable Parquet|empty)"):
            read_table(cut)


def test_csv_cut_inside_a_line_is_a_clear_error(tmp_path, grid_table):
    """Every cut that does not fall just after a line break is refused, naming the file
    and the line (the last value may be cut mid-number, so a cut that leaves every field
    is refused too)."""
    whole = write_table(grid_table, tmp_path / "grid.csv").read_bytes()
    ends = {k + 1 for k, byte in enumerate(whole) if byte == ord("\n")}
    cuts = [c for c in range(1, len(whole)) if c not in ends]
    rng = np.random.default_rng(3)
    for cut_at in rng.choice(cuts, size=40, replace=False):
        cut = tmp_path / "cut.csv"
        cut.write_bytes(whole[:cut_at])
        with pytest.raises(DataError, match=r"cut\.csv.*(line \d+|empty|no rows)"):
            read_table(cut)


def test_csv_cut_at_a_line_break_reads_the_rows_before_it(tmp_path, grid_table):
    """A cut exactly after a line break leaves a well-formed shorter table; nothing in
    the file can reveal it. Pinned so the limit is known: the rows read are exactly the
    rows before the cut, none altered."""
    path = write_table(grid_table, tmp_path / "grid.csv")
    lines = path.read_bytes().splitlines(keepends=True)
    cut = tmp_path / "cut.csv"
    cut.write_bytes(b"".join(lines[:11]))
    pd.testing.assert_frame_equal(read_table(cut), read_table(path).iloc[:10])


def _swallows_an_interrupt(chunk):
    """A chunk function that, like asteval inside lmfit, turns the Ctrl-C that lands in
    it into an ordinary error and carries on."""
    try:
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(0.1)
    except KeyboardInterrupt:
        pass
    return list(chunk)


def test_an_interrupt_a_library_swallowed_still_stops_the_campaign():
    from inhibkin.campaign.execute import run
    from inhibkin.interrupt import interrupts_recorded

    previous = signal.getsignal(signal.SIGINT)
    with interrupts_recorded(), pytest.raises(KeyboardInterrupt):
        run(_swallows_an_interrupt, [[1, 2], [3]], (), workers=None, client=None,
            quiet=True, sizes=[2, 1], split=None, lost=None)
    # Outside the block the previous handler is back (a test worker's own, whatever it is).
    assert signal.getsignal(signal.SIGINT) is previous
