"""Static traps and moving Gaussian beams, in simulation units.

Traps are ``(ny, nx)`` arrays built once. Hard-walled traps (disk, box, annulus, mask image)
use a smooth wall ``V = V_wall * (1 + tanh(d / w_edge)) / 2`` with ``d`` the signed distance
outside the allowed region (negative inside), so the wall is at half height on the region's
edge and the spectral solver never sees a step.

The moving Gaussian beams (ramps, paths, :class:`BeamSet`) live in gpe/field/beams.py and are
re-exported here, so ``from gpe.field.traps import BeamSet, LinePath, ...`` keeps working.

Units: lengths in xi, times in hbar/mu, energies in mu, speeds in c, angles in rad.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import ndimage

from gpe.errors import ProtocolError
from gpe.field.grid import Grid

TRAP_SHAPES = ("harmonic", "disk", "box", "annulus", "mask")
MASK_FORMATS = "a PNG/greyscale image readable by Pillow (.png, .bmp, .tif) or a 2D NumPy array (.npy)"


# ------------------------------------------------------------------------------------------
# traps
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class TrapConfig:
    """A static trap, resolved to simulation units.

    Parameters
    ----------
    shape : str
        One of ``harmonic``, ``disk``, ``box``, ``annulus``, ``mask``.
    wall_height : float or None
        Wall height of hard-walled traps; cap of the harmonic trap (``None``: no cap).
    edge_width : float
        Width ``w_edge`` of the tanh wall.
    radius, inner_radius, outer_radius, length_x, length_y : float
        Sizes of the disk / annulus / box (0 where unused).
    omega_x, omega_y : float
        Harmonic angular frequencies (``V = (wx^2 x^2 + wy^2 y^2)/2``).
    mask_file : str
        Path of the mask image (absolute, or relative to the working directory).
    mask_pixel_size : float
        Size of one mask pixel.
    mask_invert : bool
        If true, dark pixels are the allowed region.

    Units
    -----
    lengths xi, energies mu, frequencies rad per hbar/mu.
    """

    shape: str
    wall_height: float | None = field(default=None, metadata={"dim": "energy"})
    edge_width: float = field(default=1.0, metadata={"dim": "length"})
    radius: float = field(default=0.0, metadata={"dim": "length"})
    inner_radius: float = field(default=0.0, metadata={"dim": "length"})
    outer_radius: float = field(default=0.0, metadata={"dim": "length"})
    length_x: float = field(default=0.0, metadata={"dim": "length"})
    length_y: float = field(default=0.0, metadata={"dim": "length"})
    omega_x: float = field(default=0.0, metadata={"dim": "rate"})
    omega_y: float = field(default=0.0, metadata={"dim": "rate"})
    mask_file: str = ""
    mask_pixel_size: float = field(default=0.0, metadata={"dim": "length"})
    mask_invert: bool = False

    def extent(self) -> tuple[float, float]:
        """Full width along x and y of the region the condensate may fill. Units: xi.

        For the harmonic trap this is the Thomas-Fermi diameter at mu = 1 (``2 sqrt(2)/omega``).
        """
        if self.shape == "harmonic":
            return 2 * math.sqrt(2.0) / self.omega_x, 2 * math.sqrt(2.0) / self.omega_y
        if self.shape == "disk":
            return 2 * self.radius, 2 * self.radius
        if self.shape == "annulus":
            return 2 * self.outer_radius, 2 * self.outer_radius
        if self.shape == "box":
            return self.length_x, self.length_y
        rows, cols = load_mask(self.mask_file).shape
        return cols * self.mask_pixel_size, rows * self.mask_pixel_size


def smooth_wall(distance: np.ndarray, wall_height: float, edge_width: float) -> np.ndarray:
    """``V_wall (1 + tanh(d / w_edge)) / 2``; a sharp step if ``edge_width`` is 0.

    Units: distance and edge width in xi, wall height in mu; returns mu.
    """
    if edge_width <= 0:
        return np.where(distance > 0, wall_height, np.where(distance == 0, 0.5 * wall_height, 0.0))
    return wall_height * 0.5 * (1.0 + np.tanh(distance / edge_width))


def signed_distance_disk(X: np.ndarray, Y: np.ndarray, radius: float) -> np.ndarray:
    """Signed distance to a centred disk (negative inside). Units: xi."""
    return np.hypot(X, Y) - radius


def signed_distance_annulus(X: np.ndarray, Y: np.ndarray, inner: float, outer: float) -> np.ndarray:
    """Signed distance to a centred annulus ``inner < r < outer`` (negative inside). Units: xi."""
    r = np.hypot(X, Y)
    return np.maximum(inner - r, r - outer)


def signed_distance_box(X: np.ndarray, Y: np.ndarray, length_x: float, length_y: float) -> np.ndarray:
    """Exact signed distance to a centred rectangle (negative inside). Units: xi."""
    qx = np.abs(X) - 0.5 * length_x
    qy = np.abs(Y) - 0.5 * length_y
    outside = np.hypot(np.maximum(qx, 0.0), np.maximum(qy, 0.0))
    return outside + np.minimum(np.maximum(qx, qy), 0.0)


def load_mask(path: str | Path, invert: bool = False) -> np.ndarray:
    """Read a mask image as a boolean array (row 0 = top of the image, True = allowed region).

    Bright pixels (above half the range between darkest and brightest) are the allowed region;
    ``invert`` swaps that. Colour images are converted to greyscale, transparency is ignored.

    Raises
    ------
    ProtocolError
        If the file cannot be read, is not 2D, or contains no allowed pixel.
    """
    path = Path(path)
    try:
        if path.suffix.lower() == ".npy":
            data = np.load(path, allow_pickle=False)
        else:
            from PIL import Image, UnidentifiedImageError  # lazy: Pillow only needed for masks

            try:
                with Image.open(path) as image:
                    data = np.asarray(image.convert("L"), dtype=float)
            except UnidentifiedImageError as exc:
                raise ValueError("not an image Pillow can read") from exc
    except (OSError, ValueError) as exc:
        raise ProtocolError(
            f"trap mask '{path}' cannot be read ({exc}); accepted: {MASK_FORMATS}, "
            "with the allowed region bright (or set trap.invert = true)."
        ) from None
    data = np.asarray(data, dtype=float)
    if data.ndim != 2 or min(data.shape) < 2 or not np.all(np.isfinite(data)):
        raise ProtocolError(
            f"trap mask '{path}' has shape {data.shape}; accepted: {MASK_FORMATS} holding a finite "
            "2D array of at least 2 x 2 pixels."
        )
    low, high = float(data.min()), float(data.max())
    inside = data > 0.5 * (low + high) if high > low else np.full(data.shape, high > 0)
    if invert:
        inside = ~inside
    if not inside.any() or inside.all():
        what = "no allowed (bright) pixel" if not inside.any() else "no wall (every pixel allowed)"
        raise ProtocolError(
            f"trap mask '{path}' has {what}{' after inversion' if invert else ''}; accepted: "
            f"{MASK_FORMATS} with both an allowed region (bright unless trap.invert = true) and a wall."
        )
    return inside


def _mask_on_grid(trap: TrapConfig, grid: Grid) -> np.ndarray:
    """Signed distance to the mask region, the mask centred on the grid. Units: xi."""
    inside = load_mask(trap.mask_file, trap.mask_invert).astype(float)
    rows, cols = inside.shape
    p = trap.mask_pixel_size
    # image row 0 is the top (largest y); pixel centres at (j - cols/2 + 1/2) p, (rows/2 - i - 1/2) p
    col = grid.X / p + 0.5 * cols - 0.5
    row = 0.5 * rows - 0.5 - grid.Y / p
    fraction = ndimage.map_coordinates(inside, [row, col], order=1, mode="constant", cval=0.0)
    on_grid = fraction >= 0.5
    sampling = (grid.dy, grid.dx)
    # distances from cell centres to the nearest cell of the other kind, minus half a cell, so
    # that the zero of d sits on the boundary between cells
    half = 0.5 * min(grid.dx, grid.dy)
    d_out = ndimage.distance_transform_edt(~on_grid, sampling=sampling) - half
    d_in = ndimage.distance_transform_edt(on_grid, sampling=sampling) - half
    return np.where(on_grid, -d_in, d_out)


def build_trap(trap: TrapConfig, grid: Grid) -> np.ndarray:
    """The static trap potential on the grid.

    Parameters
    ----------
    trap : TrapConfig
        Shape and sizes in simulation units.
    grid : Grid
        The simulation grid.

    Returns
    -------
    numpy.ndarray
        ``(ny, nx)`` float64 array.

    Units
    -----
    mu.
    """
    X, Y = grid.X, grid.Y
    if trap.shape == "harmonic":
        V = 0.5 * (trap.omega_x**2 * X**2 + trap.omega_y**2 * Y**2)
        return np.minimum(V, trap.wall_height) if trap.wall_height is not None else V
    wall = float(trap.wall_height if trap.wall_height is not None else 0.0)
    if trap.shape == "disk":
        d = signed_distance_disk(X, Y, trap.radius)
    elif trap.shape == "annulus":
        d = signed_distance_annulus(X, Y, trap.inner_radius, trap.outer_radius)
    elif trap.shape == "box":
        d = signed_distance_box(X, Y, trap.length_x, trap.length_y)
    elif trap.shape == "mask":
        d = _mask_on_grid(trap, grid)
    else:
        raise ProtocolError(f"unknown trap shape {trap.shape!r}; accepted: {', '.join(TRAP_SHAPES)}")
    return np.ascontiguousarray(smooth_wall(d, wall, trap.edge_width), dtype=np.float64)
