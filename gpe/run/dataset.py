"""A run file as the data structures of a notebook: an ``xarray.Dataset`` and a
``pandas.DataFrame``.

* :func:`open_run`: psi, density and phase on (t, y, x), the static trap on (y, x), every
  observable on t; coordinates in simulation units and in SI (``x``/``x_um``, ``t``/``t_ms``);
  CF-style ``units`` attributes; the run file's metadata as attributes.
* :func:`vortex_table`: the stored vortex table with its columns in both unit systems; the SI
  columns are those of the CSV that ``vortherm vortices`` writes, computed by the same function
  (gpe.run.products.vortex_columns_si).

Both read the file once and return data in memory; nothing is written.

Units: simulation units (xi, hbar/mu, mu, n0) beside um and ms, each named by its attribute.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import xarray as xr

from gpe.errors import RunFileError
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
