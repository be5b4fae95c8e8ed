"""Tests of gpe.analysis.circulation: phase winding on a circle, against imprinted fields."""

import numpy as np
import pytest
from vortex_fields import axis, imprint

from gpe.analysis.circulation import winding_on_circle
from gpe.errors import VorthermError


def _field(n_hole, positions, signs, n=128, length=64.0):
    x = y = axis(n, length)
    X, Y = np.meshgrid(x, y)
    # n_hole quanta at the centre (the hole's flow) times the vortices' own cores
    return imprint(X, Y, [(0.0, 0.0)] * abs(n_hole), [np.sign(n_hole)] * abs(n_hole)) \
        * imprint(X, Y, positions, signs), x, y


@pytest.mark.parametrize("n_hole", [0, 1, -3])
def test_the_winding_counts_the_quanta_inside_the_circle(n_hole):
    # [exact: the phase of prod (z - z_k)^(s_k) winds sum s_k over the enclosed z_k]
    psi, x, y = _field(n_hole, [(12.0, 3.0), (-4.0, -15.0), (20.0, 18.0)], [1, 1, -1])
    assert winding_on_circle(psi, x, y, 8.0) == n_hole
    assert winding_on_circle(psi, x, y, 13.0) == n_hole + 1        # the vortex at r = 12.4
    assert winding_on_circle(psi, x, y, 17.0) == n_hole + 2        # and the one at r = 15.5
    assert winding_on_circle(psi, x, y, 5.0, center=(12.0, 3.0)) == 1


def test_a_circle_through_a_core_or_off_the_grid_is_refused():
    psi, x, y = _field(1, [(10.0, 0.0)], [1])
    with pytest.raises(VorthermError, match="run.h5 frame 3: the phase winds .* not a whole"):
        winding_on_circle(psi, x, y, 10.0, where="run.h5 frame 3")
    with pytest.raises(VorthermError, match="leaves the grid"):
        winding_on_circle(psi, x, y, 40.0)
