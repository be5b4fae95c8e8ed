"""Bridge from the field side to the vortex gas: detected vortices -> thermo configurations.

The thermometry back end (``thermo``) works with signed points in a unit domain and a hard core.
Each trap shape decides which domain stands in for it (``vortex_domain`` of the classes in
gpe.field.traps), given the wall layer and core radius of this module; this module maps detected
vortices onto that domain:

* a flat-bottomed disk of radius R becomes the unit disk with R_eff = R - ``wall_layer`` (the
  density vanishes over about one healing length at a hard wall, so the superfluid edge sits
  inside the nominal radius: common practice);
* a box becomes a ``thermo.domains.box.Box`` with the same aspect ratio, shrunk the same way;
* a harmonic trap becomes a thermo.domains.grid.GridDomain of the density of its ground state
  at mu = 1 (relaxed without beams or vortices; length unit the Thomas–Fermi radius), its
  Green's function solved on a grid (gpe.field.traps._numerical): the energy of each vortex
  follows the local density;
* an annulus becomes thermo.domains.annulus.Annulus, shrunk by the wall layer at both walls, at
  the circulation its hole carries in the frames (gpe.run.frames.RunSeries.gas);
* a mask trap becomes a uniform GridDomain of its allowed region shrunk by the wall layer, whose
  holes (if the mask has any) carry the circulation of the frames, as the annulus's.

Vortices in the wall layer or closer to each other than two core radii (a pair about to
annihilate) cannot be placed in the hard-core ensemble; they are left out by the one rule of
thermo/admission.py (measured tables use it too) and *counted*, and the count is reported beside
every estimate.

Units: inputs in xi (healing lengths); outputs in the domain's scaled length.
"""

from __future__ import annotations

import numpy as np

from gpe.field.traps.base import Trap, VortexDomain
from thermo.admission import Admitted, admit

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


def gas_configuration(x, y, sign, vd: VortexDomain, wall_cut: float = 1.0) -> Admitted:
    """Map detected vortices (xi) onto the point-vortex domain, leaving out what cannot fit.

    The rule is :func:`thermo.admission.admit`, the same for measured tables: vortices closer
    than ``wall_cut`` core radii to the wall are left out, then both vortices of any pair closer
    than two core radii; both counts are kept.
    """
    return admit(vd.to_domain(x, y), np.asarray(sign, dtype=np.int64), vd.domain,
                 vd.core_radius, wall_cut=wall_cut)
