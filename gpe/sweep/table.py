"""Summary tables of a sweep: aggregation over seeds, CSV and HDF5 writers, and readers.

:func:`gpe.sweep.execute.run_sweep` hands its per-point records to :func:`summarise`, which writes
``summary_runs.csv`` (one row per point and seed), ``summary_points.csv`` (one row per grid point,
seeds aggregated), ``summary.h5`` (both tables with units and the sweep file) and ``state.json``;
:func:`read_table` and :func:`read_summary` read them back. The formats are described in
``docs/sweep.md``.

Per grid point, beta~ N is pooled over the seeds' run files (one ensemble: seeds independent,
frames of one run correlated); the means over seeds of the other quantities get a percentile
bootstrap interval over seeds and the fraction of seeds at negative beta a Wilson interval, so
no interval leaves the range its quantity can take. All JSON written is strict (no NaN).

Units: every column carries its unit (``beta [1/E0]``, ``beta_n [1]``; "" for labels and ids);
beta in 1/E0 with E0 = rho kappa^2 / (4 pi); beta~ N dimensionless; axis values in the
protocol's units.
"""

from __future__ import annotations

import csv
import itertools
import json
import math
import os
import time
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass
from pathlib import Path
from statistics import NormalDist
from typing import Any

from gpe.sweep.file import Axis, Point, Sweep, SweepError, time_unit_factor
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
    """Write ``data`` as strict JSON (no NaN: a missing number is ``null``), atomically."""
    from gpe.run.jsontext import dumps_strict  # imports numpy: see the note at the top

    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(dumps_strict(data, indent=1, sort_keys=True), encoding="utf-8")
    os.replace(tmp, path)  # atomic: a killed sweep never leaves half a record


def read_json(path: Path) -> dict | None:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def column_header(name: str, unit: str) -> str:
    """CSV header of a column: ``beta [1/E0]``, or the bare name for labels."""
    return f"{name} [{unit}]" if unit else name


# -- intervals that stay inside their ranges ------------------------------------------------
#: Bootstrap replicates of a per-point mean over seeds; fixed seed, so tables are reproducible.
N_BOOT = 4000
BOOT_SEED = 20261203
#: Two-sided 95 %: z = Phi^-1(0.975).
Z95 = NormalDist().inv_cdf(0.975)


def wilson_interval(successes: int, trials: int, z: float = Z95) -> tuple[float, float]:
    r"""Wilson score interval of a binomial proportion (Wilson 1927, JASA 22, 209).

    .. math:: \frac{\hat p + z^2/2n \pm z \sqrt{\hat p(1-\hat p)/n + z^2/4n^2}}{1 + z^2/n}

    It lies inside [0, 1] for every ``successes`` in 0..``trials``. Fewer than two trials give
    (NaN, NaN): one seed says nothing about the spread between seeds.

    Units
    -----
    1 (a fraction of trials).
    """
    if trials < 2:
        return math.nan, math.nan
    if not 0 <= successes <= trials:
        raise ValueError(f"successes = {successes} outside 0..trials = {trials}")
    n, p = float(trials), successes / trials
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    # at p = 0 (p = 1) the lower (upper) end is exactly 0 (1); round-off would leave 1e-17
    lo = 0.0 if successes == 0 else max(0.0, centre - half)
    hi = 1.0 if successes == trials else min(1.0, centre + half)
    return lo, hi


def bootstrap_interval(values, level: float = 0.95, n_boot: int = N_BOOT,
                       seed: int = BOOT_SEED) -> tuple[float, float]:
    """Percentile bootstrap interval of the mean over seeds (Efron 1979, Ann. Stat. 7, 1).

    Every resampled mean lies between the smallest and the largest value, so the interval
    never leaves the range of the data (no negative counts, no fraction above 1). NaN values
    are left out; fewer than two remaining give (NaN, NaN).

    Units
    -----
    Those of ``values``.
    """
    import numpy as np

    x = np.asarray(values, dtype=float)
    x = x[np.isfinite(x)]
    if x.size < 2:
        return math.nan, math.nan
    rng = np.random.default_rng(seed)
    means = x[rng.integers(0, x.size, size=(n_boot, x.size))].mean(axis=1)
    lo, hi = np.quantile(means, [(1 - level) / 2, (1 + level) / 2])
    # the mean of equal draws can differ from them in the last bit: clip to the data's range
    return float(max(lo, x.min())), float(min(hi, x.max()))


# -- the tables -----------------------------------------------------------------------------
#: Per-run and per-point columns of the ensemble beta~ N and their units.
BETA_N_UNITS = {"beta_n": "1", "beta_n_lo95": "1", "beta_n_hi95": "1", "bound": "",
                "n_effective": "1", "beta_n_reason": ""}


def _float(value: Any) -> float:
    """A stored number: None (strict JSON's missing number) and absent values are NaN."""
    return math.nan if value is None else float(value)


def _ensemble_columns(ens: Mapping[str, Any] | None, reason: str = "") -> dict:
    """beta~ N, its 95 % interval, the bound and n_effective of an ensemble record.

    ``bound`` is "upper" (beta~ N < beta_n), "lower" (beta~ N > beta_n) or "" (a measurement).
    """
    ens = ens or {}
    ci = ens.get("beta_n_ci95") or (None, None)
    row = {"beta_n": _float(ens.get("beta_n")), "beta_n_lo95": _float(ci[0]),
           "beta_n_hi95": _float(ci[1]), "bound": str(ens.get("bound") or ""),
           "n_effective": _float(ens.get("n_effective"))}
    if bool(ens) and not math.isfinite(row["beta_n"]) and not reason:
        reason = str(ens.get("verdict") or "beta~ N undefined")
    row["beta_n_reason"] = reason
    return row


def _run_rows(sweep: Sweep, points: list[Point], records: Mapping[str, dict]) -> list[dict]:
    rows = []
    for p in sorted(points, key=lambda p: p.point_id):
        rec = records.get(p.point_id, {"status": "pending", "values": {}, "error": ""})
        row = {"point_id": p.point_id, "grid_id": p.grid_id, "seed": p.seed}
        row.update({a.key: v for a, v in zip(sweep.axes, p.coords)})
        row.update(status=rec["status"], error=rec.get("error", ""))
        row.update({q: _float(rec["values"].get(q)) for q in sweep.measure.quantities})
        ens = _ensemble_columns(rec.get("ensemble") if rec["status"] == "ok" else None)
        row.update({k: v for k, v in ens.items() if k != "beta_n_reason"})
        rows.append(row)
    return rows


def _seed_statistics(ok: list[dict], qs, frames: Mapping[str, Mapping] | None = None) -> dict:
    """Per quantity: the mean with a 95 % interval and the standard deviation over seeds; the
    fraction of seeds at negative beta with its Wilson interval.

    A quantity of ``frames`` (gpe.run.thermometry.frame_means of the pooled record: the frames
    of all seeds, each seed's frames a correlated series, cut to the quantity's range) takes
    its mean and interval from there; the others (beta of each run) get the percentile
    bootstrap over seeds, which with few seeds is too narrow (docs/sweep.md)."""
    import numpy as np

    frames = frames or {}
    row = {}
    for q in qs:
        x = np.array([r[q] for r in ok], dtype=float)
        x = x[np.isfinite(x)]
        if q in frames:
            mean, lo, hi = (_float(frames[q].get(k)) for k in ("mean", "lo95", "hi95"))
        else:
            mean = float(x.mean()) if x.size else math.nan
            lo, hi = bootstrap_interval(x)
        row.update({f"{q}_mean": mean,
                    f"{q}_std": float(x.std(ddof=1)) if x.size > 1 else math.nan,
                    f"{q}_lo95": lo, f"{q}_hi95": hi})
    beta = np.array([r["beta"] for r in ok], dtype=float)
    defined = beta[np.isfinite(beta)]
    k, n = int(np.count_nonzero(defined < 0)), int(defined.size)
    lo, hi = wilson_interval(k, n)
    row.update({"n_beta_defined": n, "frac_beta_negative": k / n if n else math.nan,
                "frac_beta_negative_lo95": lo, "frac_beta_negative_hi95": hi})
    return row


#: Keys of the analysis record passed through to the point record (beta~ N of the run).
ENSEMBLE_KEYS = ("beta_n", "beta_n_ci95", "bound", "n_effective", "verdict")


def ensemble_summary(raw: Mapping) -> dict:
    """beta~ N of one run with its 95 % interval, bound ("upper"/"lower"/None), n_effective
    and verdict, as plain JSON-able values (keys the analysis did not give are left out).

    Units: beta~ N and n_effective dimensionless.
    """
    out = {}
    for key in ENSEMBLE_KEYS:
        if key not in raw:
            continue
        v = raw[key]
        if key == "beta_n_ci95":
            out[key] = [float(x) for x in v]
        elif key in ("bound", "verdict"):
            out[key] = None if v is None else str(v)
        else:
            out[key] = float(v)
    return out


def pool_seeds(sweep: Sweep, out_dir: Path, points: list[Point]) -> dict:
    """beta~ N of one grid point pooled over the run files ``out_dir/runs/<id>.h5`` of
    ``points`` (its seeds that finished): :func:`gpe.run.thermometry.pooled_ensemble` at the
    sweep's measurement time or window. Seeds are independent series; frames of one run are
    correlated and weighted.

    Called by the coordinator at summary time; the density-of-states tables the workers built
    are cached, so this is cheap.

    Units: the measurement time or window converted to hbar/mu as :func:`gpe.sweep.execute.run_point` does.
    """
    from gpe.run import thermometry  # numerics: see the note at the top
    from gpe.setup.protocol import load_protocol

    protocol = load_protocol(str(sweep.base), points[0].overrides)
    scale = time_unit_factor(protocol, sweep.measure.time_unit)
    m = sweep.measure
    at_time = None if m.at_time is None else m.at_time * scale
    window = None if m.window is None else (m.window[0] * scale, m.window[1] * scale)
    paths = [Path(out_dir) / "runs" / f"{p.point_id}.h5" for p in points]
    return thermometry.pooled_ensemble(paths, time=at_time, window=window, time_unit="tau")


PoolFn = Callable[[Sweep, Path, list[Point]], Mapping[str, Any]]


def _pooled_columns(sweep: Sweep, out_dir: Path, ok_points: list[Point],
                    pool: PoolFn | None) -> tuple[dict, dict]:
    """beta~ N pooled over the seeds that finished (``pool``), and the pooled frame means
    (``frame_means`` of the record, {} if none); a failure is a NaN row with its reason, never
    the end of the summary."""
    if not ok_points:
        return _ensemble_columns(None, "no seed of this point finished"), {}
    if pool is None:
        return _ensemble_columns(None, "not pooled (no pooling function given)"), {}
    try:
        rec = pool(sweep, out_dir, ok_points)
    except Exception as exc:  # noqa: BLE001 -- one point's failure is recorded, not fatal
        return (_ensemble_columns(None, _relative(f"{type(exc).__name__}: {exc}", sweep,
                                                  out_dir)), {})
    return _ensemble_columns(rec), dict(rec.get("frame_means") or {})


def _relative(text: str, sweep: Sweep, out_dir: Path) -> str:
    """``text`` with the output folder and the sweep file's folder written as relative paths,
    so that the same sweep gives the same tables wherever its folder is."""
    for folder in (Path(out_dir), Path(sweep.base).parent):
        text = text.replace(str(folder.resolve()) + os.sep, "").replace(str(folder) + os.sep, "")
    return text


def summarise(sweep: Sweep, out_dir: Path, points: list[Point], records: Mapping[str, dict],
              interrupted: bool, pool: PoolFn | None = None) -> SweepResult:
    """Write the run and point tables, ``summary.h5`` and ``state.json``; return them.

    Per grid point, ``pool(sweep, out_dir, points)`` gives the ensemble record of the seeds that
    finished (:func:`gpe.sweep.execute.pool_seeds`: beta~ N pooled over their run files).

    Units: as the module docstring; ``units`` of the result names every column's unit.
    """
    qs = sweep.measure.quantities
    units = {"point_id": "", "grid_id": "", "seed": "", "status": "", "error": "",
             "n_seeds": "1", "n_ok": "1", "n_beta_defined": "1", "frac_beta_negative": "1",
             "frac_beta_negative_lo95": "1", "frac_beta_negative_hi95": "1", **BETA_N_UNITS}
    units.update({a.key: a.unit for a in sweep.axes})
    units.update({q: QUANTITIES[q].unit for q in qs})
    for q in qs:
        units.update({q + s: QUANTITIES[q].unit for s in ("_mean", "_std", "_lo95", "_hi95")})
    runs = _run_rows(sweep, points, records)
    by_id = {p.point_id: p for p in points}

    agg = []
    for grid_id, group in itertools.groupby(runs, key=lambda r: r["grid_id"]):
        group = list(group)
        ok = [r for r in group if r["status"] == "ok"]
        row = {"grid_id": grid_id, **{a.key: group[0][a.key] for a in sweep.axes},
               "n_seeds": len(group), "n_ok": len(ok)}
        pooled, frames = _pooled_columns(sweep, out_dir, [by_id[r["point_id"]] for r in ok],
                                         pool)
        row.update(pooled)
        row.update(_seed_statistics(ok, qs, frames))
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

    from gpe.run.jsontext import dumps_strict

    tmp = path.with_name(path.name + ".tmp")
    with h5py.File(tmp, "w") as h5:
        h5.attrs["format_version"] = SUMMARY_FORMAT_VERSION
        h5.attrs["sweep_text"] = sweep.text
        h5.attrs["base_protocol"] = str(sweep.base)
        h5.attrs["axes"] = dumps_strict([asdict(a) for a in sweep.axes])
        h5.attrs["measure"] = dumps_strict(asdict(sweep.measure))
        for group_name, rows in (("runs", runs), ("points", agg)):
            group = h5.create_group(group_name)
            names = list(rows[0]) if rows else []
            group.attrs["columns"] = dumps_strict(names)
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
