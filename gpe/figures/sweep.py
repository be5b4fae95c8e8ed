"""Figures of a sweep: the phase map of beta~ N over two swept keys, or beta~ N along one.

Only grid points with a value are drawn: a point that failed, is pending or whose estimate is
undefined is left blank and named in a note under the axes (never interpolated, no contour
across the gaps). A point whose estimate is a bound (its configurations beyond the sampled
density of states) is hatched and carries an open caret, as in gpe/figures/thermometry.py:
v for beta~ N below the value, ^ for above. Imported lazily by the command line; the numerics
never import it; no backend is chosen here.

Units: axis values in the protocol's units of the swept key; beta~ N dimensionless; beta in
1/E0 with E0 = rho kappa^2 / (4 pi).
"""

from __future__ import annotations

import math
import os
import textwrap
from collections.abc import Mapping
from typing import Any

import numpy as np
from matplotlib.collections import PatchCollection
from matplotlib.colors import CenteredNorm, LinearSegmentedColormap, Normalize
from matplotlib.patches import Patch, Rectangle

from gpe.figures.style import (
    CYCLE,
    MINUS_COLOUR,
    PLUS_COLOUR,
    legend_outside,
    new_figure,
    save,
)
from gpe.sweep.file import Axis, SweepError
from gpe.sweep.table import SweepResult, read_summary

#: Diverging map of the signed quantities (beta~ N, beta), centred on 0 (white: infinite
#: temperature): the - colour for negative beta (clustered vortices), the + colour for positive,
#: as the negative side is tinted in gpe/figures/thermometry.py.
BETA_CMAP = LinearSegmentedColormap.from_list("beta", [MINUS_COLOUR, "#FFFFFF", PLUS_COLOUR])
#: Quantities drawn with the diverging map.
SIGNED = ("beta_n", "beta")
#: Edge of bound cells, carets and the 1-D line.
INK = CYCLE[0]
#: Background of the map: where no point was computed (never a colour of the scale).
BLANK = "#E5E5E5"
#: Bound markers: matplotlib's caret-down (7) and caret-up (6), as in the thermometry figure.
BOUND_MARKERS = {"upper": (7, r"bound: $\tilde\beta N$ below"),
                 "lower": (6, r"bound: $\tilde\beta N$ above")}

_PRETTY = {"beta": r"$\beta$", "beta_n": r"$\tilde\beta N$",
           "energy_per_vortex": "energy per vortex", "n_plus": r"$N_+$", "n_minus": r"$N_-$"}
_PRETTY_UNIT = {"1/E0": r"1/$E_0$", "E0": r"$E_0$"}


def quantity_label(name: str, unit: str) -> str:
    """Axis label of a measured quantity, with its unit (none shown for pure numbers)."""
    text = _PRETTY.get(name, name.replace("_", " "))
    unit = _PRETTY_UNIT.get(unit, unit)
    return f"{text} [{unit}]" if unit and unit != "1" else text


def _edges(values: np.ndarray, log: bool) -> np.ndarray:
    """Cell edges around sorted centres (geometric midpoints on a log axis)."""
    v = np.log(values) if log else values.astype(float)
    if v.size == 1:
        half = 0.5 * (abs(v[0]) or 1.0) if not log else 0.5
        e = np.array([v[0] - half, v[0] + half])
    else:
        mid = 0.5 * (v[1:] + v[:-1])
        e = np.concatenate([[v[0] - (mid[0] - v[0])], mid, [v[-1] + (v[-1] - mid[-1])]])
    return np.exp(e) if log else e


def _positions(axis: Axis, values: list) -> tuple[np.ndarray, list[str] | None]:
    """Numeric positions of an axis' values; string values are placed at 0, 1, 2, ..."""
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values):
        return np.asarray(values, dtype=float), None
    return np.arange(len(values), dtype=float), [str(v) for v in values]


def _num(v: Any) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def point_values(row: Mapping[str, Any], quantity: str) -> dict:
    """What a map draws of one grid point: value, 95 % interval, bound and why it is missing.

    ``beta_n`` is the ensemble pooled over the seeds; any other quantity is its mean over seeds
    with the bootstrap interval (never a bound).

    Units: those of the quantity.
    """
    if quantity == "beta_n":
        value, lo, hi = (_num(row.get(k)) for k in ("beta_n", "beta_n_lo95", "beta_n_hi95"))
        bound = str(row.get("bound") or "")
        why = str(row.get("beta_n_reason") or "")
    else:
        value, lo, hi = (_num(row.get(f"{quantity}_{s}")) for s in ("mean", "lo95", "hi95"))
        bound, why = "", ""
    if not math.isfinite(value):
        why = why or ("no seed finished" if not row.get("n_ok") else "undefined at every seed")
    return {"value": value, "lo": lo, "hi": hi, "bound": bound, "missing": why}


def _norm_and_cmap(quantity: str, z: np.ndarray):
    finite = z[np.isfinite(z)]
    if quantity in SIGNED:
        norm, cmap = CenteredNorm(vcenter=0.0), BETA_CMAP
    else:
        norm, cmap = Normalize(), "viridis"
    if finite.size:
        norm.autoscale(finite)
        if quantity in SIGNED and norm.halfrange == 0:
            norm.halfrange = 1.0   # every point exactly at 0: any symmetric range will do
    return norm, cmap


def _check(result: SweepResult, quantity: str) -> None:
    if quantity == "beta_n":
        if result.points and "beta_n" not in result.points[0]:
            raise SweepError("this sweep's summary has no pooled beta_n (it was written by an "
                             "older version); rerun the same sweep command to add it (finished "
                             "points are not computed again), or plot quantity='beta'")
    elif quantity not in result.quantities:
        raise SweepError(f"quantity '{quantity}' was not measured in this sweep; accepted: "
                         f"beta_n, {', '.join(result.quantities)}")


def plot_sweep(result: SweepResult | str | os.PathLike, quantity: str = "beta_n", *,
               select: Mapping[str, Any] | None = None, ax: Any = None,
               path: str | os.PathLike | None = None, format: str | None = None) -> Any:
    """Draw ``quantity`` over the swept keys: a map for two keys, a line for one.

    The default, beta~ N, is the ensemble of every grid point pooled over its seeds (with its
    95 % interval); another measured quantity is drawn as its mean over seeds (with the
    bootstrap 95 % interval over seeds). Further swept keys are fixed with ``select``.

    Parameters
    ----------
    result : a :class:`SweepResult` or the sweep's output folder.
    quantity : "beta_n" (default) or one of the measured quantities.
    select : values for swept keys that are not plotted, ``{key: value}``.
    ax : matplotlib Axes to draw into; a new figure otherwise.
    path : also save the figure there (through gpe.figures.style.save, replacing a previous
        map); ``format`` png, pdf or svg (default from the suffix).

    Returns
    -------
    matplotlib.figure.Figure

    Units
    -----
    Axes in the protocol units of the swept keys (shown in the labels); beta~ N dimensionless,
    other quantities in their units (thermo.quantities).
    """
    if not isinstance(result, SweepResult):
        result = read_summary(result)
    _check(result, quantity)
    select = dict(select or {})
    keys = [a.key for a in result.axes]
    for k in select:
        if k not in keys:
            raise SweepError(f"select: '{k}' is not a swept key; swept keys: {', '.join(keys)}")
    rows = [r for r in result.points if all(r[k] == v for k, v in select.items())]
    free = [a for a in result.axes if a.key not in select and len(a.values) > 1]
    if not rows:
        raise SweepError(f"select {select} matches no grid point")
    if len(free) not in (1, 2):
        raise SweepError(f"a sweep plot shows one or two swept keys, but {len(free)} vary "
                         f"({', '.join(a.key for a in free)}); fix the others with select")
    unit = result.units.get(quantity if quantity == "beta_n" else f"{quantity}_mean", "")
    if ax is None:
        ax = new_figure(6.4, 4.8).add_subplot()
    fig = ax.figure
    drawn = [(r, point_values(r, quantity)) for r in rows]
    label = quantity_label(quantity, unit)
    if len(free) == 1:
        _line(ax, free[0], drawn, quantity, label)
    else:
        _map(fig, ax, free, drawn, quantity, label)
    missing = [(r, v) for r, v in drawn if not math.isfinite(v["value"])]
    handles, labels = ax.get_legend_handles_labels()
    if missing:
        # listed, never filled in: the blank cells show the axes' grey, not a colour of the scale
        handles.append(Patch(facecolor=BLANK, edgecolor="none"))
        labels.append(f"not drawn ({len(missing)} of {len(drawn)}):\n" + "\n".join(
            textwrap.fill(f"{r['grid_id']} ({', '.join(f'{a.key} = {r[a.key]}' for a in free)})"
                          f": {v['missing']}", 90, subsequent_indent="    ")
            for r, v in missing))
    if handles:
        legend_outside(fig, handles, labels, where="lower center", ncols=1)
    fixed = ", ".join(f"{k} = {v}" for k, v in select.items())
    what = "pooled over seeds" if quantity == "beta_n" else "mean over seeds"
    ax.set_title(f"{label} over the sweep, {what}" + (f" ({fixed})" if fixed else ""),
                 fontsize="medium")
    if path is not None:
        save(fig, path, format, overwrite=True)
    return fig


def _bound_markers(ax, x, y, bounds, fill: str = "none") -> None:
    for kind, (marker, text) in BOUND_MARKERS.items():
        sel = np.array([b == kind for b in bounds], dtype=bool)
        if sel.any():
            ax.plot(np.asarray(x)[sel], np.asarray(y)[sel], ls="none", marker=marker, ms=11,
                    mfc=fill, mec=INK, mew=1.5, label=text, zorder=4)


def _line(ax, axis: Axis, drawn, quantity: str, label: str) -> None:
    drawn = sorted(drawn, key=lambda d: axis.values.index(d[0][axis.key]))
    x, ticks = _positions(axis, [r[axis.key] for r, _ in drawn])
    val = np.array([v["value"] for _, v in drawn])
    lo = np.array([v["lo"] for _, v in drawn])
    hi = np.array([v["hi"] for _, v in drawn])
    bounds = [v["bound"] for _, v in drawn]
    ok = np.isfinite(val)
    free = ok & np.array([not b for b in bounds])
    if quantity in SIGNED:
        ax.axhline(0.0, color=INK, lw=0.8)
    err = np.array([val - lo, hi - val])
    has_err = free & np.isfinite(lo) & np.isfinite(hi)
    ax.errorbar(x[has_err], val[has_err], yerr=err[:, has_err], fmt="o", color=INK, ms=5,
                capsize=3, label="95 % interval")
    only = free & ~has_err
    if only.any():
        ax.plot(x[only], val[only], "o", color=INK, ms=5, label="no interval (one seed)")
    _bound_markers(ax, x[ok], val[ok], [b for b, k in zip(bounds, ok) if k])
    if axis.scale == "log" and ticks is None:
        ax.set_xscale("log")
    if ticks:
        ax.set_xticks(x, ticks)
    ax.set_xlabel(axis.title)
    ax.set_ylabel(label)


def _map(fig, ax, free, drawn, quantity: str, label: str) -> None:
    ax_y, ax_x = free  # the first swept key goes up the page, the second along it
    xv, xt = _positions(ax_x, list(ax_x.values))
    yv, yt = _positions(ax_y, list(ax_y.values))
    ox, oy = np.argsort(xv), np.argsort(yv)
    xe = _edges(xv[ox], ax_x.scale == "log" and xt is None)
    ye = _edges(yv[oy], ax_y.scale == "log" and yt is None)
    col_of = {int(i): k for k, i in enumerate(ox)}
    row_of = {int(i): k for k, i in enumerate(oy)}
    cells, values, bound_cells, centres, bounds = [], [], [], [], []
    for r, v in drawn:
        if not math.isfinite(v["value"]):
            continue
        i = col_of[ax_x.values.index(r[ax_x.key])]
        j = row_of[ax_y.values.index(r[ax_y.key])]
        rect = (xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j]
        cells.append(Rectangle(*rect))
        values.append(v["value"])
        if v["bound"]:
            bound_cells.append(Rectangle(*rect))
            centres.append((xv[ox][i], yv[oy][j]))
            bounds.append(v["bound"])
    z = np.asarray(values, dtype=float)
    norm, cmap = _norm_and_cmap(quantity, z)
    mesh = PatchCollection(cells, cmap=cmap, norm=norm, edgecolor="none", gid="computed")
    mesh.set_array(z)
    ax.add_collection(mesh)
    if bound_cells:
        ax.add_collection(PatchCollection(bound_cells, facecolor="none", edgecolor=INK,
                                          hatch="//", linewidth=0.8, gid="bounds"))
        # a white caret: it stays visible on the darkest cell
        _bound_markers(ax, [c[0] for c in centres], [c[1] for c in centres], bounds, "white")
    ax.set_facecolor(BLANK)
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(ye[0], ye[-1])
    if ax_x.scale == "log" and xt is None:
        ax.set_xscale("log")
    if ax_y.scale == "log" and yt is None:
        ax.set_yscale("log")
    if xt:
        ax.set_xticks(xv[ox], [xt[i] for i in ox])
    if yt:
        ax.set_yticks(yv[oy], [yt[i] for i in oy])
    ax.set_xlabel(ax_x.title)
    ax.set_ylabel(ax_y.title)
    if cells:
        fig.colorbar(mesh, ax=ax, label=label)
