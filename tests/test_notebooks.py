"""The notebooks in notebooks/ run top to bottom without error (STYLE: tutorials run as tests).

Each runs in a fresh kernel of this interpreter through nbclient, with a timeout; outputs are
checked for errors and then discarded (the repository keeps the notebooks without outputs).
"""

from __future__ import annotations

import pathlib

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = pathlib.Path(__file__).parent.parent
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs(path, monkeypatch):
    # The kernel imports this checkout's ampplan even where it is not installed.
    monkeypatch.setenv("PYTHONPATH", str(ROOT))
    nb = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(nb, timeout=120, kernel_name="python3",
                                     resources={"metadata": {"path": str(path.parent)}})
    client.execute()
    errors = [o for cell in nb.cells if cell.cell_type == "code" for o in cell.get("outputs", [])
              if o.get("output_type") == "error"]
    assert not errors, f"{path.name}: {errors[0].get('ename')}: {errors[0].get('evalue')}"


def test_notebooks_are_stored_without_outputs():
    for path in NOTEBOOKS:
        nb = nbformat.read(path, as_version=4)
        assert all(not cell.get("outputs") for cell in nb.cells if cell.cell_type == "code"), path.name
