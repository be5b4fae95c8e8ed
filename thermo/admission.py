"""The one rule that decides which vortices of a configuration the hard-core gas can hold.

Every configuration that reaches the thermometry, simulated frame or measured shot, passes
through :func:`admit` with the core radius its estimate uses:

1. a vortex closer than ``wall_cut`` core radii to the wall is left out (it sits in the
   depleted layer, where the point-vortex model of the bounded domain does not describe it);
2. then, greedily from the closest pair up, any two vortices closer than two core radii are
   **both** left out (for opposite signs a pair about to annihilate; like-sign overlaps do not
   occur in a resolved field but are handled the same way), so a shot never becomes a
   configuration with one vortex of a pair silently missing.

What was left out is counted and carried beside every estimate.

Units: positions and the core radius in the domain's scaled length.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

#: relative slack on the distances, so a configuration exactly at the limits stays admitted
_SLACK = 1.0001


@dataclass(frozen=True)
class Admitted:
    """One configuration after :func:`admit`: what the gas holds and what was left out."""

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


def admit(positions: Any, signs: Any, domain: Any, core_radius: float,
          wall_cut: float = 1.0) -> Admitted:
    """Apply the rule of this module to one configuration.

    Parameters
    ----------
    positions : (N, 2) scaled positions; signs : (N,) +1 / -1.
    domain : a thermo domain (``contains(pos, margin=...)``).
    core_radius : hard-core radius a.
    wall_cut : vortices closer than ``wall_cut * a`` to the wall are left out (1: the
        hard-core model's own limit; larger values are used to measure how much the result
        depends on the cut).

    Units: scaled lengths.
    """
    pos = np.asarray(positions, dtype=np.float64).reshape(-1, 2)
    sg = np.asarray(signs, dtype=np.int64).reshape(-1)
    a = float(core_radius)
    if len(pos) == 0:
        return Admitted(pos, sg, 0, 0)
    inside = np.asarray(domain.contains(pos, margin=max(wall_cut, 1.0) * a * _SLACK), bool)
    n_wall = int(np.count_nonzero(~inside))
    pos, sg = pos[inside], sg[inside]
    n_pairs = 0
    if len(pos) > 1 and a > 0:
        d = np.hypot(pos[:, None, 0] - pos[None, :, 0], pos[:, None, 1] - pos[None, :, 1])
        np.fill_diagonal(d, np.inf)
        keep = np.ones(len(pos), dtype=bool)
        for flat in np.argsort(d, axis=None):
            i, j = divmod(int(flat), len(pos))
            if d[i, j] >= 2 * a * _SLACK:
                break
            if keep[i] and keep[j]:
                keep[i] = keep[j] = False
                n_pairs += 1
        pos, sg = pos[keep], sg[keep]
    return Admitted(pos, sg, n_wall, n_pairs)


#: A core radius above this fraction of the domain size draws a CoreRadiusWarning (the project's
#: choice: the point-vortex gas needs a << R; its collapse bounds and the density of states are
#: those of points, and at a = 10% of R twenty hard cores already cover 20% of a disk).
CORE_WARN_FRACTION = 0.1


class CoreRadiusWarning(UserWarning):
    """The vortex core radius is not small against the domain."""


def core_radius_note(core_radius: float, domain: Any, n_vortices: int | None = None,
                     where: str = "") -> str:
    """A warning text (with the numbers) when ``core_radius`` exceeds CORE_WARN_FRACTION of
    the domain size, else "".

    ``n_vortices`` adds the fraction of the area the hard cores cover. Units: the core radius
    in the domain's scaled length (disk radius, or the box side along y = 1).
    """
    if not core_radius > CORE_WARN_FRACTION:
        return ""
    cover = ""
    if n_vortices:
        cover = (f"; {n_vortices} hard cores cover "
                 f"{100 * n_vortices * np.pi * core_radius**2 / domain.area:.3g}% of the area")
    return (f"{where + ': ' if where else ''}the vortex core radius is {100 * core_radius:.3g}% "
            f"of the domain size (more than {100 * CORE_WARN_FRACTION:g}%){cover}; the "
            f"point-vortex thermometry assumes cores much smaller than the domain, so its beta "
            f"and collapse bounds are unreliable here: use a larger domain or a smaller core")
