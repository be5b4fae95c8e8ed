"""Tests of gpe.analysis.circulation: phase winding around regions of plaquettes, against imprinted
fields."""

import numpy as np
import pytest
from vortex_fields import axis, imprint

from gpe.analysis.circulation import winding_around_region
from gpe.errors import VorthermError


def _field(n_hole, positions, signs, n=128, length=64.0):
    x = y = axis(n, length)
    X, Y = np.meshgrid(x, y)
    # n_hole quanta at the centre (the hole's flow) times the vortices' own cores
    return imprint(X, Y, [(0.0, 0.0)] * abs(n_hole), [np.sign(n_hole)] * abs(n_hole)) \
        * imprint(X, Y, positions, signs), x, y


def _disk(x, y, radius, center=(0.0, 0.0)):
    """The plaquettes whose centres lie within ``radius`` of ``center``."""
    xc, yc = 0.5 * (x[1:] + x[:-1]), 0.5 * (y[1:] + y[:-1])
    X, Y = np.meshgrid(xc, yc)
    return np.hypot(X - center[0], Y - center[1]) < radius


@pytest.mark.parametrize("n_hole", [0, 1, -3])
def test_the_winding_counts_the_quanta_inside_the_loop(n_hole):
    # [exact: the phase of prod (z - z_k)^(s_k) winds sum s_k over the enclosed z_k]
    psi, x, y = _field(n_hole, [(12.0, 3.0), (-4.0, -15.0), (20.0, 18.0)], [1, 1, -1])
    assert winding_around_region(psi, _disk(x, y, 8.0)) == n_hole
    assert winding_around_region(psi, _disk(x, y, 13.0)) == n_hole + 1     # the vortex at r = 12.4
    assert winding_around_region(psi, _disk(x, y, 17.0)) == n_hole + 2     # and the one at r = 15.5
    assert winding_around_region(psi, _disk(x, y, 5.0, (12.0, 3.0))) == 1


@pytest.mark.parametrize("n_hole", [0, 2, -1])
def test_a_region_of_plaquettes_counts_the_quanta_it_covers(n_hole):
    # [exact: discrete Stokes; the phase of prod (z - z_k)^(s_k) winds sum s_k around a
    # region covering the z_k]; the region may have any shape (here a square and an L)
    psi, x, y = _field(n_hole, [(12.0, 3.0), (-4.0, -15.0), (20.0, 18.0)], [1, 1, -1])
    xc, yc = 0.5 * (x[1:] + x[:-1]), 0.5 * (y[1:] + y[:-1])
    X, Y = np.meshgrid(xc, yc)
    square = (np.abs(X) < 8) & (np.abs(Y) < 8)
    assert winding_around_region(psi, square) == n_hole
    ell = square | ((X > 0) & (X < 16) & (np.abs(Y) < 8)) | ((np.abs(X + 4) < 4) & (Y > -20)
                                                             & (Y < 0))
    assert winding_around_region(psi, ell) == n_hole + 2        # (12, 3) and (-4, -15)
    with pytest.raises(VorthermError, match="run.h5 frame 2: the loop around the hole is "
                                            "empty or leaves the grid"):
        winding_around_region(psi, np.abs(X) < 40, where="run.h5 frame 2")
