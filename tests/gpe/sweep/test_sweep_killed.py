"""Crash consistency of a sweep: the coordinator SIGKILLed at seeded random moments, its workers
end by themselves, and the restarted sweep loses no point and recomputes none that finished."""

from __future__ import annotations

import os
import time
from pathlib import Path

import numpy as np
import pytest
from crash_children import start
from sweep_stand_in import (
    run_stand_in,
    slow_stand_in_point,
    stand_in_point,
    write_sweep_file,
)


def _log(out: Path) -> list[list[str]]:
    f = out / "computed.log"
    return [line.split() for line in f.read_text().splitlines()] if f.exists() else []


def _alive(pid: int) -> bool:
    """True while ``pid`` runs (a zombie waiting for its new parent to reap it has ended)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:
        return Path(f"/proc/{pid}/stat").read_text().split(")")[-1].split()[0] != "Z"
    except OSError:
        return False


def _ok_records(out: Path) -> dict[str, bytes]:
    import json

    recs = {}
    for f in sorted((out / "points").glob("*.json")) if (out / "points").exists() else ():
        if json.loads(f.read_text())["status"] == "ok":
            recs[f.stem] = f.read_bytes()
    return recs


@pytest.mark.slow
def test_a_killed_coordinator_loses_and_recomputes_no_point(tmp_path):
    folder = tmp_path / "s"
    folder.mkdir()
    write_sweep_file(folder)                     # 4 grid points x 2 seeds
    out = folder / "out"
    rng = np.random.default_rng(20261204)
    kept: dict[str, bytes] = {}                  # records written before a kill
    killed_after: dict[str, int] = {}            # point -> log length when it was first kept
    for cycle in range(2):
        proc = start("run_stand_in_sweep", folder, 2)
        # kill once 1-2 more points are recorded, at a random moment of the point cycle
        want = len(kept) + int(rng.integers(1, 3))
        while len(_ok_records(out)) < want and proc.poll() is None:
            time.sleep(0.005)
        time.sleep(float(rng.uniform(0.0, 0.15)))
        assert proc.poll() is None, proc.stderr.read().decode()
        proc.kill()
        proc.wait()
        # the workers notice the coordinator is gone and end (within a second)
        workers = {int(row[2]) for row in _log(out) if row[0] == "start"}
        deadline = time.monotonic() + 10.0
        while any(_alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not any(_alive(p) for p in workers)
        for pid, rec in _ok_records(out).items():
            assert kept.setdefault(pid, rec) == rec      # a finished record never changes
            killed_after.setdefault(pid, len(_log(out)))
    assert 0 < len(kept) < 8
    result = run_stand_in(folder / "sweep.toml", out, workers=2, point_fn=slow_stand_in_point)
    assert result.complete and len(result.runs) == 8
    log = _log(out)
    # no point lost: one finished simulation for every point, none for a point twice
    done = [row[1] for row in log if row[0] == "done"]
    assert sorted(done) == sorted(r["point_id"] for r in result.runs)
    # none recomputed: a point recorded before a kill was never started again
    for pid, n in killed_after.items():
        assert not [row for row in log[n:] if row[0] == "start" and row[1] == pid]
    assert {p: r for p, r in _ok_records(out).items() if p in kept} == kept
    # and the tables are those of a sweep that was never interrupted
    reference = tmp_path / "ref"
    reference.mkdir()
    ref = run_stand_in(write_sweep_file(reference), reference / "out", workers=2,
                       point_fn=stand_in_point)
    for name in ("summary_runs.csv", "summary_points.csv"):
        assert (out / name).read_bytes() == (reference / "out" / name).read_bytes()
    assert ref.complete
