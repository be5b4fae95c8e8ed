"""Figures of the thermometry back end (matplotlib, imported only when a figure is asked for).

Palette of our own: beta band in slate blue, negative-temperature side shaded in a warm tint,
thresholds as dashed grey lines labelled in place.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

BAND = "#4a5d8f"
WARM = "#f3d9c4"


def plot_temperature_series(result: dict, path) -> Path:
    """beta~N per frame (or shot) with its 95% band, energy per vortex and clustering.

    ``result`` is the dictionary built by ``vortherm temperature`` (records, ensemble, ...).
    Thresholds (clustering onset, like-sign collapse) are drawn where the records give them.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

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
