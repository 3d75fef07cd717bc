"""The notebooks run top to bottom (nbclient with ipykernel) and are committed without outputs.

Each notebook is executed once (module-scoped fixture); the checks read its outputs.
"""

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = sorted((Path(__file__).resolve().parent.parent / "notebooks").glob("*.ipynb"))
CELL_TIMEOUT_S = 300


def test_there_are_notebooks():
    assert {p.name for p in NOTEBOOKS} >= {"review_demo_campaign.ipynb", "plan_a_grid.ipynb"}


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_is_committed_without_outputs(path):
    notebook = nbformat.read(path, as_version=4)
    for cell in notebook.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None


@pytest.fixture(scope="module", params=NOTEBOOKS, ids=lambda p: p.name)
def executed(request, tmp_path_factory):
    notebook = nbformat.read(request.param, as_version=4)
    client = NotebookClient(notebook, timeout=CELL_TIMEOUT_S, kernel_name="python3",
                            resources={"metadata": {"path": str(tmp_path_factory.mktemp("nb"))}})
    client.execute()
    return [o for cell in notebook.cells if cell.cell_type == "code" for o in cell.outputs]


def test_notebook_executes(executed):
    assert not [o for o in executed if o.get("output_type") == "error"]


def test_figures_render_as_images(executed):
    # A figure shown as text only ("<Figure size 1500x500 with 10 Axes>") is not a figure.
    figures = [o for o in executed if str(o.get("data", {}).get("text/plain", ""))
               .startswith("<Figure size")]
    assert all("image/png" in o["data"] for o in figures)


def test_quiet_runs_print_no_warnings(executed):
    stderr = "".join(o.get("text", "") for o in executed
                     if o.get("output_type") == "stream" and o.get("name") == "stderr")
    assert "Warning" not in stderr, stderr
