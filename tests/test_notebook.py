"""docs/example.ipynb runs from top to bottom in a fresh kernel (nbclient), so it cannot rot."""

from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

NOTEBOOK = Path(__file__).resolve().parents[1] / "docs" / "example.ipynb"


@pytest.mark.notebook
def test_the_example_notebook_runs_and_shows_the_dataset_and_the_vortices(tmp_path, monkeypatch):
    # a notebook kernel draws inline; CI exports MPLBACKEND=Agg for the scripts, which the
    # kernel would inherit and then show no figure at all
    monkeypatch.delenv("MPLBACKEND", raising=False)
    # densities of states built from scratch, as on a fresh machine (the kernel inherits it)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    nb = nbformat.read(NOTEBOOK, as_version=4)
    source = "\n".join(cell.source for cell in nb.cells)
    assert "matplotlib.use" not in source          # a notebook never changes the user's backend
    NotebookClient(nb, timeout=300, kernel_name="python3",
                   resources={"metadata": {"path": str(tmp_path)}}).execute()
    assert (tmp_path / "notebook.h5").is_file()
    outputs = {i: "".join(o.get("text", "") + o.get("data", {}).get("text/plain", "")
                          for o in cell.get("outputs", []))
               for i, cell in enumerate(nb.cells) if cell.cell_type == "code"}
    errors = [o for cell in nb.cells for o in cell.get("outputs", []) if o.output_type == "error"]
    assert errors == []
    text = "\n".join(outputs.values())
    assert "{'t': 7, 'y': 64, 'x': 64}" in text     # 12 hbar/mu every 2, plus the initial frame
    assert "n0 ms mu n0 xi^2" in text
    assert sum("image/png" in o.get("data", {}) for c in nb.cells for o in c.get("outputs", [])) == 2
    # the temperatures: one row per frame (7, as the Dataset's t), with the CSV's column names
    # and units, and the one-row ensemble with its systematics
    assert "7 frames; beta in 1/E0, t in hbar/mu" in text
    assert "beta_n_ci95_lo" in text and "temperature_sign" in text
    assert "sys_total_lo" in text and "n_effective" in text
    assert "1 row: " in text
    # a bar (or its text form) for the density-of-states builds of a cold cache
    assert "density of states" in "".join(o.get("text", "") for c in nb.cells
                                           for o in c.get("outputs", []))
