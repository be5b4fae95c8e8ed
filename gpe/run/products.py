"""What is made from a finished run file besides figures: re-detected vortex tables (CSV in
micrometres, a plain header line, metadata in a JSON sidecar ``<name>.json`` beside it). The
standard figures are drawn by gpe/figures/standard.py.

Reads run files through gpe.run.runfile and the stored protocol (gpe.run.reading.protocol_of); writes only
the files asked for, and the run file only when re-detection is stored on purpose.

Units: simulation units inside; micrometres and milliseconds in the CSV and on figure axes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from gpe.analysis.tracking import find_events, track_vortices
from gpe.analysis.vortices import VORTEX_DTYPE, find_vortices
from gpe import __version__
from gpe.errors import VorthermError
from gpe.run.jsontext import dumps_strict
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import RunFile
from gpe.run.simulate import DETECT_THRESHOLD, detection_floor

#: Columns of the vortex CSV: (name, unit, description). Positions about the grid centre.
VORTEX_CSV_COLUMNS = (
    ("frame", "1", "frame index in the run file"),
    ("t_ms", "ms", "time of the frame"),
    ("x_um", "um", "x position about the grid centre"),
    ("y_um", "um", "y position about the grid centre"),
    ("sign", "1", "circulation: +1 counter-clockwise, -1 clockwise"),
    ("track", "1", "track the vortex belongs to across frames (-1: not linked)"),
)


def vortex_columns_si(table: np.ndarray, protocol) -> dict[str, np.ndarray]:
    """The vortex table's columns in SI units, named as in the CSV (``VORTEX_CSV_COLUMNS``).

    Units: t_ms in ms, x_um and y_um in micrometres about the grid centre.
    """
    um = protocol.units.length_m * 1e6
    return {"frame": np.asarray(table["frame"], np.int64),
            "t_ms": np.asarray(protocol.units.time_to_ms(np.asarray(table["t"], float))),
            "x_um": np.asarray(table["x"], float) * um, "y_um": np.asarray(table["y"], float) * um,
            "sign": np.asarray(table["sign"], np.int64),
            "track": np.asarray(table["track"], np.int64)}


def sidecar_path(csv_path) -> Path:
    """The JSON file beside a CSV that holds its metadata: ``<name>.json``.

    Units: none.
    """
    return Path(csv_path).with_suffix(".json")


def vortex_csv_path(run_path, csv_path=None) -> Path:
    """Where :func:`redetect` writes its table: ``csv_path``, or ``RUN_vortices.csv`` beside the run
    (its metadata goes to :func:`sidecar_path`, ``RUN_vortices.json``).

    Units: none.
    """
    if csv_path:
        return Path(csv_path)
    return Path(run_path).with_name(Path(run_path).stem + "_vortices.csv")


def redetect(run_path, *, threshold: float = DETECT_THRESHOLD, region: str = "trap",
             frames=None, csv_path=None, store: bool = False, overwrite: bool = False):
    """Detect vortices again in stored frames; export CSV in micrometres; optionally store.

    Returns (table, events, csv_path). The run file is changed only with ``store=True``, and
    then the old vortex table is replaced in one step (only when every frame was re-detected,
    so the stored table never mixes two detections). An existing CSV or sidecar is refused
    before anything is read or stored unless ``overwrite`` (``--force``); neither is ever the
    run file itself. The CSV has one plain header line (``pandas.read_csv`` reads it as is);
    units, origin, detection settings and the source run are in the JSON sidecar.

    Units: threshold as a fraction of the peak background density; CSV in um and ms.
    """
    if not 0.0 < threshold < 1.0:
        raise VorthermError(f"--threshold {threshold}: the density threshold is a fraction of "
                            "the peak background density; accepted: 0 < threshold < 1")
    if region not in ("trap", "all"):
        raise VorthermError(f"region {region!r}; accepted: 'trap', 'all'")
    csv_path = vortex_csv_path(run_path, csv_path)
    if csv_path.resolve() == Path(run_path).resolve():
        raise VorthermError(f"--csv {csv_path} is the run file itself; the vortex table needs "
                            "another name (default: RUN_vortices.csv)")
    if csv_path.is_dir():
        raise VorthermError(f"--csv {csv_path} is a folder; give the name of the CSV file to "
                            "write, e.g. --csv run_vortices.csv")
    sidecar = sidecar_path(csv_path)
    if sidecar.resolve() == Path(run_path).resolve():
        raise VorthermError(f"--csv {csv_path}: its metadata file {sidecar} would be the run "
                            "file itself; choose another CSV name")
    for existing in (csv_path, sidecar):
        if existing.exists() and not overwrite:
            raise VorthermError(f"{existing} exists already; pass --force (overwrite=True) to "
                                "overwrite it, or choose another file with --csv")
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        n_frames = len(times)
        chosen = select_frames(run_path, frames, n_frames)
        grid = protocol.grid
        v_static = protocol.build_trap()
        mask = protocol.trap.detection_region(v_static) if region == "trap" else None
        beams = protocol.build_beams()
        tables = []
        for f in chosen:
            v_beam = beams.potential(times[f], grid) if beams.n_beams else None
            det = find_vortices(np.asarray(run.psi(f)), grid.x, grid.y, threshold=threshold,
                                region=mask, floor=(detection_floor(v_static, v_beam)
                                                    if region == "trap" else None))
            rows = np.empty(len(det), dtype=VORTEX_DTYPE)
            rows["frame"], rows["t"] = f, times[f]
            rows["x"], rows["y"], rows["sign"], rows["track"] = det.x, det.y, det.sign, -1
            tables.append(rows)
    table = np.concatenate(tables) if tables else np.empty(0, dtype=VORTEX_DTYPE)
    table = track_vortices(table, times) if table.size else table
    events = find_events(table, times) if table.size else []
    if store:
        if len(chosen) != n_frames:
            raise VorthermError("--store replaces the whole vortex table, so it needs every "
                                "frame: leave out --frames")
        with RunFile.open(run_path, "r+") as run:
            # point-vortex frames after a hand-off have no snapshot to re-detect: kept as they
            # are, and the tracks linked again over the whole time line
            points = run.read_vortices()
            points = points[points["frame"] >= n_frames].astype(table.dtype)
            if points.size:
                run.replace_vortices(track_vortices(np.concatenate([table, points]),
                                                    run.timeline()))
            else:
                run.replace_vortices(table)
    _write_vortex_csv(csv_path, table, protocol)
    meta = {"format": "vortherm-vortices", "package_version": __version__,
            "table": csv_path.name, "run_file": str(run_path), "rows": int(table.size),
            "columns": [{"name": n, "units": u, "description": d}
                        for n, u, d in VORTEX_CSV_COLUMNS],
            "origin": "grid centre", "detection": {"threshold": threshold, "region": region,
                                                   "frames": chosen},
            "xi_in_m": protocol.units.length_m, "hbar_over_mu_in_s": protocol.units.time_s}
    sidecar.write_text(dumps_strict(meta, indent=1) + "\n", encoding="utf-8")
    return table, events, csv_path


def _write_vortex_csv(path: Path, table: np.ndarray, protocol) -> None:
    """Vortex table in SI (VORTEX_CSV_COLUMNS), one header line, floats to full precision."""
    columns = vortex_columns_si(table, protocol)
    names = [n for n, _, _ in VORTEX_CSV_COLUMNS]
    with Path(path).open("w", encoding="utf-8") as fh:
        fh.write(",".join(names) + "\n")
        for row in zip(*(columns[n].tolist() for n in names)):
            fh.write(",".join(map(repr, row)) + "\n")
