"""Real-time split-step solver and observables against exact results and published properties."""

import tracemalloc

import numpy as np
import pytest

from gpe.errors import SimulationError, VorthermError
from gpe.field.beams import Beam, BeamSet
from gpe.field.grid import Grid
from gpe.field.solver import Solver, SolverSettings, observables


class CircularBeam:
    """Test double of gpe.field.traps.BeamSet: one beam on a circle, height ramped in."""

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


def test_attractive_beam_too_deep_for_the_time_step_is_refused():
    # a well of depth |V0| turns the phase by |V0| dt per step, like a barrier: 1e6 mu at dt = 0.05
    # is 5e4 rad (the atom number grew 1e4-fold when this passed the check)
    for beams in (BeamSet([Beam(waist=1.5, height=-1e6)]), CircularBeam(height=-1e6)):
        with pytest.raises(SimulationError, match="too large"):
            _solver(dt=0.05, beams=beams)
    assert _solver(dt=0.05, beams=BeamSet([Beam(waist=1.5, height=-2.0)])).step_count == 0


# -- observables ------------------------------------------------------------------------------------
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


_RUN_IN_FRESH_PROCESS = r"""
import sys
import numpy as np
from gpe.field.grid import Grid
from gpe.field.solver import Solver, SolverSettings
grid = Grid(96, 96, 48.0, 48.0)
r2 = grid.X ** 2 + grid.Y ** 2
v = np.where(r2 < 20.0 ** 2, 0.0, 5.0)
# a vortex dipole in a disk: chaotic enough that any difference in the last bit grows
psi = np.sqrt(np.clip(1.0 - v, 0.0, None)) * np.exp(
    1j * (np.arctan2(grid.Y, grid.X - 4.0) - np.arctan2(grid.Y, grid.X + 4.0))) + 0j
backend, threads, measure_first = sys.argv[3], int(sys.argv[4]), sys.argv[5] == "1"
if measure_first:   # a measured plan of the same shape first: its wisdom must not be reused
    Solver(grid, v, None, SolverSettings(dt=0.02, threads=threads, fft="pyfftw",
                                         fft_planning="measured"), psi)
settings = SolverSettings(dt=0.02, gamma=0.003, threads=threads, fft=backend,
                          fft_planning=sys.argv[2])
solver = Solver(grid, v, None, settings, psi)
for _ in range(300):
    solver.step()
np.save(sys.argv[1], solver.psi)
"""


@pytest.mark.parametrize("backend, runs", [
    # the default backend in reproducible mode (scipy.fft): the same bits whatever the
    # thread count, and whatever was planned before in the process
    ("auto", [(2, "0"), (1, "0"), (2, "1")]),
    # pyFFTW asked for explicitly: estimate-mode plans with the process's wisdom forgotten,
    # so a measured plan made before in the same process changes nothing
    ("pyfftw", [(2, "0"), (2, "0"), (2, "1")]),
])
def test_reproducible_planning_is_bitwise_equal_across_processes(tmp_path, backend, runs):
    """Fresh processes, each with its own empty FFTW plan cache, evolve the same field (a
    vortex dipole in a disk, 300 steps: any difference in a last bit grows) to the same bits
    in the reproducible planning mode."""
    import os
    import subprocess
    import sys

    pytest.importorskip("pyfftw")
    outs = []
    for k, (threads, measure_first) in enumerate(runs):
        env = dict(os.environ, XDG_CACHE_HOME=str(tmp_path / f"cache{k}"))
        out = tmp_path / f"psi{k}.npy"
        subprocess.run([sys.executable, "-c", _RUN_IN_FRESH_PROCESS, str(out), "reproducible",
                        backend, str(threads), measure_first], env=env, check=True, timeout=300)
        outs.append(np.load(out))
    assert np.isfinite(outs[0]).all() and np.abs(outs[0]).max() > 0.5
    for other in outs[1:]:
        assert np.array_equal(outs[0], other)
    assert not list((tmp_path / "cache0").rglob("fftw-wisdom*"))  # no wisdom read or written


def test_unknown_fft_planning_is_refused_by_name():
    with pytest.raises(VorthermError, match='"reproducible", "measured"'):
        SolverSettings(dt=0.01, fft_planning="fastest")
