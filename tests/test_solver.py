"""Split-step solver against exact results, published properties and an independent eigensolver."""

import tracemalloc

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse.linalg import eigsh

from gpe.errors import SimulationError, VorthermError
from gpe.grid import Grid
from gpe.solver import (Solver, SolverSettings, find_ground_state, imprint_vortices,
                        observables)


class CircularBeam:
    """Test double of gpe.potentials.BeamSet: one beam on a circle, height ramped in."""

    n_beams = 1

    def __init__(self, height=2.0, waist=1.5, radius=2.0, omega=0.5, ramp=0.5):
        self.height, self.radius, self.omega, self.ramp = height, radius, omega, ramp
        self.waists = np.array([waist])

    def evaluate(self, t, amp, cx, cy):
        amp[0] = self.height * min(1.0, t / self.ramp) if self.ramp else self.height
        cx[0] = self.radius * np.cos(self.omega * t)
        cy[0] = self.radius * np.sin(self.omega * t)

    def max_height(self):
        return self.height


GRID = Grid(64, 64, 16.0, 16.0)
HARMONIC = 0.5 * (GRID.X**2 + GRID.Y**2)  # oscillator units, omega = 1


def _smooth_state(grid=GRID):
    """A smooth, moving, non-stationary field (Gaussian with a phase gradient)."""
    r2 = (grid.X - 0.5) ** 2 + grid.Y**2
    return np.exp(-r2 / 8.0) * np.exp(0.3j * grid.X)


def _solver(dt=0.05, gamma=0.0, beams=None, psi0=None, **kw):
    settings = SolverSettings(dt=dt, gamma=gamma, mu=1.0, g=1.0, **kw)
    potential = 0.05 * (GRID.X**2 + GRID.Y**2)
    return Solver(GRID, potential, beams, settings, _smooth_state() if psi0 is None else psi0)


# -- named stages on exact solutions --------------------------------------------------------------
@pytest.mark.parametrize("gamma", [0.0, 0.02])
def test_kinetic_half_on_a_single_fourier_mode(gamma):
    # [exact] exp(i k.r) is an eigenfunction of -lap/2 with eigenvalue k^2/2, so half a damped
    # kinetic step multiplies it by exp[-(i + gamma) k^2 dt / 4].
    solver = _solver(dt=0.1, gamma=gamma)
    kx, ky = 2 * np.pi * 3 / GRID.length_x, -2 * np.pi / GRID.length_y
    mode = np.exp(1j * (kx * GRID.X + ky * GRID.Y))
    work = solver._fft.empty()
    work[...] = mode
    solver.kinetic_half(work)
    expected = mode * np.exp(-(1j + gamma) * (kx**2 + ky**2) * 0.1 / 4)
    np.testing.assert_allclose(work, expected, atol=1e-13)


def test_potential_stage_on_a_uniform_field():
    # [exact] a uniform field with V = 0, no beams: psi -> psi exp[-i (g n - mu) dt].
    settings = SolverSettings(dt=0.1, mu=1.0, g=2.0)
    solver = Solver(GRID, np.zeros(GRID.shape), None, settings, np.full(GRID.shape, 0.5 + 0j))
    solver.potential_nonlinear(0.05)
    np.testing.assert_allclose(solver.psi, 0.5 * np.exp(-1j * (2.0 * 0.25 - 1.0) * 0.1))


# -- ground states --------------------------------------------------------------------------------
def _fd_harmonic_spectrum(n=121, half_width=7.0, k=4):
    """Lowest eigenvalues of -lap/2 + r^2/2, second-order finite differences, scipy eigsh."""
    x = np.linspace(-half_width, half_width, n)
    h = x[1] - x[0]
    lap1 = sp.diags([np.ones(n - 1), -2 * np.ones(n), np.ones(n - 1)], [-1, 0, 1]) / h**2
    eye = sp.identity(n)
    hamiltonian = -0.5 * (sp.kron(eye, lap1) + sp.kron(lap1, eye)) + sp.diags(
        0.5 * (x[None, :] ** 2 + x[:, None] ** 2).ravel())
    return np.sort(eigsh(hamiltonian.tocsc(), k=k, sigma=0.0, which="LM")[0])


def test_harmonic_oscillator_ground_and_vortex_state():
    # [exact, any QM textbook] 2D isotropic oscillator, g = 0: E = n_x + n_y + 1, so the ground
    # state has E = mu = 1 per particle; the first excited level (E = 2) contains the l = 1
    # state (x + i y) exp(-r^2/2), reached here by relaxing with a pinned phase winding.
    ground = find_ground_state(GRID, HARMONIC, g=0.0, norm=1.0, dt=0.01, tol=1e-12,
                               check_every=100)
    assert ground.converged
    assert ground.energy == pytest.approx(1.0, abs=1e-6)  # Strang bias O(dt^2) ~ 1e-5 dt^2
    assert ground.mu == pytest.approx(1.0, abs=1e-6)
    vortex = find_ground_state(GRID, HARMONIC, g=0.0, norm=1.0, dt=0.01, tol=1e-12,
                               check_every=100, vortices=(np.zeros((1, 2)), np.array([1])))
    assert vortex.energy == pytest.approx(2.0, abs=1e-6)
    obs = observables(vortex.psi, GRID, HARMONIC, None, 0.0)
    assert obs["lz"] == pytest.approx(1.0, abs=1e-6)  # [exact] l = 1 per particle
    # Independent check: scipy eigsh on a finite-difference Hamiltonian (O(h^2) discretisation
    # error, h = 0.117 -> ~1e-3), lowest level and the doubly degenerate first excited level.
    levels = _fd_harmonic_spectrum()
    assert levels[0] == pytest.approx(ground.energy, abs=3e-3)
    np.testing.assert_allclose(levels[1:3], vortex.energy, atol=3e-3)


def test_thomas_fermi_limit_of_a_strongly_interacting_harmonic_condensate():
    # [pub: Pethick & Smith, ch. 6] oscillator units, g N = 2000: mu_TF = sqrt(g N / pi),
    # E/N = (2/3) mu_TF; the GP ground state approaches this within ~1% at g N >= 1000.
    grid = Grid(128, 128, 20.0, 20.0)
    potential = 0.5 * (grid.X**2 + grid.Y**2)
    state = find_ground_state(grid, potential, g=2000.0, norm=1.0, dt=0.004, tol=1e-9,
                              check_every=100)
    mu_tf = np.sqrt(2000.0 / np.pi)
    assert state.converged
    assert state.mu == pytest.approx(mu_tf, rel=0.01)
    assert state.energy == pytest.approx(2.0 / 3.0 * mu_tf, rel=0.01)


def _virial_residual(dt):
    state = find_ground_state(GRID, HARMONIC, g=100.0, norm=1.0, dt=dt, tol=1e-12,
                              check_every=100)
    obs = observables(state.psi, GRID, HARMONIC, None, 100.0)
    return (obs["e_kin"] - obs["e_trap"] + obs["e_int"]) / obs["energy"]


def test_virial_identity_after_extrapolation_to_zero_dt():
    # [exact, scaling argument] 2D harmonic trap: E_kin - E_trap + E_int = 0. A Strang
    # imaginary-time fixed point carries an O(dt) bias [practice], so extrapolate linearly.
    r1, r2 = _virial_residual(0.02), _virial_residual(0.01)
    assert abs(r2) < 1e-3
    assert r1 / r2 == pytest.approx(2.0, rel=0.1)  # the bias is first order in dt
    assert abs(2 * r2 - r1) < 0.02 * abs(r2)


def test_energy_decreases_monotonically_in_imaginary_time(rng):
    # [pub: Bao & Du, SIAM J. Sci. Comput. 25, 1674 (2004)] normalised gradient flow diminishes
    # the energy; checked after every step from a noisy start.
    state = find_ground_state(GRID, HARMONIC, g=50.0, norm=1.0, dt=0.01, tol=1e-14,
                              check_every=1, max_steps=300, noise=0.3, rng=rng)
    energies = state.history[:, 2]
    assert energies[0] - energies[-1] > 0.1
    assert np.all(np.diff(energies) <= 1e-12 * abs(energies[-1]))


def test_fixed_mu_relaxation_reaches_that_chemical_potential():
    # [exact] a stationary state of the imaginary-time flow at fixed mu has chemical potential mu.
    state = find_ground_state(GRID, HARMONIC, g=50.0, mu=5.0, dt=0.005, tol=1e-11,
                              check_every=100)
    assert state.converged
    assert state.mu == pytest.approx(5.0, rel=1e-3)  # Strang O(dt) bias in mu [practice]


def test_ground_state_input_errors():
    with pytest.raises(VorthermError, match="exactly one"):
        find_ground_state(GRID, HARMONIC, norm=1.0, mu=1.0)
    with pytest.raises(VorthermError, match="rng"):
        find_ground_state(GRID, HARMONIC, norm=1.0, noise=0.1)


# -- real-time evolution ---------------------------------------------------------------------------
def _final_field(dt, gamma, t_end=1.0):
    solver = _solver(dt=dt, gamma=gamma, beams=CircularBeam())
    solver.advance(round(t_end / dt))
    return solver.psi.copy()


@pytest.mark.parametrize("gamma", [0.0, 0.03])
def test_strang_splitting_is_second_order_with_a_moving_beam(gamma):
    # [pub: Bao, Jaksch & Markowich, J. Comput. Phys. 187, 318 (2003)] error ratio ~4 per
    # halving of dt; for gamma > 0 this relies on the exact damped nonlinear sub-step.
    reference = _final_field(1 / 320, gamma)
    errors = [np.linalg.norm(_final_field(dt, gamma) - reference) for dt in (0.1, 0.05, 0.025)]
    ratios = np.array(errors[:-1]) / np.array(errors[1:])
    np.testing.assert_allclose(ratios, 4.0, rtol=0.12)


def test_norm_is_conserved_without_damping_and_decays_with_it():
    # [pub: Bao, Jaksch & Markowich 2003] unitary sub-steps: norm conserved to round-off.
    solver = _solver(dt=0.05, beams=CircularBeam())
    before = observables(solver.psi, GRID, np.zeros(GRID.shape))["norm"]
    solver.advance(200)
    after = observables(solver.psi, GRID, np.zeros(GRID.shape))["norm"]
    assert after == pytest.approx(before, rel=1e-12)
    damped = _solver(dt=0.05, gamma=0.02, beams=CircularBeam())
    damped.advance(50)
    # The field's energy here is below mu, so damping at fixed mu removes atoms (CMB 1998).
    assert observables(damped.psi, GRID, np.zeros(GRID.shape))["norm"] < before


def test_time_reversibility():
    # [pub: Bao, Jaksch & Markowich 2003] symmetric Strang: evolving back with -dt (same beam
    # midpoint times) returns the initial field to round-off.
    forward = _solver(dt=0.05, beams=CircularBeam())
    start = forward.psi.copy()
    forward.advance(40)
    backward = Solver(GRID, 0.05 * (GRID.X**2 + GRID.Y**2), CircularBeam(),
                      SolverSettings(dt=-0.05), forward.psi, t0=forward.t)
    backward.advance(40)
    assert backward.t == pytest.approx(0.0, abs=1e-12)
    np.testing.assert_allclose(backward.psi, start, atol=1e-11)


def test_fft_backends_and_precisions_give_the_same_evolution():
    runs = {}
    for fft in ("pyfftw", "scipy"):
        for precision in ("complex128", "complex64"):
            solver = _solver(dt=0.05, gamma=0.01, beams=CircularBeam(), fft=fft,
                             precision=precision)
            solver.advance(20)
            assert solver.psi.dtype == np.dtype(precision)
            runs[fft, precision] = solver.psi.astype(np.complex128)
    ref = runs["pyfftw", "complex128"]
    np.testing.assert_allclose(runs["scipy", "complex128"], ref, atol=1e-12)
    np.testing.assert_allclose(runs["scipy", "complex64"], ref, atol=2e-5)
    np.testing.assert_allclose(runs["pyfftw", "complex64"], ref, atol=2e-5)


def test_fused_steps_match_single_steps_and_restarts_are_bitwise():
    fused = _solver(dt=0.05, gamma=0.01, beams=CircularBeam())
    single = _solver(dt=0.05, gamma=0.01, beams=CircularBeam())
    fused.advance(10)
    for _ in range(10):
        single.step()
    np.testing.assert_allclose(fused.psi, single.psi, atol=1e-13)
    fused.advance(10)
    restarted = Solver(GRID, 0.05 * (GRID.X**2 + GRID.Y**2), CircularBeam(),
                       fused.settings, single.psi, t0=single.t, step0=single.step_count)
    other = _solver(dt=0.05, gamma=0.01, beams=CircularBeam())
    other.advance(10)
    restarted_from_fused = Solver(GRID, 0.05 * (GRID.X**2 + GRID.Y**2), CircularBeam(),
                                  fused.settings, other.psi, t0=other.t, step0=other.step_count)
    restarted_from_fused.advance(10)
    np.testing.assert_array_equal(restarted_from_fused.psi, fused.psi)
    assert restarted_from_fused.t == fused.t and restarted.step_count == 10


def test_evolve_yields_at_output_times():
    solver = _solver(dt=0.05)
    times = [round(s.t, 12) for s in solver.evolve(1.0, 0.25)]
    assert times == [0.25, 0.5, 0.75, 1.0] and solver.step_count == 20
    with pytest.raises(VorthermError, match="whole number"):
        next(solver.evolve(2.0, 0.12))


def test_no_allocation_per_step():
    solver = _solver(dt=0.05, gamma=0.01, beams=CircularBeam())
    solver.advance(5)
    for _ in range(5):
        solver.step()
    tracemalloc.start()
    solver.advance(10)
    base, _ = tracemalloc.get_traced_memory()
    solver.advance(300)
    for _ in range(100):
        solver.step()
    grown, _ = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert grown - base < 4096  # one field alone is 64 kB


def test_non_finite_field_raises_with_time_and_cause():
    solver = _solver(dt=0.05)
    solver.advance(3)
    solver.psi[10, 10] = np.nan
    with pytest.raises(SimulationError, match=r"t = 0\.15.*dt = 0\.05.*too large"):
        solver.advance(5)


def test_too_large_time_step_is_refused():
    with pytest.raises(SimulationError, match="too large"):
        _solver(dt=2.0, beams=CircularBeam(height=5.0))
    with pytest.raises(VorthermError, match="backwards"):
        SolverSettings(dt=-0.1, gamma=0.1)


# -- observables and vortex imprint ----------------------------------------------------------------
def test_observables_of_analytic_oscillator_states():
    # [exact] normalised 2D oscillator ground state: E_kin = E_trap = 1/2;
    # (x + i y) exp(-r^2/2): E_kin = E_trap = 1, L_z = 1 per particle.
    ground = np.exp(-(GRID.X**2 + GRID.Y**2) / 2) / np.sqrt(np.pi)
    obs = observables(ground, GRID, HARMONIC, None, 0.0)
    for key, value in (("norm", 1.0), ("e_kin", 0.5), ("e_trap", 0.5), ("mu", 1.0)):
        assert obs[key] == pytest.approx(value, rel=1e-10)
    assert abs(obs["lz"]) < 1e-12
    vortex = (GRID.X + 1j * GRID.Y) * ground
    obs = observables(vortex, GRID, HARMONIC, 0.5 * HARMONIC, 3.0)
    assert obs["lz"] == pytest.approx(1.0, rel=1e-10)
    assert obs["e_kin"] == pytest.approx(1.0, rel=1e-10)
    assert obs["e_beam"] == pytest.approx(0.5, rel=1e-10)
    assert obs["e_int"] == pytest.approx(1.5 * np.sum(np.abs(vortex) ** 4) * GRID.cell_area)


def test_imprinted_vortices_wind_by_their_sign():
    # [exact] the phase winds by 2 pi s around a vortex of sign s.
    psi = imprint_vortices(np.ones(GRID.shape), GRID, [[-3.0, 0.1], [3.0, 0.1]], [1, -1])
    phase = np.angle(psi)

    def winding(i0, i1, j0, j1):
        loop = np.concatenate([phase[j0, i0:i1], phase[j0:j1, i1], phase[j1, i1:i0:-1],
                               phase[j1:j0:-1, i0]])
        return np.sum(np.angle(np.exp(1j * np.diff(np.append(loop, loop[0]))))) / (2 * np.pi)

    assert winding(14, 30, 22, 42) == pytest.approx(1.0)  # around (-3, 0.1)
    assert winding(34, 50, 22, 42) == pytest.approx(-1.0)  # around (3, 0.1)
    assert abs(psi[32, 20]) < 0.2  # the core is depleted
