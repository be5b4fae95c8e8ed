"""Wall time to build beta(E) for a 20+20 neutral gas in a disk to +-0.02 in beta~ N.

Run: ``python benchmarks/thermo_dos.py [--budget SECONDS]``. Target (common practice for an
interactive tool): under 60 s on 2 cores. The sweep count is doubled while the predicted
time of the next build still fits the budget and the worst bootstrap standard error of
N beta(E) exceeds the tolerance. The total time is what a user waits (sampling, MBAR,
bootstrap and the tables of thermo.dos.tables).

Two estimates of beta(E) are reported, each with its real bootstrap error:

* microcanonical beta(E) = dS/dE (``DensityOfStates.beta_micro``) by two methods: the
  saddle-point (cumulant) form beta_c - kappa3/(2 kappa2^2) (the default, O(1/N^2)
  remainder) and the kernel estimate of d ln g/dE, whose error grows at the ends of the
  energy range where few samples are left to differentiate;
* the canonical inverse beta_c(E), <E>(beta_c) = E, whose error is
  SE(<E>) / Var(E) (delta method on the bootstrap error of <E>). It differs from dS/dE by
  O(1/N) in beta (the finite-N ensemble difference), so the report also says where the two
  agree within their combined errors.

For each, the printout gives the range of energies (and of beta~ N) over which N SE <= the
tolerance holds, and what lies outside.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

# benchmarks/thermo.py would shadow the thermo package when this file is run as a script
# (the script's directory comes first on sys.path), so put the repository root first.
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))


def _longest_run(ok: np.ndarray) -> tuple[int, int] | None:
    """(first, last) index of the longest run of True, or None."""
    best, start = None, None
    for i, v in enumerate(np.append(ok, False)):
        if v and start is None:
            start = i
        elif not v and start is not None:
            if best is None or i - 1 - start > best[1] - best[0]:
                best = (start, i - 1)
            start = None
    return best


def precision_report(d, tolerance: float) -> dict:
    """Where N SE(beta) <= tolerance, for beta_micro(E) and the canonical inverse.

    Units: E in E0, beta~ N dimensionless.
    """
    n = d.n_vortices
    t = d.tables
    out = {}
    e, bs, bs_err = t["energy"], t["beta_saddle"], t["beta_saddle_err"]
    ok = np.isfinite(bs_err) & (n * bs_err <= tolerance)
    run = _longest_run(ok)
    out["saddle"] = None if run is None else dict(
        e=(float(e[run[0]]), float(e[run[1]])),
        beta_n=(float(n * bs[run[0]]), float(n * bs[run[1]])))
    out["saddle_worst_n_se"] = float(np.nanmax(n * bs_err))
    e, bm, bm_err = t["energy"], t["beta_micro"], t["beta_micro_err"]
    ok = np.isfinite(bm_err) & (n * bm_err <= tolerance)
    run = _longest_run(ok)
    out["micro"] = None if run is None else dict(
        e=(float(e[run[0]]), float(e[run[1]])),
        beta_n=(float(n * bm[run[0]]), float(n * bm[run[1]])))
    out["micro_worst_n_se"] = float(np.nanmax(n * bm_err))
    out["micro_e_span"] = (float(e[0]), float(e[-1]))
    beta, mean, mean_err, var = t["beta"], t["mean_energy"], t["mean_energy_err"], t["var_energy"]
    can_err = mean_err / var
    ok = np.isfinite(can_err) & (n * can_err <= tolerance)
    run = _longest_run(ok)
    out["canonical"] = None if run is None else dict(
        e=(float(mean[run[0]]), float(mean[run[1]])),
        beta_n=(float(n * beta[run[0]]), float(n * beta[run[1]])))
    out["canonical_worst_n_se"] = float(np.nanmax(n * can_err))
    # agreement of the two at the energies of the beta grid (interior, both finite)
    bm_at, bm_err_at = d.beta_micro(mean, method="kernel")
    bs_at, bs_err_at = d.beta_micro(mean, method="saddle")
    z = np.abs(bm_at - beta) / np.hypot(bm_err_at, can_err)
    good = np.isfinite(z)
    out["agree_fraction"] = float(np.mean(z[good] < 2.0)) if good.any() else float("nan")
    out["max_n_difference"] = float(np.nanmax(n * np.abs(bm_at - beta)))
    z = np.abs(bm_at - bs_at) / np.hypot(bm_err_at, bs_err_at)
    good = np.isfinite(z)
    out["saddle_kernel_agree"] = float(np.mean(z[good] < 2.0)) if good.any() else float("nan")
    # N SE of both at a few beta~N (dS/dE read at the energy <E>(beta))
    marks = np.array([-4.5, -4, -3, -2, -1, 0, 1, 2, 4, 8, 16, 24, 32, 40, 80], float)
    marks = marks[(marks >= n * beta[0] - 1e-9) & (marks <= n * beta[-1] + 1e-9)]
    out["by_beta_n"] = [(float(m), float(n * np.interp(m / n, beta, bs_err_at)),
                         float(n * np.interp(m / n, beta, bm_err_at)),
                         float(n * np.interp(m / n, beta, can_err))) for m in marks]
    return out


def time_dos_build(n_plus: int = 20, n_minus: int = 20, core_radius: float = 0.01,
                   tolerance: float = 0.02, n_sweeps: int = 1000, budget_s: float = 60.0,
                   seed: int = 1) -> dict:
    """Build the density of states (fresh cache) and measure the precision of beta(E).

    Returns a dict with the attempts (sweeps, wall times, precision report) and the
    cache-hit time. Units: seconds; beta in 1/E0.
    """
    from thermo.domains.disk import Disk
    from thermo.dos import model as dosmod
    from thermo.dos import cache as dos_cache

    out = {"attempts": []}
    t_total = time.perf_counter()
    with tempfile.TemporaryDirectory() as cache:
        while True:
            settings = dosmod.DosSettings(n_sweeps=n_sweeps, n_boot=30)
            t0 = time.perf_counter()
            d = dosmod.load_or_build(n_plus, n_minus, Disk(), core_radius, cache_dir=cache,
                                     seed=seed, settings=settings)
            t_build = time.perf_counter() - t0
            rep = precision_report(d, tolerance)
            out["attempts"].append(dict(n_sweeps=n_sweeps, build_s=t_build, report=rep))
            spent = time.perf_counter() - t_total
            done = rep["saddle_worst_n_se"] <= tolerance
            # the next build costs about twice this one; stop if it would break the budget
            if done or spent + 2.2 * t_build > budget_s:
                break
            n_sweeps *= 2
        out["total_s"] = time.perf_counter() - t_total
        dos_cache._LOADED.clear()         # measure a fresh process's cache hit (file read)
        t0 = time.perf_counter()
        dosmod.load_or_build(n_plus, n_minus, Disk(), core_radius, cache_dir=cache,
                             settings=settings)
        out["cache_hit_s"] = time.perf_counter() - t0
    out["beta_range_times_n"] = (d.beta_range[0] * d.n_vortices, d.beta_range[1] * d.n_vortices)
    out["diagnostics"] = {k: np.asarray(v) for k, v in d.diagnostics.items()}
    return out


def _fmt(r):
    if r is None:
        return "nowhere"
    return (f"E in [{r['e'][0]:.1f}, {r['e'][1]:.1f}] E0, beta~N from {r['beta_n'][0]:+.2f} "
            f"to {r['beta_n'][1]:+.2f}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=float, default=60.0, help="wall-time budget, seconds")
    ap.add_argument("--sweeps", type=int, default=1000, help="sweeps of the first build")
    args = ap.parse_args()
    res = time_dos_build(budget_s=args.budget, n_sweeps=args.sweeps)
    for a in res["attempts"]:
        r = a["report"]
        print(f"n_sweeps={a['n_sweeps']:6d}  build+tables {a['build_s']:6.1f} s  "
              f"worst N*SE: dS/dE saddle {r['saddle_worst_n_se']:.3f}, kernel "
              f"{r['micro_worst_n_se']:.3f}, canonical inverse "
              f"{r['canonical_worst_n_se']:.3f}")
    r = res["attempts"][-1]["report"]
    print(f"total {res['total_s']:.1f} s (budget {args.budget:.0f} s); ladder beta~N in "
          f"[{res['beta_range_times_n'][0]:.2f}, {res['beta_range_times_n'][1]:.2f}], "
          f"energies of the ladder [{r['micro_e_span'][0]:.1f}, {r['micro_e_span'][1]:.1f}] E0")
    print(f"  +-0.02 in beta~N, dS/dE saddle:      {_fmt(r['saddle'])}")
    print(f"  +-0.02 in beta~N, dS/dE kernel:      {_fmt(r['micro'])}")
    print(f"  +-0.02 in beta~N, canonical inverse: {_fmt(r['canonical'])}")
    print(f"  dS/dE and canonical inverse agree within 2 combined SE at "
          f"{100 * r['agree_fraction']:.0f}% of the beta grid; max N|difference| = "
          f"{r['max_n_difference']:.2f} (finite-N ensemble difference, not an error)")
    print(f"  saddle and kernel dS/dE agree within 2 combined SE at "
          f"{100 * r['saddle_kernel_agree']:.0f}% of the beta grid")
    print("  beta~N   N*SE dS/dE saddle   N*SE dS/dE kernel   N*SE canonical inverse")
    for m, a, k, b in r["by_beta_n"]:
        print(f"  {m:+6.1f}   {a:17.3f}   {k:17.3f}   {b:17.3f}")
    diag = res["diagnostics"]
    if "swap_acceptance" in diag:
        sw = diag["swap_acceptance"]
        print(f"  swap acceptance min {sw.min():.2f} median {np.median(sw):.2f}; "
              f"ESS min {np.nanmin(diag.get('ess', np.nan)):.0f}")
    print(f"  cache hit (fresh process, file read) {res['cache_hit_s']:.2f} s")


if __name__ == "__main__":
    main()
