r"""Kinetic-energy spectra of a 2D condensate: incompressible, compressible, quantum pressure.

The density-weighted velocity :math:`\mathbf u = \sqrt{n}\,\mathbf v =
\mathrm{Im}(\psi^* \nabla\psi)/|\psi|` (hbar/m = 1) is split in Fourier space into a
divergence-free (incompressible) and a curl-free (compressible) part,
:math:`\mathbf u^c_k = \hat k(\hat k\cdot\mathbf u_k)`, :math:`\mathbf u^i_k = \mathbf u_k -
\mathbf u^c_k` (Bradley & Anderson, PRX 2, 041001 (2012)). The uniform (k = 0) mode is
divergence- and curl-free; it is counted in the incompressible part. The quantum-pressure
field is :math:`\nabla\sqrt n`, with the same spectral treatment.

Spectra are shell averages on the FFT grid: shell m holds the N_m modes with
:math:`(m - 1/2)\,\delta k \le |k| < (m + 1/2)\,\delta k`, :math:`\delta k = 2\pi/\max(L_x,
L_y)`; a shell's mean power is multiplied by the number of modes the continuum annulus holds,
:math:`A_m/(\delta k_x \delta k_y)` with :math:`A_m = 2\pi m\,\delta k^2` (:math:`\pi\delta k^2/4`
for m = 0):

.. math:: E(k_m) = \frac12 \frac{\Delta A}{N}\,\frac{A_m}{N_m\,\delta k_x\delta k_y}
          \sum_{\rm shell} |\mathbf u_k|^2 / \delta k

(numpy's unnormalised FFT, N grid points, cell area dA).  A raw shell sum carries the
fluctuating lattice count N_m (single shells +-6%, and 6.6% low at k = 1/xi for a vortex
against the Hankel transform); the mode-count normalisation removes it.  Shells beyond
min(pi/dx, pi/dy) are only partly on the grid: their mean is extrapolated to the full annulus
by isotropy.  The integrals (``e_*``) are the exact Parseval sums over all modes,
:math:`\frac12 \sum_x |\mathbf u|^2 \Delta A` to round-off; the sum of the normalised spectrum
times dk agrees with them only to within the lattice-count fluctuations.

Units: k in 1/xi; E(k) in mu n0 xi^3 (energy per unit wavenumber, energy unit mu n0 xi^2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from gpe.analysis.flow import spectral_gradient
from gpe.errors import VorthermError

__all__ = ["KineticSpectra", "density_weighted_velocity", "helmholtz_split",
           "shell_spectrum", "kinetic_energy_spectra"]


@dataclass(frozen=True)
class KineticSpectra:
    """Angle-averaged (mode-count normalised shell) kinetic-energy spectra and their integrals.

    Attributes
    ----------
    k : (K,) shell centres m dk, m = 0 .. K-1. Units: 1/xi.
    dk : shell width. Units: 1/xi.
    incompressible, compressible, quantum_pressure : (K,) spectra. Units: mu n0 xi^3.
    e_incompressible, e_compressible, e_quantum_pressure : integrals over all modes (Parseval,
        exact; sum E dk agrees to within the lattice-count fluctuations). Units: mu n0 xi^2.
    e_density_weighted : 1/2 sum |sqrt(n) v|^2 dA computed in real space. Units: mu n0 xi^2.
    """

    k: np.ndarray
    dk: float
    incompressible: np.ndarray
    compressible: np.ndarray
    quantum_pressure: np.ndarray
    e_incompressible: float
    e_compressible: float
    e_quantum_pressure: float
    e_density_weighted: float


def density_weighted_velocity(psi: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray]:
    r"""u = sqrt(n) v = Im(conj(psi) grad psi) / |psi|, spectral gradient.

    At a core, Im(conj(psi) grad psi) ~ r while |psi| ~ r, so u stays finite; the ratio is
    set to 0 only at grid points where psi is exactly zero (no direction is defined there).

    Units: sqrt(n0) c.
    """
    psi = np.asarray(psi, dtype=np.complex128)
    gx, gy = spectral_gradient(psi, grid)
    amp = np.abs(psi)
    nonzero = amp > 0
    safe = np.where(nonzero, amp, 1.0)
    ux = np.where(nonzero, np.imag(np.conj(psi) * gx) / safe, 0.0)
    uy = np.where(nonzero, np.imag(np.conj(psi) * gy) / safe, 0.0)
    return ux, uy


def helmholtz_split(ux: np.ndarray, uy: np.ndarray, grid):
    """Fourier-space Helmholtz split of a periodic vector field.

    Returns (ui_x_k, ui_y_k, uc_x_k, uc_y_k): incompressible and compressible parts of the
    FFT (numpy normalisation) of (ux, uy); the k = 0 mode goes to the incompressible part.
    Real-space fields: ``np.fft.ifft2(...).real``.

    Units: those of u.
    """
    kx = np.asarray(grid.kx)[None, :]
    ky = np.asarray(grid.ky)[:, None]
    if np.shape(ux) != (ky.size, kx.size) or np.shape(uy) != np.shape(ux):
        raise VorthermError(f"helmholtz_split: fields of shape {np.shape(ux)}, {np.shape(uy)} "
                            f"do not match the grid (ny, nx) = {(ky.size, kx.size)}")
    ux_k = np.fft.fft2(ux)
    uy_k = np.fft.fft2(uy)
    k2 = kx * kx + ky * ky
    inv_k2 = np.divide(1.0, k2, out=np.zeros_like(k2), where=k2 > 0)
    longitudinal = (kx * ux_k + ky * uy_k) * inv_k2
    uc_x = kx * longitudinal
    uc_y = ky * longitudinal
    return ux_k - uc_x, uy_k - uc_y, uc_x, uc_y


def _shell_index(grid):
    kx = np.asarray(grid.kx)[None, :]
    ky = np.asarray(grid.ky)[:, None]
    lx = 2 * np.pi / abs(kx[0, 1]) if kx.size > 1 else 1.0
    ly = 2 * np.pi / abs(ky[1, 0]) if ky.size > 1 else 1.0
    dk = 2 * np.pi / max(lx, ly)
    shell = np.rint(np.sqrt(kx * kx + ky * ky) / dk).astype(np.int64)
    return shell, dk


def _shell_power(components_k, grid):
    """Per shell: sum of |c_k|^2, number of modes N_m and the continuum count A_m/(dkx dky)."""
    shell, dk = _shell_index(grid)
    power = np.zeros(shell.shape)
    for c in components_k:
        power += np.abs(c) ** 2
    raw = np.bincount(shell.ravel(), weights=power.ravel())
    count = np.bincount(shell.ravel(), minlength=raw.size)
    m = np.arange(raw.size)
    area = np.where(m == 0, np.pi * dk * dk / 4.0, 2.0 * np.pi * m * dk * dk)
    dkx, dky = abs(float(grid.kx[1] - grid.kx[0])), abs(float(grid.ky[1] - grid.ky[0]))
    return raw, count, area / (dkx * dky), dk


def shell_spectrum(*components_k: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray, float]:
    """Shell spectrum 1/2 |c_k|^2 per unit k of Fourier components (numpy FFT), each shell's
    mean power times the continuum mode count of its annulus (module docstring).

    Returns (k, E(k), dk).  Units: k in 1/xi; E in [c]^2 xi^3.
    """
    raw, count, continuum, dk = _shell_power(components_k, grid)
    n_points = np.size(grid.kx) * np.size(grid.ky)
    area = float(grid.length_x * grid.length_y)
    # dA / N = area / N^2 converts |FFT|^2 to a real-space integral
    weights = 0.5 * area / n_points ** 2 / dk
    mean = np.divide(raw, count, out=np.zeros_like(raw), where=count > 0)
    return np.arange(raw.size) * dk, mean * continuum * weights, dk


def _parseval_total(*components_k: np.ndarray, grid) -> float:
    """1/2 sum_k |c_k|^2 dA/N = 1/2 sum_x |c|^2 dA, exactly. Units: [c]^2 xi^2."""
    n_points = np.size(grid.kx) * np.size(grid.ky)
    area = float(grid.length_x * grid.length_y)
    return float(0.5 * area / n_points ** 2 * sum(np.sum(np.abs(c) ** 2) for c in components_k))


def kinetic_energy_spectra(psi: np.ndarray, grid) -> KineticSpectra:
    """Incompressible, compressible and quantum-pressure kinetic-energy spectra of psi.

    Parameters
    ----------
    psi : complex (ny, nx), in sqrt(n0)
    grid : gpe.field.grid.Grid (or any object with kx, ky, length_x, length_y, dx, dy)

    Returns
    -------
    KineticSpectra

    Units
    -----
    k in 1/xi; spectra in mu n0 xi^3; integrals in mu n0 xi^2 (hbar/m = 1 in healing units, so
    the kinetic energy density is 1/2 |grad psi|^2 in mu n0).
    """
    psi = np.asarray(psi)
    if psi.ndim != 2 or psi.shape != (np.size(grid.ky), np.size(grid.kx)):
        raise VorthermError(f"kinetic_energy_spectra: psi has shape {psi.shape}, the grid is "
                            f"(ny, nx) = {(np.size(grid.ky), np.size(grid.kx))}")
    ux, uy = density_weighted_velocity(psi, grid)
    uix, uiy, ucx, ucy = helmholtz_split(ux, uy, grid)
    k, e_i, dk = shell_spectrum(uix, uiy, grid=grid)
    _, e_c, _ = shell_spectrum(ucx, ucy, grid=grid)
    qx, qy = spectral_gradient(np.abs(psi), grid)
    qx_k, qy_k = np.fft.fft2(qx), np.fft.fft2(qy)
    _, e_q, _ = shell_spectrum(qx_k, qy_k, grid=grid)
    cell = float(grid.length_x * grid.length_y) / psi.size
    return KineticSpectra(
        k=k, dk=dk, incompressible=e_i, compressible=e_c, quantum_pressure=e_q,
        e_incompressible=_parseval_total(uix, uiy, grid=grid),
        e_compressible=_parseval_total(ucx, ucy, grid=grid),
        e_quantum_pressure=_parseval_total(qx_k, qy_k, grid=grid),
        e_density_weighted=float(0.5 * np.sum(ux * ux + uy * uy) * cell))
