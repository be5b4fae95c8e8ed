"""Bounded domains for the point-vortex gas: geometry, containment and Green's functions.

Two shapes are supported, each with lengths scaled by a size of the domain so that the
statistics depend only on the shape:

* :class:`Disk` -- the unit disk |u| < 1 (length unit: the radius R).
* :class:`Box` -- the rectangle [-aspect/2, aspect/2] x [-1/2, 1/2] centred on the origin
  (length unit: the side along y; ``aspect`` = side along x / side along y).

Green's function convention (the mathematician's one): :math:`-\\nabla^2 G(z, z_0) =
\\delta(z - z_0)`, :math:`G = 0` on the wall, and

.. math:: G(z, z_0) = -\\frac{1}{2\\pi}\\ln|z - z_0| + h(z, z_0),

with the regular part ``h``; the Robin function is :math:`R(z) = h(z, z)` and the conformal
radius is :math:`r_c(z) = \\exp(2\\pi R(z))` (disk: :math:`1 - |u|^2`).

In energy units :math:`E_0 = \\rho\\kappa^2/(4\\pi)` the pair energy of two vortices is
:math:`s_i s_j\\,4\\pi G(z_i, z_j)` and the self (image) energy of one vortex is
:math:`2\\pi R(z_i) = \\ln r_c(z_i)`, the constant :math:`N\\ln(L/a)` (L the length unit, a the
core) being dropped. Both shapes share this convention: at the centre of the unit disk
:math:`r_c = 1` (self energy 0), and a vortex at a distance d from a straight wall, far from
all other walls, has :math:`r_c \\approx 2d` in either shape.

The rectangle's Green's function is evaluated with Jacobi's theta function
:math:`\\vartheta_1` (product form, nome :math:`q = e^{-\\pi b/a}` with the short side as
``a``) after reducing the argument by the quasi-periodicity of :math:`\\vartheta_1`; an
independent image-lattice sum (rows of images summed in closed form with sines) is kept for
checking. Method: Crowdy, *Solved Problems in Vortex Dynamics* (2020).

Units: all positions are dimensionless (scaled by the length unit above); G and R are
dimensionless.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numba import njit

from .errors import ConfigurationError, DomainError

__all__ = ["Disk", "Box", "Domain", "KIND_DISK", "KIND_BOX"]

KIND_DISK = 0
KIND_BOX = 1

# Index of each entry of the parameter vector handed to the compiled kernels (box only).
_P_ASPECT, _P_A, _P_B, _P_T, _P_LNPRIME, _P_ROTATE, _P_NTERMS, _P_Q, _P_CONST = range(9)


# ---------------------------------------------------------------------------------------------
# Compiled scalar kernels.  fastmath stays off: the theta-function products rely on log1p of
# tiny numbers and on exact argument reduction, which reassociation could spoil.
# ---------------------------------------------------------------------------------------------
@njit(cache=True, error_model="numpy")
def _ln_abs_theta1(wr: float, wi: float, params: np.ndarray) -> float:
    """ln|theta_1(w, q)| for complex w = wr + i wi (nome from ``params``)."""
    T = params[_P_T]
    # Quasi-periodicity theta1(w + pi tau) = -q^-1 e^{-2iw} theta1(w), pi tau = iT, shifts the
    # imaginary part into [-T/2, T/2] where the product converges fast and without cancellation.
    k = math.floor(wi / T + 0.5)
    wi_r = wi - k * T
    shift = k * T + 2.0 * k * wi_r + T * k * (k - 1.0)
    # theta1(w + pi) = -theta1(w): |theta1| has period pi in the real direction.
    wr_r = wr - math.pi * math.floor(wr / math.pi + 0.5)
    sx = math.sin(wr_r)
    sh = math.sinh(wi_r)
    total = params[_P_CONST] + 0.5 * math.log(sx * sx + sh * sh) + shift
    c2 = math.cos(2.0 * wr_r)
    q2 = params[_P_Q] * params[_P_Q]
    q2n = 1.0
    e_minus = math.exp(-2.0 * wi_r)
    e_plus = math.exp(2.0 * wi_r)
    for _ in range(int(params[_P_NTERMS])):
        q2n *= q2
        r1 = q2n * e_minus
        r2 = q2n * e_plus
        total += 0.5 * math.log1p(r1 * r1 - 2.0 * r1 * c2) + 0.5 * math.log1p(r2 * r2 - 2.0 * r2 * c2)
    return total


@njit(cache=True)
def _box_corner(x: float, y: float, params: np.ndarray):
    """Centred scaled coordinates -> corner coordinates with the short side along X."""
    if params[_P_ROTATE] > 0.5:
        return y + 0.5, x + 0.5 * params[_P_ASPECT]
    return x + 0.5 * params[_P_ASPECT], y + 0.5


@njit(cache=True, error_model="numpy")
def _box_pair(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> float:
    """4 pi G(z1, z2) of the rectangle (E0 units of a +,+ pair)."""
    X1, Y1 = _box_corner(x1, y1, params)
    X2, Y2 = _box_corner(x2, y2, params)
    f = math.pi / (2.0 * params[_P_A])
    s = (_ln_abs_theta1(f * (X1 - X2), f * (Y1 - Y2), params)
         + _ln_abs_theta1(f * (X1 + X2), f * (Y1 + Y2), params)
         - _ln_abs_theta1(f * (X1 - X2), f * (Y1 + Y2), params)
         - _ln_abs_theta1(f * (X1 + X2), f * (Y1 - Y2), params))
    return -2.0 * s


@njit(cache=True)
def _box_self(x: float, y: float, params: np.ndarray) -> float:
    """2 pi R(z) = ln(conformal radius) of the rectangle."""
    X, Y = _box_corner(x, y, params)
    f = math.pi / params[_P_A]
    s = (math.log(0.5 * f) + params[_P_LNPRIME] + _ln_abs_theta1(f * X, f * Y, params)
         - _ln_abs_theta1(0.0, f * Y, params) - _ln_abs_theta1(f * X, 0.0, params))
    return -s


# error_model="numpy": coincident vortices give inf (caught by the callers), not an exception
@njit(cache=True, error_model="numpy")
def pair_kernel(kind: int, params: np.ndarray, x1: float, y1: float, x2: float, y2: float) -> float:
    """Pair energy 4 pi G(z1, z2) for like signs, E0 units (multiply by s1 s2)."""
    if kind == KIND_DISK:
        num = 1.0 - 2.0 * (x1 * x2 + y1 * y2) + (x1 * x1 + y1 * y1) * (x2 * x2 + y2 * y2)
        dx = x1 - x2
        dy = y1 - y2
        return math.log(num / (dx * dx + dy * dy))
    return _box_pair(x1, y1, x2, y2, params)


@njit(cache=True)
def self_kernel(kind: int, params: np.ndarray, x: float, y: float) -> float:
    """Self (image) energy 2 pi R(z) = ln r_c(z), E0 units."""
    if kind == KIND_DISK:
        return math.log(1.0 - (x * x + y * y))
    return _box_self(x, y, params)


@njit(cache=True)
def wall_distance_kernel(kind: int, params: np.ndarray, x: float, y: float) -> float:
    """Distance from (x, y) to the nearest wall (negative outside)."""
    if kind == KIND_DISK:
        return 1.0 - math.sqrt(x * x + y * y)
    return min(0.5 * params[_P_ASPECT] - abs(x), 0.5 - abs(y))


@njit(cache=True)
def _pair_many(kind, params, p1, p2, out):
    for i in range(p1.shape[0]):
        out[i] = pair_kernel(kind, params, p1[i, 0], p1[i, 1], p2[i, 0], p2[i, 1])


@njit(cache=True)
def _self_many(kind, params, p, out):
    for i in range(p.shape[0]):
        out[i] = self_kernel(kind, params, p[i, 0], p[i, 1])


# ---------------------------------------------------------------------------------------------
# Domain classes
# ---------------------------------------------------------------------------------------------
def _as_points(pos, name: str) -> np.ndarray:
    arr = np.asarray(pos, dtype=np.float64)
    if arr.ndim < 1 or arr.shape[-1] != 2:
        raise ConfigurationError(
            f"{name} must be an array of points with last axis of length 2 (x, y); got shape "
            f"{arr.shape}")
    return arr


class Domain:
    """Common interface of :class:`Disk` and :class:`Box` (see the module docstring)."""

    kind: str = ""

    # -- to be provided by subclasses ------------------------------------------------------
    def kernel_params(self) -> tuple[int, np.ndarray]:  # pragma: no cover - abstract
        raise NotImplementedError

    def key(self) -> tuple:  # pragma: no cover - abstract
        raise NotImplementedError

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        raise NotImplementedError  # pragma: no cover - abstract

    # -- shared ----------------------------------------------------------------------------
    def distance_to_wall(self, pos) -> np.ndarray:
        """Distance of each point to the nearest wall (negative outside). Units: length unit."""
        p = _as_points(pos, "pos")
        if isinstance(self, Disk):
            return 1.0 - np.hypot(p[..., 0], p[..., 1])
        return np.minimum(0.5 * self.aspect - np.abs(p[..., 0]), 0.5 - np.abs(p[..., 1]))

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
        p = _as_points(pos, "pos")
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
        p, p0 = np.broadcast_arrays(_as_points(pos, "pos"), _as_points(pos0, "pos0"))
        code, params = self.kernel_params()
        a = np.ascontiguousarray(p.reshape(-1, 2))
        b = np.ascontiguousarray(p0.reshape(-1, 2))
        out = np.empty(a.shape[0])
        _pair_many(code, params, a, b, out)
        return (out / (4.0 * np.pi)).reshape(p.shape[:-1])

    def robin(self, pos) -> np.ndarray:
        """Robin function R(z) = h(z, z), the regular part of G on the diagonal.

        ``2 pi R(z)`` is the log of the conformal radius and, in E0 units, the self energy of
        one vortex at z (constant ln(L/a) dropped). Units: dimensionless.
        """
        p = _as_points(pos, "pos")
        code, params = self.kernel_params()
        flat = np.ascontiguousarray(p.reshape(-1, 2))
        out = np.empty(flat.shape[0])
        _self_many(code, params, flat, out)
        return (out / (2.0 * np.pi)).reshape(p.shape[:-1])

    def conformal_radius(self, pos) -> np.ndarray:
        """Conformal radius exp(2 pi R(z)). Units: length unit."""
        return np.exp(2.0 * np.pi * self.robin(pos))


@dataclass(frozen=True)
class Disk(Domain):
    """The unit disk |u| < 1; positions are u = r / R. The image of u is u / |u|^2.

    Units: lengths in the disk radius R.
    """

    kind: str = field(default="disk", init=False)

    @property
    def area(self) -> float:
        """Area pi (units: R^2)."""
        return math.pi

    def key(self) -> tuple:
        """Hashable identity for caches."""
        return ("disk",)

    def kernel_params(self) -> tuple[int, np.ndarray]:
        """Kind code and parameter vector for the compiled kernels."""
        return KIND_DISK, np.zeros(1)

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform in the disk |u| < 1 - margin, shape (n, 2).

        Units: R.
        """
        r = (1.0 - margin) * np.sqrt(rng.random(n))
        phi = 2.0 * np.pi * rng.random(n)
        return np.column_stack((r * np.cos(phi), r * np.sin(phi)))


@dataclass(frozen=True)
class Box(Domain):
    """The rectangle [-aspect/2, aspect/2] x [-1/2, 1/2].

    Parameters
    ----------
    aspect : float
        Side along x divided by side along y; between 0.01 and 100.

    Units: lengths in the side along y.
    """

    aspect: float = 1.0
    kind: str = field(default="box", init=False)

    def __post_init__(self) -> None:
        a = self.aspect
        if not (isinstance(a, (int, float, np.floating)) and math.isfinite(a) and 0.01 <= a <= 100.0):
            raise DomainError(
                f"Box(aspect={a!r}): aspect (side along x / side along y) must be a finite "
                "number between 0.01 and 100")
        object.__setattr__(self, "aspect", float(a))
        object.__setattr__(self, "_params", self._build_params())

    @property
    def area(self) -> float:
        """Area aspect x 1 (units: side along y, squared)."""
        return self.aspect

    def key(self) -> tuple:
        """Hashable identity for caches."""
        return ("box", round(self.aspect, 12))

    def _build_params(self) -> np.ndarray:
        rotate = self.aspect > 1.0
        a_side, b_side = (1.0, self.aspect) if rotate else (self.aspect, 1.0)
        T = math.pi * b_side / a_side          # T >= pi, so q <= e^-pi
        q = math.exp(-T)
        # After reduction |Im w| <= T/2, the factors are 1 - rho with rho <= q^(2n-1).
        nterms = int(math.ceil((41.5 / T + 1.0) / 2.0)) + 1
        s = sum(math.log1p(-q ** (2 * n)) for n in range(1, nterms + 1))
        p = np.zeros(9)
        p[_P_ASPECT] = self.aspect
        p[_P_A] = a_side
        p[_P_B] = b_side
        p[_P_T] = T
        p[_P_LNPRIME] = math.log(2.0) - T / 4.0 + 3.0 * s   # ln theta1'(0)
        p[_P_ROTATE] = 1.0 if rotate else 0.0
        p[_P_NTERMS] = nterms
        p[_P_Q] = q
        p[_P_CONST] = math.log(2.0) - T / 4.0 + s
        return p

    def kernel_params(self) -> tuple[int, np.ndarray]:
        """Kind code and parameter vector for the compiled kernels."""
        return KIND_BOX, self._params

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform in the rectangle shrunk by ``margin`` on every side, shape (n, 2)."""
        x = (rng.random(n) - 0.5) * (self.aspect - 2.0 * margin)
        y = (rng.random(n) - 0.5) * (1.0 - 2.0 * margin)
        return np.column_stack((x, y))

    def _default_rows(self) -> int:
        # row n contributes ~exp(-2 pi (|n| - 1) / aspect); stop below 1e-18
        return int(math.ceil(41.5 * self.aspect / (2.0 * math.pi))) + 2

    # -- independent check: image lattice summed row by row --------------------------------
    def green_images(self, pos, pos0, n_rows: int | None = None) -> np.ndarray:
        """G(z, z0) from the image lattice, each row of images summed in closed form.

        The images of z0 under reflection in the walls of [0, A] x [0, 1] are +z0, +(-z0),
        -conj(z0), -(-conj(z0)) shifted by the lattice 2A m + 2i n. Summing over m first
        gives products of sines; the row sums then decay like exp(-2 pi |n| / A) and are
        truncated at |n| <= n_rows (default: enough for double precision). No theta
        functions and no rotation are used.
        """
        n_rows = self._default_rows() if n_rows is None else n_rows
        p, p0 = np.broadcast_arrays(_as_points(pos, "pos"), _as_points(pos0, "pos0"))
        A = self.aspect
        z = (p[..., 0] + 0.5 * A) + 1j * (p[..., 1] + 0.5)
        z0 = (p0[..., 0] + 0.5 * A) + 1j * (p0[..., 1] + 0.5)
        f = np.pi / (2.0 * A)
        total = np.zeros(z.shape)
        for n in range(-n_rows, n_rows + 1):
            shift = 2j * n
            total += (_ln_abs_sin(f * (z - z0 - shift)) + _ln_abs_sin(f * (z + z0 - shift))
                      - _ln_abs_sin(f * (z - np.conj(z0) - shift))
                      - _ln_abs_sin(f * (z + np.conj(z0) - shift)))
        return -total / (2.0 * np.pi)

    def robin_images(self, pos, n_rows: int | None = None) -> np.ndarray:
        """Robin function from the row-summed image lattice (independent of theta functions)."""
        n_rows = self._default_rows() if n_rows is None else n_rows
        p = _as_points(pos, "pos")
        A = self.aspect
        z = (p[..., 0] + 0.5 * A) + 1j * (p[..., 1] + 0.5)
        f = np.pi / (2.0 * A)
        # The n = 0 direct term ln|sin(f (z - z0))| - ln|z - z0| -> ln f as z0 -> z.
        total = np.full(z.shape, np.log(f))
        for n in range(-n_rows, n_rows + 1):
            shift = 2j * n
            if n != 0:
                total += _ln_abs_sin(f * (-shift))
            total += (_ln_abs_sin(f * (2.0 * z - shift)) - _ln_abs_sin(f * (z - np.conj(z) - shift))
                      - _ln_abs_sin(f * (z + np.conj(z) - shift)))
        return -total / (2.0 * np.pi)


def _ln_abs_sin(w: np.ndarray) -> np.ndarray:
    """ln|sin w| for complex w, free of overflow for any Im w and accurate near the zeros.

    Uses |sin w|^2 = (e^{2|y|}/4) [(1 - e^{-2|y|})^2 + 4 e^{-2|y|} sin^2 x], w = x + iy.
    """
    x, y = np.real(w), np.abs(np.imag(w))
    return y - np.log(2.0) + 0.5 * np.log(np.expm1(-2.0 * y) ** 2 + 4.0 * np.exp(-2.0 * y) * np.sin(x) ** 2)
