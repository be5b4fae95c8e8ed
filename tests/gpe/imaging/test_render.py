"""Rendered camera images: free expansion, the optics on a known core, shot noise, the sign channel."""

import numpy as np
import pytest
from scipy import integrate, special

from gpe.field.grid import Grid
from gpe.imaging.render import Camera, ImagingError, expand_free, render_frame
from gpe.setup.units import HealingUnits

# 87Rb at mu = 20 nK in a 1 kHz axial trap: the factors of tests/helpers/tiny_protocol.py's runs
UNITS = HealingUnits(mass_kg=1.4431608971788639e-25, mu_J=2.761298e-31,
                     g2d_Jm2=6.018684450476965e-45)
XI_UM = UNITS.length_m * 1e6


def test_free_expansion_of_a_gaussian_follows_the_analytic_width():
    """[exact] psi = exp(-r^2 / 2 s0^2) spreads freely as s(t)^2 = s0^2 + (hbar t / m s0)^2
    (healing units: hbar = m = 1); the density exp(-r^2/s^2) has <x^2> = s^2 / 2."""
    grid = Grid(128, 128, 64.0, 64.0)
    s0 = 1.5
    psi = np.exp(-(grid.X ** 2 + grid.Y ** 2) / (2 * s0 ** 2))
    for t in (1.0, 4.0, 8.0):
        n = np.abs(expand_free(psi, grid, t)) ** 2
        x2 = float((n * grid.X ** 2).sum() / n.sum())
        expected = 0.5 * (s0 ** 2 + (t / s0) ** 2)
        assert x2 == pytest.approx(expected, rel=1e-6)  # spectral propagation: exact to round-off


def _depletion_convolved(rho, sigma):
    """[exact] 2D convolution of the radial depletion 1/(1 + r^2) with a normalised Gaussian of rms
    width sigma, by quadrature (scipy): int f(r) exp(-(r^2+rho^2)/2s^2) I0(r rho/s^2) r dr / s^2."""
    def integrand(r):
        # i0e(z) = exp(-z) I0(z): the exponentials combine into exp(-(r - rho)^2 / 2 s^2)
        return (r / (1 + r * r) * special.i0e(r * rho / sigma ** 2)
                * np.exp(-(r - rho) ** 2 / (2 * sigma ** 2)) / sigma ** 2)
    return integrate.quad(integrand, 0, rho + 12 * sigma + 50, limit=400)[0]


def test_a_vortex_dip_is_the_core_profile_convolved_with_the_psf():
    """The image of a core of density r^2/(1 + r^2) (the Pade core ansatz, exact zero and far field
    of the core ODE in these units) through a Gaussian PSF of 1 xi equals the exact convolution
    (scipy quadrature), up to the far-field tail cut by the periodic box."""
    grid = Grid(256, 256, 64.0, 64.0)
    r2 = grid.X ** 2 + grid.Y ** 2
    psi = np.sqrt(r2 / (1 + r2)) * np.exp(1j * np.arctan2(grid.Y, grid.X))
    camera = Camera(pixel_um=0.125 * XI_UM, psf_um=1.0 * XI_UM, counts_per_n0=1000.0)
    img = render_frame(psi, grid, UNITS, camera, noise=False)
    n = img.density / img.counts_per_n0
    cols = np.arange(n.shape[1])
    x_xi = img.x0_xi + (cols + 0.5) * img.pixel_xi
    row = round(-img.y0_xi / img.pixel_xi - 0.5)
    y_row = img.y0_xi + (row + 0.5) * img.pixel_xi
    near = np.abs(x_xi) < 5
    got = 1 - n[row, near]
    want = np.array([_depletion_convolved(np.hypot(x, y_row), 1.0) for x in x_xi[near]])
    # the box (64 xi) cuts the 1/r^2 tail: a uniform offset of ~ pi/L^2 * log, < 3e-3 here
    offset = float(np.median(got - want))
    assert abs(offset) < 3e-3
    np.testing.assert_allclose(got - offset, want, atol=2e-3)
    # and the optics matter at this tolerance: the bare core 1/(1 + r^2) is far from the image
    bare = 1 / (1 + x_xi[near] ** 2 + y_row ** 2)
    assert np.abs(got - offset - bare).max() > 0.1


def test_shot_noise_is_poisson():
    """[exact] Poisson counts: variance = mean, over a uniform field."""
    grid = Grid(64, 64, 32.0, 32.0)
    camera = Camera(pixel_um=0.5 * XI_UM, counts_per_n0=50.0)
    img = render_frame(np.ones(grid.shape, complex), grid, UNITS, camera,
                       rng=np.random.default_rng(3))
    c = img.density
    assert c.mean() == pytest.approx(50.0, rel=0.02)          # 4096 pixels: 0.2% of mean
    assert c.var() / c.mean() == pytest.approx(1.0, abs=0.1)  # var estimate: ~2% rel. error


def test_the_velocity_channel_is_darker_on_the_side_where_the_flow_runs_against_the_axis():
    """[exact] a vortex of circulation s has v_x = -s (y - y0)/r^2: for s = +1 the flow along +x is
    below the core, so the x-selective channel is brighter below than above, and the other way
    round for s = -1."""
    grid = Grid(128, 128, 48.0, 48.0)
    r2 = grid.X ** 2 + grid.Y ** 2
    camera = Camera(pixel_um=0.5 * XI_UM, counts_per_n0=1000.0, bragg_axis="x")
    for s in (1, -1):
        psi = np.sqrt(r2 / (1 + r2)) * np.exp(1j * s * np.arctan2(grid.Y, grid.X))
        img = render_frame(psi, grid, UNITS, camera, noise=False)
        frac = img.bragg / np.maximum(img.density, 1e-9)
        mid = frac.shape[0] // 2
        below, above = frac[mid - 6: mid - 2].mean(), frac[mid + 2: mid + 6].mean()
        assert (below - above) * s > 0.05


def test_bad_camera_parameters_are_refused_naming_the_parameter():
    with pytest.raises(ImagingError, match="pixel_um"):
        Camera(pixel_um=0.0)
    with pytest.raises(ImagingError, match="psf_um"):
        Camera(pixel_um=0.5, psf_um=-1.0)
    with pytest.raises(ImagingError, match="bragg_axis"):
        Camera(pixel_um=0.5, bragg_axis="z")
    grid = Grid(32, 32, 16.0, 16.0)
    with pytest.raises(ImagingError, match="8 x 8 pixels"):
        render_frame(np.ones(grid.shape, complex), grid, UNITS, Camera(pixel_um=10.0),
                     noise=False)
