"""Circulation of a wavefunction around a closed loop: the quanta on the hole of a trap.

The circulation around a loop is :math:`\\oint \\nabla\\phi\\cdot d\\mathbf l = 2\\pi w\\,\\hbar/m`
with the integer winding number w of the phase. On the grid the loop is the edge of a set of
plaquettes: each plaquette's winding is the sum of its four wrapped phase steps (each in
[-pi, pi), exact while the phase changes by less than pi between neighbouring nodes), and by
the discrete Stokes theorem the windings of a set add up to the winding along its edge, the
steps on shared edges cancelling. A hole's quanta are therefore the sum over the plaquettes
that cover the hole and its depleted wall layer, whatever the phase does where there is no
fluid: always a whole number, with no loop to trace.

Around a hole, the winding so counts the circulation the hole carries together with any vortex
in the depleted layer between the loop and the wall, which is what the point-vortex gas sees
(thermo.domains.annulus, thermo.domains.grid), since vortices there are left out of the gas.

Units: lengths in xi.
"""

from __future__ import annotations

import numpy as np

from gpe.errors import VorthermError


def plaquette_windings(psi: np.ndarray) -> np.ndarray:
    """Winding number of the phase counter-clockwise around each grid plaquette, shape
    (ny - 1, nx - 1): the four wrapped phase steps (each in [-pi, pi)) summed. Rows are y.

    By the discrete Stokes theorem the windings of a set of plaquettes add up exactly to the
    winding along the set's boundary (the steps on shared edges cancel), whatever the phase
    does inside, so a hole's circulation is their sum over a region that covers the hole.
    """
    phase = np.angle(psi)

    def step(a, b):
        return (b - a + np.pi) % (2.0 * np.pi) - np.pi

    total = (step(phase[:-1, :-1], phase[:-1, 1:]) + step(phase[:-1, 1:], phase[1:, 1:])
             + step(phase[1:, 1:], phase[1:, :-1]) + step(phase[1:, :-1], phase[:-1, :-1]))
    return np.rint(total / (2.0 * np.pi)).astype(np.int64)


def winding_around_region(psi: np.ndarray, region: np.ndarray, *, where: str = "psi",
                          windings: np.ndarray | None = None) -> int:
    """Winding number of the phase of ``psi`` counter-clockwise along the boundary of a set of
    plaquettes (``region``, bool, shape (ny - 1, nx - 1)): the sum of their windings
    (``windings``: :func:`plaquette_windings` of ``psi`` computed before, for several regions
    of one field).

    Raises VorthermError if the region is empty or reaches the grid's edge (its boundary would
    leave the grid). Units: none.
    """
    reg = np.asarray(region, dtype=bool)
    if reg.shape != (psi.shape[0] - 1, psi.shape[1] - 1):
        raise VorthermError(f"{where}: region of shape {reg.shape}; accepted: the plaquettes "
                            f"of the field, shape {(psi.shape[0] - 1, psi.shape[1] - 1)}")
    if not reg.any() or reg[0].any() or reg[-1].any() or reg[:, 0].any() or reg[:, -1].any():
        raise VorthermError(f"{where}: the loop around the hole is empty or leaves the grid; "
                            "accepted: a hole and its wall cut inside the grid")
    return int((plaquette_windings(psi) if windings is None else windings)[reg].sum())
