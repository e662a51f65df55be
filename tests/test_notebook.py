"""The worked notebook runs end to end (executed with nbclient, outputs discarded)."""

from __future__ import annotations

from pathlib import Path

import nbformat
from nbclient import NotebookClient

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"


def test_notebook_is_stored_without_outputs():
    for path in NOTEBOOKS.glob("*.ipynb"):
        notebook = nbformat.read(path, as_version=4)
        for cell in notebook.cells:
            if cell.cell_type == "code":
                assert not cell.outputs and cell.execution_count is None, path.name


def test_harvested_stock_notebook_executes(tmp_path):
    path = NOTEBOOKS / "harvested_stock.ipynb"
    notebook = nbformat.read(path, as_version=4)
    client = NotebookClient(
        notebook,
        timeout=300,
        kernel_name="python3",
        resources={"metadata": {"path": str(NOTEBOOKS)}},
    )
    client.execute()
    text = "\n".join(
        output.get("text", "")
        for cell in notebook.cells
        if cell.cell_type == "code"
        for output in cell.outputs
    )
    assert "hysteresis window width" in text
    errors = [
        o
        for c in notebook.cells
        if c.cell_type == "code"
        for o in c.outputs
        if o.output_type == "error"
    ]
    assert not errors
