"""The mask trap: a flat-bottomed region drawn in an image (or a 2D NumPy array), inside a smooth wall.

The image is centred on the grid with its row 0 at the top (largest y); bright pixels are the
allowed region unless ``invert`` is set. The trap reads its image once, when it is built, and
keeps the allowed pixels: editing or deleting the file later changes nothing, and a run file
stores the pixels (:meth:`MaskTrap.stored_arrays`) so that the trap is rebuilt from the run file
alone.

Units: lengths in xi, energies in mu.
"""

from __future__ import annotations

from dataclasses import InitVar, dataclass, field, fields
from pathlib import Path

import numpy as np
from PIL import Image, UnidentifiedImageError
from scipy import ndimage

from gpe.errors import ProtocolError
from gpe.field.grid import Grid
from gpe.field.traps.base import LENGTH_KEY, TrapSection, VortexDomain, WalledTrap
from gpe.field.traps._numerical import domain_grid, grid_vortex_domain

MASK_FORMATS = "a PNG/greyscale image readable by Pillow (.png, .bmp, .tif) or a 2D NumPy array (.npy)"
_FILE_ACCEPTED = ("a path relative to the protocol file, of a PNG/BMP/TIFF image (allowed region bright) "
                  "or a .npy 2D array")
#: Name of the allowed pixels among :meth:`MaskTrap.stored_arrays` (the run file's ``potential/mask``).
MASK_ARRAY = "mask"
_STORED_ACCEPTED = ("a run file whose potential/mask holds the allowed pixels (a 2D boolean array with "
                    "both allowed and wall pixels), as vortherm writes it")


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


def allowed_pixels(pixels: np.ndarray, what: str) -> np.ndarray:
    """Allowed pixels kept from an earlier reading (a run file's), checked, as a read-only copy.

    ``what`` names where they come from in the error message.

    Raises
    ------
    ProtocolError
        If ``pixels`` is not a 2D boolean (or 0/1) array of at least 2 x 2 with both allowed and
        wall pixels.

    Units: none (pixels).
    """
    data = np.asarray(pixels)
    if data.ndim != 2 or min(data.shape) < 2 or not (data.dtype == bool or np.all((data == 0) | (data == 1))):
        raise ProtocolError(f"{what} has shape {data.shape} and dtype {data.dtype}; accepted: a 2D array "
                            "of at least 2 x 2 booleans (True = allowed).")
    allowed = np.array(data, dtype=bool)
    if not allowed.any() or allowed.all():
        raise ProtocolError(f"{what} has {'no allowed pixel' if not allowed.any() else 'no wall pixel'}; "
                            "accepted: both an allowed region and a wall.")
    allowed.setflags(write=False)
    return allowed


def _mask_of_section(sec: TrapSection, base_dir: Path) -> tuple[Path, np.ndarray]:
    """The mask file named by ``trap.file`` and its allowed pixels.

    For a new run the file is read, relative to ``base_dir``. For a table read back from a run
    file the pixels it kept are taken instead and the file is not looked at (it may have been
    edited or deleted since); the path is then the one the protocol names.
    """
    stored = sec.stored(MASK_ARRAY)
    if stored is not None:
        try:
            return Path(sec.get("file")), allowed_pixels(stored, "the trap mask kept in the run file")
        except ProtocolError as exc:
            sec.fail("file", str(exc).rstrip("."), _STORED_ACCEPTED)
    path = Path(sec.get("file")).expanduser()
    path = path if path.is_absolute() else base_dir / path
    try:
        return path.resolve(), load_mask(path, sec.get("invert"))
    except ProtocolError as exc:
        sec.fail("file", str(exc).rstrip("."), _FILE_ACCEPTED)


@dataclass(frozen=True, kw_only=True)
class MaskTrap(WalledTrap):
    """The allowed region of a mask image, centred on the grid, with a tanh wall (see :class:`WalledTrap`).

    Parameters
    ----------
    file : str
        Path of the mask image (absolute, or relative to the working directory). It is read once,
        when the trap is built, unless ``pixels`` are given.
    pixel_size : float
        Size of one mask pixel.
    invert : bool
        If true, dark pixels are the allowed region.
    wall_height, edge_width : float
        As in :class:`WalledTrap`.
    pixels : (rows, columns) bool array, optional
        The allowed pixels (``invert`` already applied), e.g. as a run file kept them; ``file``
        is then only a record and is not read. (``dataclasses.replace`` reads the file again
        unless it is given ``pixels=trap.allowed``.)

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
    pixels: InitVar[np.ndarray | None] = None

    def __post_init__(self, pixels: np.ndarray | None) -> None:
        # the trap's own array either way (allowed_pixels copies), read-only
        allowed = (load_mask(self.file, self.invert) if pixels is None
                   else allowed_pixels(pixels, f"the allowed pixels given for trap mask '{self.file}'"))
        allowed.setflags(write=False)
        object.__setattr__(self, "_allowed", allowed)

    def __eq__(self, other: object) -> bool:
        if other.__class__ is not self.__class__:
            return NotImplemented
        return (all(getattr(self, f.name) == getattr(other, f.name) for f in fields(self))
                and np.array_equal(self._allowed, other._allowed))

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> MaskTrap:
        """The mask from ``file`` (or the pixels a run file kept), ``pixel_size_*`` and ``invert``.

        Units: xi, mu.
        """
        path, allowed = _mask_of_section(sec, base_dir)
        return cls(file=str(path), pixel_size=sec.get("pixel_size"), invert=sec.get("invert"),
                   pixels=allowed, **cls.wall_from_section(sec))

    @classmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """Allowed pixels times the SI pixel area. Units: m^2."""
        _, allowed = _mask_of_section(sec, base_dir)
        return int(allowed.sum()) * sec.si_value("pixel_size") ** 2

    @property
    def allowed(self) -> np.ndarray:
        """The allowed pixels, ``(rows, columns)`` read-only booleans, row 0 at the top. Units: none."""
        return self._allowed

    def stored_arrays(self) -> dict[str, np.ndarray]:
        """The allowed pixels under :data:`MASK_ARRAY`, for the run file. Units: none (booleans)."""
        return {MASK_ARRAY: self._allowed}

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

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """The allowed region shrunk by ``wall_layer_xi`` (the depleted layer at the wall), flat
        (nu = 1), on a grid, its Green's function solved numerically
        (gpe.field.traps._numerical); the length unit is the largest distance of a fluid node
        from the trap centre.

        Units
        -----
        lengths in xi.
        """
        grid = domain_grid(*self.extent())
        fluid = self.signed_distance(grid) < -wall_layer_xi
        reach = float(np.sqrt(grid.X ** 2 + grid.Y ** 2)[fluid].max()) if fluid.any() else 0.0
        return grid_vortex_domain(self.shape, grid, fluid, np.ones(grid.shape), reach,
                                  core_radius_xi)

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
