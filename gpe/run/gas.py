"""Bridge from the field side to the vortex gas: detected vortices -> thermo configurations.

The thermometry back end (``thermo``) works with signed points in a unit domain and a hard core.
Each trap shape decides which domain stands in for it (``vortex_domain`` of the classes in
gpe.field.traps), given the wall layer and core radius of this module; this module maps detected
vortices onto that domain:

* a flat-bottomed disk of radius R becomes the unit disk with R_eff = R - ``wall_layer`` (the
  density vanishes over about one healing length at a hard wall, so the superfluid edge sits
  inside the nominal radius: common practice);
* a box becomes a ``thermo.domains.box.Box`` with the same aspect ratio, shrunk the same way;
* a harmonic trap becomes the disk of the Thomas–Fermi radius, **flagged** as an approximation
  (the density is not uniform, so the uniform-domain point-vortex model is only indicative);
* annulus and mask traps have no point-vortex domain here; thermometry refuses them clearly.

Vortices in the wall layer or closer to each other than two core radii (a pair about to
annihilate) cannot be placed in the hard-core ensemble; they are left out and *counted*, and the
count is reported beside every estimate.

Units: inputs in xi (healing lengths); outputs in the domain's scaled length.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from gpe.field.traps.base import Trap, VortexDomain

#: Thickness of the depleted layer at a hard wall, in healing lengths (common practice: ~1 xi).
WALL_LAYER_XI = 1.0
#: Hard-core radius of a vortex in healing lengths: centres closer than 2a are one pair.
CORE_RADIUS_XI = 0.5


def domain_for_trap(trap: Trap, core_radius_xi: float = CORE_RADIUS_XI,
                    wall_layer_xi: float = WALL_LAYER_XI) -> VortexDomain:
    """The point-vortex domain of a resolved trap, with this module's wall layer and core.

    Units: lengths in xi.
    """
    return trap.vortex_domain(core_radius_xi, wall_layer_xi)


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
