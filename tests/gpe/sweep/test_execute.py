"""Tests of the sweep machinery (gpe/sweep/execute.py): executors, resuming, failures.

Most tests use the cheap stand-in point function of tests/sweep_stand_in.py. The sweep-file parser
is tested in test_sweep_file.py, the summary tables in test_sweep_table.py, the phase maps in
test_sweep_plots.py.
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import logging
import math
from pathlib import Path

import numpy as np
import pytest
from sweep_stand_in import (
    SWEEP_TEXT,
    calls,
    overrides_of,
    run_stand_in,
    stand_in_is_complete,
    write_sweep_file,
)

from gpe.sweep.execute import PointTask, plan_local, run_sweep
from gpe.sweep.file import SweepError, load_sweep


@pytest.fixture
def sweep_file(tmp_path):
    return write_sweep_file(tmp_path)


@pytest.mark.parametrize("cores, workers, threads, n_tasks, expected", [
    (2, None, None, 10, (2, 1)), (8, 2, None, 10, (2, 4)), (8, None, 3, 10, (2, 3)),
    (8, None, None, 3, (3, 2)), (1, None, None, 5, (1, 1)),
])
def test_local_plan_never_oversubscribes(cores, workers, threads, n_tasks, expected):
    got = plan_local(cores, workers, threads, n_tasks)
    assert got == expected and got[0] * got[1] <= cores


def test_local_plan_rejects_oversubscription():
    with pytest.raises(SweepError, match="oversubscribe"):
        plan_local(2, 2, 2)
    with pytest.raises(SweepError, match="exceed the 2 usable cores"):
        plan_local(2, None, 4)


def test_local_and_dask_give_identical_tables(sweep_file, tmp_path):
    import h5py

    distributed = pytest.importorskip("distributed")
    local = run_stand_in(sweep_file, tmp_path / "local", workers=2)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = run_stand_in(sweep_file, tmp_path / "dask", executor=client)
    assert local.complete and remote.complete
    for name in ("summary_runs.csv", "summary_points.csv"):
        assert (tmp_path / "local" / name).read_bytes() == (tmp_path / "dask" / name).read_bytes()
    with h5py.File(local.files["hdf5"]) as a, h5py.File(remote.files["hdf5"]) as b:
        for group in ("runs", "points"):
            assert list(a[group]) == list(b[group])
            for name in a[group]:
                np.testing.assert_array_equal(a[group][name][()], b[group][name][()])
                assert a[group][name].attrs["units"] == b[group][name].attrs["units"]


def test_interrupted_sweep_resumes_without_recomputing(sweep_file, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "interrupt_p001_s1").touch()  # the 4th point stops the sweep, as Ctrl-C would
    first = run_stand_in(sweep_file, out, workers=1)
    assert first.interrupted and not first.complete
    done_first = [r["point_id"] for r in first.runs if r["status"] == "ok"]
    assert {"p000_s0", "p000_s1", "p001_s0"} <= set(done_first)
    assert "p001_s1" not in done_first
    assert json.loads((out / "state.json").read_text())["interrupted"] is True
    stamps = {pid: (out / "runs" / f"{pid}.h5").stat().st_mtime_ns for pid in done_first}

    (out / "interrupt_p001_s1").unlink()
    seen = []
    second = run_stand_in(sweep_file, out, workers=2, progress=seen.append)
    assert second.complete and seen[-1].done == 8 and seen[-1].skipped == len(done_first)
    for pid in done_first:  # finished points: simulated once, run file untouched
        assert calls(out, pid) == ["resume=False"]
        assert (out / "runs" / f"{pid}.h5").stat().st_mtime_ns == stamps[pid]
    # the interrupted point resumed from its partial run file
    assert calls(out, "p001_s1") == ["resume=False", "resume=True"]

    third = run_stand_in(sweep_file, out, workers=1)
    assert third.complete and all(len(calls(out, r["point_id"])) <= 2 for r in third.runs)
    assert third.runs == second.runs


def test_failing_point_is_recorded_and_others_finish(sweep_file, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "invalid_p002_s0").touch()
    result = run_stand_in(sweep_file, out, executor=cf.ThreadPoolExecutor(2))
    assert not result.interrupted and not result.complete
    assert list(result.failed) == ["p002_s0"]
    assert "ProtocolError" in result.failed["p002_s0"] and "too fast" in result.failed["p002_s0"]
    ok = [r for r in result.runs if r["status"] == "ok"]
    assert len(ok) == 7
    bad = next(r for r in result.runs if r["point_id"] == "p002_s0")
    assert math.isnan(bad["beta"])
    p2 = next(r for r in result.points if r["grid_id"] == "p002")
    assert p2["n_ok"] == 1 and math.isnan(p2["beta_std"])


def test_missing_quantity_is_a_point_failure(tmp_path, sweep_file):
    sweep = load_sweep(sweep_file, check_protocol=False)
    result = run_sweep(sweep, tmp_path / "o", executor=cf.ThreadPoolExecutor(1),
                       point_fn=lambda task: {"beta": 1.0}, is_complete=stand_in_is_complete)
    assert len(result.failed) == 8 and "no 'n_plus'" in result.failed["p000_s0"]


def test_output_folder_of_another_sweep_is_refused(sweep_file, tmp_path):
    run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    sweep_file.write_text(SWEEP_TEXT.replace("[0.3, 0.6]", "[0.2, 0.6]"))
    with pytest.raises(SweepError, match="different sweep"):
        run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))


# -- with the real protocol parser -------------------------------------------------------------
DEMO = Path(__file__).resolve().parents[3] / "runs" / "demo.toml"


def protocol_checked_point(task: PointTask) -> dict:
    """Parse the point's protocol for real (the overrides must be accepted), then stand in."""
    from gpe.setup.protocol import load_protocol

    protocol = load_protocol(task.base, task.overrides)
    assert protocol.evolution.seed == int(overrides_of(task)["evolution.seed"])
    return {"beta": protocol.beams[0].waist, "n_plus": 1.0, "dipole_fraction": 0.0}


def test_invalid_point_of_a_real_protocol_fails_alone(tmp_path):
    src = tmp_path / "s.toml"
    src.write_text(f'base = "{DEMO}"\nseeds = [3]\n[[axes]]\nkey = "beams.0.waist_um"\n'
                   f'values = [2.5, -1.0]\n[measure]\nquantities = ["beta", "n_plus"]\n')
    result = run_sweep(load_sweep(src), tmp_path / "out", executor=cf.ThreadPoolExecutor(2),
                       point_fn=protocol_checked_point, is_complete=stand_in_is_complete)
    assert list(result.failed) == ["p001_s3"]
    assert "ProtocolError" in result.failed["p001_s3"] and "waist_um" in result.failed["p001_s3"]
    ok = result.runs[0]
    assert ok["status"] == "ok" and ok["seed"] == 3
    # 2.5 um in healing lengths, against xi = hbar / sqrt(m mu) from scipy.constants
    from scipy import constants

    from gpe.setup.protocol import load_protocol

    p = load_protocol(DEMO)
    xi = constants.hbar / math.sqrt(p.atoms.mass_kg * p.atoms.chemical_potential_J)
    assert ok["beta"] == pytest.approx(2.5e-6 / xi, rel=1e-9)


def test_measurement_time_is_converted_to_hbar_over_mu():
    from scipy import constants

    from gpe.setup.protocol import load_protocol
    from gpe.sweep.file import time_unit_factor

    p = load_protocol(DEMO)
    tau_s = constants.hbar / p.atoms.chemical_potential_J  # time unit hbar/mu
    assert time_unit_factor(p, "ms") == pytest.approx(1e-3 / tau_s, rel=1e-9)
    assert time_unit_factor(p, "protocol") == time_unit_factor(p, "ms")  # units = "SI"
    assert time_unit_factor(p, "tau") == 1.0


TINY_PROTOCOL = """
units = "healing"
name = "tiny"
[atoms]
species = "87Rb"
chemical_potential_nK = 10.0
axial_frequency_hz = 700.0
[trap]
shape = "disk"
radius_xi = 12.0
[grid]
nx = 32
padding_xi = 4.0
[evolution]
duration_tau = 20.0
dt_tau = 0.05
output_interval_tau = 5.0
damping = 0.01
[[beams]]
waist_xi = 2.0
height_mu = 2.0
[beams.path]
kind = "circle"
radius_xi = 6.0
speed_c = 0.6
"""


@pytest.mark.slow
def test_end_to_end_with_the_real_pipeline(tmp_path):
    """Two points of a tiny protocol through simulate + analyse, then a rerun that skips both."""
    from gpe.run import reading, thermometry

    (tmp_path / "tiny.toml").write_text(TINY_PROTOCOL)
    src = tmp_path / "s.toml"
    src.write_text('base = "tiny.toml"\nseeds = 1\n[[axes]]\nkey = "beams.0.path.speed_c"\n'
                   'values = [0.3, 0.7]\n[measure]\nwindow_tau = [10.0, 20.0]\n'
                   'quantities = ["beta", "n_plus", "n_minus"]\n')
    sweep = load_sweep(src)
    first = run_sweep(sweep, tmp_path / "out", workers=2)
    assert first.complete, first.failed
    runs = sorted((tmp_path / "out" / "runs").glob("*.h5"))
    assert [p.stem for p in runs] == ["p000_s0", "p001_s0"]
    assert all(reading.is_complete(p) for p in runs)
    for row in first.runs:  # the table holds what analyse() says about the same run
        direct = thermometry.analyse(tmp_path / "out" / "runs" / f"{row['point_id']}.h5",
                                  window=(10.0, 20.0))
        # equal up to round-off: the worker ran with one thread, this process with several
        np.testing.assert_allclose([row["n_plus"], row["beta"]],
                                   [direct["n_plus"], direct["beta"]], rtol=1e-9)
    stamps = {p: p.stat().st_mtime_ns for p in runs}
    seen = []
    second = run_sweep(sweep, tmp_path / "out", workers=2, progress=seen.append)
    assert seen[-1].skipped == 2 and json.dumps(second.runs) == json.dumps(first.runs)
    assert {p: p.stat().st_mtime_ns for p in runs} == stamps  # finished runs not touched


@pytest.mark.slow
def test_real_pipeline_local_and_dask_give_the_same_table(tmp_path, monkeypatch):
    """2 x 2 points x 2 seeds of a tiny protocol, simulated and analysed for real, once on the
    local pool and once on a Dask LocalCluster: the summary tables must be identical (one
    thread per point on both sides, so every floating-point operation happens in the same
    order)."""
    distributed = pytest.importorskip("distributed")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    from tiny_protocol import tiny_protocol_text

    (tmp_path / "tiny.toml").write_text(tiny_protocol_text(duration=8.0, output_interval=2.0))
    src = tmp_path / "s.toml"
    src.write_text('base = "tiny.toml"\nseeds = 2\n'
                   '[[axes]]\nkey = "beams.0.path.speed_c"\nvalues = [0.4, 0.7]\n'
                   '[[axes]]\nkey = "beams.0.height_mu"\nvalues = [1.5, 3.0]\n'
                   '[measure]\nwindow_tau = [4.0, 8.0]\n'
                   'quantities = ["beta", "n_plus", "n_minus", "energy_per_vortex"]\n')
    sweep = load_sweep(src)
    local = run_sweep(sweep, tmp_path / "local", workers=2, threads=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = run_sweep(sweep, tmp_path / "dask", executor=client, threads=1)
    assert local.complete, local.failed
    assert remote.complete, remote.failed
    assert len(local.runs) == 8 and len(local.points) == 4
    assert sum(math.isfinite(float(r["beta"])) for r in local.runs) >= 4   # vortices were shed
    for name in ("summary_runs.csv", "summary_points.csv"):
        a = (tmp_path / "local" / name).read_text().splitlines()
        b = (tmp_path / "dask" / name).read_text().splitlines()
        assert a[0] == b[0]
        assert a[1:] == b[1:]


# -- integrity: edited protocols, killed coordinators ------------------------------------------
def test_a_rerun_after_the_base_protocol_changed_is_refused_by_name(sweep_file, tmp_path):
    """Resuming after the base was edited would join two protocols in one folder: refused,
    naming the changed key; --restart-changed moves the old files aside (nothing deleted)."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "interrupt_p001_s0").touch()
    first = run_stand_in(sweep_file, out, executor=cf.ThreadPoolExecutor(1))
    assert first.interrupted
    (tmp_path / "base.toml").write_text("damping = 0.03\n")
    with pytest.raises(SweepError, match="another protocol") as err:
        run_stand_in(sweep_file, out, executor=cf.ThreadPoolExecutor(1))
    assert "damping" in str(err.value) and "--restart-changed" in str(err.value)
    done_before = sorted(p.name for p in (out / "points").glob("*.json"))
    assert done_before                  # the refused rerun touched nothing
    (out / "interrupt_p001_s0").unlink()
    again = run_stand_in(sweep_file, out, executor=cf.ThreadPoolExecutor(1), restart_changed=True)
    assert again.complete
    aside = list((out / "superseded").glob("*/*.json"))
    assert sorted(p.name for p in aside) == done_before
    # every point was recomputed with the new base: none was skipped as already done
    assert all(calls(out, r["point_id"]) for r in again.runs)


def test_an_unchanged_rerun_is_not_refused(sweep_file, tmp_path):
    run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    again = run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    assert again.complete and not (tmp_path / "out" / "superseded").exists()


_COORDINATOR = r"""
import sys
from pathlib import Path
sys.path.insert(0, sys.argv[3])
from sweep_stand_in import run_stand_in, sleeping_point
run_stand_in(Path(sys.argv[1]), Path(sys.argv[2]), workers=2, threads=1, point_fn=sleeping_point)
"""


def _start_coordinator(sweep_file, out):
    import subprocess
    import sys
    import time

    proc = subprocess.Popen([sys.executable, "-c", _COORDINATOR, str(sweep_file), str(out),
                             str(Path(__file__).resolve().parents[2] / "helpers")])
    deadline = time.monotonic() + 120
    while len(list((out / "runs").glob("*.pid"))) < 2:
        assert proc.poll() is None, "the coordinator died before its workers started"
        assert time.monotonic() < deadline, "workers did not start"
        time.sleep(0.2)
    pids = [int(p.read_text()) for p in (out / "runs").glob("*.pid")]
    return proc, pids


def _alive(pid: int) -> bool:
    import os

    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    with open(f"/proc/{pid}/stat") as fh:       # a zombie is dead
        return fh.read().split(")")[-1].split()[0] != "Z"


@pytest.mark.slow
def test_workers_die_with_a_killed_coordinator(sweep_file, tmp_path):
    import signal
    import time

    proc, pids = _start_coordinator(sweep_file, tmp_path / "out")
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    deadline = time.monotonic() + 20
    while any(_alive(p) for p in pids) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not any(_alive(p) for p in pids)


@pytest.mark.slow
def test_sigterm_is_handled_like_ctrl_c(sweep_file, tmp_path):
    """SIGTERM stops the running points and still writes the state and the summary."""
    import signal

    proc, pids = _start_coordinator(sweep_file, tmp_path / "out")
    proc.send_signal(signal.SIGTERM)
    # 60 s was once too short in CI, under load from the other xdist worker (12 s alone)
    assert proc.wait(timeout=180) == 0
    out = tmp_path / "out"
    assert (out / "summary_runs.csv").exists() and (out / "state.json").exists()
    assert json.loads((out / "state.json").read_text())["interrupted"] is True
    assert not any(_alive(p) for p in pids)


# -- scheduler addresses: checked and connected before the output folder exists ---------------
import functools
import socket

from gpe.sweep import execute


def _free_local_port() -> int:
    """A local TCP port nobody listens on (bound once to find it, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.parametrize("address, problem", [
    ("http://head:8786", "unknown scheme 'http://'"), ("head", "no ':PORT'"),
    ("tcp://head:port", "port 'port' is not a number"), ("tcp://:8786", "no host name"),
    ("tcp://head:8786/status", "a path"), ("", "empty"), ("head:70000", "not a number 1..65535"),
])
def test_a_malformed_scheduler_address_is_refused_before_the_folder(sweep_file, tmp_path,
                                                                    address, problem):
    out = tmp_path / "out"
    with pytest.raises(SweepError) as info:
        run_stand_in(sweep_file, out, scheduler=address)
    text = str(info.value)
    assert repr(address) in text and problem in text and "tcp://HOST:PORT" in text
    assert not out.exists()


def test_an_unreachable_scheduler_is_a_sweep_error_and_leaves_no_folder(sweep_file, tmp_path,
                                                                        monkeypatch):
    pytest.importorskip("distributed")
    address = f"tcp://127.0.0.1:{_free_local_port()}"
    with pytest.raises(SweepError, match="cannot connect.*" + address.replace(".", r"\.")):
        execute.connect_scheduler(address, timeout=0.5)
    # run_sweep connects through the same function; a short timeout keeps the test quick
    monkeypatch.setattr(execute, "connect_scheduler",
                        functools.partial(execute.connect_scheduler, timeout=0.5))
    out = tmp_path / "out"
    with pytest.raises(SweepError, match=address.replace(".", r"\.")):
        run_stand_in(sweep_file, out, scheduler=address)
    assert not out.exists()


@pytest.mark.parametrize("level, expect_info", [(logging.WARNING, False), (logging.INFO, True)])
def test_warnings_and_logs_of_spawned_workers_reach_the_coordinator_log(sweep_file, tmp_path,
                                                                        caplog, level,
                                                                        expect_info):
    from sweep_stand_in import talking_point

    caplog.set_level(level)   # what the command line sets with -v (INFO) or by default
    result = run_stand_in(sweep_file, tmp_path / "out", workers=2, point_fn=talking_point)
    assert result.complete
    pids = [r["point_id"] for r in result.runs]
    warned = [r for r in caplog.records if r.name == "py.warnings"]
    # one warning per point, each with its point id, although all come from one code line
    assert sorted(r.getMessage() for r in warned) == sorted(
        f"{pid}: speed of {pid} is made up" for pid in pids)
    assert all(r.levelno == logging.WARNING for r in warned)
    info = [r.getMessage() for r in caplog.records if r.name == "gpe.run.simulate"]
    assert sorted(info) == ([f"{pid}: {pid} simulated" for pid in sorted(pids)] if expect_info else [])
    # the point records keep them too
    rec = json.loads((tmp_path / "out" / "points" / f"{pids[0]}.json").read_text())
    assert {"level": "WARNING", "logger": "py.warnings",
            "message": f"speed of {pids[0]} is made up"} in rec["messages"]


def test_a_sweep_keeps_the_snapshots_it_is_told_to_and_measures_them(tmp_path):
    """keep_snapshots = 2 with the real pipeline (in this process): the run file holds frames
    0, 2, 4 of 0..4 and the recorded measurement is the thinned file's."""
    from tiny_protocol import tiny_protocol_text

    from gpe.run import reading, thermometry
    from gpe.run.runfile import RunFile

    (tmp_path / "tiny.toml").write_text(tiny_protocol_text(duration=8.0, output_interval=2.0))
    src = tmp_path / "s.toml"
    src.write_text('base = "tiny.toml"\n[[axes]]\nkey = "beams.0.path.speed_c"\nvalues = [0.6]\n'
                   '[measure]\nwindow_tau = [4.0, 8.0]\nquantities = ["beta", "n_plus"]\n'
                   '[output]\nkeep_snapshots = 2\n')
    result = run_sweep(load_sweep(src), tmp_path / "out", executor=cf.ThreadPoolExecutor(1))
    assert result.complete, result.failed
    run_path = tmp_path / "out" / "runs" / "p000_s0.h5"
    assert reading.is_complete(run_path)
    with RunFile.open(run_path, "r") as run:
        np.testing.assert_array_equal(run.frame_times(), [0.0, 4.0, 8.0])
        assert json.loads(str(run.attrs["snapshots_kept"]))["frames"] == [0, 2, 4]
    direct = thermometry.analyse(run_path, window=(4.0, 8.0))
    assert result.runs[0]["n_plus"] == pytest.approx(direct["n_plus"])
    rec = json.loads((tmp_path / "out" / "points" / "p000_s0.json").read_text())
    assert rec["keep_snapshots"] == 2
    # a rerun with the same setting skips the point
    seen = []
    run_sweep(load_sweep(src), tmp_path / "out", executor=cf.ThreadPoolExecutor(1),
              progress=seen.append)
    assert seen[-1].skipped == 1
