"""The one look of every figure: the colour-blind-safe palette, the vortex-sign styles, new
figures without pyplot, legends outside the data, and saving in a vector or raster format.

Colours are the eight of Okabe & Ito, "Color Universal Design" (2008), chosen to stay apart for
protan, deutan and tritan viewers; tests/gpe/figures/test_style.py checks the pairs we rely on
under the dichromat simulation of Machado, Oliveira & Fernandes, IEEE TVCG 15, 1291 (2009).
The + vortices are vermillion circles, the - vortices blue triangles: the sign is carried by the
shape too, so a grey-scale print keeps it.

Figures are ``matplotlib.figure.Figure`` objects made without pyplot: no backend is chosen or
changed here (a notebook shows them as they are; the command line saves them with
:func:`save`). Nothing in gpe/figures calls ``matplotlib.use``.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from matplotlib.figure import Figure

from gpe.errors import VorthermError

#: Okabe & Ito (2008), the colour-blind-safe set of eight.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: The ± palette of vortex signs (and of anything signed: beta > 0 / beta < 0 sides).
PLUS_COLOUR = OKABE_ITO["vermillion"]
MINUS_COLOUR = OKABE_ITO["blue"]
#: Lines of a figure in this order after the signed ones.
CYCLE = [OKABE_ITO[k] for k in ("black", "bluish_green", "orange", "reddish_purple", "sky_blue",
                                "yellow")]
#: Beams drawn over a density: a light dashed path, open rings where the beams are.
BEAM_COLOUR = "#FFFFFF"
#: The drive window (beams on): a light grey band behind the data.
DRIVE_COLOUR = "#D9D9D9"

#: Scatter styles of the vortex signs (white edges stand out on the dark density map).
PLUS_STYLE = dict(marker="o", s=30, facecolor=PLUS_COLOUR, edgecolor="white", linewidth=0.7)
MINUS_STYLE = dict(marker="v", s=34, facecolor=MINUS_COLOUR, edgecolor="white", linewidth=0.7)

#: Formats :func:`save` writes: vector (pdf, svg) or raster (png).
FORMATS = ("png", "pdf", "svg")


def new_figure(width_in: float, height_in: float) -> Figure:
    """A Figure with constrained layout, independent of pyplot (and of its backend).

    Units: inches.
    """
    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    return fig


def legend_outside(fig: Figure, handles=None, labels=None, *, where: str = "lower center",
                   ncols: int | None = None) -> Any:
    """One legend for the figure, outside every axes (never over the data)."""
    if handles is None:
        seen: dict[str, Any] = {}
        for ax in fig.axes:
            for h, lab in zip(*ax.get_legend_handles_labels()):
                if not lab.startswith("_"):
                    seen.setdefault(lab, h)
        labels, handles = list(seen), list(seen.values())
    if not handles:
        return None
    return fig.legend(handles, labels, loc=f"outside {where}",
                      ncols=ncols or min(len(handles), 4), frameon=False, fontsize=8)


def check_format(fmt: str | None, where: str = "format") -> str:
    """The format name, lower case; an unknown one is a VorthermError naming the accepted."""
    name = (fmt or "png").lower().lstrip(".")
    if name not in FORMATS:
        raise VorthermError(f"{where} {fmt!r} is not a figure format; accepted: "
                            f"{', '.join(FORMATS)}")
    return name


def figure_path(path: str | os.PathLike, fmt: str | None = None) -> Path:
    """``path`` with the suffix of ``fmt`` (default: its own suffix if it names a format, else
    png)."""
    path = Path(path)
    if fmt is None:
        fmt = path.suffix.lstrip(".") if path.suffix.lstrip(".").lower() in FORMATS else "png"
    return path.with_suffix("." + check_format(fmt))


def save(fig: Figure, path: str | os.PathLike, format: str | None = None, *,
         overwrite: bool = False, dpi: int = 150) -> Path:
    """Write ``fig`` to ``path`` (suffix set from ``format``: png, pdf or svg); returns the path.

    An existing file is kept and refused (VorthermError naming it) unless ``overwrite``. The
    figure stays open and unchanged for the caller. ``dpi`` matters for png only.
    """
    target = figure_path(path, format)
    if target.exists() and not overwrite:
        raise VorthermError(f"{target} exists already; pass --force (overwrite=True) to replace "
                            "it, or choose another folder or name")
    target.parent.mkdir(parents=True, exist_ok=True)
    fmt = target.suffix.lstrip(".")
    # metadata: no creation date in pdf/svg, so that the same figure gives the same bytes
    metadata = {"CreationDate": None} if fmt == "pdf" else {"Date": None} if fmt == "svg" else None
    partial = target.with_name(f".{target.name}.part")
    fig.savefig(partial, format=fmt, dpi=dpi, metadata=metadata)
    os.replace(partial, target)   # a killed command leaves no half-written figure
    return target
