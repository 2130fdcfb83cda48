"""Execute the notebooks in notebooks/ with the venv's own kernel (nbclient, kernel "python3").

The kernel is started from this interpreter's environment with MPLBACKEND removed (a
pre-set MPLBACKEND=Agg silently suppresses figure output in kernels; see DEVELOPERS.md,
"Notebooks and panels"). Each notebook must run without errors, produce its PNG figures and its
widgets, and the committed file must be stored without outputs.
"""

from __future__ import annotations

import base64
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")
pytest.importorskip("ipykernel")

NOTEBOOKS = Path(__file__).resolve().parents[1] / "notebooks"

# notebook -> minimum number of PNG figures it must produce
EXPECTED = {
    "01_device_design.ipynb": 3,
    "02_amplitude_vs_size.ipynb": 3,
    "03_measured_vs_model.ipynb": 1,
    "04_will_my_rings_oscillate.ipynb": 3,
}


def _outputs(nb):
    for cell in nb.cells:
        if cell.cell_type == "code":
            yield from cell.get("outputs", [])


@pytest.mark.notebook
@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_notebook_runs_and_draws(name, tmp_path, monkeypatch):
    monkeypatch.delenv("MPLBACKEND", raising=False)
    path = NOTEBOOKS / name
    nb = nbformat.read(path, as_version=4)
    assert nb.metadata["kernelspec"]["name"] == "python3"
    assert not any(True for _ in _outputs(nb)), "commit notebooks with outputs stripped"
    client = nbclient.NotebookClient(
        nb, kernel_name="python3", timeout=300, resources={"metadata": {"path": str(tmp_path)}}
    )
    client.execute()  # raises CellExecutionError on any error
    outs = list(_outputs(nb))
    assert not [o for o in outs if o.output_type == "error"]
    pngs = [o for o in outs if "image/png" in o.get("data", {})]
    assert len(pngs) >= EXPECTED[name], f"{name}: {len(pngs)} figures"
    for o in pngs:
        assert base64.b64decode(o["data"]["image/png"])[:8] == b"\x89PNG\r\n\x1a\n"
    widgets = [o for o in outs if "application/vnd.jupyter.widget-view+json" in o.get("data", {})]
    assert widgets, f"{name}: the interactive panel was not displayed"
    text = "".join(o.get("text", "") for o in outs if o.output_type == "stream")
    assert "Traceback" not in text
    if name.startswith("03"):
        assert "INVENTED" in "".join(c.source for c in nb.cells)
        # issue 16 pt 8: a one-line laboratory caution at the top of the notebook
        first = nb.cells[0].source.splitlines()
        assert any(ln.startswith("**Laboratory caution:**") for ln in first[:4])


@pytest.mark.notebook
def test_ensemble_progress_bar_is_a_widget_in_a_kernel(tmp_path, monkeypatch):
    """run_ensemble's tqdm.auto bar renders as a Jupyter widget inside a kernel (issue: progress
    bars must work in a terminal and in a notebook; the terminal case is in test_ensemble)."""
    monkeypatch.delenv("MPLBACKEND", raising=False)
    code = (
        "import numpy as np\n"
        "from ringkit.transport.ensemble import SerialExecutor, run_ensemble\n"
        "def task(seed):\n"
        "    return np.array([float(seed), 2.0 * seed])\n"
        "res = run_ensemble(task, range(4), executor=SerialExecutor(), progress=True)\n"
        "print(res.values.sum())\n"
    )
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(code)])
    nb.metadata["kernelspec"] = {
        "name": "python3",
        "display_name": "Python 3",
        "language": "python",
    }
    client = nbclient.NotebookClient(
        nb, kernel_name="python3", timeout=120, resources={"metadata": {"path": str(tmp_path)}}
    )
    client.execute()
    outs = list(_outputs(nb))
    assert not [o for o in outs if o.output_type == "error"]
    assert any("application/vnd.jupyter.widget-view+json" in o.get("data", {}) for o in outs)
    assert "18.0" in "".join(o.get("text", "") for o in outs if o.output_type == "stream")
