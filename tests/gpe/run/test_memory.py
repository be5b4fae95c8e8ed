"""The memory estimate of a run (gpe.run.memory) against the arrays a small run really allocates,
and the refusal of a run that does not fit, before anything of the grid's size exists."""

import contextlib
import re
import tracemalloc

import numpy as np
import pytest
from tiny_protocol import tiny_protocol_text

from gpe.errors import ProtocolWarning, SimulationError
from gpe.field.solver import Solver, SolverSettings
from gpe.run import memory
from gpe.run import simulate as pipeline
from gpe.setup.protocol import parse_protocol

#: How far the estimate may be from the bytes numpy allocates (tracemalloc): the solver's arrays
#: are counted one by one (5%); a run's peak also has temporaries of numpy expressions (25%).
SOLVER_FACTOR, PEAK_FACTOR = 1.05, 1.25


def _protocol(tmp_path, overrides=()):
    """The tiny protocol over 2 hbar/mu; a finer grid warns that dt is long for its k_max."""
    path = tmp_path / "tiny.toml"
    text = tiny_protocol_text(duration=2.0)
    path.write_text(text)
    finer = any(o.startswith("grid.nx") for o in overrides)
    with pytest.warns(ProtocolWarning, match="k_max") if finer else contextlib.nullcontext():
        return parse_protocol(text, source=str(path), overrides=overrides)


def _within(estimate, measured, factor):
    return measured / factor <= estimate <= measured * factor


@pytest.mark.parametrize("precision, gamma", [("complex128", 0.01), ("complex64", 0.0)])
def test_the_solver_holds_the_arrays_the_estimate_counts(tmp_path, precision, gamma):
    protocol = _protocol(tmp_path, ["grid.nx=128"])
    grid = protocol.grid
    v_static, psi0 = protocol.build_trap(), np.ones(grid.shape, complex)
    _ = grid.k2                                    # the grid's own cache, not the solver's
    settings = SolverSettings(dt=0.05, gamma=gamma, precision=precision, threads=1)
    Solver(grid, v_static, protocol.build_beams(), settings, psi0)   # compiled kernels loaded first
    tracemalloc.start()
    try:
        solver = Solver(grid, v_static, protocol.build_beams(), settings, psi0)
        held, _ = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    counted = memory.solver_bytes(grid.nx * grid.ny, precision, gamma > 0)
    assert _within(counted, held, SOLVER_FACTOR), (counted, held)
    assert solver.psi.dtype == np.dtype(precision)


@pytest.mark.parametrize("overrides", [
    ("grid.nx=128",),
    ("grid.nx=128", 'evolution.precision="complex64"', "evolution.damping=0.0"),
])
def test_the_estimate_meets_the_peak_of_a_small_run(tmp_path, overrides):
    warm = _protocol(tmp_path, overrides[1:])       # compiled kernels and plans loaded first
    pipeline.simulate(warm, tmp_path / "warm.h5")
    tracemalloc.start()
    try:
        protocol = _protocol(tmp_path, overrides)   # the grid's coordinates are counted too
        pipeline.simulate(protocol, tmp_path / "run.h5")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    estimate = memory.estimate_run_memory(protocol)
    assert _within(estimate.peak, peak, PEAK_FACTOR), (estimate.stages, peak)
    resumed = memory.estimate_run_memory(protocol, resume=True)
    assert "ground state" not in resumed.stages and resumed.peak < estimate.peak


def test_a_run_that_does_not_fit_is_refused_naming_the_grid(tmp_path):
    protocol = _protocol(tmp_path, ["grid.nx=128"])
    estimate = memory.estimate_run_memory(protocol)
    assert memory.check_memory(protocol, available=estimate.peak) == estimate
    with pytest.raises(SimulationError) as info:
        memory.check_memory(protocol, available=estimate.peak // 4)
    msg = str(info.value)
    assert "tiny.toml" in msg and "grid.nx = 128, grid.ny = 128" in msg
    assert f"{estimate.peak / 2**30:.3g} GiB" in msg and f"{estimate.peak // 4 / 2**30:.3g} GiB" in msg
    # a quarter of the memory holds a quarter of the points: half of nx
    assert "at most about 64 x 64 points (e.g. grid.nx = 64)" in msg
    assert 'evolution.precision = "complex64"' in msg and "no file was written" in msg


def test_simulate_checks_before_allocating_or_writing(tmp_path, monkeypatch):
    protocol = _protocol(tmp_path, ["grid.nx=1024"])
    monkeypatch.setattr(memory, "available_memory", lambda: (2**20, "a test's 1 MiB"))
    tracemalloc.start()
    try:
        with pytest.raises(SimulationError, match=r"grid\.nx = 1024.*1 MiB"):
            pipeline.simulate(protocol, tmp_path / "big.h5")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 8 * 1024 * 1024                  # not one float64 array of the grid
    assert not list(tmp_path.glob("big.h5*"))


def test_available_memory_is_what_the_system_reports():
    found = memory.available_memory()
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            total = int(re.search(r"MemTotal:\s+(\d+) kB", fh.read()).group(1)) * 1024
    except OSError:
        total = None
    if total is None:
        assert found is None or found[0] > 0
    else:
        assert found is not None and 0 < found[0] <= total and "MemAvailable" in found[1]
