"""Security: no code runs from user data, report HTML escapes everything taken from the
input, and the command line writes only the paths it is given.

Reasoning behind the source scan: the package reads tables with pandas' CSV parser and
pyarrow's Parquet reader (neither evaluates cell text), takes numbers with
``pd.to_numeric`` and units from fixed dictionaries. Nothing takes a code path from the
data, so no ``eval``/``exec``/``pickle.load``/``__import__`` may appear at all; Dask and
``concurrent.futures`` pickle inhibkin's own chunks between its own processes, which is
not user input (see the README's Dask section for securing a scheduler).
"""

import ast
import re
from pathlib import Path

import pandas as pd
import pytest

import inhibkin
from inhibkin.campaign import fit_campaign
from inhibkin.cli import main
from inhibkin.simulate import simulate_campaign

PACKAGE = Path(inhibkin.__file__).parent
# Calls that run code or rebuild objects from bytes: none may take user data.
FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__", "execfile"}
FORBIDDEN_ATTRIBUTES = {("pickle", "load"), ("pickle", "loads"), ("marshal", "loads"),
                        ("yaml", "load"), ("os", "system"), ("os", "popen"),
                        ("subprocess", "run"), ("subprocess", "Popen"),
                        ("subprocess", "call"), ("subprocess", "check_output")}
HOSTILE_ID = '<script>alert("x")</script><img src=x onerror=alert(1)>&amp;"\''


def _python_files():
    return sorted(PACKAGE.rglob("*.py"))


@pytest.mark.parametrize("path", _python_files(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_no_code_execution_or_unpickling_in_the_package(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            func = node.func
            if isinstance(func, ast.Name) and func.id in FORBIDDEN_CALLS:
                found.append(f"line {node.lineno}: {func.id}()")
            if isinstance(func, ast.Attribute) and isinstance(func.value, ast.Name) and \
                    (func.value.id, func.attr) in FORBIDDEN_ATTRIBUTES:
                found.append(f"line {node.lineno}: {func.value.id}.{func.attr}()")
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            names = [a.name for a in node.names] + [getattr(node, "module", None) or ""]
            if any(n.split(".")[0] in ("pickle", "marshal", "shelve", "dill", "cloudpickle")
                   for n in names):
                found.append(f"line {node.lineno}: imports {names}")
    assert not found, found


def test_pandas_readers_are_not_asked_to_unpickle():
    """read_pickle, or read_csv with an engine that evaluates: not used anywhere."""
    text = "\n".join(p.read_text(encoding="utf-8") for p in _python_files())
    assert not re.search(r"read_pickle|to_pickle|pd\.eval|\.query\(|DataFrame\.eval", text)


def _hostile_campaign():
    table, _ = simulate_campaign(3, seed=2)
    table["compound"] = table["compound"].replace({"CPD-1": HOSTILE_ID,
                                                   "CPD-2": "ok & <b>bold</b>"})
    broken = table[table["compound"] == "CPD-3"].copy()
    broken["compound"] = "<iframe src=javascript:alert(2)>"
    broken["rate"] = broken["rate"].astype(object)
    broken.iloc[0, broken.columns.get_loc("rate")] = "<svg onload=alert(3)>"
    return pd.concat([table, broken], ignore_index=True)


# The hostile markup as it would appear unescaped. The report has markup of its own
# (a sorting script, embedded figures), so the checks look for the payloads themselves.
RAW_PAYLOADS = ('<script>alert("x")', "<img src=x onerror", "<iframe src=javascript",
                "<svg onload", "<b>bold</b>")


def _assert_escaped(html_text):
    for raw in RAW_PAYLOADS:
        assert raw not in html_text, raw
    assert "&lt;script&gt;alert(" in html_text


def test_campaign_html_escapes_compound_ids_and_reasons():
    campaign = fit_campaign(_hostile_campaign(), quiet=True)
    assert (campaign.ranking["status"] == "failed").sum() == 1
    _assert_escaped(campaign._repr_html_())


def test_report_escapes_everything_taken_from_the_input(tmp_path):
    report_module = pytest.importorskip("inhibkin.reporting.report")
    if not hasattr(report_module, "report"):
        pytest.fail("inhibkin.reporting.report.report is missing")
    campaign = fit_campaign(_hostile_campaign(), quiet=True)
    path = tmp_path / "report.html"
    report_module.report(campaign, path, title="<script>title()</script>",
                         notes=["<script>note()</script>"], dpi=40)
    html_text = path.read_text(encoding="utf-8")
    _assert_escaped(html_text)
    assert "title()</script>" not in html_text and "note()</script>" not in html_text


def test_cli_writes_only_the_paths_it_is_given(tmp_path, monkeypatch):
    """Input in one folder, outputs in another, the working directory a third: after a
    run, only the named output files are new anywhere under tmp_path."""
    inputs, outputs, work = (tmp_path / name for name in ("in", "out", "work"))
    for folder in (inputs, outputs, work):
        folder.mkdir()
    table = _hostile_campaign()
    # A compound ID shaped like a path must not become one.
    table.loc[table["compound"] == "ok & <b>bold</b>", "compound"] = "../../escape/x.csv"
    table.to_csv(inputs / "grid.csv", index=False)
    monkeypatch.chdir(work)
    before = {p for p in tmp_path.rglob("*")}
    status = main(["mechanism", str(inputs / "grid.csv"), "-o", str(outputs / "rank.csv"),
                   "--params", str(outputs / "params.parquet"), "--quiet"])
    assert status == 1  # the broken compound failed, the others were fitted
    created = {p for p in tmp_path.rglob("*")} - before
    assert created == {outputs / "rank.csv", outputs / "params.parquet"}
    assert not (tmp_path.parent / "escape").exists()


def test_cli_refuses_output_into_a_missing_directory_without_creating_it(tmp_path):
    table, _ = simulate_campaign(2, seed=1)
    table.to_csv(tmp_path / "grid.csv", index=False)
    target = tmp_path / "no" / "such" / "rank.csv"
    assert main(["rank", "--grid", str(tmp_path / "grid.csv"), "-o", str(target),
                 "--quiet"]) == 2
    assert not (tmp_path / "no").exists()
