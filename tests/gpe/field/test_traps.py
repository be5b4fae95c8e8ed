"""Tests of gpe.field.traps: shape discovery, trap shapes, signed distances, areas, smooth walls,
mask images and the point-vortex domains of the shapes.

Ramps, beam paths and the BeamSet (gpe/field/beams.py) are tested in test_beams.py.
"""

import math
import types

import numpy as np
import pytest

from gpe.errors import ProtocolError, VorthermError
from gpe.field.grid import Grid
from gpe.field.traps.annulus import AnnulusTrap
from gpe.field.traps.base import WalledTrap, shape_of_module, smooth_wall, trap_shapes
from gpe.field.traps.box import BoxTrap, signed_distance_box
from gpe.field.traps.disk import DiskTrap
from gpe.field.traps.harmonic import HarmonicTrap, ellipse_signed_distance
from gpe.field.traps.mask import MaskTrap, load_mask

GRID = Grid(128, 96, 64.0, 48.0)  # dx = dy = 0.5 xi


def _value_at(V, grid, x, y):
    i = int(round(y / grid.dy + grid.ny / 2))
    j = int(round(x / grid.dx + grid.nx / 2))
    return V[i, j]


def _disk_png(tmp_path, name="disk.png"):
    # a 41 x 41 pixel image of a disk of radius 15 px
    n = 41
    c = np.arange(n) - (n - 1) / 2
    img = np.where(np.hypot(*np.meshgrid(c, c)) <= 15.0, 255, 0)
    path = tmp_path / name
    _write_png(path, img)
    return path, int(np.count_nonzero(img))


# -- discovery -------------------------------------------------------------------------------
def test_discovery_finds_exactly_the_five_shapes():
    shapes = trap_shapes()
    assert list(shapes) == ["annulus", "box", "disk", "harmonic", "mask"]
    assert shapes["disk"] is DiskTrap and shapes["harmonic"] is HarmonicTrap and shapes["mask"] is MaskTrap
    assert all(cls.shape == name for name, cls in shapes.items())
    with pytest.raises(TypeError):
        shapes["ring"] = AnnulusTrap          # read-only: no shape is added by hand


def test_a_module_must_define_exactly_one_shape():
    two = types.ModuleType("gpe.field.traps.two")
    for name in ("A", "B"):
        cls = type(name, (DiskTrap,), {"shape": name.lower(), "__module__": two.__name__})
        setattr(two, name, cls)
    with pytest.raises(TypeError, match=r"two defines 2 trap shapes.*exactly one"):
        shape_of_module(two)
    empty = types.ModuleType("gpe.field.traps.empty")
    empty.WalledTrap = WalledTrap               # imported, abstract: not a shape of this module
    with pytest.raises(TypeError, match="empty defines 0 trap shapes"):
        shape_of_module(empty)


# -- traps -----------------------------------------------------------------------------------
@pytest.mark.parametrize("trap, inside, outside, edge", [
    (DiskTrap(wall_height=8.0, edge_width=0.8, radius=20.0), (0, 0), (0, 23.5), (20.0, 0)),
    (BoxTrap(wall_height=8.0, edge_width=0.8, length_x=40.0, length_y=30.0),
     (19.0 - 5, 0), (0, 20.0), (-20.0, 0)),
    (AnnulusTrap(wall_height=8.0, edge_width=0.8, inner_radius=6.0, outer_radius=18.0),
     (12.0, 0), (0, 0), (0, 6.0)),
])
def test_walled_traps_inside_outside_and_half_height_on_edge(trap, inside, outside, edge):
    # [exact] V = W (1 + tanh(d/w))/2: ~0 for d << -w, ~W for d >> w, W/2 at d = 0
    V = trap.potential(GRID)
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
    trap = HarmonicTrap(omega_x=0.05, omega_y=0.08)
    V = trap.potential(GRID)
    assert np.allclose(V, 0.5 * (0.05**2 * GRID.X**2 + 0.08**2 * GRID.Y**2), rtol=1e-14)
    capped = HarmonicTrap(wall_height=1.5, omega_x=0.2, omega_y=0.2).potential(GRID)
    assert capped.max() == pytest.approx(1.5) and capped[GRID.ny // 2, GRID.nx // 2] == 0.0


# semi-axes sqrt(2)/omega = 20 and 15 xi: the Thomas-Fermi edge passes through grid points
HARMONIC = HarmonicTrap(omega_x=math.sqrt(2) / 20, omega_y=math.sqrt(2) / 15)


@pytest.mark.parametrize("trap, wall_points, inside_point, depth", [
    (DiskTrap(radius=20.0), [(20.0, 0), (0, -20.0), (-12.0, 16.0)], (0, 0), 20.0),
    (BoxTrap(length_x=40.0, length_y=30.0), [(-20.0, 0), (5.0, 15.0), (20.0, -15.0)], (0, 0), 15.0),
    (AnnulusTrap(inner_radius=6.0, outer_radius=18.0), [(0, 6.0), (-18.0, 0), (0, -6.0)], (12.0, 0), 6.0),
    (HARMONIC, [(20.0, 0), (0, 15.0), (-20.0, 0)], (0, 0), 15.0),
])
def test_signed_distance_is_zero_on_the_wall_and_negative_inside(trap, wall_points, inside_point, depth):
    d = trap.signed_distance(GRID)
    assert d.shape == GRID.shape
    for point in wall_points:
        assert _value_at(d, GRID, *point) == pytest.approx(0.0, abs=1e-9)
    assert _value_at(d, GRID, *inside_point) == pytest.approx(-depth, rel=1e-9)
    assert _value_at(d, GRID, -31.5, 23.5) > 0          # a grid corner is outside every shape


def test_ellipse_distance_matches_a_brute_force_search():
    # [exact] the minimum over a dense sampling of the ellipse, signed by the implicit equation
    rng = np.random.default_rng(3)
    theta = np.linspace(0.0, 2 * np.pi, 400001)
    for a, b in ((30.0, 17.0), (10.0, 25.0)):
        pts = np.vstack([rng.uniform(-60, 60, size=(300, 2)), [[0, 0], [0.3 * a, 0], [0, 0.2 * b]]])
        d = ellipse_signed_distance(pts[:, 0], pts[:, 1], a, b)
        brute = np.array([np.min(np.hypot(a * np.cos(theta) - x, b * np.sin(theta) - y)) for x, y in pts])
        brute = np.where((pts[:, 0] / a) ** 2 + (pts[:, 1] / b) ** 2 < 1, -brute, brute)
        np.testing.assert_allclose(d, brute, atol=1e-5)


def test_areas_match_their_formulas_and_the_grid(tmp_path):
    png, pixels = _disk_png(tmp_path)
    cases = [
        (DiskTrap(radius=20.0), math.pi * 20.0**2),
        (BoxTrap(length_x=40.0, length_y=30.0), 40.0 * 30.0),
        (AnnulusTrap(inner_radius=6.0, outer_radius=18.0), math.pi * (18.0**2 - 6.0**2)),
        (HARMONIC, math.pi * 20.0 * 15.0),               # the ellipse V = 1
        (MaskTrap(file=str(png), pixel_size=0.5), pixels * 0.25),
    ]
    cell = GRID.dx * GRID.dy
    for trap, area in cases:
        assert trap.area() == pytest.approx(area, rel=1e-12), trap.shape
        # the region the signed distance calls inside has that area, up to the cells on its edge
        assert np.count_nonzero(trap.signed_distance(GRID) < 0) * cell == pytest.approx(area, rel=0.03), trap.shape


def test_thomas_fermi_norm_integrates_the_thomas_fermi_density():
    # [exact] integral of max(1 - V, 0): pi / (wx wy) for the harmonic trap, the area for a flat one
    fine = Grid(512, 384, 64.0, 48.0)
    tf = np.clip(1.0 - HARMONIC.potential(fine), 0.0, None).sum() * fine.dx * fine.dy
    assert HARMONIC.thomas_fermi_norm() == pytest.approx(math.pi / (HARMONIC.omega_x * HARMONIC.omega_y), rel=1e-12)
    assert tf == pytest.approx(HARMONIC.thomas_fermi_norm(), rel=2e-3)
    assert DiskTrap(radius=20.0).thomas_fermi_norm() == pytest.approx(math.pi * 400.0, rel=1e-12)


@pytest.mark.parametrize("trap, at_centre", [
    (DiskTrap(radius=20.0, wall_height=6.0), 0.0),
    (BoxTrap(length_x=40.0, length_y=30.0, wall_height=6.0), 0.0),
    (AnnulusTrap(inner_radius=6.0, outer_radius=18.0, wall_height=6.0), 6.0),   # the hole is wall
    (HarmonicTrap(omega_x=0.2, omega_y=0.3, wall_height=6.0), 0.0),
])
def test_potential_at_the_centre_and_far_outside(trap, at_centre):
    V = trap.potential(GRID)
    assert V[GRID.ny // 2, GRID.nx // 2] == pytest.approx(at_centre, abs=1e-4)
    assert V[0, 0] == pytest.approx(6.0, rel=1e-6)       # the grid corner, far outside: the wall or cap
    region = trap.detection_region(V)
    assert region.dtype == bool and region[GRID.ny // 2, GRID.nx // 2] == (at_centre == 0.0) and not region[0, 0]


def test_uncapped_harmonic_grows_as_its_formula_far_outside():
    trap = HarmonicTrap(omega_x=0.2, omega_y=0.3)
    assert trap.potential(GRID)[0, 0] == pytest.approx(0.5 * (0.04 * 32.0**2 + 0.09 * 24.0**2), rel=1e-12)
    assert trap.extent() == pytest.approx((2 * math.sqrt(2) / 0.2, 2 * math.sqrt(2) / 0.3))


def test_every_shape_has_a_point_vortex_domain_shrunk_by_the_wall_layer(tmp_path):
    png, _ = _disk_png(tmp_path)
    trap = MaskTrap(file=str(png), pixel_size=0.5)
    # a mask gets a grid domain of its region less the wall layer: for a drawn disk, [exact]
    # area pi (R - layer)^2 and reach R - layer, to the grid's staircase (~1 node, 1.5%)
    vd = trap.vortex_domain(0.5, 1.0)
    r_eff = trap.area() ** 0.5 / math.sqrt(math.pi) - 1.0
    assert vd.domain.kind == "grid" and vd.approximate == ""
    assert vd.scale == pytest.approx(r_eff, rel=0.03)
    assert vd.domain.area * vd.scale ** 2 == pytest.approx(math.pi * r_eff ** 2, rel=0.04)
    assert vd.core_radius == pytest.approx(0.5 / vd.scale)
    # a ring-shaped mask encloses a hole, which carries circulation (none until the frames
    # give it); its capacity is the annulus's 2 pi / ln(R_out / R_in) of the shrunk radii
    # 11.5 and 5 xi [exact, potential theory], here 4.5% low on the 80-node staircase
    c = np.arange(61) - 30
    r = np.hypot(*np.meshgrid(c, c))
    ring = MaskTrap(file="ring.npy", pixel_size=0.5, pixels=(r <= 25) & (r >= 8))
    vd = ring.vortex_domain(0.5, 1.0)
    assert vd.domain.hole_circulation == (0,)
    assert vd.domain.capacity[0, 0] == pytest.approx(2 * math.pi / math.log(11.5 / 5.0), rel=0.08)
    # the annulus shrinks at both walls (test_thermometry.py checks its hole's circulation)
    vd = AnnulusTrap(inner_radius=5.0, outer_radius=20.0).vortex_domain(0.5, 1.0)
    assert vd.domain.inner == pytest.approx(6.0 / 19.0) and vd.scale == pytest.approx(19.0)
    # [exact] R_eff = R - wall layer must exceed four cores; the box shrinks by the layer on each side
    with pytest.raises(VorthermError, match="disk radius 3 xi is too small"):
        DiskTrap(radius=3.0).vortex_domain(0.5, 1.0)
    assert DiskTrap(radius=3.1).vortex_domain(0.5, 1.0).scale == pytest.approx(2.1)
    with pytest.raises(VorthermError, match="box is too small"):
        BoxTrap(length_x=40.0, length_y=4.0).vortex_domain(0.5, 1.0)
    vd = BoxTrap(length_x=40.0, length_y=30.0).vortex_domain(0.5, 1.0)
    assert vd.domain.aspect == pytest.approx(38.0 / 28.0) and vd.core_radius == pytest.approx(0.5 / 28.0)


def test_sharp_wall_is_a_step_with_half_height_on_the_edge():
    assert smooth_wall(np.array([-0.1, 0.0, 0.1]), 4.0, 0.0).tolist() == [0.0, 2.0, 4.0]


def _write_png(path, array):
    from PIL import Image

    Image.fromarray(array.astype(np.uint8)).save(path)


def test_mask_png_is_centred_smoothed_and_matches_the_disk(tmp_path):
    # a 41 x 41 pixel image of a disk of radius 15 px, pixel size 0.5 xi -> disk of radius 7.5 xi
    path, _ = _disk_png(tmp_path)
    trap = MaskTrap(wall_height=5.0, edge_width=1.0, file=str(path), pixel_size=0.5)
    V = trap.potential(GRID)
    reference = DiskTrap(wall_height=5.0, edge_width=1.0, radius=7.5).potential(GRID)
    assert _value_at(V, GRID, 0, 0) < 1e-3
    assert _value_at(V, GRID, 0, 15.0) > 5.0 * (1 - 1e-3)
    # the pixelated boundary lies within about one grid cell of the true circle
    assert np.max(np.abs(V - reference)) < 0.5 * 5.0
    assert trap.extent() == pytest.approx((20.5, 20.5))
    inverted = MaskTrap(wall_height=5.0, edge_width=1.0, file=str(path), pixel_size=0.5, invert=True).potential(GRID)
    assert _value_at(inverted, GRID, 0, 0) > 5.0 * (1 - 1e-3)
    # its signed distance changes sign within a cell of the drawn radius
    d = trap.signed_distance(GRID)
    assert _value_at(d, GRID, 0, 0) < -7.0 and abs(_value_at(d, GRID, 7.5, 0)) <= GRID.dx


def test_mask_orientation_row0_is_top(tmp_path):
    img = np.zeros((20, 20))
    img[2:8, 5:15] = 1.0           # a bright bar in the top part of the image
    np.save(tmp_path / "bar.npy", img)
    trap = MaskTrap(wall_height=4.0, edge_width=0.3, file=str(tmp_path / "bar.npy"), pixel_size=1.0)
    V = trap.potential(GRID)
    assert _value_at(V, GRID, 0, 5.0) < 1e-2   # y > 0 is the top
    assert _value_at(V, GRID, 0, -5.0) > 3.9


def test_a_mask_keeps_its_pixels_and_is_rebuilt_from_them_without_its_file(tmp_path):
    path, _ = _disk_png(tmp_path)
    trap = MaskTrap(file=str(path), pixel_size=0.5)
    before = trap.potential(GRID)
    _write_png(path, np.pad(np.full((11, 11), 255), 15))     # the file edited: a square now
    np.testing.assert_array_equal(trap.potential(GRID), before)
    kept = trap.stored_arrays()["mask"]
    assert kept.dtype == bool and not kept.flags.writeable
    path.unlink()
    again = MaskTrap(file=str(path), pixel_size=0.5, pixels=kept)   # the file is not read
    np.testing.assert_array_equal(again.potential(GRID), before)
    assert again == trap
    other = kept.copy()
    other[20, 20] = False
    assert MaskTrap(file=str(path), pixel_size=0.5, pixels=other) != trap
    with pytest.raises(ProtocolError, match="no wall pixel"):
        MaskTrap(file="m.png", pixel_size=0.5, pixels=np.ones((4, 4), bool))
    with pytest.raises(ProtocolError, match=r"shape \(16,\).*2D array"):
        MaskTrap(file="m.png", pixel_size=0.5, pixels=np.ones(16, bool))


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
