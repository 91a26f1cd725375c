"""The walkthrough notebook runs from top to bottom and draws its pictures (executed with
nbclient, the reference Jupyter executor, in a fresh kernel)."""

from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat", reason="the notebook test needs the [test] extra (nbformat)")
nbclient = pytest.importorskip("nbclient", reason="the notebook test needs the [test] extra (nbclient)")

NOTEBOOK = Path(__file__).resolve().parents[1] / "notebooks" / "walkthrough.ipynb"


def _pictures(nb) -> int:
    return sum(1 for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", [])
               if "image/png" in o.get("data", {}))


def test_walkthrough_runs_and_draws_its_pictures(tmp_path):
    nb = nbformat.read(NOTEBOOK, as_version=4)
    for cell in nb.cells:
        if cell.cell_type == "code":
            cell.outputs = []
    client = nbclient.NotebookClient(nb, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    client.execute()   # raises CellExecutionError on any failing cell
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs if o.output_type == "error"]
    assert not errors
    # the gather and its panel, one CMP's panel with picks, interval velocities, the difference
    assert _pictures(nb) == 4
    text = "".join(o.get("text", "") for c in nb.cells if c.cell_type == "code" for o in c.outputs)
    assert "qualified people must review" in text
    assert "1 CMP edited" in text and "OUTSIDE tolerance" in text


def test_committed_notebook_keeps_its_pictures():
    # shown as it is by repository browsers: committed with its outputs
    assert _pictures(nbformat.read(NOTEBOOK, as_version=4)) == 4
