"""The walk-through notebook runs from top to bottom (so it cannot rot) and is stored without outputs."""

import json
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "walkthrough.ipynb"


def test_notebook_is_stored_without_outputs():
    raw = json.loads(NOTEBOOK.read_text())
    for cell in raw["cells"]:
        if cell["cell_type"] == "code":
            assert cell["outputs"] == [] and cell["execution_count"] is None


@pytest.mark.slow
def test_notebook_executes(tmp_path):
    nb = nbformat.read(NOTEBOOK, as_version=4)
    NotebookClient(nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    html = tmp_path / "walkthrough_report.html"
    assert html.exists() and html.stat().st_size > 10_000
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", []) if o.output_type == "error"]
    assert not errors
    printed = "".join(o.get("text", "") for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
                      if o.output_type == "stream")
    # The headline: what was estimated, one interval and its matching p.
    assert "changed AUC by" in printed and "% CI" in printed and "one-sided p" in printed
