"""Reports of thermometry results: CSV tables, the JSON document and the terminal text.

Pure functions of the result dictionaries made by gpe/run/thermometry.py; nothing here computes.
A bound (``bound = "upper"``: beta~ N < value; ``"lower"``: beta~ N > value) is printed as such
everywhere: "< -4.6" in the terminal, the ``bound`` column in CSV, ``"bound"`` in JSON, where
the open side of the interval is ``null`` (strict JSON: no NaN or Infinity).

Units: beta in 1/E0 with E0 = rho kappa^2/(4 pi); beta~ N dimensionless; energies per vortex in
E0; D in the domain size.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

from thermo.jsontext import strict_json

CSV_COLUMNS = ("n_plus", "n_minus", "energy_per_vortex", "beta", "beta_ci68_lo", "beta_ci68_hi",
               "beta_ci95_lo", "beta_ci95_hi", "beta_n", "beta_n_ci95_lo", "beta_n_ci95_hi",
               "bound", "dos_error", "reach", "temperature_sign", "prob_negative",
               "dipole_moment", "c1", "dipole_fraction", "cluster_fraction", "free_fraction",
               "left_out_wall", "left_out_pairs", "verdict")
#: the unit of every column ("1" for counts, probabilities and fractions; "" for words)
CSV_UNITS = {"n_plus": "1", "n_minus": "1", "energy_per_vortex": "E0", "beta": "1/E0",
             "beta_ci68_lo": "1/E0", "beta_ci68_hi": "1/E0", "beta_ci95_lo": "1/E0",
             "beta_ci95_hi": "1/E0", "beta_n": "1", "beta_n_ci95_lo": "1",
             "beta_n_ci95_hi": "1", "bound": "", "dos_error": "1", "reach": "1",
             "temperature_sign": "", "prob_negative": "1", "dipole_moment": "domain size",
             "c1": "1", "dipole_fraction": "1", "cluster_fraction": "1", "free_fraction": "1",
             "left_out_wall": "1", "left_out_pairs": "1", "verdict": "", "frame": "1",
             "shot": "", "run": ""}
#: columns added when the records carry the rotating fit (``--rotating``, gpe.run.rotating)
ROTATING_COLUMNS = ("omega", "omega_ci95_lo", "omega_ci95_hi", "omega_n", "omega_n_ci95_lo",
                    "omega_n_ci95_hi", "beta_rot_n", "omega_pvalue", "omega_nonzero")
CSV_UNITS.update({"omega": "E0", "omega_ci95_lo": "E0", "omega_ci95_hi": "E0", "omega_n": "E0",
                  "omega_n_ci95_lo": "E0", "omega_n_ci95_hi": "E0", "beta_rot_n": "1",
                  "omega_pvalue": "1", "omega_nonzero": ""})


def flat_record(rec: dict) -> dict:
    """A record with its intervals split into ``*_lo``/``*_hi`` columns and ``bound`` as a
    word ("" when the value is a measurement): the row of the CSV table and of
    gpe.run.dataset.temperature_frames.

    Units: as in the record.
    """
    out = dict(rec)
    out["beta_ci68_lo"], out["beta_ci68_hi"] = rec["beta_ci68"]
    out["beta_ci95_lo"], out["beta_ci95_hi"] = rec["beta_ci95"]
    out["beta_n_ci95_lo"], out["beta_n_ci95_hi"] = rec.get("beta_n_ci95", [math.nan] * 2)
    out["bound"] = rec.get("bound") or ""
    if "omega" in rec:
        out["omega_ci95_lo"], out["omega_ci95_hi"] = rec["omega_ci95"]
        out["omega_n_ci95_lo"], out["omega_n_ci95_hi"] = rec["omega_n_ci95"]
    return out


def groups_text(groups) -> str:
    """The vortex-number groups of an ensemble as text: "9+9 x1, 10+10 x17" (N+ + N- x shots)."""
    return ", ".join(f"{g['n_plus']}+{g['n_minus']} x{g['shots']}" for g in groups)


def _cell(v) -> str:
    if isinstance(v, bool):
        return str(v)
    if isinstance(v, float):
        return "" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else f"{v:.6g}"
    return "" if v is None else str(v)


def record_columns(records: list[dict], time_key: str, time_unit: str = ""
                   ) -> list[tuple[str, str]]:
    """(name, unit) of every column of a per-frame (or per-shot) table: ``run`` when the
    records name their runs, the time key (``t`` with ``frame``, or ``shot``), then
    :data:`CSV_COLUMNS`; units from :data:`CSV_UNITS` ("" for words), ``t`` in ``time_unit``.

    Units: none (the units are what it returns).
    """
    first = ((["run"] if any("run" in r for r in records) else []) + [time_key]
             + (["frame"] if time_key == "t" else []))
    units = dict(CSV_UNITS, t=time_unit or "")
    rotating = list(ROTATING_COLUMNS) if any("omega" in r for r in records) else []
    return [(c, units.get(c, "")) for c in first + list(CSV_COLUMNS) + rotating]


def write_records_csv(path, records: list[dict], time_key: str, time_unit: str = "") -> Path:
    """Write per-frame (or per-shot) records as CSV: one plain header line, every column with
    its unit in brackets (``beta [1/E0]``; words have none); an open interval side is
    ``-inf``/``inf``, an undefined value empty; numbers to 6 significant digits."""
    path = Path(path)
    columns = record_columns(records, time_key, time_unit)
    header = [f"{c} [{u}]" if u else c for c, u in columns]
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        for rec in records:
            flat = flat_record(rec)
            writer.writerow([_cell(flat.get(c)) for c, _ in columns])
    return path


def json_report(result: dict) -> dict:
    """The JSON document of ``vortherm temperature --json``: frames or shots, and ensemble.

    Strict JSON (thermo.jsontext.strict_json: no NaN; the open side of a bound's interval is
    null). For a run it says whether the run is complete (``run_complete``), how many frames
    exist of how many the protocol plans (``frames_stored``, ``frames_planned``) and, for an
    incomplete run, carries the note ``incomplete``.

    Units: beta in 1/E0 (``beta_unit``); beta~ N dimensionless; times in ``time_unit``.
    """
    key = "frames" if result["kind"] == "run" else "shots"
    out = {key: result["records"], "ensemble": result["ensemble"],
           "verdict": result["onset"], "beta_unit": "1/E0, E0 = rho kappa^2/(4 pi)",
           "beta_n_unit": "1", "source": result["source"], "domain": result["domain"]}
    for name in ("time_unit", "approximation", "problems", "drive_end", "drive_note",
                 "hole_windings"):
        if result.get(name) not in (None, "", []):
            out[name] = result[name]
    if result["kind"] == "run" and "run_complete" in result:
        out["run_complete"] = result["run_complete"]
        out["frames_stored"] = result["frames_stored"]
        out["frames_planned"] = result["frames_planned"]
        if result.get("incomplete"):
            out["incomplete"] = result["incomplete"]
    return strict_json(out)


def _fmt(v: float, width: int = 8) -> str:
    return f"{v:{width}.3g}" if isinstance(v, (int, float)) and math.isfinite(v) else " " * (width - 3) + "  -"


def beta_n_text(rec: dict) -> str:
    """beta~ N of a record in words: "-2.97 [-3.29, -2.65]", "< -4.6" or "undefined"."""
    b = rec.get("beta_n", math.nan)
    if not isinstance(b, (int, float)) or not math.isfinite(b):
        return "undefined"
    if rec.get("bound") == "upper":
        return f"< {b:.3g}"
    if rec.get("bound") == "lower":
        return f"> {b:.3g}"
    lo, hi = rec.get("beta_n_ci95", [math.nan, math.nan])
    return f"{b:.3g} [{lo:.3g}, {hi:.3g}]"


def omega_n_text(rec: dict) -> str:
    """omega~ / N of a record in words: "0.41 [0.12, 0.7]", or "undefined"."""
    w = rec.get("omega_n", math.nan)
    if not isinstance(w, (int, float)) or not math.isfinite(w):
        return "undefined"
    lo, hi = rec.get("omega_n_ci95", [math.nan, math.nan])
    return f"{w:.3g} [{lo:.3g}, {hi:.3g}]"


def _rotating_lines(ens: dict) -> list[str]:
    if "omega_verdict" not in ens:
        return []
    lines = [f"  rotating ensemble exp[-beta (H - omega M)]: {ens['omega_verdict']}"]
    mf = ens.get("meanfield") or {}
    if "chi2" in mf:
        lines.append(f"  mean field (Poisson-Boltzmann at the fitted beta, omega; "
                     f"{mf['n_plus']}+{mf['n_minus']}) vs radial histograms: chi2 = "
                     f"{mf['chi2']:.3g} for {mf['dof']} bins (p = {mf['pvalue']:.2g})"
                     + (f"; {mf['note']}" if mf.get("note") else ""))
    elif mf.get("note"):
        lines.append(f"  {mf['note']}")
    return lines


def _ensemble_lines(ens: dict, unit: str) -> list[str]:
    lines = []
    where = (f" (frames in {ens['window'][0]:.4g}..{ens['window'][1]:.4g}{unit})"
             if "window" in ens else "")
    lines.append(f"ensemble{where}: {ens['verdict']}")
    n_eff = ens.get("n_effective")
    if ens.get("groups"):
        groups = groups_text(ens["groups"])
        shared = {"beta_n": "one beta~N shared by all groups",
                  "beta": "one beta~ shared by all groups"}.get(ens.get("common"), "")
        lines.append(f"  groups (N+ + N- x shots): {groups}; {shared}")
    if n_eff is not None and "tau_frames" in ens:
        taus = ", ".join(f"{t:.3g}" for t in ens["tau_frames"])
        lines.append(f"  {ens['frames']} frames of {ens['runs']} run(s), autocorrelation time "
                     f"{taus} frames: {n_eff:.3g} effectively independent")
    elif n_eff is not None:
        lines.append(f"  {ens.get('n_shots', 0)} independent shots")
    if isinstance(ens.get("dos_error"), float) and math.isfinite(ens["dos_error"]):
        effort = f", effort {ens['effort']}" if ens.get("effort") else ""
        lines.append(f"  density-of-states error in beta~N: {ens['dos_error']:.2g} (included"
                     f"{effort})")
    sysb = ens.get("systematics")
    if sysb:
        parts = []
        for name, item in sysb.items():
            if name == "total":
                continue
            vals = "/".join(f"{v:.3g}" for v in item["values"])
            parts.append(f"{name} {item.get('central', ''):.3g} -> {vals}: "
                         f"{item['shift'][0]:+.2g}/{item['shift'][1]:+.2g}")
        lo, hi = sysb["total"]
        lines.append(f"  systematics (shift of beta~N): {'; '.join(parts)}; total {lo:+.2g}/{hi:+.2g}")
    if ens.get("imaging_note"):
        lines.append(f"  note: {ens['imaging_note']}")
    return lines + _rotating_lines(ens)


def text_report(result: dict) -> str:
    """A table a person reads in a terminal, then the ensemble estimate and the verdict.

    The notes above the verdict say when the run is incomplete (frames that exist of those
    planned), when the domain is an approximation and when table rows were left out.

    Units: beta in 1/E0, beta~ N dimensionless, E/N in E0, times in the result's ``time_unit``.
    """
    tk = result["time_key"]
    unit = f" [{result['time_unit']}]" if result.get("time_unit") else ""
    first = (f"{'run':>12} {tk + unit:>8}" if any("run" in r for r in result["records"])
             else f"{tk + unit:>12}")
    head = (f"{first} {'N+':>4} {'N-':>4} {'E/N':>8} {'beta~N (95% interval)':>26} "
            f"{'D':>6} {'C1':>6} {'dip':>5} {'clu':>5} {'free':>5}")
    rotating = any("omega" in r for r in result["records"])
    if rotating:
        head += f" {'omega~/N (95% interval)':>26}"
    lines = [head, "-" * len(head)]
    for r in result["records"]:
        tval = r.get(tk, "")
        tstr = f"{tval:12.4g}" if isinstance(tval, float) else f"{tval!s:>12}"
        if "run" in r:
            tstr = f"{r['run'][-12:]:>12} {tstr.strip():>8}"
        n = r["n_plus"] + r["n_minus"]
        bn = beta_n_text(r) if n >= 2 else ("no vortex" if n == 0 else "one vortex")
        lines.append(
            f"{tstr} {r['n_plus']:4d} {r['n_minus']:4d} {_fmt(r['energy_per_vortex'])} "
            f"{bn:>26} {_fmt(r['dipole_moment'], 6)} {_fmt(r['c1'], 6)} "
            f"{_fmt(r['dipole_fraction'], 5)} {_fmt(r['cluster_fraction'], 5)} "
            f"{_fmt(r['free_fraction'], 5)}"
            + (f" {omega_n_text(r):>26}" if rotating else ""))
    lines.append("")
    lines.extend(_ensemble_lines(result["ensemble"], unit))
    if result.get("drive_note"):
        lines.append(f"note: ensemble window: {result['drive_note']}")
    if result.get("incomplete"):
        lines.append(f"note: {result['incomplete']}")
    if result.get("approximation"):
        lines.append(f"note: {result['approximation']}")
    if result.get("hole_windings"):
        quanta = ", ".join(str(tuple(w) if isinstance(w, (list, tuple)) else w)
                           for w in result["hole_windings"])
        holes = "holes" if isinstance(result["hole_windings"][0], (list, tuple)) else "hole"
        lines.append(f"note: {result.get('domain', 'annulus')}: the gas is at the circulation on "
                     f"its {holes} ({quanta} quanta)")
    if result.get("problems"):
        lines.append(f"note: {len(result['problems'])} table rows were left out (listed above)")
    lines.append("")
    lines.append("verdict: " + result["onset"])
    return "\n".join(lines)
