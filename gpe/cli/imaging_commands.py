"""Subcommands ``image`` (camera images of a run) and ``find`` (vortex tables from images).

Thin handlers: the numerics live in gpe.imaging; they are imported inside the handlers so
that ``vortherm --help`` stays quick.
"""

from __future__ import annotations

from pathlib import Path

from gpe.cli.args import add_command, parse_frames, refuse_to_overwrite


# --------------------------------------------------------------------------- image
def register_image(sub) -> None:
    p = add_command(sub, "image", "render camera images of a run's frames (16-bit PNG/TIFF + "
                    "HDF5 stack)",
                    "What an absorption camera would record of chosen frames: free expansion "
                    "(kinetic propagation, interactions off) for --tof-ms, column density through "
                    "a Gaussian PSF of rms width --psf-um, pixels of --pixel-um, Poisson shot "
                    "noise of --counts-per-n0 counts per pixel at the bulk density, and with "
                    "--bragg-axis a velocity-selective channel that gives the signs. The stack "
                    "(HDF5) keeps the parameters as attributes and the run's own vortices in "
                    "pixels, for `vortherm find --calibrate`.")
    p.add_argument("run", type=Path, help="run file (.h5)")
    p.add_argument("-o", "--output", type=Path, help="image stack to write (default: "
                   "RUN_images.h5)")
    p.add_argument("--frames", help="frames to render, e.g. 10:40 or 5,9,-1 (default: all)")
    p.add_argument("--pixel-um", type=float, default=0.5,
                   help="pixel side in the object plane, in um (default 0.5)")
    p.add_argument("--psf-um", type=float, default=0.5,
                   help="rms width of the Gaussian point-spread function, in um (default 0.5)")
    p.add_argument("--tof-ms", type=float, default=0.0,
                   help="time of flight of the free expansion, in ms (default 0: in situ)")
    p.add_argument("--counts-per-n0", type=float,
                   help="counts of a pixel at the bulk density n0 (shot noise; default: the "
                        "pixel's atom number)")
    p.add_argument("--bragg-axis", choices=("x", "y"),
                   help="add the velocity-selective image for flow along this axis")
    p.add_argument("--bragg-width-c", type=float, default=0.2,
                   help="velocity width of the selection, in units of the sound speed")
    p.add_argument("--seed", type=int, default=0, help="seed of the shot noise")
    p.add_argument("--pictures", choices=("png", "tiff"),
                   help="also write one 16-bit picture per frame beside the stack")
    p.add_argument("--force", action="store_true", help="overwrite an existing stack")
    p.set_defaults(handler=_cmd_image)


def _cmd_image(args) -> int:
    from gpe.cli.progress import counter
    from gpe.imaging.pipeline import render_run
    from gpe.imaging.render import Camera
    from gpe.run.reading import select_frames
    from gpe.run.runfile import RunFile

    out = args.output or args.run.with_name(args.run.stem + "_images.h5")
    refuse_to_overwrite([(out, "choose another file with -o")], inputs=[args.run],
                        force=args.force)
    camera = Camera(pixel_um=args.pixel_um, psf_um=args.psf_um, tof_ms=args.tof_ms,
                    counts_per_n0=args.counts_per_n0, bragg_axis=args.bragg_axis,
                    bragg_width_c=args.bragg_width_c)
    with RunFile.open(args.run) as run:
        n = run.n_frames
    frames = select_frames(args.run, parse_frames(args.frames), n)
    with counter("images", "frames") as bar:
        render_run(args.run, out, camera, frames=frames, seed=args.seed,
                   picture_format=args.pictures, progress=bar)
    print(f"{len(frames)} images written to {out}"
          + (f" (and {args.pictures} pictures beside it)" if args.pictures else ""))
    return 0


# --------------------------------------------------------------------------- find
def register_find(sub) -> None:
    p = add_command(sub, "find", "find vortex cores in density images -> measured table (CSV)",
                    "Envelope removal (grey closing), candidate dips (matched filter), sub-pixel "
                    "Gaussian fit, a score per candidate, the fluid boundary; signs from the "
                    "velocity-selective images when the stack has them, otherwise unknown. "
                    "Writes the measured-table CSV in pixels and its geometry TOML (radius from "
                    "the boundary in um, pixel size, centre) for `vortherm temperature`. With "
                    "--calibrate (a stack rendered from a run) the detections are matched to "
                    "the run's vortices and the measured detection model goes into the TOML's "
                    "[imaging] table and a JSON file.")
    p.add_argument("images", type=Path, help="HDF5 image stack, or one 16-bit PNG/TIFF")
    p.add_argument("--csv", type=Path, help="table to write (default: IMAGES_vortices.csv)")
    p.add_argument("--pixel-um", type=float, help="pixel size in um (needed for PNG/TIFF)")
    p.add_argument("--core-px", type=float,
                   help="rms width of a core's dip in pixels (default: from the stack)")
    p.add_argument("--psf-um", type=float, default=None,
                   help="rms width of the imaging PSF in um (default: from the stack; a picture "
                        "alone has none): dips shallower than half a vortex core's under these "
                        "optics are not reported")
    p.add_argument("--min-score", type=float, default=None,
                   help="least score (depletion over noise) of a detection (default 5)")
    p.add_argument("--calibrate", action="store_true",
                   help="measure the detection model against the stack's true vortices")
    p.add_argument("--model", type=Path, metavar="DETECTION.json",
                   help="put this detection model's [imaging] table (from an earlier "
                        "--calibrate with the same camera settings) into the geometry TOML")
    p.add_argument("--boundary", choices=("disk", "mask"), default="disk",
                   help="the table's domain: the equal-area disk of the fluid boundary (default) "
                        "or the fluid pixels themselves (written as CSV_fluid.png, a grid domain "
                        "with its own Green's function)")
    p.add_argument("--force", action="store_true", help="overwrite existing outputs")
    p.set_defaults(handler=_cmd_find)


def _cmd_find(args) -> int:
    from gpe.imaging.files import read_images
    from gpe.imaging.finder import MIN_SCORE
    from gpe.errors import VorthermError
    from gpe.imaging.pipeline import calibrate_stack, find_all, find_stack, read_detection_model

    csv = args.csv or args.images.with_name(args.images.stem + "_vortices.csv")
    outs = [(csv, "choose another file with --csv"),
            (csv.with_suffix(".toml"), "choose another file with --csv")]
    model_path = csv.with_name(csv.stem + "_detection.json")
    if args.calibrate:
        outs.append((model_path, "choose another file with --csv"))
    if args.boundary == "mask":
        outs.append((csv.with_name(csv.stem + "_fluid.png"), "choose another file with --csv"))
    if args.calibrate and args.model is not None:
        raise VorthermError("--calibrate and --model: give one (--calibrate measures the model "
                            "on this stack, --model reuses one measured before)")
    refuse_to_overwrite(outs, inputs=[args.images] + ([args.model] if args.model else []),
                        force=args.force)
    imaging = read_detection_model(args.model) if args.model is not None else None
    stack = read_images(args.images, pixel_um=args.pixel_um)
    score = MIN_SCORE if args.min_score is None else args.min_score
    found = find_all(stack, core_px=args.core_px, min_score=score, psf_um=args.psf_um)
    model = None
    if args.calibrate:
        model = calibrate_stack(stack, core_px=args.core_px, min_score=score, found=found)
        model.write(model_path)
    csv_path, toml_path = find_stack(stack, csv, core_px=args.core_px, min_score=score,
                                     model=model, imaging_um=imaging, found=found,
                                     boundary=args.boundary)
    n = sum(len(f) for f in found)
    unknown = sum(int((f.sign == 0).sum()) for f in found)
    print(f"{n} vortices in {len(found)} images -> {csv_path} (pixels), geometry {toml_path}")
    if unknown:
        print(f"{unknown} without a sign (no velocity image): the table reader lists them")
    if model is not None:
        im = model.imaging_um()
        print(f"detection model ({model.n_matched}/{model.n_true} true vortices found, "
              f"{model.false_per_image:.2f} false per image): blur {im['blur_um']:.3f} um, "
              f"edge loss {im['edge_loss_um']:.2f} um, resolution {im['resolution_um']:.2f} um, "
              f"sign error {im['sign_error']:.3f} -> {model_path}")
        for note in model.notes():
            print(f"note: {note}")
    return 0
