"""The one table of vortex-gas quantities: name, unit and meaning.

Every place that names one of these quantities takes its unit and description from here: the
diagnostics recorded in a run file (gpe.analysis.diagnostics), the quantities a sweep measures
(gpe.sweep.file), the rows of a simulated-vs-measured comparison (thermo.data.compare) and
the figures. A unit of ``"1"`` means a pure number (counts and fractions included).

Units: E0 = rho kappa^2 / (4 pi); lengths of the vortex gas in units of the domain size
(disk radius, or the box side along y).
"""

from __future__ import annotations

from dataclasses import dataclass

#: The energy unit of the point-vortex gas, spelled out once.
E0 = "rho kappa^2/(4 pi)"


@dataclass(frozen=True)
class Quantity:
    """A named quantity with its unit and a one-line description. Units: as ``unit`` says."""

    name: str
    unit: str
    description: str


QUANTITIES: dict[str, Quantity] = {q.name: q for q in (
    Quantity("n_plus", "1", "number of positive (counter-clockwise) vortices"),
    Quantity("n_minus", "1", "number of negative (clockwise) vortices"),
    Quantity("beta", "1/E0", f"inverse temperature of the vortex gas, beta~ = beta E0, E0 = {E0}"),
    Quantity("beta_n", "1", "beta~ N, the inverse temperature times the vortex number: compares "
             "gases of different N"),
    Quantity("omega", "E0", "rotation frequency of the rotating ensemble exp[-beta (H - omega M)], "
             "M = sum s_i |u_i|^2 (in E0 per squared disk radius; thermo.rotation)"),
    Quantity("energy_per_vortex", "E0", "point-vortex energy per vortex (constant N ln(R/a) dropped)"),
    Quantity("dipole_moment", "domain size", "D = |sum s_i u_i| / N"),
    Quantity("c1", "1", "C1 = (1/N) sum_i s_i s_nn(i), nn the nearest neighbour"),
    Quantity("dipole_fraction", "1", "fraction of vortices bound in +- dipoles"),
    Quantity("cluster_fraction", "1", "fraction of vortices in like-sign clusters"),
    Quantity("free_fraction", "1", "fraction of free vortices"),
    Quantity("mean_nn_distance", "domain size", "mean nearest-neighbour distance"),
)}
