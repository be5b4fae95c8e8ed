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
    p.add_argument("--rotating", action="store_true",
                   help="also fit the rotating ensemble exp[-beta (H - omega M)] (disk only; M = "
                        "sum s_i |u_i|^2 in units of R^2): omega (in E0 = rho kappa^2/(4 pi) per "
                        "R^2) and omega/N for every frame or shot and the ensemble, whether omega "
                        "is non-zero, and the mean-field radial profile (with --plot, a figure "
                        "<source>_meanfield.png); builds its own (beta, omega) tables")
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
    imaging_um = check_imaging_options(args)
    refuse_to_overwrite(temperature_outputs(args.source, args.csv, args.plot, args.rotating),
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
                systematics=not args.no_systematics, progress=dos_progress(),
                rotating=args.rotating)
        except VorthermError as exc:
            if args.window_ms is not None and "window" in str(exc):
                raise VorthermError(f"{_time_option(args)}: {exc}") from None
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
            systematics=not args.no_systematics, progress=dos_progress(),
            rotating=args.rotating, **kw)
    show_temperature(result, args.source, csv_path=args.csv, as_json=args.json, plot=args.plot,
                     force=args.force, rotating=args.rotating)
    return 0


def temperature_outputs(source: Path, csv_path: Path | None, plot: bool,
                        rotating: bool = False) -> list[tuple[Path, str]]:
    """The files ``temperature`` writes for ``source``, each with how to name it otherwise.

    Units: none.
    """
    outputs = [(csv_path or source.with_name(source.stem + "_temperature.csv"),
                "choose another table name with --csv")]
    if plot:
        outputs.append((source.with_name(source.stem + "_temperature.png"),
                        "leave out --plot (the figure is named after the source)"))
    if plot and rotating:
        outputs.append((source.with_name(source.stem + "_meanfield.png"),
                        "leave out --plot (the figure is named after the source)"))
    return outputs


def show_temperature(result: dict, source: Path, *, csv_path: Path | None = None,
                     as_json: bool = False, plot: bool = False, force: bool = False,
                     rotating: bool = False) -> None:
    """Write the table (and figure) of a thermometry result and print it (text or JSON).

    Existing outputs are refused unless ``force`` (see :func:`temperature_outputs`).

    Units: as in the result (beta in 1/E0, times in the protocol's display unit).
    """
    from gpe.figures import thermometry as thermo_figures
    from gpe.figures.style import save
    from gpe.run import report

    outputs = temperature_outputs(source, csv_path, plot, rotating)
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
        fig_path = save(thermo_figures.plot_temperature_series(result), outputs[1][0],
                        overwrite=True)   # refused above unless force
        print(f"figure written to {fig_path}")
    if plot and rotating:
        if "chi2" in (result["ensemble"].get("meanfield") or {}):
            fig_path = save(thermo_figures.plot_meanfield(result["ensemble"]), outputs[2][0],
                            overwrite=True)
            print(f"figure written to {fig_path}")
        else:
            print("no mean-field figure: " + str(result["ensemble"].get("omega_verdict", "")))




# --------------------------------------------------------------------------- compare
def register_compare(sub) -> None:
    p = add_command(sub, "compare", "simulated vs measured vortex statistics, side by side",
                    "Frames of one or more run files (e.g. seeds of one protocol) form the simulated "
                    "ensemble: by default the frames after the last beam has switched off, or the "
                    "frame nearest --time-ms, or every frame in --window-ms. The measured table "
                    "(CSV/HDF5) is the other side, in its own geometry and with its own core "
                    "radius. Prints simulation | measured | difference (95% interval) | p-values "
                    "for vortex numbers, energy per vortex, beta~N, D, C1, dipole/cluster/free "
                    "fractions and mean nearest-neighbour distance. Frames of one run are "
                    "correlated: the tests use each run's effective number of independent frames "
                    "(its autocorrelation time), and say when there are too few.")
    p.add_argument("runs", type=Path, nargs="+", help="run files (.h5)")
    p.add_argument("--measured", type=Path, required=True, help="measured vortex table (.csv/.h5)")
    p.add_argument("--time-ms", type=float,
                   help="compare at the frame nearest this time, ms (default: the frames after "
                        "the last beam has switched off)")
    p.add_argument("--window-ms", type=float, nargs=2, metavar=("T0", "T1"),
                   help="use every frame in this window, ms")
    p.add_argument("--pixel-um", type=float, help="measured table in pixels: pixel size in um")
    p.add_argument("--center", type=float, nargs=2, metavar=("X", "Y"), help="trap centre in pixels")
    p.add_argument("--core-um", type=float,
                   help="measured table: vortex core radius a in um (default: the geometry "
                        "file's, or 2%% of the domain size)")
    p.add_argument("--strict", action="store_true",
                   help="stop at the first unusable row of the measured table instead of listing them")
    p.add_argument("--blur-um", type=float,
                   help="imaging model: rms position error, um (overrides [imaging] of the "
                        "measured table's geometry file); applied to the simulated frames and "
                        "undone in the measured beta")
    p.add_argument("--resolution-um", type=float,
                   help="imaging model: vortices closer than this are not resolved (um)")
    p.add_argument("--edge-loss-um", type=float,
                   help="imaging model: vortices this close to the wall are lost (um)")
    p.add_argument("--sign-error", type=float,
                   help="imaging model: probability of a wrong sign, 0..0.5")
    p.add_argument("--common", choices=("beta_n", "beta"), default="beta_n",
                   help="what shots of different vortex numbers share: beta~N (default) or beta~")
    p.add_argument("--seed", type=int, default=0,
                   help="seed of the imaging model applied to the simulated frames")
    p.add_argument("--effort", choices=("quick", "standard", "thorough"), default="quick")
    p.add_argument("-o", "--output", type=Path, help="stem of the CSV/JSON/PNG outputs")
    p.add_argument("--json", action="store_true", help="print the table as JSON on stdout")
    p.add_argument("--force", action="store_true",
                   help="overwrite existing CSV/JSON/PNG outputs of an earlier comparison")
    p.set_defaults(handler=_cmd_compare)


def check_imaging_options(args) -> dict:
    """The imaging options given (keys of thermo.data.geometry.IMAGING_KEYS), each checked;
    a value out of range is a VorthermError naming the option (nothing is written)."""
    out = {}
    for name, key in IMAGING_OPTIONS:
        value = getattr(args, name)
        if value is None:
            continue
        ok = 0.0 <= value < 0.5 if name == "sign_error" else value >= 0.0
        if not ok:
            accepted = "a probability 0 <= p < 0.5" if name == "sign_error" else "a length >= 0 um"
            flag = "--" + name.replace("_", "-")
            raise VorthermError(f"{flag} {value:g}: accepted is {accepted}; nothing was written")
        out[key] = value
    return out


def _time_option(args) -> str:
    if args.window_ms is not None:
        return f"--window-ms {args.window_ms[0]:g} {args.window_ms[1]:g}"
    return f"--time-ms {args.time_ms:g}" if args.time_ms is not None else ""


def _cmd_compare(args) -> int:
    import numpy as np

    from gpe.figures import thermometry as thermo_figures
    from gpe.figures.style import save
    from gpe.run import thermometry
    from gpe.run.frames import RunSeries
    from gpe.run.jsontext import dumps_strict
    from thermo.data import compare as cmp
    from thermo.data.degrade import degrade_many
    from thermo.data.measured import read_measured

    if args.time_ms is not None and args.window_ms is not None:
        raise VorthermError(f"--time-ms {args.time_ms:g} and --window-ms both given: give one "
                            "time or one window")
    imaging_um = check_imaging_options(args)
    stem = args.output or args.measured.with_name(args.measured.stem + "_vs_simulation")
    how = "choose another stem with -o/--output"
    refuse_to_overwrite([(stem.with_suffix(s), how) for s in (".csv", ".json", ".png")],
                        inputs=[*args.runs, args.measured], force=args.force)
    runs, vd, protocol = [], None, None
    try:
        for run_path in args.runs:
            series = RunSeries.read(run_path)
            frames = series.frames(at_time=args.time_ms, window=args.window_ms, time_unit="ms")
            vd, gas = series.gas(frames)
            protocol = series.protocol
            runs.append([(gas[f].positions, gas[f].signs) for f in frames])
        sim_beta = thermometry.pooled_ensemble(
            args.runs, time=args.time_ms, window=args.window_ms, time_unit="ms",
            common=args.common, effort=args.effort)
    except VorthermError as exc:
        option = _time_option(args)
        raise VorthermError(f"{option}: {exc}" if option else str(exc)) from None
    # The measured table keeps its own geometry (TOML beside it, or the options) and its own
    # core radius: each side is in scaled units of its own domain, of the same shape.
    measured = read_measured(args.measured, pixel_um=args.pixel_um, center_px=args.center,
                             core_um=args.core_um, strict=args.strict,
                             imaging_um=imaging_um or None)
    model = measured.geometry.imaging_model()
    meas_beta = thermometry.ensemble_record(
        measured.configurations, measured.domain, measured.core_radius, common=args.common,
        imaging=model, effort=args.effort)
    meas_beta["frames"] = len(measured.configurations)
    sim_side = cmp.Side.of_runs(runs, vd.domain, "simulation")
    if model is not None:   # the simulated frames as the camera would see them
        rng = np.random.default_rng(args.seed)
        sim_side = cmp.Side(tuple(degrade_many(sim_side.configurations, vd.domain, model, rng,
                                               core_radius=vd.core_radius)),
                            vd.domain, sim_side.series)
    meas_side = cmp.Side.of_shots(measured.configurations, measured.domain, "measured")
    try:
        comparison = cmp.compare_ensembles(sim_side, meas_side, beta=(sim_beta, meas_beta))
    except cmp.CompareError as exc:
        raise VorthermError(f"{args.measured}: {exc}") from None
    if model is None:
        comparison = _with_note(comparison, "no imaging model: the measured beta~N describes the "
                                "configurations as imaged; give [imaging] in the geometry file "
                                "or --blur-um/--sign-error")
    csv_path = cmp.write_csv(comparison, stem.with_suffix(".csv"))
    json_path = cmp.write_json(comparison, stem.with_suffix(".json"))
    scale_um = (vd.scale * protocol.units.length_m * 1e6, measured.geometry.length_scale_um)
    fig = thermo_figures.plot_comparison(comparison, length_scale_um=scale_um)
    fig_path = save(fig, stem.with_suffix(".png"), overwrite=True)
    if args.json:
        print(dumps_strict(cmp.comparison_to_dict(comparison), indent=1))
    else:
        print(_format_comparison(comparison))
        print(f"written: {csv_path}, {json_path}, {fig_path}")
    return 0


def _with_note(comparison, note: str):
    from dataclasses import replace

    return replace(comparison, notes=(*comparison.notes, note))


def _format_comparison(comparison) -> str:
    def num(v, width: int = 10) -> str:
        return f"{v:{width}.4g}" if v == v else f"{'-':>{width}}"

    def unit(text: str) -> str:
        return "E0" if text.startswith("E0") else text[:11]

    head = (f"{'quantity':<18} {'unit':<11} {comparison.labels[0]:>10} {comparison.labels[1]:>10} "
            f"{'difference':>10} {'95% interval':>23} {'KS p':>9} {'mean p':>9}  "
            f"shots(effective)")
    lines = [head, "-" * len(head)]
    bounds = {}
    if comparison.beta is not None:
        bounds = {side: {"upper": "<", "lower": ">"}.get(rec.get("bound"), "")
                  for side, rec in zip(("simulation", "measured"), comparison.beta)}

    def value(r, side: str) -> str:
        v = getattr(r, side)
        mark = bounds.get(side, "") if r.quantity == "beta_n" else ""
        return f"{mark + format(v, '.4g'):>10}" if mark and v == v else num(v)

    for r in comparison.rows:
        lines.append(f"{r.quantity:<18} {unit(r.unit):<11} {value(r, 'simulation')} "
                     f"{value(r, 'measured')} "
                     f"{num(r.difference)} [{num(r.ci95_low)}, {num(r.ci95_high)}] "
                     f"{num(r.p_ks, 9)} {num(r.p_mean, 9)}  "
                     f"{r.n_simulation}({r.n_eff_simulation:.3g}) / "
                     f"{r.n_measured}({r.n_eff_measured:.3g})")
    lines.append("E0 = rho kappa^2/(4 pi); lengths in units of each side's domain size (disk "
                 "radius); p-values on independent units (runs' frames as correlated series)")
    lines.extend(f"note: {n}" for n in comparison.notes)
    return "\n".join(lines)


