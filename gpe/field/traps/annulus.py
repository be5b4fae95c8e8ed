"""The annulus trap: a flat-bottomed ring between two circles, inside smooth walls.

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
from thermo.domains.annulus import Annulus


def _refuse_inverted_ring(sec: TrapSection) -> None:
    sec.fail("inner_radius", "must be smaller than outer_radius", "0 < inner_radius < outer_radius")


@dataclass(frozen=True, kw_only=True)
class AnnulusTrap(WalledTrap):
    """The centred ring ``inner_radius < r < outer_radius`` with tanh walls (see :class:`WalledTrap`).

    Parameters
    ----------
    inner_radius, outer_radius : float
        Radii of the two walls (at half height there); inner < outer.
    wall_height, edge_width : float
        As in :class:`WalledTrap`.

    Units
    -----
    lengths xi, wall height mu.
    """

    shape = "annulus"
    protocol_keys = {**WalledTrap.protocol_keys, "inner_radius": LENGTH_KEY, "outer_radius": LENGTH_KEY}

    inner_radius: float = field(metadata={"dim": "length"})
    outer_radius: float = field(metadata={"dim": "length"})

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> AnnulusTrap:
        """The ring from ``inner_radius_*`` and ``outer_radius_*`` (inner < outer). Units: xi, mu."""
        inner, outer = sec.get("inner_radius"), sec.get("outer_radius")
        if inner >= outer:
            _refuse_inverted_ring(sec)
        return cls(inner_radius=inner, outer_radius=outer, **cls.wall_from_section(sec))

    @classmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """``pi (R_out^2 - R_in^2)`` from the SI radii. Units: m^2."""
        area = math.pi * (sec.si_value("outer_radius") ** 2 - sec.si_value("inner_radius") ** 2)
        if area <= 0:
            _refuse_inverted_ring(sec)
        return area

    def extent(self) -> tuple[float, float]:
        """The outer diameter along x and y. Units: xi."""
        return 2 * self.outer_radius, 2 * self.outer_radius

    def area(self) -> float:
        """``pi (R_out^2 - R_in^2)``. Units: xi^2."""
        return math.pi * (self.outer_radius**2 - self.inner_radius**2)

    def signed_distance(self, grid: Grid) -> np.ndarray:
        """``max(R_in - r, r - R_out)`` (negative inside the ring). Units: xi."""
        r = np.hypot(grid.X, grid.Y)
        return np.maximum(self.inner_radius - r, r - self.outer_radius)

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """The annulus shrunk by ``wall_layer_xi`` at both walls (the depleted layers), its
        length unit the shrunk outer radius; no circulation on the hole yet: the run's frames
        give it (:func:`gpe.analysis.circulation.winding_around_region`, gpe.run.frames).

        Raises
        ------
        VorthermError
            If the ring left is not wider than four core radii.

        Units
        -----
        lengths xi.
        """
        if self.inner_radius <= core_radius_xi:
            raise VorthermError(f"thermometry: the annulus's hole (inner_radius "
                                f"{self.inner_radius:.3g} xi) is not larger than a vortex core "
                                f"({core_radius_xi:.3g} xi): it is a pinned core, not a hole; "
                                "accepted: a hole several healing lengths across, or a disk trap")
        outer = self.outer_radius - wall_layer_xi
        inner = self.inner_radius + wall_layer_xi
        if outer - inner <= 4 * core_radius_xi:
            raise VorthermError(f"thermometry: the ring {self.inner_radius:.3g} < r < "
                                f"{self.outer_radius:.3g} xi is too narrow for a vortex gas "
                                "(need several healing lengths between its walls)")
        return VortexDomain(Annulus(inner / outer), outer, (0.0, 0.0), core_radius_xi / outer)
