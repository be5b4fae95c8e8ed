"""Tests of gpe.field.beams: switch-on/off ramps, beam paths, rigid arrays, the BeamSet and the check
that beams stay on the grid."""

import math

import numpy as np
import pytest

from gpe.field.beams import (
    Beam,
    BeamSet,
    CirclePath,
    LinePath,
    PolylinePath,
    Ramp,
    StaticPath,
    array_offsets,
    find_beam_excursion,
)
from gpe.field.grid import Grid

GRID = Grid(128, 96, 64.0, 48.0)  # dx = dy = 0.5 xi


def _value_at(V, grid, x, y):
    i = int(round(y / grid.dy + grid.ny / 2))
    j = int(round(x / grid.dx + grid.nx / 2))
    return V[i, j]


# -- ramps -----------------------------------------------------------------------------------
def test_ramp_start_mid_end():
    # [exact] sin^2 ramp: 0 at the start, 1/2 halfway, 1 at the end; cos^2 on the way down
    r = Ramp(on_time=10.0, on_duration=20.0, off_time=100.0, off_duration=40.0)
    assert r.factor(5.0) == 0.0 and r.factor(10.0) == 0.0
    assert r.factor(20.0) == pytest.approx(0.5, abs=1e-14)
    assert r.factor(15.0) == pytest.approx(math.sin(math.pi / 8) ** 2, abs=1e-14)
    assert r.factor(30.0) == pytest.approx(1.0) and r.factor(99.0) == 1.0
    assert r.factor(120.0) == pytest.approx(0.5, abs=1e-14)
    assert r.factor(140.0) == pytest.approx(0.0, abs=1e-14) and r.factor(500.0) == 0.0
    assert Ramp().factor(0.0) == 1.0


# -- paths -----------------------------------------------------------------------------------
def test_line_path_reaches_end_at_L_over_v_and_bounces():
    p = LinePath(start=(-10.0, 0.0), end=(20.0, 40.0), speed=0.5, start_time=4.0)  # L = 50
    assert p.position(0.0) == pytest.approx((-10.0, 0.0))
    assert p.position(4.0 + 100.0) == pytest.approx((20.0, 40.0))   # t = L/v after start
    assert p.position(4.0 + 50.0) == pytest.approx((5.0, 20.0))
    assert p.position(1e4) == pytest.approx((20.0, 40.0))            # "once" stays at the end
    b = LinePath(start=(-10.0, 0.0), end=(20.0, 40.0), speed=0.5, mode="back_and_forth")
    assert b.position(150.0) == pytest.approx((5.0, 20.0))           # half way back
    assert b.position(200.0) == pytest.approx((-10.0, 0.0))          # one full period
    assert b.position(220.0) == pytest.approx((-4.0, 8.0))


def test_circle_path_quarter_period_and_sense():
    # [exact] after a quarter period T/4 = (pi/2)/Omega the angle advanced by pi/2
    omega = 0.02
    ccw = CirclePath(radius=12.0, angular_speed=omega, centre=(1.0, -2.0), start_angle=0.0)
    assert ccw.position(0.0) == pytest.approx((13.0, -2.0))
    assert ccw.position(0.5 * math.pi / omega) == pytest.approx((1.0, 10.0))
    cw = CirclePath(radius=12.0, angular_speed=omega, centre=(1.0, -2.0), start_angle=math.pi / 2, sense=-1)
    assert cw.position(0.5 * math.pi / omega) == pytest.approx((13.0, -2.0))
    assert ccw.max_speed == pytest.approx(12.0 * omega)


def test_polyline_at_waypoints_and_modes():
    pts = ((0.0, 0.0), (10.0, 0.0), (10.0, 5.0))
    p = PolylinePath(points=pts, speeds=(2.0, 0.5))   # segment durations 5 and 10
    assert p.position(5.0) == pytest.approx((10.0, 0.0))
    assert p.position(10.0) == pytest.approx((10.0, 2.5))
    assert p.position(15.0) == pytest.approx((10.0, 5.0))
    assert p.position(99.0) == pytest.approx((10.0, 5.0))
    back = PolylinePath(points=pts, speeds=(2.0, 0.5), mode="back_and_forth")
    assert back.position(20.0) == pytest.approx((10.0, 2.5))   # 5 into the way back at 0.5
    assert back.position(27.5) == pytest.approx((5.0, 0.0))
    assert back.position(30.0) == pytest.approx((0.0, 0.0))
    loop = PolylinePath(points=pts, speeds=(2.0, 0.5, 1.0), mode="loop")  # closing leg length sqrt(125)
    closing = math.sqrt(125.0)
    assert loop.position(15.0 + closing / 2) == pytest.approx((5.0, 2.5))
    assert loop.position(15.0 + closing + 5.0) == pytest.approx((10.0, 0.0))
    t = np.array([5.0, 10.0])
    x, y = p.position(t)
    assert np.allclose(x, [10.0, 10.0]) and np.allclose(y, [0.0, 2.5])


def test_array_offsets_grid_and_rotation():
    off = np.array(array_offsets(3, 2, 4.0, 6.0))
    assert off.shape == (6, 2)
    assert np.allclose(off.mean(axis=0), 0.0)
    assert sorted(set(np.round(off[:, 0], 12))) == [-4.0, 0.0, 4.0]
    rot = np.array(array_offsets(2, 1, 4.0, 4.0, angle=math.pi / 2))
    assert np.allclose(rot, [[0.0, -2.0], [0.0, 2.0]])


# -- BeamSet ---------------------------------------------------------------------------------
def _beamset():
    circle = Beam(waist=3.0, height=2.0, path=CirclePath(radius=8.0, angular_speed=0.05),
                  ramp=Ramp(on_time=0.0, on_duration=20.0))
    row = Beam(waist=2.0, height=1.5, path=LinePath(start=(-5.0, -8.0), end=(5.0, -8.0), speed=0.4),
               offsets=array_offsets(3, 1, 5.0, 5.0))
    return BeamSet([circle, row])


def test_beamset_evaluate_in_place_and_positions():
    bs = _beamset()
    assert bs.n_beams == 4 and np.allclose(bs.waists, [3.0, 2.0, 2.0, 2.0])
    amp, cx, cy = np.zeros(4), np.zeros(4), np.zeros(4)
    bs.evaluate(10.0, amp, cx, cy)   # fills the caller's arrays, returns nothing
    assert amp == pytest.approx([1.0, 1.5, 1.5, 1.5])    # half way up the 20-tau ramp
    assert cx == pytest.approx([8 * math.cos(0.5), -6.0, -1.0, 4.0])   # path at x = -1
    assert cy == pytest.approx([8 * math.sin(0.5), -8.0, -8.0, -8.0])
    assert np.allclose(bs.positions(10.0), np.column_stack([cx, cy]))
    assert bs.max_height() == 2.0 and BeamSet().n_beams == 0 and BeamSet().max_height() == 0.0


def test_max_height_is_the_largest_magnitude_attractive_beams_included():
    # [exact] a beam turns the phase by |V0| dt per step whatever its sign: a well counts too
    mixed = BeamSet([Beam(waist=2.0, height=1.0), Beam(waist=2.0, height=-5.0)])
    assert mixed.max_height() == 5.0
    assert BeamSet([Beam(waist=2.0, height=-1e6)]).max_height() == 1e6


def test_separable_factors_equal_direct_gaussian():
    # [exact] exp(-2 r^2/w^2) = exp(-2 (x-x0)^2/w^2) exp(-2 (y-y0)^2/w^2)
    bs = _beamset()
    t = 30.0
    V = bs.potential(t, GRID)
    direct = np.zeros(GRID.shape)
    for (x0, y0), a, w in zip(bs.positions(t), bs.amplitudes(t), bs.waists):
        direct += a * np.exp(-2 * ((GRID.X - x0) ** 2 + (GRID.Y - y0) ** 2) / w**2)
    assert np.allclose(V, direct, rtol=1e-12, atol=1e-14)
    # at one waist from the centre the Gaussian is down by exp(-2)
    beam = BeamSet([Beam(waist=3.0, height=2.0, path=StaticPath(0.0, 0.0))])
    assert _value_at(beam.potential(0.0, GRID), GRID, 3.0, 0.0) == pytest.approx(2.0 * math.exp(-2))


def test_beam_excursion_reports_time_and_place():
    grid = Grid(64, 64, 40.0, 40.0)     # |x| <= 20 - waist allowed
    inside = BeamSet([Beam(waist=2.0, height=1.0, path=CirclePath(radius=10.0, angular_speed=0.1))])
    assert find_beam_excursion(inside, grid, 500.0) is None
    leaving = BeamSet([Beam(waist=2.0, height=1.0,
                            path=LinePath(start=(0.0, 0.0), end=(30.0, 0.0), speed=0.5))])
    hit = find_beam_excursion(leaving, grid, 100.0)
    assert hit is not None and hit.beam_index == 0
    assert hit.time == pytest.approx(36.0, rel=1e-9)        # x = 18 reached at t = 36
    assert hit.x == pytest.approx(18.0, rel=1e-9) and hit.limit_x == 18.0
    # a beam that is switched off before it gets there is fine
    off = BeamSet([Beam(waist=2.0, height=1.0, path=leaving.beams[0].path,
                        ramp=Ramp(off_time=20.0, off_duration=5.0))])
    assert find_beam_excursion(off, grid, 100.0) is None
