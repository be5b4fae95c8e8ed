"""A run file as an xarray Dataset and its vortices as a DataFrame, checked against the run file
itself and against what the command line writes for the same protocol."""

import tomllib

import numpy as np
import pandas as pd
import pytest
from tiny_protocol import TINY

from gpe.cli.main import main
from gpe.errors import RunFileError
from gpe.run.dataset import open_run, vortex_table
from gpe.run.runfile import RunFile
from gpe.run.simulate import simulate
from gpe.setup.protocol import protocol_from_dict


def test_open_run_gives_fields_coordinates_in_both_units_and_observables(tiny_run):
    ds = open_run(tiny_run)
    with RunFile.open(tiny_run) as run:
        times, observables = run.frame_times(), run.read_observables()
        psi_last = run.psi(-1)
        length_m, time_s = run.units()["length_m"], run.units()["time_s"]
        grid = run.grid
    assert ds["psi"].dims == ds["density"].dims == ds["phase"].dims == ("t", "y", "x")
    assert ds["potential"].dims == ("y", "x")
    assert ds.sizes == {"t": len(times), "y": grid.ny, "x": grid.nx}
    np.testing.assert_array_equal(ds["psi"].values[-1], psi_last)
    # [exact] density = |psi|^2, phase = arg psi
    np.testing.assert_allclose(ds["density"], np.abs(ds["psi"]) ** 2, rtol=1e-12)
    np.testing.assert_allclose(np.exp(1j * ds["phase"]), ds["psi"] / np.abs(ds["psi"]), atol=1e-6)
    # [definition of the units] um and ms from the SI factors the run file stores
    np.testing.assert_allclose(ds["x_um"], grid.x * length_m * 1e6, rtol=1e-12)
    np.testing.assert_allclose(ds["y_um"], grid.y * length_m * 1e6, rtol=1e-12)
    np.testing.assert_allclose(ds["t_ms"], times * time_s * 1e3, rtol=1e-12)
    assert ds["x_um"].dims == ("x",) and ds["t_ms"].dims == ("t",)
    assert {ds[v].attrs["units"] for v in ("x", "t", "t_ms", "x_um", "psi", "density")} == {
        "xi", "hbar/mu", "ms", "um", "sqrt(n0)", "n0"}
    for name, values in observables.items():
        np.testing.assert_array_equal(ds[name], values)
        assert ds[name].dims == ("t",) and "units" in ds[name].attrs
    assert ds["norm"].attrs["units"] == "n0 xi^2"
    assert ds.attrs["complete"] == 1 and ds.attrs["format"] == "vortherm-run"
    assert ds.attrs["unit_length_m"] == length_m


def test_open_run_loads_only_the_frames_asked_for(tiny_run):
    full = open_run(tiny_run)
    some = open_run(tiny_run, frames=[0, -1])
    assert list(some["frame"].values) == [0, full.sizes["t"] - 1]
    np.testing.assert_array_equal(some["psi"].values, full["psi"].values[[0, -1]])
    np.testing.assert_array_equal(some["energy"].values, full["energy"].values[[0, -1]])
    with pytest.raises(Exception, match="out of range"):
        open_run(tiny_run, frames=[99])


def test_open_run_refuses_a_file_that_is_not_a_run_file(tmp_path):
    path = tmp_path / "x.h5"
    path.write_text("not hdf5")
    with pytest.raises(RunFileError, match="x.h5"):
        open_run(path)


def test_dict_protocol_simulate_dataset_and_dataframe_match_the_command_line(tiny_run, tmp_path):
    """The API round trip: a dict -> protocol -> run file -> Dataset -> DataFrame gives the
    same numbers as `vortherm run` and `vortherm vortices` on the same protocol file."""
    protocol = protocol_from_dict(tomllib.loads(TINY), source="tiny-dict")
    api_path = simulate(protocol, tmp_path / "api.h5")
    api, cli = open_run(api_path), open_run(tiny_run)
    np.testing.assert_array_equal(api["psi"].values, cli["psi"].values)
    np.testing.assert_array_equal(api["energy"].values, cli["energy"].values)
    np.testing.assert_array_equal(api["t_ms"].values, cli["t_ms"].values)

    table = vortex_table(api_path)
    csv = tmp_path / "cli_vortices.csv"
    assert main(["vortices", str(tiny_run), "--csv", str(csv)]) == 0
    from_cli = pd.read_csv(csv)
    assert len(table) == len(from_cli) > 0
    pd.testing.assert_frame_equal(table[list(from_cli.columns)], from_cli)
    with RunFile.open(api_path) as run:
        stored = run.read_vortices()
    np.testing.assert_array_equal(table["x"], stored["x"])
    np.testing.assert_array_equal(table["sign"], stored["sign"])
    assert table.attrs["units"]["x_um"] == "um" and table.attrs["units"]["t"] == "hbar/mu"
