"""The whole job for one protocol: ground state -> stirring -> run file -> vortices.

``simulate`` is the only place where the protocol, the solver, the detector and the run file
meet; each of them stays ignorant of the others. Reading a finished run back lives in
gpe/run/reading.py, its thermometry in gpe/run/thermometry.py.

Units: simulation units throughout (xi, hbar/mu, mu); SI only in the summary text.
"""

from __future__ import annotations

import json
import logging
import math
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import scipy.constants as const

from gpe.analysis import diagnostics
from gpe.analysis.tracking import track_vortices
from gpe.analysis.vortices import VORTEX_DTYPE, find_vortices
from gpe.errors import ProtocolWarning, RunFileError
from gpe.field.ground_state import find_ground_state
from gpe.field.solver import Solver, SolverSettings
from gpe.run.memory import check_memory
from gpe.run.points import handoff_domain, run_points
from gpe.run.reading import is_complete, protocol_of
from gpe.run.runfile import RunFile
from gpe.setup.schema import in_solved_mu
from gpe.setup.units import axial_swelling

logger = logging.getLogger(__name__)

#: Density threshold of the detector relative to the peak background (common practice: 0.1-0.3).
DETECT_THRESHOLD = 0.2


@dataclass(frozen=True)
class RunProgress:
    """What a progress callback is told after every output."""

    t: float
    t_end: float
    steps: int
    steps_per_s: float
    n_plus: int
    n_minus: int
    time_unit: str
    #: "gpe", or "points" for the point-vortex frames after a hand-off (no GPE steps taken)
    phase: str = "gpe"



def detection_floor(v_static: np.ndarray, v_beam: np.ndarray | None) -> np.ndarray:
    """The Thomas-Fermi density 1 - V of the potential at the frame's time (mu = 1, beams
    included), the floor of the run's vortex detection (gpe.analysis.vortices.find_vortices):
    a core next to a hard wall is counted where the fluid is, though the frame's own density
    dips there. Units: n0; potentials in mu."""
    v = v_static if v_beam is None else v_static + v_beam
    return np.clip(1.0 - v, 0.0, None)


def _detect(psi: np.ndarray, grid, region: np.ndarray, frame: int, t: float,
            floor: np.ndarray | None = None) -> np.ndarray:
    det = find_vortices(psi, grid.x, grid.y, threshold=DETECT_THRESHOLD, region=region,
                        floor=floor)
    rows = np.empty(len(det), dtype=VORTEX_DTYPE)
    rows["frame"] = frame
    rows["t"] = t
    rows["x"] = det.x
    rows["y"] = det.y
    rows["sign"] = det.sign
    rows["track"] = -1
    return rows


def _initial_state(protocol, v_static, beams, threads, progress=None):
    """Ground state with the beams at their t = 0 heights and positions, plus seeded noise."""
    gs_cfg = protocol.ground_state
    kwargs = {}
    if gs_cfg.fixed == "number":
        kwargs["norm"] = protocol.atoms.norm
    else:
        kwargs["mu"] = 1.0
    vortices = None
    if gs_cfg.imprint_positions:
        vortices = (np.asarray(gs_cfg.imprint_positions, dtype=float),
                    np.asarray(gs_cfg.imprint_signs, dtype=int))
    gs = find_ground_state(
        protocol.grid, v_static, g=1.0, beams=beams, dt=gs_cfg.dt,
        tol=min(gs_cfg.mu_tolerance, gs_cfg.energy_tolerance), max_steps=gs_cfg.max_steps,
        vortices=vortices, threads=threads, fft_planning=protocol.evolution.fft_planning,
        progress=progress, **kwargs)
    psi = gs.psi.copy()
    if gs_cfg.noise_amplitude > 0:
        # Relative complex noise, only where there is fluid, drawn from the protocol's seed:
        # different seeds give statistically independent runs of the same protocol.
        rng = np.random.default_rng(protocol.evolution.seed)
        noise = rng.standard_normal(psi.shape) + 1j * rng.standard_normal(psi.shape)
        psi *= 1.0 + gs_cfg.noise_amplitude * noise
    return gs, psi


def simulate(protocol, out_path, *, resume: bool = False,
             progress: Callable[[RunProgress], None] | None = None,
             threads: int | None = None,
             ground_state_progress: Callable[[int, int], None] | None = None) -> Path:
    """Run ``protocol`` and write (or, with ``resume``, complete) its run file.

    Parameters
    ----------
    protocol : gpe.setup.protocol.Protocol
    out_path : path of the run file
    resume : continue from the run file's checkpoint when it exists and is incomplete;
        a complete run file is left untouched.
    progress : callback receiving a :class:`RunProgress` after every output.
    threads : FFT threads (default: all cores).
    ground_state_progress : callback ``(steps, max_steps)`` of the imaginary-time relaxation
        (see gpe.field.ground_state.find_ground_state); not called when a run is resumed.

    Returns
    -------
    pathlib.Path of the run file.

    Raises
    ------
    SimulationError
        Before anything of the grid's size is allocated and before a file is written, when the
        run's estimated peak memory exceeds the memory available (gpe.run.memory).

    Notes
    -----
    A resumed run continues with the static potential stored in its run file, not with the
    protocol's trap rebuilt now: an edited mask image cannot change a run half way.
    """
    out_path = Path(out_path)
    resuming = resume and out_path.exists()
    if resuming and is_complete(out_path):
        logger.info("%s is complete already; nothing to do", out_path)
        return out_path
    check_memory(protocol, resume=resuming)
    grid = protocol.grid
    ev = protocol.evolution
    if ev.points_until is not None:
        handoff_domain(protocol)   # a trap without a point-vortex domain fails before any work
    beams = protocol.build_beams()
    t_end = ev.n_outputs * ev.output_interval
    time_unit = protocol.time_unit

    if resuming:
        run = RunFile.open(out_path, "r+")
        if run.is_complete():
            run.close()
            return out_path
        if (run.protocol_text(), tuple(run.protocol_overrides())) != (protocol.source_text,
                                                                     tuple(protocol.overrides)):
            run.close()
            raise RunFileError(
                f"{out_path}: the run was started with another protocol (its stored text or "
                "overrides differ from the one given now); resuming would join two runs. Continue "
                f"it with its own protocol (`vortherm run --resume {out_path}`), or start again "
                "with --force")
        try:
            v_static = _stored_trap(run, protocol)
            ck = run.read_checkpoint()
        except BaseException:
            run.close()
            raise
        region = protocol.trap.detection_region(v_static)
        psi0, t0, step0, frame0 = ck.psi, ck.t, ck.step, ck.frame
        mu_run = run.attrs_float("mu_run")
        if step0 < ev.n_steps or frame0 != run.n_frames:
            run.truncate_to_frame(frame0)   # (drops point-vortex frames, which follow the GPE)
        logger.info("%s: resuming from the checkpoint at frame %d, t = %.6g hbar/mu (step %d)",
                    out_path, frame0, t0, step0)
        if protocol.evolution.temperature > 0 and ck.rng_state is None:
            run.close()
            raise RunFileError(f"{out_path}: the checkpoint holds no noise generator state, "
                               "which a finite-temperature run needs to resume; start it "
                               "again with --force")
        solver = _make_solver(protocol, v_static, beams, mu_run, psi0, t0, step0, threads,
                              rng=ck.rng())
    else:
        v_static = protocol.build_trap()
        region = protocol.trap.detection_region(v_static)
        logger.info("%s: ground state on a %d x %d grid", protocol.source_name, grid.nx, grid.ny)
        gs, psi0 = _initial_state(protocol, v_static, beams, threads, ground_state_progress)
        if not gs.converged:
            warnings.warn(f"{protocol.source_name}: ground state not converged to the tolerance "
                          f"after {gs.steps} steps (mu = {gs.mu:.6g}); raise "
                          "ground_state.max_steps or dt", stacklevel=2)
        mu_run = gs.mu
        _warn_axial_swelling(protocol, mu_run)
        # the solver checks the time step against the potential: fail before writing a file
        solver = _make_solver(protocol, v_static, beams, mu_run, psi0, 0.0, 0, threads)
        out_path.parent.mkdir(parents=True, exist_ok=True)
        tmp = out_path.with_name(out_path.name + ".part")
        tmp.unlink(missing_ok=True)  # left by a run killed before its first checkpoint
        run = RunFile.create(tmp, protocol=protocol, static_potential=v_static,
                             ground_state_psi=gs.psi, extra_attrs={
                                 "mu_run": mu_run, "ground_state_steps": gs.steps,
                                 "protocol_solved_mu_json": json.dumps(
                                     in_solved_mu(protocol.to_dict(), mu_run))})
        t0, step0, frame0 = 0.0, 0, 0
        _write_frame(run, protocol, psi0, 0.0, v_static, beams, grid, region, frame=0)
        run.write_checkpoint(psi0, 0.0, 0, 1, rng=solver.rng)
        run.close()
        tmp.replace(out_path)
        run = RunFile.open(out_path, "r+")
        frame0 = 1
        logger.info("%s: started, %d outputs every %.6g hbar/mu", out_path, ev.n_outputs,
                    ev.output_interval)

    frame = frame0
    last_ck_wall = time.monotonic()
    since_ck = 0
    start_wall, start_steps = time.perf_counter(), solver.step_count
    try:
        for _ in solver.evolve(t_end, ev.output_interval):
            rows = _write_frame(run, protocol, solver.psi, solver.t, v_static, beams, grid,
                                region, frame)
            frame += 1
            since_ck += 1
            done = solver.step_count >= ev.n_steps
            if (done or since_ck >= ev.checkpoint_every_outputs
                    or time.monotonic() - last_ck_wall >= ev.checkpoint_every_s):
                run.write_checkpoint(solver.psi, solver.t, solver.step_count, frame,
                                     rng=solver.rng)
                since_ck, last_ck_wall = 0, time.monotonic()
                logger.debug("%s: checkpoint at frame %d, step %d", out_path, frame,
                             solver.step_count)
            if progress is not None:
                elapsed = time.perf_counter() - start_wall
                rate = (solver.step_count - start_steps) / elapsed if elapsed > 0 else 0.0
                progress(RunProgress(protocol.display_time(solver.t), protocol.display_time(t_end), solver.step_count,
                                     rate, int(np.count_nonzero(rows["sign"] > 0)),
                                     int(np.count_nonzero(rows["sign"] < 0)), time_unit))
        if ev.points_until is not None:
            run_points(run, protocol, None if progress is None else _points_progress(
                progress, protocol, solver.step_count))
        _finish_tracks(run)
        run.mark_complete()
        logger.info("%s: complete, %d frames, %d steps", out_path, frame, solver.step_count)
    finally:
        run.close()
    return out_path


#: mu / (hbar omega_z) above which the axial swelling is worth a warning (~8% wider at 0.34,
#: gpe.setup.units.axial_swelling; the threshold is common practice for "quasi-2D").
AXIAL_WARNING_RATIO = 0.3


def _warn_axial_swelling(protocol, mu_run: float) -> None:
    """Warn when the solved mu is not small against hbar omega_z, with the swelling estimate."""
    hbar_omega_z = const.hbar * 2 * math.pi * protocol.atoms.axial_frequency_hz
    ratio = mu_run * protocol.units.mu_J / hbar_omega_z
    if ratio > AXIAL_WARNING_RATIO:
        s = axial_swelling(ratio)
        warnings.warn(ProtocolWarning(
            f"{protocol.source_name}: the solved mu = {mu_run:.4g} mu is {ratio:.3g} hbar omega_z "
            f"(above ~{AXIAL_WARNING_RATIO}): a Gaussian variational estimate puts the axial "
            f"width at {s:.3f} l_z ({100 * (s - 1):.1f}% swelling), so the quasi-2D coupling "
            f"g2D (frozen axial ground state) is ~{100 * (1 - 1 / s):.1f}% too strong; a higher "
            "axial frequency or fewer atoms keep the gas quasi-2D"), stacklevel=3)


def _stored_trap(run, protocol) -> np.ndarray:
    """The static potential a run file was started with, the one its resumed run must use.

    Warns when the protocol's trap read its files (a mask image) differently now: the file was
    edited since the run started, and the run continues with what it started with.
    """
    v_static = run.static_potential()
    if v_static.shape != protocol.grid.shape:
        raise RunFileError(f"{run.path}: 'potential/trap' has shape {v_static.shape}, the grid of its "
                           f"protocol is (ny, nx) = {protocol.grid.shape}; the run file is damaged "
                           "and must be started again")
    kept = run.trap_arrays()
    for name, array in protocol.trap.stored_arrays().items():
        if name in kept and not np.array_equal(kept[name], array):
            warnings.warn(f"{run.path}: the trap's {name} read now differs from the one stored in "
                          "the run file (the file was edited after the run started); the run "
                          "continues with the stored trap", stacklevel=3)
    return v_static


def thermal_noise_rng(seed: int) -> np.random.Generator:
    """The generator of a run's thermal noise: its own stream of the protocol's seed.

    ``SeedSequence(seed, spawn_key=(1,))``, independent of the ground-state noise, which is
    drawn from ``default_rng(seed)``.
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(1,)))


def _make_solver(protocol, v_static, beams, mu_run, psi0, t0, step0, threads, rng=None):
    """The run's solver; ``rng`` (a checkpoint's generator) continues the thermal noise."""
    ev = protocol.evolution
    settings = SolverSettings(dt=ev.dt, gamma=ev.gamma, mu=mu_run, g=1.0,
                              precision=ev.precision, threads=threads, fft_planning=ev.fft_planning,
                              temperature=ev.temperature, cutoff=ev.cutoff,
                              norm_per_atom=protocol.units.coupling)
    if settings.stochastic and rng is None:
        rng = thermal_noise_rng(ev.seed)
    return Solver(protocol.grid, v_static, beams, settings, psi0, t0=t0, step0=step0,
                  rng=rng if settings.stochastic else None)


def _write_frame(run, protocol, psi, t, v_static, beams, grid, region, frame) -> np.ndarray:
    v_beam = beams.potential(t, grid) if beams.n_beams else None
    rows = _detect(np.asarray(psi), grid, region, frame, t, detection_floor(v_static, v_beam))
    state = diagnostics.FrameState(np.asarray(psi), t, grid, v_static, v_beam, 1.0,
                                   protocol.units, rows)
    run.append_frame(t, psi, diagnostics.evaluate(state), vortices=rows,
                     units=diagnostics.units())
    return rows


def _points_progress(progress, protocol, steps):
    """The run's progress callback, told about point-vortex frames (no GPE steps are taken)."""
    end = protocol.display_time(protocol.evolution.points_until)

    def tell(t, n_plus, n_minus):
        progress(RunProgress(protocol.display_time(t), end, steps, 0.0, n_plus, n_minus,
                             protocol.time_unit, "points"))
    return tell


def _finish_tracks(run) -> None:
    """Link the vortices of all frames (point-vortex frames too) into tracks once complete."""
    table = run.read_vortices()
    if table.size:
        run.replace_vortices(track_vortices(table, run.timeline()))


def simulate_resume(run_path, *, progress=None, threads=None) -> Path:
    """Continue the interrupted run in ``run_path`` from its last checkpoint."""
    path = Path(run_path)
    if not path.exists():
        raise RunFileError(f"{path}: no such run file to resume; start it with `vortherm run "
                           "PROTOCOL.toml`")
    with RunFile.open(path, "r") as run:
        if run.is_complete():
            return path
        protocol = protocol_of(run)
    return simulate(protocol, path, resume=True, progress=progress, threads=threads)
