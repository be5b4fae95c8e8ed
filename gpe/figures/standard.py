"""The standard figures of a run file, drawn from its stored frames and saved as png, pdf or svg.

Reads the run through gpe/run (stored protocol, frames, vortex table, observables), draws with
gpe/figures/run.py and saves with gpe.figures.style.save; no backend is touched. Existing
figure files are refused by name before anything is drawn, unless ``overwrite``.

Units: axes in micrometres and milliseconds; energies per atom in mu and nK.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from gpe.analysis.spectra import kinetic_energy_spectra
from gpe.analysis.tracking import find_events
from gpe.errors import VorthermError
from gpe.figures import run as plots
from gpe.figures import style
from gpe.run.frames import drive_end
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import RunFile

#: Samples of a beam's path drawn over the density (over the whole run).
PATH_SAMPLES = 400


class _LazyFrames:
    """Frames of an open run file, read one at a time when indexed (figures need few)."""

    def __init__(self, run) -> None:
        self._run = run

    def __len__(self) -> int:
        return len(self._run.frame_times())

    def __getitem__(self, index: int) -> np.ndarray:
        return np.asarray(self._run.psi(int(index)))


def beam_paths(beams, t_end: float, samples: int = PATH_SAMPLES) -> list[np.ndarray]:
    """The path of every beam centre while it is on, sampled over [0, t_end]; rows where the
    beam is off are NaN, which breaks the drawn line.

    Units: t_end in hbar/mu; positions in xi.
    """
    if not beams.n_beams:
        return []
    t = np.linspace(0.0, float(t_end), samples)
    xy = np.array([beams.positions(s) for s in t])        # (samples, n_beams, 2)
    on = np.array([beams.amplitudes(s) != 0.0 for s in t])  # (samples, n_beams)
    xy[~on] = np.nan
    return [xy[:, b, :] for b in range(beams.n_beams)]


def beam_positions(beams, times, frames) -> dict[int, np.ndarray]:
    """Centres of the beams that are on at each chosen frame. Units: xi."""
    out = {}
    for f in frames:
        t = float(times[f])
        on = beams.amplitudes(t) != 0.0
        out[f] = beams.positions(t)[on]
    return out


def drive_window(protocol, t_end: float) -> tuple[float, float] | None:
    """(first switch-on, last switch-off) of the beams, the end of the run for a beam that
    never switches off; None without beams. Units: hbar/mu."""
    if not protocol.beams:
        return None
    start = min(b.ramp.on_time for b in protocol.beams)
    end, _ = drive_end(protocol)
    return (float(start), float(t_end if end is None else min(end, t_end)))


def figure_names(stem: str, frames) -> list[str]:
    """File stems of the standard figures of a run named ``stem`` at ``frames``."""
    names = ["density_phase", "vortex_counts", "energies"]
    names += [f"spectra_frame{f}" for f in frames]
    return [f"{stem}_{n}" for n in names]


def make_figures(run_path, out_dir, *, frames=None, movie: bool = False, format: str = "png",
                 overwrite: bool = False) -> list[Path]:
    """Draw the standard figures of a run into ``out_dir``; returns the files written.

    Density and phase with vortex markers, the beams' paths and centres at the chosen frames;
    vortex numbers with annihilation/creation events and the drive window over time; energies
    per atom beside the chemical potential (mu and nK); kinetic-energy spectra at the chosen
    frames; optionally an animation. ``format``: png, pdf or svg.
    """
    fmt = style.check_format(format, "--format")
    out_dir = Path(out_dir)
    stem = Path(run_path).stem
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        chosen = select_frames(run_path, frames, len(times), default="last")
        targets = [out_dir / f"{name}.{fmt}" for name in figure_names(stem, chosen)]
        if movie:
            targets += [out_dir / f"{stem}_movie.mp4", out_dir / f"{stem}_movie.gif"]
        existing = [str(p) for p in targets if p.exists()]
        if existing and not overwrite:
            raise VorthermError(f"{', '.join(existing)} exist(s) already; pass --force to "
                                "replace the figures, or -o for another folder")
        out_dir.mkdir(parents=True, exist_ok=True)
        written: list[Path] = []

        def save(fig, name: str) -> None:
            written.append(style.save(fig, out_dir / f"{stem}_{name}", fmt, overwrite=True))

        table = run.read_vortices()
        obs = run.read_observables()
        lazy = _LazyFrames(run)
        length_um = protocol.units.length_m * 1e6
        time_ms = protocol.units.time_to_ms(1.0)
        mu_nK = protocol.units.temperature_K * 1e9
        grid = protocol.grid
        beams = protocol.build_beams()
        t_end = float(times[-1]) if len(times) else 0.0
        drive = drive_window(protocol, t_end)
        save(plots.density_phase_panels(lazy, grid.x, grid.y, times, vortex_table=table,
                                        frames=chosen, length_um=length_um, time_ms=time_ms,
                                        beam_paths=beam_paths(beams, t_end),
                                        beam_positions=beam_positions(beams, times, chosen)),
             "density_phase")
        # the counts run over the whole time line: point-vortex frames after a hand-off too
        timeline = np.asarray(run.timeline())
        events = find_events(table, timeline) if table.size else None
        save(plots.vortex_counts(table, timeline, events, time_ms=time_ms, drive=drive),
             "vortex_counts")
        table = table[table["frame"] < len(times)]    # the snapshots' own rows, for the movie
        save(plots.energies(times, obs, time_ms=time_ms, mu_nK=mu_nK, drive=drive), "energies")
        for f in chosen:
            spec = kinetic_energy_spectra(lazy[f], grid)
            save(plots.spectra(spec, t=times[f], time_ms=time_ms), f"spectra_frame{f}")
        if movie:
            for old in targets[-2:]:
                if old.exists():
                    old.unlink()   # overwrite was asked for (checked above)
            path = plots.write_animation(lazy, grid.x, grid.y, times,
                                         out_dir / f"{stem}_movie.gif", vortex_table=table,
                                         length_um=length_um, time_ms=time_ms)
            written.append(Path(path))
    return written

