"""Tests of gpe.analysis.flow: superfluid velocity from psi and the flow of point vortices."""

import numpy as np
import pytest

from gpe.analysis.flow import (
    current_density,
    point_vortex_velocity,
    point_vortex_vorticity,
    superfluid_velocity,
    vorticity,
)
from gpe.errors import VorthermError
from gpe.field.grid import Grid


def test_plane_wave_velocity_is_its_wavevector():
    """psi = exp(i k.r): v = hbar k/m = k in healing units [exact]."""
    grid = Grid(32, 48, 16.0, 24.0)
    kx, ky = 3 * 2 * np.pi / 16.0, -2 * 2 * np.pi / 24.0
    psi = 0.7 * np.exp(1j * (kx * grid.X + ky * grid.Y))
    vx, vy = superfluid_velocity(psi, grid)
    np.testing.assert_allclose(vx, kx, atol=1e-12)
    np.testing.assert_allclose(vy, ky, atol=1e-12)
    jx, _ = current_density(psi, grid)
    np.testing.assert_allclose(jx, 0.49 * kx, atol=1e-12)


def test_vortex_velocity_is_one_over_r():
    """Around a vortex v = hbar/(m r) = 1/r azimuthal, circulation 2 pi [exact]. The field has
    a smooth envelope so that it is periodic; spectral derivatives are then accurate."""
    grid = Grid(256, 256, 48.0, 48.0)
    r = np.hypot(grid.X, grid.Y)
    psi = np.exp(-(r / 12.0) ** 4) * (grid.X - 1j * grid.Y) / np.sqrt(r * r + 1.0)  # sign -1
    vx, vy = superfluid_velocity(psi, grid)
    ring = (r > 3.0) & (r < 8.0)
    x, y, rr = grid.X[ring], grid.Y[ring], r[ring]
    np.testing.assert_allclose((-y * vx[ring] + x * vy[ring]) / rr, -1.0 / rr, rtol=1e-6)
    np.testing.assert_allclose((x * vx[ring] + y * vy[ring]) / rr, 0.0, atol=1e-6)


def test_spectral_vorticity_of_a_periodic_flow():
    """v = (sin(a y), sin(b x)) has curl b cos(b x) - a cos(a y) [exact]."""
    grid = Grid(64, 32, 20.0, 10.0)
    a, b = 2 * np.pi / 10.0, 3 * 2 * np.pi / 20.0
    omega = vorticity(np.sin(a * grid.Y), np.sin(b * grid.X), grid)
    np.testing.assert_allclose(omega, b * np.cos(b * grid.X) - a * np.cos(a * grid.Y),
                               atol=1e-12)


def test_point_vortex_far_field_and_dipole_speed():
    """Single vortex: |v| = 1/r for r >> a [exact]; each member of a +- pair moves the other at
    1/d (Saffman, Vortex Dynamics (1992), point-vortex pair)."""
    X = np.array([[10.0, 0.0, -3.0]])
    Y = np.array([[0.0, 20.0, 4.0]])
    vx, vy = point_vortex_velocity(X, Y, [[0.0, 0.0]], [1], core_radius=0.0)
    np.testing.assert_allclose(np.hypot(vx, vy), 1.0 / np.hypot(X, Y), rtol=1e-14)
    assert vy[0, 0] > 0          # counter-clockwise for a + vortex
    d = 7.0
    vx, vy = point_vortex_velocity(np.array([0.0]), np.array([-d / 2]),
                                   [[0.0, d / 2]], [1], core_radius=0.0)
    assert np.hypot(vx, vy)[0] == pytest.approx(1.0 / d, rel=1e-14)


def test_disk_images_cancel_normal_flow_at_the_wall(rng):
    """With image vortices at R^2 r0/|r0|^2 the wall is a streamline [exact, circle theorem]."""
    radius = 10.0
    positions = rng.uniform(-5, 5, (6, 2))
    signs = np.array([1, -1, 1, 1, -1, -1])
    phi = np.linspace(0, 2 * np.pi, 50, endpoint=False)
    X, Y = radius * np.cos(phi), radius * np.sin(phi)
    vx, vy = point_vortex_velocity(X, Y, positions, signs, core_radius=0.0, disk_radius=radius)
    normal = vx * np.cos(phi) + vy * np.sin(phi)
    assert np.abs(normal).max() < 1e-12 * np.hypot(vx, vy).max()
    with pytest.raises(VorthermError, match="outside the disk"):
        point_vortex_velocity(X, Y, [[11.0, 0.0]], [1], disk_radius=radius)


def test_point_vortex_vorticity_integrates_to_circulation():
    """Integral of 2 a^2/(r^2 + a^2)^2 over a disk of radius Rd is 2 pi Rd^2/(Rd^2 + a^2) [exact]."""
    x = np.linspace(-40, 40, 1601)
    X, Y = np.meshgrid(x, x, indexing="xy")
    omega = point_vortex_vorticity(X, Y, [[1.0, 2.0], [-3.0, 0.5]], [1, -1], core_radius=1.0)
    single = point_vortex_vorticity(X, Y, [[0.0, 0.0]], [1], core_radius=1.0)
    inside = np.hypot(X, Y) < 30.0
    cell = (x[1] - x[0]) ** 2
    assert np.sum(single[inside]) * cell == pytest.approx(2 * np.pi * 900 / 901, rel=1e-3)
    assert abs(np.sum(omega) * cell) < 1e-3
