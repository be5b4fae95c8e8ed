"""Time the density-image vortex finder on a 512^2 absorption image with ~100 cores.

The image is rendered (gpe.imaging.render: 0.3 um PSF, pixels of the simulation grid's size,
400 counts per pixel at the bulk density, shot noise, a velocity-selective channel) from a disk
of fluid with 100 imprinted cores. Prints the time of one find_cores call (median of repeats),
on the density alone and with the velocity image and the optics (step 4c's depth test), the
ratio to one 512^2 FFT of the image, and how many of the cores were found.
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout

from gpe.field.grid import Grid
from gpe.imaging.finder import find_cores
from gpe.imaging.pipeline import expected_core_px, optics_px
from gpe.imaging.render import Camera, render_frame
from gpe.setup.units import HealingUnits

UNITS = HealingUnits(mass_kg=1.4431608971788639e-25, mu_J=2.761298e-31,
                     g2d_Jm2=6.018684450476965e-45)   # 87Rb, mu = 20 nK, f_z = 1 kHz


def rendered(n: int = 512, length: float = 256.0, n_vortices: int = 100, seed: int = 1):
    rng = np.random.default_rng(seed)
    grid = Grid(n, n, length, length)
    radius = 0.45 * length
    psi = np.tanh(np.maximum(radius - np.hypot(grid.X, grid.Y), 0) / np.sqrt(2)).astype(complex)
    pts = []
    while len(pts) < n_vortices:                 # cores at least 6 xi apart, 4 xi from the wall
        p = rng.uniform(-radius, radius, 2)
        if np.hypot(*p) < radius - 4 and all(np.hypot(*(p - q)) >= 6 for q in pts):
            pts.append(p)
    for k, (x0, y0) in enumerate(pts):
        dx, dy = grid.X - x0, grid.Y - y0
        r2 = dx * dx + dy * dy
        psi *= np.sqrt(r2 / (r2 + 1.0)) * np.exp(1j * (1 if k % 2 else -1) * np.arctan2(dy, dx))
    um = UNITS.length_m * 1e6
    camera = Camera(pixel_um=grid.dx * um, psf_um=0.3, counts_per_n0=400.0, bragg_axis="x")
    optics = optics_px(camera.pixel_um, camera.psf_um)
    return (render_frame(psi, grid, UNITS, camera, rng), expected_core_px(camera, UNITS),
            optics, len(pts))


def median_time(fn, repeats=7):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def main() -> None:
    img, core, optics, n_true = rendered()
    find_cores(img.density, core)                                   # warm-up (imports, caches)
    t_plain, found = median_time(lambda: find_cores(img.density, core))
    t_sign, found_s = median_time(lambda: find_cores(img.density, core, bragg=img.bragg,
                                                     optics_px=optics))
    t_fft, _ = median_time(lambda: np.fft.fft2(img.density))
    print(f"image {img.density.shape[1]} x {img.density.shape[0]} pixels, {n_true} cores, "
          f"core width {core:.2f} px")
    print(f"find_cores, density only:        {t_plain * 1e3:7.1f} ms  "
          f"({t_plain / t_fft:5.1f} x one FFT), {len(found)} found")
    print(f"with velocity image and optics:  {t_sign * 1e3:7.1f} ms  "
          f"({t_sign / t_fft:5.1f} x one FFT), {len(found_s)} found")
    print(f"target: under 200 ms per 512^2 image -> "
          f"{'met' if max(t_plain, t_sign) < 0.2 else 'NOT met'} on this machine")


if __name__ == "__main__":
    main()
