"""The whole job for one protocol: ground state -> stirring -> run file -> vortices.

``simulate`` is the only place where the protocol, the solver, the detector and the run file
meet; each of them stays ignorant of the others. ``analyse`` turns a finished run file into a
temperature verdict through the thermometry back end.

Units: simulation units throughout (xi, hbar/mu, mu); SI only in the summary text.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from gpe.errors import RunFileError, VorthermError

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


def terminal_progress_factory() -> Callable[[RunProgress], None]:
    """A callback that draws a progress bar on standard error."""
    from gpe.cli.progress import ProgressBar

    state: dict = {}

    def draw(p: RunProgress) -> None:
        if "bar" not in state:
            state["bar"] = ProgressBar(p.t_end, label="run", unit=p.time_unit)
        bar = state["bar"]
        bar.update(p.t, extra=f"{p.steps_per_s:,.0f} steps/s  N+={p.n_plus} N-={p.n_minus}")
        if p.t >= p.t_end * (1 - 1e-12):
            bar.close()

    return draw


def _detection_region(protocol, v_static: np.ndarray) -> np.ndarray:
    """Where vortices may be reported: inside the trap walls (or below mu for a harmonic trap)."""
    trap = protocol.trap
    if trap.shape == "harmonic":
        return v_static < 0.9
    return v_static < 0.5 * trap.wall_height


def _detect(psi: np.ndarray, grid, region: np.ndarray, frame: int, t: float) -> np.ndarray:
    from gpe.analysis.vortices import VORTEX_DTYPE, find_vortices

    det = find_vortices(psi, grid.x, grid.y, threshold=DETECT_THRESHOLD, region=region)
    rows = np.empty(len(det), dtype=VORTEX_DTYPE)
    rows["frame"] = frame
    rows["t"] = t
    rows["x"] = det.x
    rows["y"] = det.y
    rows["sign"] = det.sign
    rows["track"] = -1
    return rows


def _initial_state(protocol, v_static, beams, threads):
    """Ground state with the beams at their t = 0 heights and positions, plus seeded noise."""
    from gpe.field.solver import find_ground_state

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
        vortices=vortices, threads=threads, **kwargs)
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
             threads: int | None = None) -> Path:
    """Run ``protocol`` and write (or, with ``resume``, complete) its run file.

    Parameters
    ----------
    protocol : gpe.setup.protocol.Protocol
    out_path : path of the run file
    resume : continue from the run file's checkpoint when it exists and is incomplete;
        a complete run file is left untouched.
    progress : callback receiving a :class:`RunProgress` after every output.
    threads : FFT threads (default: all cores).

    Returns
    -------
    pathlib.Path of the run file.
    """
    from gpe.run.runfile import RunFile

    out_path = Path(out_path)
    grid = protocol.grid
    ev = protocol.evolution
    v_static = protocol.build_trap()
    beams = protocol.build_beams()
    region = _detection_region(protocol, v_static)
    t_end = ev.n_outputs * ev.output_interval
    time_unit = "ms" if protocol.unit_system == "SI" else "hbar/mu"
    to_user = protocol.units.time_s * 1e3 if time_unit == "ms" else 1.0

    if resume and out_path.exists():
        run = RunFile.open(out_path, "r+")
        if run.is_complete():
            run.close()
            return out_path
        ck = run.read_checkpoint()
        psi0, t0, step0, frame0 = ck.psi, ck.t, ck.step, ck.frame
        mu_run = run.attrs_float("mu_run")
        run.truncate_to_frame(frame0)
        solver = _make_solver(protocol, v_static, beams, mu_run, psi0, t0, step0, threads)
    else:
        gs, psi0 = _initial_state(protocol, v_static, beams, threads)
        if not gs.converged:
            import warnings
            warnings.warn(f"{protocol.source_name}: ground state not converged to the tolerance "
                          f"after {gs.steps} steps (mu = {gs.mu:.6g}); raise "
                          "ground_state.max_steps or dt", stacklevel=2)
        mu_run = gs.mu
        # the solver checks the time step against the potential: fail before writing a file
        solver = _make_solver(protocol, v_static, beams, mu_run, psi0, 0.0, 0, threads)
        out_path.parent.mkdir(parents=True, exist_ok=True)
        tmp = out_path.with_name(out_path.name + ".part")
        tmp.unlink(missing_ok=True)  # left by a run killed before its first checkpoint
        run = RunFile.create(tmp, protocol=protocol, static_potential=v_static,
                             ground_state_psi=gs.psi, extra_attrs={"mu_run": mu_run,
                                                                   "ground_state_steps": gs.steps})
        t0, step0, frame0 = 0.0, 0, 0
        _write_frame(run, protocol, psi0, 0.0, v_static, beams, grid, region, frame=0)
        run.write_checkpoint(psi0, 0.0, 0, 1)
        run.close()
        tmp.replace(out_path)
        run = RunFile.open(out_path, "r+")
        frame0 = 1

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
                run.write_checkpoint(solver.psi, solver.t, solver.step_count, frame)
                since_ck, last_ck_wall = 0, time.monotonic()
            if progress is not None:
                elapsed = time.perf_counter() - start_wall
                rate = (solver.step_count - start_steps) / elapsed if elapsed > 0 else 0.0
                progress(RunProgress(solver.t * to_user, t_end * to_user, solver.step_count,
                                     rate, int(np.count_nonzero(rows["sign"] > 0)),
                                     int(np.count_nonzero(rows["sign"] < 0)), time_unit))
        _finish_tracks(run)
        run.mark_complete()
    finally:
        run.close()
    return out_path


def _make_solver(protocol, v_static, beams, mu_run, psi0, t0, step0, threads):
    from gpe.field.solver import Solver, SolverSettings

    ev = protocol.evolution
    settings = SolverSettings(dt=ev.dt, gamma=ev.gamma, mu=mu_run, g=1.0,
                              precision=ev.precision, threads=threads)
    return Solver(protocol.grid, v_static, beams, settings, psi0, t0=t0, step0=step0)


def _write_frame(run, protocol, psi, t, v_static, beams, grid, region, frame) -> np.ndarray:
    from gpe.analysis import diagnostics

    v_beam = beams.potential(t, grid) if beams.n_beams else None
    rows = _detect(np.asarray(psi), grid, region, frame, t)
    state = diagnostics.FrameState(np.asarray(psi), t, grid, v_static, v_beam, 1.0,
                                   protocol.units, rows)
    run.append_frame(t, psi, diagnostics.evaluate(state), vortices=rows,
                     units=diagnostics.units())
    return rows


def _finish_tracks(run) -> None:
    """Link the vortices of all frames into tracks once the run is complete."""
    from gpe.analysis.vortices import track_vortices

    table = run.read_vortices()
    if table.size:
        run.replace_vortices(track_vortices(table, run.frame_times()))


# ------------------------------------------------------------------------------------------
# reading a run back: completeness, summary, thermometry
# ------------------------------------------------------------------------------------------
def protocol_of(run) -> object:
    """Rebuild the :class:`~gpe.setup.protocol.Protocol` stored verbatim in an open run file."""
    import warnings

    from gpe.setup.protocol import ProtocolWarning, parse_protocol

    with warnings.catch_warnings():  # its warnings were shown when the run was started
        warnings.simplefilter("ignore", ProtocolWarning)
        return parse_protocol(run.protocol_text(), source=run.protocol_source(),
                              overrides=run.protocol_overrides(),
                              base_dir=Path(run.protocol_source()).parent)


def is_complete(run_path) -> bool:
    """True when ``run_path`` is a readable run file whose run reached its final time."""
    from gpe.run.runfile import RunFile

    path = Path(run_path)
    if not path.exists():
        return False
    try:
        with RunFile.open(path, "r") as run:
            return bool(run.is_complete())
    except (RunFileError, OSError):
        return False


def simulate_resume(run_path, *, progress=None, threads=None) -> Path:
    """Continue the interrupted run in ``run_path`` from its last checkpoint."""
    from gpe.run.runfile import RunFile

    path = Path(run_path)
    if not path.exists():
        raise RunFileError(f"{path}: no such run file to resume; start it with `vortherm run "
                           "PROTOCOL.toml`")
    with RunFile.open(path, "r") as run:
        if run.is_complete():
            return path
        protocol = protocol_of(run)
    return simulate(protocol, path, resume=True, progress=progress, threads=threads)


def summary_text(run_path) -> str:
    """Closing summary of a run: atoms, mu, healing length, sound speed, final vortex count."""
    from gpe.run.runfile import RunFile

    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = run.frame_times()
        table = run.read_vortices()
        obs = run.read_observables()
    u = protocol.units
    last = table[table["frame"] == len(times) - 1] if len(times) else table[:0]
    n_plus = int(np.count_nonzero(last["sign"] > 0))
    n_minus = int(np.count_nonzero(last["sign"] < 0))
    mu_solved = float(obs["mu"][0]) if "mu" in obs and len(obs["mu"]) else math.nan
    lines = [
        f"run file: {run_path}",
        f"  atoms N = {protocol.atoms.number:.4g}; species {protocol.atoms.species}",
        f"  chemical potential mu = {u.energy_J / 1.380649e-23 * 1e9:.4g} nK "
        f"(= 1 mu; solved ground state {mu_solved:.5g} mu)",
        f"  healing length xi = {u.length_m * 1e6:.4g} um (= 1 xi); time unit hbar/mu = "
        f"{u.time_s * 1e3:.4g} ms",
        f"  sound speed c = {u.speed_m_s * 1e3:.4g} mm/s (= 1 c)",
        f"  simulated {times[-1] * u.time_s * 1e3 if len(times) else 0:.4g} ms = "
        f"{times[-1] if len(times) else 0:.4g} hbar/mu in {len(times)} frames",
        f"  vortices at the end: N+ = {n_plus}, N- = {n_minus}",
    ]
    return "\n".join(lines)


def select_frames(run_path, frames, n_frames: int, default: str = "all") -> list[int]:
    """Frame indices chosen by ``frames`` (None, a slice or a list; negative count from the end).

    ``default`` says what None means: "all" frames or the "last" one. Raises a clear error for
    an empty run file or an index out of range.
    """
    if n_frames == 0:
        raise RunFileError(f"{run_path}: the run file holds no snapshots (no frames to use)")
    if frames is None:
        chosen = list(range(n_frames)) if default == "all" else [n_frames - 1]
    elif isinstance(frames, slice):
        chosen = list(range(n_frames))[frames]
    else:
        chosen = list(frames)
    for f in chosen:
        if not -n_frames <= f < n_frames:
            raise VorthermError(f"{run_path}: frame {f} out of range; the run has frames "
                                f"0..{n_frames - 1} (negative numbers count from the end)")
    return sorted({f % n_frames for f in chosen})


def run_configurations(run_path, frames=None):
    """Vortex configurations of a run on its point-vortex domain, one per frame.

    ``frames`` as for :func:`select_frames` (default: all, in order). Returns (vortex_domain,
    times, configurations, left_out, protocol) where configurations are (positions, signs)
    pairs in domain units and left_out counts (wall, pairs) per frame.
    """
    from gpe.run.runfile import RunFile
    from gpe.run.thermometry import domain_for_trap, gas_configuration

    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        table = run.read_vortices()
    vd = domain_for_trap(protocol.trap)
    configs, left_out, sel_times = [], [], []
    for f in select_frames(run_path, frames, len(times)):
        rows = table[table["frame"] == f]
        gas = gas_configuration(rows["x"], rows["y"], rows["sign"], vd)
        configs.append((gas.positions, gas.signs))
        left_out.append((gas.left_out_wall, gas.left_out_pairs))
        sel_times.append(times[f])
    return vd, np.asarray(sel_times), configs, left_out, protocol


def analyse(run_path, *, time: float | None = None, window=None, effort: str = "quick",
            cache_dir=None) -> dict:
    """Thermometry of a run at one time (nearest frame) or over a window of frames.

    Parameters
    ----------
    time : simulation time (hbar/mu) of the frame to use; default the last frame.
    window : (t0, t1) in hbar/mu: all frames in it form one ensemble (consecutive frames are
        correlated, so the interval is optimistic; say so when quoting it).

    Returns a dict with beta, beta_ci68, beta_ci95, n_plus, n_minus, energy_per_vortex,
    dipole_fraction, cluster_fraction, free_fraction, prob_negative, verdict, ...
    """
    from gpe.run.runfile import RunFile
    from gpe.run.thermometry import ensemble_record

    with RunFile.open(run_path, "r") as run:
        times = np.asarray(run.frame_times())
    if window is not None:
        frames = [i for i, t in enumerate(times) if window[0] - 1e-9 <= t <= window[1] + 1e-9]
        if not frames:
            raise VorthermError(f"{run_path}: no frame in the window {window[0]:.4g}.."
                                f"{window[1]:.4g} hbar/mu (frames span {times[0]:.4g}.."
                                f"{times[-1]:.4g})")
    elif time is not None:
        frames = [int(np.argmin(np.abs(times - time)))]
    else:
        frames = [len(times) - 1]
    vd, _, configs, left_out, _ = run_configurations(run_path, frames)
    rec = ensemble_record(configs, vd.domain, vd.core_radius, effort=effort,
                          cache_dir=cache_dir)
    rec.update({
        "n_plus": float(np.mean([np.sum(s > 0) for _, s in configs])),
        "n_minus": float(np.mean([np.sum(s < 0) for _, s in configs])),
        "frames": len(frames),
        "left_out_wall": int(sum(w for w, _ in left_out)),
        "left_out_pairs": int(sum(p for _, p in left_out)),
        "approximation": vd.approximate,
    })
    for key in ("dipole_fraction", "cluster_fraction", "free_fraction", "energy_per_vortex"):
        rec.setdefault(key, math.nan)
    return rec
