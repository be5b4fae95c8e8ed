"""Summary tables of a sweep: aggregation over seeds, CSV and HDF5 writers, and readers.

:func:`gpe.sweep.execute.run_sweep` hands its per-point records to :func:`summarise`, which writes
``summary_runs.csv`` (one row per point and seed), ``summary_points.csv`` (one row per grid point,
seeds aggregated), ``summary.h5`` (both tables with units and the sweep file) and ``state.json``;
:func:`read_table` and :func:`read_summary` read them back. The formats are described in
``docs/sweep.md``.

Units: every column carries its unit (``beta [1/E0]``; "" for labels and ids); beta in 1/E0 with
E0 = rho kappa^2 / (4 pi); axis values in the protocol's units.
"""

from __future__ import annotations

import csv
import itertools
import json
import math
import os
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Mapping

from gpe.sweep.file import Axis, Point, Sweep, SweepError
from thermo.quantities import QUANTITIES

# NumPy, SciPy and h5py are imported inside functions, as in gpe.sweep.execute: a spawned worker imports
# this module (through gpe.sweep.execute) before its thread-count variables are set.

SUMMARY_FORMAT_VERSION = 1


@dataclass(frozen=True)
class SweepResult:
    """What :func:`gpe.sweep.execute.run_sweep` leaves behind: the tables (rows ordered by point id) and files.

    ``runs`` has one row per point and seed, ``points`` one per grid point (seeds aggregated);
    ``units`` maps every column name to its unit ("" for labels and ids).
    """

    out_dir: Path
    axes: tuple[Axis, ...]
    quantities: tuple[str, ...]
    runs: list[dict]
    points: list[dict]
    units: dict[str, str]
    interrupted: bool
    failed: dict[str, str]
    files: dict[str, Path]

    @property
    def complete(self) -> bool:
        """True when every point finished without error."""
        return not self.interrupted and all(r["status"] == "ok" for r in self.runs)


def write_json(path: Path, data: Any) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(data, indent=1, sort_keys=True), encoding="utf-8")
    os.replace(tmp, path)  # atomic: a killed sweep never leaves half a record


def read_json(path: Path) -> dict | None:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def column_header(name: str, unit: str) -> str:
    """CSV header of a column: ``beta [1/E0]``, or the bare name for labels."""
    return f"{name} [{unit}]" if unit else name


def summarise(sweep: Sweep, out_dir: Path, points: list[Point], records: Mapping[str, dict],
               interrupted: bool) -> SweepResult:
    import numpy as np
    from scipy import stats

    qs = sweep.measure.quantities
    units = {"point_id": "", "grid_id": "", "seed": "", "status": "", "error": "",
             "n_seeds": "1", "n_ok": "1", "frac_beta_negative": "1"}
    units.update({a.key: a.unit for a in sweep.axes})
    runs = []
    for p in sorted(points, key=lambda p: p.point_id):
        rec = records.get(p.point_id, {"status": "pending", "values": {}, "error": ""})
        row = {"point_id": p.point_id, "grid_id": p.grid_id, "seed": p.seed}
        row.update({a.key: v for a, v in zip(sweep.axes, p.coords)})
        row.update(status=rec["status"], error=rec.get("error", ""))
        row.update({q: float(rec["values"].get(q, math.nan)) for q in qs})
        runs.append(row)
    units.update({q: QUANTITIES[q].unit for q in qs})

    agg = []
    for grid_id, group in itertools.groupby(runs, key=lambda r: r["grid_id"]):
        group = list(group)
        ok = [r for r in group if r["status"] == "ok"]
        row = {"grid_id": grid_id, **{a.key: group[0][a.key] for a in sweep.axes},
               "n_seeds": len(group), "n_ok": len(ok)}
        for q in qs:
            x = np.array([r[q] for r in ok], dtype=float)
            mean = float(x.mean()) if x.size else math.nan
            std = float(x.std(ddof=1)) if x.size > 1 else math.nan
            # Student-t 95% interval of the mean over seeds [pub: Student, Biometrika 6, 1 (1908)]
            half = float(stats.t.ppf(0.975, x.size - 1) * std / math.sqrt(x.size)) \
                if x.size > 1 else math.nan
            row.update({f"{q}_mean": mean, f"{q}_std": std, f"{q}_lo95": mean - half,
                        f"{q}_hi95": mean + half})
            for suffix in ("_mean", "_std", "_lo95", "_hi95"):
                units[q + suffix] = QUANTITIES[q].unit
        beta = np.array([r["beta"] for r in ok], dtype=float)
        row["frac_beta_negative"] = float(np.mean(beta < 0)) if beta.size else math.nan
        agg.append(row)

    files = {"runs_csv": out_dir / "summary_runs.csv", "points_csv": out_dir / "summary_points.csv",
             "hdf5": out_dir / "summary.h5", "state": out_dir / "state.json"}
    _write_csv(files["runs_csv"], runs, units)
    _write_csv(files["points_csv"], agg, units)
    _write_hdf5(files["hdf5"], sweep, runs, agg, units)
    failed = {r["point_id"]: r["error"] for r in runs if r["status"] == "failed"}
    counts = {s: sum(r["status"] == s for r in runs) for s in ("ok", "failed", "pending")}
    write_json(files["state"], {"interrupted": interrupted, "counts": counts, "failed": failed,
                                 "time_unix": time.time()})
    return SweepResult(out_dir, sweep.axes, qs, runs, agg, units, interrupted, failed, files)


def _cell(value: Any) -> str:
    if isinstance(value, float):
        return repr(value)  # round-trips exactly, so equal runs give byte-equal files
    return str(value)


def _write_csv(path: Path, rows: list[dict], units: Mapping[str, str]) -> None:
    names = list(rows[0]) if rows else []
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow([column_header(n, units.get(n, "")) for n in names])
        writer.writerows([_cell(r[n]) for n in names] for r in rows)
    os.replace(tmp, path)


def _write_hdf5(path: Path, sweep: Sweep, runs: list[dict], agg: list[dict],
                units: Mapping[str, str]) -> None:
    import h5py
    import numpy as np

    tmp = path.with_name(path.name + ".tmp")
    with h5py.File(tmp, "w") as h5:
        h5.attrs["format_version"] = SUMMARY_FORMAT_VERSION
        h5.attrs["sweep_text"] = sweep.text
        h5.attrs["base_protocol"] = str(sweep.base)
        h5.attrs["axes"] = json.dumps([asdict(a) for a in sweep.axes])
        h5.attrs["measure"] = json.dumps(asdict(sweep.measure))
        for group_name, rows in (("runs", runs), ("points", agg)):
            group = h5.create_group(group_name)
            names = list(rows[0]) if rows else []
            group.attrs["columns"] = json.dumps(names)
            for n in names:
                col = [r[n] for r in rows]
                if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in col):
                    data = np.asarray(col)
                else:
                    data = np.asarray([str(v) for v in col], dtype=h5py.string_dtype())
                # dataset names may not contain '/', protocol keys only use dots
                ds = group.create_dataset(n, data=data)
                ds.attrs["units"] = units.get(n, "")
    os.replace(tmp, path)


def read_table(path: str | os.PathLike) -> tuple[list[dict], dict[str, str]]:
    """Read a summary CSV back: rows keyed by bare column name, and the units of each column."""
    with Path(path).open(encoding="utf-8", newline="") as fh:
        reader = csv.reader(fh)
        header = next(reader)
        names, units = [], {}
        for h in header:
            name, _, unit = h.partition(" [")
            names.append(name)
            units[name] = unit[:-1] if unit else ""
        rows = []
        for line in reader:
            row = {}
            for n, v in zip(names, line):
                try:
                    row[n] = int(v) if v.lstrip("-").isdigit() else float(v)
                except ValueError:
                    row[n] = v
            rows.append(row)
    return rows, units


def read_summary(out_dir: str | os.PathLike) -> SweepResult:
    """Reopen the tables a finished (or interrupted) sweep wrote into ``out_dir``."""
    import h5py

    out_dir = Path(out_dir)
    path = out_dir / "summary.h5"
    try:
        h5 = h5py.File(path, "r")
    except OSError:
        raise SweepError(f"no sweep summary in '{out_dir}' (summary.h5 missing or unreadable); "
                         f"run the sweep first") from None
    with h5:
        axes = tuple(Axis(**{**a, "values": tuple(a["values"])})
                     for a in json.loads(h5.attrs["axes"]))
        quantities = tuple(json.loads(h5.attrs["measure"])["quantities"])
        units, tables = {}, {}
        for group in ("runs", "points"):
            names = json.loads(h5[group].attrs["columns"])
            cols = {n: h5[group][n][()] for n in names}
            units.update({n: str(h5[group][n].attrs["units"]) for n in names})
            n_rows = len(next(iter(cols.values()))) if cols else 0
            tables[group] = [{n: _plain(cols[n][i]) for n in names} for i in range(n_rows)]
    state = read_json(out_dir / "state.json") or {}
    failed = {r["point_id"]: r["error"] for r in tables["runs"] if r["status"] == "failed"}
    files = {"runs_csv": out_dir / "summary_runs.csv", "points_csv": out_dir / "summary_points.csv",
             "hdf5": path, "state": out_dir / "state.json"}
    return SweepResult(out_dir, axes, quantities, tables["runs"], tables["points"], units,
                       bool(state.get("interrupted", False)), failed, files)


def _plain(value: Any) -> Any:
    if isinstance(value, bytes):
        return value.decode("utf-8")
    return value.item() if hasattr(value, "item") else value
