"""Thermometry of simulated vortex configurations: per frame, per ensemble, and of a whole run.

The run side decides which frames make an ensemble and which domain stands in for the trap
(gpe/run/gas.py); ``thermo`` does the statistical mechanics.

Units: simulation units (xi, hbar/mu) for positions and times; beta in 1/E0, E0 = rho kappa^2/(4 pi).
"""

from __future__ import annotations

import math

import numpy as np

from gpe.errors import VorthermError
from gpe.run.gas import domain_for_trap, gas_configuration
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import RunFile
from thermo.classify import structure_observables
from thermo.data.measured import read_measured
from thermo.dos.build import DosSettings
from thermo.estimate import estimate_ensemble, estimate_single

# ------------------------------------------------------------------------------------------
# thermometry of configurations: one record per frame or shot, and one for an ensemble
# ------------------------------------------------------------------------------------------
#: Core radius of a measured table without one, in units of the domain size (disk radius).
DEFAULT_TABLE_CORE = 0.02
#: Effort of the density-of-states build (Monte Carlo sweeps per replica, bootstrap replicates).
EFFORT = {"quick": (800, 12), "standard": (4000, 40), "thorough": (16000, 60)}


def dos_settings(effort: str):
    """``thermo.dos.model.DosSettings`` for an effort name: quick, standard or thorough."""
    if effort not in EFFORT:
        raise VorthermError(f"effort {effort!r}; accepted: {', '.join(EFFORT)}")
    sweeps, boot = EFFORT[effort]
    return DosSettings(n_sweeps=sweeps, n_boot=boot)


def _estimate_record(est) -> dict:
    """The fields of a ``thermo.estimate.BetaEstimate`` that reports and JSON carry."""
    rec = {
        "beta": est.beta, "beta_ci68": list(est.beta_ci68), "beta_ci95": list(est.beta_ci95),
        "stderr": est.stderr, "method": est.method, "n_plus": est.n_plus,
        "n_minus": est.n_minus, "energy_per_vortex": est.energy_per_vortex,
        "temperature_sign": est.temperature_sign, "prob_negative": est.prob_negative,
        "regime": est.regime, "not_in_equilibrium": est.not_in_equilibrium,
        "range_limited": est.range_limited,
        "verdict": est.verdict,
    }
    for key in ("dipole_moment", "c1", "dipole_fraction", "cluster_fraction", "free_fraction",
                "mean_nn_distance"):
        rec[key] = float(est.clustering[key]) if key in est.clustering else math.nan
    rec["thresholds"] = dict(est.thresholds)
    return rec


def configuration_records(configs, domain, core_radius: float, *, effort: str = "quick",
                          cache_dir=None, seed: int = 0) -> list[dict]:
    """One thermometry record per configuration (microcanonical beta at its energy).

    ``configs`` is a sequence of (positions, signs) in domain units. Fewer than two vortices
    give a record whose ``verdict`` says why beta is undefined (never a silent number).
    """
    settings = dos_settings(effort)
    records = []
    for pos, signs in configs:
        est = estimate_single(pos, signs, domain, core_radius, cache_dir=cache_dir,
                              settings=settings, seed=seed)
        rec = _estimate_record(est)
        rec["n_plus"] = int(np.count_nonzero(np.asarray(signs) > 0))
        rec["n_minus"] = int(np.count_nonzero(np.asarray(signs) < 0))
        if len(signs) >= 2 and not np.isfinite(rec["c1"]):
            obs = structure_observables(pos, signs)
            for key, values in obs.items():
                rec[key] = float(values[0])
        records.append(rec)
    return records


def ensemble_record(configs, domain, core_radius: float, *, effort: str = "quick",
                    cache_dir=None, seed: int = 0) -> dict:
    """Maximum-likelihood beta of an ensemble of configurations, as a record.

    Configurations with fewer than two vortices carry no temperature information and are left
    out (their number is reported as ``left_out_small``).
    """
    usable = [(p, s) for p, s in configs if len(s) >= 2]
    if not usable:
        return {"beta": math.nan, "beta_ci68": [math.nan, math.nan],
                "beta_ci95": [math.nan, math.nan], "n_shots": 0,
                "left_out_small": len(configs), "temperature_sign": "undetermined",
                "prob_negative": math.nan,
                "verdict": "beta undefined: no configuration has two or more vortices"}
    est = estimate_ensemble(usable, domain, core_radius, cache_dir=cache_dir,
                            settings=dos_settings(effort), seed=seed)
    rec = _estimate_record(est)
    rec["n_shots"] = est.n_shots
    rec["left_out_small"] = len(configs) - len(usable)
    return rec


def onset_verdict(times: np.ndarray, records: list[dict], time_unit: str) -> str:
    """Plain-language statement of whether, and from when, the gas is at negative temperature.

    The onset is the earliest output time from which at least 80% of the frames with a defined
    beta have their 95% interval entirely below zero (a frame-by-frame criterion; the
    confidence quoted is the mean posterior probability of beta < 0 over those frames).
    """
    times = np.asarray(times, dtype=float)
    upper = np.array([r["beta_ci95"][1] for r in records], dtype=float)
    pneg = np.array([r.get("prob_negative", math.nan) for r in records], dtype=float)
    defined = np.isfinite(upper)
    if not defined.any():
        return "No frame has two or more vortices inside the fluid: no temperature can be given."
    negative = defined & (upper < 0)
    for k in range(len(records)):
        tail = defined[k:]
        if tail.sum() >= 2 and negative[k:][tail].mean() >= 0.8 and negative[k]:
            conf = float(np.nanmean(pneg[k:][tail]))
            return (f"Negative temperature (clustered vortices) from t = {times[k]:.4g} "
                    f"{time_unit} on: the 95% interval of beta lies below zero in "
                    f"{int(negative[k:].sum())} of {int(tail.sum())} frames from then, mean "
                    f"P(beta < 0) = {100 * conf:.0f}%.")
    n_neg, n_def = int(negative.sum()), int(defined.sum())
    positive = defined & np.array([r["beta_ci95"][0] > 0 for r in records])
    if positive[defined].mean() >= 0.8:
        return (f"Positive temperature: the 95% interval of beta lies above zero in "
                f"{int(positive.sum())} of {n_def} frames; the vortices stay paired, no "
                "negative-temperature clustering.")
    return (f"No sustained negative temperature: {n_neg} of {n_def} frames have beta < 0 at "
            "95% confidence; the sign is not resolved in the rest.")


# ------------------------------------------------------------------------------------------
# a run's frames
# ------------------------------------------------------------------------------------------
def _gas_by_frame(table: np.ndarray, frames, vd) -> dict:
    """Each frame's detected vortices mapped onto the point-vortex domain (gas.py's rules)."""
    out = {}
    for f in sorted(set(frames)):
        rows = table[table["frame"] == f]
        out[f] = gas_configuration(rows["x"], rows["y"], rows["sign"], vd)
    return out


def run_ensemble(run_path, *, at_time: float | None = None,
                 window: tuple[float, float] | None = None, default: str = "last",
                 time_unit: str = "tau"):
    """The vortex configurations of a run's ensemble (:func:`ensemble_frames`), read once.

    ``at_time`` and ``window`` are in ``time_unit``: "tau" (hbar/mu) or "ms". Returns
    (vortex_domain, configurations, protocol); configurations are (positions, signs) pairs in
    domain units.
    """
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        table = run.read_vortices()
    if time_unit not in ("tau", "ms"):
        raise VorthermError(f"time unit {time_unit!r}; accepted: 'tau', 'ms'")
    shown = protocol.units.time_to_ms(times) if time_unit == "ms" else times
    frames = ensemble_frames(shown, at_time=at_time, window=window, default=default,
                             source=str(run_path), unit="ms" if time_unit == "ms" else "hbar/mu")
    vd = domain_for_trap(protocol.trap)
    gas = _gas_by_frame(table, frames, vd)
    return vd, [(gas[f].positions, gas[f].signs) for f in frames], protocol


def ensemble_frames(times: np.ndarray, *, at_time: float | None = None,
                    window: tuple[float, float] | None = None, default: str = "last_third",
                    source: str = "run", unit: str = "hbar/mu") -> list[int]:
    """The frames that form a run's ensemble.

    Parameters
    ----------
    times : output times of the run, in ``unit`` (hbar/mu unless said otherwise).
    at_time : the one frame nearest to this time.
    window : every frame with ``t0 <= t <= t1``.
    default : what neither means: ``"last_third"`` (the last third of the frames, where a
        stirred gas has settled, if ever) or ``"last"`` (the final frame).

    Consecutive frames of one run are correlated; an interval over several of them is
    optimistic (say so when quoting it).
    """
    times = np.asarray(times, dtype=float)
    if len(times) == 0:
        raise VorthermError(f"{source}: the run file holds no frames")
    if window is not None:
        frames = [i for i, t in enumerate(times) if window[0] - 1e-9 <= t <= window[1] + 1e-9]
        if not frames:
            raise VorthermError(f"{source}: no frame in the window {window[0]:.4g}..{window[1]:.4g} "
                                f"{unit} (frames span {times[0]:.4g}..{times[-1]:.4g} {unit})")
        return frames
    if at_time is not None:
        return [int(np.argmin(np.abs(times - at_time)))]
    if default == "last":
        return [len(times) - 1]
    if default == "last_third":
        last = max(1, len(times) // 3)
        return list(range(len(times) - last, len(times)))
    raise VorthermError(f"ensemble default {default!r}; accepted: 'last_third', 'last'")


def _ensemble_of(configs, left_out, vd, frames, *, effort, cache_dir) -> dict:
    rec = ensemble_record(configs, vd.domain, vd.core_radius, effort=effort, cache_dir=cache_dir)
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


def temperature_of_run(run_path, *, frames=None, at_time: float | None = None,
                       window: tuple[float, float] | None = None, ensemble_default: str = "last_third",
                       per_frame: bool = True, effort: str = "quick", cache_dir=None) -> dict:
    """Thermometry of a run file: beta of every chosen frame and of the run's ensemble.

    Parameters
    ----------
    frames : frames that get a per-frame estimate (None, a slice or a list; default all).
    at_time, window, ensemble_default : which frames form the ensemble
        (:func:`ensemble_frames`; times in hbar/mu).
    per_frame : False skips the per-frame estimates (sweeps need only the ensemble).
    effort : density-of-states effort (quick, standard, thorough).

    Returns
    -------
    dict with ``records`` (one per frame, times in the protocol's display unit), ``ensemble``
    (with its ``window`` in that unit), ``onset`` (plain-language verdict), ``time_unit``,
    ``approximation``, ``domain``, and the run's state: ``run_complete``, ``frames_stored``,
    ``frames_planned`` (the protocol's outputs, t = 0 included) and ``incomplete`` (a note
    saying how many frames exist of how many are planned; empty for a complete run): the input
    of gpe/run/report.py.

    Units: times in hbar/mu in, the protocol's display unit out; beta in 1/E0.
    """
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        table = run.read_vortices()
        complete = run.is_complete()
    planned = protocol.evolution.n_outputs + 1
    note = "" if complete else incomplete_note(
        len(times), planned, protocol.display_time(times[-1]) if len(times) else 0.0,
        protocol.display_time(protocol.evolution.n_outputs * protocol.evolution.output_interval),
        protocol.time_unit)
    vd = domain_for_trap(protocol.trap)
    unit = protocol.time_unit
    chosen = select_frames(run_path, frames, len(times)) if per_frame else []
    ens_frames = ensemble_frames(times, at_time=at_time, window=window, default=ensemble_default,
                                 source=str(run_path))
    gas = _gas_by_frame(table, set(chosen) | set(ens_frames), vd)
    records = configuration_records([(gas[f].positions, gas[f].signs) for f in chosen],
                                    vd.domain, vd.core_radius, effort=effort, cache_dir=cache_dir)
    t_user = protocol.display_time(times)
    for rec, f in zip(records, chosen):
        rec.update({"frame": f, "t": float(t_user[f]), "left_out_wall": gas[f].left_out_wall,
                    "left_out_pairs": gas[f].left_out_pairs})
    ensemble = _ensemble_of([(gas[f].positions, gas[f].signs) for f in ens_frames],
                            [(gas[f].left_out_wall, gas[f].left_out_pairs) for f in ens_frames],
                            vd, ens_frames, effort=effort, cache_dir=cache_dir)
    ensemble["window"] = [float(t_user[ens_frames[0]]), float(t_user[ens_frames[-1]])]
    onset = onset_verdict(t_user[chosen], records, unit) if per_frame else ensemble["verdict"]
    return {"kind": "run", "source": str(run_path), "time_key": "t", "time_unit": unit,
            "records": records, "ensemble": ensemble, "onset": onset,
            "approximation": vd.approximate, "domain": vd.domain.kind,
            "run_complete": complete, "frames_stored": len(times), "frames_planned": planned,
            "incomplete": note}


def incomplete_note(n_stored: int, n_planned: int, t_last: float, t_end: float,
                    time_unit: str) -> str:
    """The note every report of an incomplete run carries: how much of the run exists.

    Parameters
    ----------
    n_stored, n_planned : frames in the run file, and frames the protocol plans (its
        ``evolution.n_outputs`` after t = 0, plus the initial frame).
    t_last, t_end : time of the last stored frame and the planned final time.
    time_unit : the unit of both times (the protocol's display unit).

    Units: times in ``time_unit`` (ms for SI protocols, hbar/mu for healing-unit ones).
    """
    return (f"incomplete run: only {n_stored} of {n_planned} planned frames exist (up to t = "
            f"{t_last:.4g} of {t_end:.4g} {time_unit}); the run stopped early or is still being "
            "written, and beta and the verdict describe only the frames that exist "
            "(`vortherm run --resume RUN.h5` continues a stopped run)")


def temperature_of_table(path, *, shape: str | None = None, radius_um: float | None = None,
                         width_um: float | None = None, height_um: float | None = None,
                         core_um: float | None = None, pixel_um: float | None = None,
                         center_px=None, strict: bool = False, effort: str = "quick",
                         cache_dir=None) -> dict:
    """Thermometry of a measured vortex table: beta of every shot and of the ensemble of shots.

    Geometry options override the TOML beside the table (thermo/data/geometry.py); the core
    radius defaults to 2% of the domain size. Returns the same kind of dict as
    :func:`temperature_of_run`, keyed by shot.
    """
    table = read_measured(path, shape=shape, radius_um=radius_um, width_um=width_um,
                          height_um=height_um, core_um=core_um, pixel_um=pixel_um,
                          center_px=center_px, strict=strict)
    core = table.core_radius if table.core_radius is not None else DEFAULT_TABLE_CORE
    configs = table.configurations
    records = configuration_records(configs, table.domain, core, effort=effort, cache_dir=cache_dir)
    for rec, shot in zip(records, table.shot_ids):
        rec["shot"] = shot
    ensemble = ensemble_record(configs, table.domain, core, effort=effort, cache_dir=cache_dir)
    return {"kind": "measured", "source": str(path), "time_key": "shot", "time_unit": "",
            "records": records, "ensemble": ensemble, "onset": ensemble["verdict"],
            "approximation": "", "domain": table.domain.kind,
            "problems": [str(p) for p in table.problems]}


def analyse(run_path, *, time: float | None = None, window=None, effort: str = "quick",
            cache_dir=None) -> dict:
    """The ensemble record of a run at one time (nearest frame) or over a window (sweeps).

    Times in hbar/mu; neither given means the final frame. The same policy as
    :func:`temperature_of_run`, without the per-frame estimates.
    """
    return temperature_of_run(run_path, at_time=time, window=window, ensemble_default="last",
                              per_frame=False, effort=effort, cache_dir=cache_dir)["ensemble"]
