"""What is made from a finished run file: re-detected vortex tables (CSV in micrometres) and the
standard figures.

Reads run files through gpe.run.runfile and the stored protocol (gpe.run.simulate.protocol_of); writes only
the files asked for, and the run file only when re-detection is stored on purpose.

Units: simulation units inside; micrometres and milliseconds in the CSV and on figure axes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from gpe.errors import VorthermError
from gpe.run.simulate import DETECT_THRESHOLD, _detection_region, protocol_of, select_frames


def redetect(run_path, *, threshold: float = DETECT_THRESHOLD, region: str = "trap",
             frames=None, csv_path=None, store: bool = False):
    """Detect vortices again in stored frames; export CSV in micrometres; optionally store.

    Returns (table, events, csv_path). The run file is changed only with ``store=True``, and
    then the old vortex table is replaced in one step (only when every frame was re-detected,
    so the stored table never mixes two detections).
    """
    from gpe.run.runfile import RunFile
    from gpe.analysis.vortices import VORTEX_DTYPE, find_events, find_vortices, track_vortices

    if not 0.0 < threshold < 1.0:
        raise VorthermError(f"--threshold {threshold}: the density threshold is a fraction of "
                            "the peak background density; accepted: 0 < threshold < 1")
    if region not in ("trap", "all"):
        raise VorthermError(f"region {region!r}; accepted: 'trap', 'all'")
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        n_frames = len(times)
        chosen = select_frames(run_path, frames, n_frames)
        grid = protocol.grid
        v_static = protocol.build_trap()
        mask = _detection_region(protocol, v_static) if region == "trap" else None
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
    csv_path = Path(csv_path) if csv_path else Path(run_path).with_name(
        Path(run_path).stem + "_vortices.csv")
    _write_vortex_csv(csv_path, table, protocol)
    return table, events, csv_path


def _write_vortex_csv(path: Path, table: np.ndarray, protocol) -> None:
    """Vortex table in SI: frame, t [ms], x [um], y [um] about the grid centre, sign, track."""
    um = protocol.units.length_m * 1e6
    ms = protocol.units.time_s * 1e3
    with Path(path).open("w") as fh:
        fh.write("# vortices detected by vortherm; x, y in micrometres about the grid centre\n")
        fh.write("frame,t_ms,x_um,y_um,sign,track\n")
        for r in table:
            fh.write(f"{int(r['frame'])},{r['t'] * ms:.6g},{r['x'] * um:.6g},{r['y'] * um:.6g},"
                     f"{int(r['sign'])},{int(r['track'])}\n")


class _LazyFrames:
    """Frames of an open run file, read one at a time when indexed (figures need few)."""

    def __init__(self, run) -> None:
        self._run = run

    def __len__(self) -> int:
        return len(self._run.frame_times())

    def __getitem__(self, index: int) -> np.ndarray:
        return np.asarray(self._run.psi(int(index)))


def make_figures(run_path, out_dir, *, frames=None, movie: bool = False) -> list[Path]:
    """Draw the standard figures of a run into ``out_dir``; returns the files written.

    Density and phase with vortex markers at the chosen frames, vortex numbers with
    annihilation/creation events over time, energies over time, kinetic-energy spectra at the
    chosen frames, and optionally an animation. Axes in micrometres and milliseconds.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from gpe.figures import run as plots
    from gpe.run.runfile import RunFile
    from gpe.analysis.spectra import kinetic_energy_spectra
    from gpe.analysis.vortices import find_events

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = Path(run_path).stem
    written: list[Path] = []

    def save(fig, name: str) -> None:
        path = out_dir / f"{stem}_{name}.png"
        fig.savefig(path, dpi=110)
        plt.close(fig)
        written.append(path)

    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        n_frames = len(times)
        chosen = select_frames(run_path, frames, n_frames, default="last")
        table = run.read_vortices()
        obs = run.read_observables()
        lazy = _LazyFrames(run)
        length_um = protocol.units.length_m * 1e6
        time_ms = protocol.units.time_s * 1e3
        grid = protocol.grid
        save(plots.density_phase_panels(lazy, grid.x, grid.y, times, vortex_table=table,
                                        frames=chosen,
                                        length_um=length_um, time_ms=time_ms), "density_phase")
        events = find_events(table, times) if table.size else None
        save(plots.vortex_counts(table, times, events, time_ms=time_ms), "vortex_counts")
        save(plots.energies(times, obs, time_ms=time_ms), "energies")
        for f in chosen:
            spec = kinetic_energy_spectra(lazy[f], grid)
            save(plots.spectra(spec, t=times[f], time_ms=time_ms), f"spectra_frame{f}")
        if movie:
            path = plots.write_animation(lazy, grid.x, grid.y, times, out_dir / f"{stem}_movie.gif", vortex_table=table,
                                         length_um=length_um, time_ms=time_ms)
            written.append(Path(path))
    return written
