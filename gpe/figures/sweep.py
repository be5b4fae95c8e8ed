"""Figures of a sweep: the phase map of beta over two swept keys, or beta along one.

Imported lazily by the command line; the numerics never import it.

Units: axis values in the protocol's units of the swept key; beta in 1/E0 with
E0 = rho kappa^2 / (4 pi).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, Mapping

import numpy as np
from matplotlib.colors import CenteredNorm, Normalize
from matplotlib.figure import Figure

from gpe.sweep.file import Axis, SweepError
from gpe.sweep.table import SweepResult, read_summary

#: Diverging map for beta, centred on beta = 0 (white: infinite temperature). Large positive beta
#: (cold) is blue; negative beta, hotter than any positive temperature, is red.
BETA_CMAP = "RdBu"

_PRETTY = {"beta": r"$\beta$", "energy_per_vortex": "energy per vortex",
           "n_plus": r"$N_+$", "n_minus": r"$N_-$"}
_PRETTY_UNIT = {"1/E0": r"1/$E_0$", "E0": r"$E_0$"}


def quantity_label(name: str, unit: str) -> str:
    """Axis label of a measured quantity, with its unit."""
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


def plot_sweep(result: SweepResult | str | os.PathLike, quantity: str = "beta", *,
               select: Mapping[str, Any] | None = None, ax: Any = None,
               path: str | os.PathLike | None = None) -> Any:
    """Plot ``quantity`` (mean over seeds) against the swept keys.

    Two swept keys give a colour map with the region of negative mean beta outlined by the
    beta = 0 contour; one gives a line with its 95 % band over seeds. Further keys must be fixed
    with ``select = {key: value}``.

    Parameters
    ----------
    result : a :class:`SweepResult` or the sweep's output folder.
    quantity : one of the measured quantities (default beta).
    select : values for swept keys that are not plotted.
    ax : matplotlib Axes to draw into; a new figure otherwise.
    path : save the figure there as well.

    Returns
    -------
    matplotlib.figure.Figure

    Units
    -----
    Axes in the protocol units of the swept keys (shown in the labels); beta in 1/E0.
    """
    if not isinstance(result, SweepResult):
        result = read_summary(result)
    if quantity not in result.quantities:
        raise SweepError(f"quantity '{quantity}' was not measured in this sweep; measured: "
                         f"{', '.join(result.quantities)}")
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
    unit = result.units.get(f"{quantity}_mean", "")
    if ax is None:
        fig = Figure(figsize=(6.0, 4.5), layout="constrained")
        ax = fig.add_subplot()
    fig = ax.figure

    if len(free) == 1:
        axis = free[0]
        rows = sorted(rows, key=lambda r: axis.values.index(r[axis.key]))
        x, ticks = _positions(axis, [r[axis.key] for r in rows])
        mean = np.array([r[f"{quantity}_mean"] for r in rows], dtype=float)
        lo = np.array([r[f"{quantity}_lo95"] for r in rows], dtype=float)
        hi = np.array([r[f"{quantity}_hi95"] for r in rows], dtype=float)
        ax.fill_between(x, lo, hi, alpha=0.3, color="tab:blue", lw=0,
                        label="95 % interval over seeds")
        ax.plot(x, mean, "o-", color="tab:blue", label="mean over seeds")
        if quantity == "beta":
            ax.axhline(0.0, color="k", lw=0.8)
            neg = mean < 0
            if neg.any():
                ax.plot(x[neg], mean[neg], "s", mfc="none", mec="k", ms=9,
                        label=r"negative temperature ($\beta<0$)")
        if axis.scale == "log":
            ax.set_xscale("log")
        if ticks:
            ax.set_xticks(x, ticks)
        ax.set_xlabel(axis.title)
        ax.set_ylabel(quantity_label(quantity, unit))
        ax.legend(loc="best", fontsize="small")
    else:
        ax_y, ax_x = free  # the first swept key goes up the page, the second along it
        xv, xt = _positions(ax_x, list(ax_x.values))
        yv, yt = _positions(ax_y, list(ax_y.values))
        z = np.full((len(yv), len(xv)), np.nan)
        for r in rows:
            z[ax_y.values.index(r[ax_y.key]), ax_x.values.index(r[ax_x.key])] = \
                r[f"{quantity}_mean"]
        ox, oy = np.argsort(xv), np.argsort(yv)
        xv, yv, z = xv[ox], yv[oy], z[np.ix_(oy, ox)]
        xt = None if xt is None else [xt[i] for i in ox]
        yt = None if yt is None else [yt[i] for i in oy]
        finite = np.isfinite(z)
        if quantity == "beta":
            norm, cmap = CenteredNorm(vcenter=0.0), BETA_CMAP
        else:
            norm, cmap = Normalize(), "viridis"
        if finite.any():
            norm.autoscale(z[finite])
        mesh = ax.pcolormesh(_edges(xv, ax_x.scale == "log" and xt is None),
                             _edges(yv, ax_y.scale == "log" and yt is None),
                             np.ma.masked_invalid(z), cmap=cmap, norm=norm, shading="flat")
        fig.colorbar(mesh, ax=ax, label=quantity_label(quantity, unit) + " (mean over seeds)")
        if quantity == "beta" and finite.any() and (z[finite] < 0).any() and \
                (z[finite] > 0).any() and min(z.shape) >= 2:
            ax.contour(xv, yv, np.ma.masked_invalid(z), levels=[0.0], colors="k",
                       linewidths=1.5)
        if quantity == "beta":
            iy, ix = np.nonzero(finite & (z < 0))
            ax.plot(xv[ix], yv[iy], "k_", ms=8, mew=2, ls="none",
                    label=r"$\beta<0$ (contour: $\beta=0$)")
            if iy.size:
                ax.legend(loc="upper right", fontsize="small", framealpha=0.8)
        if np.isnan(z).any():
            iy, ix = np.nonzero(~finite)
            ax.plot(xv[ix], yv[iy], "x", color="0.4", ls="none")  # failed or pending points
        if ax_x.scale == "log" and xt is None:
            ax.set_xscale("log")
        if ax_y.scale == "log" and yt is None:
            ax.set_yscale("log")
        if xt:
            ax.set_xticks(xv, xt)
        if yt:
            ax.set_yticks(yv, yt)
        ax.set_xlabel(ax_x.title)
        ax.set_ylabel(ax_y.title)
    fixed = ", ".join(f"{k} = {v}" for k, v in select.items())
    ax.set_title(f"{quantity.replace('_', ' ')} over the sweep" + (f" ({fixed})" if fixed else ""),
                 fontsize="medium")
    if path is not None:
        fig.savefig(Path(path), dpi=150)
    return fig

