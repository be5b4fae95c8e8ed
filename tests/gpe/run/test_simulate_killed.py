"""Crash consistency of a run: SIGKILL at seeded random moments, the run file stays readable
with every frame it holds equal to the uninterrupted run's, and the resumed run is bitwise the
uninterrupted one."""

from __future__ import annotations

import time

import numpy as np
import pytest
from crash_children import simulated_time, start
from tiny_protocol import tiny_protocol_text

from gpe.run.runfile import RunFile
from gpe.run.simulate import simulate
from gpe.setup.protocol import load_protocol

DURATION = 60.0   # hbar/mu: 60 outputs, 1200 steps


def _kill_when(proc, marker, t_target: float, extra_s: float) -> bool:
    """SIGKILL ``proc`` ``extra_s`` after it has simulated past ``t_target``."""
    while simulated_time(marker) < t_target:
        if proc.poll() is not None:
            return False
        time.sleep(0.002)
    time.sleep(extra_s)
    if proc.poll() is not None:
        return False
    proc.kill()
    proc.wait()
    return True


def _same_frames(a: RunFile, b: RunFile, n: int) -> None:
    np.testing.assert_array_equal(a.frame_times()[:n], b.frame_times()[:n])
    for i in range(n):
        np.testing.assert_array_equal(a.psi(i), b.psi(i))
    for name, values in a.read_observables().items():
        np.testing.assert_array_equal(values[:n], b.read_observables()[name][:n])


@pytest.mark.slow
def test_a_run_killed_at_random_moments_resumes_bitwise(tmp_path):
    toml = tmp_path / "tiny.toml"
    toml.write_text(tiny_protocol_text(duration=DURATION, output_interval=1.0, rows=3))
    ref_path = simulate(load_protocol(toml), tmp_path / "ref.h5", threads=1)
    path, marker = tmp_path / "killed.h5", tmp_path / "t.txt"
    rng = np.random.default_rng(20261203)
    targets = np.sort(rng.uniform(2.0, DURATION - 5.0, size=3))
    kills = 0
    with RunFile.open(ref_path, "r") as ref:
        for target in targets:
            marker.unlink(missing_ok=True)
            proc = start("simulate_run", toml, path, marker)
            # a random moment inside the cycle of an output: stepping, writing or checkpointing
            kills += _kill_when(proc, marker, float(target), float(rng.uniform(0.0, 0.05)))
            assert path.exists()
            with RunFile.open(path, "r") as run:       # readable after every kill
                n = run.n_frames
                assert 0 < n < len(ref.frame_times()) and not run.is_complete()
                _same_frames(ref, run, n)
                ck = run.read_checkpoint()
                assert ck.frame <= n
                np.testing.assert_array_equal(ck.psi.shape, ref.read_checkpoint().psi.shape)
        assert kills == len(targets)
        simulate(load_protocol(toml), path, resume=True, threads=1)
        with RunFile.open(path, "r") as run:
            assert run.is_complete() and run.n_frames == len(ref.frame_times())
            _same_frames(ref, run, run.n_frames)
            np.testing.assert_array_equal(run.read_vortices(), ref.read_vortices())
            np.testing.assert_array_equal(run.read_checkpoint().psi, ref.read_checkpoint().psi)
    assert sorted(p.name for p in tmp_path.glob("killed.h5*")) == ["killed.h5"]
