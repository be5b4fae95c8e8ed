"""The mask trap: a flat-bottomed region drawn in an image (or a 2D NumPy array), inside a smooth wall.

The image is centred on the grid with its row 0 at the top (largest y); bright pixels are the
allowed region unless ``invert`` is set.

Units: lengths in xi, energies in mu.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from PIL import Image, UnidentifiedImageError
from scipy import ndimage

from gpe.errors import ProtocolError
from gpe.field.grid import Grid
from gpe.field.traps.base import LENGTH_KEY, TrapSection, WalledTrap

MASK_FORMATS = "a PNG/greyscale image readable by Pillow (.png, .bmp, .tif) or a 2D NumPy array (.npy)"
_FILE_ACCEPTED = ("a path relative to the protocol file, of a PNG/BMP/TIFF image (allowed region bright) "
                  "or a .npy 2D array")


def load_mask(path: str | Path, invert: bool = False) -> np.ndarray:
    """Read a mask image as a boolean array (row 0 = top of the image, True = allowed region).

    Bright pixels (above half the range between darkest and brightest) are the allowed region;
    ``invert`` swaps that. Colour images are converted to greyscale, transparency is ignored.

    Raises
    ------
    ProtocolError
        If the file cannot be read, is not 2D, or contains no allowed pixel.

    Units: none (pixels).
    """
    path = Path(path)
    try:
        if path.suffix.lower() == ".npy":
            data = np.load(path, allow_pickle=False)
        else:
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


def _mask_of_section(sec: TrapSection, base_dir: Path) -> tuple[Path, np.ndarray]:
    """The mask file named by ``trap.file`` (relative to ``base_dir``) and its allowed pixels."""
    path = Path(sec.get("file")).expanduser()
    path = path if path.is_absolute() else base_dir / path
    try:
        return path, load_mask(path, sec.get("invert"))
    except ProtocolError as exc:
        sec.fail("file", str(exc).rstrip("."), _FILE_ACCEPTED)


@dataclass(frozen=True, kw_only=True)
class MaskTrap(WalledTrap):
    """The allowed region of a mask image, centred on the grid, with a tanh wall (see :class:`WalledTrap`).

    Parameters
    ----------
    file : str
        Path of the mask image (absolute, or relative to the working directory).
    pixel_size : float
        Size of one mask pixel.
    invert : bool
        If true, dark pixels are the allowed region.
    wall_height, edge_width : float
        As in :class:`WalledTrap`.

    Units
    -----
    lengths xi, wall height mu.
    """

    shape = "mask"
    protocol_keys = {**WalledTrap.protocol_keys, "file": {"kind": "str", "required": True},
                     "pixel_size": LENGTH_KEY, "invert": {"kind": "bool", "default": False}}

    file: str
    pixel_size: float = field(metadata={"dim": "length"})
    invert: bool = False

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> MaskTrap:
        """The mask from ``file`` (checked readable), ``pixel_size_*`` and ``invert``. Units: xi, mu."""
        path, _ = _mask_of_section(sec, base_dir)
        return cls(file=str(path.resolve()), pixel_size=sec.get("pixel_size"), invert=sec.get("invert"),
                   **cls.wall_from_section(sec))

    @classmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """Allowed pixels times the SI pixel area. Units: m^2."""
        _, allowed = _mask_of_section(sec, base_dir)
        return int(allowed.sum()) * sec.si_value("pixel_size") ** 2

    @functools.cached_property
    def allowed(self) -> np.ndarray:
        """The allowed pixels, ``(rows, columns)`` booleans, row 0 at the top. Units: none."""
        return load_mask(self.file, self.invert)

    def extent(self) -> tuple[float, float]:
        """The whole image (allowed region and wall) along x and y. Units: xi."""
        rows, cols = self.allowed.shape
        return cols * self.pixel_size, rows * self.pixel_size

    def fits_in(self, length_x: float, length_y: float) -> bool:
        """Always true: the grid may crop the image's margins (only the pixels under it are used).

        Units: xi.
        """
        return True

    def area(self) -> float:
        """Allowed pixels times the pixel area. Units: xi^2."""
        return int(self.allowed.sum()) * self.pixel_size**2

    def signed_distance(self, grid: Grid) -> np.ndarray:
        """Signed distance to the mask's region as the grid samples it (negative inside). Units: xi."""
        inside = self.allowed.astype(float)
        rows, cols = inside.shape
        p = self.pixel_size
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
