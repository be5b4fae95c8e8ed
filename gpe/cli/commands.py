"""Subcommands of ``vortherm``: argument definitions and thin handlers.

Each ``_register_*`` adds one subparser; handlers only translate between the command line and
the library functions (no physics here). They import the numerics inside the handler on purpose:
``vortherm --help`` and argument errors then answer without loading numba, pyFFTW or h5py.
"""

from __future__ import annotations

from pathlib import Path

from gpe.cli.args import add_command, parse_frames, parse_seeds
from gpe.cli.imaging_commands import register_find, register_image
from gpe.cli.thermo_commands import (
    register_compare,
    register_temperature,
    show_temperature,
)
from gpe.errors import VorthermError


# --------------------------------------------------------------------------- init
def _register_init(sub) -> None:
    p = add_command(sub, "init", "write a commented example protocol (TOML)")
    p.add_argument("path", type=Path, help="where to write the protocol, e.g. my.toml")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(handler=_cmd_init)


def _cmd_init(args) -> int:
    from gpe.setup.protocol import example_protocol_text

    if args.path.exists() and not args.force:
        raise VorthermError(f"{args.path} exists already; pass --force to overwrite it, "
                            "or choose another file name.")
    args.path.write_text(example_protocol_text())
    print(f"wrote {args.path}: edit it, then `vortherm run {args.path}`")
    return 0


# --------------------------------------------------------------------------- schema
def _register_schema(sub) -> None:
    p = add_command(sub, "schema", "write the JSON Schema of the protocol file (for editors)",
                    "The keys of every protocol table with their unit suffixes, types, choices and "
                    "signs as a JSON Schema (draft 2020-12), generated from the protocol reader's "
                    "own schema. Point a TOML editor's schema setting at the file to get "
                    "completion and checks while writing a protocol.")
    p.add_argument("-o", "--output", type=Path,
                   help="file to write, e.g. protocol.schema.json (default: print to stdout)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(handler=_cmd_schema)


def _cmd_schema(args) -> int:
    from gpe.run.jsontext import dumps_strict
    from gpe.setup.json_schema import protocol_json_schema

    text = dumps_strict(protocol_json_schema(), indent=1) + "\n"
    if args.output is None:
        print(text, end="")
        return 0
    if args.output.exists() and not args.force:
        raise VorthermError(f"{args.output} exists already; pass --force to overwrite it, "
                            "or choose another file name with -o.")
    args.output.write_text(text, encoding="utf-8")
    print(f"wrote {args.output}")
    return 0


# --------------------------------------------------------------------------- run
def _register_run(sub) -> None:
    p = add_command(sub, "run", "simulate a protocol and write its run file (HDF5)",
                    "Simulate a stirring protocol: ground state with the beams at their start positions, "
                    "then damped real-time evolution; snapshots, observables and vortices are written "
                    "to the run file at every output time (times in the protocol's units: ms in SI "
                    "protocols, hbar/mu in healing-unit protocols).")
    p.add_argument("protocol", type=Path, nargs="?", help="protocol file (TOML)")
    p.add_argument("-o", "--output", type=Path, help="run file to write (default: PROTOCOL with .h5)")
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override a protocol value, e.g. --set beams.0.height_mu=2.5 (repeatable)")
    p.add_argument("--resume", type=Path, metavar="RUN.h5",
                   help="continue an interrupted run from its last checkpoint")
    p.add_argument("--seeds", metavar="A-B|A,B,..",
                   help="run one file per noise seed (writes NAME_seedK.h5), for ensembles")
    p.add_argument("--threads", type=int, help="FFT threads (default: all cores)")
    p.add_argument("--force", action="store_true", help="overwrite an existing run file")
    p.set_defaults(handler=_cmd_run)


def _cmd_run(args) -> int:
    from gpe.cli import progress
    from gpe.run import reading, simulate
    from gpe.setup.protocol import load_protocol

    if args.resume is not None:
        path = simulate.simulate_resume(args.resume, progress=progress.run_progress(),
                                        threads=args.threads)
        print(reading.summary_text(path))
        return 0
    if args.protocol is None:
        raise VorthermError("vortherm run needs a protocol file (or --resume RUN.h5); "
                            "`vortherm init my.toml` writes an example")
    output = args.output or args.protocol.with_suffix(".h5")
    seeds = parse_seeds(args.seeds) if args.seeds else [None]
    for seed in seeds:
        overrides = list(args.overrides)
        out = output
        if seed is not None:
            overrides.append(f"evolution.seed={seed}")
            out = output.with_name(f"{output.stem}_seed{seed}{output.suffix}")
        protocol = load_protocol(args.protocol, overrides)
        if out.exists() and not args.force:
            raise VorthermError(f"{out} exists already; continue it with `vortherm run --resume {out}`, "
                                "or pass --force to start again, or -o for another name.")
        path = simulate.simulate(protocol, out, progress=progress.run_progress(),
                                 ground_state_progress=progress.counter("ground state", "steps"),
                                 threads=args.threads)
        print(reading.summary_text(path))
    return 0




# --------------------------------------------------------------------------- sweep
def _register_sweep(sub) -> None:
    p = add_command(sub, "sweep", "run a grid of protocols overnight: summary table and phase map",
                    "Every point of the sweep file (base protocol, axes, seeds, what to measure) runs "
                    "the whole pipeline into its own run file. Rerunning the same command resumes: "
                    "complete points are skipped, incomplete ones continue from their checkpoints. "
                    "Local by default (a pool sized to the cores); --scheduler sends the points to an "
                    "existing Dask cluster (pip install 'vortherm[cluster]').")
    p.add_argument("sweep", type=Path, help="sweep file (TOML), see docs/sweep.md")
    p.add_argument("-o", "--output", type=Path, help="output folder (default: out/<stem>/ beside the sweep file)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address, e.g. tcp://head:8786")
    p.add_argument("--workers", type=int, help="local worker processes (default: cores / threads)")
    p.add_argument("--threads", type=int, help="FFT threads per point")
    p.add_argument("--restart-changed", action="store_true",
                   help="when the base protocol (or a file it reads) changed since the output folder "
                        "was started: move the changed points' files to OUTPUT/superseded/ and compute "
                        "them again (without it such a rerun is refused)")
    p.set_defaults(handler=_cmd_sweep)


def _cmd_sweep(args) -> int:
    from gpe.sweep import execute as sw
    from gpe.sweep.file import load_sweep

    from gpe.cli.progress import sweep_progress

    spec = load_sweep(args.sweep)
    out_dir = args.output or sw.default_out_dir(args.sweep)
    bar = sweep_progress()
    try:
        result = sw.run_sweep(spec, out_dir, scheduler=args.scheduler, workers=args.workers,
                              threads=args.threads, progress=bar,
                              restart_changed=args.restart_changed)
    finally:
        bar.close()
    print(sweep_summary_text(result))
    print(f"summary tables: {', '.join(str(v) for v in result.files.values())}")
    if result.failed:
        print(f"{len(result.failed)} point(s) failed:")
        for pid, err in result.failed.items():
            print(f"  {pid}: {err}")
    try:
        from gpe.figures.sweep import plot_sweep

        plot_sweep(result, path=Path(out_dir) / "phase_map.png")   # beta~ N pooled over seeds
        print(f"phase map: {Path(out_dir) / 'phase_map.png'}")
    except VorthermError as exc:
        print(f"no phase map: {exc}")
    if result.interrupted:
        print("interrupted: rerun the same command to continue")
        return 130
    return 0 if not result.failed else 1




def sweep_summary_text(result) -> str:
    """The per-point table printed at the end of a sweep: swept values, seeds that finished,
    beta (mean over seeds with its bootstrap 95% interval), the fraction of seeds at negative
    beta, beta~ N pooled over the seeds with its 95% interval (or the bound it is), and the
    other measured means, with units."""
    import math

    def number(v) -> str:
        return "" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.4g}"

    def interval(lo, hi) -> str:
        lo, hi = number(lo), number(hi)
        return f"[{lo}, {hi}]" if lo and hi else ""

    qs = [q for q in result.quantities if q != "beta"]
    head = [a.title for a in result.axes] + ["ok/seeds", f"beta [{result.units['beta_mean']}]",
                                             "seed bootstrap", "beta<0", "beta~N [1]",
                                             "95% interval"]
    head += [f"{q} [{result.units[q + '_mean']}]" for q in qs]
    rows = []
    for r in result.points:
        row = [str(r[a.key]) for a in result.axes]
        row += [f"{r['n_ok']}/{r['n_seeds']}", number(r["beta_mean"]),
                interval(r["beta_lo95"], r["beta_hi95"]), number(r["frac_beta_negative"])]
        bound = r.get("bound") or ""
        rel = {"upper": "<", "lower": ">"}.get(bound, "")
        row += [rel + number(r.get("beta_n", math.nan)),
                "(a bound)" if bound else interval(r.get("beta_n_lo95"), r.get("beta_n_hi95"))]
        row += [number(r[q + "_mean"]) for q in qs]
        rows.append(row)
    width = [max(len(c) for c in col) for col in zip(head, *rows)]
    lines = ["  ".join(c.rjust(w) for c, w in zip(line, width)) for line in [head, *rows]]
    n_ok = sum(r["status"] == "ok" for r in result.runs)
    title = (f"sweep summary: {n_ok} of {len(result.runs)} runs measured "
             "(beta~N pooled over the seeds that finished, the interval to quote; beta of the "
             "runs averaged over seeds with a bootstrap over seeds, too narrow for few seeds and "
             "none for one; other quantities are means over all frames, their intervals in "
             "summary_points.csv; beta~N reasons there too)")
    return "\n".join([title, *lines])


# --------------------------------------------------------------------------- vortices
def _register_vortices(sub) -> None:
    p = add_command(sub, "vortices", "re-detect vortices in a run file and export them as CSV (um)",
                    "Detection by phase winding around every grid plaquette, restricted to where the "
                    "fluid is. The run file is only changed with --store (the old table is then "
                    "replaced in one step).")
    p.add_argument("run", type=Path, help="run file (.h5)")
    p.add_argument("--threshold", type=float, default=0.2,
                   help="density threshold relative to the peak background density, in (0, 1)")
    p.add_argument("--region", choices=("trap", "all"), default="trap",
                   help="'trap': only inside the trap walls; 'all': the whole grid")
    p.add_argument("--frames", help="frames to use, e.g. 10:40 or 5,9,-1 (default: all)")
    p.add_argument("--csv", type=Path, help="CSV to write (default: RUN_vortices.csv)")
    p.add_argument("--store", action="store_true",
                   help="replace the vortex table of the run file with the new detection")
    p.add_argument("--force", action="store_true", help="overwrite an existing CSV")
    p.set_defaults(handler=_cmd_vortices)


def _cmd_vortices(args) -> int:
    from gpe.run import products

    frames = parse_frames(args.frames)
    table, events, csv_path = products.redetect(args.run, threshold=args.threshold,
                                                region=args.region, frames=frames,
                                                csv_path=args.csv, store=args.store,
                                                overwrite=args.force)
    n_frames = len(set(table["frame"].tolist())) if table.size else 0
    print(f"{table.size} vortices in {n_frames} frames with vortices; "
          f"{len(events)} annihilation/creation events")
    print(f"table written to {csv_path} (x, y in um about the grid centre)")
    if args.store:
        print(f"vortex table of {args.run} replaced")
    return 0


# --------------------------------------------------------------------------- plot
def _register_plot(sub) -> None:
    p = add_command(sub, "plot", "figures from a run file: density, phase, vortices, energies, spectra")
    p.add_argument("run", type=Path, help="run file (.h5)")
    p.add_argument("--frames", default="-1", help="frames to draw, e.g. 0,30,-1 (default: the last)")
    p.add_argument("--movie", action="store_true", help="also write an animation (mp4 or GIF)")
    p.add_argument("-o", "--output", type=Path, help="folder for the figures (default: beside the run)")
    _add_format(p)
    p.add_argument("--force", action="store_true", help="replace figures that exist already")
    p.set_defaults(handler=_cmd_plot)


def _add_format(p) -> None:
    p.add_argument("--format", default="png", type=str.lower, choices=("png", "pdf", "svg"),
                   help="figure files: png (raster) or pdf, svg (vector); default png")


def _cmd_plot(args) -> int:
    from gpe.figures import standard

    out_dir = args.output or args.run.with_name(args.run.stem + "_figures")
    written = standard.make_figures(args.run, out_dir, frames=parse_frames(args.frames),
                                    movie=args.movie, format=args.format,
                                    overwrite=args.force)
    for path in written:
        print(f"figure: {path}")
    return 0


# --------------------------------------------------------------------------- demo
def _register_demo(sub) -> None:
    p = add_command(sub, "demo", "run the demo scenario end to end and say where the outputs are",
                    "Simulates the demo protocol shipped with the package (runs/demo.toml in a "
                    "checkout; a scenario of our own: a 87Rb condensate in a disk "
                    "stirred once by a paddle of six beams), detects the vortices, draws figures, measures the "
                    "vortex-gas temperature and prints the verdict.")
    p.add_argument("-o", "--output", type=Path, default=Path("demo-output"),
                   help="folder for all outputs (default: ./demo-output)")
    p.add_argument("--threads", type=int, help="FFT threads (default: all cores)")
    _add_format(p)
    p.set_defaults(handler=_cmd_demo)


def _cmd_demo(args) -> int:
    from importlib import resources

    from gpe.cli import progress
    from gpe.figures import standard
    from gpe.run import products, reading, simulate, thermometry
    from gpe.setup.protocol import parse_protocol

    out = args.output
    out.mkdir(parents=True, exist_ok=True)
    # package data (gpe/demo/, links to runs/ in a checkout): found from any install
    text = resources.files("gpe").joinpath("demo/demo.toml").read_text(encoding="utf-8")
    protocol_path = out / "demo.toml"
    protocol_path.write_text(text)
    protocol = parse_protocol(text, source=str(protocol_path))
    run_path = out / "demo.h5"
    print(f"1/4 simulating {protocol_path} -> {run_path}")
    resume = run_path.exists() and not reading.is_complete(run_path)
    if not reading.is_complete(run_path):
        if run_path.exists() and not resume:
            run_path.unlink()
        simulate.simulate(protocol, run_path, resume=resume, progress=progress.run_progress(),
                          ground_state_progress=progress.counter("ground state", "steps"),
                          threads=args.threads)
    print(reading.summary_text(run_path))
    print("2/4 figures")
    # the demo folder is the demo's own: a second demo replaces its figures
    for path in standard.make_figures(run_path, out / "figures", frames=[0, -1], movie=False,
                                      format=args.format, overwrite=True):
        print(f"  {path}")
    print("3/4 vortex table")
    # the demo folder is the demo's own: a second demo replaces its outputs
    _, _, csv_path = products.redetect(run_path, csv_path=out / "demo_vortices.csv",
                                       overwrite=True)
    print(f"  {csv_path}")
    print("4/4 temperature of the vortex gas")
    result = thermometry.temperature_of_run(run_path, effort="quick",
                                            progress=progress.dos_progress())
    show_temperature(result, run_path, csv_path=out / "demo_temperature.csv", plot=True,
                     force=True)
    print(f"\nall demo outputs are in {out.resolve()}")
    return 0


# --------------------------------------------------------------------------- describe
def _register_describe(sub) -> None:
    p = add_command(sub, "describe", "list the observables recorded at every output time, with units")
    p.set_defaults(handler=_cmd_describe)


def _cmd_describe(args) -> int:
    from gpe.analysis import diagnostics

    print("observables stored in every run file (observables/<name>), simulation units:")
    print(diagnostics.describe())
    return 0


REGISTRY = [_register_init, _register_schema, _register_run, _register_vortices, _register_plot,
            register_temperature, register_compare, register_image, register_find,
            _register_sweep, _register_demo, _register_describe]
