"""Every notebook in notebooks/ runs from top to bottom without error."""

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOKS = sorted((Path(__file__).parent.parent / "notebooks").glob("*.ipynb"))


def test_there_are_notebooks():
    names = {p.name for p in NOTEBOOKS}
    assert {"tour.ipynb", "droplet_assay.ipynb", "design_and_verify.ipynb"} <= names


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_is_saved_without_outputs(path):
    """Notebooks are kept stripped, so diffs show only what a person wrote."""
    notebook = nbformat.read(path, as_version=4)
    for cell in notebook.cells:
        if cell.cell_type == "code":
            assert cell.outputs == [] and cell.execution_count is None, path.name


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.name)
def test_notebook_runs(path):
    notebook = nbformat.read(path, as_version=4)
    client = NotebookClient(notebook, timeout=180, kernel_name="python3",
                            resources={"metadata": {"path": str(path.parent)}})
    client.execute()  # raises CellExecutionError on the first failing cell (and its assert)
