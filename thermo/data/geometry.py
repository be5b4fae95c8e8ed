"""Geometry of a measured cloud: the domain in micrometres, the camera calibration, and the
small TOML file beside a measured table that gives them.

The geometry (disk radius, box width and height, or annulus radii and the circulation on its
hole, and the vortex core radius) comes from
keyword arguments or from a TOML file beside the table (same stem, ``.toml``); keyword
arguments override the file key by key. Accepted TOML keys::

    shape = "disk"          # or "box", "annulus": the kind name of a thermo domain class
    radius_um = 40.0        # disk (annulus: the outer radius)
    width_um = 80.0         # box (x extent)
    height_um = 60.0        # box (y extent)
    inner_radius_um = 12.0  # annulus: the radius of the hole
    hole_winding = 1        # annulus: circulation quanta around the hole (0 if not given)
    core_um = 0.5           # vortex core radius (optional, needed for beta)
    pixel_um = 0.8          # only if the table is in pixels
    center_px = [256.0, 240.0]

    shape = "grid"          # instead of sizes: the cloud's own image (thermo.data.cloud_image)
    mask_file = "cloud_mask.png"     # the fluid region (bright), or:
    density_file = "cloud_mean.npy"  # a smooth column-density image (needs core_um)
    density_cut = 0.05      # density image: fluid where n > 0.05 of the peak (default)
    image_pixel_um = 0.8    # pixel size and trap centre of the image; default pixel_um and
    image_center_px = [256.0, 240.0]  # center_px (an image from the table's own camera)

    [imaging]               # optional: how the imaging degrades the configurations
    blur_um = 0.5           # rms position error per coordinate
    resolution_um = 0.0     # pairs closer than this are lost (opposite) or merged (like)
    edge_loss_um = 0.0      # vortices this close to the wall are missed
    sign_error = 0.02       # probability that a sign is recorded wrongly, 0 <= p < 0.5

With an ``[imaging]`` table the thermometry pushes its reference ensembles through that model
(thermo.imaged), so beta refers to the gas before imaging.

Tables and geometry files are UTF-8 text, with or without a byte-order mark; other encodings
are refused by file, line and byte (:func:`read_utf8_text`), never guessed.

The shape names are the kind names of the domain classes found in :mod:`thermo.domains`
(:func:`thermo.domains.kinds.domain_class`); each class names the sizes (``radius``, or
``width`` and ``height``) that fix it, read here with the suffix ``_um``.

Units: micrometres; pixel coordinates in pixels; thermo's scaled positions in units of the
disk radius or of the box height.
"""

from __future__ import annotations

import codecs
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from thermo.data.cloud_image import DENSITY_CUT, image_domain
from thermo.data.degrade import ImagingModel
from thermo.domains.base import Domain
from thermo.domains.kinds import domain_class, domain_classes
from thermo.errors import DomainError, MeasuredTableError

GEOMETRY_KEYS = ("shape", "radius_um", "width_um", "height_um", "inner_radius_um",
                 "hole_winding", "core_um", "pixel_um", "center_px", "imaging", "mask_file",
                 "density_file", "density_cut", "image_pixel_um", "image_center_px")
#: the size keys of all shapes (micrometres)
_SIZE_KEYS = ("radius_um", "width_um", "height_um", "inner_radius_um")
#: keys of the [imaging] table (lengths in um; sign_error a probability)
IMAGING_KEYS = ("blur_um", "resolution_um", "edge_loss_um", "sign_error")
# Byte-order marks of encodings other than UTF-8 (UTF-32 LE first: it begins with UTF-16 LE's).
_OTHER_BOMS = ((codecs.BOM_UTF32_LE, "UTF-32"), (codecs.BOM_UTF32_BE, "UTF-32"),
               (codecs.BOM_UTF16_LE, "UTF-16"), (codecs.BOM_UTF16_BE, "UTF-16"))
_SAVE_AS = ("accepted: UTF-8 text, with or without a byte-order mark (BOM): save it as UTF-8 "
            "(in a spreadsheet: 'CSV UTF-8')")

def _is_winding(value, several: bool) -> bool:
    """A whole number of quanta, or (``several``) a non-empty list of them."""
    def one(v):
        return isinstance(v, int) and not isinstance(v, bool)
    if several and isinstance(value, (list, tuple)):
        return len(value) > 0 and all(one(v) for v in value)
    return one(value)


def read_utf8_text(path: str | Path) -> str:
    """The text of a table or geometry file, decoded as UTF-8 (a leading BOM is dropped).

    Any other encoding is refused by name: a UTF-16/UTF-32 byte-order mark or NUL bytes say so,
    and a byte that is not UTF-8 (Latin-1 or Windows-1252 text, say) is named by its line and
    byte offset. Nothing is guessed, so a position is never read from mis-decoded text.

    Raises
    ------
    MeasuredTableError
        naming the file, where decoding failed and what is accepted.

    Units: none (offsets in bytes from the start of the file, lines from 1).
    """
    path = Path(path)
    data = path.read_bytes()
    for bom, name in _OTHER_BOMS:
        if data.startswith(bom):
            raise MeasuredTableError(f"{path}: the file is {name} text (it starts with a {name} "
                                     f"byte-order mark); {_SAVE_AS}")
    skip = len(codecs.BOM_UTF8) if data.startswith(codecs.BOM_UTF8) else 0
    try:
        text = data[skip:].decode("utf-8")
    except UnicodeDecodeError as exc:
        at = skip + exc.start
        line = data.count(b"\n", 0, at) + 1
        column = at - (data.rfind(b"\n", 0, at) + 1) + 1
        raise MeasuredTableError(
            f"{path}, line {line}: byte {at} (0x{data[at]:02x}, column {column} of the line) "
            "is not UTF-8; the file is in another encoding (Latin-1 or Windows-1252, say); "
            f"{_SAVE_AS}") from None
    if "\x00" in text:
        at = data.index(b"\x00")
        line = data.count(b"\n", 0, at) + 1
        raise MeasuredTableError(
            f"{path}, line {line}: byte {at} is a NUL byte, which UTF-8 "
            f"text does not hold (UTF-16 text without a byte-order mark, or not text); {_SAVE_AS}")
    return text


@dataclass(frozen=True)
class Geometry:
    """Physical geometry of the measured cloud.

    Attributes
    ----------
    shape : the kind name of a thermo domain, ``"disk"``, ``"box"`` or ``"annulus"``.
    radius_um : disk radius (annulus: outer); width_um, height_um : box sides (x and y);
    inner_radius_um : the annulus's hole.
    hole_winding : circulation quanta around an annulus's hole, or around each hole of a mask or
        density image (an int for one hole, a list in the holes' order row by row for several;
        None: not given, taken as 0 on every hole).
    core_um : vortex core radius, ``None`` if not known.
    imaging_um : the ``[imaging]`` table as ((key, value), ...) (empty: no imaging model).

    Units: micrometres (sign_error a probability).
    """

    shape: str
    radius_um: float | None = None
    width_um: float | None = None
    height_um: float | None = None
    core_um: float | None = None
    imaging_um: tuple = ()
    inner_radius_um: float | None = None
    hole_winding: int | tuple[int, ...] | None = None
    image_kind: str | None = None
    image_file: str | None = None
    image_pixel_um: float | None = None
    image_center_px: tuple[float, float] | None = None
    density_cut: float = DENSITY_CUT

    def imaging_model(self):
        """The ``[imaging]`` table as a thermo.data.degrade.ImagingModel in scaled units, or
        None when there is none (or all its values are zero)."""
        vals = dict(self.imaging_um)
        if not any(vals.values()):
            return None
        return ImagingModel.from_um(self.length_scale_um, blur_um=vals.get("blur_um", 0.0),
                                    resolution_um=vals.get("resolution_um", 0.0),
                                    edge_loss_um=vals.get("edge_loss_um", 0.0),
                                    sign_flip=vals.get("sign_error", 0.0))

    def __post_init__(self) -> None:
        if (self.shape == "grid") != (self.image_file is not None):
            raise MeasuredTableError(
                "shape = 'grid' is a cloud image: give mask_file or density_file with it (and "
                f"no image for any other shape); got shape {self.shape!r}, image "
                f"{self.image_file!r}")
        for key in _size_keys(self.shape):
            _positive(key, getattr(self, key), f"a {self.shape}")
        if self.core_um is not None and not (math.isfinite(self.core_um)
                                             and self.core_um > 0):
            raise MeasuredTableError(f"core_um must be a positive number; got {self.core_um}")
        if (self.shape == "annulus" and self.core_um is not None
                and self.inner_radius_um <= self.core_um):
            raise MeasuredTableError(
                f"inner_radius_um = {self.inner_radius_um:g} is not larger than the core "
                f"(core_um = {self.core_um:g}): a hole that small is a pinned core, not a hole; "
                "accepted: a hole several core radii across, or shape = \"disk\"")
        if self.hole_winding is not None:
            if self.shape not in ("annulus", "grid"):
                raise MeasuredTableError(f"hole_winding = {self.hole_winding!r} is for an "
                                         f"annulus or an image with holes; a {self.shape} has "
                                         "no hole")
            if not _is_winding(self.hole_winding, several=self.shape == "grid"):
                raise MeasuredTableError(f"hole_winding must be a whole number of circulation "
                                         f"quanta{' (or one per hole)' if self.shape == 'grid' else ''}"
                                         f"; got {self.hole_winding!r}")

    def _scaled_domain(self) -> tuple[Domain, float]:
        if self.shape == "grid":
            cached = self.__dict__.get("_image_domain")
            if cached is None:
                if self.image_pixel_um is None or self.image_center_px is None:
                    raise MeasuredTableError(
                        f"{self.image_file}: an image geometry needs the image's pixel size and "
                        "trap centre: image_pixel_um and image_center_px (or pixel_um and "
                        "center_px)")
                cached = image_domain(self.image_file, self.image_kind, self.image_pixel_um,
                                      self.image_center_px, core_um=self.core_um,
                                      density_cut=self.density_cut,
                                      hole_winding=self.hole_winding)
                object.__setattr__(self, "_image_domain", cached)
            return cached
        cls = _shape_class(self.shape)
        sizes = {name: getattr(self, f"{name}_um") for name in cls.size_names}
        try:
            if self.shape == "annulus":
                return cls.from_sizes(sizes, hole_winding=self.hole_winding or 0)
            return cls.from_sizes(sizes)
        except DomainError as exc:
            raise MeasuredTableError(f"geometry: {exc}") from None

    @property
    def length_scale_um(self) -> float:
        """Micrometres per scaled thermo unit: the disk radius, or the box side along y
        (thermo.domains.box.Box is [-aspect/2, aspect/2] x [-1/2, 1/2])."""
        return float(self._scaled_domain()[1])

    def domain(self) -> Domain:
        """The thermo domain object for this geometry, of the class whose kind is the shape."""
        return self._scaled_domain()[0]

    def to_scaled(self, xy_um: Any) -> np.ndarray:
        """Positions about the trap centre in um -> thermo scaled positions.

        Both thermo domains are centred on the origin, so this is a division.
        """
        return np.asarray(xy_um, dtype=np.float64) / self.length_scale_um

    def to_um(self, xy_scaled: Any) -> np.ndarray:
        """Inverse of :meth:`to_scaled`."""
        return np.asarray(xy_scaled, dtype=np.float64) * self.length_scale_um


def _shape_class(shape: Any) -> type[Domain]:
    """The domain class of a geometry shape; refuse an unknown shape, listing the known ones."""
    accepted = ", ".join(repr(k) for k, c in domain_classes().items() if c.from_geometry_file)
    try:
        cls = domain_class(shape)
    except DomainError:
        raise MeasuredTableError(
            f"geometry shape {shape!r} is not known; accepted: {accepted}") from None
    if not cls.from_geometry_file:
        raise MeasuredTableError(
            f"geometry shape {shape!r} is built from a fluid mask or a density image: give "
            f"mask_file or density_file with it; accepted sizes for: {accepted}")
    return cls


def _size_keys(shape: Any) -> tuple[str, ...]:
    """Geometry keys (micrometres) that fix a domain of this shape, e.g. ("radius_um",); none
    for a cloud image (shape "grid")."""
    if shape == "grid":
        return ()
    keys = tuple(f"{name}_um" for name in _shape_class(shape).size_names)
    unknown = [k for k in keys if k not in GEOMETRY_KEYS]
    if unknown:
        raise MeasuredTableError(
            f"geometry shape {shape!r} needs the size(s) {unknown}, which a geometry file "
            f"cannot give; accepted keys: {list(GEOMETRY_KEYS)}")
    return keys


def _positive(key: str, value: Any, what: str) -> None:
    if value is None or not isinstance(value, (int, float)) or not math.isfinite(value) \
            or value <= 0:
        raise MeasuredTableError(
            f"{what} needs a positive number {key} (micrometres); got {value!r}")


@dataclass(frozen=True)
class PixelCalibration:
    """Camera calibration: pixel size and the trap centre in pixel coordinates.

    Units: pixel_um in micrometres per pixel; center_px in pixels.
    """

    pixel_um: float
    center_px: tuple[float, float]

    def __post_init__(self) -> None:
        _positive("pixel_um", self.pixel_um, "a pixel calibration")
        if len(self.center_px) != 2 or not all(math.isfinite(float(c)) for c in self.center_px):
            raise MeasuredTableError(
                f"center_px must be two finite pixel coordinates [x, y]; got {self.center_px!r}")


def pixels_to_um(xy_px: Any, calibration: PixelCalibration) -> np.ndarray:
    """Pixel coordinates -> micrometres about the trap centre.

    .. math:: x_{\\mu m} = (x_{px} - c_x)\\, p, \\quad y_{\\mu m} = (y_{px} - c_y)\\, p

    Units: input pixels, output micrometres.
    """
    xy = np.asarray(xy_px, dtype=np.float64)
    return (xy - np.asarray(calibration.center_px, dtype=np.float64)) * calibration.pixel_um


def um_to_pixels(xy_um: Any, calibration: PixelCalibration) -> np.ndarray:
    """Inverse of :func:`pixels_to_um`. Units: input micrometres, output pixels."""
    xy = np.asarray(xy_um, dtype=np.float64)
    return xy / calibration.pixel_um + np.asarray(calibration.center_px, dtype=np.float64)


def geometry_file_for(path: str | Path) -> Path:
    """The TOML file that sits beside a table: same stem, suffix ``.toml``."""
    return Path(path).with_suffix(".toml")


def read_geometry_file(path: str | Path) -> dict[str, Any]:
    """Read and check a geometry TOML (keys listed in the module docstring)."""
    path = Path(path)
    try:
        data = tomllib.loads(read_utf8_text(path))
    except tomllib.TOMLDecodeError as exc:
        raise MeasuredTableError(f"{path}: not valid TOML ({exc})") from exc
    unknown = sorted(set(data) - set(GEOMETRY_KEYS))
    if unknown:
        raise MeasuredTableError(
            f"{path}: unknown key(s) {unknown}; accepted keys: {list(GEOMETRY_KEYS)}")
    if "hole_winding" in data and not _is_winding(data["hole_winding"], several=True):
        raise MeasuredTableError(f"{path}: hole_winding must be a whole number of circulation "
                                 f"quanta (a list of them, one per hole, for an image with "
                                 f"several holes); got {data['hole_winding']!r}")
    if isinstance(data.get("hole_winding"), list):
        data["hole_winding"] = tuple(data["hole_winding"])
    for key in ("mask_file", "density_file"):
        if key in data:
            if not isinstance(data[key], str) or not data[key]:
                raise MeasuredTableError(f"{path}: {key} must be a file name; got {data[key]!r}")
            data[key] = str((path.parent / data[key]).resolve())
    if "mask_file" in data and "density_file" in data:
        raise MeasuredTableError(f"{path}: give mask_file or density_file, not both")
    for key in (*_SIZE_KEYS, "core_um", "pixel_um", "density_cut", "image_pixel_um"):
        if key in data and (isinstance(data[key], bool)
                            or not isinstance(data[key], (int, float))):
            raise MeasuredTableError(f"{path}: {key} must be a number; got {data[key]!r}")
    for key in ("center_px", "image_center_px"):
        if key in data:
            c = data[key]
            if not (isinstance(c, list) and len(c) == 2
                    and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in c)):
                raise MeasuredTableError(
                    f"{path}: {key} must be a list of two numbers [x, y]; got {c!r}")
    if "imaging" in data:
        data["imaging"] = check_imaging(data["imaging"], f"{path}: [imaging]")
    return data


def check_imaging(table: Any, where: str) -> dict[str, float]:
    """Check an imaging table (keys IMAGING_KEYS): lengths >= 0, 0 <= sign_error < 0.5.

    ``where`` names the file or option in the error. Units: um; sign_error a probability.
    """
    if not isinstance(table, dict):
        raise MeasuredTableError(f"{where} must be a table of {list(IMAGING_KEYS)}; got {table!r}")
    unknown = sorted(set(table) - set(IMAGING_KEYS))
    if unknown:
        raise MeasuredTableError(f"{where}: unknown key(s) {unknown}; accepted: {list(IMAGING_KEYS)}")
    out = {}
    for key, v in table.items():
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise MeasuredTableError(f"{where}: {key} must be a number; got {v!r}")
        if key == "sign_error" and not 0.0 <= v < 0.5:
            raise MeasuredTableError(f"{where}: sign_error = {v:g} is not a probability in "
                                     "[0, 0.5) (half the signs wrong or more carries no charge)")
        if key != "sign_error" and v < 0:
            raise MeasuredTableError(f"{where}: {key} = {v:g} must be >= 0 um")
        out[key] = float(v)
    return out


def resolve_geometry(table_path: str | Path, *, shape: str | None = None,
                     radius_um: float | None = None, width_um: float | None = None,
                     height_um: float | None = None, core_um: float | None = None,
                     inner_radius_um: float | None = None, hole_winding: int | None = None,
                     pixel_um: float | None = None,
                     center_px: Sequence[float] | None = None,
                     geometry_file: str | Path | None = None,
                     imaging_um: dict | None = None
                     ) -> tuple[Geometry, PixelCalibration | None]:
    """Combine keyword geometry with the TOML beside the table (keywords win).

    ``shape`` defaults to ``"annulus"`` when an inner radius is known, ``"disk"`` when only a
    radius is, ``"box"`` when width and height are. ``imaging_um`` (keys IMAGING_KEYS) overrides the file's ``[imaging]`` key by
    key. Returns the geometry and the pixel calibration (None for tables in um).

    Units: micrometres; center_px in pixels.
    """
    gfile = Path(geometry_file) if geometry_file is not None else geometry_file_for(table_path)
    data: dict[str, Any] = {}
    if gfile.exists():
        data = read_geometry_file(gfile)
    elif geometry_file is not None:
        raise MeasuredTableError(f"geometry file {gfile} does not exist")
    given = dict(shape=shape, radius_um=radius_um, width_um=width_um, height_um=height_um,
                 inner_radius_um=inner_radius_um, hole_winding=hole_winding,
                 core_um=core_um, pixel_um=pixel_um,
                 center_px=None if center_px is None else list(center_px))
    merged = {**data, **{k: v for k, v in given.items() if v is not None}}
    shp = merged.get("shape")
    image_key = next((k for k in ("mask_file", "density_file") if merged.get(k)), None)
    if shp is None:
        if image_key is not None:
            shp = "grid"
        elif merged.get("inner_radius_um") is not None:
            shp = "annulus"
        elif merged.get("radius_um") is not None:
            shp = "disk"
        elif merged.get("width_um") is not None and merged.get("height_um") is not None:
            shp = "box"
        else:
            raise MeasuredTableError(
                f"{table_path}: no geometry; give radius_um (disk) or width_um and "
                f"height_um (box), as arguments or in {gfile.name} beside the table")
    sizes = _size_keys(shp)
    geometry = Geometry(shape=str(shp),
                        **{k: _opt_float(merged.get(k)) if k in sizes else None
                           for k in _SIZE_KEYS},
                        hole_winding=merged.get("hole_winding"),
                        core_um=_opt_float(merged.get("core_um")),
                        imaging_um=tuple(sorted({**data.get("imaging", {}), **check_imaging(
                            imaging_um or {}, "imaging options")}.items())),
                        **_image_fields(merged, image_key))
    calib = None
    if merged.get("pixel_um") is not None or merged.get("center_px") is not None:
        if merged.get("pixel_um") is None or merged.get("center_px") is None:
            raise MeasuredTableError(
                f"{table_path}: a table in pixels needs both pixel_um and center_px [x, y]")
        cx, cy = merged["center_px"]
        calib = PixelCalibration(float(merged["pixel_um"]), (float(cx), float(cy)))
    return geometry, calib


def _image_fields(merged: dict, image_key: str | None) -> dict:
    """The Geometry fields of a cloud image (mask or density), from the merged keys."""
    if image_key is None:
        return {}
    pixel = merged.get("image_pixel_um", merged.get("pixel_um"))
    centre = merged.get("image_center_px", merged.get("center_px"))
    if pixel is not None:
        _positive("image_pixel_um", pixel, "a cloud image")
    return {"image_kind": image_key.removesuffix("_file"), "image_file": merged[image_key],
            "image_pixel_um": _opt_float(pixel),
            "image_center_px": None if centre is None else tuple(float(c) for c in centre),
            "density_cut": float(merged.get("density_cut", DENSITY_CUT))}


def _opt_float(v: Any) -> float | None:
    return None if v is None else float(v)
