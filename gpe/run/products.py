"""What is made from a finished run file besides figures: re-detected vortex tables (CSV in
micrometres). The standard figures are drawn by gpe/figures/standard.py.

Reads run files through gpe.run.runfile and the stored protocol (gpe.run.reading.protocol_of); writes only
the files asked for, and the run file only when re-detection is stored on purpose.

Units: simulation units inside; micrometres and milliseconds in the CSV and on figure axes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from gpe.analysis.tracking import find_events, track_vortices
from gpe.analysis.vortices import VORTEX_DTYPE, find_vortices
from gpe.errors import VorthermError
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import RunFile
from gpe.run.simulate import DETECT_THRESHOLD


def vortex_csv_path(run_path, csv_path=None) -> Path:
    """Where :func:`redetect` writes its table: ``csv_path``, or ``RUN_vortices.csv`` beside the run.

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
    so the stored table never mixes two detections). An existing CSV is refused before anything
    is read or stored unless ``overwrite`` (``--force``); the CSV is never the run file itself.

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
    if csv_path.exists() and not overwrite:
        raise VorthermError(f"{csv_path} exists already; pass --force (overwrite=True) to "
                            "overwrite it, or choose another file with --csv")
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        n_frames = len(times)
        chosen = select_frames(run_path, frames, n_frames)
        grid = protocol.grid
        v_static = protocol.build_trap()
        mask = protocol.trap.detection_region(v_static) if region == "trap" else None
        tables = []
        for f in chosen:
            det = find_vortices(np.asarray(run.psi(f)), grid.x, grid.y, threshold=threshold,
                                region=mask)
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
            run.replace_vortices(table)
    _write_vortex_csv(csv_path, table, protocol)
    return table, events, csv_path


def _write_vortex_csv(path: Path, table: np.ndarray, protocol) -> None:
    """Vortex table in SI: frame, t [ms], x [um], y [um] about the grid centre, sign, track."""
    um = protocol.units.length_m * 1e6
    with Path(path).open("w") as fh:
        fh.write("# vortices detected by vortherm; x, y in micrometres about the grid centre\n")
        fh.write("frame,t_ms,x_um,y_um,sign,track\n")
        for r in table:
            fh.write(f"{int(r['frame'])},{protocol.units.time_to_ms(r['t']):.6g},{r['x'] * um:.6g},{r['y'] * um:.6g},"
                     f"{int(r['sign'])},{int(r['track'])}\n")
