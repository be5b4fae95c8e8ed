"""The unit disk |u| < 1 as a thermometry domain (length unit: the radius R).

The image of a vortex at u is at u / |u|^2, so that

.. math::

    4\\pi G(u, v) = \\ln\\frac{|1 - u\\bar v|^2}{|u - v|^2}, \\qquad
    2\\pi R(u) = \\ln(1 - |u|^2)

(Kirchhoff-Routh function of the disk; Lin, PNAS 27, 570 (1941)); the conformal radius
:math:`1 - |u|^2` is 1 at the centre (self energy 0). Conventions: :mod:`thermo.domains.base`.

Units: positions in R; energies in E0 = rho kappa^2 / (4 pi).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from numba import njit

from thermo.domains.base import (MOVE_SIGNATURE, PAIR_GRADIENT_SIGNATURE, PAIR_SIGNATURE,
                                 SELF_GRADIENT_SIGNATURE, SELF_SIGNATURE, VELOCITY_SIGNATURE,
                                 WALL_SIGNATURE, Domain,
                                 DomainKernels, GradientKernels, as_points, check_sizes)


# error_model="numpy": coincident vortices give inf (caught by the callers), not an exception
@njit(PAIR_SIGNATURE, cache=True, error_model="numpy")
def disk_pair(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> float:
    """Pair energy 4 pi G(z1, z2) of the unit disk for like signs. Units: E0."""
    num = 1.0 - 2.0 * (x1 * x2 + y1 * y2) + (x1 * x1 + y1 * y1) * (x2 * x2 + y2 * y2)
    dx = x1 - x2
    dy = y1 - y2
    return math.log(num / (dx * dx + dy * dy))


@njit(SELF_SIGNATURE, cache=True, error_model="numpy")
def disk_self(x: float, y: float, sign: int, params: np.ndarray) -> float:
    """Self energy ln(1 - |u|^2) = 2 pi R(u) of the unit disk, either sign. Units: E0."""
    return math.log(1.0 - (x * x + y * y))


@njit(SELF_GRADIENT_SIGNATURE, cache=True, error_model="numpy")
def disk_self_gradient(x: float, y: float, params: np.ndarray) -> complex:
    """Gradient of ln(1 - |u|^2): -2 u / (1 - |u|^2), as d/dx + i d/dy. Units: E0 / R."""
    f = -2.0 / (1.0 - (x * x + y * y))
    return complex(f * x, f * y)


@njit(PAIR_GRADIENT_SIGNATURE, cache=True, error_model="numpy")
def disk_pair_gradient(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> complex:
    """Gradient of :func:`disk_pair` with respect to (x1, y1), as d/dx1 + i d/dy1. Units: E0 / R."""
    r2 = x2 * x2 + y2 * y2
    num = 1.0 - 2.0 * (x1 * x2 + y1 * y2) + (x1 * x1 + y1 * y1) * r2
    dx = x1 - x2
    dy = y1 - y2
    d2 = dx * dx + dy * dy
    gx = 2.0 * (x1 * r2 - x2) / num - 2.0 * dx / d2
    gy = 2.0 * (y1 * r2 - y2) / num - 2.0 * dy / d2
    return complex(gx, gy)


@njit(VELOCITY_SIGNATURE, cache=True, error_model="numpy")
def disk_velocity(pos, signs, alpha, alpha_prime, self_gradient, pair_gradient, params, out):
    """Velocities of all vortices in the disk, the gradients written out (no indirect calls).

    The same equations as :func:`thermo.domains.base.pair_sum_velocity`; each pair is visited
    once (its 1/d part is antisymmetric, its image part shares the numerator). ``self_gradient``
    and ``pair_gradient`` (part of the common signature) are not needed. O(N^2 / 2).

    Units: positions in R, velocities in R per m R^2 / hbar.
    """
    n = pos.shape[0]
    c = 0.5 * (1.0 - alpha_prime)
    d = 0.5 * alpha
    g = np.empty((n, 2))
    for i in range(n):
        x1 = pos[i, 0]
        y1 = pos[i, 1]
        f = -2.0 / (1.0 - (x1 * x1 + y1 * y1))
        g[i, 0] = f * x1
        g[i, 1] = f * y1
    for i in range(n):
        x1 = pos[i, 0]
        y1 = pos[i, 1]
        r1 = x1 * x1 + y1 * y1
        for j in range(i + 1, n):
            x2 = pos[j, 0]
            y2 = pos[j, 1]
            r2 = x2 * x2 + y2 * y2
            ss = 2.0 * signs[i] * signs[j]
            inv_num = ss / (1.0 - 2.0 * (x1 * x2 + y1 * y2) + r1 * r2)
            dx = x1 - x2
            dy = y1 - y2
            inv_d2 = ss / (dx * dx + dy * dy)
            g[i, 0] += (x1 * r2 - x2) * inv_num - dx * inv_d2
            g[i, 1] += (y1 * r2 - y2) * inv_num - dy * inv_d2
            g[j, 0] += (x2 * r1 - x1) * inv_num + dx * inv_d2
            g[j, 1] += (y2 * r1 - y1) * inv_num + dy * inv_d2
    for i in range(n):
        out[i, 0] = c * signs[i] * g[i, 1] - d * g[i, 0]
        out[i, 1] = -c * signs[i] * g[i, 0] - d * g[i, 1]


@njit(WALL_SIGNATURE, cache=True, error_model="numpy")
def disk_wall_distance(x: float, y: float, params: np.ndarray) -> float:
    """Distance 1 - |u| to the circle (negative outside). Units: R."""
    return 1.0 - math.sqrt(x * x + y * y)


@njit(MOVE_SIGNATURE, cache=True, error_model="numpy")
def disk_move_change(pos, signs, index, x_new, y_new, params, min_dist2, self_fn, pair_fn,
                     ledger, out):
    """E(after) - E(before) for moving vortex ``index`` to (x_new, y_new) in the disk. O(N).

    The pair terms are ratios inside one logarithm, so they are multiplied together and a
    log is taken only when the running product leaves [1e-100, 1e100]: about one log per
    move instead of 2(N - 1). One factor is at most (4 / d_min^2)^2, far from overflow.
    Returns +inf if the new position is closer than sqrt(min_dist2) to another vortex.
    ``self_fn``, ``pair_fn`` and the pair ledger (part of the common signature) are not needed
    here: the old position's terms cost no more than reading them.

    Units: positions in R, energies in E0.
    """
    n = pos.shape[0]
    x_old = pos[index, 0]
    y_old = pos[index, 1]
    s_k = signs[index]
    r2_new = x_new * x_new + y_new * y_new
    r2_old = x_old * x_old + y_old * y_old
    d = math.log((1.0 - r2_new) / (1.0 - r2_old))
    acc = 1.0
    for j in range(n):
        if j == index:
            continue
        xj = pos[j, 0]
        yj = pos[j, 1]
        rj2 = xj * xj + yj * yj
        dxn = x_new - xj
        dyn = y_new - yj
        den_new = dxn * dxn + dyn * dyn
        if den_new < min_dist2:
            return np.inf
        dxo = x_old - xj
        dyo = y_old - yj
        den_old = dxo * dxo + dyo * dyo
        num_new = 1.0 - 2.0 * (x_new * xj + y_new * yj) + r2_new * rj2
        num_old = 1.0 - 2.0 * (x_old * xj + y_old * yj) + r2_old * rj2
        a = num_new * den_old
        b = den_new * num_old
        if s_k * signs[j] > 0:
            acc *= a / b
        else:
            acc *= b / a
        if acc > 1e100 or acc < 1e-100:
            d += math.log(acc)
            acc = 1.0
    return d + math.log(acc)


@dataclass(frozen=True)
class Disk(Domain):
    """The unit disk |u| < 1; positions are u = r / R. The image of u is u / |u|^2.

    Units: lengths in the disk radius R.
    """

    kind: ClassVar[str] = "disk"
    size_names: ClassVar[tuple[str, ...]] = ("radius",)
    conserves_angular_impulse: ClassVar[bool] = True

    @classmethod
    def from_sizes(cls, sizes: Mapping[str, float]) -> tuple[Disk, float]:
        """The disk of radius ``sizes["radius"]`` and that radius as the length unit.

        Units: those of ``sizes``.
        """
        return cls(), check_sizes(cls, sizes)["radius"]

    @property
    def area(self) -> float:
        """Area pi (units: R^2)."""
        return math.pi

    @property
    def max_step(self) -> float:
        """Cap on the half-width of the proposal square of a move: the diameter 2, which
        reaches every point of the disk from every other. Units: R."""
        return 2.0

    def key(self) -> tuple:
        """Hashable identity for caches."""
        return ("disk",)

    def kernels(self) -> DomainKernels:
        """The disk's compiled kernels; the parameter vector is unused (one zero)."""
        return DomainKernels(disk_self, disk_pair, disk_wall_distance, disk_move_change,
                             np.zeros(1), keeps_ledger=False)

    def gradient_kernels(self) -> GradientKernels:
        """The disk's compiled energy gradients (image at u / |u|^2). Units: E0 / R."""
        return GradientKernels(disk_self_gradient, disk_pair_gradient, disk_velocity,
                               np.zeros(1))

    def distance_to_wall(self, pos) -> np.ndarray:
        """Distance 1 - |u| of each point to the circle (negative outside). Units: R."""
        p = as_points(pos, "pos")
        return 1.0 - np.hypot(p[..., 0], p[..., 1])

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform in the disk |u| < 1 - margin, shape (n, 2).

        Units: R.
        """
        r = (1.0 - margin) * np.sqrt(rng.random(n))
        phi = 2.0 * np.pi * rng.random(n)
        return np.column_stack((r * np.cos(phi), r * np.sin(phi)))
