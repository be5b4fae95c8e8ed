"""Thermometry of vortex configurations: per frame or shot, per ensemble, with its window,
its correlations and its systematics.

The run side decides which frames make an ensemble (gpe/run/frames.py: by default the frames
after the last beam has switched off), how correlated they are (``series_weights`` there) and
which domain stands in for the trap (gpe/run/gas.py); ``thermo`` does the statistical
mechanics (thermo/estimate.py). Every ensemble record also carries a systematics budget
(:func:`systematics`): the shift of beta~ N when the modelling choices (core radius, where the
wall is taken to be, the wall cut) are varied over stated ranges.

Units: simulation units (xi, hbar/mu) for positions and times; beta in 1/E0, E0 = rho kappa^2/(4 pi);
beta~ N dimensionless.
"""

from __future__ import annotations

import math
from pathlib import Path
import numpy as np

from gpe.errors import VorthermError
from gpe.run.frames import RunSeries, drive_end, quanta
from gpe.run.gas import CORE_RADIUS_XI, WALL_LAYER_XI
from gpe.run.reading import select_frames
from gpe.run.rotating import configuration_rotation, ensemble_rotation, impulse_weights
from thermo.classify import structure_observables
from thermo.data.compare import shot_statistics
from thermo.data.measured import read_measured
from thermo.data.units import SeriesSample, mean_interval, series_weights
from thermo.dos.build import DosSettings
from thermo.estimate import estimate_ensemble, estimate_single

# ------------------------------------------------------------------------------------------
# thermometry of configurations: one record per frame or shot, and one for an ensemble
# ------------------------------------------------------------------------------------------
#: Effort of the density-of-states build (Monte Carlo sweeps per replica, bootstrap replicates).
EFFORT = {"quick": (800, 12), "standard": (4000, 40), "thorough": (16000, 60)}
#: The effort used when none is asked for (see README: why it is enough)
DEFAULT_EFFORT = "quick"
#: The least effort of an ensemble fitted through an imaging model: its reference curves are
#: imaged subsets of the density of states' samples, whose error at quick effort was about as
#: large as the statistical one (4+4 gas, 60 shots at beta~N = -3: a quick table 0.19 off, 2.6
#: of its stated errors, coverage 23/30; standard: 0.01 off, 28/30), see README
IMAGING_EFFORT = "standard"
#: Ranges over which the modelling choices are varied for the systematics budget, as factors
#: of the central value: core radius a (0.5 xi in a run), the wall's depleted layer (1 xi in a
#: run; for a measured table the domain radius is varied by DOMAIN_SCALES instead), the wall cut
#: (vortices within WALL_CUTS x a of the wall left out; 1 is the hard-core limit).
CORE_FACTORS = (0.5, 2.0)
WALL_LAYERS_XI = (0.5, 2.0)
DOMAIN_SCALES = (0.98, 1.02)
WALL_CUTS = (2.0, 3.0)


def dos_settings(effort: str):
    """``thermo.dos.build.DosSettings`` for an effort name: quick, standard or thorough."""
    if effort not in EFFORT:
        raise VorthermError(f"effort {effort!r}; accepted: {', '.join(EFFORT)}")
    sweeps, boot = EFFORT[effort]
    return DosSettings(n_sweeps=sweeps, n_boot=boot)


def _estimate_record(est) -> dict:
    """The fields of a ``thermo.estimate.BetaEstimate`` that reports and JSON carry."""
    rec = {
        "beta": est.beta, "beta_ci68": list(est.beta_ci68), "beta_ci95": list(est.beta_ci95),
        "beta_n": est.beta_n, "beta_n_ci68": list(est.beta_n_ci68),
        "beta_n_ci95": list(est.beta_n_ci95), "bound": est.bound,
        "stderr": est.stderr, "dos_error": est.dos_error, "method": est.method,
        "n_plus": est.n_plus, "n_minus": est.n_minus,
        "energy_per_vortex": est.energy_per_vortex,
        "temperature_sign": est.temperature_sign, "prob_negative": est.prob_negative,
        "regime": est.regime, "not_in_equilibrium": est.not_in_equilibrium,
        "reach": est.reach, "verdict": est.verdict,
    }
    for key in ("dipole_moment", "c1", "dipole_fraction", "cluster_fraction", "free_fraction",
                "mean_nn_distance"):
        rec[key] = float(est.clustering[key]) if key in est.clustering else math.nan
    rec["thresholds"] = dict(est.thresholds)
    return rec


def configuration_records(configs, domain, core_radius: float, *, effort: str = DEFAULT_EFFORT,
                          cache_dir=None, progress=None, rotating: bool = False) -> list[dict]:
    """One thermometry record per configuration (microcanonical beta at its energy).

    ``configs`` is a sequence of (positions, signs) in domain units. Fewer than two vortices
    give a record whose ``verdict`` says why beta is undefined (never a silent number).
    ``progress(done, total)`` is told the sweeps of every density-of-states build.
    ``rotating`` adds omega (gpe.run.rotating.configuration_rotation).
    """
    settings = dos_settings(effort)
    records = []
    for pos, signs in configs:
        est = estimate_single(pos, signs, domain, core_radius, cache_dir=cache_dir,
                              settings=settings, progress=progress)
        rec = _estimate_record(est)
        rec["n_plus"] = int(np.count_nonzero(np.asarray(signs) > 0))
        rec["n_minus"] = int(np.count_nonzero(np.asarray(signs) < 0))
        if len(signs) >= 2 and not np.isfinite(rec["c1"]):
            obs = structure_observables(pos, signs)
            for key, values in obs.items():
                rec[key] = float(values[0])
        if rotating:
            rec.update(configuration_rotation(pos, signs, domain, core_radius, effort=effort,
                                              cache_dir=cache_dir, progress=progress))
        records.append(rec)
    return records


def _undefined_ensemble(n_configs: int, why: str) -> dict:
    nan = math.nan
    return {"beta": nan, "beta_ci68": [nan, nan], "beta_ci95": [nan, nan], "beta_n": nan,
            "beta_n_ci68": [nan, nan], "beta_n_ci95": [nan, nan], "bound": None,
            "n_shots": 0, "n_effective": 0.0, "groups": [], "left_out_small": n_configs,
            "temperature_sign": "undetermined", "prob_negative": nan, "verdict": why}


def ensemble_record(configs, domain, core_radius: float, *, weights=None,
                    common: str = "beta_n", imaging=None,
                    effort: str = DEFAULT_EFFORT, cache_dir=None, progress=None,
                    rotating: bool = False, rotating_weights=None) -> dict:
    """beta~ N shared by an ensemble of configurations (thermo.estimate), as a record.

    Configurations with fewer than two vortices carry no temperature information and are left
    out (their number is reported as ``left_out_small``). ``weights`` (one per configuration,
    in (0, 1]) count correlated frames as fewer independent ones. ``rotating`` adds omega
    (gpe.run.rotating.ensemble_rotation, with ``rotating_weights`` or else ``weights``).
    """
    keep = [i for i, (_, s) in enumerate(configs) if len(s) >= 2]
    if not keep:
        return _undefined_ensemble(len(configs), "beta undefined: no configuration has two or "
                                   "more vortices")
    w = None if weights is None else [float(weights[i]) for i in keep]
    order = list(EFFORT)
    if imaging is not None and order.index(effort) < order.index(IMAGING_EFFORT):
        effort = IMAGING_EFFORT        # see IMAGING_EFFORT: imaged curves need more samples
    est = estimate_ensemble([configs[i] for i in keep], domain, core_radius, weights=w,
                            common=common, imaging=imaging, cache_dir=cache_dir,
                            settings=dos_settings(effort), progress=progress)
    rec = _estimate_record(est)
    rec.update({"n_shots": est.n_shots, "n_effective": est.n_effective, "common": est.common,
                "effort": effort,
                "groups": [{"n_plus": a, "n_minus": b, "shots": n} for a, b, n in est.groups],
                "left_out_small": len(configs) - len(keep), "imaging": est.imaging})
    if rotating:
        rec.update(ensemble_rotation(configs, domain, core_radius, common=common, effort=effort,
                                     weights=rotating_weights if rotating_weights is not None
                                     else weights, cache_dir=cache_dir, progress=progress))
    return rec


def systematics(central: dict, variations: dict) -> dict:
    """The systematics budget of an ensemble: shifts of beta~ N, per source and in total.

    ``variations`` maps a source name to ``(values, records)``: the values it was varied to
    and the ensemble record of each. A source's shift is (min(0, lowest - central),
    max(0, highest - central)) over its values; the total adds the sources' shifts in
    quadrature on each side. A variation whose estimate is a bound or undefined is listed and
    left out of the shift.

    Units: shifts in beta~ N (dimensionless); values in the source's unit.
    """
    out = {}
    c = central.get("beta_n", math.nan)
    down2 = up2 = 0.0
    for name, (values, records) in variations.items():
        got = [r.get("beta_n", math.nan) for r in records]
        usable = [g for g, r in zip(got, records) if math.isfinite(g) and not r.get("bound")]
        lo = min([0.0] + [g - c for g in usable]) if math.isfinite(c) else math.nan
        hi = max([0.0] + [g - c for g in usable]) if math.isfinite(c) else math.nan
        out[name] = {"values": list(values), "beta_n": got, "shift": [lo, hi],
                     "left_out": len(got) - len(usable)}
        if math.isfinite(lo):
            down2 += lo * lo
            up2 += hi * hi
    out["total"] = [-math.sqrt(down2), math.sqrt(up2)] if math.isfinite(c) else [math.nan] * 2
    return out


def onset_verdict(times: np.ndarray, records: list[dict], time_unit: str,
                  after: float | None = None) -> str:
    """Plain-language statement of whether, and from when, the gas is at negative temperature.

    The onset is the earliest output time (at or after ``after``, the end of the drive) from
    which at least 80% of the frames with a defined beta have their 95% interval entirely below
    zero; the onset frame itself must be a measurement, not a bound (a frame whose energy lies
    beyond the widest ladder says only that beta is below something). Frames while the beams
    are on are not used: a driven gas is not in equilibrium.
    """
    times = np.asarray(times, dtype=float)
    use = np.ones(len(records), bool) if after is None else times >= after - 1e-9
    upper = np.array([r["beta_ci95"][1] for r in records], dtype=float)
    lower = np.array([r["beta_ci95"][0] for r in records], dtype=float)
    pneg = np.array([r.get("prob_negative", math.nan) for r in records], dtype=float)
    measured = np.array([not r.get("bound") for r in records])
    defined = np.isfinite(upper) & use
    driven = "" if after is None else f" (frames from t = {after:.4g} {time_unit} on, after the drive)"
    if not defined.any():
        return ("No frame" + driven + " has two or more vortices inside the fluid: no "
                "temperature can be given.")
    negative = defined & (upper < 0)
    for k in range(len(records)):
        tail = defined[k:]
        if tail.sum() >= 2 and negative[k:][tail].mean() >= 0.8 and negative[k] and measured[k]:
            conf = float(np.nanmean(pneg[k:][tail]))
            return (f"Negative temperature (clustered vortices) from t = {times[k]:.4g} "
                    f"{time_unit} on{driven}: the 95% interval of beta lies below zero in "
                    f"{int(negative[k:].sum())} of {int(tail.sum())} frames from then, mean "
                    f"P(beta < 0) = {100 * conf:.0f}%.")
    n_neg, n_def = int(negative.sum()), int(defined.sum())
    positive = defined & (lower > 0)
    if positive[defined].mean() >= 0.8:
        return (f"Positive temperature{driven}: the 95% interval of beta lies above zero in "
                f"{int(positive.sum())} of {n_def} frames; the vortices stay paired, no "
                "negative-temperature clustering.")
    return (f"No sustained negative temperature{driven}: {n_neg} of {n_def} frames have beta "
            "< 0 at 95% confidence; the sign is not resolved in the rest.")


def run_ensemble(run_path, *, at_time: float | None = None,
                 window: tuple[float, float] | None = None, default: str = "after_drive",
                 time_unit: str = "tau"):
    """The vortex configurations of a run's ensemble (gpe.run.frames.ensemble_frames), read once.

    ``at_time`` and ``window`` are in ``time_unit``: "tau" (hbar/mu) or "ms". Returns
    (vortex_domain, configurations, protocol); configurations are (positions, signs) pairs in
    domain units.
    """
    series = RunSeries.read(run_path)
    frames = series.frames(at_time=at_time, window=window, default=default, time_unit=time_unit)
    vd, gas = series.gas(frames)
    return vd, [(gas[f].positions, gas[f].signs) for f in frames], series.protocol


#: Per-frame quantities averaged over an ensemble's frames, with the range their interval is
#: cut to (counts >= 0, fractions in [0, 1]); units in thermo.quantities.QUANTITIES.
FRAME_QUANTITIES = {"n_plus": (0.0, math.inf), "n_minus": (0.0, math.inf),
                    "dipole_fraction": (0.0, 1.0), "cluster_fraction": (0.0, 1.0),
                    "free_fraction": (0.0, 1.0), "energy_per_vortex": (-math.inf, math.inf)}


def frame_means(runs_configs, domain) -> dict:
    """Means over the frames of several runs with 95% intervals that count each run's frames as
    the correlated series they are and the runs as independent (thermo.data.units).

    ``runs_configs`` is one list of (positions, signs) per run, in time order. Returns
    {quantity: {"mean", "lo95", "hi95", "n_effective"}} for FRAME_QUANTITIES; frames where a
    quantity is undefined (no vortex, fewer than two) are left out of it.

    Units: as thermo.quantities.QUANTITIES.
    """
    stats_, series = {q: [] for q in FRAME_QUANTITIES}, []
    for k, configs in enumerate(runs_configs):
        if not configs:
            continue
        st = shot_statistics(configs, domain)
        for q in FRAME_QUANTITIES:
            stats_[q].append(st[q])
        series.append(np.full(len(configs), k))
    out = {}
    ids = np.concatenate(series) if series else np.zeros(0, dtype=int)
    for q, (lo_lim, hi_lim) in FRAME_QUANTITIES.items():
        values = np.concatenate(stats_[q]) if stats_[q] else np.zeros(0)
        sample = SeriesSample.of(values, ids)
        m, lo, hi = mean_interval(sample, lo_lim, hi_lim)
        out[q] = {"mean": m, "lo95": lo, "hi95": hi, "n_effective": sample.n_effective}
    return out


def _pooled(series_frames, *, common, effort, cache_dir, core_xi=CORE_RADIUS_XI,
            wall_xi=WALL_LAYER_XI, wall_cut=1.0, progress=None, means=False,
            rotating=False) -> dict:
    """The ensemble of several runs' frames: each run a correlated series, runs independent.

    ``n_plus``/``n_minus`` are the mean vortex numbers over the frames (the fit's groups are in
    ``groups``)."""
    configs, weights, taus, left_wall, left_pairs, vd = [], [], [], 0, 0, None
    rot_weights = []
    per_run = []
    for series, frames in series_frames:
        vd, gas = series.gas(frames, core_xi=core_xi, wall_xi=wall_xi, wall_cut=wall_cut)
        cs = [(gas[f].positions, gas[f].signs) for f in frames]
        per_run.append(cs)
        w, tau = series_weights(cs, vd.domain)
        configs += cs
        weights += list(w)
        rot_weights += impulse_weights(cs, vd.domain, w) if rotating else []
        taus.append(tau)
        left_wall += sum(gas[f].left_out_wall for f in frames)
        left_pairs += sum(gas[f].left_out_pairs for f in frames)
    rec = ensemble_record(configs, vd.domain, vd.core_radius, weights=weights, common=common,
                          effort=effort, cache_dir=cache_dir, progress=progress,
                          rotating=rotating, rotating_weights=rot_weights or None)
    rec.update({"n_plus": float(np.mean([np.sum(s > 0) for _, s in configs])),
                "n_minus": float(np.mean([np.sum(s < 0) for _, s in configs])),
                "frames": len(configs), "runs": len(series_frames), "tau_frames": taus,
                "left_out_wall": left_wall, "left_out_pairs": left_pairs,
                "approximation": vd.approximate})
    if means:   # the central record only: the systematics' variations need beta alone
        # the ensemble's quantities are means over all its frames (runs independent series)
        rec["frame_means"] = frame_means(per_run, vd.domain)
        rec.update({q: v["mean"] for q, v in rec["frame_means"].items()})
    return rec


def _with_systematics(rec, compute, *, choices) -> dict:
    """Add ``systematics`` to an ensemble record: ``compute(**choice)`` for every variation."""
    variations = {}
    for name, (values, key, central_value) in choices.items():
        records = []
        for v in values:
            try:
                records.append(compute(**{key: v}))
            except VorthermError as exc:     # e.g. no frame left with two vortices
                records.append({"beta_n": math.nan, "verdict": str(exc)})
        variations[name] = ([central_value] + list(values), [rec] + records)
    rec["systematics"] = systematics(rec, {k: (v[0][1:], v[1][1:]) for k, v in variations.items()})
    for name, (values, _, central_value) in choices.items():
        rec["systematics"][name]["central"] = central_value
    return rec


def _run_choices() -> dict:
    return {"core_radius_xi": ([CORE_RADIUS_XI * f for f in CORE_FACTORS], "core_xi",
                               CORE_RADIUS_XI),
            "wall_layer_xi": (list(WALL_LAYERS_XI), "wall_xi", WALL_LAYER_XI),
            "wall_cut": (list(WALL_CUTS), "wall_cut", 1.0)}


def pooled_ensemble(run_paths, *, time: float | None = None, window=None,
                    default: str = "after_drive", time_unit: str = "tau",
                    common: str = "beta_n", effort: str = DEFAULT_EFFORT, cache_dir=None,
                    systematics: bool = False, progress=None, rotating: bool = False) -> dict:
    """The ensemble record of one or more runs (e.g. the seeds of one sweep point).

    Every run is an independent series; the frames of one run are correlated and weighted by
    thermo.data.units.series_weights. Times in ``time_unit`` ("tau" = hbar/mu, or "ms"); neither
    ``time`` nor ``window`` means gpe.run.frames.ensemble_frames's default.
    ``progress(done, total)`` is told the sweeps of every density-of-states build.
    ``rotating`` adds omega to the central record (gpe.run.rotating; not to the systematics).
    """
    chosen = []
    for path in run_paths:
        series = RunSeries.read(path)
        chosen.append((series, series.frames(at_time=time, window=window, default=default,
                                             time_unit=time_unit)))

    def compute(**choice):
        return _pooled(chosen, common=common, effort=effort, cache_dir=cache_dir,
                       progress=progress, **choice)

    rec = compute(means=True, rotating=rotating)
    first, frames = chosen[0]
    shown = first.protocol.display_time(first.times)
    rec["window"] = [float(shown[frames[0]]), float(shown[frames[-1]])]
    if systematics and math.isfinite(rec.get("beta_n", math.nan)):
        rec = _with_systematics(rec, compute, choices=_run_choices())
    return rec


def temperature_of_run(run_path, *, frames=None, at_time: float | None = None,
                       window: tuple[float, float] | None = None, time_unit: str = "tau",
                       ensemble_default: str = "after_drive", per_frame: bool = True,
                       common: str = "beta_n", effort: str = DEFAULT_EFFORT, cache_dir=None,
                       systematics: bool = True, with_ensemble: bool = True,
                       progress=None, rotating: bool = False) -> dict:
    """Thermometry of a run file: beta of every chosen frame and of the run's ensemble.

    Parameters
    ----------
    frames : frames that get a per-frame estimate (None, a slice or a list; default all).
    at_time, window, ensemble_default : which frames form the ensemble
        (gpe.run.frames.ensemble_frames; times in ``time_unit``: "tau" = hbar/mu, or "ms").
    per_frame : False skips the per-frame estimates (sweeps need only the ensemble).
    common : what the vortex-number groups of the ensemble share ("beta_n" or "beta").
    effort : density-of-states effort (quick, standard, thorough).
    systematics : add the systematics budget to the ensemble (re-estimates it six times).
    with_ensemble : False leaves the ensemble out (:func:`temperature_of_runs` pools it).
    progress : ``progress(done, total)`` told the Monte Carlo sweeps of every
        density-of-states build (e.g. gpe.cli.progress.dos_progress()); None: silent.
    rotating : add the rotation frequency omega to every record and to the ensemble
        (gpe.run.rotating; the ensemble gets its mean-field comparison too).

    Returns
    -------
    dict with ``records`` (one per frame, times in the protocol's display unit), ``ensemble``
    (with its ``window`` in that unit, ``n_effective``, ``tau_frames``, ``groups``,
    ``systematics``), ``onset`` (plain-language verdict), ``time_unit``, ``drive_end``,
    ``approximation``, ``domain``, and the run's state: ``run_complete``, ``frames_stored``,
    ``frames_planned`` (the protocol's outputs, t = 0 included) and ``incomplete`` (a note
    saying how many frames exist of how many are planned; empty for a complete run): the input
    of gpe/run/report.py.

    Units: times in ``time_unit`` in, the protocol's display unit out; beta in 1/E0.
    """
    series = RunSeries.read(run_path)
    protocol, times = series.protocol, series.times
    planned = protocol.evolution.n_outputs + 1
    note = "" if series.complete else incomplete_note(
        len(times), planned, protocol.display_time(times[-1]) if len(times) else 0.0,
        protocol.display_time(protocol.evolution.n_outputs * protocol.evolution.output_interval),
        protocol.time_unit)
    unit = protocol.time_unit
    chosen = select_frames(run_path, frames, len(times)) if per_frame else []
    ens_frames = series.frames(at_time=at_time, window=window, default=ensemble_default,
                               time_unit=time_unit)
    vd, gas = series.gas(set(chosen) | set(ens_frames), one_circulation=False)
    # one domain per frame (a hole may gain or lose quanta between frames)
    domains = series.frame_domains(chosen, vd, CORE_RADIUS_XI)
    records = [None] * len(chosen)
    for dom in dict.fromkeys(domains.values()):
        idx = [i for i, f in enumerate(chosen) if domains[f] == dom]
        recs = configuration_records([(gas[chosen[i]].positions, gas[chosen[i]].signs)
                                      for i in idx], dom, vd.core_radius, effort=effort,
                                     cache_dir=cache_dir, progress=progress,
                                     rotating=rotating)
        for i, rec in zip(idx, recs):
            records[i] = rec
    t_user = protocol.display_time(times)
    for rec, f in zip(records, chosen):
        rec.update({"frame": f, "t": float(t_user[f]), "left_out_wall": gas[f].left_out_wall,
                    "left_out_pairs": gas[f].left_out_pairs})
    ensemble = pooled_ensemble([run_path], window=window, time=at_time,
                               default=ensemble_default, time_unit=time_unit, common=common,
                               effort=effort, cache_dir=cache_dir, systematics=systematics,
                               progress=progress, rotating=rotating) if with_ensemble else {}
    end, why = drive_end(protocol)
    after = None if end is None else float(protocol.display_time(end))
    onset = (onset_verdict(t_user[chosen], records, unit, after=after) if per_frame
             else ensemble.get("verdict", ""))
    return {"kind": "run", "source": str(run_path), "time_key": "t", "time_unit": unit,
            "records": records, "ensemble": ensemble, "onset": onset,
            "drive_end": after, "drive_note": why,
            "approximation": vd.approximate, "domain": vd.domain.kind,
            "hole_windings": sorted({quanta(d.hole_circulation) for d in domains.values()})
            if vd.domain.hole_circulation else [],
            "run_complete": series.complete, "frames_stored": len(times),
            "frames_planned": planned, "incomplete": note}


def temperature_of_runs(run_paths, *, frames=None, window=None, time_unit: str = "tau",
                        ensemble_default: str = "after_drive", common: str = "beta_n",
                        effort: str = DEFAULT_EFFORT, cache_dir=None,
                        systematics: bool = True, progress=None, rotating: bool = False) -> dict:
    """Thermometry of several runs (e.g. the seeds of one protocol): every run's frames, and
    one ensemble pooling the runs as independent series (:func:`pooled_ensemble`).

    One run gives exactly :func:`temperature_of_run`. With several, every record carries its
    ``run`` (the file's stem), the verdict is given per run, and the run-state keys describe
    the first run, with ``incomplete`` naming every incomplete one.

    Units: as :func:`temperature_of_run`.
    """
    paths = list(run_paths)
    if len(paths) == 1:
        return temperature_of_run(paths[0], frames=frames, window=window, time_unit=time_unit,
                                  ensemble_default=ensemble_default, common=common,
                                  effort=effort, cache_dir=cache_dir, systematics=systematics,
                                  progress=progress, rotating=rotating)
    results = [temperature_of_run(p, frames=frames, window=window, time_unit=time_unit,
                                  ensemble_default=ensemble_default, effort=effort,
                                  cache_dir=cache_dir, with_ensemble=False, progress=progress,
                                  rotating=rotating)
               for p in paths]
    out = dict(results[0])
    out["records"] = [dict(rec, run=Path(p).stem) for p, r in zip(paths, results)
                      for rec in r["records"]]
    out["ensemble"] = pooled_ensemble(paths, window=window, default=ensemble_default,
                                      time_unit=time_unit, common=common, effort=effort,
                                      cache_dir=cache_dir, systematics=systematics,
                                      progress=progress, rotating=rotating)
    out["onset"] = " ".join(f"[{Path(p).stem}] {r['onset']}" for p, r in zip(paths, results))
    out["source"] = ", ".join(str(p) for p in paths)
    out["incomplete"] = "; ".join(f"{Path(p).stem}: {r['incomplete']}" for p, r in
                                  zip(paths, results) if r["incomplete"])
    return out


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


def _table_choices(table) -> dict:
    return {"core_radius": ([table.core_radius * f for f in CORE_FACTORS], "core",
                            table.core_radius),
            "domain_radius": ([1.0 / s for s in DOMAIN_SCALES], "scale_inv", 1.0),
            "wall_cut": (list(WALL_CUTS), "wall_cut", 1.0)}


def temperature_of_table(path, *, shape: str | None = None, radius_um: float | None = None,
                         width_um: float | None = None, height_um: float | None = None,
                         core_um: float | None = None, pixel_um: float | None = None,
                         center_px=None, strict: bool = False, imaging_um: dict | None = None,
                         common: str = "beta_n", effort: str = DEFAULT_EFFORT, cache_dir=None,
                         systematics: bool = True, progress=None,
                         rotating: bool = False) -> dict:
    """Thermometry of a measured vortex table: beta of every shot and of the ensemble of shots.

    Geometry options override the TOML beside the table (thermo/data/geometry.py); the core
    radius defaults to 2% of the domain size (thermo.data.measured.DEFAULT_CORE). The imaging
    model is the ``[imaging]`` table of the geometry TOML, overridden key by key by
    ``imaging_um`` (keys of thermo.data.geometry.IMAGING_KEYS); without one, the estimate is of
    the imaged configurations and the record says so. Shots are independent (weights 1). Returns the same kind of dict as
    :func:`temperature_of_run`, keyed by shot; ``progress`` and ``rotating`` as there (omega
    is of the configurations as imaged: no imaging model is applied to it).
    """
    table = read_measured(path, shape=shape, radius_um=radius_um, width_um=width_um,
                          height_um=height_um, core_um=core_um, pixel_um=pixel_um,
                          center_px=center_px, strict=strict, imaging_um=imaging_um)
    model = table.geometry.imaging_model()
    core = table.core_radius
    records = configuration_records(table.configurations, table.domain, core, effort=effort,
                                    cache_dir=cache_dir, progress=progress, rotating=rotating)
    for rec, shot, kept in zip(records, table.shot_ids, table.admitted):
        rec.update({"shot": shot, "left_out_wall": kept.left_out_wall,
                    "left_out_pairs": kept.left_out_pairs})

    def compute(core=core, scale_inv=1.0, wall_cut=1.0, rotating=False):
        kept = table.admitted_with(core, wall_cut=wall_cut, scale=1.0 / scale_inv)
        rec = ensemble_record([(a.positions, a.signs) for a in kept], table.domain, core,
                              common=common, imaging=model, effort=effort, cache_dir=cache_dir,
                              progress=progress, rotating=rotating)
        rec["left_out_wall"] = int(sum(a.left_out_wall for a in kept))
        rec["left_out_pairs"] = int(sum(a.left_out_pairs for a in kept))
        return rec

    ensemble = compute(rotating=rotating)
    ensemble["core_radius"] = core
    ensemble["core_given"] = table.core_given
    ensemble["imaging_um"] = dict(table.geometry.imaging_um)
    if model is None:
        ensemble["imaging_note"] = ("no imaging model: beta describes the configurations as "
                                    "imaged (blur, lost or wrong-sign vortices shift it); give "
                                    "one with the [imaging] table of the geometry file or the "
                                    "--blur-um/--sign-error options")
    if systematics and math.isfinite(ensemble.get("beta_n", math.nan)):
        ensemble = _with_systematics(ensemble, compute, choices=_table_choices(table))
    return {"kind": "measured", "source": str(path), "time_key": "shot", "time_unit": "",
            "records": records, "ensemble": ensemble, "onset": ensemble["verdict"],
            "approximation": "", "domain": table.domain.kind,
            "hole_windings": [quanta(table.domain.hole_circulation)]
            if table.domain.hole_circulation else [],
            "problems": [str(p) for p in table.problems]}


def analyse(run_path, *, time: float | None = None, window=None, effort: str = DEFAULT_EFFORT,
            cache_dir=None, systematics: bool = False, rotating: bool = False) -> dict:
    """The ensemble record of one run at one time (nearest frame) or over a window (sweeps).

    Times in hbar/mu; neither given means the frames after the drive
    (gpe.run.frames.ensemble_frames). The same policy as :func:`temperature_of_run`, without the
    per-frame estimates; ``rotating`` adds omega.
    """
    return pooled_ensemble([run_path], time=time, window=window, effort=effort,
                           cache_dir=cache_dir, systematics=systematics, rotating=rotating)
