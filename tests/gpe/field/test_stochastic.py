"""The stochastic projected GPE stage of the solver: equipartition, dt convergence, T = 0,
the projector, restarts and bad input."""

import numpy as np
import pytest

from gpe.analysis.vortices import find_vortices
from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.field.ground_state import imprint_vortices
from gpe.field.solver import Solver, SolverSettings
from gpe.field.stochastic import largest_cutoff, projector

BOX = Grid(32, 32, 16.0, 16.0)       # periodic box, dx = 0.5, k_max = 2 pi


def _ideal_gas(seed=1, dt=0.02, mu=-0.5, temperature=1.0, gamma=0.5, cutoff=2.5):
    settings = SolverSettings(dt=dt, gamma=gamma, mu=mu, g=0.0, temperature=temperature,
                              cutoff=cutoff, norm_per_atom=1.0, threads=1)
    return Solver(BOX, np.zeros(BOX.shape), None, settings, np.zeros(BOX.shape, complex),
                  rng=np.random.default_rng(seed))


def _atoms_per_mode(psi, mask):
    """|c_k|^2 of psi = sum_k c_k e^{ikx}/sqrt(A), i.e. |FFT|^2 dA/N (norm_per_atom = 1)."""
    return np.abs(np.fft.fft2(psi)[mask]) ** 2 * BOX.cell_area / psi.size


def test_ideal_gas_thermalises_to_classical_field_equipartition():
    """[exact] Blakie et al., Adv. Phys. 57, 363 (2008), c-field method: with g = 0 each
    projected plane wave is an Ornstein-Uhlenbeck process, dc = -(i + gamma)(eps - mu) c dt
    + dW with <|dW|^2> = 2 gamma k_B T dt, whose stationary occupation is k_B T/(eps - mu)
    exactly, for every mode below the cutoff."""
    mu, temperature, cutoff = -0.5, 1.0, 2.5
    solver = _ideal_gas(mu=mu, temperature=temperature, cutoff=cutoff)
    mask = projector(BOX, cutoff)
    eps = 0.5 * BOX.k2[mask]
    solver.advance(500)                       # 5 relaxation times of the slowest mode (k = 0)
    samples = []
    for _ in range(600):
        solver.advance(25)
        samples.append(_atoms_per_mode(solver.psi, mask) * (eps - mu) / temperature)
    ratio = np.array(samples)                 # (time, mode): 1 on average for every mode
    # The scheme's own stationary value is 1 - gamma mu dt + O(dt^2) = 1.005 here (the
    # noise of a step is damped by one kinetic half step before the output): allowed below.
    bias = -0.5 * mu * 0.02
    blocks = 20
    for lo, hi in ((0.0, 0.8), (0.8, 1.6), (1.6, cutoff + 1e-9)):   # low, middle, high modes
        shell = ratio[:, (eps >= lo) & (eps < hi)].mean(axis=1).reshape(blocks, -1).mean(axis=1)
        error = shell.std(ddof=1) / np.sqrt(blocks)
        assert abs(shell.mean() - 1.0) < 4 * error + bias, (lo, hi, shell.mean(), error)
    overall = ratio.mean(axis=1).reshape(blocks, -1).mean(axis=1)
    assert abs(overall.mean() - 1.0) < 4 * overall.std(ddof=1) / np.sqrt(blocks) + bias
    # nothing outside the projector [exact: the kinetic factor is zero there]
    assert np.max(np.abs(np.fft.fft2(solver.psi)[~mask])) < 1e-12 * np.max(np.abs(solver.psi))


class _SummedNormals:
    """Draws the sum of ``m`` consecutive standard-normal arrays / sqrt(m) from a seeded
    generator: the Brownian increment over m fine steps, so runs with dt and dt/m see the
    same noise path (the usual coupling of a strong-convergence test)."""

    def __init__(self, seed, m):
        self.rng, self.m = np.random.default_rng(seed), m

    def standard_normal(self, out):
        out[...] = 0.0
        for _ in range(self.m):
            out += self.rng.standard_normal(out.shape)
        out /= np.sqrt(self.m)


def _mean_number(dt, m, t_start=10.0, t_end=50.0):
    settings = SolverSettings(dt=dt, gamma=0.1, mu=1.0, g=1.0, temperature=0.5, cutoff=2.5,
                              norm_per_atom=1.0 / 64, threads=1)
    solver = Solver(BOX, np.zeros(BOX.shape), None, settings, np.ones(BOX.shape, complex),
                    rng=_SummedNormals(3, m))
    every = round(0.04 / dt)
    solver.advance(round(t_start / dt))
    norms = []
    for _ in range(round((t_end - t_start) / 0.04)):
        solver.advance(every)
        norms.append(np.vdot(solver.psi, solver.psi).real * BOX.cell_area)
    return np.mean(norms)


def test_mean_number_at_mu_and_temperature_converges_as_dt_shrinks():
    """Convergence test (no closed form for g > 0): the time-averaged atom number of a
    thermalised homogeneous gas at (mu, T) = (1, 0.5) mu, computed on one Brownian path with
    dt = 0.04, 0.02, 0.01, changes less and less as dt halves (first order in dt for the
    path-wise error of additive noise added once per step: Kloeden & Platen, Numerical
    Solution of SDEs (1992), from memory), and is independent of dt to ~1e-5 at dt = 0.01."""
    means = np.array([_mean_number(dt, m) for dt, m in ((0.04, 4), (0.02, 2), (0.01, 1))])
    changes = np.abs(np.diff(means))
    assert changes[1] < 0.8 * changes[0]
    # first order: the error left at the finest dt is about its last change
    assert changes[1] < 1e-5 * means[-1]
    assert np.ptp(means) < 3e-5 * means[-1]
    # the gas did thermalise away from the uniform start (norm 256): the thermal modes hold
    # ~ k_B T/(eps - mu) atoms each, a visible change of the number
    assert abs(means[-1] - 256.0) > 1e-4 * 256.0


def test_zero_temperature_is_the_deterministic_solver_bit_for_bit():
    """T = 0 switches the stage off entirely: no projector, no draws (a cutoff is unused)."""
    grid = Grid(32, 32, 12.0, 12.0)
    psi0 = np.exp(-(grid.X**2 + grid.Y**2) / 8.0) * np.exp(0.4j * grid.X)
    v = 0.5 * 0.1 * (grid.X**2 + grid.Y**2)
    plain = SolverSettings(dt=0.01, gamma=0.02, threads=1)
    cold = SolverSettings(dt=0.01, gamma=0.02, threads=1, temperature=0.0, cutoff=1.5)
    a = Solver(grid, v, None, plain, psi0)
    b = Solver(grid, v, None, cold, psi0, rng=np.random.default_rng(0))
    for solver in (a, b):
        solver.advance(40)
        solver.advance(13)
    np.testing.assert_array_equal(a.psi, b.psi)


def test_a_restart_from_the_generator_state_continues_bit_for_bit():
    """N + M steps equal N steps, a new solver from (psi, t, step, rng state), M steps."""
    whole = _ideal_gas(seed=7, mu=-0.3)
    whole.advance(30)
    whole.advance(20)
    part = _ideal_gas(seed=7, mu=-0.3)
    part.advance(30)
    state = part.rng.bit_generator.state
    restored = np.random.Generator(type(part.rng.bit_generator)())
    restored.bit_generator.state = state
    settings = part.settings
    resumed = Solver(BOX, np.zeros(BOX.shape), None, settings, part.psi.copy(), t0=part.t,
                     step0=part.step_count, rng=restored)
    resumed.advance(20)
    np.testing.assert_array_equal(whole.psi, resumed.psi)
    # and the noise is really there: another seed gives another field
    other = _ideal_gas(seed=8, mu=-0.3)
    other.advance(50)
    assert not np.allclose(other.psi, whole.psi)


def test_bad_input_of_the_stochastic_stage():
    with pytest.raises(VorthermError, match="gamma > 0"):
        SolverSettings(dt=0.01, gamma=0.0, temperature=1.0, cutoff=2.0)
    with pytest.raises(VorthermError, match="cutoff > 0"):
        SolverSettings(dt=0.01, gamma=0.1, temperature=1.0)
    with pytest.raises(VorthermError, match="temperature must be >= 0"):
        SolverSettings(dt=0.01, gamma=0.1, temperature=-1.0, cutoff=2.0)
    # [exact] the disk k^2/2 <= cutoff fits the FFT box |k| <= pi/dx: 2 pi^2 for dx = 0.5
    assert largest_cutoff(BOX) == pytest.approx(2 * np.pi**2)
    with pytest.raises(VorthermError, match="k_max"):
        _ideal_gas(cutoff=2 * np.pi**2 * 1.01)
    settings = SolverSettings(dt=0.01, gamma=0.1, temperature=1.0, cutoff=2.0)
    with pytest.raises(VorthermError, match="Generator"):
        Solver(BOX, np.zeros(BOX.shape), None, settings, np.zeros(BOX.shape, complex))


def _dipole_lifetime(temperature, seed, t_max=600.0):
    """Time until the detector finds no vortex left of a +- pair 6 xi apart (periodic box)."""
    grid = Grid(64, 64, 48.0, 48.0)
    psi0 = imprint_vortices(np.ones(grid.shape, complex), grid,
                            np.array([[0.0, -3.0], [0.0, 3.0]]), np.array([1, -1]))
    settings = SolverSettings(dt=0.05, gamma=0.02, temperature=temperature,
                              cutoff=2.5 if temperature > 0 else None, norm_per_atom=0.08,
                              threads=1)
    solver = Solver(grid, np.zeros(grid.shape), None, settings, psi0,
                    rng=np.random.default_rng(seed))
    while solver.t < t_max:
        solver.advance(60)
        if len(find_vortices(solver.psi, grid.x, grid.y, threshold=0.2, periodic=True)) == 0:
            return solver.t
    return np.inf


@pytest.mark.slow
def test_a_vortex_dipole_lives_shorter_in_a_warmer_cloud():
    """Qualitative trend [pub]: vortex-pair decay speeds up with temperature (Kwon, Moon, Choi,
    Seo & Shin, PRA 90, 063627 (2014): the pair-loss rate Gamma_2 grows with T). At a fixed
    gamma = 0.02 the damped GPE (T = 0) lets the pair shrink and annihilate after ~190
    hbar/mu; the thermal noise at k_B T = 1 and 2 mu (g~ = 0.08, a 87Rb-like quasi-2D gas)
    shortens it, more at the higher T (seed averages; single seeds scatter by ~15%)."""
    cold = _dipole_lifetime(0.0, 0)
    assert 100.0 < cold < 400.0
    warm = np.mean([_dipole_lifetime(1.0, seed) for seed in range(4)])
    hot = [_dipole_lifetime(2.0, seed) for seed in range(4)]
    assert np.isfinite(warm) and max(hot) < cold
    assert np.mean(hot) < warm < cold
    assert np.mean(hot) < 0.9 * cold
