r"""Ground states by imaginary time and the imprint of point vortices on a field.

Ground states come from imaginary time (normalised gradient flow, Bao & Du, SIAM J. Sci. Comput.
25, 1674 (2004)) at fixed norm or fixed chemical potential: :func:`find_ground_state`.  It uses
the same split-step arithmetic as the real-time :class:`gpe.solver.Solver` (one FFT pair per
step, compiled sub-steps from :mod:`gpe.kernels`) and :func:`gpe.solver.observables` for its
convergence checks.  :func:`imprint_vortices` multiplies a field by point-vortex cores and
phase windings, e.g. to start a relaxation with vortices held in place.

These names are also importable from :mod:`gpe.solver`, where they used to live.

Units: simulation units -- lengths xi, times hbar/mu, energies mu, |psi|^2 in n0 (or oscillator
units when the caller uses them; nothing here assumes which).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from gpe import kernels
from gpe.errors import SimulationError, VorthermError
from gpe.fft import auto_threads, make_fft
from gpe.grid import Grid
from gpe.solver import BeamRows, SolverSettings, observables

__all__ = ["GroundState", "thomas_fermi_guess", "find_ground_state", "imprint_vortices",
           "winding_phase"]


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


# -- vortex imprint ---------------------------------------------------------------------------------
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
