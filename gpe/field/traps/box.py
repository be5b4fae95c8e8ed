"""The box trap: a flat-bottomed rectangle inside a smooth wall.

Units: lengths in xi, energies in mu.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.field.traps.base import (
    OPTIONAL_LENGTH_KEY,
    TrapSection,
    VortexDomain,
    WalledTrap,
)
from thermo.domains.box import Box


def signed_distance_box(X: np.ndarray, Y: np.ndarray, length_x: float, length_y: float) -> np.ndarray:
    """Exact signed distance to a centred rectangle (negative inside). Units: xi."""
    qx = np.abs(X) - 0.5 * length_x
    qy = np.abs(Y) - 0.5 * length_y
    outside = np.hypot(np.maximum(qx, 0.0), np.maximum(qy, 0.0))
    return outside + np.minimum(np.maximum(qx, qy), 0.0)


@dataclass(frozen=True, kw_only=True)
class BoxTrap(WalledTrap):
    """A centred rectangle ``length_x`` by ``length_y`` with a tanh wall (see :class:`WalledTrap`).

    Parameters
    ----------
    length_x, length_y : float
        Sides of the allowed region (the wall is at half height on them).
    wall_height, edge_width : float
        As in :class:`WalledTrap`.

    Units
    -----
    lengths xi, wall height mu.
    """

    shape = "box"
    protocol_keys = {**WalledTrap.protocol_keys, "size": OPTIONAL_LENGTH_KEY, "size_x": OPTIONAL_LENGTH_KEY,
                     "size_y": OPTIONAL_LENGTH_KEY}

    length_x: float = field(metadata={"dim": "length"})
    length_y: float = field(metadata={"dim": "length"})

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> BoxTrap:
        """The box from ``size_*`` (square) or ``size_x_*`` with ``size_y_*``. Units: xi, mu."""
        length_x, length_y = sec.pair("size", "size_x", "size_y")
        return cls(length_x=length_x, length_y=length_y, **cls.wall_from_section(sec))

    @classmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """``Lx Ly`` from the SI sides. Units: m^2."""
        length_x, length_y = sec.pair("size", "size_x", "size_y", si=True)
        return length_x * length_y

    def extent(self) -> tuple[float, float]:
        """The sides. Units: xi."""
        return self.length_x, self.length_y

    def area(self) -> float:
        """``Lx Ly``. Units: xi^2."""
        return self.length_x * self.length_y

    def signed_distance(self, grid: Grid) -> np.ndarray:
        """Exact (Euclidean at the corners) signed distance to the sides. Units: xi."""
        return signed_distance_box(grid.X, grid.Y, self.length_x, self.length_y)

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """A box of the same aspect ratio, shrunk by ``wall_layer_xi`` on each side (the depleted
        layer at the wall); its length unit is the shrunk side along y.

        Raises
        ------
        VorthermError
            If a shrunk side is not more than four core radii.

        Units
        -----
        lengths xi.
        """
        lx = self.length_x - 2 * wall_layer_xi
        ly = self.length_y - 2 * wall_layer_xi
        if min(lx, ly) <= 4 * core_radius_xi:
            raise VorthermError("thermometry: the box is too small for a vortex gas")
        return VortexDomain(Box(aspect=lx / ly), ly, (0.0, 0.0), core_radius_xi / ly)
