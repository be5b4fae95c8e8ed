"""Bridge from the field side to the vortex gas: run-file vortices -> thermo configurations.

The thermometry back end (``thermo``) works with signed points in a unit domain and a hard core.
This module decides, for a simulated trap, which domain stands in for it and how detected
vortices map onto that domain:

* a flat-bottomed disk of radius R becomes the unit disk with R_eff = R - ``wall_layer`` (the
  density vanishes over about one healing length at a hard wall, so the superfluid edge sits
  inside the nominal radius: common practice);
* a box becomes a ``thermo.domains.Box`` with the same aspect ratio, shrunk the same way;
* a harmonic trap becomes the disk of the Thomas–Fermi radius, **flagged** as an approximation
  (the density is not uniform, so the uniform-domain point-vortex model is only indicative);
* annulus and mask traps have no point-vortex domain here; thermometry refuses them clearly.

Vortices in the wall layer or closer to each other than two core radii (a pair about to
annihilate) cannot be placed in the hard-core ensemble; they are left out and *counted*, and the
count is reported beside every estimate.

Units: inputs in xi (healing lengths); outputs in the domain's scaled length.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from gpe.errors import VorthermError

#: Thickness of the depleted layer at a hard wall, in healing lengths (common practice: ~1 xi).
WALL_LAYER_XI = 1.0
#: Hard-core radius of a vortex in healing lengths: centres closer than 2a are one pair.
CORE_RADIUS_XI = 0.5


@dataclass(frozen=True)
class VortexDomain:
    """The point-vortex stand-in for a trap.

    Attributes
    ----------
    domain : thermo.domains.Disk or Box
    scale : float
        Length of one domain unit in xi (disk: R_eff; box: the side along y).
    center : (float, float)
        Trap centre in xi.
    core_radius : float
        Hard core in domain units.
    approximate : str
        Empty for flat-bottomed traps; otherwise why the model is only an approximation.
    """

    domain: object
    scale: float
    center: tuple[float, float]
    core_radius: float
    approximate: str = ""

    def to_domain(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Positions in xi -> (N, 2) positions in domain units."""
        return np.column_stack(((np.asarray(x) - self.center[0]) / self.scale,
                                (np.asarray(y) - self.center[1]) / self.scale))


def domain_for_trap(trap, core_radius_xi: float = CORE_RADIUS_XI,
                    wall_layer_xi: float = WALL_LAYER_XI) -> VortexDomain:
    """Choose the point-vortex domain for a resolved trap (``gpe.field.traps.TrapConfig``).

    Units: lengths in xi.
    """
    from thermo.domains import Box, Disk

    shape = trap.shape
    if shape == "disk":
        r_eff = trap.radius - wall_layer_xi
        if r_eff <= 4 * core_radius_xi:
            raise VorthermError(f"thermometry: the disk radius {trap.radius:.3g} xi is too small "
                                "for a vortex gas (need several healing lengths)")
        return VortexDomain(Disk(), r_eff, (0.0, 0.0), core_radius_xi / r_eff)
    if shape == "box":
        lx = trap.length_x - 2 * wall_layer_xi
        ly = trap.length_y - 2 * wall_layer_xi
        if min(lx, ly) <= 4 * core_radius_xi:
            raise VorthermError("thermometry: the box is too small for a vortex gas")
        return VortexDomain(Box(aspect=lx / ly), ly, (0.0, 0.0), core_radius_xi / ly)
    if shape == "harmonic":
        # Thomas-Fermi radius at mu = 1: V(R) = 1 -> R = sqrt(2)/omega (geometric mean).
        omega = math.sqrt(trap.omega_x * trap.omega_y)
        r_tf = math.sqrt(2.0) / omega
        return VortexDomain(Disk(), r_tf, (0.0, 0.0), core_radius_xi / r_tf,
                            approximate=("harmonic trap: the uniform-disk point-vortex model of "
                                         "radius R_TF is only an approximation"))
    raise VorthermError(f"thermometry: trap shape {shape!r} has no point-vortex domain; accepted "
                        "shapes: disk, box (harmonic as a flagged approximation)")


@dataclass(frozen=True)
class GasConfiguration:
    """One frame's vortices on the domain, with what had to be left out."""

    positions: np.ndarray
    signs: np.ndarray
    left_out_wall: int
    left_out_pairs: int

    @property
    def n_plus(self) -> int:
        return int(np.count_nonzero(self.signs > 0))

    @property
    def n_minus(self) -> int:
        return int(np.count_nonzero(self.signs < 0))


def gas_configuration(x, y, sign, vd: VortexDomain) -> GasConfiguration:
    """Map detected vortices (xi) onto the point-vortex domain, leaving out what cannot fit.

    Vortices closer than one core radius to the wall are left out (they sit in the depleted
    layer); then, greedily by distance, any two vortices closer than two core radii are left out
    together (for opposite signs this is a pair about to annihilate; like-sign overlaps do not
    occur in a resolved field, but are handled the same way).
    """
    pos = vd.to_domain(x, y)
    signs = np.asarray(sign, dtype=np.int64)
    a = vd.core_radius
    inside = vd.domain.contains(pos, margin=a * 1.0001) if len(pos) else np.zeros(0, bool)
    n_wall = int(np.count_nonzero(~inside))
    pos, signs = pos[inside], signs[inside]
    n_pairs = 0
    if len(pos) > 1:
        d = np.hypot(pos[:, None, 0] - pos[None, :, 0], pos[:, None, 1] - pos[None, :, 1])
        np.fill_diagonal(d, np.inf)
        keep = np.ones(len(pos), dtype=bool)
        for flat in np.argsort(d, axis=None):
            i, j = divmod(int(flat), len(pos))
            if d[i, j] >= 2 * a * 1.0001:
                break
            if keep[i] and keep[j]:
                keep[i] = keep[j] = False
                n_pairs += 1
        pos, signs = pos[keep], signs[keep]
    return GasConfiguration(pos, signs, n_wall, n_pairs)


# ------------------------------------------------------------------------------------------
# thermometry of configurations: one record per frame or shot, and one for an ensemble
# ------------------------------------------------------------------------------------------
#: Effort of the density-of-states build (Monte Carlo sweeps per replica, bootstrap replicates).
EFFORT = {"quick": (800, 12), "standard": (4000, 40), "thorough": (16000, 60)}


def dos_settings(effort: str):
    """``thermo.dos.model.DosSettings`` for an effort name: quick, standard or thorough."""
    from thermo.dos.build import DosSettings

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
    from thermo.classify import structure_observables
    from thermo.estimate import estimate_single

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
    from thermo.estimate import estimate_ensemble

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
# reports
# ------------------------------------------------------------------------------------------
CSV_COLUMNS = ("n_plus", "n_minus", "energy_per_vortex", "beta", "beta_ci68_lo", "beta_ci68_hi",
               "beta_ci95_lo", "beta_ci95_hi", "temperature_sign", "prob_negative",
               "dipole_moment", "c1", "dipole_fraction", "cluster_fraction", "free_fraction",
               "left_out_wall", "left_out_pairs", "range_limited", "verdict")
CSV_UNITS = {"energy_per_vortex": "E0", "beta": "1/E0", "beta_ci68_lo": "1/E0",
             "beta_ci68_hi": "1/E0", "beta_ci95_lo": "1/E0", "beta_ci95_hi": "1/E0",
             "dipole_moment": "domain size"}


def _flat(rec: dict) -> dict:
    out = dict(rec)
    out["beta_ci68_lo"], out["beta_ci68_hi"] = rec["beta_ci68"]
    out["beta_ci95_lo"], out["beta_ci95_hi"] = rec["beta_ci95"]
    return out


def write_records_csv(path, records: list[dict], time_key: str, time_unit: str = "") -> Path:
    """Write per-frame (or per-shot) records as CSV, units in the header names."""
    import csv

    path = Path(path)
    first = [time_key] + (["frame"] if time_key == "t" else [])
    header = [f"{c} [{CSV_UNITS[c]}]" if c in CSV_UNITS else c for c in first + list(CSV_COLUMNS)]
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        for rec in records:
            flat = _flat(rec)
            writer.writerow([flat.get(c, "") if not isinstance(flat.get(c), float)
                             else f"{flat[c]:.6g}" for c in first + list(CSV_COLUMNS)])
    return path


def json_report(result: dict) -> dict:
    """The JSON document of ``vortherm temperature --json``: frames or shots, and ensemble."""
    key = "frames" if result["kind"] == "run" else "shots"
    out = {key: result["records"], "ensemble": result["ensemble"],
           "verdict": result["onset"], "beta_unit": "1/E0, E0 = rho kappa^2/(4 pi)",
           "source": result["source"], "domain": result["domain"]}
    if result.get("time_unit"):
        out["time_unit"] = result["time_unit"]
    if result.get("approximation"):
        out["approximation"] = result["approximation"]
    if result.get("problems"):
        out["problems"] = result["problems"]
    return out


def _fmt(v: float, width: int = 8) -> str:
    return f"{v:{width}.3g}" if isinstance(v, (int, float)) and math.isfinite(v) else " " * (width - 3) + "  -"


def text_report(result: dict) -> str:
    """A table a person reads in a terminal, then the ensemble estimate and the verdict."""
    tk = result["time_key"]
    unit = f" [{result['time_unit']}]" if result.get("time_unit") else ""
    head = (f"{tk + unit:>12} {'N+':>4} {'N-':>4} {'E/N':>8} {'beta~':>8} {'95% interval':>19} "
            f"{'beta~N':>8} {'D':>6} {'C1':>6} {'dip':>5} {'clu':>5} {'free':>5}")
    lines = [head, "-" * len(head)]
    for r in result["records"]:
        n = r["n_plus"] + r["n_minus"]
        lo, hi = r["beta_ci95"]
        tval = r.get(tk, "")
        tstr = f"{tval:12.4g}" if isinstance(tval, float) else f"{str(tval):>12}"
        lines.append(
            f"{tstr} {r['n_plus']:4d} {r['n_minus']:4d} {_fmt(r['energy_per_vortex'])} "
            f"{_fmt(r['beta'])} [{_fmt(lo)} ,{_fmt(hi)}] {_fmt(r['beta'] * n)} "
            f"{_fmt(r['dipole_moment'], 6)} {_fmt(r['c1'], 6)} {_fmt(r['dipole_fraction'], 5)} "
            f"{_fmt(r['cluster_fraction'], 5)} {_fmt(r['free_fraction'], 5)}")
    ens = result["ensemble"]
    lines.append("")
    where = (f" (frames in {ens['window'][0]:.4g}..{ens['window'][1]:.4g}{unit})"
             if "window" in ens else "")
    lines.append(f"ensemble{where}: {ens['verdict']}")
    if result.get("approximation"):
        lines.append(f"note: {result['approximation']}")
    if result.get("problems"):
        lines.append(f"note: {len(result['problems'])} table rows were left out (listed above)")
    lines.append("")
    lines.append("verdict: " + result["onset"])
    return "\n".join(lines)
