"""Figures of the field side: density/phase panels with vortices and beams, vortex numbers,
energies per atom, kinetic-energy spectra, and animations.

Nothing outside the command line imports this module, so ``import gpe`` never loads matplotlib.
Functions take arrays and tables, never paths, and return a ``matplotlib.figure.Figure`` made
without pyplot (gpe/figures/style.py): the caller shows or saves it
(``gpe.figures.style.save``); no backend is touched. Lengths are shown in micrometres when
``length_um`` (the healing length in um) is given, else in xi; times in ms when ``time_ms``
(hbar/mu in ms) is given. Colours and markers are the shared ones of gpe/figures/style.py.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
from matplotlib import animation
from matplotlib.lines import Line2D

from gpe.analysis.tracking import ANNIHILATION
from gpe.errors import VorthermError
from gpe.figures import style

__all__ = ["density_phase_panels", "vortex_counts", "energies", "spectra", "write_animation"]


def _scales(length_um, time_ms):
    ls, lu = (length_um, "µm") if length_um else (1.0, "ξ")
    ts, tu = (time_ms, "ms") if time_ms else (1.0, "ħ/µ")
    return ls, lu, ts, tu


def _mark_drive(ax, drive, ts) -> None:
    """The drive window (beams on) as a grey band behind the data."""
    if drive is not None and drive[1] > drive[0]:
        ax.axvspan(drive[0] * ts, drive[1] * ts, color=style.DRIVE_COLOUR, zorder=0, lw=0,
                   label="beams on (drive)")


def density_phase_panels(psi_frames, x, y, times, vortex_table=None, frames=None, *,
                         length_um: float | None = None, time_ms: float | None = None,
                         beam_paths: Sequence[np.ndarray] | None = None,
                         beam_positions: Mapping[int, np.ndarray] | None = None):
    """Density and phase of chosen frames, one column per frame, vortices and beams marked.

    Parameters
    ----------
    psi_frames : sequence/array (F, ny, nx) of complex
    x, y : grid axes; times : (F,)
    vortex_table : VORTEX_DTYPE array, optional
    frames : list of frame indices (default: first, middle, last)
    beam_paths : one (K, 2) array per beam, the path of its centre while it is on (NaN rows
        break the line); drawn dashed over the density.
    beam_positions : frame index -> (B, 2) centres of the beams on at that frame; open rings.

    Units: x, y, beam paths and positions in xi; times in hbar/mu; density in n0 (|psi|^2).
    """
    n_frames = len(psi_frames)
    if frames is None:
        frames = sorted({0, n_frames // 2, n_frames - 1})
    for f in frames:
        if not -n_frames <= f < n_frames:
            raise VorthermError(f"density_phase_panels: frame {f} is out of range; the run has "
                                f"{n_frames} frames (0..{n_frames - 1})")
    ls, lu, ts, tu = _scales(length_um, time_ms)
    extent = [x[0] * ls, x[-1] * ls, y[0] * ls, y[-1] * ls]
    fig = style.new_figure(3.6 * len(frames), 7.4)
    axes = fig.subplots(2, len(frames), squeeze=False)
    handles = {}
    for col, f in enumerate(frames):
        f = f % n_frames
        psi = np.asarray(psi_frames[f])
        dens = np.abs(psi) ** 2
        im0 = axes[0, col].imshow(dens, origin="lower", extent=extent, cmap="magma")
        # the phase is meaningless where there is no fluid: leave it blank there
        phase = np.ma.masked_where(dens < 0.05 * dens.max(), np.angle(psi))
        im1 = axes[1, col].imshow(phase, origin="lower", extent=extent, cmap="twilight",
                                  vmin=-np.pi, vmax=np.pi, interpolation="nearest")
        fig.colorbar(im0, ax=axes[0, col], label="density |ψ|² (n₀)", shrink=0.8)
        fig.colorbar(im1, ax=axes[1, col], label="phase (rad)", shrink=0.8)
        counts = ""
        if vortex_table is not None:
            rows = vortex_table[vortex_table["frame"] == f]
            n_plus = int(np.count_nonzero(rows["sign"] > 0))
            n_minus = int(np.count_nonzero(rows["sign"] < 0))
            counts = f"\nN₊ = {n_plus}, N₋ = {n_minus}"
            for ax in axes[:, col]:
                for sgn, st, name in ((1, style.PLUS_STYLE, "+ vortex"),
                                      (-1, style.MINUS_STYLE, "− vortex")):
                    sel = rows[rows["sign"] == sgn]
                    handles[name] = ax.scatter(sel["x"] * ls, sel["y"] * ls, label=name,
                                               zorder=3, **st)
        for path in beam_paths or ():
            path = np.asarray(path, dtype=float)
            (handles["beam path"],) = axes[0, col].plot(
                path[:, 0] * ls, path[:, 1] * ls, color=style.BEAM_COLOUR, lw=0.9, ls="--",
                alpha=0.8, zorder=2, label="beam path")
        if beam_positions is not None and f in beam_positions and len(beam_positions[f]):
            at = np.asarray(beam_positions[f], dtype=float)
            handles["beam centre"] = axes[0, col].scatter(
                at[:, 0] * ls, at[:, 1] * ls, marker="o", s=60, facecolor="none",
                edgecolor=style.BEAM_COLOUR, linewidth=1.2, zorder=2, label="beam centre")
        for ax in axes[:, col]:
            ax.set_xlim(extent[0], extent[1])
            ax.set_ylim(extent[2], extent[3])
            ax.set_xlabel(f"x ({lu})")
            ax.set_ylabel(f"y ({lu})")
        axes[0, col].set_title(f"density, frame {f}, t = {times[f] * ts:.4g} {tu}{counts}",
                               fontsize=9)
        axes[1, col].set_title(f"phase, frame {f}, t = {times[f] * ts:.4g} {tu}", fontsize=9)
    # the beams are drawn light on the dark density: dark stand-ins in the legend
    if "beam path" in handles:
        handles["beam path"] = Line2D([], [], color="0.3", lw=0.9, ls="--")
    if "beam centre" in handles:
        handles["beam centre"] = Line2D([], [], ls="", marker="o", ms=8, mfc="none", mec="0.3",
                                        mew=1.2)
    style.legend_outside(fig, list(handles.values()), list(handles))
    return fig


def _counts(vortex_table, n_frames: int) -> tuple[np.ndarray, np.ndarray]:
    frame = np.asarray(vortex_table["frame"], dtype=np.int64)
    sign = np.asarray(vortex_table["sign"])
    n_plus = np.bincount(frame[sign > 0], minlength=n_frames)[:n_frames]
    n_minus = np.bincount(frame[sign < 0], minlength=n_frames)[:n_frames]
    return n_plus, n_minus


def vortex_counts(vortex_table, frame_times, events=None, *, time_ms: float | None = None,
                  drive: tuple[float, float] | None = None):
    """N+(t) and N-(t), annihilation / creation events, and the drive window.

    N+ is a thick vermillion line with filled circles, N- a thinner blue dashed line with open
    triangles drawn on top, so both stay visible where they are equal (pairs of opposite sign).

    Units: times and ``drive`` (start, end of the beams being on) in hbar/mu (shown in ms
    when time_ms is given).
    """
    _, _, ts, tu = _scales(None, time_ms)
    frame_times = np.asarray(frame_times, dtype=float)
    n_plus, n_minus = _counts(vortex_table, frame_times.size)
    fig = style.new_figure(7, 4.4)
    ax = fig.subplots()
    _mark_drive(ax, drive, ts)
    ax.plot(frame_times * ts, n_plus, color=style.PLUS_COLOUR, lw=2.6, marker="o", ms=5,
            label="N₊ (+ vortices)", zorder=3)
    ax.plot(frame_times * ts, n_minus, color=style.MINUS_COLOUR, lw=1.3, ls="--", marker="v",
            ms=6, mfc="none", mew=1.2, label="N₋ (− vortices)", zorder=4)
    if events is not None and len(events):
        ann = events[events["kind"] == ANNIHILATION]
        cre = events[events["kind"] != ANNIHILATION]
        if ann.size:
            ax.vlines(ann["t"] * ts, 0, 1, transform=ax.get_xaxis_transform(),
                      colors=style.OKABE_ITO["black"], linestyles=":", linewidth=0.8,
                      label=f"annihilation ({ann.size})")
        if cre.size:
            ax.vlines(cre["t"] * ts, 0, 1, transform=ax.get_xaxis_transform(),
                      colors=style.OKABE_ITO["bluish_green"], linestyles="-.", linewidth=0.8,
                      label=f"creation ({cre.size})")
    ax.set_ylim(bottom=0)
    ax.set_xlabel(f"time ({tu})")
    ax.set_ylabel("number of vortices")
    ax.set_title("vortex numbers by sign over time")
    style.legend_outside(fig)
    return fig


_ENERGY_LABELS = {"e_kin": "kinetic", "e_int": "interaction", "e_trap": "trap", "e_beam": "beams",
                  "energy": "total"}


def energies(times, observables: dict, keys=("e_kin", "e_int", "e_trap", "e_beam", "energy"),
             *, time_ms: float | None = None, mu_nK: float | None = None,
             drive: tuple[float, float] | None = None):
    """Energies per atom over time beside the chemical potential, with the drive window.

    ``observables`` maps names to (T,) arrays as stored in the run file: the energies (``keys``)
    are divided by ``norm`` (the atom number in n0 xi^2) to give energies per atom in mu; ``mu``
    is drawn beside them. With ``mu_nK`` (the energy unit mu / k_B in nK) a second axis on the
    right reads the same values in nK.

    Units: stored energies in mu n0 xi^2, norm in n0 xi^2, mu in mu; times and ``drive`` in
    hbar/mu.
    """
    _, _, ts, tu = _scales(None, time_ms)
    t = np.asarray(times, dtype=float) * ts
    if "norm" not in observables:
        raise VorthermError("energies: the observables hold no 'norm' (atom number in n0 xi^2), "
                            f"needed for energies per atom; given: {sorted(observables)}")
    norm = np.asarray(observables["norm"], dtype=float)
    fig = style.new_figure(7, 4.6)
    ax = fig.subplots()
    _mark_drive(ax, drive, ts)
    colours = iter(style.CYCLE[1:])
    for key in keys:
        if key in observables:
            total = key == "energy"
            ax.plot(t, np.asarray(observables[key], dtype=float) / norm,
                    label=f"{_ENERGY_LABELS.get(key, key)} E/N",
                    color=style.OKABE_ITO["black"] if total else next(colours),
                    lw=2.0 if total else 1.2)
    if "mu" in observables:
        ax.plot(t, observables["mu"], color=style.OKABE_ITO["black"], ls="--", lw=1.4,
                label="chemical potential µ")
    ax.set_xlabel(f"time ({tu})")
    ax.set_ylabel("energy per atom (µ)")
    if mu_nK:
        right = ax.secondary_yaxis("right", functions=(lambda e: e * mu_nK, lambda k: k / mu_nK))
        right.set_ylabel("energy per atom / k_B (nK)")
    ax.set_title("energies per atom and chemical potential")
    style.legend_outside(fig, ncols=3)
    return fig


def spectra(spec, *, t: float | None = None, time_ms: float | None = None):
    """Kinetic-energy spectra (a gpe.analysis.spectra.KineticSpectra) on log-log axes, with the k^-3
    and k^-1 guide lines of a vortex core and a vortex far field (Bradley & Anderson 2012).

    Units: k in 1/xi; E(k) in mu n0 xi^3.
    """
    fig = style.new_figure(6, 4.9)
    ax = fig.subplots()
    k = spec.k[1:]
    for data, name, colour in ((spec.incompressible, "incompressible", style.OKABE_ITO["vermillion"]),
                               (spec.compressible, "compressible", style.OKABE_ITO["blue"]),
                               (spec.quantum_pressure, "quantum pressure",
                                style.OKABE_ITO["bluish_green"])):
        ax.loglog(k, np.where(data[1:] > 0, data[1:], np.nan), label=name, color=colour)
    ref = spec.incompressible[1:]
    if np.any(ref > 0):
        i0 = np.argmin(np.abs(k - 1.0))
        e0 = ref[i0]
        ax.loglog(k, e0 * (k / k[i0]) ** -3, "k--", linewidth=0.7, label="∝ k⁻³")
        ax.loglog(k, e0 * (k / k[i0]) ** -1, "k:", linewidth=0.7, label="∝ k⁻¹")
        ax.set_ylim(bottom=max(np.nanmin(np.where(ref > 0, ref, np.nan)) * 0.1, 1e-12))
    ax.set_xlabel("k (1/ξ)")
    ax.set_ylabel("E(k) (µ n₀ ξ³)")
    when = ""
    if t is not None:
        _, _, ts, tu = _scales(None, time_ms)
        when = f" at t = {t * ts:.4g} {tu}"
    ax.set_title("kinetic-energy spectra" + when)
    style.legend_outside(fig, ncols=3)
    return fig


def write_animation(psi_frames, x, y, times, path, vortex_table=None, *, fps: int = 10,
                    length_um: float | None = None, time_ms: float | None = None) -> Path:
    """Animate the density with vortex markers; mp4 via ffmpeg if present, else GIF (Pillow).

    The suffix of ``path`` is replaced by .mp4 or .gif accordingly; returns the written path.
    Units: as :func:`density_phase_panels`.
    """
    ls, lu, ts, tu = _scales(length_um, time_ms)
    extent = [x[0] * ls, x[-1] * ls, y[0] * ls, y[-1] * ls]
    n_frames = len(psi_frames)
    if n_frames == 0:
        raise VorthermError("write_animation: no frames to animate")
    vmax = max(float(np.max(np.abs(np.asarray(psi_frames[f])) ** 2)) for f in range(n_frames))
    fig = style.new_figure(5, 4.9)
    ax = fig.subplots()
    im = ax.imshow(np.abs(np.asarray(psi_frames[0])) ** 2, origin="lower", extent=extent,
                   cmap="magma", vmin=0, vmax=vmax)
    fig.colorbar(im, ax=ax, label="density |ψ|² (n₀)")
    plus = ax.scatter([], [], **style.PLUS_STYLE)
    minus = ax.scatter([], [], **style.MINUS_STYLE)
    ax.set_xlabel(f"x ({lu})")
    ax.set_ylabel(f"y ({lu})")
    style.legend_outside(fig, [plus, minus], ["+ vortex", "− vortex"])

    def draw(f):
        im.set_data(np.abs(np.asarray(psi_frames[f])) ** 2)
        if vortex_table is not None:
            rows = vortex_table[vortex_table["frame"] == f]
            for art, s in ((plus, 1), (minus, -1)):
                sel = rows[rows["sign"] == s]
                art.set_offsets(np.column_stack([sel["x"] * ls, sel["y"] * ls])
                                if sel.size else np.empty((0, 2)))
        ax.set_title(f"density, frame {f}, t = {times[f] * ts:.4g} {tu}")
        return im, plus, minus

    anim = animation.FuncAnimation(fig, draw, frames=n_frames, blit=False)
    path = Path(path)
    if shutil.which("ffmpeg"):
        path = path.with_suffix(".mp4")
        anim.save(path, writer=animation.FFMpegWriter(fps=fps))
    else:
        path = path.with_suffix(".gif")
        anim.save(path, writer=animation.PillowWriter(fps=fps))
    return path

