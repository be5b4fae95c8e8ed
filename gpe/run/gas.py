"""Bridge from the field side to the vortex gas: detected vortices -> thermo configurations.

The thermometry back end (``thermo``) works with signed points in a unit domain and a hard core.
This module decides, for a simulated trap, which domain stands in for it and how detected
vortices map onto that domain:

* a flat-bottomed disk of radius R becomes the unit disk with R_eff = R - ``wall_layer`` (the
  density vanishes over about one healing length at a hard wall, so the superfluid edge sits
  inside the nominal radius: common practice);
* a box becomes a ``thermo.domains.Box`` with the same aspect ratio, shrunk the same way;
* a harmonic trap becomes the disk of the Thomas–Fermi radius, **flagged** as an approximation
  (the density is not uniform, so the uniform-domain point-vortex model is only indicative);
* annulus and mask traps have no point-vortex domain here; thermometry refuses them clearly.

Vortices in the wall layer or closer to each other than two core radii (a pair about to
annihilate) cannot be placed in the hard-core ensemble; they are left out and *counted*, and the
count is reported beside every estimate.

Units: inputs in xi (healing lengths); outputs in the domain's scaled length.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from gpe.errors import VorthermError
from thermo.domains.box import Box
from thermo.domains.disk import Disk

#: Thickness of the depleted layer at a hard wall, in healing lengths (common practice: ~1 xi).
WALL_LAYER_XI = 1.0
#: Hard-core radius of a vortex in healing lengths: centres closer than 2a are one pair.
CORE_RADIUS_XI = 0.5


@dataclass(frozen=True)
class VortexDomain:
    """The point-vortex stand-in for a trap.

    Attributes
    ----------
    domain : thermo.domains.Disk or Box
    scale : float
        Length of one domain unit in xi (disk: R_eff; box: the side along y).
    center : (float, float)
        Trap centre in xi.
    core_radius : float
        Hard core in domain units.
    approximate : str
        Empty for flat-bottomed traps; otherwise why the model is only an approximation.
    """

    domain: object
    scale: float
    center: tuple[float, float]
    core_radius: float
    approximate: str = ""

    def to_domain(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Positions in xi -> (N, 2) positions in domain units."""
        return np.column_stack(((np.asarray(x) - self.center[0]) / self.scale,
                                (np.asarray(y) - self.center[1]) / self.scale))


def domain_for_trap(trap, core_radius_xi: float = CORE_RADIUS_XI,
                    wall_layer_xi: float = WALL_LAYER_XI) -> VortexDomain:
    """Choose the point-vortex domain for a resolved trap (``gpe.field.traps.TrapConfig``).

    Units: lengths in xi.
    """
    shape = trap.shape
    if shape == "disk":
        r_eff = trap.radius - wall_layer_xi
        if r_eff <= 4 * core_radius_xi:
            raise VorthermError(f"thermometry: the disk radius {trap.radius:.3g} xi is too small "
                                "for a vortex gas (need several healing lengths)")
        return VortexDomain(Disk(), r_eff, (0.0, 0.0), core_radius_xi / r_eff)
    if shape == "box":
        lx = trap.length_x - 2 * wall_layer_xi
        ly = trap.length_y - 2 * wall_layer_xi
        if min(lx, ly) <= 4 * core_radius_xi:
            raise VorthermError("thermometry: the box is too small for a vortex gas")
        return VortexDomain(Box(aspect=lx / ly), ly, (0.0, 0.0), core_radius_xi / ly)
    if shape == "harmonic":
        # Thomas-Fermi radius at mu = 1: V(R) = 1 -> R = sqrt(2)/omega (geometric mean).
        omega = math.sqrt(trap.omega_x * trap.omega_y)
        r_tf = math.sqrt(2.0) / omega
        return VortexDomain(Disk(), r_tf, (0.0, 0.0), core_radius_xi / r_tf,
                            approximate=("harmonic trap: the uniform-disk point-vortex model of "
                                         "radius R_TF is only an approximation"))
    raise VorthermError(f"thermometry: trap shape {shape!r} has no point-vortex domain; accepted "
                        "shapes: disk, box (harmonic as a flagged approximation)")


@dataclass(frozen=True)
class GasConfiguration:
    """One frame's vortices on the domain, with what had to be left out."""

    positions: np.ndarray
    signs: np.ndarray
    left_out_wall: int
    left_out_pairs: int

    @property
    def n_plus(self) -> int:
        return int(np.count_nonzero(self.signs > 0))

    @property
    def n_minus(self) -> int:
        return int(np.count_nonzero(self.signs < 0))


def gas_configuration(x, y, sign, vd: VortexDomain) -> GasConfiguration:
    """Map detected vortices (xi) onto the point-vortex domain, leaving out what cannot fit.

    Vortices closer than one core radius to the wall are left out (they sit in the depleted
    layer); then, greedily by distance, any two vortices closer than two core radii are left out
    together (for opposite signs this is a pair about to annihilate; like-sign overlaps do not
    occur in a resolved field, but are handled the same way).
    """
    pos = vd.to_domain(x, y)
    signs = np.asarray(sign, dtype=np.int64)
    a = vd.core_radius
    inside = vd.domain.contains(pos, margin=a * 1.0001) if len(pos) else np.zeros(0, bool)
    n_wall = int(np.count_nonzero(~inside))
    pos, signs = pos[inside], signs[inside]
    n_pairs = 0
    if len(pos) > 1:
        d = np.hypot(pos[:, None, 0] - pos[None, :, 0], pos[:, None, 1] - pos[None, :, 1])
        np.fill_diagonal(d, np.inf)
        keep = np.ones(len(pos), dtype=bool)
        for flat in np.argsort(d, axis=None):
            i, j = divmod(int(flat), len(pos))
            if d[i, j] >= 2 * a * 1.0001:
                break
            if keep[i] and keep[j]:
                keep[i] = keep[j] = False
                n_pairs += 1
        pos, signs = pos[keep], signs[keep]
    return GasConfiguration(pos, signs, n_wall, n_pairs)
