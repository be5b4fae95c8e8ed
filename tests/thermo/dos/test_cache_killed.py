"""Crash consistency of the density-of-states cache: builds SIGKILLed at seeded random moments
and in the middle of writing their file leave either no entry or a valid one, and two processes
building the same entry at once end with one valid entry."""

from __future__ import annotations

import time

import numpy as np
import pytest
from crash_children import dos_settings, kill_after, start

from thermo.domains.disk import Disk
from thermo.dos import cache as dos_cache

N_SWEEPS = 60000          # a build of ~1 s here, so that the kills land inside it
KEY = (3, 3, Disk(), 0.01)


def _entry(cache_dir):
    return dos_cache.cache_path(*KEY, cache_dir, dos_settings(N_SWEEPS))


def _valid(path) -> bool:
    dos, meta = dos_cache.load(path)          # SamplerError for a damaged file
    return (dos.n_plus, dos.n_minus) == (3, 3) and meta["key"] == repr(dos_cache.cache_key(*KEY))


@pytest.mark.slow
def test_builds_killed_at_random_moments_leave_no_entry_or_a_valid_one(tmp_path):
    cache_dir = tmp_path / "dos"
    rng = np.random.default_rng(20261205)
    outcomes = []
    for delay in rng.uniform(0.3, 2.5, size=3):
        proc = start("build_dos", cache_dir, N_SWEEPS)
        killed = kill_after(proc, float(delay))
        assert killed or proc.returncode == 0, proc.stderr.read().decode()
        path = _entry(cache_dir)
        outcomes.append((killed, path.exists()))
        if path.exists():
            assert _valid(path)
            path.unlink()                     # the next build starts from nothing again
    assert any(k for k, _ in outcomes)
    dos = dos_cache.load_or_build(*KEY, cache_dir=cache_dir, settings=dos_settings(N_SWEEPS))
    assert _valid(_entry(cache_dir)) and dos.n_plus == 3


def _kill_while_writing(cache_dir):
    """Start a build and SIGKILL it as soon as its temporary file appears (inside save)."""
    proc = start("build_dos", cache_dir, N_SWEEPS)
    while not (cache_dir.exists() and list(cache_dir.glob("*.part"))):
        if proc.poll() is not None:
            raise AssertionError(f"the build ended before writing: {proc.stderr.read().decode()}")
        time.sleep(0.001)
    proc.kill()
    proc.wait()


@pytest.mark.slow
def test_a_build_killed_while_writing_leaves_no_half_entry(tmp_path):
    cache_dir = tmp_path / "dos"
    _kill_while_writing(cache_dir)
    assert not _entry(cache_dir).exists()     # the rename never happened: no half file
    dos_cache.load_or_build(*KEY, cache_dir=cache_dir, settings=dos_settings(N_SWEEPS))
    assert _valid(_entry(cache_dir))


@pytest.mark.slow
def test_a_build_killed_while_writing_leaves_no_temporary_file_behind(tmp_path):
    cache_dir = tmp_path / "dos"
    _kill_while_writing(cache_dir)
    dos_cache.load_or_build(*KEY, cache_dir=cache_dir, settings=dos_settings(N_SWEEPS))
    assert list(cache_dir.glob("*.part")) == []


@pytest.mark.slow
def test_two_processes_building_the_same_entry_end_with_one_valid_entry(tmp_path):
    cache_dir = tmp_path / "dos"
    procs = [start("build_dos", cache_dir, N_SWEEPS) for _ in range(2)]
    for p in procs:
        assert p.wait() == 0, p.stderr.read().decode()
    assert [p.name for p in cache_dir.iterdir()] == [_entry(cache_dir).name]
    assert _valid(_entry(cache_dir))
