"""A cheap stand-in for the pipeline, shared by the sweep test files (not itself a test file).

The point function is at module level so that spawned workers can import it. It writes a tiny
text "run file", counts its simulations and returns values computed from the overrides; the
machinery under test -- expansion, executors, resuming, failure handling, tables -- is the same as
with the real pipeline.
"""

from __future__ import annotations

import hashlib
import os
import time
from pathlib import Path

from gpe.errors import ProtocolError
from gpe.sweep.execute import PointTask, run_sweep
from gpe.sweep.file import load_sweep
from gpe.sweep.table import SweepResult

SWEEP_TEXT = """
base = "base.toml"
seeds = 2

[[axes]]
key = "beams.0.path.speed_c"
values = [0.3, 0.6]
label = "beam speed"

[[axes]]
key = "beams.0.waist_um"
values = [2.0, 4.0]

[measure]
window = [80.0, 100.0]
quantities = ["beta", "n_plus", "dipole_fraction"]
"""


def overrides_of(task: PointTask) -> dict:
    return dict(o.split("=", 1) for o in task.overrides)


def stand_in_point(task: PointTask) -> dict:
    """Simulate by writing a run file; raise on request (control files beside the runs)."""
    run = Path(task.run_path)
    ctl = run.parent.parent
    o = overrides_of(task)
    speed, waist, seed = float(o["beams.0.path.speed_c"]), float(o["beams.0.waist_um"]), int(
        o["evolution.seed"])
    if (ctl / f"invalid_{task.point_id}").exists():
        raise ProtocolError(f"beams.0.path.speed_c = {speed}: too fast for this test")
    if not stand_in_is_complete(run):
        with (run.parent / f"{task.point_id}.calls").open("a") as fh:
            fh.write(f"resume={run.exists()}\n")
        run.write_text("started\n")
        if (ctl / f"interrupt_{task.point_id}").exists():
            raise KeyboardInterrupt
        run.write_text("complete\n")
    # beta changes sign across speed 0.45: a made-up but deterministic map.
    return {"beta": (0.45 - speed) * waist + 0.01 * seed, "n_plus": 3 + seed,
            "dipole_fraction": waist / 10.0, "verdict": "ignored extra key"}


def stand_in_is_complete(path: Path) -> bool:
    return path.exists() and path.read_text() == "complete\n"


def calls(out: Path, pid: str) -> list[str]:
    f = out / "runs" / f"{pid}.calls"
    return f.read_text().split() if f.exists() else []


def write_sweep_file(folder: Path) -> Path:
    """Write SWEEP_TEXT and a stand-in base protocol into ``folder``; return the sweep file."""
    (folder / "base.toml").write_text("# stand-in protocol, never parsed here\n")
    path = folder / "sweep.toml"
    path.write_text(SWEEP_TEXT)
    return path


def stand_in_fingerprint(base: str, overrides: tuple) -> dict:
    """The stand-in base is not a protocol: its text and the overrides are the fingerprint."""
    text = Path(base).read_text()
    settings = dict(line.split("=", 1) for line in text.splitlines() if "=" in line)
    return {"digest": hashlib.sha256((text + repr(overrides)).encode()).hexdigest(),
            "settings": {k.strip(): v.strip() for k, v in settings.items()}}


def sleeping_point(task: PointTask) -> dict:
    """Record this worker's pid, then compute for a long time (for kill tests)."""
    run = Path(task.run_path)
    (run.parent / f"{task.point_id}.pid").write_text(str(os.getpid()))
    time.sleep(120)
    return {"beta": 0.0, "n_plus": 0.0, "dipole_fraction": 0.0}


def run_stand_in(sweep_file: Path, out: Path, **kw) -> SweepResult:
    sweep = load_sweep(sweep_file, check_protocol=False)
    kw.setdefault("fingerprint", stand_in_fingerprint)
    kw.setdefault("point_fn", stand_in_point)
    return run_sweep(sweep, out, is_complete=stand_in_is_complete, **kw)


def talking_point(task: PointTask) -> dict:
    """The stand-in point, after a warning and two log records (INFO and DEBUG) of its own."""
    import logging
    import warnings

    warnings.warn(f"speed of {task.point_id} is made up", UserWarning)
    logging.getLogger("gpe.run.simulate").info("%s simulated", task.point_id)
    logging.getLogger("gpe.run.simulate").debug("%s details", task.point_id)
    return stand_in_point(task)


def slow_stand_in_point(task: PointTask) -> dict:
    """The stand-in point taking ~0.3 s, logging every start and every finished simulation
    (``computed.log`` in the output folder: ``start <id> <pid>`` / ``done <id>``), for the
    kill tests."""
    out = Path(task.run_path).parent.parent
    run = Path(task.run_path)
    with (out / "computed.log").open("a") as fh:
        fh.write(f"start {task.point_id} {os.getpid()}\n")
    was_complete = stand_in_is_complete(run)
    time.sleep(0.3)
    values = stand_in_point(task)
    if not was_complete:
        with (out / "computed.log").open("a") as fh:
            fh.write(f"done {task.point_id}\n")
    return values
