import numpy as np
import pytest

from gpe.errors import VorthermError
from gpe.field.grid import Grid


def test_coordinates_centred_and_spacing():
    grid = Grid(8, 4, 16.0, 6.0)
    assert grid.dx == 2.0 and grid.dy == 1.5
    np.testing.assert_allclose(grid.x, [-8, -6, -4, -2, 0, 2, 4, 6])
    np.testing.assert_allclose(grid.y, [-3, -1.5, 0, 1.5])
    assert grid.X.shape == (4, 8) and grid.Y.shape == (4, 8)
    np.testing.assert_array_equal(grid.X[2], grid.x)
    np.testing.assert_array_equal(grid.Y[:, 3], grid.y)
    assert grid.area == 96.0 and grid.cell_area == 3.0


def test_wavenumbers_differentiate_a_plane_wave_exactly():
    # [exact] d/dx exp(i k x) = i k exp(i k x) for a mode that fits the periodic box.
    grid = Grid(32, 16, 10.0, 7.0)
    kx0, ky0 = 2 * np.pi * 3 / grid.length_x, 2 * np.pi * 2 / grid.length_y
    f = np.exp(1j * (kx0 * grid.X + ky0 * grid.Y))
    lap = np.fft.ifft2(-grid.k2 * np.fft.fft2(f))
    np.testing.assert_allclose(lap, -(kx0**2 + ky0**2) * f, atol=1e-10)


def test_arrays_are_read_only_and_grid_is_hashable():
    grid = Grid(8, 8, 1.0, 1.0)
    with pytest.raises(ValueError):
        grid.k2[0, 0] = 1.0
    assert grid == Grid(8, 8, 1.0, 1.0)
    assert hash(grid) == hash(Grid(8, 8, 1.0, 1.0))


@pytest.mark.parametrize("args", [(1, 8, 1.0, 1.0), (8, 8, 0.0, 1.0), (8.5, 8, 1.0, 1.0)])
def test_invalid_grid_is_rejected(args):
    with pytest.raises(VorthermError):
        Grid(*args)
