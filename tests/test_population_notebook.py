"""The researcher's notebook: only imports and calls the package, and runs from a clean clone."""

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "notebooks" / "compare_wash_in_strategies.ipynb"


def test_notebook_only_calls_the_package_and_runs():
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    code = "\n".join(c.source for c in notebook.cells if c.cell_type == "code")
    for line in code.splitlines():
        if line.startswith(("import ", "from ")):
            assert "circlesim" in line, line  # nothing but the package is imported
    assert "def " not in code and "class " not in code  # no model code in the notebook
    assert all(not c.get("outputs") for c in notebook.cells if c.cell_type == "code")
    nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                            resources={"metadata": {"path": str(ROOT)}}).execute()
    outputs = json.dumps([c.get("outputs", []) for c in notebook.cells])
    assert "Traceback" not in outputs
    assert "P(target by 10 min)" in outputs
    assert "not a medical device" in outputs
