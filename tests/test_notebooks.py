"""The notebooks in notebooks/ run top to bottom (quick mode: a short chain)."""

import os
from pathlib import Path

import pytest

#: Every notebook run top to bottom: in the slow set (.ci/run runs it as its second step).
pytestmark = pytest.mark.slow

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


def test_there_are_notebooks():
    assert len(NOTEBOOKS) >= 2


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs_clean(path, monkeypatch):
    # The kernel inherits this environment: the quick setting, and the package.
    monkeypatch.setenv("MASSFIT_NOTEBOOK_QUICK", "1")
    monkeypatch.delenv("MPLBACKEND", raising=False)  # let the kernel draw inline
    monkeypatch.setenv("PYTHONPATH", os.pathsep.join(
        [str(ROOT)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    book = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(book, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(path.parent)}})
    client.execute()
    errors = [out for cell in book.cells if cell.cell_type == "code"
              for out in cell.get("outputs", []) if out.get("output_type") == "error"]
    assert not errors
    # Every figure cell drew something.
    images = sum(1 for cell in book.cells if cell.cell_type == "code"
                 for out in cell.get("outputs", []) if "image/png" in out.get("data", {}))
    assert images >= 3
