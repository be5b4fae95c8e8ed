"""Point-vortex domains solved on a grid, for the traps without an analytic one (harmonic, mask).

A harmonic trap's fluid is not uniform and a mask's region is not a circle, so neither has a
closed-form Green's function; both get a :class:`thermo.domains.grid.GridDomain` (the stream
function of -div[(1/nu) grad G] = delta with G = 0 where the fluid ends, solved once and cached,
see that module):

* **harmonic**: the ground state of the static trap at mu = 1 (the potential as the run's own
  trap gives it, anisotropy and cap included; no beams, no vortices), relaxed by the project's
  imaginary-time solver on the domain grid (:func:`ground_state_density`), cut where
  nu < ``DENSITY_CUT``; the length unit is the geometric-mean Thomas-Fermi radius
  sqrt(2)/omega. It differs from the Thomas-Fermi profile 1 - V by its kinetic-energy
  correction, mostly in the edge layer of a few healing lengths: a point vortex's precession
  from it is 0.5-1% faster than from the Thomas-Fermi profile at 0.2-0.45 R, and matches the
  GPE's (docs/numerical-domains.md). The run's own stored ground state is not used: it holds
  the beams' holes and any imprinted cores.
* **mask**: a flat-bottomed region (nu = 1) shrunk by the wall layer, as the disk and box are:
  the fluid nodes are those deeper than ``wall_layer_xi`` inside the mask's own signed distance.
  The length unit is the largest distance of a fluid node from the trap centre. A mask with
  holes (a ring, say) gives a domain whose holes carry circulation, at zero until the run's
  frames give each hole's winding (gpe.run.frames), as for the annulus.

The domain grid has ``DOMAIN_NODES`` nodes across the larger side of the fluid (plus dry
margin), the table of the Green's function's smooth part every ``TABLE_STRIDE``-th node. The effective core radius of the vortex energy at the reference density,
a_ref = xi / (1.464 sqrt 2) = 0.483 xi, enters through ln(L/a_ref) (only where nu is not 1):
E = pi n hbar^2/m ln(1.464 b / xi') for a vortex at the centre of a disk of radius b, with
xi' = hbar / sqrt(2 m g n) (Pethick & Smith, Bose-Einstein Condensation in Dilute Gases,
2nd ed. (2008), section 9.2; the constant from memory), and xi' = xi / sqrt 2 in healing units.

Units: lengths in xi (trap side), in the domain's length unit on the thermo side.
"""

from __future__ import annotations

import hashlib
import math

import numpy as np

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.field.ground_state import find_ground_state
from gpe.field.traps.base import VortexDomain
from thermo.domains.grid import GridDomain, hole_labels
from thermo.errors import DomainError

#: nodes of the domain grid across the larger side of the fluid
DOMAIN_NODES = 80
#: the Green's function's table has a node every TABLE_STRIDE grid nodes (20 across the fluid:
#: a 1.4 MB table that stays in a core's cache; the staircase wall, not the table, dominates
#: the error: docs/numerical-domains.md)
TABLE_STRIDE = 4
#: dry margin of the domain grid on each side, in nodes
MARGIN_NODES = 4
#: a harmonic trap's fluid ends where the Thomas-Fermi density falls below this fraction of the
#: centre's (moves the edge by 2.5% of R; docs/numerical-domains.md)
DENSITY_CUT = 0.05
#: effective core radius of the vortex energy at the reference density, in xi (module docstring)
ENERGY_CORE_XI = 1.0 / (1.464 * math.sqrt(2.0))


#: the ground-state density is rounded to this many decimals: its digest keys the Green's
#: function's cache, which must not follow the last bits of an FFT
DENSITY_DECIMALS = 9
#: ground-state densities kept per process (a sweep over trap frequencies relaxes each trap
#: once; the oldest is dropped beyond this many, ~80 kB each)
KEPT_DENSITIES = 32
_GROUND_DENSITIES: dict = {}


def ground_state_density(grid: Grid, potential: np.ndarray) -> np.ndarray:
    """|psi|^2 of the ground state in ``potential`` at mu = 1 (g = 1, so the Thomas-Fermi
    density is 1 - V), by imaginary time (:func:`gpe.field.ground_state.find_ground_state`,
    fixed chemical potential, dt = 0.05 hbar/mu, relative tolerance 1e-9), rounded to
    ``DENSITY_DECIMALS`` decimals; the last ``KEPT_DENSITIES`` are kept for the process (a
    relaxation takes a few hundred ms at 80 nodes).

    Units: V in mu, lengths in xi, density in n0.
    """
    v = np.ascontiguousarray(potential, dtype=np.float64)
    key = (grid.nx, grid.ny, grid.length_x, grid.length_y, hashlib.sha1(v.tobytes()).hexdigest())
    if key not in _GROUND_DENSITIES:
        gs = find_ground_state(grid, v, mu=1.0, dt=0.05, tol=1e-9, threads=1,
                               fft_planning="reproducible")
        if not gs.converged:
            raise VorthermError(f"thermometry: the trap's ground state on the {grid.nx} x "
                                f"{grid.ny} domain grid did not converge in {gs.steps} steps")
        while len(_GROUND_DENSITIES) >= KEPT_DENSITIES:
            _GROUND_DENSITIES.pop(next(iter(_GROUND_DENSITIES)))
        _GROUND_DENSITIES[key] = np.round(np.abs(gs.psi) ** 2, DENSITY_DECIMALS)
    return _GROUND_DENSITIES[key].copy()


def domain_grid(extent_x: float, extent_y: float, nodes: int = DOMAIN_NODES) -> Grid:
    """A square-celled grid centred on the trap, ``nodes`` across the larger extent plus a dry
    margin. Units: xi."""
    h = max(extent_x, extent_y) / nodes
    nx = 2 * (math.ceil(0.5 * extent_x / h) + MARGIN_NODES)
    ny = 2 * (math.ceil(0.5 * extent_y / h) + MARGIN_NODES)
    return Grid(nx, ny, nx * h, ny * h)


def grid_vortex_domain(shape: str, grid: Grid, fluid: np.ndarray, nu: np.ndarray,
                       scale: float, core_radius_xi: float) -> VortexDomain:
    """The :class:`GridDomain` of a fluid on ``grid`` (xi), in units of ``scale`` (xi).

    Raises VorthermError naming the trap shape when the fluid is empty, touches the grid's edge
    or is too small for a vortex gas. Units: xi.
    """
    if not fluid.any():
        raise VorthermError(f"thermometry: the {shape} trap leaves no fluid for a vortex gas "
                            "(no grid node inside its wall layer)")
    if scale <= 4 * core_radius_xi:
        raise VorthermError(f"thermometry: the {shape} trap's fluid reaches {scale:.3g} xi from "
                            "its centre, too small for a vortex gas (need several healing "
                            "lengths)")
    try:
        # holes carry no circulation yet: the run's frames give it (gpe.run.frames)
        domain = GridDomain(fluid, np.where(fluid, nu, 0.0), spacing=grid.dx / scale,
                            origin=(float(grid.x[0]) / scale, float(grid.y[0]) / scale),
                            log_length_over_core=math.log(scale / ENERGY_CORE_XI),
                            stride=TABLE_STRIDE,
                            hole_windings=(0,) * int(hole_labels(fluid).max()))
    except DomainError as err:
        raise VorthermError(f"thermometry: the {shape} trap's grid domain: {err}") from err
    return VortexDomain(domain, scale, (0.0, 0.0), core_radius_xi / scale)
