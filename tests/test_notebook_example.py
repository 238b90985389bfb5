"""``examples/notebook.ipynb`` ships without outputs and runs top to bottom in a real kernel
(nbclient with ipykernel's python3 kernel); its results render as HTML tables and its figure
as an image (common practice for shipped notebooks, no source)."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "examples" / "notebook.ipynb"


def test_notebook_ships_without_outputs():
    nbformat = pytest.importorskip("nbformat")
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    code = [cell for cell in notebook.cells if cell.cell_type == "code"]
    assert code
    assert all(not cell.outputs and cell.execution_count is None for cell in code)


def test_notebook_runs_and_shows_tables_and_a_figure(monkeypatch):
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    pytest.importorskip("ipykernel")
    # the kernel imports this checkout of sensiv
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(
        [str(ROOT), *filter(None, [os.environ.get("PYTHONPATH")])]))
    monkeypatch.delenv("MPLBACKEND", raising=False)   # the notebook asks for inline
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    client = nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(NOTEBOOK.parent)}})
    client.execute()
    outputs = [out for cell in notebook.cells if cell.cell_type == "code"
               for out in cell.outputs]
    assert not [out for out in outputs if out.output_type == "error"]
    html = [out.data["text/html"] for out in outputs if "text/html" in out.get("data", {})]
    assert any("sensiv-result" in page and "<table" in page for page in html)
    assert any("Caution" in page for page in html)
    assert any("image/png" in out.get("data", {}) for out in outputs)
