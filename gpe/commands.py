"""Subcommands of ``vortherm``: argument definitions and thin handlers.

Each ``_register_*`` adds one subparser; handlers import the numerics lazily and only translate
between the command line and the library functions (no physics here).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from gpe.errors import VorthermError


def _add(sub, name: str, help_text: str, description: str | None = None) -> argparse.ArgumentParser:
    return sub.add_parser(name, help=help_text, description=description or help_text,
                          formatter_class=argparse.RawDescriptionHelpFormatter)


# --------------------------------------------------------------------------- init
def _register_init(sub) -> None:
    p = _add(sub, "init", "write a commented example protocol (TOML)")
    p.add_argument("path", type=Path, help="where to write the protocol, e.g. my.toml")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.set_defaults(handler=_cmd_init)


def _cmd_init(args) -> int:
    from gpe.protocol import example_protocol_text

    if args.path.exists() and not args.force:
        raise VorthermError(f"{args.path} exists already; pass --force to overwrite it, "
                            "or choose another file name.")
    args.path.write_text(example_protocol_text())
    print(f"wrote {args.path}: edit it, then `vortherm run {args.path}`")
    return 0


# --------------------------------------------------------------------------- run
def _register_run(sub) -> None:
    p = _add(sub, "run", "simulate a protocol and write its run file (HDF5)",
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


def parse_seeds(text: str) -> list[int]:
    """Parse ``"1-20"`` or ``"1,4,7"`` into a list of seeds."""
    seeds: list[int] = []
    try:
        for part in text.split(","):
            if "-" in part.strip()[1:]:
                lo, hi = part.split("-", 1)
                seeds.extend(range(int(lo), int(hi) + 1))
            else:
                seeds.append(int(part))
    except ValueError:
        raise VorthermError(f"--seeds {text!r}: expected a range like 1-20 or a list like 1,4,7 "
                            "of whole numbers") from None
    if not seeds:
        raise VorthermError(f"--seeds {text!r} names no seed; expected e.g. 1-20")
    return seeds


def _cmd_run(args) -> int:
    from gpe import pipeline
    from gpe.protocol import load_protocol

    if args.resume is not None:
        path = pipeline.simulate_resume(args.resume, progress=pipeline.terminal_progress_factory(),
                                        threads=args.threads)
        print(pipeline.summary_text(path))
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
        path = pipeline.simulate(protocol, out, progress=pipeline.terminal_progress_factory(), threads=args.threads)
        print(pipeline.summary_text(path))
    return 0




# --------------------------------------------------------------------------- temperature
def _register_temperature(sub) -> None:
    p = _add(sub, "temperature", "inverse temperature beta of vortex configurations (both signs)",
             "beta per output time of a run file, or per shot and for the ensemble of a measured "
             "table (CSV/HDF5: shot, x, y, sign; positions in um about the trap centre, or "
             "pixels with --pixel-um and --center). beta is in units of 1/E0 with "
             "E0 = rho kappa^2/(4 pi); beta*N compares across vortex numbers.")
    p.add_argument("source", type=Path, help="run file (.h5 from `vortherm run`) or measured table (.csv/.h5)")
    p.add_argument("--disk-radius-um", type=float, help="measured table: disk radius in um")
    p.add_argument("--box-um", type=float, nargs=2, metavar=("LX", "LY"),
                   help="measured table: box sides in um")
    p.add_argument("--core-um", type=float,
                   help="measured table: vortex core radius in um (default: 2%% of the domain size)")
    p.add_argument("--pixel-um", type=float, help="measured table in pixels: pixel size in um")
    p.add_argument("--center", type=float, nargs=2, metavar=("X", "Y"),
                   help="measured table in pixels: trap centre in pixels")
    p.add_argument("--strict", action="store_true", help="stop at the first unusable row")
    p.add_argument("--frames", help="run file: frames to use, e.g. 10:40 or 5,9,-1 (default: all)")
    p.add_argument("--effort", choices=("quick", "standard", "thorough"), default="quick",
                   help="Monte Carlo effort of the density of states (cached on disk per N+, N-)")
    p.add_argument("--csv", type=Path, help="where to write the table (default: beside the source)")
    p.add_argument("--json", action="store_true", help="print the results as JSON on stdout")
    p.add_argument("--plot", action="store_true", help="draw beta(t) and clustering observables")
    p.set_defaults(handler=_cmd_temperature)


def parse_frames(text: str | None):
    """``"10:40"``, ``"5,9,-1"`` or None (all) -> a frame selector for the run readers."""
    if text is None:
        return None
    try:
        if ":" in text:
            lo, hi = text.split(":", 1)
            return slice(int(lo) if lo else None, int(hi) if hi else None)
        return [int(v) for v in text.split(",")]
    except ValueError:
        raise VorthermError(f"--frames {text!r}: expected a range like 10:40 or a list like "
                            "5,9,-1 of frame indices") from None


def _is_run_file(path: Path) -> bool:
    if path.suffix.lower() not in (".h5", ".hdf5"):
        return False
    import h5py

    try:
        with h5py.File(path, "r") as f:
            return "format_version" in f.attrs and "snapshots" in f
    except OSError:
        return False


def _cmd_temperature(args) -> int:
    from gpe import thermometry

    if not args.source.exists():
        raise VorthermError(f"{args.source}: no such file; give a run file (.h5) or a measured "
                            "table (.csv)")
    if _is_run_file(args.source):
        result = _temperature_of_run(args)
    else:
        result = _temperature_of_table(args)
    csv_path = args.csv or args.source.with_name(args.source.stem + "_temperature.csv")
    thermometry.write_records_csv(csv_path, result["records"], result["time_key"])
    if args.json:
        print(json.dumps(thermometry.json_report(result), indent=1, allow_nan=True))
    else:
        print(thermometry.text_report(result))
        print(f"table written to {csv_path}")
    if args.plot:
        from thermo import plots as thermo_plots

        fig_path = args.source.with_name(args.source.stem + "_temperature.png")
        thermo_plots.plot_temperature_series(result, fig_path)
        print(f"figure written to {fig_path}")
    return 0


def _temperature_of_run(args) -> dict:
    from gpe import pipeline, thermometry
    from gpe.io import RunFile

    with RunFile.open(args.source, "r") as run:
        n_frames = len(run.frame_times())
    frames = pipeline.select_frames(args.source, parse_frames(args.frames), n_frames)
    vd, times, configs, left_out, protocol = pipeline.run_configurations(args.source, frames)
    si = protocol.unit_system == "SI"
    t_user = times * protocol.units.time_s * 1e3 if si else times
    unit = "ms" if si else "hbar/mu"
    records = thermometry.configuration_records(configs, vd.domain, vd.core_radius,
                                                effort=args.effort)
    for rec, f, t, (wall, pairs) in zip(records, frames, t_user, left_out):
        rec.update({"frame": f, "t": float(t), "left_out_wall": wall, "left_out_pairs": pairs})
    # the ensemble over the last third of the run: where a stirred gas has settled, if ever
    last = max(1, len(configs) // 3)
    ensemble = thermometry.ensemble_record(configs[-last:], vd.domain, vd.core_radius,
                                           effort=args.effort)
    ensemble["window"] = [float(t_user[-last]), float(t_user[-1])]
    return {"kind": "run", "source": str(args.source), "time_key": "t", "time_unit": unit,
            "records": records, "ensemble": ensemble,
            "onset": thermometry.onset_verdict(t_user, records, unit),
            "approximation": vd.approximate, "domain": vd.domain.kind}


def _temperature_of_table(args) -> dict:
    from gpe import thermometry
    from thermo.measured import read_measured

    shape = None
    kw = {}
    if args.disk_radius_um is not None:
        shape, kw["radius_um"] = "disk", args.disk_radius_um
    if args.box_um is not None:
        shape, kw["width_um"], kw["height_um"] = "box", args.box_um[0], args.box_um[1]
    table = read_measured(args.source, shape=shape, core_um=args.core_um, pixel_um=args.pixel_um,
                          center_px=args.center, strict=args.strict, **kw)
    core = table.core_radius if table.core_radius is not None else 0.02
    configs = table.configurations
    records = thermometry.configuration_records(configs, table.domain, core, effort=args.effort)
    for rec, shot in zip(records, table.shot_ids):
        rec["shot"] = shot
    ensemble = thermometry.ensemble_record(configs, table.domain, core, effort=args.effort)
    return {"kind": "measured", "source": str(args.source), "time_key": "shot",
            "time_unit": "", "records": records, "ensemble": ensemble,
            "onset": ensemble["verdict"], "approximation": "",
            "domain": table.domain.kind,
            "problems": [str(p) for p in table.problems]}




# --------------------------------------------------------------------------- compare
def _register_compare(sub) -> None:
    p = _add(sub, "compare", "simulated vs measured vortex statistics, side by side",
             "Frames of one or more run files (e.g. seeds of one protocol) near --time-ms, or in "
             "--window-ms, form the simulated ensemble; the measured table (CSV/HDF5) the other. "
             "Prints simulation | measured | difference (95% interval) | p-value for vortex "
             "numbers, energy per vortex, beta, D, C1, dipole/cluster/free fractions and mean "
             "nearest-neighbour distance, with Kolmogorov-Smirnov and permutation tests.")
    p.add_argument("runs", type=Path, nargs="+", help="run files (.h5)")
    p.add_argument("--measured", type=Path, required=True, help="measured vortex table (.csv/.h5)")
    p.add_argument("--time-ms", type=float, help="simulation time to compare at, ms (default: last frame)")
    p.add_argument("--window-ms", type=float, nargs=2, metavar=("T0", "T1"),
                   help="use every frame in this window, ms")
    p.add_argument("--pixel-um", type=float, help="measured table in pixels: pixel size in um")
    p.add_argument("--center", type=float, nargs=2, metavar=("X", "Y"), help="trap centre in pixels")
    p.add_argument("--strict", action="store_true",
                   help="stop at the first unusable row of the measured table instead of listing them")
    p.add_argument("--blur-um", type=float, default=0.0, help="imaging model: position blur (um, rms)")
    p.add_argument("--resolution-um", type=float, default=0.0,
                   help="imaging model: vortices closer than this are not resolved (um)")
    p.add_argument("--edge-loss-um", type=float, default=0.0,
                   help="imaging model: vortices this close to the wall are lost (um)")
    p.add_argument("--sign-error", type=float, default=0.0,
                   help="imaging model: probability of a wrong sign (0..1)")
    p.add_argument("--seed", type=int, default=0, help="seed of the imaging model and the tests")
    p.add_argument("--effort", choices=("quick", "standard", "thorough"), default="quick")
    p.add_argument("-o", "--output", type=Path, help="stem of the CSV/JSON/PNG outputs")
    p.add_argument("--json", action="store_true", help="print the table as JSON on stdout")
    p.set_defaults(handler=_cmd_compare)


def _cmd_compare(args) -> int:
    import numpy as np

    from gpe import pipeline
    from gpe.io import RunFile
    from gpe.thermometry import dos_settings
    from thermo import compare as cmp
    from thermo.degrade import ImagingModel, degrade_many
    from thermo.measured import read_measured

    sim_configs, vd, protocol = [], None, None
    for run_path in args.runs:
        with RunFile.open(run_path, "r") as run:
            times = np.asarray(run.frame_times())
        _, _, _, _, protocol = pipeline.run_configurations(run_path, [len(times) - 1])
        ms = times * protocol.units.time_s * 1e3
        if args.window_ms:
            frames = [i for i, t in enumerate(ms) if args.window_ms[0] <= t <= args.window_ms[1]]
        elif args.time_ms is not None:
            frames = [int(np.argmin(np.abs(ms - args.time_ms)))]
        else:
            frames = [len(ms) - 1]
        if not frames:
            raise VorthermError(f"{run_path}: no frame in --window-ms {args.window_ms}; frames "
                                f"span {ms[0]:.4g}..{ms[-1]:.4g} ms")
        vd, _, configs, _, _ = pipeline.run_configurations(run_path, frames)
        sim_configs.extend(configs)
    scale_um = vd.scale * protocol.units.length_m * 1e6
    # The measured table keeps its own geometry (TOML beside it, or its options): both sides
    # are compared in scaled units of their own domain, which must be of the same shape.
    measured = read_measured(args.measured, pixel_um=args.pixel_um, center_px=args.center,
                             strict=args.strict)
    if measured.domain.kind != vd.domain.kind:
        raise VorthermError(f"{args.measured}: the measured domain is a {measured.domain.kind}, "
                            f"the simulation's a {vd.domain.kind}; compare needs the same shape")
    if vd.domain.kind == "box" and abs(measured.domain.aspect - vd.domain.aspect) > 0.02 * vd.domain.aspect:
        raise VorthermError(f"{args.measured}: box aspect {measured.domain.aspect:.3g} differs "
                            f"from the simulation's {vd.domain.aspect:.3g}")
    core = min(vd.core_radius, measured.core_radius or vd.core_radius)
    model = ImagingModel(blur=args.blur_um / scale_um, resolution=args.resolution_um / scale_um,
                         edge_loss=args.edge_loss_um / scale_um, sign_flip=args.sign_error)
    sim_configs = degrade_many(sim_configs, vd.domain, model, np.random.default_rng(args.seed),
                               core_radius=core)
    comparison = cmp.compare_ensembles(sim_configs, measured.configurations, vd.domain,
                                       core, seed=args.seed,
                                       beta_options={"settings": dos_settings(args.effort)})
    stem = args.output or args.measured.with_name(args.measured.stem + "_vs_simulation")
    csv_path = cmp.write_csv(comparison, stem.with_suffix(".csv"))
    json_path = cmp.write_json(comparison, stem.with_suffix(".json"))
    fig_path = stem.with_suffix(".png")
    cmp.plot_comparison(comparison, fig_path, length_scale_um=scale_um)
    if args.json:
        print(json.dumps(cmp.comparison_to_dict(comparison), indent=1, allow_nan=True))
    else:
        print(_format_comparison(comparison))
        print(f"written: {csv_path}, {json_path}, {fig_path}")
    return 0


def _format_comparison(comparison) -> str:
    def num(v, width: int = 10) -> str:
        return f"{v:{width}.4g}" if v == v else f"{'-':>{width}}"

    def unit(text: str) -> str:
        return "E0" if text.startswith("E0") else text[:11]

    head = (f"{'quantity':<18} {'unit':<11} {comparison.labels[0]:>10} {comparison.labels[1]:>10} "
            f"{'difference':>10} {'95% interval':>23} {'KS p':>9} {'perm. p':>9}")
    lines = [head, "-" * len(head)]
    for r in comparison.rows:
        lines.append(f"{r.quantity:<18} {unit(r.unit):<11} {num(r.simulation)} {num(r.measured)} "
                     f"{num(r.difference)} [{num(r.ci95_low)}, {num(r.ci95_high)}] "
                     f"{num(r.p_ks, 9)} {num(r.p_permutation, 9)}")
    lines.append("E0 = rho kappa^2/(4 pi); lengths in units of the domain size (disk radius)")
    lines.extend(f"note: {n}" for n in comparison.notes)
    return "\n".join(lines)


# --------------------------------------------------------------------------- sweep
def _register_sweep(sub) -> None:
    p = _add(sub, "sweep", "run a grid of protocols overnight: summary table and phase map",
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
    p.set_defaults(handler=_cmd_sweep)


def _cmd_sweep(args) -> int:
    from gpe import sweep as sw

    spec = sw.load_sweep(args.sweep)
    out_dir = args.output or sw.default_out_dir(args.sweep)
    bar = {}

    def progress(p) -> None:
        from gpe.progress import ProgressBar

        if "bar" not in bar:
            bar["bar"] = ProgressBar(p.total, label="sweep", unit="points")
        eta = "" if p.eta_s is None else f"ETA {p.eta_s / 60:.1f} min"
        bar["bar"].update(p.done + p.skipped + p.failed,
                          extra=f"running {p.running} failed {p.failed} skipped {p.skipped} {eta}")

    result = sw.run_sweep(spec, out_dir, scheduler=args.scheduler, workers=args.workers,
                          threads=args.threads, progress=progress)
    if "bar" in bar:
        bar["bar"].close()
    print(f"summary tables: {', '.join(str(v) for v in result.files.values())}")
    if result.failed:
        print(f"{len(result.failed)} point(s) failed:")
        for pid, err in result.failed.items():
            print(f"  {pid}: {err}")
    try:
        from gpe.sweep_plots import plot_sweep

        fig = plot_sweep(result, "beta", path=Path(out_dir) / "phase_map.png")
        print(f"phase map: {Path(out_dir) / 'phase_map.png'}")
    except VorthermError as exc:
        print(f"no phase map: {exc}")
    if result.interrupted:
        print("interrupted: rerun the same command to continue")
        return 130
    return 0 if not result.failed else 1




# --------------------------------------------------------------------------- vortices
def _register_vortices(sub) -> None:
    p = _add(sub, "vortices", "re-detect vortices in a run file and export them as CSV (um)",
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
    p.set_defaults(handler=_cmd_vortices)


def _cmd_vortices(args) -> int:
    from gpe import pipeline

    frames = parse_frames(args.frames)
    table, events, csv_path = pipeline.redetect(args.run, threshold=args.threshold,
                                                region=args.region, frames=frames,
                                                csv_path=args.csv, store=args.store)
    n_frames = len(set(table["frame"].tolist())) if table.size else 0
    print(f"{table.size} vortices in {n_frames} frames with vortices; "
          f"{len(events)} annihilation/creation events")
    print(f"table written to {csv_path} (x, y in um about the grid centre)")
    if args.store:
        print(f"vortex table of {args.run} replaced")
    return 0


# --------------------------------------------------------------------------- plot
def _register_plot(sub) -> None:
    p = _add(sub, "plot", "figures from a run file: density, phase, vortices, energies, spectra")
    p.add_argument("run", type=Path, help="run file (.h5)")
    p.add_argument("--frames", default="-1", help="frames to draw, e.g. 0,30,-1 (default: the last)")
    p.add_argument("--movie", action="store_true", help="also write an animation (mp4 or GIF)")
    p.add_argument("-o", "--output", type=Path, help="folder for the figures (default: beside the run)")
    p.set_defaults(handler=_cmd_plot)


def _cmd_plot(args) -> int:
    from gpe import pipeline

    out_dir = args.output or args.run.with_name(args.run.stem + "_figures")
    written = pipeline.make_figures(args.run, out_dir, frames=parse_frames(args.frames),
                                    movie=args.movie)
    for path in written:
        print(f"figure: {path}")
    return 0


# --------------------------------------------------------------------------- demo
def _register_demo(sub) -> None:
    p = _add(sub, "demo", "run the demo scenario end to end and say where the outputs are",
             "Simulates runs/demo.toml (a scenario of our own: a 87Rb condensate in a disk "
             "stirred by a moving beam), detects the vortices, draws figures, measures the "
             "vortex-gas temperature and prints the verdict.")
    p.add_argument("-o", "--output", type=Path, default=Path("demo-output"),
                   help="folder for all outputs (default: ./demo-output)")
    p.add_argument("--threads", type=int, help="FFT threads (default: all cores)")
    p.set_defaults(handler=_cmd_demo)


def _cmd_demo(args) -> int:
    import argparse as _ap

    from gpe import pipeline
    from gpe.protocol import parse_protocol

    out = args.output
    out.mkdir(parents=True, exist_ok=True)
    source = Path(__file__).resolve().parent.parent / "runs" / "demo.toml"
    if not source.exists():
        raise VorthermError(f"the demo protocol {source} is missing; the demo runs from a source "
                            "checkout installed with `pip install -e .`")
    text = source.read_text()
    protocol_path = out / "demo.toml"
    protocol_path.write_text(text)
    protocol = parse_protocol(text, source=str(protocol_path))
    run_path = out / "demo.h5"
    print(f"1/4 simulating {protocol_path} -> {run_path}")
    resume = run_path.exists() and not pipeline.is_complete(run_path)
    if not pipeline.is_complete(run_path):
        if run_path.exists() and not resume:
            run_path.unlink()
        pipeline.simulate(protocol, run_path, resume=resume, progress=pipeline.terminal_progress_factory(),
                          threads=args.threads)
    print(pipeline.summary_text(run_path))
    print("2/4 figures")
    for path in pipeline.make_figures(run_path, out / "figures", frames=[0, -1], movie=False):
        print(f"  {path}")
    print("3/4 vortex table")
    _, _, csv_path = pipeline.redetect(run_path, csv_path=out / "demo_vortices.csv")
    print(f"  {csv_path}")
    print("4/4 temperature of the vortex gas")
    targs = _ap.Namespace(source=run_path, frames=None, effort="quick", csv=out / "demo_temperature.csv",
                          json=False, plot=True, disk_radius_um=None, box_um=None, core_um=None,
                          pixel_um=None, center=None, strict=False)
    _cmd_temperature(targs)
    print(f"\nall demo outputs are in {out.resolve()}")
    return 0


# --------------------------------------------------------------------------- describe
def _register_describe(sub) -> None:
    p = _add(sub, "describe", "list the observables recorded at every output time, with units")
    p.set_defaults(handler=_cmd_describe)


def _cmd_describe(args) -> int:
    from gpe import diagnostics

    print("observables stored in every run file (observables/<name>), simulation units:")
    print(diagnostics.describe())
    return 0


REGISTRY = [_register_init, _register_run, _register_vortices, _register_plot,
            _register_temperature, _register_compare, _register_sweep, _register_demo,
            _register_describe]
