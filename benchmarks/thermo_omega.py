"""(beta, omega) tables of a 10+10 gas in a disk, and the cost of an estimate from a cached table.

Run: ``python benchmarks/thermo_omega.py [--effort quick|standard|thorough]``. Targets (the
issue's): the tables of a 10+10 gas in under 3 minutes on 2 cores, and an estimate of one
configuration from the cached table in under 0.1 s. Printed, never asserted:

* the build: sampling (replica exchange over the state grid), MBAR pooling with its bootstrap
  and the ln Z grid, with the exchange acceptance along beta and along omega;
* the table's precision: the bootstrap spread of ln Z over the grid, and of the fitted
  (beta~ N, omega~ / N) of a test ensemble drawn at a known state;
* per-configuration cost: microcanonical (beta, omega) of single configurations, and the
  ensemble fit (100 shots), from the table already in memory (the cache hit itself is timed
  separately: reading the npz).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))   # before the benchmarks/ folder

import numpy as np

from gpe.run.rotating import rotating_settings
from thermo.domains.disk import Disk
from thermo.rotation import cache
from thermo.rotation.estimate import (estimate_rotating_ensemble,
                                      estimate_rotating_single)
from thermo.rotation.sampler import run_rotating

CORE = 0.02
GAS = (10, 10)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--effort", default="quick", choices=("quick", "standard", "thorough"))
    args = parser.parse_args()
    settings = rotating_settings(args.effort)
    disk = Disk()
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        table = cache.load_or_build_table(*GAS, disk, CORE, cache_dir=tmp, settings=settings)
        t_build = time.perf_counter() - t0
        cache._LOADED.clear()                    # time a read from disk, not from memory
        t0 = time.perf_counter()
        table = cache.load_or_build_table(*GAS, disk, CORE, cache_dir=tmp, settings=settings)
        t_load = time.perf_counter() - t0
    print(f"{GAS[0]}+{GAS[1]} gas, effort {args.effort} ({settings.n_sweeps} sweeps, "
          f"{settings.n_betas} x {settings.n_omegas} states, {settings.n_boot} bootstrap "
          f"replicates): build {t_build:.1f} s (target < 180 s), read from the cache "
          f"{t_load:.2f} s")
    swaps = table.diagnostics["swap_acceptance"]
    sets = [s[np.isfinite(s)] for s in swaps]
    print("  exchange acceptance per pair set (beta even, beta odd, omega even, omega odd): "
          + ", ".join(f"{s.min():.2f}..{s.max():.2f}" for s in sets if s.size))
    reps = range(table.boot_log_denom.shape[0])
    lz = np.array([[table.log_z(b, w, r) - table.log_z(0.0, 0.0, r) for r in reps]
                   for b, w in zip(table.betas, table.omegas)])
    print(f"  bootstrap spread of ln Z(beta, omega) - ln Z(0, 0) at the sampled states: median "
          f"{np.median(lz.std(1)):.3g}, max {lz.std(1).max():.3g}")

    n = sum(GAS)
    truth = (-2.5, 0.3)
    rng = np.random.default_rng(1)
    res = run_rotating(disk, *GAS, [truth[0] / n], [truth[1] * n], 100 * 40, CORE, rng,
                       thin=40, burn_in=3000)
    configs = [(p, res.signs) for p in res.positions[0]]
    provider = (lambda a, b: table)
    estimate_rotating_single(*configs[0], disk, CORE, table_provider=provider)    # warm up
    t0, c0 = time.perf_counter(), time.process_time()
    singles = [estimate_rotating_single(*c, disk, CORE, table_provider=provider)
               for c in configs[:20]]
    t_single = (time.perf_counter() - t0) / 20
    c_single = (time.process_time() - c0) / 20     # CPU time: what a busy machine hides
    t0 = time.perf_counter()
    est = estimate_rotating_ensemble(configs, disk, CORE, table_provider=provider)
    t_ens = time.perf_counter() - t0
    print(f"  one configuration (microcanonical beta, omega): {1e3 * t_single:.0f} ms each "
          f"(CPU {1e3 * c_single:.0f} ms; target < 100 ms); e.g. beta~N {singles[0].beta_n:.3g}, omega~/N "
          f"{singles[0].omega_n:.3g}")
    print(f"  ensemble of {len(configs)} shots drawn at beta~N = {truth[0]}, omega~/N = "
          f"{truth[1]}: fit {1e3 * t_ens:.0f} ms; {est.verdict}")
    print(f"    table error (beta~N, omega~/N): {est.table_error[0] * n:.2g}, "
          f"{est.table_error[1] / n:.2g}")


if __name__ == "__main__":
    main()
