"""The density-image vortex finder on images of fields whose vortices are known exactly."""

import numpy as np
import pytest

from gpe.field.grid import Grid
from gpe.imaging.finder import find_cores
from gpe.imaging.pipeline import expected_core_px
from gpe.imaging.render import Camera, ImagingError, render_frame
from gpe.setup.units import HealingUnits
from vortex_fields import imprint, random_configuration

UNITS = HealingUnits(mass_kg=1.4431608971788639e-25, mu_J=2.761298e-31,
                     g2d_Jm2=6.018684450476965e-45)
XI_UM = UNITS.length_m * 1e6
RADIUS = 20.0


def _disk_field(positions, signs, n=128):
    """A hard-wall disk (density tanh^2(d / sqrt 2) at distance d from the wall: the 1D wall
    solution of the GPE in these units, [exact]) with imprinted cores (exact zeros)."""
    grid = Grid(n, n, 48.0, 48.0)
    d = RADIUS - np.hypot(grid.X, grid.Y)
    env = np.tanh(np.maximum(d, 0) / np.sqrt(2))
    return grid, env * imprint(grid.X, grid.Y, positions, signs)


@pytest.fixture(scope="module")
def field():
    rng = np.random.default_rng(11)
    pos, signs = random_configuration(rng, 12, 15.0, 4.0, radius=15.0)
    grid, psi = _disk_field(pos, signs)
    return grid, psi, pos, signs


def test_every_imprinted_core_is_found_within_half_a_pixel_with_its_sign(field):
    """The imprinted centres are the exact zeros of psi (tests/helpers/vortex_fields.py); at 0.4 um
    pixels, a 0.3 um PSF and 400 counts per pixel every core is found within 0.5 pixel, the
    velocity channel gives every sign, and nothing else is reported."""
    grid, psi, pos, signs = field
    camera = Camera(pixel_um=0.4, psf_um=0.3, counts_per_n0=400.0, bragg_axis="x")
    img = render_frame(psi, grid, UNITS, camera, rng=np.random.default_rng(1))
    found = find_cores(img.density, expected_core_px(camera, UNITS), bragg=img.bragg)
    tx, ty = img.to_pixels(pos[:, 0], pos[:, 1])
    d = np.hypot(found.x[:, None] - tx[None], found.y[:, None] - ty[None])
    assert len(found) == len(pos)
    assert d.min(axis=0).max() < 0.5
    nearest = d.argmin(axis=0)
    np.testing.assert_array_equal(found.sign[nearest], signs)
    assert np.all(found.score > 5)


def test_without_a_velocity_image_the_signs_are_unknown(field):
    grid, psi, pos, _ = field
    camera = Camera(pixel_um=0.4, psf_um=0.3, counts_per_n0=400.0)
    img = render_frame(psi, grid, UNITS, camera, rng=np.random.default_rng(2))
    found = find_cores(img.density, expected_core_px(camera, UNITS))
    assert len(found) == len(pos) and np.all(found.sign == 0)


def test_the_boundary_is_the_half_density_circle_of_the_wall():
    """[exact] tanh^2(d / sqrt 2) = 1/2 at d = sqrt 2 artanh(1/sqrt 2) = 1.246 xi inside the wall;
    the equal-area radius of the fluid is R - 1.246 xi (to a pixel) and the centre is the trap's."""
    grid, psi = _disk_field(np.zeros((0, 2)), np.zeros(0, int))
    camera = Camera(pixel_um=0.4, counts_per_n0=400.0)
    img = render_frame(psi, grid, UNITS, camera, noise=False)
    found = find_cores(img.density, expected_core_px(camera, UNITS))
    want = (RADIUS - np.sqrt(2) * np.arctanh(1 / np.sqrt(2))) * XI_UM / 0.4
    assert found.boundary.radius_px == pytest.approx(want, abs=1.0)
    cx, cy = img.to_pixels(0.0, 0.0)
    assert found.boundary.center_px == pytest.approx((float(cx), float(cy)), abs=0.2)
    assert len(found) == 0


@pytest.mark.parametrize("image, words", [
    (np.ones((4, 64, 64)), "2D image"),
    (np.zeros((64, 64)), "empty image"),
    (np.ones((4, 4)), "at least 8 x 8"),
    (np.full((64, 64), np.nan), "NaN"),
    (-np.ones((64, 64)), "negative"),
])
def test_bad_images_are_refused_naming_the_image_and_what_is_accepted(image, words):
    with pytest.raises(ImagingError, match=words) as info:
        find_cores(image, 2.0, name="shot7.png")
    assert "shot7.png" in str(info.value) and "accepted" in str(info.value)


def test_a_velocity_image_of_another_shape_and_a_zero_core_width_are_refused():
    img = np.ones((64, 64))
    with pytest.raises(ImagingError, match="same shape"):
        find_cores(img, 2.0, bragg=np.ones((32, 32)), name="a.h5")
    with pytest.raises(ImagingError, match="core width"):
        find_cores(img, 0.0, name="a.h5")


def test_with_the_optics_known_shallow_dips_are_not_taken_for_cores(field):
    """Sound and density ripples make dips of their own, but no zero of the field. Twelve
    shallow dips (the density lowered by 30% over a Gaussian of 1.2 xi, no phase winding) are
    added between the 12 imprinted cores [exact zeros]. A Gaussian dip of full depth and width
    s seen through optics of width o keeps its area, so in the image a core is
    1 - o^2/(s^2 + o^2) deep [exact for Gaussians]; with the optics known (PSF and pixel) the
    finder keeps a dip only if it reaches half of that: every core is kept and no shallow dip.
    Without the optics the shallow dips are reported as cores, which is what the test removes."""
    from gpe.imaging.pipeline import optics_px

    grid, psi, pos, signs = field
    rng = np.random.default_rng(5)
    ripples = []
    while len(ripples) < 12:
        p = rng.uniform(-15.0, 15.0, 2)
        if np.hypot(*p) < 15.0 and np.all(np.hypot(*(pos - p).T) > 3.5) and all(
                np.hypot(*(p - q)) > 3.5 for q in ripples):
            ripples.append(p)
    dips = np.ones(grid.X.shape)
    for x0, y0 in ripples:
        dips *= 1.0 - 0.3 * np.exp(-((grid.X - x0) ** 2 + (grid.Y - y0) ** 2) / (2 * 1.2 ** 2))
    camera = Camera(pixel_um=0.4, psf_um=0.3, counts_per_n0=400.0, bragg_axis="x")
    img = render_frame(psi * np.sqrt(dips), grid, UNITS, camera, rng=np.random.default_rng(3))
    core = expected_core_px(camera, UNITS)
    tx, ty = img.to_pixels(pos[:, 0], pos[:, 1])
    rx, ry = img.to_pixels(*np.array(ripples).T)

    def near(found, x, y):
        d = np.hypot(found.x[:, None] - x[None], found.y[:, None] - y[None])
        return (d.min(axis=0) < 1.0).sum() if len(found) else 0

    blind = find_cores(img.density, core, bragg=img.bragg)
    assert near(blind, rx, ry) >= 5
    seen = find_cores(img.density, core, bragg=img.bragg, optics_px=optics_px(0.4, 0.3))
    assert near(seen, tx, ty) == len(pos) and near(seen, rx, ry) == 0
    assert len(seen) == len(pos)
    with pytest.raises(ImagingError, match="optics width"):
        find_cores(img.density, core, optics_px=-0.5, name="ripples.png")
