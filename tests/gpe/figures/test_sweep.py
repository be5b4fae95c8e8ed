"""Tests of the sweep phase maps (gpe/figures/sweep.py)."""

from __future__ import annotations

import concurrent.futures as cf

import numpy as np
import pytest
from sweep_stand_in import run_stand_in, write_sweep_file

from gpe.sweep.file import SweepError


@pytest.fixture
def sweep_file(tmp_path):
    return write_sweep_file(tmp_path)


def test_phase_map_outlines_negative_beta(sweep_file, tmp_path):
    from matplotlib.colors import CenteredNorm

    from gpe.figures.sweep import plot_sweep

    result = run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    fig = plot_sweep(tmp_path / "out", path=tmp_path / "map.png")
    ax = fig.axes[0]
    mesh = ax.collections[0]
    assert isinstance(mesh.norm, CenteredNorm) and mesh.norm.vcenter == 0.0
    assert ax.get_xlabel() == "beams.0.waist_um [um]" and ax.get_ylabel() == "beam speed [c]"
    # the beta = 0 contour lies between the two speeds (0.3: beta > 0, 0.6: beta < 0)
    contour = [c for c in ax.collections[1:] if hasattr(c, "get_paths") and c.get_paths()]
    verts = np.concatenate([p.vertices for c in contour for p in c.get_paths()])
    assert np.all((verts[:, 1] > 0.3) & (verts[:, 1] < 0.6))
    assert (tmp_path / "map.png").stat().st_size > 0
    line = plot_sweep(result, select={"beams.0.waist_um": 4.0})
    assert line.axes[0].get_xlabel() == "beam speed [c]"
    with pytest.raises(SweepError, match="not a swept key"):
        plot_sweep(result, select={"beams.0.wiast_um": 4.0})
