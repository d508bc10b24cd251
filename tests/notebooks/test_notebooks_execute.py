"""Every example notebook runs top to bottom in a fresh kernel (nbclient), cleanly.

Reference: a notebook is a document a newcomer runs cell by cell; nbclient's
``CellExecutionError`` is raised on the first cell that fails.  We also refuse output on
stderr (warnings a reader would see) and check that the kernel is this environment's Python.
"""
import sys

import nbformat
import pytest

from nbharness import NOTEBOOK_DIR, execute, stderr_outputs

NOTEBOOKS = ["tour.ipynb", "model_checking.ipynb", "what_if.ipynb"]


def test_the_documented_notebooks_exist():
    assert sorted(p.name for p in NOTEBOOK_DIR.glob("*.ipynb")) == sorted(NOTEBOOKS)


def test_kernel_is_this_environments_python(tmp_path):
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell("import sys; print(sys.prefix)")])
    path = tmp_path / "which.ipynb"
    nbformat.write(nb, path)
    out = execute(path, tmp_path).cells[0].outputs[0]["text"].strip()
    assert out == sys.prefix


@pytest.mark.slow
@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_runs_top_to_bottom(name, notebook_copies):
    nb = execute(notebook_copies / name, notebook_copies)
    assert stderr_outputs(nb) == []
    assert all(c.get("execution_count") for c in nb.cells if c.cell_type == "code")
