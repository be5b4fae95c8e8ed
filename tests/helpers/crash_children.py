"""Child processes for the crash-consistency tests: each is started with ``python -c`` and
killed with SIGKILL at a chosen moment (not itself a test file).

``start(name, *args)`` launches ``name(*args)`` of this module in a fresh interpreter whose
path holds tests/helpers, and returns the ``subprocess.Popen``.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

HELPERS = Path(__file__).resolve().parent


def start(name: str, *args: str, env: dict | None = None) -> subprocess.Popen:
    code = (f"import sys; sys.path.insert(0, {str(HELPERS)!r}); import crash_children; "
            f"crash_children.{name}(*sys.argv[1:])")
    return subprocess.Popen([sys.executable, "-c", code, *map(str, args)],
                            env={**os.environ, **(env or {})}, stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE)


def kill_after(proc: subprocess.Popen, seconds: float) -> bool:
    """SIGKILL ``proc`` after ``seconds`` unless it ended before; True when it was killed."""
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            return False
        time.sleep(0.01)
    if proc.poll() is not None:
        return False
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    return True


def wait_for(path: Path, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while not Path(path).exists():
        if time.monotonic() > deadline:
            raise TimeoutError(f"{path} did not appear within {timeout} s")
        time.sleep(0.005)


# -- the children ---------------------------------------------------------------------------------
def simulate_run(protocol_path: str, run_path: str, marker: str) -> None:
    """Start (or resume) a run with one FFT thread, as the reference run does; after every
    output the simulated time is written to ``marker`` (the parent kills by it)."""
    from gpe.run.simulate import simulate
    from gpe.setup.protocol import load_protocol

    def tell(p) -> None:
        Path(marker).write_text(repr(p.t))

    simulate(load_protocol(protocol_path), run_path, resume=True, threads=1, progress=tell)


def simulated_time(marker: Path) -> float:
    """What :func:`simulate_run` last wrote (0 before, or while it writes)."""
    try:
        return float(Path(marker).read_text() or 0.0)
    except (OSError, ValueError):
        return 0.0


def build_dos(cache_dir: str, n_sweeps: str) -> None:
    """The 3+3 gas in the unit disk at core 0.01 through the on-disk cache."""
    from thermo.domains.disk import Disk
    from thermo.dos.cache import load_or_build

    load_or_build(3, 3, Disk(), 0.01, cache_dir=cache_dir, settings=dos_settings(int(n_sweeps)))


def dos_settings(n_sweeps: int):
    from thermo.dos.build import DosSettings

    return DosSettings(n_temps=8, n_sweeps=n_sweeps, n_boot=8)


def run_stand_in_sweep(folder: str, workers: str) -> None:
    """The stand-in sweep of sweep_stand_in.py with slow points, coordinated from here."""
    from sweep_stand_in import (
        slow_stand_in_point,
        stand_in_fingerprint,
        stand_in_is_complete,
    )

    from gpe.sweep.execute import run_sweep
    from gpe.sweep.file import load_sweep

    folder = Path(folder)
    run_sweep(load_sweep(folder / "sweep.toml", check_protocol=False), folder / "out",
              workers=int(workers), point_fn=slow_stand_in_point,
              is_complete=stand_in_is_complete, fingerprint=stand_in_fingerprint)
