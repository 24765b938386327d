"""Every notebook in ``notebooks/`` runs from top to bottom without a cell error.

Executed with nbclient on the ``python3`` kernel, in a scratch directory so that nothing is
written into the checkout. The notebooks also check their own numbers (closed form against
simulation, energy account) with ``assert``, so a physics regression fails here too.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

REPO = Path(__file__).resolve().parents[1]
NOTEBOOKS = sorted((REPO / "notebooks").glob("*.ipynb"))
CELL_TIMEOUT_S = 600  # a cold numba cache (after an engine edit) recompiles the kernel: minutes
CAUTION = (
    "simulation is not a substitute for the component makers' data, local electrical codes "
    "and licensed practice; verify on hardware with protection in place"
)


def test_there_is_a_notebook():
    assert NOTEBOOKS, "no notebooks/*.ipynb found"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_is_stored_clean_and_carries_the_caution(path):
    nb = nbformat.read(path, as_version=4)
    nbformat.validate(nb)
    for cell in nb.cells:
        if cell.cell_type == "code":
            assert not cell.outputs, f"{path.name}: saved with outputs; clear them"
            assert cell.execution_count is None, f"{path.name}: saved with execution counts"
    markdown = " ".join(c.source for c in nb.cells if c.cell_type == "markdown")
    text = " ".join(re.sub(r"[>*_]", " ", markdown).split()).lower()  # drop quote/bold marks
    assert CAUTION in text, f"{path.name}: the caution is missing"


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_executes_without_errors(path, tmp_path, monkeypatch):
    monkeypatch.setenv("MPLBACKEND", "Agg")
    # The kernel must import this checkout's dcsim even when it is not installed.
    pythonpath = os.pathsep.join(filter(None, [str(REPO), os.environ.get("PYTHONPATH")]))
    monkeypatch.setenv("PYTHONPATH", pythonpath)
    nb = nbformat.read(path, as_version=4)
    client = NotebookClient(
        nb,
        timeout=CELL_TIMEOUT_S,
        kernel_name="python3",
        allow_errors=False,  # any cell error raises CellExecutionError
        resources={"metadata": {"path": str(tmp_path)}},
    )
    client.execute()
    errors = [
        out
        for cell in nb.cells
        if cell.cell_type == "code"
        for out in cell.outputs
        if out.output_type == "error"
    ]
    assert not errors, errors
