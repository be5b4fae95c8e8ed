"""Run file: resume equivalence, truncation of unfinished records, format checks."""

import h5py
import numpy as np
import pytest
import xarray as xr

from gpe.errors import RunFileError
from gpe.field.grid import Grid
from gpe.field.solver import Solver, SolverSettings
from gpe.run.runfile import FORMAT_VERSION, VORTEX_ROW, RunFile

GRID = Grid(32, 32, 16.0, 16.0)
TRAP = 0.05 * (GRID.X**2 + GRID.Y**2)


class CircularBeam:
    """Test double of gpe.field.traps.BeamSet: one beam moving on a circle."""

    n_beams = 1
    waists = np.array([1.5])

    def evaluate(self, t, amp, cx, cy):
        amp[0], cx[0], cy[0] = 2.0, 2.0 * np.cos(0.5 * t), 2.0 * np.sin(0.5 * t)

    def max_height(self):
        return 2.0


def _psi0():
    return np.exp(-(GRID.X**2 + GRID.Y**2) / 10.0) * np.exp(0.2j * GRID.Y)


def _create(path, **kw):
    return RunFile.create(path, GRID, protocol_text="[grid]\nnx = 32\n", protocol_json="{}",
                          units={"length_m": 1e-6, "time_s": 1e-3}, static_potential=TRAP, **kw)


def _rows(frame, t, n):
    rows = np.zeros(n, VORTEX_ROW)
    rows["frame"], rows["t"], rows["x"], rows["sign"], rows["track"] = frame, t, np.arange(n), 1, -1
    return rows


def _run(path, t_end, checkpoint_at=None, resume=False):
    """Evolve with gamma > 0 and a moving beam, one frame per output, checkpoint per frame."""
    settings = SolverSettings(dt=0.05, gamma=0.01, fft="pyfftw")
    if resume:
        run = RunFile.open(path, "r+", resume=True)
        ck = run.read_checkpoint()
        solver = Solver(GRID, TRAP, CircularBeam(), settings, ck.psi, t0=ck.t, step0=ck.step)
        rng = ck.rng()
    else:
        run = _create(path)
        solver = Solver(GRID, TRAP, CircularBeam(), settings, _psi0())
        rng = np.random.default_rng(7)
        run.append_frame(solver.t, solver.psi, solver.observables())
        run.write_checkpoint(solver.psi, solver.t, solver.step_count, rng=rng)
    with run:
        for s in solver.evolve(t_end, 0.25):
            frame = run.n_frames
            # A random draw per frame stands in for seeded noise: the RNG state must resume too.
            obs = dict(s.observables(), draw=float(rng.random()))
            run.append_frame(s.t, s.psi, obs, vortices=_rows(frame, s.t, frame % 3))
            run.write_checkpoint(s.psi, s.t, s.step_count, rng=rng)
            if checkpoint_at is not None and s.t >= checkpoint_at - 1e-12:
                break
    return solver.psi.copy()


def test_resume_equals_uninterrupted_run(tmp_path):
    # N + M steps in one go == N steps, checkpoint, close, reopen, M steps (DESIGN.md).
    whole = _run(tmp_path / "whole.h5", 2.0)
    _run(tmp_path / "split.h5", 2.0, checkpoint_at=1.0)
    with RunFile.open(tmp_path / "split.h5") as run:
        assert run.n_frames == 5
    resumed = _run(tmp_path / "split.h5", 2.0, resume=True)
    np.testing.assert_array_equal(resumed, whole)
    with h5py.File(tmp_path / "whole.h5") as a, h5py.File(tmp_path / "split.h5") as b:
        for name in ("snapshots/psi", "snapshots/t", "vortices", "checkpoint/psi",
                     *[f"observables/{k}" for k in a["observables"]]):
            np.testing.assert_array_equal(a[name][...], b[name][...], err_msg=name)
        assert a["snapshots"].attrs["n_frames"] == b["snapshots"].attrs["n_frames"] == 9
        assert a["checkpoint"].attrs["rng_state"] == b["checkpoint"].attrs["rng_state"]


def test_unfinished_records_and_frames_after_the_checkpoint_are_cut(tmp_path):
    path = tmp_path / "run.h5"
    with _create(path) as run:
        for i in range(3):
            run.append_frame(0.1 * i, _psi0(), {"norm": 1.0 + i}, vortices=_rows(i, 0.1 * i, 2))
        run.write_checkpoint(_psi0(), 0.2, 4, frame=2)
        run.append_frame(0.3, _psi0(), {"norm": 4.0, "lz": 0.5}, vortices=_rows(3, 0.3, 2))
        # Simulate a crash between data and counter: the last record's counter never came.
        run._f["snapshots"].attrs["n_frames"] = 3
    with RunFile.open(path) as run:  # reading ignores the unfinished record
        assert run.n_frames == 3 and len(run.read_vortices()) == 6
    with RunFile.open(path, "r+") as run:  # writing cuts it
        assert run._f["snapshots/psi"].shape[0] == 3
        np.testing.assert_array_equal(run.read_observables()["lz"], [np.nan] * 3)
    with RunFile.open(path, "r+", resume=True) as run:  # resuming also cuts past the checkpoint
        assert run.n_frames == 2
        np.testing.assert_array_equal(run.frame_times(), [0.0, 0.1])
        assert set(run.read_vortices()["frame"]) == {0, 1}
        np.testing.assert_array_equal(run.read_observables()["norm"], [1.0, 2.0])
        assert run.read_checkpoint().step == 4


def test_interrupted_checkpoint_replacement_keeps_a_whole_checkpoint(tmp_path):
    path = tmp_path / "run.h5"
    with _create(path) as run:
        run.append_frame(0.0, _psi0())
        run.write_checkpoint(_psi0(), 0.0, 0)
        run._f.create_group("checkpoint.new").attrs["t"] = 9.0  # half-written, no 'written'
    with RunFile.open(path, "r+") as run:
        assert run.read_checkpoint().t == 0.0 and "checkpoint.new" not in run._f


def test_metadata_snapshots_and_vortex_replacement(tmp_path):
    path = tmp_path / "run.h5"
    rng = np.random.default_rng(3)
    rng.random(5)
    with _create(path, extra_attrs={"mu_run": 0.98}) as run:
        run.append_frame(0.0, _psi0(), {"norm": 2.0}, units={"norm": "n0 xi^2"})
        run.write_checkpoint(_psi0().astype(np.complex128), 0.0, 0, rng=rng)
        run.replace_vortices(_rows(0, 0.0, 4))
        run.mark_complete()
    with RunFile.open(path) as run:
        assert run.attrs["format_version"] == FORMAT_VERSION
        assert run.protocol_text() == "[grid]\nnx = 32\n" and run.attrs_float("mu_run") == 0.98
        assert run.units() == {"length_m": 1e-6, "time_s": 1e-3}
        assert run.grid == GRID and run.is_complete()
        np.testing.assert_allclose(run.psi(-1), _psi0(), rtol=1e-6)  # complex64 snapshots
        assert run.observable_unit("norm") == "n0 xi^2"
        assert len(run.read_vortices()) == 4
        restored = run.read_checkpoint().rng()
        assert restored.random() == rng.random()  # generator continues where it stopped
        np.testing.assert_array_equal(run.static_potential(), TRAP)
        assert [i for i, _, _ in run.frames()] == [0]


def test_trap_arrays_are_kept_and_read_back(tmp_path):
    mask = np.zeros((5, 7), bool)
    mask[1:4, 2:5] = True
    _create(tmp_path / "m.h5", trap_arrays={"mask": mask}).close()
    with RunFile.open(tmp_path / "m.h5") as run:
        back = run.trap_arrays()
        assert list(back) == ["mask"] and back["mask"].dtype == bool
        np.testing.assert_array_equal(back["mask"], mask)
        np.testing.assert_array_equal(run.static_potential(), TRAP)     # beside it, unchanged
    with h5py.File(tmp_path / "m.h5") as f:
        assert f["potential/mask"].dtype == np.uint8                   # 0/1, readable anywhere
    _create(tmp_path / "none.h5").close()
    with RunFile.open(tmp_path / "none.h5") as run:
        assert run.trap_arrays() == {}
    with pytest.raises(RunFileError, match=r"'trap'.*potential/<name>"):
        _create(tmp_path / "clash.h5", trap_arrays={"trap": mask})
    assert not (tmp_path / "clash.h5").exists()
    with h5py.File(tmp_path / "m.h5", "r+") as f:
        f["potential"].create_group("odd")
    with RunFile.open(tmp_path / "m.h5") as run:
        with pytest.raises(RunFileError, match=r"m\.h5.*'potential/odd' is not a dataset"):
            run.trap_arrays()


def test_errors_name_the_file_and_the_expectation(tmp_path):
    with pytest.raises(RunFileError, match="no such run file"):
        RunFile.open(tmp_path / "missing.h5")
    (tmp_path / "text.h5").write_text("hello")
    with pytest.raises(RunFileError, match="text.h5.*HDF5"):
        RunFile.open(tmp_path / "text.h5")
    with h5py.File(tmp_path / "other.h5", "w") as f:
        f["data"] = 1
    with pytest.raises(RunFileError, match="not a vortherm run file"):
        RunFile.open(tmp_path / "other.h5")
    with _create(tmp_path / "future.h5") as run:
        run._f.attrs["format_version"] = FORMAT_VERSION + 1
    with pytest.raises(RunFileError, match=f"format_version {FORMAT_VERSION + 1} is not supported"):
        RunFile.open(tmp_path / "future.h5")
    with _create(tmp_path / "empty.h5") as run:
        with pytest.raises(RunFileError, match="no snapshots"):
            run.psi(0)
        with pytest.raises(RunFileError, match="never checkpointed|no 'checkpoint'"):
            run.read_checkpoint()
    with pytest.raises(RunFileError, match="exists already"):
        _create(tmp_path / "empty.h5")


# -- what a file is: decided by content; truncated and locked files are named as such ---------
import subprocess
import sys

from gpe.run.reading import is_run_file

_HOLD_OPEN = ("import sys, h5py\n"
              "f = h5py.File(sys.argv[1], 'r+')\n"
              "print('open', flush=True)\n"
              "sys.stdin.read()\n")


def _whole_run(path):
    with _create(path) as run:
        run.append_frame(0.0, _psi0(), {"energy": 1.0}, vortices=_rows(0, 0.0, 2))
    return path


def test_run_files_are_recognised_by_content_not_by_name(tmp_path):
    run = _whole_run(tmp_path / "run.h5")
    renamed = tmp_path / "run.data"
    renamed.write_bytes(run.read_bytes())
    assert is_run_file(run) and is_run_file(renamed)
    (tmp_path / "table.h5").write_text("shot,x,y,sign\n0,1.0,2.0,+1\n")  # text, misnamed
    with h5py.File(tmp_path / "measured.h5", "w") as f:                 # HDF5, not a run
        f["vortices"] = np.zeros(3)
    assert not is_run_file(tmp_path / "table.h5")
    assert not is_run_file(tmp_path / "measured.h5")


def test_a_truncated_run_file_is_named_as_truncated(tmp_path):
    whole = _whole_run(tmp_path / "run.h5").read_bytes()
    cut = tmp_path / "cut.h5"
    cut.write_bytes(whole[:len(whole) // 2])
    with pytest.raises(RunFileError, match=r"cut\.h5.*truncated"):
        is_run_file(cut)
    with pytest.raises(RunFileError, match=r"cut\.h5.*truncated"):
        RunFile.open(cut)


def test_a_run_file_open_for_writing_elsewhere_is_named_as_locked(tmp_path, monkeypatch):
    monkeypatch.delenv("HDF5_USE_FILE_LOCKING", raising=False)  # HDF5's default: files locked
    run = _whole_run(tmp_path / "run.h5")
    writer = subprocess.Popen([sys.executable, "-c", _HOLD_OPEN, str(run)], text=True,
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    try:
        assert writer.stdout.readline().strip() == "open"
        with pytest.raises(RunFileError, match=r"run\.h5.*locked by another process"):
            is_run_file(run)
        with pytest.raises(RunFileError, match=r"run\.h5.*locked by another process"):
            RunFile.open(run)
    finally:
        writer.stdin.close()
        writer.wait(timeout=30)
    assert is_run_file(run)           # readable again once the writer has closed it


# ------------------------------------------------------------------------------------------
# units attributes and dimension scales: what netCDF readers see
# ------------------------------------------------------------------------------------------
def _written_with_every_kind_of_dataset(path):
    """A run file with a trap array, two frames, vortex rows, two checkpoints, a replaced table."""
    mask = np.zeros((5, 7), bool)
    mask[1:4, 2:6] = True
    with _create(path, trap_arrays={"mask": mask}, ground_state_psi=_psi0()) as run:
        for frame, t in enumerate((0.0, 0.5)):
            run.append_frame(t, _psi0() * (1 + t), {"norm": 1.0 + t, "energy": 2.0},
                             vortices=_rows(frame, t, 2 + frame),
                             units={"norm": "n0 xi^2", "energy": "mu n0 xi^2"})
            run.write_checkpoint(_psi0(), t, 10 * frame)
        run.replace_vortices(_rows(1, 0.5, 3))
    return mask


def test_every_dataset_has_units_and_a_scale_on_every_axis(tmp_path):
    path = tmp_path / "r.h5"
    _written_with_every_kind_of_dataset(path)
    seen = []

    def check(name, obj):
        if not isinstance(obj, h5py.Dataset):
            return
        seen.append(name)
        if obj.dtype.names:                         # the vortex table: one unit per column
            assert {f"units_{c}" for c in obj.dtype.names} <= set(obj.attrs), name
        else:
            assert "units" in obj.attrs and "unit" not in obj.attrs, name
        if not obj.is_scale:
            assert all(len(obj.dims[axis]) == 1 for axis in range(obj.ndim)), name

    with h5py.File(path) as f:
        f.visititems(check)
        assert f["grid/x"] == f["x"] and f["snapshots/t"] == f["t"]   # links, not copies
        # no scale keeps a reference to a deleted checkpoint or vortex table
        assert len(f["x"].attrs["REFERENCE_LIST"]) == 4   # trap, ground state, snapshots, checkpoint
        assert len(f["vortex"].attrs["REFERENCE_LIST"]) == 1
        np.testing.assert_array_equal(f["vortex"][...], np.arange(3))
    assert {"snapshots/psi", "observables/norm", "vortices", "potential/mask",
            "checkpoint/psi", "ground_state/psi", "potential/trap"} <= set(seen)


def test_xarray_opens_the_run_file_with_named_dimensions_and_coordinates(tmp_path):
    path = tmp_path / "r.h5"
    mask = _written_with_every_kind_of_dataset(path)
    with xr.open_datatree(path, engine="h5netcdf") as tree:
        snaps = tree["snapshots"].to_dataset()
        assert snaps["psi"].dims == ("t", "y", "x")
        np.testing.assert_array_equal(snaps["x"], GRID.x)
        np.testing.assert_array_equal(snaps["y"], GRID.y)
        np.testing.assert_array_equal(snaps["t"], [0.0, 0.5])
        assert snaps["t"].attrs["units"] == "hbar/mu" and snaps["psi"].attrs["units"] == "sqrt(n0)"
        np.testing.assert_allclose(snaps["psi"].values[1], 1.5 * _psi0(), rtol=1e-6)
        obs = tree["observables"].to_dataset()
        assert obs["norm"].dims == ("t",) and obs["norm"].attrs["units"] == "n0 xi^2"
        np.testing.assert_array_equal(obs["norm"], [1.0, 1.5])
        pot = tree["potential"].to_dataset()
        assert pot["trap"].dims == ("y", "x")
        assert pot["mask"].dims == ("mask_row", "mask_column")
        np.testing.assert_array_equal(pot["mask"].values.astype(bool), mask)
        assert tree["checkpoint"].to_dataset()["psi"].dims == ("y", "x")
        assert tree.to_dataset()["vortices"].dims == ("vortex",)
    with xr.open_dataset(path, engine="h5netcdf", group="observables") as ds:  # one group alone
        assert ds["energy"].dims == ("t",)


def _as_format_1(path):
    """Rewrite a run file the way format 1 stored it: ``unit`` attributes, no scales."""
    with h5py.File(path, "r+") as f:
        def plain(name, obj):
            if isinstance(obj, h5py.Dataset):
                for axis in range(obj.ndim):
                    for scale in list(obj.dims[axis].values()):
                        obj.dims[axis].detach_scale(scale)
            for key in [k for k in obj.attrs if k == "units" or k.startswith("units_")]:
                obj.attrs["unit" + key[5:]] = obj.attrs[key]
                del obj.attrs[key]
        f.visititems(plain)
        for name in ("x", "y", "t", "vortex", "potential/mask_row", "potential/mask_column"):
            del f[name]
        for name in ("grid/x", "grid/y", "snapshots/t"):
            for key in ("CLASS", "NAME", "REFERENCE_LIST", "long_name"):
                if key in f[name].attrs:
                    del f[name].attrs[key]
        f.attrs["format_version"] = 1


def test_format_1_files_with_unit_attributes_still_read_and_resume(tmp_path):
    path = tmp_path / "old.h5"
    mask = _written_with_every_kind_of_dataset(path)
    _as_format_1(path)
    with RunFile.open(path, "r+") as run:
        assert run.observable_unit("norm") == "n0 xi^2"
        np.testing.assert_array_equal(run.trap_arrays()["mask"], mask)
        run.append_frame(1.0, _psi0(), {"norm": 3.0, "lz": 0.5}, vortices=_rows(2, 1.0, 1),
                         units={"norm": "n0 xi^2", "lz": "hbar n0 xi^2"})
        run.write_checkpoint(_psi0(), 1.0, 20)
        run.replace_vortices(run.read_vortices())
        assert run.observable_unit("lz") == "hbar n0 xi^2"
        np.testing.assert_array_equal(run.frame_times(), [0.0, 0.5, 1.0])
    with h5py.File(path) as f:          # the old file keeps its own attribute name throughout
        assert f["observables/lz"].attrs["unit"] == "hbar n0 xi^2"
        assert "units" not in f["checkpoint/psi"].attrs and "t_unit" in f["checkpoint"].attrs
        assert "unit_x" in f["vortices"].attrs and "x" not in f


def test_the_json_a_run_file_holds_is_strict(tiny_run):
    from gpe.run.jsontext import loads_strict

    # [exact] RFC 8259 has no NaN or Infinity: a strict parser must accept every JSON attribute
    with h5py.File(tiny_run) as f:
        resolved = loads_strict(str(f.attrs["protocol_json"]))
        assert loads_strict(str(f.attrs["protocol_overrides"])) == []
        state = str(f["checkpoint"].attrs["rng_state"])
        assert state == "" or isinstance(loads_strict(state), dict)
    assert resolved["grid"]["nx"] == 64
