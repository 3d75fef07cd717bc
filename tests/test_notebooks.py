"""The notebooks run top to bottom (nbclient with ipykernel) and are committed without outputs."""

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


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_executes(path, tmp_path):
    notebook = nbformat.read(path, as_version=4)
    client = NotebookClient(notebook, timeout=CELL_TIMEOUT_S, kernel_name="python3",
                            resources={"metadata": {"path": str(tmp_path)}})
    client.execute()
    errors = [o for cell in notebook.cells if cell.cell_type == "code" for o in cell.outputs
              if o.get("output_type") == "error"]
    assert not errors
