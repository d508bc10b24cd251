"""Every example notebook runs top to bottom in a fresh kernel (nbclient), cleanly.

Reference: a notebook is a document a newcomer runs cell by cell; nbclient's
``CellExecutionError`` is raised on the first cell that fails.  We also refuse output on
stderr (warnings a reader would see) and check that the kernel is this environment's Python.
The what-if notebook's exported table is read back: category probabilities of one case sum
to one (the grades are exhaustive and exclusive), so their differences sum to zero.
"""
import sys

import nbformat
import numpy as np
import pandas as pd
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


@pytest.fixture(scope="module")
def executed(notebook_copies):
    """``executed(name)``: the notebook run once in the scratch copy folder (cached)."""
    done = {}

    def run(name):
        if name not in done:
            done[name] = execute(notebook_copies / name, notebook_copies)
        return done[name]

    return run


@pytest.mark.slow
@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_runs_top_to_bottom(name, executed):
    nb = executed(name)
    assert stderr_outputs(nb) == []
    assert all(c.get("execution_count") for c in nb.cells if c.cell_type == "code")


@pytest.mark.slow
def test_what_if_exports_the_comparison_table(executed, notebook_copies):
    executed("what_if.ipynb")
    table = pd.read_csv(notebook_copies / "what_if_comparison.csv", index_col=0)
    assert list(table.index) == ["poor", "fair", "good", "excellent"]
    np.testing.assert_allclose(table[["baseline", "scenario"]].sum(), 1.0, atol=1e-9)
    np.testing.assert_allclose(table["difference"].sum(), 0.0, atol=1e-9)
    for case in ["baseline", "scenario"]:
        assert (table[f"{case}_low"] <= table[case]).all()
        assert (table[case] <= table[f"{case}_high"]).all()


@pytest.mark.slow
def test_what_if_writes_a_report_with_both_comparisons(executed, notebook_copies):
    from ordwidgets.report import SECTION_KEYS

    executed("what_if.ipynb")
    text = (notebook_copies / "what_if_report.html").read_text(encoding="utf-8")
    assert all(f"<section id='{key}'>" in text for key in SECTION_KEYS)
    assert "What if: current scenario" in text and "What if: the same trees on a quiet street" in text
    assert "## What-if comparisons" in (notebook_copies / "what_if_report.md").read_text(encoding="utf-8")
