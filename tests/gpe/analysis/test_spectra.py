"""Tests of gpe.analysis.spectra: Helmholtz split, Parseval, and the k^-3 spectrum of a vortex core."""

import numpy as np
import pytest
from scipy import integrate
from scipy.special import j1

from gpe.analysis.spectra import (
    density_weighted_velocity,
    helmholtz_split,
    kinetic_energy_spectra,
)
from gpe.errors import VorthermError
from gpe.field.grid import Grid


def smooth_periodic(rng, grid, n_modes=6, amplitude=1.0):
    """A real periodic field made of a few low Fourier modes."""
    field = np.zeros(grid.shape)
    for _ in range(n_modes):
        mx, my = rng.integers(-3, 4, 2)
        phase = rng.uniform(0, 2 * np.pi)
        field += amplitude * rng.standard_normal() * np.cos(
            2 * np.pi * (mx * grid.X / grid.length_x + my * grid.Y / grid.length_y) + phase)
    return field


def vortex_with_envelope(grid, radius):
    """Single + vortex, Pade core f = r/sqrt(r^2+1) (common practice), smooth envelope that
    vanishes well inside the box so the field is periodic."""
    r = np.hypot(grid.X, grid.Y)
    return np.exp(-(r / radius) ** 4) * (grid.X + 1j * grid.Y) / np.sqrt(r * r + 1.0)


def test_parseval_split_adds_up(rng):
    """E_i + E_c (integrated spectra) = 1/2 sum |sqrt(n) v|^2 dA to round-off: the split is
    orthogonal and the shell sums cover every mode once (Parseval; Bradley & Anderson 2012)."""
    grid = Grid(128, 96, 40.0, 30.0)
    psi = (1.0 + 0.3 * smooth_periodic(rng, grid)) * np.exp(1j * smooth_periodic(rng, grid))
    psi = psi + 0.6 * (smooth_periodic(rng, grid) + 1j * smooth_periodic(rng, grid))  # zeros too
    spec = kinetic_energy_spectra(psi, grid)
    assert spec.e_incompressible > 0.01 * spec.e_density_weighted
    assert spec.e_compressible > 0.01 * spec.e_density_weighted
    total = spec.e_incompressible + spec.e_compressible
    assert total == pytest.approx(spec.e_density_weighted, rel=1e-12)
    # the mode-count normalised spectra integrate to the same within the lattice jitter
    integral = (spec.incompressible + spec.compressible).sum() * spec.dk
    assert integral == pytest.approx(total, rel=0.1)


def test_pure_phase_gradient_is_compressible(rng):
    """u = grad(phi) for psi = exp(i phi) with periodic phi: curl-free, so E_i = 0 up to
    round-off. [exact]"""
    grid = Grid(64, 64, 20.0, 20.0)
    psi = np.exp(1j * smooth_periodic(rng, grid, amplitude=0.5))
    spec = kinetic_energy_spectra(psi, grid)
    assert spec.e_incompressible < 1e-12 * spec.e_compressible


def test_quantum_pressure_completes_the_kinetic_energy(rng):
    """1/2|grad psi|^2 = 1/2 n |v|^2 + 1/2 |grad sqrt(n)|^2 for a field without zeros [exact
    identity]; with spectral derivatives of a band-limited field it holds to round-off level."""
    grid = Grid(64, 64, 20.0, 20.0)
    amp = 1.0 + 0.2 * smooth_periodic(rng, grid, n_modes=3, amplitude=0.5)
    psi = amp * np.exp(1j * smooth_periodic(rng, grid, n_modes=3, amplitude=0.5))
    spec = kinetic_energy_spectra(psi, grid)
    grad_k = np.fft.fft2(psi)
    e_kin = 0.5 * grid.cell_area * np.sum(
        np.abs(np.fft.ifft2(1j * grid.kx[None, :] * grad_k)) ** 2
        + np.abs(np.fft.ifft2(1j * grid.ky[:, None] * grad_k)) ** 2)
    total = spec.e_incompressible + spec.e_compressible + spec.e_quantum_pressure
    assert total == pytest.approx(e_kin, rel=1e-6)


def test_single_vortex_spectrum_matches_hankel_transform_and_falls_as_k_minus_3():
    """Azimuthal field u = g(r) theta_hat: E_i(k) = pi k |int g J1(kr) r dr|^2 [exact, 2D
    Fourier transform of an azimuthal field]; the Hankel integral is done by quadrature
    (scipy.special.j1). For k xi >> 1 the core makes E_i ~ k^-3 (Bradley & Anderson, PRX 2,
    041001 (2012)); fitted slope over 6 <= k xi <= 16 (cut-off pi/dx = 50) within -3 +- 0.2.
    Energy is all incompressible for this axisymmetric flow [exact]."""
    length, radius = 64.0, 64.0 / 6
    grid = Grid(1024, 1024, length, length)
    spec = kinetic_energy_spectra(vortex_with_envelope(grid, radius), grid)
    assert spec.e_compressible < 1e-4 * spec.e_incompressible

    r = np.linspace(0.0, 3 * radius, 200001)
    g = np.exp(-(r / radius) ** 4) / np.sqrt(r * r + 1.0)       # sqrt(n) |v| with v = 1/r
    k_modes = np.hypot(grid.kx[None, :], grid.ky[:, None])
    shell_of = np.rint(k_modes / spec.dk).astype(int)
    for k_target in (0.5, 1.0, 2.0, 4.0, 8.0):
        # One shell at a time: its mean power times the annulus' continuum mode count, so the
        # reference is pi k_m |H(|k|)|^2 averaged over the shell's own lattice modes (the
        # envelope makes H ring on the scale of a shell width). Without the mode-count
        # normalisation the shells at k = 0.5 and 1 are 11% low (28 and 56 lattice modes
        # for annuli of 10 pi and 20 pi [exact counts of the lattice]).
        m = round(k_target / spec.dk)
        ks = np.unique(np.round(k_modes[shell_of == m], 12))
        weights = np.array([np.count_nonzero(np.isclose(k_modes[shell_of == m], k)) for k in ks])
        hankel = np.array([integrate.trapezoid(g * j1(k * r) * r, r) for k in ks])
        expected = np.pi * spec.k[m] * np.sum(weights * hankel ** 2) / weights.sum()
        assert spec.incompressible[m] == pytest.approx(expected, rel=0.01)

    band = (spec.k >= 6.0) & (spec.k <= 16.0)
    slope = np.polyfit(np.log(spec.k[band]), np.log(spec.incompressible[band]), 1)[0]
    assert slope == pytest.approx(-3.0, abs=0.2)


def test_density_weighted_velocity_is_finite_at_a_core():
    grid = Grid(64, 64, 16.0, 16.0)
    psi = vortex_with_envelope(grid, 5.0)          # exact zero on the grid point (0, 0)
    ux, uy = density_weighted_velocity(psi, grid)
    assert np.all(np.isfinite(ux)) and np.all(np.isfinite(uy))
    assert ux[32, 32] == 0.0 and uy[32, 32] == 0.0


def test_shape_mismatch_rejected():
    grid = Grid(32, 32, 10.0, 10.0)
    with pytest.raises(VorthermError, match="grid"):
        kinetic_energy_spectra(np.ones((16, 32), complex), grid)
    with pytest.raises(VorthermError, match="grid"):
        helmholtz_split(np.ones((16, 32)), np.ones((16, 32)), grid)
