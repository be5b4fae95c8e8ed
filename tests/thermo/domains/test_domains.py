"""Tests of thermo.domains: containment, sampling, Green's functions and Robin functions."""

import inspect
import math

import numpy as np
import pytest
from numba import njit
from scipy.special import gamma

from thermo.domains.base import (
    MOVE_SIGNATURE,
    PAIR_SIGNATURE,
    SELF_SIGNATURE,
    WALL_SIGNATURE,
    Domain,
    DomainKernels,
    pair_sum_move_change,
)
from thermo.domains.annulus import Annulus
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.domains.grid import GridDomain
from thermo.domains.kinds import domain_class, domain_classes
from thermo.energy import energy, energy_batch, energy_change
from thermo.errors import ConfigurationError, DomainError
from thermo.sampler import run_tempering


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


def test_the_domain_classes_are_found_by_kind():
    # discovered from the package, sorted by kind name; an unknown kind is refused by name
    assert domain_classes() == {"annulus": Annulus, "box": Box, "disk": Disk, "grid": GridDomain}
    assert domain_class("disk") is Disk and domain_class("box") is Box
    with pytest.raises(DomainError, match="'hexagon' is not known; accepted: 'annulus', 'box', 'disk', 'grid'"):
        domain_class("hexagon")


@pytest.mark.parametrize("cls", list(domain_classes().values()), ids=lambda c: c.kind)
def test_every_domain_implements_the_whole_interface(cls, rng):
    # Nothing abstract is left, the kind names the class, and the sizes build a domain whose
    # length unit is one of them (scaled positions stay O(1)).
    assert issubclass(cls, Domain) and not inspect.isabstract(cls) and cls.kind
    assert cls.size_names and all(isinstance(n, str) for n in cls.size_names)
    sizes = {name: 30.0 + 10.0 * i for i, name in enumerate(cls.size_names)}
    dom, unit = cls.from_sizes(sizes)
    assert isinstance(dom, cls) and dom.kind == cls.kind and unit in sizes.values()
    again, _ = cls.from_sizes(sizes)
    assert dom == again and dom.key() == again.key() and dom.key()[0] == cls.kind
    with pytest.raises(DomainError, match=cls.size_names[0]):
        cls.from_sizes({**sizes, cls.size_names[0]: -1.0})
    assert dom.area > 0 and dom.max_step > 0
    # the kernels are compiled for the signatures the shared loops call them with
    k = dom.kernels()
    assert isinstance(k, DomainKernels) and k.params.dtype == np.float64
    assert k.params.flags.c_contiguous and k.params.ndim == 1
    for kernel, sig in ((k.self_energy, SELF_SIGNATURE), (k.pair_energy, PAIR_SIGNATURE),
                        (k.wall_distance, WALL_SIGNATURE), (k.move_change, MOVE_SIGNATURE)):
        assert sig.args in kernel.signatures
    # uniform samples lie farther than the margin from the wall, and the compiled distance to
    # the wall agrees with the array one
    pts = dom.sample_uniform(rng, 500, margin=0.03)
    assert pts.shape == (500, 2) and dom.contains(pts, margin=0.03).all()
    wall = np.array([k.wall_distance(x, y, k.params) for x, y in pts])
    np.testing.assert_allclose(wall, dom.distance_to_wall(pts), rtol=0, atol=1e-15)
    assert np.all(wall > 0.03)
    # G symmetric and positive inside [exact: Dirichlet Green's function, maximum principle];
    # d <= r_c <= 4 d, d the distance to the wall [pub: Schwarz lemma (the disk of radius d
    # lies inside) and Koebe's 1/4 theorem, for simply connected domains]
    a, b = pts[:20], pts[20:40]
    np.testing.assert_allclose(dom.green(a, b), dom.green(b, a), rtol=1e-12)
    assert np.all(dom.green(a, b) > 0)
    r_c, d = dom.conformal_radius(a), dom.distance_to_wall(a)
    assert np.all(r_c >= d * (1 - 1e-12)) and np.all(r_c <= 4 * d * (1 + 1e-12))
    # the move kernel is the energy difference of the whole configuration [exact]
    conf = pts[40:48]
    signs = np.array([1, -1, 1, 1, -1, -1, 1, -1])
    moved = conf.copy()
    moved[5] = pts[60]
    ref = energy(moved, signs, dom) - energy(conf, signs, dom)
    assert energy_change(conf, signs, dom, 5, pts[60]) == pytest.approx(ref, rel=1e-10, abs=1e-12)


# A domain written only against the interface, as a new module would be: the unit disk again,
# its pair term in complex form, the generic move kernel, nothing registered anywhere.
@njit(SELF_SIGNATURE, error_model="numpy")
def _plain_self(x, y, s, params):
    return math.log(1.0 - (x * x + y * y))


@njit(PAIR_SIGNATURE, error_model="numpy")
def _plain_pair(x1, y1, x2, y2, params):
    u, v = complex(x1, y1), complex(x2, y2)
    return 2.0 * (math.log(abs(1.0 - u * v.conjugate())) - math.log(abs(u - v)))


@njit(WALL_SIGNATURE, error_model="numpy")
def _plain_wall(x, y, params):
    return 1.0 - abs(complex(x, y))


class _PlainDisk(Domain):
    kind = "plain-disk"
    size_names = ("radius",)

    @classmethod
    def from_sizes(cls, sizes):
        return cls(), float(sizes["radius"])

    def key(self):
        return ("plain-disk",)

    def kernels(self):
        return DomainKernels(_plain_self, _plain_pair, _plain_wall, pair_sum_move_change,
                             np.zeros(1))

    area = math.pi
    max_step = 2.0

    def distance_to_wall(self, pos):
        return 1.0 - np.abs(pos[..., 0] + 1j * pos[..., 1])

    def sample_uniform(self, rng, n, margin=0.0):
        return Disk().sample_uniform(rng, n, margin)


def test_a_domain_needs_only_its_own_kernels(rng):
    # The energy, the Green's function and the tempering loop take any domain's kernels: the
    # plain disk reproduces the disk's energies [exact: same Kirchhoff-Routh function, Lin,
    # PNAS 27, 570 (1941)] and, from the same seed, the same Markov chain.
    plain = _PlainDisk()
    conf = np.stack([Disk().sample_uniform(rng, 7, margin=0.01) for _ in range(20)])
    signs = np.array([1, 1, -1, 1, -1, -1, 1])
    np.testing.assert_allclose(energy_batch(conf, signs, plain), energy_batch(conf, signs, Disk()),
                               rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(plain.green(conf[0], conf[1]), Disk().green(conf[0], conf[1]),
                               rtol=1e-12)
    a = run_tempering(plain, 3, 2, [0.3, -0.2], 400, 0.01, np.random.default_rng(8))
    b = run_tempering(Disk(), 3, 2, [0.3, -0.2], 400, 0.01, np.random.default_rng(8))
    np.testing.assert_allclose(a.energies, b.energies, rtol=0, atol=1e-9)
    assert a.acceptance.min() > 0.2 and np.isfinite(a.energies).all()
    for k in range(2):
        np.testing.assert_allclose(energy_batch(a.positions[k, ::50], a.signs, plain),
                                   a.energies[k, ::50], rtol=1e-9, atol=1e-9)
