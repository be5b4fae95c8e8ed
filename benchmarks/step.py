"""Time per real-time step of the solver, as ratios measured in one process.

For each grid size and precision this prints

* the solver's time per step (one moving beam, gamma > 0, advance() over many steps),
* its ratio to one forward+inverse FFT pair of the same array with the same backend,
* the speed-up over a straightforward numpy split step (np.fft.fft2/ifft2 and np.exp on whole
  arrays, two FFT pairs per step, the beam potential built as a 2D array every step),
* the cost of the default reproducible FFT planning (scipy.fft with the "auto" backend) over
  measured FFTW plans: the step time with ``fft_planning="reproducible"`` divided by that with
  ``"measured"`` (the reproducible solver is built first, so no wisdom reaches it),
* the cost of the stochastic projected GPE step (temperature > 0, gpe.field.stochastic) over
  the deterministic one, with the projector at 2.5 mu (``SPGPE/det``) and at the largest disk
  the grid holds, k_cut = pi/dx (``SPGPE max``): the noise of the projected modes is drawn per
  step, the projector itself costs nothing.

Targets on a 2-core machine at 512^2 complex128: step <= 2.0x the FFT pair, >= 6x faster than
the straightforward numpy step.  Usage:
``python benchmarks/step.py [--quick] [--threads N] [--sizes N ...] [--repeats R]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from gpe.field.fft import auto_threads, make_fft, planning_options  # noqa: E402
from gpe.field.grid import Grid  # noqa: E402
from gpe.field.solver import Solver, SolverSettings  # noqa: E402
from gpe.field.stochastic import largest_cutoff


class OrbitingBeam:
    """One Gaussian beam on a circle (stands in for gpe.field.traps.BeamSet)."""

    n_beams = 1

    def __init__(self, radius):
        self.radius = radius
        self.waists = np.array([4.0])

    def evaluate(self, t, amp, cx, cy):
        amp[0] = 2.0
        cx[0] = self.radius * np.cos(0.05 * t)
        cy[0] = self.radius * np.sin(0.05 * t)

    def max_height(self):
        return 2.0


def _best(fn, repeats, inner):
    """Best of ``repeats`` timings of ``inner`` calls (the minimum filters out other load)."""
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        for _ in range(inner):
            fn()
        best = min(best, (time.perf_counter() - start) / inner)
    return best


def numpy_step(psi, v_static, grid, beam, t, dt, gamma, g=1.0, mu=1.0):
    """Straightforward split step: whole-array numpy, first-order damped nonlinear factor."""
    amp, cx, cy = np.zeros(1), np.zeros(1), np.zeros(1)
    beam.evaluate(t + dt / 2, amp, cx, cy)
    v = v_static + amp[0] * np.exp(-2 * ((grid.X - cx[0]) ** 2 + (grid.Y - cy[0]) ** 2)
                                   / beam.waists[0] ** 2)
    half = np.exp(-(1j + gamma) * grid.k2 * dt / 4)
    psi = np.fft.ifft2(half * np.fft.fft2(psi))
    psi = psi * np.exp(-(1j + gamma) * (v + g * np.abs(psi) ** 2 - mu) * dt)
    return np.fft.ifft2(half * np.fft.fft2(psi))


def measure(n, precision, threads, steps, repeats):
    length = n * 0.5  # dx = 0.5 xi
    grid = Grid(n, n, length, length)
    r = np.hypot(grid.X, grid.Y)
    v_static = np.where(r < 0.4 * length, 0.0, 5.0)
    psi0 = np.where(r < 0.4 * length, 1.0, 0.0) * np.exp(0.01j * grid.X)
    beam = OrbitingBeam(0.2 * length)
    settings = SolverSettings(dt=0.02, gamma=0.01, precision=precision, threads=threads,
                              fft_planning="reproducible")
    solver = Solver(grid, v_static, beam, settings, psi0)   # the protocol's default planning
    timed = Solver(grid, v_static, beam, SolverSettings(
        dt=0.02, gamma=0.01, precision=precision, threads=threads, fft_planning="measured"), psi0)
    warm = [Solver(grid, v_static, beam, SolverSettings(
        dt=0.02, gamma=0.01, precision=precision, threads=threads, temperature=0.5,
        cutoff=cutoff, norm_per_atom=1e-3, fft_planning="reproducible"), psi0,
        rng=np.random.default_rng(0))
        for cutoff in (2.5, largest_cutoff(grid))]
    solver.advance(3)  # compile and warm the caches
    timed.advance(3)
    for w in warm:
        w.advance(3)

    fft = make_fft(grid.shape, np.dtype(precision), "auto", solver._threads,
                   **planning_options("reproducible"))
    a = fft.empty()
    a[...] = psi0

    def pair():
        fft.forward(a)
        fft.inverse(a, normalise=False)

    pair()
    psi = psi0.astype(precision)
    numpy_step(psi, v_static, grid, beam, 0.0, 0.02, 0.01)
    inner = max(1, steps // 10)
    # The three timings take turns within each repeat, so that load from other processes
    # (which comes and goes) reaches each of them alike; the best of the repeats is kept.
    t_step = t_fft = t_numpy = t_timed = t_warm = t_hot = np.inf
    for _ in range(repeats):
        t_step = min(t_step, _best(lambda: solver.advance(steps), 1, 1) / steps)
        t_warm = min(t_warm, _best(lambda: warm[0].advance(steps), 1, 1) / steps)
        t_hot = min(t_hot, _best(lambda: warm[1].advance(steps), 1, 1) / steps)
        t_timed = min(t_timed, _best(lambda: timed.advance(steps), 1, 1) / steps)
        t_fft = min(t_fft, _best(pair, 1, steps))
        t_numpy = min(t_numpy, _best(
            lambda: numpy_step(psi, v_static, grid, beam, 0.0, 0.02, 0.01), 1, inner))
    return t_step, t_fft, t_numpy, t_timed, t_warm, t_hot, solver._threads, fft.name


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small smoke run (64^2, 128^2)")
    parser.add_argument("--threads", type=int, default=None,
                        help="FFT/kernel threads (default: automatic by grid size)")
    parser.add_argument("--sizes", type=int, nargs="+", default=None,
                        help="grid sizes n (n x n) to measure; default 256 512 1024")
    parser.add_argument("--repeats", type=int, default=5,
                        help="timing repeats; the best is reported (default 5)")
    args = parser.parse_args(argv)
    sizes = args.sizes or ((64, 128) if args.quick else (256, 512, 1024))
    print(f"{'grid':>6} {'precision':>10} {'thr':>3} {'backend':>7} {'step ms':>8} "
          f"{'FFT pair ms':>11} {'step/FFT':>8} {'numpy ms':>9} {'speed-up':>8} {'repro/meas':>10} "
          f"{'SPGPE/det':>9} {'SPGPE max':>9}")
    for n in sizes:
        steps = 20 if args.quick else max(5, 2 ** 22 // (n * n) * 4)
        for precision in ("complex128", "complex64"):
            threads = args.threads if args.threads else auto_threads((n, n))
            t_step, t_fft, t_numpy, t_timed, t_warm, t_hot, used, backend = measure(
                n, precision, threads, steps, repeats=args.repeats)
            print(f"{n:>5}^2 {precision:>10} {used:>3} {backend:>7} {t_step * 1e3:8.2f} "
                  f"{t_fft * 1e3:11.2f} {t_step / t_fft:8.2f} {t_numpy * 1e3:9.2f} "
                  f"{t_numpy / t_step:8.1f} {t_step / t_timed:10.2f} {t_warm / t_step:9.2f} "
                  f"{t_hot / t_step:9.2f}")
    import numba  # already imported by gpe.field.kernels; the layer is known after the first kernel

    print(f"OMP_WAIT_POLICY={os.environ.get('OMP_WAIT_POLICY')}, "
          f"numba threading layer {numba.threading_layer()}")


if __name__ == "__main__":
    main()
