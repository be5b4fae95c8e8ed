"""Image files: 16-bit PNG / TIFF (one image each, Pillow) and an HDF5 stack with attributes.

The HDF5 stack (``format = "vortherm-images"``, ``format_version = 1``) holds

* ``density`` (F, ny, nx) uint16: the absorption images, counts;
* ``bragg`` (F, ny, nx) uint16, optional: the velocity-selective channel;
* ``frame`` (F,) int64 and ``t`` (F,) float64: which run frame each image shows, and its time;
* ``truth``, optional: the run's own vortices (columns image, x_px, y_px, sign), in the
  pixel coordinates of the images (for calibrating a detection model);
* root attributes: ``pixel_um``, ``core_px`` (the expected rms width of a core's dip, for the
  finder), ``counts_per_n0``, the camera parameters (``psf_um``, ``tof_ms``, ``bragg_axis``,
  ``bragg_width_c``), ``source`` (the run file), ``time_unit``, ``x0_um``/``y0_um`` (corner of
  pixel (0, 0) in the run's coordinates).

PNG and TIFF files hold one grey image of 8 or 16 bits per pixel (Pillow modes L, I;16,
I;16B, I;16L; 32-bit integer TIFF, mode I, is accepted when its values fit 16 bits); their pixel
size is not in the file and must be given. Rows are stored as the array rows (row 0 first).

Units: counts; pixel_um in um; core_px in pixels; t in the run's time unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from gpe.imaging.render import MAX_COUNT, ImagingError

FORMAT = "vortherm-images"
FORMAT_VERSION = 1
IMAGE_SUFFIXES = (".png", ".tif", ".tiff")
STACK_SUFFIXES = (".h5", ".hdf5")
#: Pillow modes of a grey image with 8 or 16 bits per pixel
GREY_MODES = ("L", "I;16", "I;16B", "I;16L", "I;16N")
TRUTH_DTYPE = np.dtype([("image", "<i8"), ("x_px", "<f8"), ("y_px", "<f8"), ("sign", "i1")])


@dataclass
class ImageStack:
    """Images read from a file, with what is known about them.

    Units: counts; pixel_um in um (None when the file does not say); core_px in pixels.
    """

    source: str
    density: np.ndarray
    bragg: np.ndarray | None = None
    pixel_um: float | None = None
    core_px: float | None = None
    attrs: dict = field(default_factory=dict)
    truth: np.ndarray | None = None
    frame: np.ndarray | None = None
    t: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.density.shape[0])


def to_uint16(counts: np.ndarray, where: str) -> np.ndarray:
    """Counts rounded to 16 bits; counts above 65535 are an error, not clipped."""
    arr = np.rint(np.asarray(counts, dtype=np.float64))
    if arr.size and (arr.min() < 0 or arr.max() > MAX_COUNT):
        raise ImagingError(f"{where}: counts {arr.min():g}..{arr.max():g} do not fit 16 bits "
                           f"(accepted 0..{MAX_COUNT}); lower counts_per_n0")
    return arr.astype(np.uint16)


def write_image(path, counts: np.ndarray) -> Path:
    """One image as a 16-bit grey PNG or TIFF (by suffix). Units: counts."""
    from PIL import Image   # optional at import time: only image files need Pillow

    path = Path(path)
    if path.suffix.lower() not in IMAGE_SUFFIXES:
        raise ImagingError(f"{path}: suffix {path.suffix!r}; accepted {list(IMAGE_SUFFIXES)}")
    Image.fromarray(to_uint16(counts, str(path))).save(path)
    return path


def write_stack(path, density, *, bragg=None, frame=None, t=None, truth=None,
                attrs: dict | None = None) -> Path:
    """The HDF5 stack of the module docstring (written to a temporary name, then renamed).

    Units: counts; attributes as named.
    """
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    dens = np.stack([to_uint16(d, f"{path}: image {i}") for i, d in enumerate(density)])
    with h5py.File(tmp, "w") as f:
        f.attrs["format"] = FORMAT
        f.attrs["format_version"] = FORMAT_VERSION
        for k, v in (attrs or {}).items():
            f.attrs[k] = "" if v is None else v
        f.create_dataset("density", data=dens, compression="gzip", chunks=(1,) + dens.shape[1:])
        f["density"].attrs["units"] = "counts"
        if bragg is not None:
            f.create_dataset("bragg", data=np.stack(
                [to_uint16(b, f"{path}: velocity image {i}") for i, b in enumerate(bragg)]),
                compression="gzip", chunks=(1,) + dens.shape[1:])
            f["bragg"].attrs["units"] = "counts"
        if frame is not None:
            f["frame"] = np.asarray(frame, dtype=np.int64)
        if t is not None:
            f["t"] = np.asarray(t, dtype=np.float64)
        if truth is not None:
            f["truth"] = np.asarray(truth, dtype=TRUTH_DTYPE)
            f["truth"].attrs["units"] = "pixels"
    tmp.replace(path)
    return path


def _check_pixel(path: Path, pixel_um, where: str) -> None:
    """A pixel size is None (not known) or a finite number > 0 um."""
    if pixel_um is None:
        return
    try:
        ok = math.isfinite(float(pixel_um)) and float(pixel_um) > 0
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ImagingError(f"{path}: pixel size {pixel_um!r} ({where}); accepted a pixel side "
                           "> 0 in micrometres (object plane), e.g. 0.5")


def _read_picture(path: Path) -> np.ndarray:
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as im:
            mode = im.mode
            if mode == "I":
                arr = np.asarray(im)
                if arr.size and (arr.min() < 0 or arr.max() > MAX_COUNT):
                    raise ImagingError(f"{path}: 32-bit image with values outside 0..65535; "
                                       "accepted grey images of 8 or 16 bits per pixel")
            elif mode in GREY_MODES:
                arr = np.asarray(im)
            else:
                raise ImagingError(f"{path}: Pillow mode {mode!r} (colour or floating point); "
                                   f"accepted grey images of 8 or 16 bits per pixel {GREY_MODES}")
            if getattr(im, "n_frames", 1) > 1:
                raise ImagingError(f"{path}: {im.n_frames} pages; accepted one image per file "
                                   "(several images: an HDF5 stack)")
    except UnidentifiedImageError as exc:
        raise ImagingError(f"{path}: not a PNG or TIFF image Pillow can read") from exc
    return arr.astype(np.float64)


def read_images(path, *, pixel_um: float | None = None) -> ImageStack:
    """Read an HDF5 stack, or one PNG/TIFF image, into an :class:`ImageStack`.

    ``pixel_um`` overrides (stack) or supplies (PNG/TIFF) the pixel size.

    Raises
    ------
    ImagingError naming the file and what would be accepted (missing file, unknown suffix,
    colour or float image, a stack without ``density`` or of the wrong shape).

    Units: counts; pixel_um in um.
    """
    path = Path(path)
    if not path.exists():
        raise ImagingError(f"image file {path} does not exist")
    _check_pixel(path, pixel_um, "pixel_um option")
    suffix = path.suffix.lower()
    if suffix in IMAGE_SUFFIXES:
        arr = _read_picture(path)
        return ImageStack(source=str(path), density=arr[None], pixel_um=pixel_um)
    if suffix not in STACK_SUFFIXES:
        raise ImagingError(f"{path}: suffix {path.suffix!r}; accepted images "
                           f"{list(IMAGE_SUFFIXES)} or an HDF5 stack {list(STACK_SUFFIXES)}")
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise ImagingError(f"{path}: cannot be opened as HDF5 ({exc})") from exc
    with f:
        if "density" not in f:
            raise ImagingError(f"{path}: no 'density' dataset; accepted an image stack "
                               "written by `vortherm image` (density (F, ny, nx), optional bragg)")
        dens = f["density"][...]
        if dens.ndim != 3:
            raise ImagingError(f"{path}: 'density' has shape {dens.shape}; accepted "
                               "(images, rows, columns)")
        bragg = f["bragg"][...] if "bragg" in f else None
        if bragg is not None and bragg.shape != dens.shape:
            raise ImagingError(f"{path}: 'bragg' has shape {bragg.shape}, 'density' "
                               f"{dens.shape}; accepted the same shape")
        attrs = {k: (v.item() if hasattr(v, "item") else v) for k, v in f.attrs.items()}
        truth = f["truth"][...] if "truth" in f else None
        frame = f["frame"][...] if "frame" in f else None
        t = f["t"][...] if "t" in f else None
    pix = pixel_um if pixel_um is not None else attrs.get("pixel_um")
    _check_pixel(path, pix, "attribute pixel_um")
    core = attrs.get("core_px")
    return ImageStack(source=str(path), density=dens.astype(np.float64),
                      bragg=None if bragg is None else bragg.astype(np.float64),
                      pixel_um=None if pix is None else float(pix),
                      core_px=None if core is None else float(core), attrs=attrs, truth=truth,
                      frame=frame, t=t)
