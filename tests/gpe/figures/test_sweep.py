"""Tests of the sweep phase maps (gpe/figures/sweep.py): beta~ N on a diverging scale centred at
0, only the computed grid points drawn, bounds marked, the figure returned unsaved."""

from __future__ import annotations

import concurrent.futures as cf
import math

import numpy as np
import pytest
from sweep_stand_in import run_stand_in, write_sweep_file

from gpe.errors import VorthermError
from gpe.sweep.file import SweepError

#: A made-up pooled estimate per grid point (the stand-in's run files are not run files):
#: p000 measured, p001 undefined, p002 a bound (beta~ N < -4.6), p003 measured.
POOLED = {"p000": (1.2, (0.4, 2.0), None), "p002": (-4.6, (-math.inf, -4.6), "upper"),
          "p003": (-2.0, (-3.0, -1.0), None)}


def stand_in_pool(sweep, out_dir, points):
    grid_id = points[0].grid_id
    if grid_id not in POOLED:
        raise VorthermError("beta undefined: no frame has two or more vortices")
    value, ci, bound = POOLED[grid_id]
    return {"beta_n": value, "beta_n_ci95": list(ci), "bound": bound, "n_effective": 4.0}


@pytest.fixture
def result(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "invalid_p003_s0").touch()     # one seed of p003 fails: the other still counts
    return run_stand_in(write_sweep_file(tmp_path), out, executor=cf.ThreadPoolExecutor(2),
                        pool_fn=stand_in_pool)


def _cells(ax, gid):
    return [c for c in ax.collections if c.get_gid() == gid]


def test_phase_map_draws_only_the_computed_points_and_marks_the_bound(result, tmp_path):
    from matplotlib.colors import CenteredNorm

    from gpe.figures.sweep import plot_sweep

    fig = plot_sweep(result)                    # default: beta~ N pooled over seeds
    ax = fig.axes[0]
    (mesh,) = _cells(ax, "computed")
    assert isinstance(mesh.norm, CenteredNorm) and mesh.norm.vcenter == 0.0
    # three cells (p000, p002, p003), coloured by the pooled beta~ N; p001 left blank
    assert len(mesh.get_paths()) == 3
    np.testing.assert_array_equal(mesh.get_array(), [1.2, -4.6, -2.0])
    # the cell of p003 (speed 0.6, waist 4 um) spans the midpoints between the grid values
    corners = mesh.get_paths()[2].vertices
    assert corners[:, 0].min() == pytest.approx(3.0) and corners[:, 1].min() == pytest.approx(0.45)
    (hatched,) = _cells(ax, "bounds")
    assert len(hatched.get_paths()) == 1 and hatched.get_hatch() == "//"
    carets = [ln for ln in ax.lines if ln.get_marker() == 7]     # caret down: beta~ N below
    assert len(carets) == 1 and list(carets[0].get_xdata()) == [2.0]
    assert list(carets[0].get_ydata()) == [0.6]
    note = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert "not drawn (1 of 4)" in note and "p001" in note and "two or more vortices" in note
    assert "bound" in note
    # nothing else drawn over the grid: no contour, no interpolated mesh
    assert not [c for c in ax.collections if c.get_gid() not in ("computed", "bounds")]
    assert ax.get_xlabel() == "beams.0.waist_um [um]" and ax.get_ylabel() == "beam speed [c]"
    assert not list(tmp_path.glob("**/*.png"))  # returned, not saved


def test_mean_quantities_and_the_line_view(result, tmp_path):
    from gpe.figures.sweep import plot_sweep

    fig = plot_sweep(result, "n_plus")
    (mesh,) = _cells(fig.axes[0], "computed")
    assert len(mesh.get_paths()) == 4        # every point has a seed that finished
    line = plot_sweep(result, select={"beams.0.waist_um": 4.0})
    ax = line.axes[0]
    assert ax.get_xlabel() == "beam speed [c]"
    assert [ln for ln in ax.lines if ln.get_marker() == 7] == []   # p001 is undefined
    saved = tmp_path / "map.svg"
    plot_sweep(result, path=saved)
    assert saved.read_text().startswith("<?xml")
    with pytest.raises(SweepError, match="not a swept key"):
        plot_sweep(result, select={"beams.0.wiast_um": 4.0})
    with pytest.raises(SweepError, match="accepted: beta_n, beta"):
        plot_sweep(result, "cluster_fraction")


def test_a_summary_without_pooled_beta_n_is_refused_with_what_to_do(result):
    import dataclasses

    from gpe.figures.sweep import plot_sweep

    old = [{k: v for k, v in r.items() if not k.startswith("beta_n")} for r in result.points]
    with pytest.raises(SweepError, match="rerun the same sweep command"):
        plot_sweep(dataclasses.replace(result, points=old))
