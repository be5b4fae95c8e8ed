"""Tests of thermo.dos.cache: the npz files, cache hits, one entry per effort, in-process reuse."""

import contextlib

import numpy as np
import pytest
from dos_samples import one_vortex_dos

from thermo.domains.disk import Disk
from thermo.dos import cache as dos_cache
from thermo.dos.build import DosSettings
from thermo.errors import SamplerError


@contextlib.contextmanager
def counting_builds():
    """Count the density-of-states builds that the cache starts (a spy on its ``build``)."""
    calls = []
    real = dos_cache.build

    def spy(*args, **kwargs):
        calls.append(args[:2])
        return real(*args, **kwargs)

    dos_cache.build = spy
    try:
        yield calls
    finally:
        dos_cache.build = real


# caching is what is tested here, not physics: a cheap 2+2 build is enough
N_PLUS, N_MINUS, CORE = 2, 2, 0.01
SETTINGS = DosSettings(n_temps=6, n_sweeps=300, n_boot=4)


@pytest.fixture(scope="module")
def small_gas(tmp_path_factory):
    cache = tmp_path_factory.mktemp("dos_cache")
    with counting_builds() as builds:
        d = dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=cache, seed=3,
                                    settings=SETTINGS)
    assert len(builds) == 1
    return d, cache


def test_save_load_roundtrip(tmp_path):
    d = one_vortex_dos(n_boot=5)
    path = tmp_path / "x.npz"
    dos_cache.save(d, path, ("k",))
    back, meta = dos_cache.load(path)
    assert meta["key"] == repr(("k",)) and meta["format_version"] == dos_cache.FORMAT_VERSION
    for name in ("betas", "energies", "f", "log_denom", "boot_f", "boot_counts"):
        np.testing.assert_array_equal(getattr(back, name), getattr(d, name))
    np.testing.assert_array_equal(back.mean_energy(0.1)[0], d.mean_energy(0.1)[0])


def test_other_format_version_is_refused(tmp_path, monkeypatch):
    path = tmp_path / "x.npz"
    dos_cache.save(one_vortex_dos(n_boot=2), path, ("k",))
    monkeypatch.setattr(dos_cache, "FORMAT_VERSION", dos_cache.FORMAT_VERSION + 1)
    with pytest.raises(SamplerError, match="x.npz: DOS cache format"):
        dos_cache.load(path)


def test_cache_hit_returns_identical_arrays_without_resampling(small_gas):
    d, cache = small_gas
    path = dos_cache.cache_path(N_PLUS, N_MINUS, Disk(), CORE, cache, SETTINGS)
    mtime = path.stat().st_mtime_ns
    with counting_builds() as builds:
        again = dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=cache, seed=99,
                                        settings=SETTINGS)
    assert not builds and path.stat().st_mtime_ns == mtime
    for name in ("betas", "energies", "f", "log_denom", "boot_f", "boot_counts"):
        np.testing.assert_array_equal(getattr(again, name), getattr(d, name))
    for k, v in d.observables.items():
        np.testing.assert_array_equal(again.observables[k], v)


def test_tables_are_stored_and_loaded_objects_reused(small_gas):
    """A second process reads the tables from the cache file instead of recomputing
    them; within a process the loaded object itself is reused."""
    d, cache = small_gas
    path = dos_cache.cache_path(N_PLUS, N_MINUS, Disk(), CORE, cache, SETTINGS)
    back, _ = dos_cache.load(path)
    assert back.has_tables()
    for name, value in d.tables.items():
        np.testing.assert_array_equal(back.tables[name], value)
    first = dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=cache,
                                    settings=SETTINGS)
    assert dos_cache.load_or_build(N_PLUS, N_MINUS, Disk(), CORE, cache_dir=cache,
                                   settings=SETTINGS) is first


def test_each_effort_is_its_own_entry_so_results_do_not_depend_on_the_cache_history(tmp_path):
    """A request is served only by a build made with exactly its settings: after a bigger
    build of the same gas, the smaller request still gets the build it would get in an empty
    cache (seeded from key and reach), bit for bit."""
    fresh = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path / "a",
                                    settings=SETTINGS)
    more = DosSettings(n_temps=6, n_sweeps=2 * SETTINGS.n_sweeps, n_boot=4)
    with counting_builds() as builds:
        big = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path / "b", settings=more)
        small = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path / "b",
                                        settings=SETTINGS)
        again = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path / "b",
                                        settings=SETTINGS)
    assert len(builds) == 2 and big.settings["n_sweeps"] == more.n_sweeps
    assert again is small and small.settings["n_sweeps"] == SETTINGS.n_sweeps
    for name in ("energies", "f", "boot_f"):
        np.testing.assert_array_equal(getattr(small, name), getattr(fresh, name))
    assert len(list((tmp_path / "b").glob("*.npz"))) == 2


def test_a_dead_writers_temporary_file_is_removed_by_the_next_save(tmp_path):
    """A temporary file named after a process that no longer runs (a writer SIGKILLed inside
    save) is deleted when the entry is saved again; a live writer's is left alone."""
    import os
    import subprocess
    import sys

    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    path = dos_cache.cache_path(1, 1, Disk(), CORE, tmp_path, SETTINGS)
    tmp_path.mkdir(exist_ok=True)
    stale = path.with_name(f"{path.name}.{int(dead.stdout)}.part")
    live = path.with_name(f"{path.name}.{os.getppid()}.part")
    stale.write_bytes(b"half a file")
    live.write_bytes(b"being written")
    dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path, settings=SETTINGS)
    assert not stale.exists() and live.exists() and path.exists()


@pytest.mark.parametrize("damage", ["truncated", "random bytes", "empty"])
def test_a_damaged_entry_is_named_then_rebuilt_once(tmp_path, damage):
    """A cache entry cut short by a killed writer (or overwritten) is reported by file name and
    rebuilt in place; the next call reads the rebuilt file without building again."""
    dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path, settings=SETTINGS)
    path = dos_cache.cache_path(1, 1, Disk(), CORE, tmp_path, SETTINGS)
    data = path.read_bytes()
    path.write_bytes({"truncated": data[: len(data) // 2], "random bytes": bytes(range(256)) * 40,
                      "empty": b""}[damage])
    dos_cache._LOADED.clear()           # as in a new process
    with pytest.raises(SamplerError, match=path.name):
        dos_cache.load(path)
    with counting_builds() as builds, pytest.warns(dos_cache.CacheWarning, match=path.name):
        rebuilt = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path, settings=SETTINGS)
    assert len(builds) == 1 and rebuilt.n_plus == 1
    dos_cache._LOADED.clear()
    with counting_builds() as builds:
        again = dos_cache.load_or_build(1, 1, Disk(), CORE, cache_dir=tmp_path, settings=SETTINGS)
    assert not builds
    np.testing.assert_array_equal(again.energies, rebuilt.energies)
