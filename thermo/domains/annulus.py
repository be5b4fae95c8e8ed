"""The annulus q < |u| < 1 as a thermometry domain, with a quantized circulation on the hole.

Length unit: the outer radius R; ``inner = q`` is the ratio of the inner to the outer radius.

An annulus is doubly connected: besides the vortices, the flow has a circulation around the hole,
``hole_winding`` quanta (the winding number of the phase on a loop around the hole that encloses
no vortex). Point-vortex motion keeps it fixed, so the ensemble is taken at fixed winding.

**Green's function.** With the Schottky-Klein prime function of the annulus in product form,

.. math::

    P(\\zeta) = (1 - \\zeta)\\prod_{k \\ge 1}(1 - q^{2k}\\zeta)(1 - q^{2k}/\\zeta),

the function

.. math::

    G_h(z, a) = -\\frac{1}{2\\pi}\\ln\\frac{|a|\\,|P(z/a)|}{|P(z\\bar a)|}

(Crowdy, *Solved Problems in Vortex Dynamics* (2020), the annulus's hydrodynamic Green's function)
is harmonic in z except for the point vortex at a, vanishes on the outer circle, is constant on
the inner one (``P(q^2\\zeta) = -P(\\zeta)/\\zeta``) and carries no circulation around the hole.
It differs from the Dirichlet Green's function :math:`G_D` (zero on both circles) by
:math:`\\ln|z|\\ln|a| / (2\\pi\\ln(1/q))` (Lin, PNAS 27, 575 (1941): the Green's function of a
multiply connected domain at fixed circulations); the constant of :math:`G_D` on the inner circle
is the harmonic measure that a vortex would drag onto the hole. Both are checked in the tests
against an independent separation-of-variables series.

**Energy at fixed hole circulation.** For vortices of signs :math:`s_i` and ``n`` quanta around
the hole (stream function zero on the outer circle), the kinetic energy is, in
:math:`E_0 = \\rho\\kappa^2/(4\\pi)` and with the constant :math:`N\\ln(R/a)` dropped,

.. math::

    E/E_0 = \\sum_{i<j} s_i s_j\\,4\\pi G_h(z_i, z_j) + \\sum_i 2\\pi R_h(z_i)
            - 2n\\sum_i s_i \\ln|z_i| + n^2\\ln(1/q),

the last term constant (dropped). Derivation: :math:`E = \\tfrac{\\rho}{2}\\int|\\nabla\\psi|^2
= \\tfrac{\\rho}{2}[\\int\\psi\\,\\omega\\,dA + \\psi_{\\rm hole}\\Gamma_{\\rm hole}]` with
:math:`\\psi = \\kappa\\sum_i s_i G_h(\\cdot, z_i) - n\\kappa\\ln|z|/(2\\pi)` (the hole's flow is that
of n quanta at the centre), whose value on the inner circle is
:math:`\\psi_{\\rm hole} = -\\kappa[\\sum_i s_i \\ln|z_i| + n\\ln q]/(2\\pi)`, and
:math:`\\Gamma_{\\rm hole} = n\\kappa` (:math:`G_h` adds none). The third term is each vortex's energy in
the hole's flow :math:`v_\\theta = n\\kappa/(2\\pi r)`, the disk's pair energy with n quanta at the
centre; it is odd in the sign, so at :math:`n \\ne 0` a vortex and
an antivortex are not equivalent, and it sits in the self kernel (which takes the sign). The
Robin function of :math:`G_h` is

.. math:: 2\\pi R_h(a) = \\ln P(|a|^2) - 2\\sum_{k\\ge1}\\ln(1 - q^{2k}),

which tends to the disk's :math:`\\ln(1 - |a|^2)` as q -> 0.

Units: positions in R; energies in E0 = rho kappa^2 / (4 pi).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from numba import njit

from thermo.domains.base import (PAIR_SIGNATURE, SELF_SIGNATURE, WALL_SIGNATURE, Domain,
                                 DomainKernels, as_points, check_sizes, pair_sum_move_change)
from thermo.errors import DomainError

# Index of each entry of the parameter vector handed to the compiled kernels.
_P_Q, _P_NTERMS, _P_LNC, _P_WINDING = range(4)
#: Terms of the product kept: q^(2K) below this (the next factor is 1 to double precision).
_PRODUCT_TOLERANCE = 1e-18


@njit(cache=True, error_model="numpy")
def _ln_abs_prime(zr: float, zi: float, params: np.ndarray) -> float:
    """ln|P(zeta)| of the annulus's prime function at zeta = zr + i zi (product form)."""
    q2 = params[_P_Q] * params[_P_Q]
    r2 = zr * zr + zi * zi
    # |1 - zeta|^2, then |1 - t zeta|^2 |1 - t / zeta|^2 for t = q^2, q^4, ...
    acc = (1.0 - zr) * (1.0 - zr) + zi * zi
    t = 1.0
    total = 0.0
    for _ in range(int(params[_P_NTERMS])):
        t *= q2
        a = 1.0 - 2.0 * t * zr + t * t * r2
        b = 1.0 - 2.0 * t * zr / r2 + t * t / r2
        acc *= a * b
        if acc > 1e100 or acc < 1e-100:
            total += math.log(acc)
            acc = 1.0
    return 0.5 * (total + math.log(acc))


@njit(cache=True, error_model="numpy")
def _four_pi_green(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> float:
    """4 pi G_h(z1, z2), the annulus's hydrodynamic Green's function (no hole circulation)."""
    a2 = x2 * x2 + y2 * y2
    # z / a = z conj(a) / |a|^2 and z conj(a)
    zr = x1 * x2 + y1 * y2
    zi = y1 * x2 - x1 * y2
    ln_num = 0.5 * math.log(a2) + _ln_abs_prime(zr / a2, zi / a2, params)
    ln_den = _ln_abs_prime(zr, zi, params)
    return -2.0 * (ln_num - ln_den)


# error_model="numpy": coincident vortices give inf (caught by the callers), not an exception
@njit(PAIR_SIGNATURE, cache=True, error_model="numpy")
def annulus_pair(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> float:
    """Pair energy 4 pi G_h(z1, z2) of the annulus for like signs. Units: E0."""
    return _four_pi_green(x1, y1, x2, y2, params)


@njit(SELF_SIGNATURE, cache=True, error_model="numpy")
def annulus_self(x: float, y: float, sign: int, params: np.ndarray) -> float:
    """Self energy of a vortex of sign s at u: its image energy 2 pi R_h(u) = ln P(|u|^2)
    - 2 sum ln(1 - q^2k) and its energy -2 n s ln|u| in the hole's flow. Units: E0."""
    r2 = x * x + y * y
    return (_ln_abs_prime(r2, 0.0, params) - params[_P_LNC]
            - params[_P_WINDING] * sign * math.log(r2))


@njit(WALL_SIGNATURE, cache=True, error_model="numpy")
def annulus_wall_distance(x: float, y: float, params: np.ndarray) -> float:
    """Distance min(1 - |u|, |u| - q) to the nearer circle (negative outside). Units: R."""
    r = math.sqrt(x * x + y * y)
    return min(1.0 - r, r - params[_P_Q])


def _n_terms(q: float) -> int:
    """Factors of the product needed for double precision at inner radius ratio q."""
    return max(1, math.ceil(math.log(_PRODUCT_TOLERANCE) / (2.0 * math.log(q))))


@dataclass(frozen=True)
class Annulus(Domain):
    """The annulus ``inner < |u| < 1``, ``hole_winding`` circulation quanta around the hole.

    Parameters
    ----------
    inner : float
        Inner radius over outer radius, 0 < inner < 1.
    hole_winding : int
        Circulation around the hole in quanta (sign as the vortices' signs: +1 is
        counter-clockwise).

    Units: lengths in the outer radius R.
    """

    kind: ClassVar[str] = "annulus"
    size_names: ClassVar[tuple[str, ...]] = ("inner_radius", "radius")

    inner: float
    hole_winding: int = 0

    def __post_init__(self) -> None:
        q = self.inner
        if isinstance(q, bool) or not isinstance(q, (int, float, np.floating)) \
                or not math.isfinite(q) or not 0.0 < q < 1.0:
            raise DomainError(f"an annulus needs 0 < inner radius / outer radius < 1; got {q!r}")
        w = self.hole_winding
        if isinstance(w, bool) or not isinstance(w, (int, np.integer)):
            raise DomainError(f"an annulus's hole_winding must be a whole number of circulation "
                              f"quanta; got {w!r}")
        object.__setattr__(self, "inner", float(q))
        object.__setattr__(self, "hole_winding", int(w))

    @classmethod
    def from_sizes(cls, sizes: Mapping[str, float], hole_winding: int = 0) -> tuple["Annulus", float]:
        """The annulus of the given ``inner_radius`` < ``radius`` (outer), and the outer radius
        as the length unit.

        Units: those of ``sizes``.
        """
        s = check_sizes(cls, sizes)
        if s["inner_radius"] >= s["radius"]:
            raise DomainError(f"an annulus needs inner_radius < radius; got inner_radius "
                              f"{s['inner_radius']:g} and radius {s['radius']:g}")
        return cls(s["inner_radius"] / s["radius"], hole_winding), s["radius"]

    @property
    def area(self) -> float:
        """Area pi (1 - q^2) (units: R^2)."""
        return math.pi * (1.0 - self.inner**2)

    @property
    def max_step(self) -> float:
        """The outer diameter 2, which reaches every point from every other. Units: R."""
        return 2.0

    @property
    def hole_circulation(self) -> tuple[int, ...]:
        """(hole_winding,). Units: quanta."""
        return (self.hole_winding,)

    def at_hole_circulation(self, windings) -> Annulus:
        """The annulus with ``windings[0]`` quanta on its hole."""
        w = tuple(windings)
        if len(w) != 1:
            raise DomainError(f"an annulus has one hole; got windings {w!r}")
        return Annulus(self.inner, w[0])

    def hole_region(self, pos, cut: float) -> np.ndarray:
        """1 where |u| < inner + cut, else 0. Units: R."""
        p = as_points(pos, "pos")
        return (np.hypot(p[..., 0], p[..., 1]) < self.inner + cut).astype(np.int64)

    def key(self) -> tuple:
        """Hashable identity for caches: the radius ratio (12 digits) and the winding."""
        return ("annulus", round(self.inner, 12), self.hole_winding)

    def kernels(self) -> DomainKernels:
        """The annulus's compiled kernels; parameters (q, product terms, ln C^2, winding)."""
        q = self.inner
        n_terms = _n_terms(q)
        q2k = q ** (2.0 * np.arange(1, n_terms + 1))
        ln_c2 = 2.0 * float(np.sum(np.log1p(-q2k)))
        params = np.array([q, float(n_terms), ln_c2, float(self.hole_winding)])
        return DomainKernels(annulus_self, annulus_pair, annulus_wall_distance,
                             pair_sum_move_change, params)

    def distance_to_wall(self, pos) -> np.ndarray:
        """Distance min(1 - |u|, |u| - q) to the nearer circle (negative outside). Units: R."""
        p = as_points(pos, "pos")
        r = np.hypot(p[..., 0], p[..., 1])
        return np.minimum(1.0 - r, r - self.inner)

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform in ``q + margin < |u| < 1 - margin``, shape (n, 2).

        Units: R.
        """
        lo, hi = self.inner + margin, 1.0 - margin
        if lo >= hi:
            raise DomainError(f"a margin of {margin:g} R leaves no room in the annulus "
                              f"{self.inner:g} < |u| < 1")
        r = np.sqrt(lo * lo + (hi * hi - lo * lo) * rng.random(n))
        phi = 2.0 * np.pi * rng.random(n)
        return np.column_stack((r * np.cos(phi), r * np.sin(phi)))
