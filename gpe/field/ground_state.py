r"""Ground states by imaginary time and the imprint of point vortices on a field.

Ground states come from imaginary time (normalised gradient flow, Bao & Du, SIAM J. Sci. Comput.
25, 1674 (2004)) at fixed norm or fixed chemical potential: :func:`find_ground_state`.  It uses
the same split-step arithmetic as the real-time :class:`gpe.field.solver.Solver` (one FFT pair per
step, compiled sub-steps from :mod:`gpe.field.kernels`) and :func:`gpe.field.solver.observables` for its
convergence checks.  :func:`imprint_vortices` multiplies a field by point-vortex cores and
phase windings, e.g. to start a relaxation with vortices held in place.

These names are also importable from :mod:`gpe.field.solver`, where they used to live.

Units: simulation units -- lengths xi, times hbar/mu, energies mu, |psi|^2 in n0 (or oscillator
units when the caller uses them; nothing here assumes which).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from numba import njit

from gpe.errors import SimulationError, VorthermError
from gpe.field import kernels
from gpe.field.fft import auto_threads, make_fft, planning_options
from gpe.field.grid import Grid
from gpe.field.solver import BeamRows, SolverSettings, observables

__all__ = ["GroundState", "thomas_fermi_guess", "find_ground_state", "imprint_vortices",
           "winding_phase"]

logger = logging.getLogger(__name__)


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
    fft_planning: str = "measured",
    progress: Callable[[int, int], None] | None = None,
) -> GroundState:
    r"""Ground state by imaginary-time split-step (normalised gradient flow).

    Each step is :math:`\psi \leftarrow \mathcal N[A_{1/2} B A_{1/2}\psi]` with
    :math:`A_{1/2} = e^{-k^2 dt/4}`, :math:`B` the exact flow of
    :math:`\psi_\tau = -(V + g|\psi|^2 - \mu)\psi` over dt
    (:func:`gpe.field.kernels.nonlinear_imaginary`) and :math:`\mathcal N` the projection onto
    the fixed ``norm`` (Bao & Du 2004), or no projection when ``mu`` is fixed instead.  At fixed
    norm, the mu of B is a running estimate updated from each step's norm change, so that a
    step keeps the norm; with the exact B this makes mu and the profile second order in dt.  Kinetic halves are fused and the projection is folded into the
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
        Imprinted with :func:`imprint_vortices` and held where they were put while the field
        relaxes around them.  After every step (i) the phase winding prod exp(i s_j theta_j)
        is re-imposed outside disks of radius 1.5 ``core_size`` around the centres, which fixes
        the winding of each core, and (ii) psi(z_j) = 0 is imposed at every centre z_j (a
        linear constraint: order-6 Lagrange interpolation, Gaussian correction bumps), which
        fixes the positions of the zeros to ~0.01 grid spacings.  The phase alone does not
        fix them: a pinned phase holds the zero of the field against the flow of the other
        vortices (and of the walls) only with a stiffness ~ ln(xi/dx) on the grid, and the
        zeros drifted by ~0.1 |u| xi^2 across the flow u (0.09 xi at dx = 0.25 xi next to
        3 xi neighbours); inside the core disks the field relaxes freely under the zero
        constraint.
    core_size : float
        Width of the imprinted tanh cores; also sets the free core disks (1.5 core_size) and
        the width of the correction bumps (max(0.5 core_size, dx, dy)).
    progress : callable ``(steps, max_steps)``, optional
        Called after every convergence check; once converged it is called a last time with
        ``(steps, steps)``, so that a progress bar ends full.

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
    dtype = SolverSettings(dt=dt, precision=precision, threads=threads, fft=fft,
                           fft_planning=fft_planning).dtype
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
    phase_factor = hold = None
    if vortices is not None:
        guess = imprint_vortices(guess, grid, vortices[0], vortices[1], core_size)
        phase_factor, hold = _vortex_holds(grid, vortices[0], vortices[1], core_size, dtype)

    threads = auto_threads(grid.shape) if threads is None else int(threads)
    fftb = make_fft(grid.shape, dtype, fft, threads, **planning_options(fft_planning))
    psi = fftb.empty()
    psi[...] = guess
    shift = 0.0 if mu is None else float(mu)
    with kernels.kernel_threads(threads):
        return _relax(grid, psi, fftb, v_trap, v_beam, v_kernel, g, norm, shift, dt, tol,
                      check_every, max_steps, phase_factor, hold, progress)


def _relax(grid, psi, fftb, v_trap, v_beam, v_kernel, g, norm, shift, dt, tol, check_every,
           max_steps, phase_factor, hold, progress=None) -> GroundState:
    """The imaginary-time loop of :func:`find_ground_state` (arithmetic on preallocated arrays)."""
    amp, _, _, gx, gy = kernels.empty_beam_rows(0, grid.nx, grid.ny)
    n_pts = grid.nx * grid.ny
    half_raw = np.exp(-grid.k2 * dt / 4.0)
    k_half = (half_raw / n_pts).astype(psi.dtype)
    k_full = (half_raw**2 / n_pts).astype(psi.dtype)

    def renormalise() -> float:
        if norm is None:
            return 1.0
        factor = math.sqrt(norm / (np.vdot(psi, psi).real * grid.cell_area))
        kernels.scale_inplace(psi, factor)
        return factor

    renormalise()
    # At fixed norm the sub-steps subtract a running estimate of mu, so that one step keeps
    # the norm: the flow psi' = -(H - mu)psi then has the ground state as a stationary point
    # and the Strang fixed point is second order in dt.  Without it the field loses a fraction
    # ~2 mu dt of its norm per step and the renormalisation, which does not commute with the
    # nonlinear sub-step, leaves an O(dt) bias in mu.  The per-step rescaling factor c of the
    # norm measures the mismatch, c = exp[(mu - shift) dt], so shift += ln(c)/dt.
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
                hold.apply(psi)
            fftb.forward(psi)
            if j == chunk - 1:
                kernels.multiply(psi, k_half)
            elif norm is not None:
                closing = kernels.multiply_and_norm(psi, k_full, half_raw)
                scale = math.sqrt(norm / (closing / n_pts * grid.cell_area))
                shift += math.log(scale) / dt
            else:
                kernels.multiply(psi, k_full)
            fftb.inverse(psi, normalise=False)
        steps += chunk
        if phase_factor is not None:
            # the closing kinetic half step drifts the zeros a little: hold them again
            kernels.pin_phase(psi, phase_factor)
            hold.apply(psi)
        factor = renormalise()
        if norm is not None:
            shift += math.log(factor) / dt
        obs = observables(psi, grid, v_trap, v_beam, g)
        history.append((steps, obs["mu"], obs["energy"]))
        if len(history) > 1:
            (_, mu0, e0), (_, mu1, e1) = history[-2], history[-1]
            converged = (abs(mu1 - mu0) <= tol * abs(mu1)) and (abs(e1 - e0) <= tol * abs(e1))
            logger.debug("ground state step %d: mu = %.10g, relative changes of mu %.3g and "
                         "energy %.3g (tolerance %.3g)", steps, mu1, abs(mu1 - mu0) / (abs(mu1) or 1.0),
                         abs(e1 - e0) / (abs(e1) or 1.0), tol)
        if progress is not None:
            progress(steps, steps if converged else max_steps)
    final = history[-1]
    logger.info("ground state %s after %d steps: mu = %.8g, energy = %.8g",
                "converged" if converged else "NOT converged", steps, final[1], final[2])
    return GroundState(psi=np.array(psi), mu=final[1], energy=final[2], steps=steps,
                       converged=converged, history=np.array(history))


# -- holding imprinted vortices in place --------------------------------------------------------
#: Radius of the disks around imprinted centres where the phase is not pinned, in core_size.
#: Inside, the field relaxes under the zero constraint only; pinning the phase there as well
#: makes the pin and the constant-phase correction bumps feed each other (seen at dx = xi/8:
#: the correction grew from 1e-3 to 0.5 in 100 steps and a vortex pair appeared beside it).
_FREE_CORE_RADIUS = 1.5


def _vortex_holds(grid: Grid, positions, signs, core_size: float, dtype):
    """Phase factor (0 inside the free core disks) and zero constraint of imprinted vortices."""
    pos = np.asarray(positions, dtype=np.float64).reshape(-1, 2)
    phase_factor = winding_phase(grid, pos, signs).astype(dtype)
    radius = _FREE_CORE_RADIUS * core_size
    hx, hy = int(np.ceil(radius / grid.dx)) + 1, int(np.ceil(radius / grid.dy)) + 1
    for (x0, y0) in pos:
        # a local box per core (periodic indices) instead of a distance over the whole grid
        ix, iy = int(np.rint((x0 - grid.x[0]) / grid.dx)), int(np.rint((y0 - grid.y[0]) / grid.dy))
        cols, rows = np.arange(ix - hx, ix + hx + 1), np.arange(iy - hy, iy + hy + 1)
        inside = np.hypot(grid.x[0] + cols[None, :] * grid.dx - x0,
                          grid.y[0] + rows[:, None] * grid.dy - y0) < radius
        box = np.ix_(rows % grid.ny, cols % grid.nx)
        phase_factor[box] = np.where(inside, 0.0, phase_factor[box])
    return phase_factor, _ZeroHold(grid, pos, core_size)


class _ZeroHold:
    """The linear constraints psi(z_j) = 0 at the imprinted centres z_j.

    psi(z_j) is read from a Lagrange interpolant of ``order`` x ``order`` grid points (order 6:
    error O(dx^6), well below 0.01 dx for a resolved core) and removed by subtracting Gaussian
    bumps of width ``sigma`` centred on the vortices, with the amplitudes that zero all M
    interpolated values at once (an M x M system, solved once; overlapping bumps couple).
    Units: positions, core_size in xi.
    """

    def __init__(self, grid: Grid, positions: np.ndarray, core_size: float, order: int = 6):
        pos = np.asarray(positions, dtype=np.float64).reshape(-1, 2)
        # smooth on the grid (>= one spacing) but well inside the core
        sigma = max(0.5 * core_size, grid.dx, grid.dy)
        nodes = np.arange(order) - (order // 2 - 1)
        self.rows, self.wy, self.g_rows, self.gy, fy, cy, hy = _axis_setup(
            pos[:, 1], grid.y[0], grid.dy, grid.ny, nodes, sigma)
        self.cols, self.wx, self.g_cols, self.gx, fx, cx, hx = _axis_setup(
            pos[:, 0], grid.x[0], grid.dx, grid.nx, nodes, sigma)
        # a[i, j]: interpolated value at centre i of bump j (bumps separable: gy(row) gx(col))
        by = _bump_on(self.rows, cy, fy, grid.dy, grid.ny, hy, sigma)     # (M_i, M_j, order)
        bx = _bump_on(self.cols, cx, fx, grid.dx, grid.nx, hx, sigma)
        a = np.einsum("ia,ija,ib,ijb->ij", self.wy, by, self.wx, bx)
        if a.size and np.linalg.cond(a) > 1e8:
            raise VorthermError(
                "find_ground_state: imprinted vortices cannot be held apart (two centres "
                "coincide to within ~1e-4 of the correction width "
                f"{sigma:.3g} xi); give distinct positions")
        self.ainv = np.linalg.inv(a) if a.size else a
        self.values = np.zeros(pos.shape[0], dtype=np.complex128)   # work array of apply()

    def apply(self, psi: np.ndarray) -> None:
        _hold_zeros(psi, self.rows, self.cols, self.wy, self.wx, self.ainv,
                    self.g_rows, self.g_cols, self.gy, self.gx, self.values)


def _axis_setup(coord, origin, h, n, nodes, sigma):
    """Stencil rows, Lagrange weights, bump window rows and bump values along one axis."""
    f = (coord - origin) / h                                  # fractional grid index
    base = np.floor(f).astype(np.int64)
    u = f - base
    weights = np.ones((f.size, nodes.size))
    for a, na in enumerate(nodes):
        for nb in nodes:
            if nb != na:
                weights[:, a] *= (u - nb) / (na - nb)
    stencil = (base[:, None] + nodes[None, :]) % n
    centre = np.rint(f).astype(np.int64)
    half = int(np.ceil(4.0 * sigma / h))
    offsets = np.arange(-half, half + 1)
    window = (centre[:, None] + offsets[None, :]) % n
    bump = np.exp(-0.5 * ((centre[:, None] + offsets[None, :] - f[:, None]) * h / sigma) ** 2)
    return stencil, weights, window, bump, f, centre, half


def _bump_on(stencil, centre, f, h, n, half, sigma):
    """Value of bump j (truncated to its window, periodic) on the stencil points of centre i."""
    offset = (stencil[:, None, :] - centre[None, :, None] + n // 2) % n - n // 2  # (i, j, a)
    dist = (centre[None, :, None] + offset - f[None, :, None]) * h
    return np.where(np.abs(offset) <= half, np.exp(-0.5 * (dist / sigma) ** 2), 0.0)


@njit(cache=True)
def _hold_zeros(psi, rows, cols, wy, wx, ainv, g_rows, g_cols, gy, gx, val):
    """psi -= sum_j c_j bump_j with c = ainv @ (interpolated psi at the centres), in place.

    ``val`` (M,) complex128 is a work array.
    """
    m = rows.shape[0]
    for k in range(m):
        acc = 0j
        for a in range(rows.shape[1]):
            row = 0j
            for b in range(cols.shape[1]):
                row += wx[k, b] * psi[rows[k, a], cols[k, b]]
            acc += wy[k, a] * row
        val[k] = acc
    for j in range(m):
        c = 0j
        for k in range(m):
            c += ainv[j, k] * val[k]
        for a in range(g_rows.shape[1]):
            for b in range(g_cols.shape[1]):
                psi[g_rows[j, a], g_cols[j, b]] -= c * (gy[j, a] * gx[j, b])


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
