"""Figures of the thermometry back end: beta over time, and a simulated-vs-measured comparison.

Palette of our own: beta band in slate blue, negative-temperature side shaded in a warm tint,
thresholds as dashed grey lines labelled in place.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import matplotlib.pyplot as plt
import numpy as np

from thermo.data.compare import ROWS, pooled_pair_correlation
from thermo.quantities import QUANTITIES

BAND = "#4a5d8f"
WARM = "#f3d9c4"


def plot_temperature_series(result: dict, path) -> Path:
    """beta~N per frame (or shot) with its 95% band, energy per vortex and clustering.

    ``result`` is the dictionary built by ``vortherm temperature`` (records, ensemble, ...).
    Thresholds (clustering onset, like-sign collapse) are drawn where the records give them.
    """
    recs = result["records"]
    tk = result["time_key"]
    x = np.array([r[tk] if tk == "t" else i for i, r in enumerate(recs)], dtype=float)
    n = np.array([r["n_plus"] + r["n_minus"] for r in recs], dtype=float)
    beta = np.array([r["beta"] for r in recs], dtype=float)
    lo = np.array([r["beta_ci95"][0] for r in recs], dtype=float)
    hi = np.array([r["beta_ci95"][1] for r in recs], dtype=float)
    xlabel = f"time [{result['time_unit']}]" if tk == "t" else "shot index"

    fig, axes = plt.subplots(3, 1, figsize=(7.5, 8.5), sharex=True, constrained_layout=True)
    ax = axes[0]
    ax.axhspan(-1e3, 0, color=WARM, zorder=0, label="negative temperature")
    ax.fill_between(x, lo * n, hi * n, color=BAND, alpha=0.3, lw=0, label="95% interval")
    ax.plot(x, beta * n, "o-", color=BAND, ms=3, label=r"$\tilde\beta N$ (microcanonical)")
    # thresholds of the most common vortex number, in beta~N; the label of the lower line goes
    # below it and that of the upper line above it, since the two lie close
    lines = {}
    for r in recs:
        nn = r["n_plus"] + r["n_minus"]
        for name, value in r.get("thresholds", {}).items():
            if name in ("clustering_onset", "like_sign_collapse") and name not in lines:
                lines[name] = value * nn
    for k, (name, level) in enumerate(sorted(lines.items(), key=lambda item: item[1])):
        ax.axhline(level, color="0.45", ls="--", lw=1)
        ax.text(x[0], level, " " + name.replace("_", " "), fontsize=8, color="0.3",
                va="top" if k == 0 else "bottom")
    finite = np.isfinite(beta * n)
    if finite.any():
        span = np.nanmax(np.abs(np.concatenate([lo[finite] * n[finite], hi[finite] * n[finite]])))
        ax.set_ylim(-min(span, 60) * 1.1, min(span, 60) * 1.1)
    ax.set_ylabel(r"$\tilde\beta N$  [$N/E_0$]")
    ax.set_title(f"Vortex-gas inverse temperature: {Path(result['source']).name}")
    ax.legend(loc="upper right", fontsize=8)

    ax = axes[1]
    ax.plot(x, [r["energy_per_vortex"] for r in recs], "s-", color="#7a4f2a", ms=3)
    ax.set_ylabel(r"energy per vortex  [$E_0 = \rho\kappa^2/4\pi$]")

    ax = axes[2]
    for key, colour, label in (("dipole_fraction", "#2f7f6f", "dipole fraction"),
                               ("cluster_fraction", "#b4443a", "cluster fraction"),
                               ("free_fraction", "#8a8a8a", "free fraction"),
                               ("c1", "#4a5d8f", r"$C_1$")):
        ax.plot(x, [r[key] for r in recs], "-", color=colour, label=label)
    ax.set_ylabel("clustering observables")
    ax.set_xlabel(xlabel)
    ax.legend(loc="best", fontsize=8)
    fig.savefig(path, dpi=120)
    plt.close(fig)
    return Path(path)


def _domain_outline(ax: Any, domain: Any, scale: float) -> None:
    kind = getattr(domain, "kind", "disk")
    if kind == "disk":
        th = np.linspace(0, 2 * np.pi, 200)
        ax.plot(scale * np.cos(th), scale * np.sin(th), color="0.3", lw=1)
    else:
        pts = np.asarray(domain.sample_uniform(np.random.default_rng(0), 20000))
        x0, y0 = pts.min(axis=0)
        x1, y1 = pts.max(axis=0)
        ax.plot(scale * np.array([x0, x1, x1, x0, x0]), scale * np.array([y0, y0, y1, y1, y0]),
                color="0.3", lw=1)


def plot_comparison(comparison, path: str | Path | None = None, *,
                    length_scale_um: float | None = None, example: int = 0) -> Any:
    """Figure: per-shot histograms overlaid, g++(r) and g+-(r) of both sides, and one
    example configuration of each side drawn to the same scale.

    Parameters
    ----------
    comparison : result of :func:`compare_ensembles`.
    path : if given, the figure is saved there (format from the suffix).
    length_scale_um : if given, example configurations are drawn in micrometres.
    example : index of the shot drawn from each side.

    Returns
    -------
    matplotlib.figure.Figure

    Units: histogram axes as in thermo.quantities; r and positions in units of the domain
    size (or um with ``length_scale_um``).
    """
    colours = ("#1b7837", "#762a83")  # simulation, measured
    fig, axes = plt.subplots(3, 5, figsize=(17, 10), constrained_layout=True)
    flat = axes.ravel()
    for ax, name in zip(flat[:9], ROWS):
        a, b = comparison.per_shot[name]
        a, b = a[np.isfinite(a)], b[np.isfinite(b)]
        both = np.concatenate([a, b])
        if both.size == 0:
            ax.set_axis_off()
            continue
        edges = np.histogram_bin_edges(both, bins=min(30, max(5, int(np.sqrt(both.size)))))
        for vals, c, lab in ((a, colours[0], comparison.labels[0]),
                             (b, colours[1], comparison.labels[1])):
            ax.hist(vals, bins=edges, density=True, histtype="step", lw=1.8, color=c, label=lab)
        row = next((r for r in comparison.rows if r.quantity == name), None)
        ptxt = f"p_KS={row.p_ks:.2g}, p_perm={row.p_permutation:.2g}" if row else ""
        ax.set_title(f"{name}\n{ptxt}", fontsize=9)
        ax.set_xlabel(QUANTITIES[name].unit, fontsize=8)
    flat[0].legend(fontsize=8)

    scale = 1.0 if length_scale_um is None else float(length_scale_um)
    unit = "domain size" if length_scale_um is None else "um"
    pts = np.asarray(comparison.domain.sample_uniform(np.random.default_rng(0), 20000))
    # the last bins near the diameter hold almost no reference pairs and are pure noise
    r_max = 0.9 * float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))
    for ax, which, title in ((flat[9], 1, "g_like(r) (++ and --)"),
                             (flat[10], 2, "g_+-(r)")):
        for configs, c, lab in ((comparison.simulation, colours[0], comparison.labels[0]),
                                (comparison.measured, colours[1], comparison.labels[1])):
            res = pooled_pair_correlation(configs, comparison.domain, r_max)
            ax.plot(scale * res[0], res[which], color=c, marker=".", label=lab)
        ax.axhline(1.0, color="0.6", lw=0.8, ls="--")
        ax.set_title(title, fontsize=9)
        ax.set_xlabel(f"r ({unit})", fontsize=8)
    for ax, configs, lab in ((flat[11], comparison.simulation, comparison.labels[0]),
                             (flat[12], comparison.measured, comparison.labels[1])):
        pos, s = configs[min(example, len(configs) - 1)]
        _domain_outline(ax, comparison.domain, scale)
        plus, minus = s > 0, s < 0
        ax.scatter(scale * pos[plus, 0], scale * pos[plus, 1], s=40, marker="o",
                   facecolor="#f4a582", edgecolor="#b2182b", label="+")
        ax.scatter(scale * pos[minus, 0], scale * pos[minus, 1], s=44, marker="^",
                   facecolor="#92c5de", edgecolor="#2166ac", label="-")
        ax.set_aspect("equal")
        ax.set_title(f"{lab}: one shot\nN+={int(plus.sum())}, N-={int(minus.sum())}",
                     fontsize=9)
        ax.set_xlabel(f"x ({unit})", fontsize=8)
        ax.legend(fontsize=7, loc="upper right")
    lims = [flat[11].get_xlim(), flat[12].get_xlim(), flat[11].get_ylim(), flat[12].get_ylim()]
    lo, hi = min(v[0] for v in lims), max(v[1] for v in lims)
    for ax in (flat[11], flat[12]):
        ax.set_xlim(lo, hi)
        ax.set_ylim(lo, hi)
    text = [f"{r.quantity}: {r.simulation:.3g} vs {r.measured:.3g}"
            f"{'  *' if r.significant else ''}" for r in comparison.rows]
    # the notes (long verdict sentences) are in the CSV/JSON; here only the table, so the
    # text panel does not stretch the layout
    flat[13].text(0.0, 1.0, "\n".join(["sim vs measured (* differs at 5%)"] + text),
                  va="top", fontsize=8, family="monospace", transform=flat[13].transAxes)
    flat[13].set_axis_off()
    flat[14].set_axis_off()
    flat[9].legend(fontsize=8)
    if path is not None:
        fig.savefig(path, dpi=110)
    return fig
