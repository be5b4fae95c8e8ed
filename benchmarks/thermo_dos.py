"""Wall time to build beta(E) for a 20+20 neutral gas in a disk to +-0.02 in beta~ N.

Run: ``python benchmarks/thermo_dos.py``. Target (common practice for an interactive tool):
under 60 s on 2 cores. The sweep count is doubled until the largest bootstrap standard
error of N beta_micro(E), over energies whose canonical beta lies in the ladder range, is
at most the tolerance (or the time budget is spent); the total time is what a user waits.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

# benchmarks/thermo.py would shadow the thermo package when this file is run as a script
# (the script's directory comes first on sys.path), so put the repository root first.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def time_dos_build(n_plus: int = 20, n_minus: int = 20, core_radius: float = 0.01,
                   tolerance: float = 0.02, n_sweeps: int = 2000, budget_s: float = 600.0,
                   n_energies: int = 25, seed: int = 1) -> dict:
    """Build the density of states (fresh cache) and measure the precision of beta(E).

    Returns a dict with the wall times, sweeps used, the worst N * SE(beta_micro) and the
    cache-hit time. Units: seconds; beta in 1/E0.
    """
    from thermo.domains import Disk
    from thermo import dos as dosmod

    n = n_plus + n_minus
    out = {"attempts": []}
    t_total = time.perf_counter()
    with tempfile.TemporaryDirectory() as cache:
        while True:
            settings = dosmod.DosSettings(n_sweeps=n_sweeps, n_boot=30)
            t0 = time.perf_counter()
            d = dosmod.load_or_build(n_plus, n_minus, Disk(), core_radius, cache_dir=cache,
                                     seed=seed, settings=settings)
            t_build = time.perf_counter() - t0
            lo, hi = d.energy_range()
            e = np.linspace(lo, hi, n_energies + 2)[1:-1]
            t0 = time.perf_counter()
            beta, err = d.beta_micro(e)
            t_eval = time.perf_counter() - t0
            worst = float(np.nanmax(err) * n)
            out["attempts"].append(dict(n_sweeps=n_sweeps, build_s=t_build, eval_s=t_eval,
                                        worst_n_se=worst))
            spent = time.perf_counter() - t_total
            if worst <= tolerance or spent > budget_s:
                break
            n_sweeps *= 2
        t0 = time.perf_counter()
        dosmod.load_or_build(n_plus, n_minus, Disk(), core_radius, cache_dir=cache,
                             settings=settings)
        out["cache_hit_s"] = time.perf_counter() - t0
    out["total_s"] = time.perf_counter() - t_total
    out["reached"] = worst <= tolerance
    out["beta_range_times_n"] = (d.beta_range[0] * n, d.beta_range[1] * n)
    out["n_se_by_energy"] = (err * n).tolist()
    return out


def main() -> None:
    res = time_dos_build()
    for a in res["attempts"]:
        print(f"n_sweeps={a['n_sweeps']:6d}  build {a['build_s']:7.1f} s  beta(E) eval "
              f"{a['eval_s']:5.2f} s  worst N*SE(beta) = {a['worst_n_se']:.4f}")
    print(f"total {res['total_s']:.1f} s (target < 60 s) for +-0.02 in beta~N: "
          f"{'reached' if res['reached'] else 'NOT reached'}; ladder beta~N in "
          f"[{res['beta_range_times_n'][0]:.2f}, {res['beta_range_times_n'][1]:.2f}]; "
          f"cache hit {res['cache_hit_s']:.2f} s "
          f"(ratio build/hit = {res['attempts'][-1]['build_s'] / res['cache_hit_s']:.0f})")


if __name__ == "__main__":
    main()
