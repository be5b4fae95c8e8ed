"""Tests of thermo.dynamics: Kirchhoff-Routh velocities, the adaptive integrator, friction,
annihilation and noise.

Scaled units: positions u = r/L, time s = t hbar/(m L^2), so a speed hbar/(m d) is L/d = 1/d in
scaled units and an angular velocity hbar/[m(R^2 - r0^2)] is 1/(1 - u0^2) in the unit disk.
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from thermo.domains.base import pair_sum_velocity
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.domains.grid import GridDomain
from thermo.dynamics.integrate import (DynamicsSettings, advance, angular_impulse, evolve,
                                       initial_state)
from thermo.dynamics.velocity import velocities
from thermo.energy import energy
from thermo.errors import ConfigurationError, DomainError

DOMAINS = [Disk(), Box(1.0), Box(0.4), Box(3.0)]


def _numerical_gradient(domain, pos, signs, h=1e-6):
    """Central differences of thermo.energy.energy (independent of the gradient kernels)."""
    g = np.empty_like(pos)
    for i in range(pos.shape[0]):
        for c in range(2):
            p, m = pos.copy(), pos.copy()
            p[i, c] += h
            m[i, c] -= h
            g[i, c] = (energy(p, signs, domain) - energy(m, signs, domain)) / (2 * h)
    return g


@pytest.mark.parametrize("domain", DOMAINS, ids=lambda d: str(d.key()))
def test_velocities_are_the_symplectic_gradient_of_the_energy(domain, rng):
    # [exact] Kirchhoff: u_x' = (s/2) dE/du_y, u_y' = -(s/2) dE/du_x in E0 units and scaled time;
    # with friction the extra term is -(alpha/2) grad E. Reference: finite differences of the
    # energy (error ~h^2 ~ 1e-12 relative to the terms, plus round-off ~1e-10/h).
    pos = domain.sample_uniform(rng, 5, margin=0.1)
    signs = np.array([1, -1, 1, 1, -1])
    g = _numerical_gradient(domain, pos, signs)
    v = velocities(pos, signs, domain)
    np.testing.assert_allclose(v[:, 0], 0.5 * signs * g[:, 1], rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(v[:, 1], -0.5 * signs * g[:, 0], rtol=1e-6, atol=1e-7)
    vf = velocities(pos, signs, domain, alpha=0.1, alpha_prime=0.2)
    np.testing.assert_allclose(vf, 0.8 * v - 0.05 * g, rtol=1e-6, atol=1e-7)


@pytest.mark.parametrize("domain", DOMAINS + [Box(12.0)], ids=lambda d: str(d.key()))
def test_each_domains_own_velocity_loop_equals_the_generic_one(domain, rng):
    # The disk's and the box's own loops (pairs visited once, no indirect calls) against the
    # generic loop over the pair-gradient kernel, which the test above checks against the energy.
    g = domain.gradient_kernels()
    pos = np.ascontiguousarray(domain.sample_uniform(rng, 7, margin=0.01))
    signs = np.array([1, -1, 1, 1, -1, -1, 1])
    own, generic = np.empty_like(pos), np.empty_like(pos)
    g.velocity(pos, signs, 0.1, 0.2, g.self_gradient, g.pair_gradient, g.params, own)
    pair_sum_velocity(pos, signs, 0.1, 0.2, g.self_gradient, g.pair_gradient, g.params, generic)
    np.testing.assert_allclose(own, generic, rtol=1e-12, atol=1e-12 * np.max(np.abs(generic)))


def test_box_gradient_agrees_with_the_image_lattice(rng):
    # The box gradient (theta-function log-derivatives) against finite differences of the
    # independent image-lattice sum Box.green_images [exact: both are the Dirichlet Green's
    # function; Crowdy (2020) for the method].
    box = Box(2.5)
    z = box.sample_uniform(rng, 3, margin=0.1)
    z0 = box.sample_uniform(rng, 3, margin=0.1)
    h = 1e-6
    k = box.gradient_kernels()
    for a, b in zip(z, z0):
        fd = [4 * np.pi * (box.green_images(a + e, b) - box.green_images(a - e, b)) / (2 * h)
              for e in (np.array([h, 0.0]), np.array([0.0, h]))]
        g = k.pair_gradient(a[0], a[1], b[0], b[1], k.params)
        np.testing.assert_allclose([g.real, g.imag], fd, rtol=1e-6, atol=1e-8)


@pytest.mark.parametrize("domain", [Disk(), Box(1.0)], ids=lambda d: str(d.key()))
def test_dipole_translates_at_hbar_over_m_d(domain):
    # [pub] Saffman, Vortex Dynamics (1992): a pair of opposite vortices a distance d apart moves
    # perpendicular to the line joining them at hbar/(m d) (scaled: 1/d). At the centre of the
    # domain the images change the speed by O(d^2) relative, ~1e-4 here.
    d = 0.01
    st = initial_state([[0.0, d / 2], [0.0, -d / 2]], [1, -1], domain)
    v = velocities(st.pos, st.signs, domain)
    np.testing.assert_allclose(np.hypot(*v.T), 1.0 / d, rtol=1e-3)
    s_end = 0.2 * d                     # it travels 0.2 domain units, staying near the centre
    out = advance(st, s_end, domain, DynamicsSettings(rtol=1e-10, atol=1e-12))
    travelled = np.mean(out.pos, axis=0) - np.mean(st.pos, axis=0)
    assert abs(np.hypot(*travelled) - s_end / d) < 1e-3 * s_end / d
    assert abs(np.hypot(*(out.pos[0] - out.pos[1])) - d) < 1e-6      # the pair stays together


def test_single_vortex_precesses_at_hbar_over_m_r2_minus_r0_2():
    # [pub] Saffman (1992), image vortex at R^2/r0: Omega = hbar/[m(R^2 - r0^2)], scaled
    # 1/(1 - u0^2); the positive vortex turns counterclockwise and keeps its radius.
    disk = Disk()
    for u0 in (0.3, 0.7):
        omega = 1.0 / (1.0 - u0 ** 2)
        s_end = 2.0
        out = advance(initial_state([[u0, 0.0]], [1], disk), s_end, disk,
                      DynamicsSettings(rtol=1e-11, atol=1e-13))
        expect = u0 * np.array([math.cos(omega * s_end), math.sin(omega * s_end)])
        np.testing.assert_allclose(out.pos[0], expect, atol=1e-8)
    neg = advance(initial_state([[0.5, 0.0]], [-1], disk), 0.1, disk, DynamicsSettings())
    assert neg.pos[0, 1] < 0                                               # clockwise


def test_integrator_matches_scipy_dop853(rng):
    # Reference: scipy.integrate.solve_ivp (DOP853, rtol 1e-12) on the same velocity field.
    disk = Disk()
    pos = disk.sample_uniform(rng, 6, margin=0.2)
    signs = np.array([1, 1, 1, -1, -1, -1])

    def f(_, y):
        return velocities(y.reshape(-1, 2), signs, disk).reshape(-1)

    ref = solve_ivp(f, (0.0, 0.05), pos.reshape(-1), method="DOP853", rtol=1e-12, atol=1e-14)
    out = advance(initial_state(pos, signs, disk), 0.05, disk, DynamicsSettings(rtol=1e-10,
                                                                               atol=1e-12))
    np.testing.assert_allclose(out.pos.reshape(-1), ref.y[:, -1], atol=1e-7)


@pytest.mark.parametrize("domain", [Disk(), Box(1.5)], ids=lambda d: str(d.key()))
def test_energy_and_impulse_conserved_without_damping(domain, rng):
    # [exact] The Kirchhoff-Routh energy is the Hamiltonian, conserved by the dynamics; in the
    # disk the signed angular impulse M = sum s |u|^2 is conserved too (rotational symmetry;
    # Reeves et al., PRX 12, 011031 (2022)). The drift must shrink with the tolerance.
    pos = domain.sample_uniform(rng, 6, margin=0.15)
    signs = np.array([1, -1, 1, -1, 1, -1])
    st = initial_state(pos, signs, domain)
    e0, m0 = energy(pos, signs, domain), angular_impulse(st)
    drifts = []
    for rtol in (1e-6, 1e-9):
        out = advance(st, 0.03, domain, DynamicsSettings(rtol=rtol, atol=rtol * 1e-2))
        assert out.n == 6
        drifts.append(abs(energy(out.pos, out.signs, domain) - e0))
        if isinstance(domain, Disk):
            assert abs(angular_impulse(out) - m0) < 1e3 * rtol
    assert drifts[1] < 1e-6 and drifts[1] < drifts[0]


def test_energy_falls_monotonically_with_friction(rng):
    # [exact] with friction dE/ds = -(alpha/2) sum |grad E|^2 <= 0 (gradient descent part).
    disk = Disk()
    pos = disk.sample_uniform(rng, 8, margin=0.15)
    signs = np.array([1, -1] * 4)
    st = initial_state(pos, signs, disk)
    settings = DynamicsSettings(alpha=0.05, rtol=1e-9, atol=1e-11)
    energies = [energy(pos, signs, disk)]
    for out in evolve(st, np.linspace(0.002, 0.04, 20), disk, settings):
        assert out.n == 8
        energies.append(energy(out.pos, out.signs, disk))
    assert np.all(np.diff(energies) < 0)
    # and a single vortex spirals out towards its image (radius grows)
    one = advance(initial_state([[0.5, 0.0]], [1], disk), 0.5, disk, DynamicsSettings(alpha=0.05))
    assert np.hypot(*one.pos[0]) > 0.5


def test_close_pairs_annihilate_and_vortices_leave_through_the_wall():
    disk = Disk()
    settings = DynamicsSettings(alpha=0.1, annihilation_distance=0.02)
    # a damped dipole shrinks (friction) until it is closer than the annihilation distance
    out = advance(initial_state([[0.0, 0.03], [0.0, -0.03]], [1, -1], disk), 5.0, disk, settings)
    assert (out.n, out.annihilated, out.lost_to_wall) == (0, 1, 0)
    # a vortex spiralling out meets its image at the wall
    out = advance(initial_state([[0.8, 0.0]], [1], disk), 50.0, disk, settings)
    assert (out.n, out.annihilated, out.lost_to_wall) == (0, 0, 1)
    # like signs never annihilate
    out = advance(initial_state([[0.0, 0.015], [0.0, -0.015]], [1, 1], disk), 0.01, disk,
                  DynamicsSettings(annihilation_distance=0.02))
    assert out.n == 2


def test_noise_obeys_the_einstein_relation_and_is_seeded():
    # [exact] Fluctuation-dissipation: D = alpha / (2 beta~) per coordinate makes exp(-beta~ E)
    # stationary. At the centre of the disk grad E = 0, so over a short time s the
    # displacement has <|du|^2> = 4 D s (corrections O(alpha s) ~ 1e-4). 300 samples of a
    # chi-square with 2 degrees of freedom: the mean is within 5.8% (1 sigma); the bound 20% is
    # 3.5 sigma.
    disk = Disk()
    alpha, beta, s = 0.1, 0.5, 1e-3
    settings = DynamicsSettings(alpha=alpha, noise_beta=beta, max_step=1e-4)
    rng = np.random.default_rng(7)
    st = initial_state([[0.0, 0.0]], [1], disk)
    r2 = [np.sum(advance(st, s, disk, settings, rng).pos ** 2) for _ in range(300)]
    assert abs(np.mean(r2) / (4 * alpha / (2 * beta) * s) - 1) < 0.2
    a = advance(st, s, disk, settings, np.random.default_rng(3))
    b = advance(st, s, disk, settings, np.random.default_rng(3))
    np.testing.assert_array_equal(a.pos, b.pos)


def test_stopping_at_outputs_does_not_change_the_trajectory(rng):
    # Resuming from an output state (pos, signs, t, step) continues the same solution: one call
    # to s = 0.02 equals two calls 0 -> 0.01 -> 0.02 up to the tolerance.
    disk = Disk()
    pos = disk.sample_uniform(rng, 4, margin=0.2)
    signs = np.array([1, -1, 1, -1])
    st = initial_state(pos, signs, disk)
    settings = DynamicsSettings(rtol=1e-10, atol=1e-12)
    one = advance(st, 0.02, disk, settings)
    two = advance(advance(st, 0.01, disk, settings), 0.02, disk, settings)
    np.testing.assert_allclose(one.pos, two.pos, atol=1e-8)
    assert two.t == 0.02


def test_bad_input_is_refused_with_the_accepted_values():
    with pytest.raises(ConfigurationError, match="alpha"):
        DynamicsSettings(alpha=1.5)
    with pytest.raises(ConfigurationError, match="alpha > 0"):
        DynamicsSettings(noise_beta=1.0, max_step=1e-3)
    with pytest.raises(ConfigurationError, match="beta~ > 0"):
        DynamicsSettings(alpha=0.1, noise_beta=-1.0, max_step=1e-3)
    with pytest.raises(ConfigurationError, match="finite max_step"):
        DynamicsSettings(alpha=0.1, noise_beta=1.0)
    with pytest.raises(ConfigurationError, match="row 1"):
        initial_state([[0.0, 0.0], [1.2, 0.0]], [1, -1], Disk())
    with pytest.raises(ConfigurationError, match="needs a seeded"):
        advance(initial_state([[0.0, 0.0]], [1], Disk()), 0.1, Disk(),
                DynamicsSettings(alpha=0.1, noise_beta=1.0, max_step=1e-3))


def test_domain_without_gradients_is_refused():
    class Bare(Disk):
        def gradient_kernels(self):
            return super(Disk, self).gradient_kernels()

    with pytest.raises(DomainError, match="no energy gradients"):
        velocities([[0.0, 0.0]], [1], Bare())


def _grid_disk(n, stride, tmp_path):
    """The unit disk as a uniform grid domain, n nodes across (numerical Green's function)."""
    h = 2.0 / n
    x = np.arange(-1 - 2 * h, 1 + 2.5 * h, h)
    mask = x[None, :] ** 2 + x[:, None] ** 2 < 1.0
    return GridDomain(mask, np.ones(mask.shape), h, (x[0], x[0]), stride=stride,
                      cache_dir=tmp_path)


def test_grid_domain_velocities_converge_to_the_disks(tmp_path):
    """[pub] Kirchhoff-Routh velocities in the disk (Lin, PNAS 27, 570 (1941); Saffman (1992))
    against those of the numerical Green's function of the same disk (gradients: the pair
    logarithm exactly, the interpolated parts by central differences over one table cell).
    Measured max error over 5 vortices (largest speed 3.1): 0.23 on 40 nodes across, 0.14 on
    80 (table every 2nd node); first order, as the energies (the staircase wall)."""
    rng = np.random.default_rng(4)
    pos = Disk().sample_uniform(rng, 5, margin=0.15)
    signs = np.array([1, -1, 1, 1, -1])
    ref = velocities(pos, signs, Disk())
    errors = [np.abs(velocities(pos, signs, _grid_disk(n, 2, tmp_path)) - ref).max()
              for n in (40, 80)]
    assert errors[0] < 0.3 and errors[1] < 0.7 * errors[0]


def test_grid_domain_dynamics_nearly_conserves_the_energy(tmp_path):
    """[exact for the continuum] The energy is the Hamiltonian; the grid's gradients are not
    exactly those of its interpolated energy, so it drifts by the interpolation error
    (measured 2.5e-3 over s = 0.03 on 80 nodes, energies of order 5)."""
    rng = np.random.default_rng(4)
    pos = Disk().sample_uniform(rng, 5, margin=0.15)
    signs = np.array([1, -1, 1, 1, -1])
    dom = _grid_disk(80, 2, tmp_path)
    out = advance(initial_state(pos, signs, dom), 0.03, dom,
                  DynamicsSettings(rtol=1e-7, atol=1e-9))
    assert out.n == 5 and np.abs(out.pos - pos).max() > 0.02        # the vortices did move
    assert abs(energy(out.pos, out.signs, dom) - energy(pos, signs, dom)) < 1e-2
