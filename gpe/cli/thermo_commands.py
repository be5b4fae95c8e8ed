"""Subcommands of the thermometry side: ``temperature`` and ``compare``.

Thin handlers: they parse options, call gpe.run.thermometry (the thermometry of runs and tables)
and thermo, and print or write the results. The numerics are imported inside the handlers, for
the reason given in gpe/cli/commands.py (a quick ``--help``). Registered in gpe.cli.commands.REGISTRY.
"""

from __future__ import annotations

import json
from pathlib import Path

from gpe.cli.args import add_command, parse_frames, refuse_to_overwrite
from gpe.errors import VorthermError

#: Options of ``temperature`` that only a measured table uses (a run file knows its own trap).
TABLE_OPTIONS = (("disk_radius_um", "--disk-radius-um"), ("box_um", "--box-um"),
                 ("core_um", "--core-um"), ("pixel_um", "--pixel-um"), ("center", "--center"),
                 ("strict", "--strict"), ("blur_um", "--blur-um"), ("sign_error", "--sign-error"),
                 ("resolution_um", "--resolution-um"), ("edge_loss_um", "--edge-loss-um"))
#: imaging options of ``temperature`` -> keys of thermo.data.geometry.IMAGING_KEYS
IMAGING_OPTIONS = (("blur_um", "blur_um"), ("sign_error", "sign_error"),
                   ("resolution_um", "resolution_um"), ("edge_loss_um", "edge_loss_um"))


# --------------------------------------------------------------------------- temperature
def register_temperature(sub) -> None:
    p = add_command(sub, "temperature", "inverse temperature beta of vortex configurations (both signs)",
                    "beta per output time of a run file, or per shot and for the ensemble of a measured "
                    "table (CSV/HDF5: shot, x, y, sign; positions in um about the trap centre, or "
                    "pixels with --pixel-um and --center). beta is in units of 1/E0 with "
                    "E0 = rho kappa^2/(4 pi); beta*N compares across vortex numbers.")
    p.add_argument("source", type=Path, help="run file (.h5 from `vortherm run`) or measured table (.csv/.h5)")
    p.add_argument("more_runs", type=Path, nargs="*", metavar="RUN",
                   help="further run files (e.g. the seeds of one protocol): their frames are "
                        "listed together and their ensembles pooled as independent series")
    p.add_argument("--disk-radius-um", type=float, help="measured table: disk radius in um")
    p.add_argument("--box-um", type=float, nargs=2, metavar=("LX", "LY"),
                   help="measured table: box sides in um")
    p.add_argument("--core-um", type=float,
                   help="measured table: vortex core radius a in um (default: 2%% of the domain "
                        "size); vortices within a of the wall, and both of any pair closer than "
                        "2a (the minimum separation), are left out and counted")
    p.add_argument("--pixel-um", type=float, help="measured table in pixels: pixel size in um")
    p.add_argument("--center", type=float, nargs=2, metavar=("X", "Y"),
                   help="measured table in pixels: trap centre in pixels")
    p.add_argument("--strict", action="store_true", help="stop at the first unusable row")
    p.add_argument("--frames", help="run file: frames to use, e.g. 10:40 or 5,9,-1 (default: all)")
    p.add_argument("--window-ms", type=float, nargs=2, metavar=("T0", "T1"),
                   help="run file: the ensemble is every frame in this window, ms (default: the "
                        "frames after the last beam has switched off)")
    p.add_argument("--common", choices=("beta_n", "beta"), default="beta_n",
                   help="what shots of different vortex numbers share: beta~N (default) or beta~")
    p.add_argument("--blur-um", type=float,
                   help="measured table, imaging model: rms position error, um (overrides "
                        "[imaging] of the geometry file)")
    p.add_argument("--sign-error", type=float,
                   help="measured table, imaging model: probability of a wrong sign, 0..0.5")
    p.add_argument("--resolution-um", type=float,
                   help="measured table, imaging model: closer pairs are lost or merged, um")
    p.add_argument("--edge-loss-um", type=float,
                   help="measured table, imaging model: vortices this close to the wall are missed, um")
    p.add_argument("--no-systematics", action="store_true",
                   help="skip the systematics budget (core radius, wall, wall cut varied)")
    p.add_argument("--effort", choices=("quick", "standard", "thorough"), default="quick",
                   help="Monte Carlo effort of the density of states (cached on disk per N+, N-)")
    p.add_argument("--csv", type=Path, help="where to write the table (default: beside the source)")
    p.add_argument("--json", action="store_true", help="print the results as JSON on stdout")
    p.add_argument("--plot", action="store_true", help="draw beta(t) and clustering observables")
    p.add_argument("--force", action="store_true",
                   help="overwrite an existing table (and figure) of an earlier call")
    p.set_defaults(handler=_cmd_temperature)


def _cmd_temperature(args) -> int:
    from gpe.cli.progress import dos_progress
    from gpe.run import reading, thermometry
    from gpe.run.runfile import RunFile

    if not args.source.is_file():
        raise VorthermError(f"{args.source}: no such file; give a run file (.h5) or a measured "
                            "table (.csv)")
    if args.disk_radius_um is not None and args.box_um is not None:
        raise VorthermError(f"--disk-radius-um {args.disk_radius_um:g} and --box-um "
                            f"{args.box_um[0]:g} {args.box_um[1]:g} both given: a measured table "
                            "has one geometry; give --disk-radius-um R for a disk or --box-um LX "
                            "LY for a box, not both")
    run_file = reading.is_run_file(args.source)   # by content; refuses a locked/truncated HDF5
    for extra in args.more_runs:
        if not (extra.is_file() and reading.is_run_file(extra)) or not run_file:
            raise VorthermError(f"{extra}: several sources must all be run files (.h5 from "
                                "`vortherm run`); a measured table is given alone")
    if run_file:
        given = [flag for name, flag in TABLE_OPTIONS
                 if getattr(args, name) is not None and getattr(args, name) is not False]
        if given:
            raise VorthermError(f"{args.source} is a run file, whose trap fixes the geometry; "
                                f"{', '.join(given)} apply only to measured tables: leave "
                                f"{'them' if len(given) > 1 else 'it'} out")
    elif args.frames is not None or args.window_ms is not None:
        flag = "--frames" if args.frames is not None else "--window-ms"
        raise VorthermError(f"{flag}: {args.source} is a measured table (not a run file), whose "
                            f"shots are all used; leave out {flag}")
    imaging_um = {key: getattr(args, name) for name, key in IMAGING_OPTIONS
                  if getattr(args, name) is not None}
    for name, flag in TABLE_OPTIONS:
        value = getattr(args, name)
        if name in dict(IMAGING_OPTIONS) and value is not None:
            limit_ok = 0.0 <= value < 0.5 if name == "sign_error" else value >= 0.0
            if not limit_ok:
                accepted = "a probability 0 <= p < 0.5" if name == "sign_error" else "a length >= 0 um"
                raise VorthermError(f"{flag} {value:g}: accepted is {accepted}; nothing was written")
    refuse_to_overwrite(temperature_outputs(args.source, args.csv, args.plot),
                        inputs=[args.source, *args.more_runs], force=args.force)
    if run_file:
        if args.window_ms is not None:
            with RunFile.open(args.source, "r") as run:
                protocol = reading.protocol_of(run)
            if protocol.unit_system != "SI":
                raise VorthermError(f"--window-ms: {args.source} is a run in healing units "
                                    "(hbar/mu), which have no millisecond scale; choose the "
                                    "frames with --frames instead")
        try:
            result = thermometry.temperature_of_runs(
                [args.source, *args.more_runs], frames=parse_frames(args.frames),
                window=args.window_ms, time_unit="ms", common=args.common, effort=args.effort,
                systematics=not args.no_systematics, progress=dos_progress())
        except VorthermError as exc:
            if args.window_ms is not None and "window" in str(exc):
                raise VorthermError(f"--window-ms {args.window_ms[0]:g} {args.window_ms[1]:g}: "
                                    f"{exc}") from None
            raise
    else:
        shape, kw = None, {}
        if args.disk_radius_um is not None:
            shape, kw["radius_um"] = "disk", args.disk_radius_um
        if args.box_um is not None:
            shape, kw["width_um"], kw["height_um"] = "box", args.box_um[0], args.box_um[1]
        result = thermometry.temperature_of_table(
            args.source, shape=shape, core_um=args.core_um, pixel_um=args.pixel_um,
            center_px=args.center, strict=args.strict, effort=args.effort,
            imaging_um=imaging_um or None, common=args.common,
            systematics=not args.no_systematics, progress=dos_progress(), **kw)
    show_temperature(result, args.source, csv_path=args.csv, as_json=args.json, plot=args.plot,
                     force=args.force)
    return 0


def temperature_outputs(source: Path, csv_path: Path | None, plot: bool) -> list[tuple[Path, str]]:
    """The files ``temperature`` writes for ``source``, each with how to name it otherwise.

    Units: none.
    """
    outputs = [(csv_path or source.with_name(source.stem + "_temperature.csv"),
                "choose another table name with --csv")]
    if plot:
        outputs.append((source.with_name(source.stem + "_temperature.png"),
                        "leave out --plot (the figure is named after the source)"))
    return outputs


def show_temperature(result: dict, source: Path, *, csv_path: Path | None = None,
                     as_json: bool = False, plot: bool = False, force: bool = False) -> None:
    """Write the table (and figure) of a thermometry result and print it (text or JSON).

    Existing outputs are refused unless ``force`` (see :func:`temperature_outputs`).

    Units: as in the result (beta in 1/E0, times in the protocol's display unit).
    """
    from gpe.figures import thermometry as thermo_figures
    from gpe.run import report

    outputs = temperature_outputs(source, csv_path, plot)
    refuse_to_overwrite(outputs, inputs=[source], force=force)
    csv_path = outputs[0][0]
    report.write_records_csv(csv_path, result["records"], result["time_key"],
                             result.get("time_unit", ""))
    if as_json:
        print(json.dumps(report.json_report(result), indent=1, allow_nan=False))
    else:
        print(report.text_report(result))
        print(f"table written to {csv_path}")
    if plot:
        fig_path = outputs[1][0]
        thermo_figures.plot_temperature_series(result, fig_path)
        print(f"figure written to {fig_path}")




# --------------------------------------------------------------------------- compare
def register_compare(sub) -> None:
    p = add_command(sub, "compare", "simulated vs measured vortex statistics, side by side",
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
    p.add_argument("--force", action="store_true",
                   help="overwrite existing CSV/JSON/PNG outputs of an earlier comparison")
    p.set_defaults(handler=_cmd_compare)


def _cmd_compare(args) -> int:
    import numpy as np

    from gpe.figures import thermometry as thermo_figures
    from gpe.run import thermometry
    from thermo.data import compare as cmp
    from thermo.data.degrade import ImagingModel, degrade_many
    from thermo.data.measured import read_measured

    stem = args.output or args.measured.with_name(args.measured.stem + "_vs_simulation")
    how = "choose another stem with -o/--output"
    refuse_to_overwrite([(stem.with_suffix(s), how) for s in (".csv", ".json", ".png")],
                        inputs=[*args.runs, args.measured], force=args.force)
    sim_configs, vd, protocol = [], None, None
    for run_path in args.runs:
        vd, configs, protocol = thermometry.run_ensemble(
            run_path, at_time=args.time_ms, window=args.window_ms, default="last", time_unit="ms")
        sim_configs.extend(configs)
    scale_um = vd.scale * protocol.units.length_m * 1e6
    # The measured table keeps its own geometry (TOML beside it, or its options): both sides
    # are compared in scaled units of their own domain, which must be of the same shape.
    measured = read_measured(args.measured, pixel_um=args.pixel_um, center_px=args.center,
                             strict=args.strict)
    if measured.domain.kind != vd.domain.kind:
        raise VorthermError(f"{args.measured}: the measured domain is a {measured.domain.kind}, "
                            f"the simulation's a {vd.domain.kind}; compare needs the same shape")
    # the same shape must also have the same proportions (a box's aspect), within 2%
    sizes = [(a, b) for a, b in zip(measured.domain.key()[1:], vd.domain.key()[1:])]
    if any(abs(a - b) > 0.02 * abs(b) for a, b in sizes):
        raise VorthermError(f"{args.measured}: the measured {measured.domain.kind} "
                            f"{measured.domain.key()[1:]} differs from the simulation's "
                            f"{vd.domain.key()[1:]} by more than 2%; compare needs the same shape")
    core = min(vd.core_radius, measured.core_radius or vd.core_radius)
    model = ImagingModel(blur=args.blur_um / scale_um, resolution=args.resolution_um / scale_um,
                         edge_loss=args.edge_loss_um / scale_um, sign_flip=args.sign_error)
    sim_configs = degrade_many(sim_configs, vd.domain, model, np.random.default_rng(args.seed),
                               core_radius=core)
    comparison = cmp.compare_ensembles(sim_configs, measured.configurations, vd.domain,
                                       core, seed=args.seed,
                                       beta_options={"settings": thermometry.dos_settings(args.effort)})
    csv_path = cmp.write_csv(comparison, stem.with_suffix(".csv"))
    json_path = cmp.write_json(comparison, stem.with_suffix(".json"))
    fig_path = stem.with_suffix(".png")
    thermo_figures.plot_comparison(comparison, fig_path, length_scale_um=scale_um)
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


