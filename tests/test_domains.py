"""Tests of thermo.domains: containment, sampling, Green's functions and Robin functions."""

import numpy as np
import pytest
from scipy.special import gamma

from thermo.domains import Box, Disk
from thermo.errors import ConfigurationError, DomainError


def _wall_points(domain, n=9):
    """Points exactly on the boundary of the domain."""
    if isinstance(domain, Disk):
        phi = np.linspace(0.0, 2.0 * np.pi, 4 * n, endpoint=False)
        return np.column_stack((np.cos(phi), np.sin(phi)))
    A = domain.aspect
    t = np.linspace(-0.5, 0.5, n)
    return np.concatenate([np.column_stack((t * A, np.full(n, 0.5))),
                           np.column_stack((t * A, np.full(n, -0.5))),
                           np.column_stack((np.full(n, 0.5 * A), t)),
                           np.column_stack((np.full(n, -0.5 * A), t))])


DOMAINS = [Disk(), Box(1.0), Box(0.4), Box(3.0), Box(12.0)]


@pytest.mark.parametrize("domain", DOMAINS, ids=lambda d: str(d.key()))
def test_green_vanishes_on_every_wall(domain, rng):
    # Dirichlet condition G = 0 on the boundary [exact, definition of the Green's function].
    sources = domain.sample_uniform(rng, 6, margin=0.02)
    wall = _wall_points(domain)
    g = domain.green(wall[:, None, :], sources[None, :, :])
    assert np.max(np.abs(g)) < 1e-10
    # and it is positive inside (maximum principle), symmetric G(z, z0) = G(z0, z)
    z = domain.sample_uniform(rng, 6, margin=0.02)
    assert np.all(domain.green(z, sources) > 0)
    np.testing.assert_allclose(domain.green(z, sources), domain.green(sources, z), rtol=1e-12)


@pytest.mark.parametrize("domain", DOMAINS, ids=lambda d: str(d.key()))
def test_green_is_harmonic_away_from_source(domain, rng):
    # -lap G = 0 for z != z0 [exact]; five-point Laplacian with h = 1e-3 (error O(h^2)).
    z0 = domain.sample_uniform(rng, 1, margin=0.2)[0]
    z = z0 + np.array([0.07, -0.05])
    h = 1e-3
    offs = np.array([[h, 0], [-h, 0], [0, h], [0, -h]])
    lap = (domain.green(z + offs, z0).sum() - 4 * domain.green(z, z0)) / h**2
    # truncation error ~ (h^2/6) max|d^4 G| ~ h^2 / (2 pi r^4) ~ 3e-4 at r = 0.086
    assert abs(lap) < 5e-3


def test_disk_green_matches_image_formula(rng):
    # Image vortex at u0/|u0|^2 [pub: Saffman, Vortex Dynamics (1992) ch. 7]:
    # G = -(1/2pi) [ln|u - u0| - ln|u - u0/|u0|^2| - ln|u0|].
    d = Disk()
    u = d.sample_uniform(rng, 50)
    u0 = d.sample_uniform(rng, 50)
    zu, z0 = u[:, 0] + 1j * u[:, 1], u0[:, 0] + 1j * u0[:, 1]
    ref = -(np.log(abs(zu - z0)) - np.log(abs(zu - z0 / abs(z0) ** 2)) - np.log(abs(z0))) / (2 * np.pi)
    np.testing.assert_allclose(d.green(u, u0), ref, rtol=1e-10, atol=1e-13)
    # Robin: h(u, u) = (1/2pi) ln(|u0| |u0 - u0/|u0|^2|) = (1/2pi) ln(1 - |u|^2)
    np.testing.assert_allclose(d.robin(u), np.log(1 - abs(zu) ** 2) / (2 * np.pi), rtol=1e-12)


@pytest.mark.parametrize("aspect", [0.25, 1.0, 1.7, 6.0])
def test_box_theta_and_image_lattice_agree(aspect, rng):
    # Two independent evaluations of one Green's function: theta functions with the argument
    # reduced by quasi-periodicity (rotated so that the short side is the real period) and the
    # row-summed image lattice in the unrotated frame [method: Crowdy (2020)].
    b = Box(aspect)
    z = b.sample_uniform(rng, 40)
    z0 = b.sample_uniform(rng, 40)
    np.testing.assert_allclose(b.green(z, z0), b.green_images(z, z0), rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(b.robin(z), b.robin_images(z), rtol=1e-9, atol=1e-12)


def test_box_green_matches_brute_force_image_sum():
    # Brute-force image sum: the Dirichlet images of z0 in [0,A]x[0,1] are +z0, +(-z0),
    # -conj(z0), -(-conj z0) on the lattice 2A m + 2i n [method of images]. Rows (fixed n) are
    # summed symmetrically over |m| <= M (dipole chains, truncation error O(1/M^2)).
    A = 1.5
    b = Box(A)
    z = np.array([0.31, -0.12])
    z0 = np.array([-0.4, 0.2])
    zc = (z[0] + A / 2) + 1j * (z[1] + 0.5)
    z0c = (z0[0] + A / 2) + 1j * (z0[1] + 0.5)
    m = np.arange(-3000, 3001)
    total = 0.0
    for n in range(-8, 9):
        lat = 2 * A * m + 2j * n
        total += (np.log(abs(zc - (z0c + lat))).sum() + np.log(abs(zc - (-z0c + lat))).sum()
                  - np.log(abs(zc - (np.conj(z0c) + lat))).sum()
                  - np.log(abs(zc - (-np.conj(z0c) + lat))).sum())
    g_brute = -total / (2 * np.pi)
    assert b.green(z, z0) == pytest.approx(g_brute, rel=1e-6)


def test_unit_square_robin_at_centre():
    # 2 pi R(centre) = ln(conformal radius) = -0.617385 [exact; Crowdy, Solved Problems in Vortex
    # Dynamics (2020) for the method]. Independent value: Schwarz-Christoffel map of the unit disk
    # onto the square, f(w) = C int_0^w (1 + t^4)^(-1/2) dt, whose corner f(e^{i pi/4}) lies at
    # distance sqrt(2)/2, so C = (sqrt(2)/2) / [Gamma(1/4)^2 / (4 sqrt(2 pi))] is the conformal
    # radius (= 0.5393526; the 0.539373 quoted beside -0.617385 has a transposed digit, since
    # exp(-0.617385) = 0.539353).
    b = Box(1.0)
    two_pi_r = 2 * np.pi * float(b.robin([0.0, 0.0]))
    assert two_pi_r == pytest.approx(-0.617385, abs=1e-6)
    c_sc = (np.sqrt(2) / 2) / (gamma(0.25) ** 2 / (4 * np.sqrt(2 * np.pi)))
    assert float(b.conformal_radius([0.0, 0.0])) == pytest.approx(c_sc, rel=1e-12)


def test_robin_near_a_wall_approaches_half_plane():
    # Half-plane: image at distance 2d, so r_c -> 2d as d -> 0 [exact]; both shapes alike.
    d = 1e-4
    assert float(Disk().conformal_radius([1 - d, 0.0])) == pytest.approx(2 * d, rel=1e-3)
    assert float(Box(2.0).conformal_radius([0.0, 0.5 - d])) == pytest.approx(2 * d, rel=1e-3)


def test_robin_rotation_and_reflection_symmetry(rng):
    # A box of aspect A rotated by 90 degrees is the box of aspect 1/A scaled by A, so
    # R_{1/A}(y/A, -x/A) = R_A(x, y) - ln(A)/(2 pi) [exact: G is conformally invariant and the
    # log term shifts by ln(scale)].
    A = 2.5
    p = Box(A).sample_uniform(rng, 20)
    rot = np.column_stack((p[:, 1], -p[:, 0])) / A
    np.testing.assert_allclose(Box(1 / A).robin(rot), Box(A).robin(p) - np.log(A) / (2 * np.pi),
                               rtol=1e-10, atol=1e-12)
    mirrored = p * np.array([-1.0, 1.0])
    np.testing.assert_allclose(Box(A).robin(mirrored), Box(A).robin(p), rtol=1e-12)


def test_containment_and_sampling(rng):
    d = Disk()
    pts = np.array([[0.0, 0.0], [0.95, 0.0], [0.0, -1.01], [np.nan, 0.0], [0.7, 0.7]])
    np.testing.assert_array_equal(d.contains(pts), [True, True, False, False, True])
    np.testing.assert_array_equal(d.contains(pts, margin=0.1), [True, False, False, False, False])
    b = Box(2.0)
    pts = np.array([[0.99, 0.49], [1.01, 0.0], [0.0, -0.51], [0.95, 0.0]])
    np.testing.assert_array_equal(b.contains(pts), [True, False, False, True])
    np.testing.assert_array_equal(b.contains(pts, margin=0.02), [False, False, False, True])
    for dom in (d, b):
        s = dom.sample_uniform(rng, 20000, margin=0.05)
        assert s.shape == (20000, 2) and dom.contains(s, margin=0.05).all()
    # uniform in the disk: |u|^2 is uniform on [0, 1], mean 1/2, sd of the mean 1/sqrt(12 n)
    u2 = (d.sample_uniform(rng, 20000) ** 2).sum(1)
    assert abs(u2.mean() - 0.5) < 4 / np.sqrt(12 * 20000)
    assert d.area == pytest.approx(np.pi) and b.area == pytest.approx(2.0)


def test_keys_and_validation():
    assert Disk().key() == Disk().key() and Box(1.5).key() != Box(1.0).key()
    assert hash(Box(1.5)) == hash(Box(1.5))
    with pytest.raises(DomainError, match="aspect"):
        Box(-1.0)
    with pytest.raises(DomainError, match="aspect"):
        Box(float("nan"))
    with pytest.raises(ConfigurationError, match="last axis"):
        Disk().contains(np.zeros((3, 3)))
