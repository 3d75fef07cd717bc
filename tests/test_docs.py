"""Every example the user is shown runs as written: the README's code blocks and the worked
example of every stage's ``--help``.

Console blocks are run command by command (``inhibkin`` in-process through
:func:`inhibkin.cli.main`, ``head`` and ``echo $?`` emulated) and their printed output must
match the README line for line. Python blocks run in one namespace, in README order, in the
directory where the console blocks wrote their files; the few names a block takes as given
(``reads``, ``plate_map``, ``df``, ``conc``, ``percent``) are made here, small, from the demo
data or a seeded simulation. The inputs of the ``--help`` examples are made the same way;
a Dask scheduler address is replaced by a local one, started for the purpose.
"""

import contextlib
import io
import os
import re
import shlex
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from inhibkin import cli
from inhibkin.core.logistic import logistic4
from inhibkin.demo import DEMO_DATA
from inhibkin.simulate import simulate_dose_campaign

README = Path(__file__).resolve().parent.parent / "README.md"
FENCE = re.compile(r"^```(\w+)\n(.*?)^```", re.S | re.M)
# The README's Dask example (an indented block) and the rank stage's --help use this address.
EXAMPLE_SCHEDULER = "tcp://127.0.0.1:8786"
# Molar absorptivity of NADH at 340 nm, 6220 /M/cm (common practice), the value the
# chromophore table holds; the reads made below are absorbances of the demo's product.
NADH_EPSILON = 6220.0
DEMO_PLATE = "MOA-P04"  # one demo compound (INV-0031) keeps the examples small


@contextlib.contextmanager
def _inside(directory):
    """chdir for the block (contextlib.chdir needs Python 3.11)."""
    before = os.getcwd()
    os.chdir(directory)
    try:
        yield
    finally:
        os.chdir(before)


def _blocks(kind):
    return [body for lang, body in FENCE.findall(README.read_text(encoding="utf-8"))
            if lang == kind]


def _commands(block):
    """(command, expected output lines) of a console block."""
    out, lines = [], block.splitlines()
    k = 0
    while k < len(lines):
        if not lines[k].startswith("$ "):
            raise AssertionError(f"console line outside a command: {lines[k]!r}")
        command = lines[k][2:]
        while command.endswith("\\"):
            k += 1
            command = command[:-1] + " " + lines[k].strip()
        k += 1
        expected = []
        while k < len(lines) and not lines[k].startswith("$ "):
            expected.append(lines[k])
            k += 1
        out.append((command, expected))
    return out


class _Shell:
    """Runs the handful of commands the examples use, in the current directory."""

    def __init__(self):
        self.status = 0

    def run(self, command):
        words = shlex.split(command)
        if words[0] == "echo" and words[1:] == ["$?"]:
            return f"{self.status}\n"
        if words[0] == "head":
            n = int(words[1].lstrip("-"))
            with open(words[2], encoding="utf-8") as handle:
                return "".join(handle.readlines()[:n])
        assert words[0] == "inhibkin", command
        stream = io.StringIO()
        with contextlib.redirect_stdout(stream), contextlib.redirect_stderr(stream):
            self.status = cli.main(words[1:])
        return stream.getvalue()


def _demo_plate_map():
    plate_map = pd.read_csv(DEMO_DATA / "invented_moa_plate_map.csv")
    return plate_map[plate_map["plate"] == DEMO_PLATE].reset_index(drop=True)


def _nadh_reads(path_length, time_unit):
    """The demo plate's reads as NADH absorbance falling as product forms (A0 = 1.2)."""
    reads = pd.read_csv(DEMO_DATA / "invented_moa_reads.csv")
    reads = reads[reads["plate"] == DEMO_PLATE]
    absorbance = 1.2 - NADH_EPSILON * path_length * reads["product_uM"] * 1e-6
    time = reads["time_s"] / (60.0 if time_unit == "min" else 1.0)
    return pd.DataFrame({"plate": reads["plate"], "well": reads["well"], "time": time,
                         "signal": absorbance}).reset_index(drop=True)


@pytest.fixture(scope="module")
def scheduler():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=":0") as cluster:
        yield cluster.scheduler_address


@pytest.fixture(scope="module")
def readme_run(tmp_path_factory, scheduler):
    """Every README block run once: console blocks, the Dask example, then Python blocks."""
    here = tmp_path_factory.mktemp("readme")
    (here / "data_demo").symlink_to(DEMO_DATA, target_is_directory=True)
    shell, console = _Shell(), []
    with _inside(here):
        for block in _blocks("console"):
            for command, expected in _commands(block):
                console.append((command, shell.run(command).splitlines(), expected))
        plates, _ = simulate_dose_campaign(["CPD-1", "CPD-2"], seed=3)
        plates.to_csv("plates.csv", index=False)
        dask_status = cli.main(["rank", "--grid", "grid.csv", "--dose-response", "plates.csv",
                                "--km", "20uM", "-o", "ranking.parquet", "--quiet",
                                "--scheduler", scheduler])
        namespace = _python_namespace()
        for block in _blocks("python"):
            exec(compile(block, str(README), "exec"), namespace)  # noqa: S102
    return console, dask_status, namespace


def _python_namespace():
    """The names the README's Python blocks take as given, small."""
    plate_map = _demo_plate_map()
    plate_map = plate_map.rename(columns={"substrate_uM": "substrate"})
    plate_map["inhibitor"] = plate_map.pop("inhibitor_nM") / 1000.0  # the block says uM
    reads = _nadh_reads(0.5, "s").rename(columns={"time": "time_s"})
    plates, _ = simulate_dose_campaign(["CPD-1", "CPD-2"], seed=5)
    df = plates.rename(columns={"inhibitor_nM": "inhibitor", "substrate_uM": "substrate"})
    conc = np.repeat(np.geomspace(0.01, 100.0, 8), 2)
    percent = logistic4(np.log10(conc), 100.0, 2.0, 0.0, 1.0) + \
        np.random.default_rng(2).normal(0, 3.0, conc.size)
    return {"reads": reads, "plate_map": plate_map, "df": df, "conc": conc,
            "percent": percent, "__name__": "readme"}


def test_readme_has_the_blocks_this_test_runs():
    assert len(_blocks("python")) >= 5 and len(_blocks("console")) >= 2
    assert EXAMPLE_SCHEDULER in README.read_text(encoding="utf-8").replace(" \\\n", " ")


def test_readme_console_output_is_what_the_readme_shows(readme_run):
    console, _, _ = readme_run
    for command, got, expected in console:
        assert [line.rstrip() for line in got] == [line.rstrip() for line in expected], command


def test_readme_dask_example_runs(readme_run):
    _, status, _ = readme_run
    assert status == 0


def test_readme_python_blocks_give_what_their_comments_say(readme_run):
    _, _, ns = readme_run
    assert ns["res"].summary().startswith("=")  # kinetic reads -> rates of one demo plate
    assert ns["pt"].table["compound"].tolist() == ["CPD-1", "CPD-2"]
    assert all(f.verdict != "failed" for f in ns["fits"].values())  # was 8/8 failed
    assert ns["fits"]["CPD-7"].verdict == "noncompetitive"  # truth.csv: noncompetitive
    assert len(ns["curves"].to_frame()) == 3
    assert set(ns["campaign"].ranking["status"]) == {"determined"}


def _help_examples():
    for command in cli.SUBCOMMANDS:
        for line in command.example.splitlines():
            yield command.name, line.strip()


def test_every_stage_has_an_example_run_here():
    names = {name for name, _ in _help_examples()}
    assert names == {c.name for c in cli.SUBCOMMANDS}


@pytest.fixture(scope="module")
def help_inputs(tmp_path_factory):
    here = tmp_path_factory.mktemp("help")
    (here / "data_demo").symlink_to(DEMO_DATA, target_is_directory=True)
    _nadh_reads(1.0, "min").to_csv(here / "reads.csv", index=False)  # --path-length default
    _demo_plate_map().to_csv(here / "plate_map.csv", index=False)
    plates, _ = simulate_dose_campaign(["CPD-01", "CPD-02"], seed=4)
    plates.to_csv(here / "plates.csv", index=False)
    return here


# `inhibkin demo` runs the whole demo; tests/test_demo.py runs exactly that command once.
RUN_ELSEWHERE = {"inhibkin demo": "tests/test_demo.py"}


def test_help_examples_run(help_inputs, scheduler):
    shell = _Shell()
    with _inside(help_inputs):
        for name, line in _help_examples():
            if line in RUN_ELSEWHERE:
                continue
            output = shell.run(line.replace(EXAMPLE_SCHEDULER, scheduler))
            assert shell.status == 0, (name, line, output)


def test_demo_example_is_the_command_test_demo_runs():
    demo_test = (Path(__file__).parent / "test_demo.py").read_text(encoding="utf-8")
    assert '"-m", "inhibkin.cli", "demo"' in demo_test
