"""A run file as the data structures of a notebook: an ``xarray.Dataset`` and a
``pandas.DataFrame``.

* :func:`open_run`: psi, density and phase on (t, y, x), the static trap on (y, x), every
  observable on t; coordinates in simulation units and in SI (``x``/``x_um``, ``t``/``t_ms``);
  CF-style ``units`` attributes; the run file's metadata as attributes.
* :func:`vortex_table`: the stored vortex table with its columns in both unit systems; the SI
  columns are those of the CSV that ``vortherm vortices`` writes, computed by the same function
  (gpe.run.products.vortex_columns_si).
* :func:`temperature_frames` and :func:`ensemble_frame`: a thermometry result
  (gpe.run.thermometry) as a table of frames or shots -- the columns, units and numbers of the
  CSV that ``vortherm temperature`` writes (gpe.run.report) -- and as a one-row table of the
  ensemble with its systematics budget.

They read a file once (or a result already in memory) and return data in memory; nothing is
written.

Units: simulation units (xi, hbar/mu, mu, n0) beside um and ms, each named by its attribute.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import xarray as xr

from gpe.errors import RunFileError, VorthermError
from gpe.run import report
from gpe.run.products import VORTEX_CSV_COLUMNS, vortex_columns_si
from gpe.run.reading import protocol_of, select_frames
from gpe.run.runfile import VORTEX_UNITS, RunFile

#: Root attributes of the run file carried over to the Dataset's attributes.
_RUN_ATTRS = ("format", "format_version", "package_version", "protocol_text", "protocol_source")


def open_run(path, frames=None) -> xr.Dataset:
    """The run file ``path`` as an :class:`xarray.Dataset`.

    Parameters
    ----------
    path : the run file (.h5).
    frames : which snapshots to load: None (all), a slice, or a list of frame indices
        (negative count from the end); the observables follow the same frames.

    Returns
    -------
    xarray.Dataset with data variables ``psi`` (complex, t, y, x), ``density`` = |psi|^2,
    ``phase`` = arg psi, ``potential`` (the static trap, y, x) and one variable per observable
    on t; coordinates ``t`` (hbar/mu), ``t_ms``, ``frame`` on t, ``x``, ``y`` (xi), ``x_um``,
    ``y_um``; attributes: the format, the package version, the protocol (``protocol_text``, the
    resolved ``protocol_json``), ``complete`` (1 once the run reached its end, else 0) and the SI
    value of each simulation unit (``unit_length_m``, ``unit_time_s``, ...).

    Raises
    ------
    RunFileError
        The file is not a readable run file or holds no frames.

    Units
    -----
    psi in sqrt(n0), density in n0, phase in rad, potential in mu; the observables' own units
    (``units`` attribute of each variable).
    """
    with RunFile.open(path, "r") as run:
        protocol = protocol_of(run)
        times = np.asarray(run.frame_times())
        chosen = select_frames(path, frames, len(times))
        psi = np.stack([run.psi(i) for i in chosen])
        observables = {name: (values[chosen], run.observable_unit(name))
                       for name, values in run.read_observables().items()}
        try:
            potential = run.static_potential()
        except RunFileError:      # a file written without its trap (RunFile.create allows it)
            potential = None
        attrs = {k: run.attrs[k] for k in _RUN_ATTRS if k in run.attrs}
        attrs["protocol_json"] = run.protocol_json()
        attrs["protocol_overrides"] = json.dumps(list(run.protocol_overrides()))
        attrs["complete"] = int(run.is_complete())
        attrs.update({f"unit_{k}": v for k, v in run.units().items()})
    units = protocol.units
    grid = protocol.grid
    um = units.length_m * 1e6
    t = times[chosen]
    coords = {
        "t": ("t", t, {"units": "hbar/mu", "long_name": "time"}),
        "t_ms": ("t", np.asarray(units.time_to_ms(t)), {"units": "ms", "long_name": "time"}),
        "frame": ("t", np.asarray(chosen, np.int64), {"units": "1",
                                                      "long_name": "frame in the run file"}),
        "x": ("x", np.asarray(grid.x), {"units": "xi", "long_name": "x about the grid centre"}),
        "y": ("y", np.asarray(grid.y), {"units": "xi", "long_name": "y about the grid centre"}),
        "x_um": ("x", np.asarray(grid.x) * um, {"units": "um",
                                                "long_name": "x about the grid centre"}),
        "y_um": ("y", np.asarray(grid.y) * um, {"units": "um",
                                                "long_name": "y about the grid centre"}),
    }
    data = {
        "psi": (("t", "y", "x"), psi, {"units": "sqrt(n0)", "long_name": "wavefunction"}),
        "density": (("t", "y", "x"), np.abs(psi) ** 2,
                    {"units": "n0", "long_name": "density |psi|^2"}),
        "phase": (("t", "y", "x"), np.angle(psi), {"units": "rad", "long_name": "phase of psi"}),
    }
    if potential is not None:
        data["potential"] = (("y", "x"), potential, {"units": "mu",
                                                     "long_name": "static trap potential"})
    for name, (values, unit) in observables.items():
        data[name] = ("t", values, {"units": unit})
    return xr.Dataset(data, coords=coords, attrs=attrs)


def vortex_table(path) -> pd.DataFrame:
    """The vortex table stored in the run file ``path`` as a :class:`pandas.DataFrame`.

    One row per detected vortex, with columns ``frame``, ``t`` (hbar/mu), ``t_ms``, ``x``,
    ``y`` (xi), ``x_um``, ``y_um`` (about the grid centre), ``sign`` (+1 counter-clockwise) and
    ``track`` (-1 when not linked). ``DataFrame.attrs["units"]`` maps every column to its
    unit; the SI columns equal those of ``vortherm vortices``' CSV for the same table.

    Units
    -----
    As listed in ``attrs["units"]``.
    """
    with RunFile.open(path, "r") as run:
        protocol = protocol_of(run)
        table = run.read_vortices()
    si = vortex_columns_si(table, protocol)
    frame = pd.DataFrame({
        "frame": si["frame"], "t": np.asarray(table["t"], float), "t_ms": si["t_ms"],
        "x": np.asarray(table["x"], float), "y": np.asarray(table["y"], float),
        "x_um": si["x_um"], "y_um": si["y_um"], "sign": si["sign"], "track": si["track"]})
    frame.attrs["units"] = {**VORTEX_UNITS, **{n: u for n, u, _ in VORTEX_CSV_COLUMNS}}
    return frame


#: Units of the ensemble columns that the per-frame table (gpe.run.report.CSV_UNITS) lacks;
#: ``window_lo``/``window_hi`` are in the result's time unit.
_ENSEMBLE_UNITS = {"beta_n_ci68_lo": "1", "beta_n_ci68_hi": "1", "stderr": "1/E0",
                   "regime": "", "not_in_equilibrium": "", "common": "", "groups": "",
                   "n_shots": "1", "n_effective": "1", "frames": "1", "runs": "1",
                   "tau_frames": "frames", "left_out_small": "1", "core_radius": "domain size",
                   "core_given": "", "imaging_note": ""}
#: Columns of the ensemble row before its systematics, in order (those of a measured table's
#: ensemble after ``window_*``: ``core_radius``, ``core_given``, ``imaging_note``).
_ENSEMBLE_COLUMNS = (
    "n_plus", "n_minus", "energy_per_vortex", "beta", "beta_ci68_lo", "beta_ci68_hi",
    "beta_ci95_lo", "beta_ci95_hi", "beta_n", "beta_n_ci68_lo", "beta_n_ci68_hi",
    "beta_n_ci95_lo", "beta_n_ci95_hi", "bound", "stderr", "dos_error", "reach",
    "temperature_sign", "prob_negative", "regime", "not_in_equilibrium", "common", "groups",
    "n_shots", "n_effective", "frames", "runs", "tau_frames", "left_out_small", "left_out_wall",
    "left_out_pairs", "dipole_moment", "c1", "dipole_fraction", "cluster_fraction",
    "free_fraction", "verdict")


def _result_part(result, key: str):
    if not isinstance(result, dict) or key not in result:
        raise VorthermError(f"thermometry result: no {key!r} key; pass what "
                            "gpe.run.thermometry.temperature_of_run, temperature_of_runs or "
                            "temperature_of_table returns")
    return result[key]


def _attrs(result: dict, units: dict) -> dict:
    return {"units": units, "source": result.get("source", ""),
            "time_unit": result.get("time_unit", ""), "verdict": result.get("onset", "")}


def temperature_frames(result: dict) -> pd.DataFrame:
    """The per-frame (or per-shot) temperatures of a thermometry result as a DataFrame.

    Parameters
    ----------
    result : what gpe.run.thermometry.temperature_of_run, temperature_of_runs or
        temperature_of_table returns.

    Returns
    -------
    pandas.DataFrame with one row per frame (or shot) and the columns of the CSV that
    ``vortherm temperature`` writes, named as there without the unit brackets: ``run`` (several
    runs only), ``t`` and ``frame`` (runs) or ``shot`` (measured tables), ``n_plus``,
    ``n_minus``, ``energy_per_vortex``, ``beta`` with ``beta_ci68_lo``/``_hi`` and
    ``beta_ci95_lo``/``_hi``, ``beta_n`` with ``beta_n_ci95_lo``/``_hi``, ``bound`` ("upper":
    beta~ N < value, "lower": > value, "" for a measurement), ``dos_error``, ``reach``,
    ``temperature_sign``, ``prob_negative``, the structure observables, the vortices left out
    and ``verdict``. Undefined numbers (a frame with fewer than two vortices) are NaN, the open
    side of a bound's interval is -inf or inf. ``attrs``: ``units`` (column -> unit, the CSV's
    table gpe.run.report.CSV_UNITS), ``source``, ``time_unit`` and ``verdict`` (the onset
    statement).

    Raises
    ------
    VorthermError
        ``result`` is not a thermometry result (the missing key is named).

    Units
    -----
    As in ``attrs["units"]``: beta in 1/E0 with E0 = rho kappa^2/(4 pi), beta~ N and
    probabilities dimensionless, ``t`` in the protocol's display unit (ms or hbar/mu).
    """
    records = _result_part(result, "records")
    columns = report.record_columns(records, _result_part(result, "time_key"),
                                    result.get("time_unit", ""))
    rows = [report.flat_record(rec) for rec in records]
    frame = pd.DataFrame({name: [row.get(name, np.nan) for row in rows] for name, _ in columns},
                         columns=[name for name, _ in columns])
    frame.attrs.update(_attrs(result, dict(columns)))
    return frame


def _pair(values, n: int = 2) -> list:
    values = list(values) if isinstance(values, (list, tuple, np.ndarray)) else []
    return values if len(values) == n else [np.nan] * n


def ensemble_frame(result: dict) -> pd.DataFrame:
    """The ensemble estimate of a thermometry result as a one-row DataFrame.

    Parameters
    ----------
    result : what gpe.run.thermometry.temperature_of_run, temperature_of_runs or
        temperature_of_table returns.

    Returns
    -------
    pandas.DataFrame with one row: ``window_lo``/``window_hi`` (runs: the first and last time
    of the ensemble), the per-frame table's quantities for the ensemble (``n_plus``/``n_minus``
    are the mean vortex numbers for runs), ``beta_n_ci68_lo``/``_hi``, ``stderr``, ``regime``,
    ``not_in_equilibrium``, ``common``, ``groups`` (as in the text report: "9+9 x1, 10+10
    x17"), ``n_shots``, ``n_effective``, ``frames``, ``runs``, ``tau_frames`` (the
    autocorrelation time of each run, "; "-separated), ``left_out_small``, the systematics
    budget (``sys_<source>_lo``/``_hi`` per source and ``sys_total_lo``/``_hi``: shifts of
    beta~ N) and ``verdict``; measured tables add ``core_radius``, ``core_given`` and
    ``imaging_note``. ``attrs`` as for :func:`temperature_frames`. The numbers are those of the
    ``ensemble`` of ``vortherm temperature --json``.

    Raises
    ------
    VorthermError
        ``result`` is not a thermometry result (the missing key is named).

    Units
    -----
    As in ``attrs["units"]``: beta in 1/E0, beta~ N and its shifts dimensionless, the window in
    the protocol's display unit, ``tau_frames`` in frames.
    """
    ens = _result_part(result, "ensemble")
    units = {**report.CSV_UNITS, **_ENSEMBLE_UNITS}
    row = {}
    if "window" in ens:
        row["window_lo"], row["window_hi"] = _pair(ens["window"])
        units["window_lo"] = units["window_hi"] = result.get("time_unit", "")
    flat = dict(ens)
    for key in ("beta_ci68", "beta_ci95", "beta_n_ci68", "beta_n_ci95"):
        flat[f"{key}_lo"], flat[f"{key}_hi"] = _pair(ens.get(key))
    flat["bound"] = ens.get("bound") or ""
    flat["groups"] = report.groups_text(ens.get("groups", []))
    flat["tau_frames"] = "; ".join(repr(float(t)) for t in ens.get("tau_frames", []))
    for name in _ENSEMBLE_COLUMNS[:-1]:
        row[name] = flat.get(name, np.nan)
    if result.get("kind") == "measured":
        for name in ("core_radius", "core_given", "imaging_note"):
            row[name] = flat.get(name, "" if name == "imaging_note" else np.nan)
    for source, item in (ens.get("systematics") or {}).items():
        lo, hi = _pair(item if source == "total" else item.get("shift"))
        row[f"sys_{source}_lo"], row[f"sys_{source}_hi"] = lo, hi
        units[f"sys_{source}_lo"] = units[f"sys_{source}_hi"] = "1"
    row["verdict"] = ens.get("verdict", "")
    frame = pd.DataFrame([row], columns=list(row))
    frame.attrs.update(_attrs(result, {name: units.get(name, "") for name in row}))
    return frame
