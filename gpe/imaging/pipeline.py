"""Run file -> image stack -> measured vortex table, and the detection model on the way.

* :func:`render_run`: chosen frames of a run rendered (gpe.imaging.render), written as an HDF5
  stack with the imaging parameters and the run's own vortices in pixel coordinates
  (gpe.imaging.files), optionally one 16-bit PNG/TIFF per frame beside it. The stack is
  written under a temporary name and renamed when complete: a rendering that dies leaves no
  partial stack under the final name (rendering is cheap next to the run: start it again).
* :func:`find_stack`: the finder (gpe.imaging.finder) on every image of a stack; the
  detections as a measured table (``shot, x, y, sign`` in pixels; ``weight`` = score), and
  beside it the geometry TOML (shape disk, the boundary radius in um, ``pixel_um``,
  ``center_px``, ``core_um`` when the stack knows the healing length, and an ``[imaging]``
  table from a detection model when one is given): what ``vortherm temperature`` reads.
  Rows of unknown sign get an empty sign field: the table reader lists them, it never drops
  them silently.
* :func:`calibrate_stack`: the detection model of a stack that carries the true vortices;
  :func:`read_detection_model` reads its ``[imaging]`` numbers back, for the tables of real
  images taken with the same camera settings.

The expected width of a core's dip, which the finder needs, is computed from the camera
(:func:`expected_core_px`): a Gaussian of rms width sigma0 = 1 xi for the in-situ core (the
depletion 1/(1 + r^2) of the core ansatz falls to half at 1 xi; common practice), opened up by
the free expansion as sigma(t)^2 = sigma0^2 + (hbar t/m sigma0)^2 (exact for a Gaussian) and
widened by the PSF in quadrature.

Units: um, ms and pixels at the interface; xi and hbar/mu inside.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from gpe.imaging.calibrate import DetectionModel, calibrate
from gpe.imaging.files import ImageStack, to_uint16, write_image, write_stack
from gpe.imaging.finder import MIN_SCORE, Found, check_image, envelope, find_cores, fluid_boundary
from gpe.imaging.render import Camera, ImagingError, render_frame
from gpe.run.gas import CORE_RADIUS_XI
from gpe.run.jsontext import loads_strict
from gpe.run.runfile import RunFile
from gpe.setup.units import HealingUnits
from thermo.data.geometry import check_imaging
from thermo.errors import MeasuredTableError

#: rms width of an in-situ core's dip, in xi (see the module docstring)
CORE_SIGMA_XI = 1.0


def expected_core_px(camera: Camera, units: HealingUnits) -> float:
    """rms width of a core's dip in the image (module docstring). Units: pixels."""
    um = units.length_m * 1e6
    t = units.ms_to_time(camera.tof_ms)
    s0 = CORE_SIGMA_XI
    sigma_xi = math.sqrt(s0 ** 2 + (t / s0) ** 2 + (camera.psf_um / um) ** 2)
    return sigma_xi * um / camera.pixel_um


def render_run(run_path, out_path, camera: Camera, *, frames=None, seed: int = 0,
               picture_format: str | None = None, progress=None) -> Path:
    """Render frames of a run into an image stack (and pictures), see the module docstring.

    ``frames``: frame indices (None: all). ``picture_format``: "png" or "tiff" to write one
    file per frame beside the stack (``<stem>_<frame>.png``). ``progress(done, total)``.
    Units: camera in um, ms.
    """
    if picture_format not in (None, "png", "tiff"):
        raise ImagingError(f"picture format {picture_format!r}; accepted 'png', 'tiff' or none")
    out_path = Path(out_path)
    rng = np.random.default_rng(seed)
    dens, brag, times, truth = [], [], [], []
    with RunFile.open(run_path) as run:
        units = HealingUnits.from_dict(run.units())
        grid = run.grid
        table = run.read_vortices()
        chosen = list(range(run.n_frames)) if frames is None else [int(f) for f in frames]
        if not chosen:
            raise ImagingError(f"{run_path}: no frames chosen; accepted frame numbers "
                               f"0..{run.n_frames - 1}")
        all_t = run.frame_times()
        for i, f in enumerate(chosen):
            ren = render_frame(run.psi(f), grid, units, camera, rng)
            # 16 bits at once: a long run's stack stays a quarter of its float size in memory
            dens.append(to_uint16(ren.density, f"{out_path}: frame {f}"))
            if ren.bragg is not None:
                brag.append(to_uint16(ren.bragg, f"{out_path}: velocity image of frame {f}"))
            times.append(float(all_t[f]))
            rows = table[table["frame"] == f]
            px, py = ren.to_pixels(rows["x"], rows["y"])
            truth += [(i, a, b, s) for a, b, s in zip(px, py, rows["sign"])]
            if progress is not None:
                progress(i + 1, len(chosen))
    um = units.length_m * 1e6
    attrs = {**camera.as_attrs(), "counts_per_n0": ren.counts_per_n0,
             "core_px": expected_core_px(camera, units), "xi_um": um,
             "x0_um": ren.x0_xi * um, "y0_um": ren.y0_xi * um, "source": str(run_path),
             "time_unit": "hbar/mu"}
    write_stack(out_path, dens, bragg=brag or None, frame=chosen, t=times,
                truth=np.array(truth, dtype=[("image", "<i8"), ("x_px", "<f8"),
                                             ("y_px", "<f8"), ("sign", "i1")]), attrs=attrs)
    if picture_format is not None:
        suffix = ".png" if picture_format == "png" else ".tif"
        for f, d in zip(chosen, dens):
            write_image(out_path.with_name(f"{out_path.stem}_{f:05d}{suffix}"), d)
        for f, b in zip(chosen, brag):
            write_image(out_path.with_name(f"{out_path.stem}_{f:05d}_bragg{suffix}"), b)
    return out_path


def _core_px(stack: ImageStack, core_px: float | None) -> float:
    core = core_px if core_px is not None else stack.core_px
    if core is None:
        raise ImagingError(f"{stack.source}: the expected core width is not in the file; "
                           "give it (--core-px, the rms width of a core's dip in pixels)")
    return float(core)


def optics_px(pixel_um: float | None, psf_um: float | None, name: str = "images"
              ) -> float | None:
    """rms width of the optics in pixels: the PSF and the pixel's own averaging (a square of
    side p has variance p^2 / 12 per axis), in quadrature; None when either is unknown."""
    if pixel_um is None or psf_um is None:
        return None
    if not (math.isfinite(psf_um) and psf_um >= 0):
        raise ImagingError(f"{name}: PSF width {psf_um!r} um; accepted a width >= 0 (rms, per "
                           "axis)")
    return math.sqrt(psf_um ** 2 + pixel_um ** 2 / 12.0) / pixel_um


def find_all(stack: ImageStack, *, core_px: float | None = None, min_score: float = MIN_SCORE,
             bragg_axis: str | None = None, psf_um: float | None = None) -> list[Found]:
    """The finder on every image of a stack (signs from its velocity images, if any).

    ``psf_um`` (default: the stack's ``psf_um`` attribute, when it has one) lets the finder
    test each dip's depth against a vortex core's (gpe.imaging.finder, step 4c). Units: um.
    """
    core = _core_px(stack, core_px)
    axis = bragg_axis or str(stack.attrs.get("bragg_axis") or "x")
    psf = psf_um if psf_um is not None else stack.attrs.get("psf_um")
    optics = optics_px(stack.pixel_um, None if psf is None else float(psf), str(stack.source))
    return [find_cores(stack.density[i], core,
                       bragg=None if stack.bragg is None else stack.bragg[i], bragg_axis=axis,
                       min_score=min_score, optics_px=optics, name=f"{stack.source} image {i}")
            for i in range(len(stack))]


def stack_truth(stack: ImageStack) -> list[tuple[np.ndarray, np.ndarray]]:
    """The true vortices of each image of a rendered stack, in pixels."""
    if stack.truth is None:
        raise ImagingError(f"{stack.source}: no 'truth' table; accepted a stack rendered from a "
                           "run by `vortherm image` (calibration needs the true vortices)")
    t = stack.truth
    return [(np.column_stack([t["x_px"][t["image"] == i], t["y_px"][t["image"] == i]]),
             t["sign"][t["image"] == i]) for i in range(len(stack))]


def calibrate_stack(stack: ImageStack, *, core_px: float | None = None,
                    min_score: float = MIN_SCORE, found: list[Found] | None = None
                    ) -> DetectionModel:
    """The detection model of a rendered stack (its true vortices against the finder)."""
    if stack.pixel_um is None:
        raise ImagingError(f"{stack.source}: no pixel size; give pixel_um")
    found = found if found is not None else find_all(stack, core_px=core_px,
                                                     min_score=min_score)
    return calibrate(found, stack_truth(stack), stack.pixel_um,
                     match_px=max(1.0, _core_px(stack, core_px)))


def read_detection_model(path) -> dict:
    """The ``[imaging]`` table (um) of a detection model file written by
    :meth:`gpe.imaging.calibrate.DetectionModel.write`, checked as a geometry file's table."""
    path = Path(path)
    try:
        data = loads_strict(path.read_text(encoding="utf-8"))
        table = data["imaging_um"]
    except FileNotFoundError:
        raise ImagingError(f"detection model {path} does not exist") from None
    except (ValueError, KeyError, TypeError) as exc:
        raise ImagingError(f"{path}: not a detection model (accepted: the JSON file written by "
                           f"`vortherm find --calibrate`, with an 'imaging_um' table; {exc})"
                           ) from None
    try:
        return check_imaging(table, f"{path}: imaging_um")
    except MeasuredTableError as exc:
        raise ImagingError(str(exc)) from None


def _toml_value(v) -> str:
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return repr(float(v))


def fluid_mask(stack: ImageStack, core_px: float | None = None) -> np.ndarray:
    """The cloud's fluid pixels over a stack: where the finder's envelope exceeds half its bulk
    level (gpe.imaging.finder, step 2) in at least half of the images. Units: pixels."""
    core = _core_px(stack, core_px)
    votes = np.zeros(stack.density.shape[1:], dtype=np.int64)
    for i in range(len(stack)):
        env = envelope(check_image(stack.density[i], f"{stack.source} image {i}"), core)
        votes += fluid_boundary(env)[1]
    return 2 * votes >= len(stack)


def find_stack(stack: ImageStack, out_csv, *, core_px: float | None = None,
               min_score: float = MIN_SCORE, model: DetectionModel | None = None,
               imaging_um: dict | None = None,
               found: list[Found] | None = None, boundary: str = "disk") -> tuple[Path, Path]:
    """Measured table (CSV, pixels) and its geometry TOML from a stack (module docstring).

    The TOML's ``[imaging]`` table comes from ``model`` (measured on this stack) or from
    ``imaging_um`` (e.g. :func:`read_detection_model` of a calibration of the same camera).
    ``boundary``: "disk" (the equal-area disk of the fluid boundary) or "mask" (the fluid
    pixels themselves, :func:`fluid_mask`, written as ``<csv stem>_fluid.png`` beside the
    table and named by ``mask_file``: the thermometry then solves the cloud's own Green's
    function, thermo.data.cloud_image). Returns (csv path, toml path). Units: pixels in the
    table, um in the TOML.
    """
    if boundary not in ("disk", "mask"):
        raise ImagingError(f"boundary = {boundary!r}; accepted 'disk' (the equal-area disk) or "
                           "'mask' (the fluid pixels as the domain)")
    if model is not None and imaging_um is not None:
        raise ImagingError("give a detection model or an [imaging] table, not both")
    if model is not None:
        imaging_um = model.imaging_um()
    if stack.pixel_um is None:
        raise ImagingError(f"{stack.source}: no pixel size in the file; give pixel_um "
                           "(um per pixel in the object plane, > 0)")
    out_csv = Path(out_csv)
    found = found if found is not None else find_all(stack, core_px=core_px,
                                                     min_score=min_score)
    centre = np.mean([fd.boundary.center_px for fd in found], axis=0)
    radius_px = float(np.mean([fd.boundary.radius_px for fd in found]))
    lines = ["# vortices found in density images by vortherm (gpe.imaging.finder)",
             f"# source: {stack.source}; x, y in pixels (column, row); weight = score",
             "shot,x,y,sign,weight"]
    shots = stack.frame if stack.frame is not None else np.arange(len(stack))
    for shot, fd in zip(shots, found):
        for x, y, s, w in zip(fd.x, fd.y, fd.sign, fd.score):
            sign = "" if s == 0 else f"{int(s):+d}"
            lines.append(f"{int(shot)},{x:.4f},{y:.4f},{sign},{w:.3f}")
    geometry = {"shape": "disk", "radius_um": radius_px * stack.pixel_um,
                "pixel_um": stack.pixel_um, "center_px": [float(centre[0]), float(centre[1])]}
    mask_png = out_csv.with_name(out_csv.stem + "_fluid.png")
    if boundary == "mask":
        del geometry["radius_um"]
        geometry["shape"] = "grid"
        geometry["mask_file"] = mask_png.name
    xi_um = stack.attrs.get("xi_um")
    if xi_um:
        geometry["core_um"] = CORE_RADIUS_XI * float(xi_um)
    toml = ["# geometry of the table beside it, from the fluid boundary of the images",
            *(f"{k} = {_toml_value(v)}" for k, v in geometry.items())]
    if imaging_um is not None:
        toml += ["", "# measured detection model (gpe.imaging.calibrate)", "[imaging]",
                 *(f"{k} = {_toml_value(v)}" for k, v in imaging_um.items())]
    if boundary == "mask":
        write_image(mask_png, np.where(fluid_mask(stack, core_px), 65535, 0).astype(np.uint16))
    tmp_csv = out_csv.with_name(out_csv.name + ".part")
    tmp_csv.write_text("\n".join(lines) + "\n", encoding="utf-8")
    toml_path = out_csv.with_suffix(".toml")
    toml_path.write_text("\n".join(toml) + "\n", encoding="utf-8")
    tmp_csv.replace(out_csv)
    return out_csv, toml_path
