"""Time vortex detection on a 1024^2 frame with ~200 vortices inside a disk of fluid.

Prints the time per frame (median of repeats) for the default (closing background) and for a
given background, and the ratio to one np.angle call on the same frame (the unavoidable part).
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from gpe.analysis.vortices import find_vortices  # noqa: E402


def synthetic_frame(n: int = 1024, length: float = 256.0, n_vortices: int = 200, seed: int = 1):
    rng = np.random.default_rng(seed)
    x = (np.arange(n) - n / 2) * (length / n)
    X, Y = np.meshgrid(x, x, indexing="xy")
    radius = 0.45 * length
    psi = np.ones((n, n), dtype=np.complex128)
    r0 = radius * np.sqrt(rng.uniform(0, 0.8, n_vortices))
    th = rng.uniform(0, 2 * np.pi, n_vortices)
    for k in range(n_vortices):
        dxk, dyk = X - r0[k] * np.cos(th[k]), Y - r0[k] * np.sin(th[k])
        r2 = dxk ** 2 + dyk ** 2
        psi *= np.sqrt(r2 / (r2 + 1.0)) * np.exp(1j * (1 if k % 2 else -1) * np.arctan2(dyk, dxk))
    envelope = 0.5 * (1 - np.tanh(np.hypot(X, Y) - radius))
    psi *= envelope
    # phase noise outside the fluid, where a simulation leaves numerical dust
    noise = 1e-8 * (rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    return x, psi + noise, envelope ** 2


def best_of(fn, repeats=7):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def main():
    x, psi, background = synthetic_frame()
    find_vortices(psi, x, x)  # warm-up
    t_default, det = best_of(lambda: find_vortices(psi, x, x))
    t_bg, det_bg = best_of(lambda: find_vortices(psi, x, x, background=background))
    t_angle, _ = best_of(lambda: np.angle(psi))
    print(f"1024^2 frame, {len(det)} vortices found (200 imprinted), "
          f"{len(det_bg)} with the given background")
    print(f"find_vortices, closing background : {1e3 * t_default:7.1f} ms "
          f"({t_default / t_angle:5.1f} x one np.angle)")
    print(f"find_vortices, given background   : {1e3 * t_bg:7.1f} ms "
          f"({t_bg / t_angle:5.1f} x one np.angle)")
    print(f"np.angle alone                    : {1e3 * t_angle:7.1f} ms")


if __name__ == "__main__":
    main()
