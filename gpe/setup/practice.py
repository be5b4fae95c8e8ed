"""Checks of common practice on a resolved protocol: errors for beams that leave the grid,
:class:`~gpe.errors.ProtocolWarning` for numbers against the usual rules of thumb.

Each rule is marked "common practice" where it is one (dx <= xi, waist >= 2 dx, about one radian
of phase per step, damping 1e-4 .. 3e-2, mu << hbar omega_z for a quasi-2D gas, a beam that
reaches the fluid, a beam slower than the sound speed c = sqrt(g n0 / m)).

Units: simulation units (xi, hbar/mu, mu); SI only in the messages.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import scipy.constants as const
from scipy import ndimage

from gpe.errors import ProtocolWarning
from gpe.field.beams import find_beam_excursion
from gpe.field.grid import Grid
from gpe.field.traps.base import Trap
from gpe.setup.schema import ReadingContext, Section


def check_practice(ctx: ReadingContext, p, grid_sec: Section, ev: Section, beam_secs: list) -> None:
    """Errors for beams leaving the grid; ProtocolWarnings for choices against common practice.

    ``p`` is the resolved :class:`gpe.setup.protocol.Protocol` (which imports this module).
    """
    g, u, src = p.grid, p.units, ctx.source
    warn = lambda msg: warnings.warn(ProtocolWarning(f"{src}: {msg}"), stacklevel=4)
    spacing = max(g.dx, g.dy)
    if spacing > 1.0:   # common practice: dx <= xi resolves vortex cores
        warn(f"[grid] spacing dx = {g.dx:.3g} xi, dy = {g.dy:.3g} xi under-resolves the healing length "
             f"(xi = {u.length_m * 1e6:.3g} um); common practice is dx <= xi, e.g. nx >= "
             f"{2 * math.ceil(g.length_x / 2)}.")
    beams = p.build_beams()
    for i, beam in enumerate(p.beams):
        if beam.waist < 2 * spacing:
            warn(f"[beams.{i}] waist {beam.waist:.3g} xi is under 2 grid spacings ({spacing:.3g} xi); the "
                 "beam is poorly resolved (common practice: waist >= 2 dx).")
        if beam.height < 0:
            depth = -beam.height
            warn(f"[beams.{i}] {beam_secs[i][0].key('height')}: height {beam.height:.4g} mu is negative, an "
                 f"attractive well {depth:.4g} mu = {depth * u.temperature_K * 1e9:.4g} nK deep. Atoms gather "
                 f"in it: in the Thomas-Fermi picture the density at the beam centre grows to n/n0 ~ "
                 f"1 + |V0|/mu = {1.0 + depth:.4g} for a well in the bulk (an estimate: it neglects the "
                 "kinetic energy, which lowers the peak of a narrow well). Use a positive height for a "
                 "repulsive stirring beam.")
    hit = find_beam_excursion(beams, g, p.evolution.duration)
    if hit is not None:
        sec = beam_secs[hit.beam_index][1]
        sec.fail("kind", f"the beam centre reaches (x, y) = ({hit.x:.4g}, {hit.y:.4g}) xi = "
                 f"({u.length_to_si(hit.x) * 1e6:.4g}, {u.length_to_si(hit.y) * 1e6:.4g}) um at t = "
                 f"{hit.time:.4g} hbar/mu = {u.time_to_si(hit.time) * 1e3:.4g} ms, closer than one waist "
                 f"to the edge of the grid", f"a path with |x| <= {hit.limit_x:.4g} xi and |y| <= "
                 f"{hit.limit_y:.4g} xi while the beam is on (or a larger [grid])")
    fluid = _fluid_distance(p.trap, g) if p.beams else None
    for i, beam in enumerate(p.beams):
        if fluid is not None:
            _check_beam_reaches_fluid(warn, i, beam, p, *fluid)
        speed = beam.path.max_speed
        # common practice: sound speed c = sqrt(g n0 / m), 1 in simulation units (n0 at mu)
        if beam.height != 0 and speed > 1.0:
            warn(f"[beams.{i}] the beam moves at up to {speed:.3g} c = "
                 f"{speed * u.speed_m_s * 1e3:.3g} mm/s, faster than the sound speed of the bulk, "
                 f"c = sqrt(g n0 / m) = 1 c = {u.speed_m_s * 1e3:.3g} mm/s (and the local "
                 "sound speed, lower where the density is lower): a supersonic obstacle drags "
                 "a wake of sound waves besides vortices; common practice stirs between the "
                 "critical speed of vortex shedding, a few tenths of c, and c.")
    dt = p.evolution.dt
    # |V0| of the strongest beam: a well turns the phase as fast as a barrier of the same height
    v_max = _trap_maximum(p.trap, g) + beams.max_height() + 1.0
    k2_max = (math.pi / g.dx) ** 2 + (math.pi / g.dy) ** 2
    if dt * v_max > 1.0:   # common practice: at most ~1 rad of potential phase per step
        warn(f"[evolution] {ev.key('dt')}: dt * max(V + g|psi|^2) = {dt:.3g} * {v_max:.3g} = {dt * v_max:.3g} rad "
             f"per step exceeds ~1 rad (common practice); use dt <= {1.0 / v_max:.3g} hbar/mu.")
    if dt * k2_max / 2 > 1.0:
        warn(f"[evolution] {ev.key('dt')}: dt * k_max^2 / 2 = {dt * k2_max / 2:.3g} rad per step exceeds ~1 rad "
             f"(common practice); use dt <= {2.0 / k2_max:.3g} hbar/mu for this grid.")
    if p.evolution.gamma > 0.1:
        warn(f"[evolution] damping gamma = {p.evolution.gamma} is far above the usual 1e-4 to 3e-2.")
    ratio = p.atoms.chemical_potential_J / (const.hbar * 2 * math.pi * p.atoms.axial_frequency_hz)
    if ratio > 1.0:
        warn(f"[atoms] mu / (hbar omega_z) = {ratio:.3g}: the gas is not quasi-2D (needs mu << hbar "
             "omega_z); the quasi-2D coupling is then inaccurate.")


#: Most grid points on which :func:`_trap_maximum` evaluates a trap (2 MB per float64 array).
_PRACTICE_POINTS = 1 << 18


def _trap_maximum(trap: Trap, grid: Grid) -> float:
    """Largest value of the static trap over the grid's box, for the time-step warning.

    Grids of more than :data:`_PRACTICE_POINTS` points are sampled on a coarser grid over the
    same box, so that reading a protocol never allocates arrays of the size of its grid (those
    are counted and checked against the free memory before a run, gpe.run.memory). Walls and
    caps are flat far from the edge and the corners are sampled either way, so the coarse
    maximum is the same to within the wall's smoothing.

    Units: mu.
    """
    stride = max(1, math.ceil(math.sqrt(grid.nx * grid.ny / _PRACTICE_POINTS)))
    if stride > 1:
        grid = Grid(max(8, 2 * (grid.nx // (2 * stride))), max(8, 2 * (grid.ny // (2 * stride))),
                    grid.length_x, grid.length_y)
    return float(trap.potential(grid).max())


#: Times at which a beam's path is sampled for the fluid check, at most.
_PATH_SAMPLES = 4000


def _fluid_distance(trap: Trap, grid: Grid):
    """Distance from every point of a (coarse) copy of the grid to the nearest fluid point,
    fluid being where the trap stays below the chemical potential (V < mu, Thomas-Fermi).

    Units: xi; returns (grid, distances) or None when the trap holds no fluid at all.
    """
    stride = max(1, math.ceil(math.sqrt(grid.nx * grid.ny / _PRACTICE_POINTS)))
    if stride > 1:
        grid = Grid(max(8, 2 * (grid.nx // (2 * stride))), max(8, 2 * (grid.ny // (2 * stride))),
                    grid.length_x, grid.length_y)
    fluid = trap.potential(grid) < 1.0
    if not fluid.any():
        return None
    return grid, ndimage.distance_transform_edt(~fluid, sampling=(grid.dy, grid.dx))


def _check_beam_reaches_fluid(warn, i: int, beam, p, grid: Grid, distance: np.ndarray) -> None:
    """Warn when a beam's centre never comes within one waist of the fluid while it is on
    (``distance``: to the fluid, on ``grid``, from :func:`_fluid_distance`)."""
    if beam.height == 0:
        return
    duration = p.evolution.duration
    n = int(min(_PATH_SAMPLES, max(200, math.ceil(duration * beam.path.max_speed
                                                   / (0.25 * beam.waist)))))
    t = np.linspace(0.0, duration, n)
    on = np.broadcast_to(np.asarray(beam.ramp.factor(t), dtype=float) != 0.0, t.shape)
    if not on.any():
        return
    x, y = beam.path.position(t)
    x = np.broadcast_to(np.asarray(x, dtype=float), t.shape)
    y = np.broadcast_to(np.asarray(y, dtype=float), t.shape)
    best = (math.inf, 0.0, 0.0, 0.0)
    for ox, oy in beam.offsets:
        cx, cy = x[on] + ox, y[on] + oy
        col = np.clip(np.rint((cx - grid.x[0]) / grid.dx).astype(int), 0, grid.nx - 1)
        row = np.clip(np.rint((cy - grid.y[0]) / grid.dy).astype(int), 0, grid.ny - 1)
        d = distance[row, col]
        k = int(np.argmin(d))
        if d[k] < best[0]:
            best = (float(d[k]), float(t[on][k]), float(cx[k]), float(cy[k]))
    gap, when, bx, by = best
    cell = max(grid.dx, grid.dy)
    if gap > beam.waist + cell:
        u = p.units
        warn(f"[beams.{i}] the beam never enters the fluid: its centre stays about "
             f"{gap:.3g} xi = {u.length_to_si(gap) * 1e6:.3g} um (within a grid cell, "
             f"{cell:.2g} xi) from the condensate (closest "
             f"at t = {when:.4g} hbar/mu = {u.time_to_ms(when):.4g} ms, at (x, y) = ({bx:.4g}, "
             f"{by:.4g}) xi), more than its waist {beam.waist:.3g} xi, so it stirs nothing; "
             "move its path (or the trap) so that it crosses the region where V_trap < mu.")
