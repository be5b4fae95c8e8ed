"""Timing of the point-vortex integrator (thermo.dynamics): seconds of evolution of 40 vortices.

A 20 + 20 gas, uniform random positions (seeded), in an 87Rb condensate: disk of radius 40 um,
healing length 0.5 um (annihilation distance two core radii of 0.5 xi = 0.5 um). The scaled
time of the disk is s = t hbar / (m R^2), so 1 s of evolution is s = 0.454 here. Printed: wall
time of the first call (includes loading the compiled kernels), then of a second identical one,
with the steps taken and the vortices left; the same for a square box of side 80 um (theta-
function kernels, generic velocity loop) over a shorter time, and the cost per step relative to
the disk.

Run: ``python benchmarks/points.py`` from the repository root.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import scipy.constants as const

# keep the repository root first (benchmarks/thermo.py shadows the package name otherwise)
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]
sys.path.insert(0, str(_HERE.parent))

from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.dynamics.integrate import DynamicsSettings, advance, initial_state

MASS_RB87 = 86.909_180_53 * const.atomic_mass      # kg (AME2020)
HBAR_OVER_M = const.hbar / MASS_RB87                # m^2/s
XI_M = 0.5e-6


def _gas(domain, margin, seed=1):
    rng = np.random.default_rng(seed)
    pos = domain.sample_uniform(rng, 40, margin=margin)
    return initial_state(pos, np.array([1, -1] * 20), domain)


def _time(domain, length_m, seconds, alpha):
    s_end = seconds * HBAR_OVER_M / length_m ** 2
    core = XI_M / length_m
    settings = DynamicsSettings(alpha=alpha, annihilation_distance=2 * 0.5 * core)
    state = _gas(domain, 2 * core)
    out = []
    for _ in range(2):
        t0 = time.perf_counter()
        end = advance(state, s_end, domain, settings)
        out.append(time.perf_counter() - t0)
    return out, end


def main() -> None:
    print(f"87Rb, hbar/m = {HBAR_OVER_M:.4g} m^2/s; 20 + 20 vortices, rtol 1e-8")
    disk_cost = None
    for alpha in (0.0, 0.01):
        (first, second), end = _time(Disk(), 40e-6, 2.0, alpha)
        per_step = second / max(end.steps_taken + end.steps_rejected, 1)
        disk_cost = per_step if alpha == 0.0 else disk_cost
        print(f"disk R = 40 um, 2 s of evolution, alpha = {alpha}: wall {first:.3f} s (first "
              f"call), {second:.3f} s (second); {end.steps_taken} steps ({end.steps_rejected} "
              f"rejected), {end.n} vortices left, {end.annihilated} pairs annihilated, "
              f"{end.lost_to_wall} lost at the wall; {1e6 * per_step:.1f} us per step")
    (first, second), end = _time(Box(1.0), 80e-6, 0.2, 0.0)
    per_step = second / max(end.steps_taken + end.steps_rejected, 1)
    print(f"box 80 x 80 um, 0.2 s of evolution, alpha = 0: wall {first:.3f} s (first call), "
          f"{second:.3f} s (second); {end.steps_taken} steps, {end.n} vortices left; "
          f"{1e6 * per_step:.1f} us per step = {per_step / disk_cost:.1f} x the disk's")


if __name__ == "__main__":
    main()
