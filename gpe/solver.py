r"""Split-step Fourier solver of the damped 2D Gross-Pitaevskii equation.

.. math:: i\psi_t = (1 - i\gamma)\left(-\tfrac12\nabla^2 + V(\mathbf r, t) + g|\psi|^2 - \mu\right)\psi

(Choi, Morgan & Burnett, PRA 57, 4057 (1998)).  One Strang step is
"kinetic half -> potential+nonlinear -> kinetic half" (:meth:`Solver.kinetic_half`,
:meth:`Solver.potential_nonlinear`); the kinetic factor
:math:`\exp[-(i+\gamma)k^2\,dt/4]` is precomputed, the potential+nonlinear sub-step is solved
exactly (see :func:`gpe.kernels.nonlinear_damped`; with damping, its factors of the static
potential are computed once per solver and the beams only where they reach,
:func:`gpe.kernels.nonlinear_damped_boxed`) with the beam potential frozen at the midpoint
time of the step, which keeps the time-dependent splitting second order.  Inside
:meth:`Solver.advance` consecutive kinetic halves are fused into one full kinetic step, so a step
costs one FFT pair; every call of ``advance`` closes the fused sequence, so calling it at the same
step numbers (outputs and checkpoints) gives bitwise identical fields.

Ground states come from imaginary time (normalised gradient flow, Bao & Du, SIAM J. Sci. Comput.
25, 1674 (2004)) at fixed norm or fixed chemical potential: :func:`find_ground_state`.

Units: simulation units -- lengths xi, times hbar/mu, energies mu, |psi|^2 in n0 (or oscillator
units when the caller uses them; nothing here assumes which).
"""

from __future__ import annotations

import math
import operator
from collections.abc import Iterator
from dataclasses import dataclass, field

import numpy as np

from gpe import kernels
from gpe.errors import SimulationError, VorthermError
from gpe.fft import auto_threads, make_fft
from gpe.grid import Grid

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
        least 2 x 65536 points, one thread for smaller grids (:func:`gpe.fft.auto_threads`).
    fft : {"auto", "pyfftw", "scipy"}

    Units: dt in hbar/mu; mu in mu; g in mu / n0.
    """

    dt: float
    gamma: float = 0.0
    mu: float = 1.0
    g: float = 1.0
    precision: str = "complex128"
    threads: int | None = None
    fft: str = "auto"

    def __post_init__(self) -> None:
        if not math.isfinite(self.dt) or self.dt == 0:
            raise VorthermError(f"SolverSettings.dt must be a finite non-zero time, got {self.dt!r}")
        if not math.isfinite(self.gamma) or self.gamma < 0:
            raise VorthermError(f"SolverSettings.gamma must be >= 0, got {self.gamma!r}")
        if self.dt < 0 and self.gamma > 0:
            raise VorthermError("SolverSettings.dt < 0 (backward in time) needs gamma = 0: "
                                "damped evolution cannot be run backwards")
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

    @property
    def dtype(self) -> np.dtype:
        """Complex dtype of the wavefunction."""
        return np.dtype(_PRECISIONS[self.precision])


class BeamRows:
    """Moving Gaussian beams as separable 1D rows, refreshed per step without allocation.

    ``beams`` is anything with ``n_beams``, ``waists`` and ``evaluate(t, amp, cx, cy)`` (see
    gpe.potentials.BeamSet), or None.  Units: amp in mu; centres, waists in xi; t in hbar/mu.
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
        Time-dependent Gaussian beams (duck-typed, see :class:`BeamRows`).
    settings : SolverSettings
    psi0 : (ny, nx) array
        Initial wavefunction (copied).
    t0, step0 : float, int
        Time and step counter of ``psi0``.  The time of step k is computed as
        ``(t0 - step0*dt) + k*dt``, so a run restarted from a checkpoint of a run that began at
        t = 0 reproduces its beam times, and hence its fields, bit for bit.

    Attributes
    ----------
    psi : (ny, nx) array, the live field (copy it before keeping it).
    t : float, step_count : int

    Units: as in the module docstring.
    """

    def __init__(self, grid: Grid, static_potential: np.ndarray, beams, settings: SolverSettings,
                 psi0: np.ndarray, t0: float = 0.0, step0: int = 0) -> None:
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
        self._fft = make_fft(grid.shape, settings.dtype, settings.fft, self._threads)
        self.psi = self._fft.empty()
        self.psi[...] = psi0
        self.step_count = operator.index(step0)
        self._t_origin = float(t0) - self.step_count * settings.dt

        # Fourier-space kinetic factors with the 1/N of the inverse FFT folded in.
        exponent = -(1j + settings.gamma) * grid.k2 * (settings.dt / 4.0)
        inv_n = 1.0 / (grid.nx * grid.ny)
        self._k_half = (np.exp(exponent) * inv_n).astype(settings.dtype)
        self._k_full = (np.exp(2.0 * exponent) * inv_n).astype(settings.dtype)
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
        beams = self._beams.beams
        if beams is None:
            return 0.0
        if hasattr(beams, "max_height"):
            return float(beams.max_height())
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
        """Kinetic half step exp[-(i+gamma) k^2 dt/4] on a real-space field, in place."""
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
        fft.forward(psi)
        kernels.multiply(psi, self._k_half)
        fft.inverse(psi, normalise=False)
        for j in range(n):
            if j:
                fft.forward(psi)
                kernels.multiply(psi, self._k_full)
                fft.inverse(psi, normalise=False)
            self._beams.update(self._t_origin + (k0 + j + 0.5) * dt)
            if not math.isfinite(self._nonlinear(psi, dt)):
                return j
        # The closing half step maps a finite field to a finite one (bounded factors), so the
        # next step's sum is a sufficient check.
        fft.forward(psi)
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


def imprint_vortices(psi: np.ndarray, grid: Grid, positions: np.ndarray, signs: np.ndarray,
                     core_size: float = 1.0) -> np.ndarray:
    r"""Return ``psi`` times :math:`\prod_j \tanh(r_j/a)\, e^{i s_j \theta_j}` (a new array).

    The tanh profile is the usual approximate core shape (common practice); ``core_size`` a is
    the healing length in healing units.  Units: positions, core_size in xi; signs +-1.
    """
    positions = np.asarray(positions, dtype=np.float64).reshape(-1, 2)
    signs = np.asarray(signs).reshape(-1)
    if positions.shape[0] != signs.shape[0]:
        raise VorthermError(f"imprint_vortices: {positions.shape[0]} positions but "
                            f"{signs.shape[0]} signs")
    if not np.all(np.isin(signs, (-1, 1))):
        raise VorthermError("imprint_vortices: signs must be +1 or -1")
    out = np.array(psi, dtype=np.result_type(psi, np.complex64), copy=True)
    for (x0, y0) in positions:
        out *= np.tanh(np.hypot(grid.X - x0, grid.Y - y0) / core_size)
    out *= winding_phase(grid, positions, signs)
    return out


def winding_phase(grid: Grid, positions: np.ndarray, signs: np.ndarray) -> np.ndarray:
    """Unit-modulus phase field prod_j exp(i s_j theta_j) of point vortices. Units: xi."""
    theta = np.zeros(grid.shape)
    for (x0, y0), s in zip(np.asarray(positions, dtype=np.float64).reshape(-1, 2),
                           np.asarray(signs).reshape(-1)):
        theta += s * np.arctan2(grid.Y - y0, grid.X - x0)
    return np.exp(1j * theta)



# -- ground state (imaginary time) ---------------------------------------------------------------
@dataclass(frozen=True)
class GroundState:
    """Result of :func:`find_ground_state`.

    ``history`` has one row (step, mu, energy) per convergence check.
    Units: psi in sqrt(n0); mu in mu; energy in mu n0 xi^2.
    """

    psi: np.ndarray
    mu: float
    energy: float
    steps: int
    converged: bool
    history: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)), repr=False)


def thomas_fermi_guess(grid: Grid, potential: np.ndarray, g: float, norm: float | None = None,
                       mu: float | None = None) -> np.ndarray:
    """Thomas-Fermi wavefunction sqrt(max(mu - V, 0)/g), mu fitted to ``norm`` if given.

    With g <= 0 it returns the broad positive profile 1/(1 + V - min V) instead.
    Units: V, mu in mu; norm in n0 xi^2.
    """
    v = np.asarray(potential, dtype=np.float64)
    if g <= 0:
        psi = 1.0 / (1.0 + v - v.min())
    else:
        if mu is None:
            lo, hi = float(v.min()), float(v.min()) + 1.0
            while grid.integrate(np.maximum(hi - v, 0)) / g < norm and hi < 1e12:
                hi = lo + 2 * (hi - lo)
            for _ in range(100):  # bisection on the TF normalisation condition
                mid = 0.5 * (lo + hi)
                lo, hi = (mid, hi) if grid.integrate(np.maximum(mid - v, 0)) / g < norm else (lo, mid)
            mu = hi
        psi = np.sqrt(np.maximum(mu - v, 0.0) / g)
    if norm is not None:
        psi *= math.sqrt(norm / grid.integrate(psi**2))
    return psi.astype(np.complex128)


def find_ground_state(
    grid: Grid, static_potential: np.ndarray, *, g: float = 1.0, norm: float | None = None,
    mu: float | None = None, beams=None, dt: float = 0.01, tol: float = 1e-10,
    check_every: int = 50, max_steps: int = 200_000, psi0: np.ndarray | None = None,
    noise: float = 0.0, rng: np.random.Generator | None = None,
    vortices: tuple[np.ndarray, np.ndarray] | None = None, core_size: float = 1.0,
    precision: str = "complex128", threads: int | None = None, fft: str = "auto",
) -> GroundState:
    r"""Ground state by imaginary-time split-step (normalised gradient flow).

    Each step is :math:`\psi \leftarrow \mathcal N[A_{1/2} B A_{1/2}\psi]` with
    :math:`A_{1/2} = e^{-k^2 dt/4}`, :math:`B = e^{-(V + g|\psi|^2 - \mu)dt}` and
    :math:`\mathcal N` the projection onto the fixed ``norm`` (Bao & Du 2004), or no projection
    when ``mu`` is fixed instead.  Kinetic halves are fused and the projection is folded into the
    next nonlinear sub-step (its factor comes from Parseval), so a step costs one FFT pair.  Every
    ``check_every`` steps the relative changes of mu and energy are compared with ``tol``.

    Parameters
    ----------
    norm, mu : float
        Give exactly one: fixed sum |psi|^2 dx dy, or fixed chemical potential.
    beams : None, (ny, nx) array, or BeamSet-like
        Beam potential held static; a BeamSet is evaluated at t = 0.
    psi0 : array, optional
        Initial guess; Thomas-Fermi (:func:`thomas_fermi_guess`) by default.
    noise, rng : float, Generator
        Adds ``noise * max|psi0|`` times complex Gaussian noise drawn from ``rng`` (seeded).
    vortices : (positions (M, 2), signs (M,)), optional
        Imprinted with :func:`imprint_vortices`; their phase winding is re-imposed after every
        step so the vortices stay where they were put while the density relaxes around them.

    Units: V, mu in mu; dt in hbar/mu; norm in n0 xi^2; positions in xi.
    """
    if (norm is None) == (mu is None):
        raise VorthermError("find_ground_state: give exactly one of norm= (fixed atom number) "
                            "or mu= (fixed chemical potential)")
    if norm is not None and not norm > 0:
        raise VorthermError(f"find_ground_state: norm must be > 0, got {norm!r}")
    if not (dt > 0 and check_every >= 1 and max_steps >= 1 and tol > 0):
        raise VorthermError("find_ground_state: need dt > 0, tol > 0, check_every >= 1, "
                            "max_steps >= 1")
    dtype = SolverSettings(dt=dt, precision=precision, threads=threads, fft=fft).dtype
    v_trap = np.array(static_potential, dtype=np.float64, order="C")
    rows = BeamRows(None if isinstance(beams, np.ndarray) else beams, grid)
    rows.update(0.0)
    v_beam = np.asarray(beams, dtype=np.float64) if isinstance(beams, np.ndarray) else rows.potential()
    # Beams are static here: fold them into the kernel potential, keep them apart for energies.
    v_kernel = np.ascontiguousarray(v_trap + v_beam)

    guess = (thomas_fermi_guess(grid, v_kernel, g, norm=norm, mu=mu) if psi0 is None
             else np.array(psi0, dtype=np.complex128))
    if noise:
        if rng is None:
            raise VorthermError("find_ground_state: noise needs a seeded rng=np.random.Generator")
        guess = guess + noise * np.abs(guess).max() * (
            rng.standard_normal(grid.shape) + 1j * rng.standard_normal(grid.shape))
    phase_factor = None
    if vortices is not None:
        guess = imprint_vortices(guess, grid, vortices[0], vortices[1], core_size)
        phase_factor = winding_phase(grid, vortices[0], vortices[1]).astype(dtype)

    threads = auto_threads(grid.shape) if threads is None else int(threads)
    fftb = make_fft(grid.shape, dtype, fft, threads)
    psi = fftb.empty()
    psi[...] = guess
    shift = 0.0 if mu is None else float(mu)
    with kernels.kernel_threads(threads):
        return _relax(grid, psi, fftb, v_trap, v_beam, v_kernel, g, norm, shift, dt, tol,
                      check_every, max_steps, phase_factor)


def _relax(grid, psi, fftb, v_trap, v_beam, v_kernel, g, norm, shift, dt, tol, check_every,
           max_steps, phase_factor) -> GroundState:
    """The imaginary-time loop of :func:`find_ground_state` (arithmetic on preallocated arrays)."""
    amp, _, _, gx, gy = kernels.empty_beam_rows(0, grid.nx, grid.ny)
    n_pts = grid.nx * grid.ny
    half_raw = np.exp(-grid.k2 * dt / 4.0)
    k_half = (half_raw / n_pts).astype(psi.dtype)
    k_full = (half_raw**2 / n_pts).astype(psi.dtype)

    def renormalise() -> None:
        if norm is not None:
            kernels.scale_inplace(psi, math.sqrt(norm / (np.vdot(psi, psi).real * grid.cell_area)))

    renormalise()
    history: list[tuple[int, float, float]] = []
    steps, converged = 0, False
    while steps < max_steps and not converged:
        chunk = min(check_every, max_steps - steps)
        fftb.forward(psi)
        kernels.multiply(psi, k_half)
        fftb.inverse(psi, normalise=False)
        scale = 1.0
        for j in range(chunk):
            total = kernels.nonlinear_imaginary(psi, scale, v_kernel, amp, gx, gy, g, shift, dt)
            if not math.isfinite(total) or total == 0.0:
                raise SimulationError(
                    f"imaginary-time relaxation lost the field at step {steps + j} (sum |psi|^2 = "
                    f"{total}); dt = {dt} is probably too large for the potential height "
                    f"(max V = {v_kernel.max():.3g}); reduce dt or use a finer guess")
            if phase_factor is not None:
                kernels.pin_phase(psi, phase_factor)
            fftb.forward(psi)
            if j == chunk - 1:
                kernels.multiply(psi, k_half)
            elif norm is not None:
                closing = kernels.multiply_and_norm(psi, k_full, half_raw)
                scale = math.sqrt(norm / (closing / n_pts * grid.cell_area))
            else:
                kernels.multiply(psi, k_full)
            fftb.inverse(psi, normalise=False)
        steps += chunk
        renormalise()
        obs = observables(psi, grid, v_trap, v_beam, g)
        history.append((steps, obs["mu"], obs["energy"]))
        if len(history) > 1:
            (_, mu0, e0), (_, mu1, e1) = history[-2], history[-1]
            converged = (abs(mu1 - mu0) <= tol * abs(mu1)) and (abs(e1 - e0) <= tol * abs(e1))
    final = history[-1]
    return GroundState(psi=np.array(psi), mu=final[1], energy=final[2], steps=steps,
                       converged=converged, history=np.array(history))
