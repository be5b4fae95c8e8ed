r"""Split-step Fourier solver of the damped 2D Gross-Pitaevskii equation.

.. math:: i\psi_t = (1 - i\gamma)\left(-\tfrac12\nabla^2 + V(\mathbf r, t) + g|\psi|^2 - \mu\right)\psi

(Choi, Morgan & Burnett, PRA 57, 4057 (1998)).  One Strang step is
"kinetic half -> potential+nonlinear -> kinetic half" (:meth:`Solver.kinetic_half`,
:meth:`Solver.potential_nonlinear`); the kinetic factor
:math:`\exp[-(i+\gamma)k^2\,dt/4]` is precomputed, the potential+nonlinear sub-step is solved
exactly (see :func:`gpe.field.kernels.nonlinear_damped`; with damping, its factors of the static
potential are computed once per solver and the beams only where they reach,
:func:`gpe.field.kernels.nonlinear_damped_boxed`) with the beam potential frozen at the midpoint
time of the step, which keeps the time-dependent splitting second order.  Inside
:meth:`Solver.advance` consecutive kinetic halves are fused into one full kinetic step, so a step
costs one FFT pair; every call of ``advance`` closes the fused sequence, so calling it at the same
step numbers (outputs and checkpoints) gives bitwise identical fields.

With ``SolverSettings.temperature > 0`` the same step is the stochastic projected GPE
(:mod:`gpe.field.stochastic`): the projector onto k^2/2 <= cutoff is folded into the kinetic
factors and each step's thermal noise is added in k space after its nonlinear sub-step, so a
step still costs one FFT pair; at temperature 0 the arithmetic is the deterministic one, bit
for bit.

Ground states (imaginary time) and the vortex imprint are in :mod:`gpe.field.ground_state`; their
names are still importable from here.

Units: simulation units -- lengths xi, times hbar/mu, energies mu, |psi|^2 in n0 (or oscillator
units when the caller uses them; nothing here assumes which).
"""

from __future__ import annotations

import math
import operator
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from gpe.errors import SimulationError, VorthermError
from gpe.field import kernels
from gpe.field.fft import auto_threads, make_fft, planning_options
from gpe.field.grid import Grid
from gpe.field.stochastic import ThermalNoise, projector

_PRECISIONS = {"complex128": np.complex128, "complex64": np.complex64}


@dataclass(frozen=True)
class SolverSettings:
    """Numerical settings of a real-time run.

    Parameters
    ----------
    dt : float
        Time step; negative only without damping (time reversal).
    gamma : float
        Dimensionless damping, >= 0 (typical 1e-4 .. 3e-2, common practice).
    mu : float
        Chemical potential subtracted in the evolution (1 in healing units).
    g : float
        Interaction strength (1 in healing units).
    precision : {"complex128", "complex64"}
    threads : int or None
        Threads of the FFTs and compiled kernels; None = all available cores for grids of at
        least 2 x 65536 points, one thread for smaller grids (:func:`gpe.field.fft.auto_threads`).
    fft : {"auto", "pyfftw", "scipy"}
    fft_planning : {"reproducible", "measured"}
        How pyFFTW plans are chosen (:data:`gpe.field.fft.PLANNING`): "reproducible" gives
        bit-identical transforms in every process with the same thread count; "measured" may be
        faster but differs between processes and machines.
    temperature : float
        k_B T of the thermal cloud; > 0 turns on the stochastic projected GPE
        (:mod:`gpe.field.stochastic`: needs gamma > 0, a cutoff and the solver's ``rng``);
        0 is the deterministic solver, bit for bit.
    cutoff : float or None
        Projector energy: the Fourier modes with k^2/2 <= cutoff are kept (used only when
        temperature > 0; typically 2-3 mu, common practice).
    norm_per_atom : float
        The norm of one atom, g~ = 1/(n0 xi^2) (:attr:`gpe.setup.units.HealingUnits.coupling`);
        sets the noise so that modes hold k_B T/(eps - mu) atoms.

    Units: dt in hbar/mu; mu, temperature, cutoff in mu; g in mu / n0; norm_per_atom in xi^2 n0.
    """

    dt: float
    gamma: float = 0.0
    mu: float = 1.0
    g: float = 1.0
    precision: str = "complex128"
    threads: int | None = None
    fft: str = "auto"
    fft_planning: str = "measured"
    temperature: float = 0.0
    cutoff: float | None = None
    norm_per_atom: float = 1.0

    def __post_init__(self) -> None:
        if not math.isfinite(self.dt) or self.dt == 0:
            raise VorthermError(f"SolverSettings.dt must be a finite non-zero time, got {self.dt!r}")
        if not math.isfinite(self.gamma) or self.gamma < 0:
            raise VorthermError(f"SolverSettings.gamma must be >= 0, got {self.gamma!r}")
        if self.dt < 0 and self.gamma > 0:
            raise VorthermError("SolverSettings.dt < 0 (backward in time) needs gamma = 0: "
                                "damped evolution cannot be run backwards")
        planning_options(self.fft_planning)   # refuses an unknown mode by name
        for name in ("mu", "g"):
            if not math.isfinite(getattr(self, name)):
                raise VorthermError(f"SolverSettings.{name} must be finite")
        if self.precision not in _PRECISIONS:
            raise VorthermError(f"SolverSettings.precision must be one of {sorted(_PRECISIONS)}, "
                                f"got {self.precision!r}")
        if self.threads is not None and int(self.threads) < 1:
            raise VorthermError(f"SolverSettings.threads must be >= 1 or None, got {self.threads!r}")
        if self.fft not in ("auto", "pyfftw", "scipy"):
            raise VorthermError(f'SolverSettings.fft must be "auto", "pyfftw" or "scipy", '
                                f"got {self.fft!r}")
        if not math.isfinite(self.temperature) or self.temperature < 0:
            raise VorthermError(f"SolverSettings.temperature must be >= 0 (k_B T in mu), got "
                                f"{self.temperature!r}")
        if self.stochastic:
            if self.gamma == 0:
                raise VorthermError("SolverSettings.temperature > 0 needs gamma > 0: the thermal "
                                    "noise strength is 2 gamma k_B T, so with gamma = 0 there is "
                                    "no coupling to the thermal cloud")
            if self.cutoff is None or not (math.isfinite(self.cutoff) and self.cutoff > 0):
                raise VorthermError(f"SolverSettings.temperature > 0 needs a cutoff > 0 (energy of "
                                    f"the projector in mu, typically 2-3), got {self.cutoff!r}")
            if not (math.isfinite(self.norm_per_atom) and self.norm_per_atom > 0):
                raise VorthermError(f"SolverSettings.norm_per_atom must be > 0, got "
                                    f"{self.norm_per_atom!r}")

    @property
    def stochastic(self) -> bool:
        """True for the stochastic projected GPE (temperature > 0)."""
        return self.temperature > 0

    @property
    def dtype(self) -> np.dtype:
        """Complex dtype of the wavefunction."""
        return np.dtype(_PRECISIONS[self.precision])


class BeamRows:
    """Moving Gaussian beams as separable 1D rows, refreshed per step without allocation.

    ``beams`` is anything with ``n_beams``, ``waists`` and ``evaluate(t, amp, cx, cy)`` (see
    gpe.field.beams.BeamSet), or None.  Units: amp in mu; centres, waists in xi; t in hbar/mu.
    """

    def __init__(self, beams, grid: Grid) -> None:
        n_beams = 0 if beams is None else int(beams.n_beams)
        self.beams = beams if n_beams else None
        self.amp, self.cx, self.cy, self.gx, self.gy = kernels.empty_beam_rows(
            n_beams, grid.nx, grid.ny)
        self.waists = (np.ascontiguousarray(beams.waists, dtype=np.float64) if n_beams
                       else np.zeros(0))
        # Per row, the columns some beam reaches (kernels.beam_box); empty without beams.
        self.row_lo = np.zeros(grid.ny, dtype=np.int64)
        self.row_hi = np.zeros(grid.ny, dtype=np.int64)
        self._x = np.ascontiguousarray(grid.x, dtype=np.float64).copy()
        self._y = np.ascontiguousarray(grid.y, dtype=np.float64).copy()

    def update(self, t: float) -> None:
        """Evaluate heights and centres at time ``t`` and refill the rows."""
        if self.beams is None:
            return
        self.beams.evaluate(t, self.amp, self.cx, self.cy)
        kernels.beam_profiles(self._x, self.cx, self.waists, self.gx)
        kernels.beam_profiles(self._y, self.cy, self.waists, self.gy)
        kernels.beam_box(self.amp, self.gx, self.gy, self.row_lo, self.row_hi)

    def potential(self) -> np.ndarray:
        """The beam potential of the last update as a (ny, nx) array (allocates; diagnostics)."""
        return np.einsum("b,bj,bi->ji", self.amp, self.gy, self.gx)


class Solver:
    """Real-time split-step evolution of one wavefunction.

    Parameters
    ----------
    grid : Grid
    static_potential : (ny, nx) array
        Trap potential, time independent.
    beams : BeamSet-like or None
        Time-dependent Gaussian beams (duck-typed, see :class:`BeamRows`); an optional
        ``max_height()`` gives the largest |height| for the time-step check.
    settings : SolverSettings
    psi0 : (ny, nx) array
        Initial wavefunction (copied).
    t0, step0 : float, int
        Time and step counter of ``psi0``.  The time of step k is computed as
        ``(t0 - step0*dt) + k*dt``, so a run restarted from a checkpoint of a run that began at
        t = 0 reproduces its beam times, and hence its fields, bit for bit.
    rng : numpy.random.Generator, optional
        Source of the thermal noise; required when ``settings.temperature > 0``.  It is used in
        place (``solver.rng``): store its ``bit_generator.state`` with a checkpoint and a restart
        from that state draws the same noise.

    Attributes
    ----------
    psi : (ny, nx) array, the live field (copy it before keeping it).
    t : float, step_count : int

    Units: as in the module docstring.
    """

    def __init__(self, grid: Grid, static_potential: np.ndarray, beams, settings: SolverSettings,
                 psi0: np.ndarray, t0: float = 0.0, step0: int = 0,
                 rng: np.random.Generator | None = None) -> None:
        self.grid = grid
        self.settings = settings
        v_static = np.array(static_potential, dtype=np.float64, order="C")
        for name, array in (("static_potential", v_static), ("psi0", np.asarray(psi0))):
            if array.shape != grid.shape:
                raise VorthermError(f"Solver: {name} has shape {array.shape}, the grid needs "
                                    f"(ny, nx) = {grid.shape}")
            if not np.all(np.isfinite(array)):
                raise SimulationError(f"Solver: {name} contains NaN or inf values")
        self._v_static = v_static
        self._beams = BeamRows(beams, grid)
        self._threads = (auto_threads(grid.shape) if settings.threads is None
                         else int(settings.threads))
        self._fft = make_fft(grid.shape, settings.dtype, settings.fft, self._threads,
                             **planning_options(settings.fft_planning))
        self.psi = self._fft.empty()
        self.psi[...] = psi0
        self.step_count = operator.index(step0)
        self._t_origin = float(t0) - self.step_count * settings.dt

        # Fourier-space kinetic factors with the 1/N of the inverse FFT folded in.
        exponent = -(1j + settings.gamma) * grid.k2 * (settings.dt / 4.0)
        inv_n = 1.0 / (grid.nx * grid.ny)
        self._k_half = (np.exp(exponent) * inv_n).astype(settings.dtype)
        self._k_full = (np.exp(2.0 * exponent) * inv_n).astype(settings.dtype)
        # The stochastic projected GPE (gpe.field.stochastic): the projector lives in the
        # kinetic factors (zero outside the disk), the noise is added in k space.  At T = 0 none
        # of this exists and the arithmetic is that of the deterministic solver.
        self.rng = rng
        self._noise = None
        if settings.stochastic:
            mask = projector(grid, settings.cutoff)
            self._k_half *= mask
            self._k_full *= mask
            self._noise = ThermalNoise(grid, mask, settings.gamma, settings.temperature,
                                       settings.norm_per_atom, settings.dt, rng)
        # The damped sub-step's factors of the static potential, computed once: per step only
        # the beam box (a few per cent of the grid for one beam) needs exponentials.
        self._damped_factors = None
        if settings.gamma > 0:
            self._damped_factors = np.empty((3,) + grid.shape)
            kernels.damped_static_factors(v_static, settings.g, settings.mu, settings.gamma,
                                          settings.dt, self._damped_factors)
        self._check_time_step()

    # -- bookkeeping -----------------------------------------------------------------------------
    @property
    def t(self) -> float:
        """Current time. Units: hbar/mu."""
        return self._t_origin + self.step_count * self.settings.dt

    def _time_of(self, step: float) -> float:
        return self._t_origin + step * self.settings.dt

    def _max_beam_height(self) -> float:
        """Largest |height| of any beam (attractive wells turn the phase as fast as barriers)."""
        beams = self._beams.beams
        if beams is None:
            return 0.0
        if hasattr(beams, "max_height"):
            return abs(float(beams.max_height()))
        self._beams.update(self.t)
        return float(np.max(np.abs(self._beams.amp), initial=0.0))

    def _check_time_step(self) -> None:
        """Refuse a step over which the local phase turns by more than pi where atoms are."""
        s = self.settings
        density = np.abs(self.psi) ** 2
        occupied = density > 1e-6 * density.max() if density.max() > 0 else np.ones_like(density, bool)
        local = np.abs(self._v_static - s.mu + s.g * density)[occupied].max()
        phase = abs(s.dt) * (local + self._max_beam_height())
        if phase > math.pi:
            raise SimulationError(
                f"time step dt = {s.dt} hbar/mu is too large: the phase turns by {phase:.3g} rad "
                f"per step where the condensate is (potential + interaction up to "
                f"{local + self._max_beam_height():.3g} mu); use dt < {math.pi / phase * abs(s.dt):.3g}")

    def step(self) -> None:
        """Advance by one time step dt."""
        self.advance(1)

    def advance(self, n_steps: int) -> None:
        """Advance by ``n_steps`` steps (one FFT pair per step plus one for the sequence).

        Raises
        ------
        SimulationError
            If the field becomes non-finite; names the time and the likely cause.
        """
        n = operator.index(n_steps)
        if n < 0:
            raise VorthermError(f"advance: n_steps must be >= 0, got {n}")
        if n == 0:
            return
        with kernels.kernel_threads(self._threads):
            done = self._advance(n)
        self.step_count += done
        if done < n:
            s = self.settings
            raise SimulationError(
                f"the wavefunction became NaN/inf at t = {self.t:.6g} hbar/mu (step "
                f"{self.step_count}); the time step dt = {s.dt} is probably too large for the "
                f"potential height (beams up to {self._max_beam_height():.3g} mu, gamma = "
                f"{s.gamma}); reduce dt or the beam height")

    def evolve(self, t_end: float, output_interval: float) -> Iterator["Solver"]:
        """Generator: advance to ``t_end``, yielding ``self`` at every output time.

        Output times are the multiples of ``output_interval`` counted from the time origin
        (t0 - step0*dt), and ``t_end`` itself.  Both must be whole numbers of steps.  The yielded
        solver's ``psi`` is live: copy what you keep.
        """
        dt = self.settings.dt
        every = _whole_steps(output_interval, dt, "output_interval")
        end = _whole_steps(t_end - self._t_origin, dt, "t_end - t0")
        if every <= 0:
            raise VorthermError("evolve: output_interval must have the sign of dt and be >= dt")
        while self.step_count < end:
            target = min((self.step_count // every + 1) * every, end)
            self.advance(target - self.step_count)
            yield self

    # -- named stages ----------------------------------------------------------------------------
    def kinetic_half(self, psi: np.ndarray | None = None) -> np.ndarray:
        """Kinetic half step exp[-(i+gamma) k^2 dt/4] on a real-space field, in place (times
        the projector when temperature > 0; the thermal noise is not part of this stage)."""
        psi = self.psi if psi is None else psi
        self._fft.forward(psi)
        kernels.multiply(psi, self._k_half)
        self._fft.inverse(psi, normalise=False)
        return psi

    def potential_nonlinear(self, t_mid: float, psi: np.ndarray | None = None,
                            tau: float | None = None) -> float:
        """Exact potential+nonlinear sub-step over ``tau`` (default dt), beams at ``t_mid``.

        Returns sum |psi|^2 of the input field (non-finite if the field is).
        """
        self._beams.update(t_mid)
        return self._nonlinear(self.psi if psi is None else psi,
                               self.settings.dt if tau is None else tau)

    def _nonlinear(self, psi: np.ndarray, tau: float) -> float:
        s, rows = self.settings, self._beams
        if s.gamma == 0.0:
            return kernels.nonlinear_conservative(psi, self._v_static, rows.amp, rows.gx, rows.gy,
                                                  s.g, s.mu, tau)
        if tau == s.dt:
            return kernels.nonlinear_damped_boxed(psi, self._damped_factors, self._v_static,
                                                  rows.amp, rows.gx, rows.gy, rows.row_lo,
                                                  rows.row_hi, s.g, s.mu, s.gamma, tau)
        return kernels.nonlinear_damped(psi, self._v_static, rows.amp, rows.gx, rows.gy,
                                        s.g, s.mu, s.gamma, tau)

    def _advance(self, n: int) -> int:
        """Arithmetic of n fused Strang steps; returns the steps done before a non-finite field."""
        psi, fft, dt, k0 = self.psi, self._fft, self.settings.dt, self.step_count
        noise = self._noise
        fft.forward(psi)
        kernels.multiply(psi, self._k_half)
        fft.inverse(psi, normalise=False)
        for j in range(n):
            if j:
                fft.forward(psi)
                if noise is not None:   # the previous step's dW, after its nonlinear sub-step
                    noise.add(psi)
                kernels.multiply(psi, self._k_full)
                fft.inverse(psi, normalise=False)
            self._beams.update(self._t_origin + (k0 + j + 0.5) * dt)
            if not math.isfinite(self._nonlinear(psi, dt)):
                return j
        # The closing half step maps a finite field to a finite one (bounded factors), so the
        # next step's sum is a sufficient check.
        fft.forward(psi)
        if noise is not None:
            noise.add(psi)
        kernels.multiply(psi, self._k_half)
        fft.inverse(psi, normalise=False)
        return n

    # -- diagnostics -----------------------------------------------------------------------------
    def beam_potential(self) -> np.ndarray:
        """Beam potential at the current time (allocates). Units: mu."""
        self._beams.update(self.t)
        return self._beams.potential()

    def observables(self) -> dict[str, float]:
        """:func:`observables` of the current field, beams at the current time."""
        return observables(self.psi, self.grid, self._v_static, self.beam_potential(),
                           self.settings.g)


def _whole_steps(duration: float, dt: float, name: str) -> int:
    steps = round(duration / dt)
    if abs(steps * dt - duration) > 1e-9 * max(abs(duration), abs(dt)):
        raise VorthermError(f"{name} = {duration} is not a whole number of time steps dt = {dt}")
    return int(steps)


def observables(psi: np.ndarray, grid: Grid, V_static: np.ndarray,  # noqa: N803
                V_beam: np.ndarray | None = None, g: float = 1.0) -> dict[str, float]:  # noqa: N803
    r"""Norm, energies, chemical potential and angular momentum of ``psi``.

    ``norm`` = sum |psi|^2 dA; ``e_kin`` = (1/2) int |grad psi|^2 (spectral, via Parseval);
    ``e_trap`` = int V_static n; ``e_beam`` = int V_beam n; ``e_int`` = (g/2) int n^2;
    ``energy`` = their sum; ``mu`` = (e_kin + e_trap + e_beam + 2 e_int) / norm;
    ``lz`` = int psi^* (-i)(x d_y - y d_x) psi about the grid centre (spectral derivatives).

    Units: norm in n0 xi^2 (atom number / (n0 xi^2)); energies in mu n0 xi^2; mu in mu;
    lz in hbar n0 xi^2.
    """
    psi = np.asarray(psi, dtype=np.complex128)
    v_static = np.ascontiguousarray(V_static, dtype=np.float64)
    ny, nx = grid.shape
    amp, _, _, gx, gy = kernels.empty_beam_rows(0, nx, ny)
    s_n, s_trap, _, s_n2 = kernels.density_sums(psi, v_static, amp, gx, gy)
    dA = grid.cell_area
    density = psi.real**2 + psi.imag**2
    e_beam = 0.0 if V_beam is None else float(np.sum(np.asarray(V_beam) * density) * dA)
    psi_k = np.fft.fft2(psi)
    e_kin = 0.5 * kernels.kinetic_sum(psi_k, np.ascontiguousarray(grid.k2)) / psi.size * dA
    d_x = np.fft.ifft2(1j * grid.kx[None, :] * psi_k)
    d_y = np.fft.ifft2(1j * grid.ky[:, None] * psi_k)
    lz = float(np.sum(np.conj(psi) * (-1j) * (grid.X * d_y - grid.Y * d_x)).real * dA)
    norm = s_n * dA
    e_trap = s_trap * dA
    e_int = 0.5 * g * s_n2 * dA
    energy = e_kin + e_trap + e_beam + e_int
    mu = (e_kin + e_trap + e_beam + 2 * e_int) / norm if norm > 0 else math.nan
    return {"norm": norm, "e_kin": e_kin, "e_trap": e_trap, "e_int": e_int, "e_beam": e_beam,
            "energy": energy, "mu": mu, "lz": lz}
