"""A measured cloud's domain from an image: a fluid mask or a column-density image.

A geometry file (thermo.data.geometry) may name, instead of a radius, an image of the cloud in
camera pixels: ``mask_file`` (the fluid region, bright pixels) or ``density_file`` (the column
density, any units: only ratios enter). With the pixel size ``pixel_um`` and the trap centre
``center_px`` (the same pixel coordinates as a table in pixels: (column, row), pixel centres at
integers, position in um = (pixel - centre) * pixel_um) the image becomes a
:class:`thermo.domains.grid.GridDomain`:

* mask: the fluid is the bright pixels (above half way between the darkest and the brightest),
  as given (no wall layer is taken off: the image is the fluid as measured), nu = 1;
* density: nu = n / n_ref with n_ref the mean of the brightest 1% of the cloud's pixels (the
  peak density, robust to a few hot pixels); the fluid is where nu > ``density_cut`` (default
  0.05, as for a harmonic trap: gpe.field.traps._numerical). The image should be smooth (a fit or
  the mean of many shots): a single noisy shot puts noise into every vortex's self energy.
  The self energy needs ln(L / a_ref), taken as ln(L / core_um) (a_ref the core radius at the
  peak density), so ``core_um`` is required with a density image.

The image is resampled (bilinear, ``scipy.ndimage.map_coordinates``) onto a square lattice of
``NODES`` nodes across the fluid's larger extent, with a dry margin (table every ``STRIDE``-th); the length unit L is the
largest distance of a fluid pixel from the centre, so that the fluid fits in the unit disk.

Errors name the file and what is accepted: unreadable or missing files, images that are not
2D, empty or negative, non-finite values, a fluid that touches the image's edge (the cloud must
lie inside the picture) or that is smaller than a few pixels.

Units: um and pixels at the interface; the domain in units of L.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from scipy import ndimage

from thermo.domains.grid import GridDomain, hole_labels
from thermo.errors import DomainError, MeasuredTableError

#: nodes of the domain lattice across the fluid's larger extent
NODES = 80
#: the Green's function's table every STRIDE lattice nodes (as gpe.field.traps._numerical)
STRIDE = 4
#: dry margin of the lattice, in nodes
MARGIN = 4
#: default fluid edge of a density image, as a fraction of the peak density
DENSITY_CUT = 0.05
#: the peak density is the mean of this fraction of the cloud's brightest pixels
PEAK_FRACTION = 0.01
_ACCEPTED = "a 2D greyscale image (.png, .tif, .bmp) or a 2D NumPy array (.npy)"


def read_image(path: str | Path, key: str) -> np.ndarray:
    """A 2D, finite, non-negative, non-empty image as float64, or an error naming file and key."""
    path = Path(path)
    if not path.is_file():
        raise MeasuredTableError(f"{key} = {str(path)!r}: no such file; accepted {_ACCEPTED}, "
                                 "its path relative to the geometry file")
    try:
        if path.suffix.lower() == ".npy":
            arr = np.load(path, allow_pickle=False)
        else:
            from PIL import Image, UnidentifiedImageError
            try:
                with Image.open(path) as im:
                    arr = np.asarray(im.convert("F") if im.mode not in ("I", "I;16", "F", "L")
                                     else im)
            except UnidentifiedImageError as exc:
                raise ValueError(str(exc)) from exc
    except (OSError, ValueError) as exc:
        raise MeasuredTableError(f"{path} ({key}): cannot be read ({exc}); accepted "
                                 f"{_ACCEPTED}") from None
    if arr.ndim != 2 or min(arr.shape) < 8:
        raise MeasuredTableError(f"{path} ({key}): shape {arr.shape}; accepted {_ACCEPTED} of "
                                 "at least 8 x 8 pixels")
    if not np.issubdtype(arr.dtype, np.number) or np.iscomplexobj(arr):
        raise MeasuredTableError(f"{path} ({key}): data type {arr.dtype}; accepted real numbers")
    arr = arr.astype(np.float64)
    if not np.all(np.isfinite(arr)):
        rows, cols = np.nonzero(~np.isfinite(arr))
        raise MeasuredTableError(f"{path} ({key}): pixel (row {rows[0]}, column {cols[0]}) is "
                                 "not finite; accepted finite values")
    if arr.min() < 0:
        rows, cols = np.nonzero(arr < 0)
        raise MeasuredTableError(f"{path} ({key}): negative value {arr.min():g} (first at row "
                                 f"{rows[0]}, column {cols[0]}); accepted a density >= 0 "
                                 "(not a difference image)")
    if arr.max() <= arr.min():
        raise MeasuredTableError(f"{path} ({key}): every pixel is {arr.max():g}; accepted an "
                                 "image of a cloud")
    return arr


def fluid_of(image: np.ndarray, kind: str, density_cut: float) -> tuple[np.ndarray, np.ndarray]:
    """(fluid pixels, nu) of a mask or density image (module docstring). Units: none."""
    if kind == "mask":
        fluid = image > 0.5 * (image.min() + image.max())
        return fluid, fluid.astype(np.float64)
    inside = image[image > 0]
    top = np.sort(inside)[-max(1, int(PEAK_FRACTION * inside.size)):]
    nu = image / float(top.mean())
    return nu > density_cut, nu


def image_domain(path: str | Path, kind: str, pixel_um: float, center_px, *,
                 core_um: float | None = None, density_cut: float = DENSITY_CUT,
                 nodes: int = NODES, hole_winding=None) -> tuple[GridDomain, float]:
    """The grid domain of a cloud image and its length unit in um (module docstring).

    Parameters
    ----------
    path : the image file; kind : "mask" or "density".
    pixel_um : pixel size; center_px : trap centre (column, row) in the image's pixels.
    core_um : core radius at the peak density (required for a density image).
    density_cut : fluid edge of a density image, as a fraction of the peak.
    hole_winding : circulation quanta on the fluid's holes (an int for one hole, a sequence in
        the holes' order row by row for several; None: 0 on every hole).

    Units: um; pixels.
    """
    key = f"{kind}_file"
    if kind not in ("mask", "density"):
        raise MeasuredTableError(f"cloud image kind {kind!r}; accepted 'mask' or 'density'")
    if not (math.isfinite(density_cut) and 0 < density_cut < 1):
        raise MeasuredTableError(f"density_cut = {density_cut!r}; accepted a fraction of the "
                                 "peak density between 0 and 1")
    image = read_image(path, key)
    fluid, nu = fluid_of(image, kind, density_cut)
    if fluid.sum() < 16:
        raise MeasuredTableError(f"{path} ({key}): {int(fluid.sum())} fluid pixels; accepted an "
                                 "image whose cloud covers at least 16 pixels")
    if fluid[0].any() or fluid[-1].any() or fluid[:, 0].any() or fluid[:, -1].any():
        raise MeasuredTableError(f"{path} ({key}): the fluid touches the edge of the image; "
                                 "accepted an image with the whole cloud inside it")
    if kind == "density" and core_um is None:
        raise MeasuredTableError(f"{path} ({key}): a density image needs core_um (the core "
                                 "radius at the peak density enters each vortex's self energy)")
    cx, cy = (float(c) for c in center_px)
    rows, cols = np.nonzero(fluid)
    reach_px = float(np.sqrt((cols - cx) ** 2 + (rows - cy) ** 2).max()) + 0.5
    length_um = reach_px * pixel_um
    if core_um is not None and length_um <= 4 * core_um:
        raise MeasuredTableError(f"{path} ({key}): the fluid reaches {length_um:.3g} um from the "
                                 f"centre, not more than four cores ({core_um:g} um); accepted a "
                                 "cloud several core radii across")
    extent = max(cols.max() - cols.min(), rows.max() - rows.min()) + 1.0
    h_px = max(1.0, extent / nodes)          # never finer than the image's own pixels
    lo_c, lo_r = cols.min() - 0.5 - MARGIN * h_px, rows.min() - 0.5 - MARGIN * h_px
    n_c = math.ceil((cols.max() + 0.5 + MARGIN * h_px - lo_c) / h_px) + 1
    n_r = math.ceil((rows.max() + 0.5 + MARGIN * h_px - lo_r) / h_px) + 1
    cc = lo_c + h_px * np.arange(n_c)
    rr = lo_r + h_px * np.arange(n_r)
    at = np.meshgrid(rr, cc, indexing="ij")
    fluid_nodes = ndimage.map_coordinates(fluid.astype(float), at, order=1, mode="constant",
                                          cval=0.0) >= 0.5
    if kind == "density":
        nu_nodes = ndimage.map_coordinates(nu, at, order=1, mode="nearest")
        fluid_nodes &= nu_nodes > density_cut
    else:
        nu_nodes = np.ones(fluid_nodes.shape)
    scale = reach_px
    n_holes = int(hole_labels(fluid_nodes).max())
    windings = (hole_winding,) if isinstance(hole_winding, int) else tuple(hole_winding or ())
    if hole_winding is None:
        windings = (0,) * n_holes
    if len(windings) != n_holes:
        raise MeasuredTableError(f"{path} ({key}): hole_winding = {hole_winding!r} but the fluid "
                                 f"has {n_holes} hole(s); accepted: one whole number of quanta "
                                 "per hole, in the order of their first pixel row by row")
    try:
        domain = GridDomain(fluid_nodes, np.where(fluid_nodes, nu_nodes, 0.0),
                            spacing=h_px / scale,
                            origin=((cc[0] - cx) / scale, (rr[0] - cy) / scale),
                            log_length_over_core=(None if kind == "mask"
                                                  else math.log(length_um / core_um)),
                            stride=STRIDE, hole_windings=windings)
    except DomainError as exc:
        raise MeasuredTableError(f"{path} ({key}): {exc}") from None
    return domain, length_um
