"""Hand-off from the GPE to point-vortex dynamics: seconds of relaxation after the stirring.

With ``[evolution] points_until``, the vortices detected in the last GPE frame continue as point
vortices (thermo.dynamics) in the trap's point-vortex domain (gpe/run/gas.py: the disk of radius
R - wall layer, the box shrunk the same way) until that time. Every ``points_output_interval``
a frame of vortex rows is written to the same run file's vortex table (gpe/run/pointstore.py),
so ``vortherm temperature`` reads one time line.

Choices, in simulation units:

* vortices of the last frame inside the wall layer (outside the domain or closer than one core
  radius to its wall) are counted and left out, as the thermometry's admission rule does;
* annihilation distance: two core radii (gpe.run.gas.CORE_RADIUS_XI), the distance at which the
  thermometry counts two vortices as one pair; a vortex closer than one core radius to the wall
  leaves with its image;
* mutual friction alpha = ``points_friction`` (default the GPE damping gamma), alpha' =
  ``points_friction_prime``;
* time: in healing units hbar/m = xi^2 mu/hbar = 1, so the scaled time of the domain (length
  unit L in xi) is s = t / L^2 with t in hbar/mu.

A harmonic trap's disk stands in for a non-uniform density (the point model ignores the density
gradient, which drives a vortex's precession there): the hand-off warns.

Units: hbar/mu and xi at the interface; domain units inside thermo.
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Callable

import numpy as np

from gpe.analysis.vortices import VORTEX_DTYPE
from gpe.errors import SimulationError, VorthermError
from gpe.field.traps.base import VortexDomain
from gpe.run.gas import CORE_RADIUS_XI, WALL_LAYER_XI, domain_for_trap
from thermo.dynamics.integrate import DynamicsSettings, PointState, advance, initial_state
from thermo.errors import DomainError

logger = logging.getLogger(__name__)


def handoff_domain(protocol) -> VortexDomain:
    """The point-vortex domain the hand-off runs in; a clear error for shapes without one.

    Called before the GPE part starts, so that a protocol whose trap cannot hand off fails
    before any work. Units: xi.
    """
    try:
        vd = domain_for_trap(protocol.trap, CORE_RADIUS_XI, WALL_LAYER_XI)
        if vd.domain.hole_circulation:    # the holes' flow is not in the point dynamics
            raise DomainError("its fluid has a hole, whose circulation the point-vortex "
                              "dynamics does not carry")
        vd.domain.gradient_kernels()      # a domain the thermometry has but dynamics lacks
    except (VorthermError, DomainError) as err:  # the shape's own refusal, re-worded for the key
        raise SimulationError(f"{protocol.source_name}: [evolution] points_until: the "
                              f"{protocol.trap.shape} trap cannot hand off to point vortices "
                              f"({err}); accepted: a disk, box, harmonic or mask trap without holes, or "
                              "leave points_until "
                              "out") from err
    return vd


def dynamics_settings(protocol, vd: VortexDomain) -> DynamicsSettings:
    """The integrator settings of a protocol's hand-off. Units: domain units."""
    ev = protocol.evolution
    return DynamicsSettings(alpha=ev.points_friction, alpha_prime=ev.points_friction_prime,
                            rtol=ev.points_tolerance, atol=1e-2 * ev.points_tolerance,
                            annihilation_distance=2.0 * vd.core_radius)


def point_output_times(protocol, t_start: float) -> np.ndarray:
    """Times of the point-vortex frames after the GPE part ending at ``t_start``. Units: hbar/mu."""
    ev = protocol.evolution
    step = ev.points_output_interval
    n = math.floor((ev.points_until - t_start) / step + 1e-9)
    times = t_start + step * np.arange(1, n + 1)
    if n == 0 or ev.points_until - times[-1] > 1e-9 * ev.points_until:
        times = np.append(times, ev.points_until)
    return times


def start_state(rows: np.ndarray, vd: VortexDomain, t: float) -> tuple[PointState, int]:
    """The point vortices of the last GPE frame's rows and how many were left out at the wall.

    Units: rows in xi and hbar/mu; the state in domain units and s = t / L^2.
    """
    pos = vd.to_domain(rows["x"], rows["y"])
    inside = vd.domain.distance_to_wall(pos) > vd.core_radius if len(pos) else np.zeros(0, bool)
    state = initial_state(pos[inside], np.asarray(rows["sign"])[inside], vd.domain,
                          t=t / vd.scale ** 2)
    return state, int(np.count_nonzero(~inside))


def state_rows(state: PointState, vd: VortexDomain, frame: int, t: float) -> np.ndarray:
    """Vortex-table rows (xi) of a point state. Units: xi, hbar/mu."""
    rows = np.empty(state.n, dtype=VORTEX_DTYPE)
    rows["frame"] = frame
    rows["t"] = t
    rows["x"] = vd.center[0] + vd.scale * state.pos[:, 0]
    rows["y"] = vd.center[1] + vd.scale * state.pos[:, 1]
    rows["sign"] = state.signs
    rows["track"] = -1
    return rows


def _save(run, state: PointState, k: int) -> None:
    run.write_point_state(state.pos, state.signs, t=state.t, step=state.step,
                          annihilated=state.annihilated, lost_to_wall=state.lost_to_wall,
                          steps_taken=state.steps_taken, steps_rejected=state.steps_rejected,
                          frame=k)


def _restore(saved: dict) -> PointState:
    return PointState(np.ascontiguousarray(saved["pos"]), np.ascontiguousarray(saved["signs"]),
                      float(saved["t"]), float(saved["step"]), int(saved["annihilated"]),
                      int(saved["lost_to_wall"]), int(saved["steps_taken"]),
                      int(saved["steps_rejected"]))


def run_points(run, protocol, progress: Callable[[float, int, int], None] | None = None) -> None:
    """Continue ``run``'s last GPE frame as point vortices up to ``points_until`` (module doc).

    Resumes from ``points/state`` when a previous attempt stopped part way: the point frames
    after the stored state are cut and recomputed from it, which gives the same numbers as an
    uninterrupted run.

    Parameters
    ----------
    run : gpe.run.runfile.RunFile, open for writing, its GPE part complete
    protocol : gpe.setup.protocol.Protocol with ``evolution.points_until`` set
    progress : called as ``progress(t, n_plus, n_minus)`` after every point frame (t in
        hbar/mu).
    """
    vd = handoff_domain(protocol)
    if vd.approximate:
        warnings.warn(f"{protocol.source_name}: point-vortex hand-off in a stand-in domain: "
                      f"{vd.approximate}", stacklevel=3)
    settings = dynamics_settings(protocol, vd)
    n_gpe = run.n_frames
    t_start = float(run.frame_times()[-1])
    times = point_output_times(protocol, t_start)
    saved = run.read_point_state()
    if saved is None:
        run.truncate_point_frames(0)
        last = run.read_vortices()
        state, left_out = start_state(last[last["frame"] == n_gpe - 1], vd, t_start)
        logger.info("%s: hand-off to %d point vortices at t = %.6g hbar/mu (%d in the wall layer "
                    "left out)", run.path, state.n, t_start, left_out)
        _save(run, state, 0)
        k0 = 0
    else:
        k0 = int(saved["frame"])
        run.truncate_point_frames(k0)
        state = _restore(saved)
        logger.info("%s: resuming the point-vortex part at frame %d", run.path, n_gpe + k0)
    for k in range(k0, len(times)):
        state = advance(state, float(times[k]) / vd.scale ** 2, vd.domain, settings)
        if not np.all(np.isfinite(state.pos)):
            raise SimulationError(f"{run.path}: point-vortex positions became non-finite at "
                                  f"t = {times[k]:.6g} hbar/mu; lower points_tolerance")
        run.append_point_frame(float(times[k]), state_rows(state, vd, n_gpe + k, float(times[k])))
        _save(run, state, k + 1)
        if progress is not None:
            progress(float(times[k]), int(np.count_nonzero(state.signs > 0)),
                     int(np.count_nonzero(state.signs < 0)))
    logger.info("%s: point vortices until t = %.6g hbar/mu: %d left, %d pairs annihilated, %d "
                "lost at the wall", run.path, times[-1], state.n, state.annihilated,
                state.lost_to_wall)
