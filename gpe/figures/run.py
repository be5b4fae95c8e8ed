"""Figures of the field side: density/phase panels with vortices, vortex numbers, energies,
kinetic-energy spectra, and animations.

Nothing outside the command line imports this module, so ``import gpe`` never loads matplotlib;
the backend is the caller's (a notebook keeps its own, the command line runs headless).
Functions take arrays and tables, never paths; each returns the matplotlib Figure (or the
written path for animations). Lengths are shown in micrometres when ``length_um`` (the healing
length in um) is given, else in xi; times in ms when ``time_ms`` (hbar/mu in ms) is given.

Markers: + vortices are warm (orange-red) filled circles, - vortices cool (teal) triangles.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
from matplotlib import animation

from gpe.analysis.tracking import ANNIHILATION
from gpe.errors import VorthermError

__all__ = ["density_phase_panels", "vortex_counts", "energies", "spectra", "write_animation"]

PLUS_STYLE = dict(marker="o", s=28, facecolor="#e4572e", edgecolor="#5c1a0b", linewidth=0.6)
MINUS_STYLE = dict(marker="^", s=30, facecolor="#17becf", edgecolor="#0b3c49", linewidth=0.6)


def _scales(length_um, time_ms):
    ls, lu = (length_um, "µm") if length_um else (1.0, "ξ")
    ts, tu = (time_ms, "ms") if time_ms else (1.0, "ħ/µ")
    return ls, lu, ts, tu


def density_phase_panels(psi_frames, x, y, times, vortex_table=None, frames=None, *,
                         length_um: float | None = None, time_ms: float | None = None):
    """Density and phase of chosen frames, one column per frame, vortices marked.

    Parameters
    ----------
    psi_frames : sequence/array (F, ny, nx) of complex
    x, y : grid axes; times : (F,)
    vortex_table : VORTEX_DTYPE array, optional
    frames : list of frame indices (default: first, middle, last)

    Units: x, y in xi; times in hbar/mu; density shown in n0 (|psi|^2).
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
    fig, axes = plt.subplots(2, len(frames), figsize=(3.6 * len(frames), 6.8), squeeze=False,
                             constrained_layout=True)
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
        if vortex_table is not None and len(vortex_table):
            rows = vortex_table[vortex_table["frame"] == f]
            for ax in axes[:, col]:
                for sgn, style, name in ((1, PLUS_STYLE, "+"), (-1, MINUS_STYLE, "−")):
                    sel = rows[rows["sign"] == sgn]
                    ax.scatter(sel["x"] * ls, sel["y"] * ls, label=f"{name} vortex ({sel.size})",
                               **style)
            axes[0, col].legend(loc="upper right", fontsize=7, framealpha=0.7)
        axes[0, col].set_title(f"density, frame {f}, t = {times[f] * ts:.4g} {tu}")
        axes[1, col].set_title(f"phase, frame {f}, t = {times[f] * ts:.4g} {tu}")
        for ax in axes[:, col]:
            ax.set_xlabel(f"x ({lu})")
            ax.set_ylabel(f"y ({lu})")
    return fig


def vortex_counts(vortex_table, frame_times, events=None, *, time_ms: float | None = None):
    """N+(t), N-(t) and annihilation / creation events over time.

    Units: times in hbar/mu (shown in ms when time_ms is given).
    """
    _, _, ts, tu = _scales(None, time_ms)
    frame_times = np.asarray(frame_times)
    frames = np.arange(frame_times.size)
    n_plus = np.array([np.count_nonzero((vortex_table["frame"] == f) & (vortex_table["sign"] > 0))
                       for f in frames])
    n_minus = np.array([np.count_nonzero((vortex_table["frame"] == f) & (vortex_table["sign"] < 0))
                        for f in frames])
    fig, ax = plt.subplots(figsize=(7, 4), constrained_layout=True)
    ax.plot(frame_times * ts, n_plus, color="#e4572e", marker="o", ms=3, label="N₊ (+ vortices)")
    ax.plot(frame_times * ts, n_minus, color="#17becf", marker="^", ms=3, label="N₋ (− vortices)")
    if events is not None and len(events):
        ann = events[events["kind"] == ANNIHILATION]
        cre = events[events["kind"] != ANNIHILATION]
        if ann.size:
            ax.vlines(ann["t"] * ts, 0, 1, transform=ax.get_xaxis_transform(), colors="#444444",
                      linestyles=":", linewidth=0.8, label=f"annihilation ({ann.size})")
        if cre.size:
            ax.vlines(cre["t"] * ts, 0, 1, transform=ax.get_xaxis_transform(), colors="#7a9e3a",
                      linestyles="--", linewidth=0.8, label=f"creation ({cre.size})")
    ax.set_xlabel(f"time ({tu})")
    ax.set_ylabel("number of vortices")
    ax.set_title("vortex numbers by sign over time")
    ax.legend()
    return fig


def energies(times, observables: dict, keys=("e_kin", "e_int", "e_trap", "e_beam", "energy"),
             *, time_ms: float | None = None):
    """Energies over time from an observables dict (name -> (T,) array).

    Units: energies in mu n0 xi^2 (as gpe.field.solver.observables); times in hbar/mu.
    """
    _, _, ts, tu = _scales(None, time_ms)
    fig, ax = plt.subplots(figsize=(7, 4), constrained_layout=True)
    labels = {"e_kin": "kinetic", "e_int": "interaction", "e_trap": "trap", "e_beam": "beams",
              "energy": "total"}
    for key in keys:
        if key in observables:
            ax.plot(np.asarray(times) * ts, observables[key], label=labels.get(key, key),
                    linewidth=2.0 if key == "energy" else 1.2)
    ax.set_xlabel(f"time ({tu})")
    ax.set_ylabel("energy (µ n₀ ξ²)")
    ax.set_title("energies over time")
    ax.legend()
    return fig


def spectra(spec, *, t: float | None = None, time_ms: float | None = None):
    """Kinetic-energy spectra (a gpe.analysis.spectra.KineticSpectra) on log-log axes, with the k^-3
    and k^-1 guide lines of a vortex core and a vortex far field (Bradley & Anderson 2012).

    Units: k in 1/xi; E(k) in mu n0 xi^3.
    """
    fig, ax = plt.subplots(figsize=(6, 4.5), constrained_layout=True)
    k = spec.k[1:]
    for data, name, colour in ((spec.incompressible, "incompressible", "#b5179e"),
                               (spec.compressible, "compressible", "#3a86ff"),
                               (spec.quantum_pressure, "quantum pressure", "#8d99ae")):
        ax.loglog(k, np.where(data[1:] > 0, data[1:], np.nan), label=name, color=colour)
    ref = spec.incompressible[1:]
    if np.any(ref > 0):
        i0 = np.argmin(np.abs(k - 1.0))
        e0 = ref[i0]
        ax.loglog(k, e0 * (k / k[i0]) ** -3, "k--", linewidth=0.7, label="∝ k⁻³")
        ax.loglog(k, e0 * (k / k[i0]) ** -1, "k:", linewidth=0.7, label="∝ k⁻¹")
    ax.set_ylim(bottom=max(np.nanmin(np.where(ref > 0, ref, np.nan)) * 0.1, 1e-12)
                if np.any(ref > 0) else None)
    ax.set_xlabel("k (1/ξ)")
    ax.set_ylabel("E(k) (µ n₀ ξ³)")
    when = ""
    if t is not None:
        _, _, ts, tu = _scales(None, time_ms)
        when = f" at t = {t * ts:.4g} {tu}"
    ax.set_title("kinetic-energy spectra" + when)
    ax.legend(fontsize=8)
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
    fig, ax = plt.subplots(figsize=(5, 4.4), constrained_layout=True)
    im = ax.imshow(np.abs(np.asarray(psi_frames[0])) ** 2, origin="lower", extent=extent,
                   cmap="magma", vmin=0, vmax=vmax)
    fig.colorbar(im, ax=ax, label="density |ψ|² (n₀)")
    plus = ax.scatter([], [], **PLUS_STYLE)
    minus = ax.scatter([], [], **MINUS_STYLE)
    ax.set_xlabel(f"x ({lu})")
    ax.set_ylabel(f"y ({lu})")

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
    plt.close(fig)
    return path
