"""Reports of thermometry results: CSV tables, the JSON document and the terminal text.

Pure functions of the result dictionaries made by gpe/run/thermometry.py; nothing here computes.

Units: beta in 1/E0 with E0 = rho kappa^2/(4 pi); energies per vortex in E0.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

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
    """The JSON document of ``vortherm temperature --json``: frames or shots, and ensemble.

    For a run it says whether the run is complete (``run_complete``), how many frames exist of
    how many the protocol plans (``frames_stored``, ``frames_planned``) and, for an incomplete
    run, carries the note ``incomplete``.

    Units: beta in 1/E0 (``beta_unit``); times in ``time_unit``.
    """
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
    if result["kind"] == "run" and "run_complete" in result:
        out["run_complete"] = result["run_complete"]
        out["frames_stored"] = result["frames_stored"]
        out["frames_planned"] = result["frames_planned"]
        if result.get("incomplete"):
            out["incomplete"] = result["incomplete"]
    return out


def _fmt(v: float, width: int = 8) -> str:
    return f"{v:{width}.3g}" if isinstance(v, (int, float)) and math.isfinite(v) else " " * (width - 3) + "  -"


def text_report(result: dict) -> str:
    """A table a person reads in a terminal, then the ensemble estimate and the verdict.

    The notes above the verdict say when the run is incomplete (frames that exist of those
    planned), when the domain is an approximation and when table rows were left out.

    Units: beta in 1/E0, E/N in E0, times in the result's ``time_unit``.
    """
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
    if result.get("incomplete"):
        lines.append(f"note: {result['incomplete']}")
    if result.get("approximation"):
        lines.append(f"note: {result['approximation']}")
    if result.get("problems"):
        lines.append(f"note: {len(result['problems'])} table rows were left out (listed above)")
    lines.append("")
    lines.append("verdict: " + result["onset"])
    return "\n".join(lines)
