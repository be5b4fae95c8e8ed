"""Simulated camera images of a wavefunction: free expansion, column density, optics, pixels, noise.

:func:`render_frame` turns one frame psi (healing units) into what an absorption camera would
record, in this order:

1. **Free expansion** for a time of flight ``tof_ms``, by kinetic propagation with the
   interactions switched off: ``psi_k(t) = psi_k(0) exp(-i k^2 t / 2)`` (healing units) on a grid
   zero-padded to twice the field of view, so that the periodic box does not fold the spreading
   cloud back onto itself. Why this model: the cloud is quasi-2D, so on release the tightly
   confined axial direction expands within ~1/omega_z (0.16 ms at 1 kHz) and the 3D density,
   hence the mean-field energy, drops by orders of magnitude long before the in-plane motion
   matters; what is left is the in-plane free propagation of the field, which is exact for a
   non-interacting gas (the Gaussian test of tests/gpe/imaging/test_render.py checks it against
   sigma(t)^2 = sigma0^2 + (hbar t / m sigma0)^2). The interaction energy released in the plane
   during the first ~1/omega_z is left out; a self-similar (scaling) model is not used because
   it only rescales the Thomas-Fermi envelope and says nothing about how the cores open up,
   which is what the finder needs.
2. **Column density** |psi|^2: the field is already integrated along z (quasi-2D), in n0.
3. **Optics**: a Gaussian point-spread function of rms width ``psf_um`` (per axis), applied in
   Fourier space, then **pixelation**: the average over square pixels of side ``pixel_um``
   (a sinc transfer function), sampled at the pixel centres (cubic spline on the simulation
   grid). The field of view is the simulation box; pixel (i, j) has its centre at
   ``x = x_min + (j + 1/2) pixel``, ``y = y_min + (i + 1/2) pixel`` (row index grows with y).
4. **Shot noise**: the counts of a pixel are Poisson with mean ``counts_per_n0 * n/n0``;
   ``counts_per_n0`` is the number of detected counts of a pixel at the bulk density n0 (by
   default the atom number n0 * pixel^2 of that pixel: atom shot noise; a noisier camera is a
   smaller number).
5. **Velocity-selective (Bragg-like) channel**, optional: before release, a fraction
   ``(1 + tanh(v_a / bragg_width_c)) / 2`` of the atoms at each point is counted, v_a the local
   superfluid velocity along the axis ``bragg_axis`` (v = Im(psi* grad psi)/|psi|^2, in c); this
   image then goes through the same expansion of the density (the selected atoms are imaged with
   the others' envelope), optics, pixels and noise. Around a vortex of circulation s the flow
   along x is -s (y - y0)/r^2: the channel is brighter on one side of the core than on the
   other, and which side gives the sign. This is a model of the sign measurement in the spirit
   of velocity-selective Bragg imaging, not a simulation of the Bragg pulse.

Units: lengths in xi inside (um in the parameters that say so), times in hbar/mu (``tof_ms`` in
ms), densities in n0, velocities in c.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import ndimage

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.setup.units import HealingUnits

#: 16-bit images: counts are scaled so that the brightest pixel stays below this
MAX_COUNT = 65535


class ImagingError(VorthermError):
    """Invalid imaging parameters or images (file, key and what is accepted in the message)."""


@dataclass(frozen=True)
class Camera:
    """Imaging parameters of :func:`render_frame`.

    Attributes
    ----------
    pixel_um : side of a square pixel in the object plane.
    psf_um : rms width (per axis) of the Gaussian point-spread function; 0: perfect optics.
    tof_ms : time of flight of the free expansion; 0: in situ.
    counts_per_n0 : mean counts of a pixel at the bulk density n0 (shot noise); None: the
        pixel's atom number n0 * pixel^2; 0 or less is refused; ``noise=False`` in
        :func:`render_frame` gives the noiseless image.
    bragg_axis : "x", "y" or None (no velocity-selective channel).
    bragg_width_c : velocity width of the selection, in units of the sound speed c.

    Units: um, ms, counts, c.
    """

    pixel_um: float
    psf_um: float = 0.0
    tof_ms: float = 0.0
    counts_per_n0: float | None = None
    bragg_axis: str | None = None
    bragg_width_c: float = 0.2

    def __post_init__(self) -> None:
        if not (isinstance(self.pixel_um, (int, float)) and math.isfinite(self.pixel_um)
                and self.pixel_um > 0):
            raise ImagingError(f"pixel size pixel_um = {self.pixel_um!r}: accepted a pixel side "
                               "> 0 in micrometres (object plane), e.g. 0.5")
        for name in ("psf_um", "tof_ms"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ImagingError(f"{name} = {v!r}: accepted a finite number >= 0")
        if self.counts_per_n0 is not None and not (math.isfinite(self.counts_per_n0)
                                                   and self.counts_per_n0 > 0):
            raise ImagingError(f"counts_per_n0 = {self.counts_per_n0!r}: accepted a number of "
                               "counts > 0 per pixel at the bulk density (or none: atom number)")
        if self.bragg_axis not in (None, "x", "y"):
            raise ImagingError(f"bragg_axis = {self.bragg_axis!r}: accepted 'x', 'y' or none")
        if not (math.isfinite(self.bragg_width_c) and self.bragg_width_c > 0):
            raise ImagingError(f"bragg_width_c = {self.bragg_width_c!r}: accepted a velocity "
                               "width > 0 in units of the sound speed")

    def as_attrs(self) -> dict:
        """The parameters as HDF5 attributes (None written as an empty string)."""
        return {k: ("" if v is None else v) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class Rendered:
    """One rendered frame.

    Attributes
    ----------
    density : (ny_px, nx_px) counts of the absorption image (float, Poisson noise included).
    bragg : the same for the velocity-selective channel, or None.
    counts_per_n0 : counts of a pixel at the bulk density n0 (to read the image in n0).
    x0_xi, y0_xi : coordinates of the corner (lower edge) of pixel (0, 0), in xi.
    pixel_xi : pixel side in xi.

    Units: counts; xi.
    """

    density: np.ndarray
    bragg: np.ndarray | None
    counts_per_n0: float
    x0_xi: float
    y0_xi: float
    pixel_xi: float

    def to_pixels(self, x_xi, y_xi) -> tuple[np.ndarray, np.ndarray]:
        """Simulation coordinates -> pixel coordinates (column, row), centres at integers."""
        return ((np.asarray(x_xi, dtype=float) - self.x0_xi) / self.pixel_xi - 0.5,
                (np.asarray(y_xi, dtype=float) - self.y0_xi) / self.pixel_xi - 0.5)


def expand_free(psi: np.ndarray, grid: Grid, time: float) -> np.ndarray:
    """Free (non-interacting) expansion of psi for ``time``, on a grid padded to twice its size.

    .. math:: \\psi_k(t) = \\psi_k(0)\\, e^{-i k^2 t / 2}

    Returns the field on the original grid (the padding is cropped). Units: time in hbar/mu.
    """
    if time == 0:
        return np.asarray(psi, dtype=np.complex128)
    ny, nx = psi.shape
    padded = np.zeros((2 * ny, 2 * nx), dtype=np.complex128)
    padded[ny // 2: ny // 2 + ny, nx // 2: nx // 2 + nx] = psi
    kx = 2 * np.pi * np.fft.fftfreq(2 * nx, d=grid.dx)
    ky = 2 * np.pi * np.fft.fftfreq(2 * ny, d=grid.dy)
    k2 = ky[:, None] ** 2 + kx[None, :] ** 2
    out = np.fft.ifft2(np.fft.fft2(padded) * np.exp(-0.5j * k2 * time))
    return out[ny // 2: ny // 2 + ny, nx // 2: nx // 2 + nx]


def flow_along(psi: np.ndarray, grid: Grid, axis: str, floor: float = 1e-6) -> np.ndarray:
    """Superfluid velocity along ``axis``: v = Im(psi* d psi)/|psi|^2 (spectral derivative).

    Where |psi|^2 < ``floor`` (no fluid) the velocity is set to 0. Units: c.
    """
    if axis == "x":
        k = 2 * np.pi * np.fft.fftfreq(psi.shape[1], d=grid.dx)[None, :]
    else:
        k = 2 * np.pi * np.fft.fftfreq(psi.shape[0], d=grid.dy)[:, None]
    dpsi = np.fft.ifft2(1j * k * np.fft.fft2(psi))
    n = np.abs(psi) ** 2
    j = np.imag(np.conj(psi) * dpsi)
    return np.where(n > floor, j / np.maximum(n, floor), 0.0)


def optics_and_pixels(density: np.ndarray, grid: Grid, psf_xi: float, pixel_xi: float
                      ) -> tuple[np.ndarray, float, float]:
    """Blur with the Gaussian PSF, average over pixels, sample at the pixel centres.

    .. math:: \\tilde n(k) \\to \\tilde n(k)\\, e^{-k^2 \\sigma^2/2}\\,
              \\mathrm{sinc}(k_x p / 2\\pi)\\, \\mathrm{sinc}(k_y p / 2\\pi)

    Returns (image (ny_px, nx_px) in n0, x0, y0 of the corner of pixel (0, 0)). Units: xi, n0.
    """
    ny, nx = density.shape
    kx = 2 * np.pi * np.fft.fftfreq(nx, d=grid.dx)[None, :]
    ky = 2 * np.pi * np.fft.fftfreq(ny, d=grid.dy)[:, None]
    transfer = (np.exp(-0.5 * (kx ** 2 + ky ** 2) * psf_xi ** 2)
                * np.sinc(kx * pixel_xi / (2 * np.pi)) * np.sinc(ky * pixel_xi / (2 * np.pi)))
    smooth = np.real(np.fft.ifft2(np.fft.fft2(density) * transfer))
    npx_x = math.floor(grid.length_x / pixel_xi + 1e-9)
    npx_y = math.floor(grid.length_y / pixel_xi + 1e-9)
    if npx_x < 8 or npx_y < 8:
        raise ImagingError(f"pixel size {pixel_xi:g} xi leaves {npx_x} x {npx_y} pixels over the "
                           f"{grid.length_x:g} x {grid.length_y:g} xi field of view; accepted: "
                           "at least 8 x 8 pixels (a smaller pixel_um)")
    x0 = float(grid.x[0]) + 0.5 * (grid.length_x - npx_x * pixel_xi)
    y0 = float(grid.y[0]) + 0.5 * (grid.length_y - npx_y * pixel_xi)
    cols = (x0 + (np.arange(npx_x) + 0.5) * pixel_xi - grid.x[0]) / grid.dx
    rows = (y0 + (np.arange(npx_y) + 0.5) * pixel_xi - grid.y[0]) / grid.dy
    rr, cc = np.meshgrid(rows, cols, indexing="ij")
    image = ndimage.map_coordinates(smooth, [rr, cc], order=3, mode="grid-wrap")
    return np.maximum(image, 0.0), x0, y0


def render_frame(psi: np.ndarray, grid: Grid, units: HealingUnits, camera: Camera,
                 rng: np.random.Generator | None = None, noise: bool = True) -> Rendered:
    """What a camera records of one frame (see the module docstring for the steps).

    Parameters
    ----------
    psi : (ny, nx) wavefunction in sqrt(n0).
    grid, units : the run's grid and SI factors.
    camera : the imaging parameters.
    rng : generator for the shot noise (needed when ``noise``).
    noise : False gives the mean counts (no Poisson draw).

    Returns
    -------
    Rendered

    Units: psi in sqrt(n0); camera in um, ms; output in counts.
    """
    psi = np.asarray(psi)
    if psi.shape != grid.shape:
        raise ImagingError(f"psi has shape {psi.shape}; the grid is {grid.shape} (ny, nx)")
    if noise and rng is None:
        raise ImagingError("render_frame: shot noise needs a numpy.random.Generator (rng)")
    um = units.length_m * 1e6
    pixel_xi, psf_xi = camera.pixel_um / um, camera.psf_um / um
    counts = camera.counts_per_n0
    if counts is None:
        counts = units.density_m2 * (camera.pixel_um * 1e-6) ** 2
    tof = units.ms_to_time(camera.tof_ms)
    expanded = expand_free(psi, grid, tof)
    n_image, x0, y0 = optics_and_pixels(np.abs(expanded) ** 2, grid, psf_xi, pixel_xi)
    bragg = None
    if camera.bragg_axis is not None:
        v = flow_along(np.asarray(psi, dtype=np.complex128), grid, camera.bragg_axis)
        fraction = 0.5 * (1.0 + np.tanh(v / camera.bragg_width_c))
        # the selected atoms keep their place in the expanded cloud: the fraction measured in
        # situ multiplies the expanded density (a model, see the module docstring)
        selected = np.abs(expanded) ** 2 * fraction
        bragg, _, _ = optics_and_pixels(selected, grid, psf_xi, pixel_xi)
    peak = float(max(n_image.max(), 1e-300))
    counts = min(counts, 0.9 * MAX_COUNT / peak)     # 16 bits must hold the brightest pixel
    density = n_image * counts
    bragg_counts = None if bragg is None else bragg * counts
    if noise:
        density = rng.poisson(density).astype(np.float64)
        if bragg_counts is not None:
            bragg_counts = rng.poisson(bragg_counts).astype(np.float64)
    return Rendered(density=density, bragg=bragg_counts, counts_per_n0=float(counts),
                    x0_xi=x0, y0_xi=y0, pixel_xi=pixel_xi)
