"""Figures of the thermometry back end: beta~N over time, and a simulated-vs-measured comparison.

Both take data and return a ``matplotlib.figure.Figure`` (gpe.figures.style: the shared palette,
no pyplot, no backend chosen); the command line saves them with gpe.figures.style.save.
An estimate that is only a bound (its energy beyond the sampled ladder) is drawn as an open
caret pointing the way the value may lie, never as a plain point.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from gpe.figures.style import (
    CYCLE,
    DRIVE_COLOUR,
    MINUS_COLOUR,
    MINUS_STYLE,
    PLUS_COLOUR,
    PLUS_STYLE,
    legend_outside,
    new_figure,
)
from thermo.data.compare import ROWS, pooled_pair_correlation
from thermo.quantities import QUANTITIES

#: beta~N of the frames and their band; the negative-temperature side is tinted with the - colour.
BAND = CYCLE[0]
ENSEMBLE = CYCLE[1]


def _beta_n_columns(recs: list[dict]) -> tuple[np.ndarray, np.ndarray, np.ndarray, list]:
    """beta~N of every record with its 95% interval and bound ("upper"/"lower"/None)."""
    def num(v) -> float:
        return math.nan if v is None else float(v)

    val = np.array([num(r.get("beta_n")) for r in recs])
    lo = np.array([num(r.get("beta_n_ci95", [None, None])[0]) for r in recs])
    hi = np.array([num(r.get("beta_n_ci95", [None, None])[1]) for r in recs])
    return val, lo, hi, [r.get("bound") for r in recs]


def plot_temperature_series(result: dict) -> Any:
    """beta~N per frame (or shot) with its 95% band, energy per vortex and clustering.

    ``result`` is what gpe.run.thermometry.temperature_of_run(s) or temperature_of_table
    returns. Drawn: the beams-on interval (grey, when ``drive_end`` is known), the ensemble's
    window with its beta~N and 95% interval, bounds as open carets (v: beta~N below the mark,
    ^: above it), the clustering onset and like-sign collapse of the most common vortex number.

    Returns
    -------
    matplotlib.figure.Figure

    Units: beta~N dimensionless; energy per vortex in E0 = rho kappa^2/(4 pi); time in the
    protocol's display unit (or the shot index of a measured table).
    """
    recs = result["records"]
    tk = result["time_key"]
    x = np.array([r[tk] if tk == "t" else i for i, r in enumerate(recs)], dtype=float)
    val, lo, hi, bounds = _beta_n_columns(recs)
    xlabel = f"time [{result['time_unit']}]" if tk == "t" else "shot index"

    fig = new_figure(7.5, 8.5)
    axes = fig.subplots(3, 1, sharex=True)
    ax = axes[0]
    ax.axhspan(-1e3, 0, color=MINUS_COLOUR, alpha=0.08, lw=0, zorder=0,
               label="negative temperature")
    drive = result.get("drive_end")
    if tk == "t" and drive is not None and len(x) and drive > x[0]:
        for a in axes:
            a.axvspan(x[0], drive, color=DRIVE_COLOUR, lw=0, zorder=0,
                      label="beams on" if a is ax else None)
    free = np.array([b is None for b in bounds]) & np.isfinite(val)
    ax.fill_between(x, np.where(free, lo, np.nan), np.where(free, hi, np.nan), color=BAND,
                    alpha=0.2, lw=0, label="95% interval")
    ax.plot(x[free], val[free], "o-", color=BAND, ms=3, label=r"$\tilde\beta N$ per frame")
    for kind, marker, text in (("upper", 7, "bound: below"), ("lower", 6, "bound: above")):
        sel = np.array([b == kind for b in bounds]) & np.isfinite(val)
        if sel.any():
            ax.plot(x[sel], val[sel], ls="none", marker=marker, ms=8, mfc="none", mec=BAND,
                    label=text)
    ens = result.get("ensemble") or {}
    window = ens.get("window")
    if window and ens.get("beta_n") is not None and math.isfinite(float(ens["beta_n"])):
        e_lo, e_hi = (float(v) if v is not None else math.nan for v in ens["beta_n_ci95"])
        if tk == "t":
            w0, w1 = window
        else:
            w0, w1 = (x[0], x[-1]) if len(x) else (0.0, 1.0)
        ax.fill_between([w0, w1], [e_lo] * 2, [e_hi] * 2, color=ENSEMBLE, alpha=0.25, lw=0)
        sign = {"upper": "< ", "lower": "> "}.get(ens.get("bound"), "")
        ax.plot([w0, w1], [float(ens["beta_n"])] * 2, color=ENSEMBLE, lw=2,
                label=rf"ensemble $\tilde\beta N$ {sign}{float(ens['beta_n']):.3g}")
    lines = {}
    for r in recs:
        nn = r["n_plus"] + r["n_minus"]
        for name, value in r.get("thresholds", {}).items():
            if name in ("clustering_onset", "like_sign_collapse") and name not in lines:
                lines[name] = value * nn
    for k, (name, level) in enumerate(sorted(lines.items(), key=lambda item: item[1])):
        ax.axhline(level, color="0.45", ls="--", lw=1)
        ax.text(x[0] if len(x) else 0.0, level, " " + name.replace("_", " "), fontsize=8,
                color="0.3", va="top" if k == 0 else "bottom")
    finite = np.isfinite(val)
    if finite.any():
        ends = np.concatenate([val[finite], lo[finite & np.isfinite(lo)],
                               hi[finite & np.isfinite(hi)]])
        span = min(float(np.nanmax(np.abs(ends))), 60.0)
        ax.set_ylim(-span * 1.15, span * 1.15)
    ax.set_ylabel(r"$\tilde\beta N$  [1]")
    ax.set_title(f"Vortex-gas inverse temperature: {Path(str(result['source'])).name}",
                 fontsize=10)

    ax = axes[1]
    ax.plot(x, [r["energy_per_vortex"] for r in recs], "s-", color=CYCLE[2], ms=3,
            label="energy per vortex")
    ax.set_ylabel(r"energy per vortex  [$E_0 = \rho\kappa^2/4\pi$]")

    ax = axes[2]
    for key, colour, label in (("dipole_fraction", CYCLE[1], "dipole fraction"),
                               ("cluster_fraction", PLUS_COLOUR, "cluster fraction"),
                               ("free_fraction", CYCLE[4], "free fraction"),
                               ("c1", CYCLE[3], r"$C_1$")):
        ax.plot(x, [r[key] for r in recs], "-", color=colour, label=label)
    ax.set_ylabel("clustering observables")
    ax.set_xlabel(xlabel)
    legend_outside(fig, ncols=4)
    return fig


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


def plot_comparison(comparison, *, length_scale_um: tuple[float, float] | None = None,
                    example: int = 0) -> Any:
    """Figure: per-shot histograms overlaid, g_like(r) and g_+-(r) of both sides, and one
    example configuration of each side, each in its own domain.

    Parameters
    ----------
    comparison : result of thermo.data.compare.compare_ensembles.
    length_scale_um : micrometres per domain unit of (simulation, measured); if given, the
        example configurations and r are drawn in micrometres.
    example : index of the shot drawn from each side.

    Returns
    -------
    matplotlib.figure.Figure

    Units: histogram axes as in thermo.quantities; r and positions in units of each side's
    domain size (or um with ``length_scale_um``).
    """
    colours = (CYCLE[1], CYCLE[3])  # simulation, measured
    sides = (comparison.simulation, comparison.measured)
    fig = new_figure(17, 10)
    flat = fig.subplots(3, 5).ravel()
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
        ptxt = (f"p_KS={row.p_ks:.2g}, p_mean={row.p_mean:.2g}"
                if row and math.isfinite(row.p_mean) else "no test (too few units)")
        ax.set_title(f"{name}\n{ptxt}", fontsize=9)
        ax.set_xlabel(QUANTITIES[name].unit, fontsize=8)

    scales = (1.0, 1.0) if length_scale_um is None else tuple(float(v) for v in length_scale_um)
    unit = "domain size" if length_scale_um is None else "um"
    for ax, which, title in ((flat[9], 1, "g_like(r) (++ and --)"),
                             (flat[10], 2, "g_+-(r)")):
        for side, scale, c, lab in zip(sides, scales, colours, comparison.labels):
            pts = np.asarray(side.domain.sample_uniform(np.random.default_rng(0), 20000))
            # the last bins near the diameter hold almost no reference pairs and are noise
            r_max = 0.9 * float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))
            res = pooled_pair_correlation(side.configurations, side.domain, r_max)
            ax.plot(scale * res[0], res[which], color=c, marker=".", label=lab)
        ax.axhline(1.0, color="0.6", lw=0.8, ls="--")
        ax.set_title(title, fontsize=9)
        ax.set_xlabel(f"r ({unit})", fontsize=8)
    for ax, side, scale, lab in zip(flat[11:13], sides, scales, comparison.labels):
        pos, s = side.configurations[min(example, len(side.configurations) - 1)]
        _domain_outline(ax, side.domain, scale)
        plus, minus = s > 0, s < 0
        ax.scatter(scale * pos[plus, 0], scale * pos[plus, 1], **{**PLUS_STYLE,
                   "edgecolor": "black"}, label="+ vortex")
        ax.scatter(scale * pos[minus, 0], scale * pos[minus, 1], **{**MINUS_STYLE,
                   "edgecolor": "black"}, label="- vortex")
        ax.set_aspect("equal")
        ax.set_title(f"{lab}: one shot\nN+={int(plus.sum())}, N-={int(minus.sum())}",
                     fontsize=9)
        ax.set_xlabel(f"x ({unit})", fontsize=8)
    text = [f"{r.quantity}: {r.simulation:.3g} vs {r.measured:.3g}"
            f"{'  *' if r.significant else ''}" for r in comparison.rows]
    # the notes (long sentences) are in the JSON; here only the table
    flat[13].text(0.0, 1.0, "\n".join(["sim vs measured (* differs at 5%)"] + text),
                  va="top", fontsize=8, family="monospace", transform=flat[13].transAxes)
    flat[13].set_axis_off()
    flat[14].set_axis_off()
    legend_outside(fig, ncols=4)
    return fig


def plot_meanfield(ensemble: dict) -> Any:
    """Mean-field vortex densities at the fitted (beta, omega) against the radial histograms.

    ``ensemble`` is an ensemble record with ``meanfield`` (gpe.run.rotating.ensemble_rotation):
    the Poisson-Boltzmann n+(r), n-(r) of the largest group as lines, the measured or simulated
    mean density per equal-area bin (counts per shot / bin area) as steps, the goodness of fit
    in the title.

    Returns
    -------
    matplotlib.figure.Figure

    Units: r in the disk radius R; densities in vortices per R^2.
    """
    mf = ensemble.get("meanfield") or {}
    if "chi2" not in mf:
        raise ValueError("the ensemble record has no mean-field comparison (run with --rotating "
                         f"on a disk); {mf.get('note', '')}")
    edges = np.asarray(mf["edges"])
    area = np.pi * np.diff(edges ** 2)
    r = np.asarray(mf["r"])
    fig = new_figure(6.0, 4.0)
    ax = fig.subplots()
    for sign, colour, dash, count in ((1, PLUS_COLOUR, "-", mf["n_plus"]),
                                      (-1, MINUS_COLOUR, "--", mf["n_minus"])):
        if not count:
            continue
        name = "plus" if sign > 0 else "minus"
        obs = np.asarray(mf[f"observed_{name}"]) / area
        ax.stairs(obs, edges, color=colour, lw=1.5, label=f"{'+' if sign > 0 else '-'} "
                  "vortices, histogram")
        ax.plot(r, mf[f"n_{name}_profile"], color=colour, ls=dash, lw=1,
                label=f"{'+' if sign > 0 else '-'} mean field")
    ax.set_xlabel("r / R")
    ax.set_ylabel(r"vortex density [$R^{-2}$]")
    ax.set_xlim(0, 1)
    ax.set_title(rf"Poisson-Boltzmann at $\tilde\beta N$ = {ensemble['beta_rot_n']:.3g}, "
                 rf"$\tilde\omega/N$ = {ensemble['omega_n']:.3g}: $\chi^2$ = {mf['chi2']:.3g} "
                 f"/ {mf['dof']} bins (p = {mf['pvalue']:.2g})", fontsize=9)
    legend_outside(fig)
    return fig
