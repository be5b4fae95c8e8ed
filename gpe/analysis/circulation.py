"""Circulation of a wavefunction around a closed loop: the quanta on an annulus's hole.

The circulation around a loop is :math:`\\oint \\nabla\\phi\\cdot d\\mathbf l = 2\\pi w\\,\\hbar/m`
with the integer winding number w of the phase. Along a circle the phase is read at points a
fraction of a healing length apart (bilinear interpolation of Re and Im psi, which never wraps),
and the wrapped phase steps, each in (-pi, pi], are summed: exact while the phase changes by
less than pi between neighbouring points.

On a circle just inside the fluid around a hole, the winding counts the circulation the hole
carries together with any vortex in the depleted layer between the loop and the wall, which is
what the point-vortex gas of the annulus sees (thermo.domains.annulus), since vortices there
are left out of the gas.

Units: lengths in xi.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from gpe.errors import VorthermError

#: Points per healing length along the loop (a core changes the phase over ~1 xi).
POINTS_PER_XI = 8
#: A winding further than this from an integer means the loop crosses a density zero.
INTEGER_TOLERANCE = 0.25


def winding_on_circle(psi: np.ndarray, x: np.ndarray, y: np.ndarray, radius: float,
                      center: tuple[float, float] = (0.0, 0.0), *, where: str = "psi") -> int:
    """Winding number of the phase of ``psi`` counter-clockwise around a circle.

    Parameters
    ----------
    psi : complex array, shape (len(y), len(x))
    x, y : uniformly spaced grid coordinates
    radius : circle radius; ``center`` its centre
    where : names the field in errors (a run file and frame)

    Returns
    -------
    int

    Raises
    ------
    VorthermError
        If the circle leaves the grid, or the sum of phase steps is not close to a whole number
        of turns (the loop passes through a vortex core or through empty space).

    Units: lengths in xi.
    """
    dx, dy = float(x[1] - x[0]), float(y[1] - y[0])
    n = max(64, math.ceil(2 * math.pi * radius * POINTS_PER_XI))
    theta = np.linspace(0.0, 2.0 * math.pi, n, endpoint=False)
    px = center[0] + radius * np.cos(theta)
    py = center[1] + radius * np.sin(theta)
    col, row = (px - x[0]) / dx, (py - y[0]) / dy
    if col.min() < 0 or row.min() < 0 or col.max() > len(x) - 1 or row.max() > len(y) - 1:
        raise VorthermError(f"{where}: the circle of radius {radius:.4g} xi about "
                            f"({center[0]:.4g}, {center[1]:.4g}) leaves the grid")
    coords = np.vstack((row, col))
    values = (ndimage.map_coordinates(psi.real, coords, order=1)
              + 1j * ndimage.map_coordinates(psi.imag, coords, order=1))
    with np.errstate(divide="ignore", invalid="ignore"):
        steps = np.angle(np.roll(values, -1) / values)
    turns = float(np.sum(steps)) / (2.0 * math.pi)
    w = round(turns) if math.isfinite(turns) else 0
    if not np.all(np.abs(values) > 0) or abs(turns - w) > INTEGER_TOLERANCE:
        raise VorthermError(
            f"{where}: the phase winds {turns:.3g} turns around the circle of radius "
            f"{radius:.4g} xi, not a whole number: the circle crosses a vortex core or a region "
            "without fluid")
    return int(w)
