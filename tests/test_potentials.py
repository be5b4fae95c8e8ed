"""Tests of gpe.field.traps: trap shapes, signed distances, smooth walls and mask images.

Ramps, beam paths and the BeamSet (gpe/field/beams.py) are tested in test_beams.py.
"""

import numpy as np
import pytest

from gpe.errors import ProtocolError
from gpe.field.grid import Grid
from gpe.field.traps import TrapConfig, build_trap, load_mask, signed_distance_box

GRID = Grid(128, 96, 64.0, 48.0)  # dx = dy = 0.5 xi


def _value_at(V, grid, x, y):
    i = int(round(y / grid.dy + grid.ny / 2))
    j = int(round(x / grid.dx + grid.nx / 2))
    return V[i, j]


# -- traps -----------------------------------------------------------------------------------
@pytest.mark.parametrize("trap, inside, outside, edge", [
    (TrapConfig("disk", wall_height=8.0, edge_width=0.8, radius=20.0), (0, 0), (0, 23.5), (20.0, 0)),
    (TrapConfig("box", wall_height=8.0, edge_width=0.8, length_x=40.0, length_y=30.0),
     (19.0 - 5, 0), (0, 20.0), (-20.0, 0)),
    (TrapConfig("annulus", wall_height=8.0, edge_width=0.8, inner_radius=6.0, outer_radius=18.0),
     (12.0, 0), (0, 0), (0, 6.0)),
])
def test_walled_traps_inside_outside_and_half_height_on_edge(trap, inside, outside, edge):
    # [exact] V = W (1 + tanh(d/w))/2: ~0 for d << -w, ~W for d >> w, W/2 at d = 0
    V = build_trap(trap, GRID)
    assert V.shape == GRID.shape and V.dtype == np.float64
    assert _value_at(V, GRID, *inside) < 1e-5 * trap.wall_height
    assert _value_at(V, GRID, *outside) > (1 - 1e-3) * trap.wall_height
    assert _value_at(V, GRID, *edge) == pytest.approx(0.5 * trap.wall_height, rel=1e-12)


def test_box_signed_distance_is_euclidean_at_corners():
    # [exact] outside a corner the distance is the Euclidean distance to the corner point
    d = signed_distance_box(np.array([13.0]), np.array([14.0]), 20.0, 20.0)
    assert d[0] == pytest.approx(5.0)
    assert signed_distance_box(np.array([0.0]), np.array([0.0]), 20.0, 10.0)[0] == pytest.approx(-5.0)


def test_harmonic_trap_formula_and_cap():
    trap = TrapConfig("harmonic", omega_x=0.05, omega_y=0.08)
    V = build_trap(trap, GRID)
    assert np.allclose(V, 0.5 * (0.05**2 * GRID.X**2 + 0.08**2 * GRID.Y**2), rtol=1e-14)
    capped = build_trap(TrapConfig("harmonic", wall_height=1.5, omega_x=0.2, omega_y=0.2), GRID)
    assert capped.max() == pytest.approx(1.5) and capped[GRID.ny // 2, GRID.nx // 2] == 0.0


def _write_png(path, array):
    from PIL import Image

    Image.fromarray(array.astype(np.uint8)).save(path)


def test_mask_png_is_centred_smoothed_and_matches_the_disk(tmp_path):
    # a 41 x 41 pixel image of a disk of radius 15 px, pixel size 0.5 xi -> disk of radius 7.5 xi
    n = 41
    c = np.arange(n) - (n - 1) / 2
    img = np.where(np.hypot(*np.meshgrid(c, c)) <= 15.0, 255, 0)
    path = tmp_path / "disk.png"
    _write_png(path, img)
    trap = TrapConfig("mask", wall_height=5.0, edge_width=1.0, mask_file=str(path), mask_pixel_size=0.5)
    V = build_trap(trap, GRID)
    reference = build_trap(TrapConfig("disk", wall_height=5.0, edge_width=1.0, radius=7.5), GRID)
    assert _value_at(V, GRID, 0, 0) < 1e-3
    assert _value_at(V, GRID, 0, 15.0) > 5.0 * (1 - 1e-3)
    # the pixelated boundary lies within about one grid cell of the true circle
    assert np.max(np.abs(V - reference)) < 0.5 * 5.0
    assert trap.extent() == pytest.approx((20.5, 20.5))
    inverted = build_trap(TrapConfig("mask", wall_height=5.0, edge_width=1.0, mask_file=str(path),
                                     mask_pixel_size=0.5, mask_invert=True), GRID)
    assert _value_at(inverted, GRID, 0, 0) > 5.0 * (1 - 1e-3)


def test_mask_orientation_row0_is_top(tmp_path):
    img = np.zeros((20, 20))
    img[2:8, 5:15] = 1.0           # a bright bar in the top part of the image
    np.save(tmp_path / "bar.npy", img)
    trap = TrapConfig("mask", wall_height=4.0, edge_width=0.3, mask_file=str(tmp_path / "bar.npy"),
                      mask_pixel_size=1.0)
    V = build_trap(trap, GRID)
    assert _value_at(V, GRID, 0, 5.0) < 1e-2   # y > 0 is the top
    assert _value_at(V, GRID, 0, -5.0) > 3.9


def test_bad_masks_raise_protocol_error_naming_file(tmp_path):
    empty = tmp_path / "empty.png"
    _write_png(empty, np.zeros((10, 10)))
    with pytest.raises(ProtocolError, match="empty.png.*no allowed"):
        load_mask(empty)
    junk = tmp_path / "junk.png"
    junk.write_text("not an image")
    with pytest.raises(ProtocolError, match=r"junk.png.*\.npy"):
        load_mask(junk)
    with pytest.raises(ProtocolError, match="missing.npy"):
        load_mask(tmp_path / "missing.npy")
