"""The disk trap: a flat bottom of radius R inside a smooth wall.

Units: lengths in xi, energies in mu.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.field.traps.base import LENGTH_KEY, TrapSection, VortexDomain, WalledTrap
from thermo.domains.disk import Disk


@dataclass(frozen=True, kw_only=True)
class DiskTrap(WalledTrap):
    """A centred disk of radius ``radius`` with a tanh wall (see :class:`WalledTrap`).

    Parameters
    ----------
    radius : float
        Radius of the allowed region (the wall is at half height there).
    wall_height, edge_width : float
        As in :class:`WalledTrap`.

    Units
    -----
    lengths xi, wall height mu.
    """

    shape = "disk"
    protocol_keys = {**WalledTrap.protocol_keys, "radius": LENGTH_KEY}

    radius: float = field(metadata={"dim": "length"})

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> DiskTrap:
        """The disk from ``radius_*``, ``wall_height_*`` and ``edge_width_*``. Units: xi, mu."""
        return cls(radius=sec.get("radius"), **cls.wall_from_section(sec))

    @classmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """``pi R^2`` from the SI radius. Units: m^2."""
        return math.pi * sec.si_value("radius") ** 2

    def extent(self) -> tuple[float, float]:
        """The diameter along x and y. Units: xi."""
        return 2 * self.radius, 2 * self.radius

    def area(self) -> float:
        """``pi R^2``. Units: xi^2."""
        return math.pi * self.radius**2

    def signed_distance(self, grid: Grid) -> np.ndarray:
        """``r - R`` (negative inside). Units: xi."""
        return np.hypot(grid.X, grid.Y) - self.radius

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """The unit disk of radius ``R_eff = R - wall_layer_xi``.

        The density vanishes over about one healing length at a hard wall, so the superfluid edge
        sits inside the nominal radius (common practice).

        Raises
        ------
        VorthermError
            If R_eff is not more than four core radii.

        Units
        -----
        lengths xi.
        """
        r_eff = self.radius - wall_layer_xi
        if r_eff <= 4 * core_radius_xi:
            raise VorthermError(f"thermometry: the disk radius {self.radius:.3g} xi is too small "
                                "for a vortex gas (need several healing lengths)")
        return VortexDomain(Disk(), r_eff, (0.0, 0.0), core_radius_xi / r_eff)
