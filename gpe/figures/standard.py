"""The standard figures of a run file, drawn from its stored frames and saved as PNG.

Reads the run through gpe/run (stored protocol, frames, vortex table, observables) and draws
with gpe/figures/run.py; the backend is the caller's (the CLI runs headless).

Units: axes in micrometres and milliseconds.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np

from gpe.analysis.spectra import kinetic_energy_spectra
from gpe.analysis.tracking import find_events
from gpe.figures import run as plots
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import RunFile


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
        time_ms = protocol.units.time_to_ms(1.0)
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
