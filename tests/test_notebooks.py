"""The notebooks are committed without outputs and run top to bottom without an error."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOKS = sorted((ROOT / "notebooks").glob("*.ipynb"))


def test_the_notebooks_are_there():
    assert {p.stem for p in NOTEBOOKS} == {"event_study", "survey", "field_models",
                                           "storm_field", "phase_space_density"}


@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_outputs_are_stripped(path):
    book = json.loads(path.read_text())
    for cell in book["cells"]:
        if cell["cell_type"] == "code":
            assert cell.get("outputs") == [] and cell.get("execution_count") is None, (
                f"{path.name}: strip the outputs before committing")


@pytest.mark.slow
@pytest.mark.parametrize("path", NOTEBOOKS, ids=lambda p: p.stem)
def test_notebook_runs(path, tmp_path, monkeypatch):
    before = sorted(p.name for p in path.parent.iterdir())
    # nbclient and ipykernel are in the test extra; missing ones fail here, never skip
    import nbformat
    from nbclient import NotebookClient

    monkeypatch.setenv("MPLBACKEND", "Agg")
    monkeypatch.chdir(tmp_path)
    book = nbformat.read(path, as_version=4)
    # the kernel starts in notebooks/ (as a reader's would) and finds ../data_demo;
    # the notebooks write only into temporary folders
    client = NotebookClient(book, timeout=120, kernel_name="python3",
                            resources={"metadata": {"path": str(path.parent)}})
    client.execute()  # raises CellExecutionError naming the cell on any error
    errors = [o for c in book.cells if c.cell_type == "code" for o in c.outputs
              if o.get("output_type") == "error"]
    assert not errors
    images = sum(1 for c in book.cells if c.cell_type == "code" for o in c.outputs
                 if "image/png" in o.get("data", {}))
    assert images >= 2, f"{path.name} drew {images} figures"
    assert sorted(p.name for p in path.parent.iterdir()) == before  # nothing left behind
