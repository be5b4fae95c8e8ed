"""The interface of a thermometry domain and the compiled loops every domain shares.

A domain is a bounded shape with lengths scaled by a size of its own, so that the statistics
depend only on the shape. Each concrete class (one module per shape in this package) gives

* its user-facing kind name (:attr:`Domain.kind`) and a stable cache key (:meth:`Domain.key`);
* containment with a margin, through the distance to the wall (:meth:`Domain.distance_to_wall`);
* uniform sampling (:meth:`Domain.sample_uniform`) and the sampling box of the Monte Carlo
  moves (:attr:`Domain.max_step`);
* its compiled energy kernels (:meth:`Domain.kernels`): the self term (image energy, and the
  energy in the domain's own flow where it has one), the pair
  Green's function, the distance to the wall and the energy change of a single move.

The compiled Monte Carlo and energy loops (:mod:`thermo.sampler`, :mod:`thermo.energy`) take
those kernels as numba first-class function arguments typed by the signatures below, so they
never know which shapes exist; this module builds :meth:`Domain.green` and
:meth:`Domain.robin` for arrays on the same kernels.

Green's function convention (the mathematician's one): :math:`-\\nabla^2 G(z, z_0) =
\\delta(z - z_0)`, :math:`G = 0` on the wall, and

.. math:: G(z, z_0) = -\\frac{1}{2\\pi}\\ln|z - z_0| + h(z, z_0),

with the regular part ``h``; the Robin function is :math:`R(z) = h(z, z)` and the conformal
radius is :math:`r_c(z) = \\exp(2\\pi R(z))`.

In energy units :math:`E_0 = \\rho\\kappa^2/(4\\pi)` the pair energy of two vortices is
:math:`s_i s_j\\,4\\pi G(z_i, z_j)` and the self (image) energy of one vortex is
:math:`2\\pi R(z_i) = \\ln r_c(z_i)`, the constant :math:`N\\ln(L/a)` (L the length unit, a the
core) being dropped. Every shape shares this convention, so a vortex at a distance d from a
straight wall, far from all other walls, has :math:`r_c \\approx 2d` in any of them.

Units: positions dimensionless (scaled by the domain's length unit); G and R dimensionless;
energies in E0.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Callable, Mapping
from typing import ClassVar, NamedTuple

import numpy as np
from numba import njit, types

from thermo.errors import ConfigurationError, DomainError

# ---------------------------------------------------------------------------------------------
# Kernel signatures.  The compiled loops are declared with these first-class function types:
# a call through them is an indirect call, but the loops are compiled once for every domain and
# cached on disk, which a specialisation on each kernel's own numba type would not allow (its
# cache index never matches in a new process).
# ---------------------------------------------------------------------------------------------
PARAMS = types.float64[::1]
POINTS = types.float64[:, ::1]
SIGNS = types.int64[::1]

#: (x, y, s, params) -> the self energy of one vortex of sign s at z: its image energy
#: 2 pi R(z) = ln r_c(z), plus, in a domain with a flow of its own (the circulation around an
#: annulus's hole), the vortex's energy in that flow, which is odd in s. Units: E0.
SELF_SIGNATURE = types.float64(types.float64, types.float64, types.int64, PARAMS)
#: (x1, y1, x2, y2, params) -> 4 pi G(z1, z2), the pair energy of like signs. Units: E0.
PAIR_SIGNATURE = types.float64(types.float64, types.float64, types.float64, types.float64, PARAMS)
#: (x, y, params) -> distance to the nearest wall, negative outside. Units: length unit.
WALL_SIGNATURE = types.float64(types.float64, types.float64, PARAMS)

SelfKernel = types.FunctionType(SELF_SIGNATURE)
PairKernel = types.FunctionType(PAIR_SIGNATURE)
WallKernel = types.FunctionType(WALL_SIGNATURE)

#: The pair ledger of one configuration, (N, N): ``ledger[i, j]`` is what the move kernel wrote
#: into ``out[j]`` when it last placed vortex i (see :data:`MOVE_SIGNATURE`).
LEDGER = types.float64[:, ::1]

#: (pos, signs, index, x_new, y_new, params, min_dist2, self_fn, pair_fn, ledger, out) ->
#: E(after) - E(before) for moving one vortex, +inf when the new position is closer than
#: sqrt(min_dist2) to another vortex. The domain's own self and pair kernels are handed in, so
#: that one generic implementation (:func:`pair_sum_move_change`) serves every domain without a
#: faster one of its own.
#:
#: The ledger spares a kernel the old position's pair terms: a kernel may read
#: ``ledger[index, j]``, the quantity it wrote into ``out[j]`` (j != index) when vortex
#: ``index`` was last placed at its present position with vortex j where it is now, and it
#: writes that quantity for the new position into ``out``; ``out[index]`` (so the diagonal
#: ``ledger[j, j]``) may hold a quantity of the placed vortex alone. The caller keeps the
#: ledger (:func:`fill_ledger` once, then row and column ``index`` set to ``out`` when a move
#: is accepted). The quantities are the kernel's own (a pair energy, a part of it, a local
#: density), and a kernel with no use for them (the disk's) neither reads nor writes either
#: array. Units: E0.
MOVE_SIGNATURE = types.float64(POINTS, SIGNS, types.int64, types.float64, types.float64, PARAMS,
                               types.float64, SelfKernel, PairKernel, LEDGER, types.float64[::1])
MoveKernel = types.FunctionType(MOVE_SIGNATURE)
#: (x, y, params) -> gradient of the self energy 2 pi R(z) as a complex number
#: d/dx + i d/dy. Units: E0 per length unit.
SELF_GRADIENT_SIGNATURE = types.complex128(types.float64, types.float64, PARAMS)
#: (x1, y1, x2, y2, params) -> gradient of the pair energy 4 pi G(z1, z2) with respect to the
#: first point, as d/dx1 + i d/dy1. Units: E0 per length unit.
PAIR_GRADIENT_SIGNATURE = types.complex128(types.float64, types.float64, types.float64,
                                           types.float64, PARAMS)
SelfGradientKernel = types.FunctionType(SELF_GRADIENT_SIGNATURE)
PairGradientKernel = types.FunctionType(PAIR_GRADIENT_SIGNATURE)
#: (pos, signs, alpha, alpha_prime, self_gradient, pair_gradient, params, out) -> None: the
#: velocities du/ds of all vortices with mutual friction written into ``out`` (N, 2) (equations
#: in :mod:`thermo.dynamics.velocity`). As for :data:`MOVE_SIGNATURE`, the gradient kernels are
#: handed in so that the generic :func:`pair_sum_velocity` serves every domain; a domain may
#: give a faster one of its own. Units: L per scaled time m L^2 / hbar.
VELOCITY_SIGNATURE = types.void(POINTS, SIGNS, types.float64, types.float64, SelfGradientKernel,
                                PairGradientKernel, PARAMS, POINTS)
VelocityKernel = types.FunctionType(VELOCITY_SIGNATURE)


class DomainKernels(NamedTuple):
    """The compiled kernels of one domain and the parameter vector they all take.

    Attributes
    ----------
    self_energy : numba dispatcher with :data:`SELF_SIGNATURE`
    pair_energy : numba dispatcher with :data:`PAIR_SIGNATURE`
    wall_distance : numba dispatcher with :data:`WALL_SIGNATURE`
    move_change : numba dispatcher with :data:`MOVE_SIGNATURE`
    params : numpy.ndarray float64, C-contiguous, shape (P,)
        Shape parameters read by the kernels (never written).
    keeps_ledger : bool
        Whether ``move_change`` reads the pair ledger (:data:`MOVE_SIGNATURE`); a caller keeps
        one only then. True unless the kernel says otherwise: a ledger kept in vain costs
        time, one missing costs correctness.

    Units: as in the signatures (E0, length unit).
    """

    self_energy: Callable[..., float]
    pair_energy: Callable[..., float]
    wall_distance: Callable[..., float]
    move_change: Callable[..., float]
    params: np.ndarray
    keeps_ledger: bool = True


#: The numba types of the fields of :class:`DomainKernels`, in order: a compiled loop declared
#: with them in its signature is called with ``*domain.kernels()``.
KERNEL_TYPES = (SelfKernel, PairKernel, WallKernel, MoveKernel, PARAMS, types.boolean)


class GradientKernels(NamedTuple):
    """The compiled energy gradients of one domain: what point-vortex dynamics moves by.

    The Kirchhoff-Routh velocities are the symplectic gradient of the energy, so the domain
    that gives the thermometry its energy gives the dynamics its velocities (the image terms
    are the gradient of the self energy).

    Attributes
    ----------
    self_gradient : numba dispatcher with :data:`SELF_GRADIENT_SIGNATURE`
    pair_gradient : numba dispatcher with :data:`PAIR_GRADIENT_SIGNATURE`
    velocity : numba dispatcher with :data:`VELOCITY_SIGNATURE`
    params : numpy.ndarray float64, C-contiguous, shape (P,)
        The same parameter vector as :class:`DomainKernels`.

    Units: E0 per length unit.
    """

    self_gradient: Callable[..., complex]
    pair_gradient: Callable[..., complex]
    velocity: Callable[..., None]
    params: np.ndarray


@njit(VELOCITY_SIGNATURE, cache=True, error_model="numpy")
def pair_sum_velocity(pos, signs, alpha, alpha_prime, self_gradient, pair_gradient, params, out):
    """Velocities of all vortices from the self and pair gradient kernels. O(N^2).

    With g = grad_i E: u_x' = (1 - alpha') (s_i/2) g_y - (alpha/2) g_x and u_y' =
    -(1 - alpha') (s_i/2) g_x - (alpha/2) g_y (:mod:`thermo.dynamics.velocity`).

    Units: positions in L, velocities in L per m L^2 / hbar.
    """
    n = pos.shape[0]
    c = 0.5 * (1.0 - alpha_prime)
    d = 0.5 * alpha
    for i in range(n):
        xi = pos[i, 0]
        yi = pos[i, 1]
        g = self_gradient(xi, yi, params)
        for j in range(n):
            if j != i:
                g += signs[i] * signs[j] * pair_gradient(xi, yi, pos[j, 0], pos[j, 1], params)
        out[i, 0] = c * signs[i] * g.imag - d * g.real
        out[i, 1] = -c * signs[i] * g.real - d * g.imag


@njit(MOVE_SIGNATURE, cache=True, error_model="numpy")
def pair_sum_move_change(pos, signs, index, x_new, y_new, params, min_dist2, self_fn, pair_fn,
                         ledger, out):
    """E(after) - E(before) for moving vortex ``index``, from the self and pair kernels. O(N).

    The generic :data:`MOVE_SIGNATURE` kernel: 2 self and N - 1 pair evaluations per move, the
    old position's pair energies being read from the ledger (like-sign pair energies,
    ``out[j]`` = pair_fn(new, z_j)).

    Units: positions in the length unit, energies in E0; +inf inside the hard core.
    """
    n = pos.shape[0]
    x_old = pos[index, 0]
    y_old = pos[index, 1]
    s_k = signs[index]
    d = self_fn(x_new, y_new, s_k, params) - self_fn(x_old, y_old, s_k, params)
    for j in range(n):
        if j == index:
            continue
        xj = pos[j, 0]
        yj = pos[j, 1]
        dx = x_new - xj
        dy = y_new - yj
        if dx * dx + dy * dy < min_dist2:
            return np.inf
        e = pair_fn(x_new, y_new, xj, yj, params)
        out[j] = e
        d += s_k * signs[j] * (e - ledger[index, j])
    return d


@njit(types.void(POINTS, SIGNS, PARAMS, SelfKernel, PairKernel, MoveKernel, LEDGER,
                 types.float64[::1]), cache=True)
def fill_ledger(pos, signs, params, self_fn, pair_fn, move_fn, ledger, work):
    """Fill the pair ledger of the configuration ``pos`` (:data:`MOVE_SIGNATURE`): each vortex
    "moved" to where it is, with ``work`` (N,) as the kernel's output, row by row. Twice: a
    kernel may read the other vortices' own quantities (the diagonal) when it writes a row,
    and those are all in place after the first pass. O(N^2) pair terms. The configuration
    must keep its vortices apart (no pair closer than the hard core)."""
    n = pos.shape[0]
    for _ in range(2):
        for i in range(n):
            move_fn(pos, signs, i, pos[i, 0], pos[i, 1], params, 0.0, self_fn, pair_fn, ledger,
                    work)
            for j in range(n):
                ledger[i, j] = work[j]


@njit(types.void(PairKernel, PARAMS, POINTS, POINTS, types.float64[::1]), cache=True)
def _pair_many(pair_fn, params, p1, p2, out):
    for i in range(p1.shape[0]):
        out[i] = pair_fn(p1[i, 0], p1[i, 1], p2[i, 0], p2[i, 1], params)


@njit(types.void(SelfKernel, PARAMS, POINTS, types.float64[::1]), cache=True)
def _image_many(self_fn, params, p, out):
    # the part of the self energy even in the sign: the image energy 2 pi R(z)
    for i in range(p.shape[0]):
        out[i] = 0.5 * (self_fn(p[i, 0], p[i, 1], 1, params) + self_fn(p[i, 0], p[i, 1], -1, params))


def kernel_array(a, dtype) -> np.ndarray:
    """``a`` as a C-contiguous, writeable array of ``dtype``, copied only if needed.

    The compiled loops are declared for such arrays (a read-only one has another numba type).
    Units: unchanged.
    """
    return np.require(a, dtype=dtype, requirements=("C", "W"))


def as_points(pos, name: str) -> np.ndarray:
    """``pos`` as a float64 array of points (last axis x, y); raise naming ``name`` otherwise.

    Units: unchanged.
    """
    arr = np.asarray(pos, dtype=np.float64)
    if arr.ndim < 1 or arr.shape[-1] != 2:
        raise ConfigurationError(
            f"{name} must be an array of points with last axis of length 2 (x, y); got shape "
            f"{arr.shape}")
    return arr


class Domain(ABC):
    """A bounded domain of the point-vortex gas (see the module docstring).

    Subclasses are frozen dataclasses in a module of their own in this package; they set
    :attr:`kind` and :attr:`size_names` and implement every abstract member. Lengths are in the
    domain's length unit throughout.
    """

    #: User-facing kind name ("disk", "box", ...), also the shape name of geometry files.
    kind: ClassVar[str] = ""
    #: Names of the physical sizes that fix the domain (e.g. ("radius",)), see
    #: :meth:`from_sizes`.
    size_names: ClassVar[tuple[str, ...]] = ()
    #: Whether a measured table's geometry file may name this kind with its sizes alone. A
    #: domain made from arrays (a mask and a density) sets False: its :meth:`from_sizes`
    #: builds only a stand-in for the interface checks, which a table must never get.
    from_geometry_file: ClassVar[bool] = True

    # -- to be provided by every domain ----------------------------------------------------
    @classmethod
    @abstractmethod
    def from_sizes(cls, sizes: Mapping[str, float]) -> tuple[Domain, float]:
        """The domain of the given physical sizes and its length unit.

        Parameters
        ----------
        sizes : mapping
            One positive number for each name in :attr:`size_names`. Units: any length unit.

        Returns
        -------
        domain : Domain
        length_unit : float
            The physical length that scaled positions are measured in. Units: those of
            ``sizes``.
        """

    @abstractmethod
    def key(self) -> tuple:
        """Hashable identity for caches, stable across processes and versions. Units: none."""

    @abstractmethod
    def kernels(self) -> DomainKernels:
        """The compiled kernels and their parameter vector. Units: see :class:`DomainKernels`."""

    @property
    @abstractmethod
    def area(self) -> float:
        """Area of the domain. Units: length unit squared."""

    @property
    def hole_circulation(self) -> tuple[int, ...]:
        """Circulation quanta around each hole of a multiply connected domain, in the domain's
        order of its holes (empty for a simply connected one). Point-vortex motion keeps them,
        so an ensemble is taken at fixed values. Units: quanta."""
        return ()

    def at_hole_circulation(self, windings) -> Domain:
        """The same domain at other circulations on its holes (one whole number per hole)."""
        if len(tuple(windings)):
            raise DomainError(f"a {self.kind} has no hole to carry circulation; got "
                              f"{tuple(windings)!r}")
        return self

    def hole_region(self, pos, cut: float) -> np.ndarray:
        """Which hole's inner boundary of the gas each point lies within: k (1-based) where
        ``pos`` is less than ``cut`` from hole k, else 0 (what a loop around hole k encloses
        when it bounds the gas on the inside). Shape (...). Units: length unit."""
        p = as_points(pos, "pos")
        return np.zeros(p.shape[:-1], dtype=np.int64)

    @property
    @abstractmethod
    def max_step(self) -> float:
        """Largest half-width of the square in which a Monte Carlo move is proposed.

        Units: length unit.
        """

    @abstractmethod
    def distance_to_wall(self, pos) -> np.ndarray:
        """Distance of each point to the nearest wall (negative outside).

        Parameters
        ----------
        pos : array_like, shape (..., 2)
            Scaled positions. Units: length unit.

        Returns
        -------
        numpy.ndarray, shape (...)
            Units: length unit.
        """

    @abstractmethod
    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform in the points farther than ``margin`` from the wall, shape (n, 2).

        Units: length unit.
        """

    def gradient_kernels(self) -> GradientKernels:
        """The compiled gradients of the self and pair energies (point-vortex dynamics).

        A domain without them can still be sampled; its vortices cannot be moved by
        :mod:`thermo.dynamics`.

        Raises
        ------
        DomainError
            Always, unless the domain overrides this method.

        Units: E0 per length unit.
        """
        raise DomainError(f"the {self.kind or type(self).__name__} domain has no energy "
                          "gradients, so point-vortex dynamics cannot run in it; domains with "
                          "them: the disk, the box and the grid")

    #: Whether point-vortex dynamics in this shape conserves the signed angular impulse
    #: M = sum_i s_i |u_i|^2 about the origin of its scaled coordinates (a rotationally
    #: symmetric domain centred there: the disk). Only then is exp[-beta (H - omega M)] an
    #: equilibrium ensemble (thermo.rotation).
    conserves_angular_impulse: ClassVar[bool] = False

    # -- shared ----------------------------------------------------------------------------
    def angular_impulse(self, pos, signs) -> np.ndarray:
        """Signed angular impulse M = sum_i s_i |u_i|^2 of configurations.

        Parameters
        ----------
        pos : array_like, shape (..., N, 2)
            Scaled positions. Units: length unit.
        signs : array_like, shape (N,) or (..., N)
            +1 / -1.

        Returns
        -------
        numpy.ndarray, shape (...)
            Units: length unit squared.

        Raises
        ------
        DomainError
            For a shape whose dynamics does not conserve M (:attr:`conserves_angular_impulse`).
        """
        if not self.conserves_angular_impulse:
            raise DomainError(
                f"the {self.kind or type(self).__name__} domain does not conserve the angular "
                "impulse M = sum s_i |u_i|^2 (no rotational symmetry), so there is no rotation "
                "frequency omega to measure; accepted: a disk")
        p = as_points(pos, "pos")
        s = np.asarray(signs, float)
        return np.sum(s * np.sum(p * p, axis=-1), axis=-1)

    def contains(self, pos, margin: float = 0.0) -> np.ndarray:
        """True where a point lies inside with its distance to the wall greater than ``margin``.

        Parameters
        ----------
        pos : array_like, shape (..., 2)
            Scaled positions.
        margin : float
            Hard-core distance to the wall (core radius). Units: length unit.

        Returns
        -------
        numpy.ndarray of bool, shape (...)
        """
        p = as_points(pos, "pos")
        with np.errstate(invalid="ignore"):
            return np.isfinite(p).all(axis=-1) & (self.distance_to_wall(p) > margin)

    def green(self, pos, pos0) -> np.ndarray:
        """Dirichlet Green's function G(z, z0) (-lap G = delta, G = 0 on the wall).

        Parameters
        ----------
        pos, pos0 : array_like, shape (..., 2), broadcastable
            Field and source points. Units: length unit.

        Returns
        -------
        numpy.ndarray, shape (...)
            Dimensionless.
        """
        p, p0 = np.broadcast_arrays(as_points(pos, "pos"), as_points(pos0, "pos0"))
        k = self.kernels()
        a = kernel_array(p.reshape(-1, 2), np.float64)
        b = kernel_array(p0.reshape(-1, 2), np.float64)
        out = np.empty(a.shape[0])
        _pair_many(k.pair_energy, k.params, a, b, out)
        return (out / (4.0 * np.pi)).reshape(p.shape[:-1])

    def robin(self, pos) -> np.ndarray:
        """Robin function R(z) = h(z, z), the regular part of G on the diagonal.

        ``2 pi R(z)`` is the log of the conformal radius and, in E0 units, the image energy of
        one vortex at z (constant ln(L/a) dropped): the part of the self kernel even in the
        sign. Units: dimensionless.
        """
        p = as_points(pos, "pos")
        k = self.kernels()
        flat = kernel_array(p.reshape(-1, 2), np.float64)
        out = np.empty(flat.shape[0])
        _image_many(k.self_energy, k.params, flat, out)
        return (out / (2.0 * np.pi)).reshape(p.shape[:-1])

    def conformal_radius(self, pos) -> np.ndarray:
        """Conformal radius exp(2 pi R(z)). Units: length unit."""
        return np.exp(2.0 * np.pi * self.robin(pos))


def check_sizes(cls: type[Domain], sizes: Mapping[str, float]) -> dict[str, float]:
    """The sizes named by ``cls.size_names`` as floats; raise if one is missing or not > 0.

    Units: unchanged.
    """
    out = {}
    for name in cls.size_names:
        v = sizes.get(name)
        if v is None or isinstance(v, bool) or not isinstance(v, (int, float, np.floating)) \
                or not math.isfinite(v) or v <= 0:
            raise DomainError(f"a {cls.kind} needs a positive number {name}; got {v!r}")
        out[name] = float(v)
    return out
