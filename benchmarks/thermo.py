"""Timing of the thermo back end, measured in one process; prints ratios.

Monte Carlo part: single-vortex Metropolis moves per second for N = 40 (20 + 20) vortices in
the disk, compiled sampler (O(N) energy change per move, numba) against a straightforward
numpy implementation that recomputes the full O(N^2) energy for every proposed move.

Box part: the same compiled sampler in a rectangle (aspect 1.5), whose theta-function
kernels reach the loop through the same first-class function arguments as the disk's; printed
as moves per second and as the cost of a box move relative to a disk move.

Annulus part: the same in an annulus of radius ratio 0.3 with two quanta on its hole.

Run: ``python benchmarks/thermo.py``. Each part is a separate function returning a dict, so
further parts (e.g. density-of-states timing) can be added to ``PARTS``.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

# Run from a checkout: this file is itself called thermo.py, so its own directory must not
# shadow the package; put the repository root first instead.
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]
sys.path.insert(0, str(_HERE.parent))

from thermo.domains.annulus import Annulus  # noqa: E402
from thermo.domains.box import Box  # noqa: E402
from thermo.domains.disk import Disk  # noqa: E402
from thermo.domains.grid import GridDomain  # noqa: E402
from thermo.sampler import run_tempering  # noqa: E402

N_PLUS, N_MINUS = 20, 20
BETA = -0.05          # 1/E0; any beta works, this one is in the interesting negative range
CORE = 0.01


def _numpy_energy(u: np.ndarray, s: np.ndarray, iu: np.ndarray, ju: np.ndarray) -> float:
    """Disk energy recomputed from scratch with numpy (complex positions u)."""
    pair = np.log(np.abs(1 - u[iu] * np.conj(u[ju])) ** 2 / np.abs(u[iu] - u[ju]) ** 2)
    return float(np.log(1 - np.abs(u) ** 2).sum() + (s[iu] * s[ju] * pair).sum())


def numpy_metropolis(n_moves: int, rng: np.random.Generator, step: float = 0.3) -> tuple[float, float]:
    """Plain numpy Metropolis with full energy recomputation per move; returns (seconds, acc)."""
    n = N_PLUS + N_MINUS
    s = np.array([1] * N_PLUS + [-1] * N_MINUS)
    iu, ju = np.triu_indices(n, 1)
    # start from a configuration the compiled sampler would accept (non-overlapping cores)
    start = run_tempering(Disk(), N_PLUS, N_MINUS, [BETA], 1, CORE, rng, burn_in=0)
    u = start.positions[0, 0, :, 0] + 1j * start.positions[0, 0, :, 1]
    e = _numpy_energy(u, s, iu, ju)
    acc = 0
    t0 = time.perf_counter()
    for _ in range(n_moves):
        i = rng.integers(n)
        new = u[i] + step * complex(2 * rng.random() - 1, 2 * rng.random() - 1)
        if abs(new) >= 1 - CORE:
            continue
        others = np.delete(u, i)
        if np.min(np.abs(others - new)) < 2 * CORE:
            continue
        trial = u.copy()
        trial[i] = new
        e_new = _numpy_energy(trial, s, iu, ju)
        if rng.random() < np.exp(min(0.0, -BETA * (e_new - e))):
            u, e = trial, e_new
            acc += 1
    return time.perf_counter() - t0, acc / n_moves


def compiled_metropolis(n_sweeps: int, rng: np.random.Generator,
                        domain=None) -> tuple[float, int, float]:
    """Compiled sampler, one replica (default: the disk); returns (seconds, proposed moves,
    acceptance)."""
    domain = Disk() if domain is None else domain
    run_tempering(domain, N_PLUS, N_MINUS, [BETA], 10, CORE, rng, burn_in=0)   # compile/load cache
    t0 = time.perf_counter()
    res = run_tempering(domain, N_PLUS, N_MINUS, [BETA], n_sweeps, CORE, rng, burn_in=0, thin=100)
    dt = time.perf_counter() - t0
    return dt, n_sweeps * (N_PLUS + N_MINUS), float(res.acceptance[0])


def bench_monte_carlo(rng: np.random.Generator) -> dict:
    """Moves per second, compiled vs numpy, N = 40 in the disk."""
    n_np = 4000
    t_np, acc_np = numpy_metropolis(n_np, rng)
    t_c, moves_c, acc_c = compiled_metropolis(20000, rng)
    rate_np = n_np / t_np
    rate_c = moves_c / t_c
    return {"numpy moves/s": rate_np, "compiled moves/s": rate_c,
            "numpy acceptance": acc_np, "compiled acceptance": acc_c,
            "speed-up (compiled / numpy)": rate_c / rate_np}


def bench_box(rng: np.random.Generator) -> dict:
    """Moves per second in a box of aspect 1.5 against the disk, N = 40, compiled sampler."""
    t_d, moves_d, _ = compiled_metropolis(20000, rng)
    t_b, moves_b, acc_b = compiled_metropolis(1000, rng, Box(aspect=1.5))
    rate_d, rate_b = moves_d / t_d, moves_b / t_b
    return {"box moves/s": rate_b, "box acceptance": acc_b,
            "cost ratio (box / disk move)": rate_d / rate_b}


def bench_annulus(rng: np.random.Generator) -> dict:
    """Moves per second in an annulus (q = 0.3, two quanta on the hole) against the disk, N = 40:
    the prime function's product (18 factors at q = 0.3) in every pair term, generic move
    kernel."""
    t_d, moves_d, _ = compiled_metropolis(20000, rng)
    t_a, moves_a, acc_a = compiled_metropolis(1000, rng, Annulus(0.3, hole_winding=2))
    rate_d, rate_a = moves_d / t_d, moves_a / t_a
    return {"annulus moves/s": rate_a, "annulus acceptance": acc_a,
            "cost ratio (annulus / disk move)": rate_d / rate_a}


def _uniform_disk_grid(n: int, stride: int, cache_dir) -> GridDomain:
    """The unit disk as a mask on n x n nodes (spacing 2.2 / n), uniform density."""
    h = 2.2 / n
    x = (np.arange(n) - (n - 1) / 2) * h
    mask = x[None, :] ** 2 + x[:, None] ** 2 < 1.0
    return GridDomain(mask, np.ones(mask.shape), h, (x[0], x[0]), stride=stride,
                      cache_dir=cache_dir)


def _harmonic_run_domain() -> GridDomain:
    """The domain a run in a harmonic trap gets (gpe.field.traps._numerical: the relaxed ground
    state of a trap of omega = 0.05 mu/hbar, R = 28 xi, cut at 5%, 80 nodes, table every 4th,
    kept in the user's Green's-function cache)."""
    from gpe.field.traps.harmonic import HarmonicTrap
    from gpe.run.gas import domain_for_trap
    return domain_for_trap(HarmonicTrap(omega_x=0.05, omega_y=0.05)).domain


def _best_rates(domain, rng: np.random.Generator, repeats: int = 3) -> tuple[float, float, float]:
    """Best of ``repeats`` interleaved runs of the disk and of ``domain`` (moves/s each, and the
    domain's acceptance): interleaving and the best of three keep a shared machine's load
    swings out of the ratio."""
    disk, grid, acc = [], [], 0.0
    for _ in range(repeats):
        t, m, _ = compiled_metropolis(20000, rng)
        disk.append(m / t)
        t, m, acc = compiled_metropolis(4000, rng, domain)
        grid.append(m / t)
    return max(disk), max(grid), acc


def bench_grid(rng: np.random.Generator) -> dict:
    """Numerical Green's function: build time of a 128^2 grid (table every 4th node, fresh
    cache; wall clock and CPU time, the CPU time less sensitive to a shared machine), and
    Monte Carlo moves/s against the analytic disk, N = 40: the uniform 128^2 disk and the
    run's harmonic-trap domain (80 nodes, table every 4th)."""
    import tempfile
    with tempfile.TemporaryDirectory() as tmp:
        t0, c0 = time.perf_counter(), time.process_time()
        dom = _uniform_disk_grid(128, 4, tmp)
        t_build, c_build = time.perf_counter() - t0, time.process_time() - c0
        t0 = time.perf_counter()
        _uniform_disk_grid(128, 4, tmp)
        t_load = time.perf_counter() - t0
    rate_d, rate_g, acc_g = _best_rates(dom, rng)
    rate_dh, rate_h, _ = _best_rates(_harmonic_run_domain(), rng)
    return {"128^2 build s (fresh)": t_build, "128^2 build CPU s (all threads)": c_build,
            "128^2 load s (cached)": t_load,
            "grid moves/s": rate_g, "grid acceptance": acc_g,
            "cost ratio (grid / disk move)": rate_d / rate_g,
            "harmonic 80 moves/s": rate_h,
            "cost ratio (harmonic / disk)": rate_dh / rate_h}


PARTS = [("Monte Carlo, N = 40 (20+20), disk", bench_monte_carlo),
         ("Monte Carlo, N = 40 (20+20), box of aspect 1.5", bench_box),
         ("Monte Carlo, N = 40 (20+20), annulus q = 0.3", bench_annulus),
         ("Numerical Green's function: 128^2 build, Monte Carlo N = 40 vs disk", bench_grid)]


def main() -> None:
    rng = np.random.default_rng(2024)
    for title, func in PARTS:
        print(f"== {title}")
        for key, value in func(rng).items():
            print(f"  {key:32s} {value:12.4g}")


if __name__ == "__main__":
    main()
