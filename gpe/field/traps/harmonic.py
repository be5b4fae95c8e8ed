"""The harmonic trap ``V = (wx^2 x^2 + wy^2 y^2) / 2``, optionally capped.

Its wall is the Thomas-Fermi edge at mu = 1: the ellipse ``V = 1`` with semi-axes
``sqrt(2) / omega``, where the density of the Thomas-Fermi ground state vanishes.

Units: lengths in xi, energies in mu, angular frequencies in rad per hbar/mu.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from gpe.field.grid import Grid
from gpe.field.traps.base import WALL_HEIGHT_KEY, Trap, TrapSection, VortexDomain
from gpe.field.traps._numerical import (DENSITY_CUT, domain_grid, grid_vortex_domain,
                                        ground_state_density)

_RATE_KEY = {"kind": "float", "dim": "rate", "check": "positive"}
#: Vortices are reported where V < 0.9 mu: the edge of the cloud, where the density fades, is left out.
_DETECTION_LEVEL = 0.9


def ellipse_signed_distance(x: np.ndarray, y: np.ndarray, a: float, b: float) -> np.ndarray:
    """Exact signed distance to the centred ellipse ``(x/a)^2 + (y/b)^2 = 1`` (negative inside).

    With ``a > b`` and the point folded to ``p, q >= 0``, its nearest point on the ellipse is
    ``(a^2 p / (t + a^2), b^2 q / (t + b^2))`` where ``t > -b^2`` solves
    ``(a p / (t + a^2))^2 + (b q / (t + b^2))^2 = 1``; the left side falls monotonically in t,
    so bisection between ``-b^2 + b q`` and ``-b^2 + hypot(a p, b q)`` finds it. On the long axis
    closer to the centre than ``(a^2 - b^2) / a`` the nearest point leaves the axis, to
    ``x0 = a^2 p / (a^2 - b^2)``.

    Units: as the inputs (xi).
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    if a == b:
        return np.hypot(x, y) - a
    p, q = (np.abs(x), np.abs(y)) if a > b else (np.abs(y), np.abs(x))
    a, b = max(a, b), min(a, b)
    pa, qb = a * p, b * q
    lo, hi = -b * b + qb, -b * b + np.hypot(pa, qb)
    with np.errstate(divide="ignore", invalid="ignore"):
        for _ in range(64):
            t = 0.5 * (lo + hi)
            above = (pa / (t + a * a)) ** 2 + (qb / (t + b * b)) ** 2 > 1.0
            lo, hi = np.where(above, t, lo), np.where(above, hi, t)
        t = 0.5 * (lo + hi)
        near_y = np.where(q > 0, b * b * q / (t + b * b), 0.0)
        distance = np.hypot(p - a * a * p / (t + a * a), q - near_y)
    off_axis = (q == 0) & (p < (a * a - b * b) / a)
    x0 = np.where(off_axis, a * a * p / (a * a - b * b), 0.0)
    y0 = b * np.sqrt(np.clip(1.0 - (x0 / a) ** 2, 0.0, None))
    distance = np.where(off_axis, np.hypot(p - x0, y0), distance)
    return np.where((p / a) ** 2 + (q / b) ** 2 < 1.0, -distance, distance)


@dataclass(frozen=True, kw_only=True)
class HarmonicTrap(Trap):
    """An anisotropic harmonic trap, optionally capped at ``wall_height``.

    Parameters
    ----------
    omega_x, omega_y : float
        Angular frequencies: ``V = (omega_x^2 x^2 + omega_y^2 y^2) / 2``.
    wall_height : float or None
        Cap of the potential (``None``: no cap).

    Units
    -----
    frequencies rad per hbar/mu, cap mu.
    """

    shape = "harmonic"
    protocol_keys = {"frequency": _RATE_KEY, "frequency_x": _RATE_KEY, "frequency_y": _RATE_KEY,
                     "wall_height": WALL_HEIGHT_KEY}

    omega_x: float = field(metadata={"dim": "rate"})
    omega_y: float = field(metadata={"dim": "rate"})
    wall_height: float | None = field(default=None, metadata={"dim": "energy"})

    @classmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> HarmonicTrap:
        """The trap from ``frequency_*`` (isotropic) or ``frequency_x_*`` with ``frequency_y_*``.

        Units: rad per hbar/mu, mu.
        """
        omega_x, omega_y = sec.pair("frequency", "frequency_x", "frequency_y")
        return cls(omega_x=omega_x, omega_y=omega_y, wall_height=sec.get("wall_height"))

    @classmethod
    def chemical_potential_si(cls, sec: TrapSection, base_dir: Path, number: float, g2d_Jm2: float,
                              mass_kg: float) -> float:
        """``mu = sqrt(g2D N m wx wy / pi)``: ``n = (mu - V) / g2D`` over the ellipse ``V < mu``
        holds ``N = pi mu^2 / (g2D m wx wy)`` atoms.

        Units: g2D in J m^2, mass in kg, frequencies read in rad/s; returns J.
        """
        omega_x, omega_y = sec.pair("frequency", "frequency_x", "frequency_y", si=True)
        return math.sqrt(g2d_Jm2 * number * mass_kg * omega_x * omega_y / math.pi)

    def semi_axes(self) -> tuple[float, float]:
        """Semi-axes ``sqrt(2) / omega`` of the Thomas-Fermi ellipse ``V = 1``. Units: xi."""
        return math.sqrt(2.0) / self.omega_x, math.sqrt(2.0) / self.omega_y

    def extent(self) -> tuple[float, float]:
        """The Thomas-Fermi diameters at mu = 1, ``2 sqrt(2) / omega``. Units: xi."""
        a, b = self.semi_axes()
        return 2 * a, 2 * b

    def area(self) -> float:
        """Area of the Thomas-Fermi ellipse at mu = 1, ``pi a b = 2 pi / (wx wy)``. Units: xi^2."""
        a, b = self.semi_axes()
        return math.pi * a * b

    def thomas_fermi_norm(self) -> float:
        """``integral of (1 - V)`` over the ellipse: half its area, ``pi / (wx wy)``. Units: xi^2."""
        return 0.5 * self.area()

    def potential(self, grid: Grid) -> np.ndarray:
        """``(wx^2 x^2 + wy^2 y^2) / 2``, capped at ``wall_height`` if set. Units: mu."""
        V = 0.5 * (self.omega_x**2 * grid.X**2 + self.omega_y**2 * grid.Y**2)
        V = np.minimum(V, self.wall_height) if self.wall_height is not None else V
        return np.ascontiguousarray(V, dtype=np.float64)

    def signed_distance(self, grid: Grid) -> np.ndarray:
        """Signed distance to the Thomas-Fermi ellipse ``V = 1`` (negative inside). Units: xi."""
        return ellipse_signed_distance(grid.X, grid.Y, *self.semi_axes())

    def detection_region(self, v_static: np.ndarray) -> np.ndarray:
        """Below 0.9 mu: inside the cloud, away from its fading edge. Units: ``v_static`` in mu."""
        return v_static < _DETECTION_LEVEL

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """The fluid of the trap's ground state (relaxed at mu = 1, no beams) on a grid, its
        Green's function solved numerically (gpe.field.traps._numerical); the length unit is
        ``R = sqrt(2) / omega``, omega the geometric mean. There is no hard wall, so
        ``wall_layer_xi`` is not used.

        Units
        -----
        lengths in xi.
        """
        a, b = self.semi_axes()
        grid = domain_grid(2.0 * a, 2.0 * b)
        nu = ground_state_density(grid, self.potential(grid))
        r_tf = math.sqrt(2.0 / (self.omega_x * self.omega_y))
        return grid_vortex_domain(self.shape, grid, nu > DENSITY_CUT, nu, r_tf, core_radius_xi)
