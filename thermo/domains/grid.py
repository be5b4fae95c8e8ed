r"""A domain of any shape and areal density, its Green's function solved on a grid.

Inputs: a boolean fluid ``mask`` and a relative areal density :math:`\nu = n/n_{\rm ref} \ge 0`
on a uniform grid (node (i, j) at ``origin + spacing * (j, i)``), lengths in the domain's length
unit L (positions scaled so that the fluid fits in about the unit disk, like :class:`Disk`).

**Physics.** Mass conservation :math:`\nabla\cdot(n\mathbf v) = 0` gives
:math:`n\mathbf v = \nabla\times(\psi\hat z)\,n_{\rm ref}`, and the quantized vorticity
:math:`\nabla\times\mathbf v = \kappa\sum_i s_i\delta(\mathbf r - \mathbf r_i)` then reads
:math:`-\nabla\cdot[(1/\nu)\nabla\psi] = \kappa\sum_i s_i\delta`, so
:math:`\psi = \kappa\sum_i s_i G(\cdot, z_i)` with

.. math:: -\nabla\cdot\Big[\frac1\nu\nabla G(z, z')\Big] = \delta(z - z'), \qquad G = 0
          \text{ where the fluid ends}

(self-adjoint, so G is symmetric); in a fluid with holes G is Lin's Green's function at fixed
circulations instead, constant on each hole's wall (:class:`GridDomain`, "Holes"). The kinetic
energy :math:`\tfrac{m}{2}\int n v^2 =
\tfrac{\rho}{2}\int\nu^{-1}|\nabla\psi|^2 = \tfrac{\rho\kappa}{2}\sum_i s_i\psi(z_i)` (by parts,
:math:`\psi = 0` on the wall), i.e. the pair energy :math:`s_is_j\,4\pi G(z_i, z_j)` in
:math:`E_0 = \rho\kappa^2/(4\pi)` as for every domain (:mod:`thermo.domains.base`).

**Singular part.** With :math:`G = \sqrt{\nu}\,w` (Liouville substitution) the equation becomes
:math:`-\nabla^2 w + V w = \sqrt{\nu(z')}\,\delta(z - z')`, :math:`V = \nabla^2\nu^{-1/2}/\nu^{-1/2}`,
so :math:`G = -\tfrac{1}{2\pi}\sqrt{\nu(z)\nu(z')}\ln|z - z'| + H(z, z')` with H continuous
(its worst term near the diagonal is :math:`O(r^2\ln r)`); for constant ν this is the usual
:math:`-\tfrac1{2\pi}\ln|z-z'|`. The remainder H is tabulated.

**Self energy.** A vortex's core radius scales with the local healing length,
:math:`a(z) = a_{\rm ref}/\sqrt{\nu(z)}`. Integrating the energy outside the core by parts, the
flux :math:`\nu^{-1}\partial_nG` through the core's rim is 1, so the self energy is
:math:`\tfrac{\rho\kappa^2}{2}G(z + a, z)`, i.e. in E0
:math:`2\pi H(z,z) - \nu\ln a(z) = 2\pi H(z,z) + \nu\ln(L/a_{\rm ref}) + \tfrac12\nu\ln\nu`.
Dropping the constant :math:`\ln(L/a_{\rm ref})` per vortex (as every domain does),

.. math:: E_{\rm self}(z) = 2\pi H(z, z) + (\nu - 1)\ln(L/a_{\rm ref}) + \tfrac12\nu\ln\nu,

which is the disk's :math:`\ln(1 - |u|^2)` for ν = 1. The local-density logarithm is the result
for vortices in inhomogeneous condensates of Rubinstein & Pismen, Physica D 78, 1 (1994) and
Sheehy & Radzihovsky, Phys. Rev. A 70, 063620 (2004) (from memory; the derivation above is
self-contained). ``log_length_over_core`` = ln(L/a_ref) (a_ref the effective core radius at the
reference density) is needed only when ν is not 1 everywhere in the fluid.

**Numerics.** Fluid nodes are unknowns, dry nodes hold G = 0. Five-point conservative finite
differences with :math:`1/\nu` at the faces (mean of the two nodes; the fluid node's own value
on a face to a dry node), one sparse LU factorisation (``scipy.sparse.linalg.splu``), one
right-hand side per source node of a coarse table grid (every ``stride``-th node). On the
diagonal the lattice Green's function of the five-point Laplacian is
:math:`G_h(0) = -\tfrac1{2\pi}[\ln h - \gamma - \tfrac32\ln 2] + H` (the potential kernel of the
square lattice; Spitzer, Principles of Random Walk (1976), from memory), scaled by the local ν.
H is interpolated bilinearly in each argument on the coarse table (16 values per pair; a
symmetric table gives a symmetric G); ν and the distance to the wall (to the nearest dry node)
bilinearly on the fine grid. Errors are first order in the spacing (the wall is a staircase).

Units: positions in L; energies in E0 = rho kappa^2 / (4 pi).
"""

from __future__ import annotations

import copy
import hashlib
import math
import os
import warnings
import zipfile
from collections.abc import Mapping
from pathlib import Path
from typing import ClassVar

import numpy as np
import scipy.sparse as sp
from numba import njit
from scipy.ndimage import distance_transform_edt, label
from scipy.sparse.linalg import splu

from thermo.atomic import write_npz
from thermo.domains.base import (
    MOVE_SIGNATURE,
    PAIR_GRADIENT_SIGNATURE,
    PAIR_SIGNATURE,
    SELF_GRADIENT_SIGNATURE,
    SELF_SIGNATURE,
    VELOCITY_SIGNATURE,
    WALL_SIGNATURE,
    Domain,
    DomainKernels,
    GradientKernels,
    as_points,
    pair_sum_velocity,
    check_sizes,
)
from thermo.errors import DomainError

#: bump when the table layout or the solver changes: part of the digest
TABLE_VERSION = 3
_EULER_GAMMA = 0.5772156649015329
#: fastmath of the move kernel, the policy of gpe.field.kernels: fused multiply-adds,
#: reciprocals, approximate library functions and signed zeros, but not nnan/ninf (the kernel
#: returns +inf inside the hard core) and not reassoc (sums in a fixed order); 10-20% faster
#: moves (N = 40: 645 against 756 ns uniform, 1010 against 1229 ns harmonic)
_FASTMATH = {"contract", "arcp", "nsz", "afn"}
#: grid_self reads the fine-node field further than this many table cells from the wall
SELF_NEAR_WALL = 2.0
# header of the parameter vector (then fine nu, fine wall distance, fine self energy, coarse
# table as float32); _INV_HF and _INV_HC are 1 / spacing of the fine and coarse grids
(_NXF, _NYF, _X0, _Y0, _HF, _NXC, _NYC, _STRIDE, _LNLA, _OFF_NU, _OFF_WALL,
 _OFF_TAB, _UNIFORM, _OFF_SELF, _INV_HF, _INV_HC, _OFF_FLOW, _HEADER) = range(18)


class GreenCacheWarning(UserWarning):
    """A cached Green's-function table was damaged and is rebuilt; the message names the file."""


@njit(cache=True, error_model="numpy")
def _bilinear(p, off, x, y):
    """Bilinear interpolation of the fine-grid field stored at params[off:]."""
    nx = int(p[_NXF])
    ny = int(p[_NYF])
    fx = (x - p[_X0]) * p[_INV_HF]
    fy = (y - p[_Y0]) * p[_INV_HF]
    j = min(max(math.floor(fx), 0), nx - 2)
    i = min(max(math.floor(fy), 0), ny - 2)
    tx = fx - j
    ty = fy - i
    b = off + i * nx + j
    return ((1 - ty) * ((1 - tx) * p[b] + tx * p[b + 1])
            + ty * ((1 - tx) * p[b + nx] + tx * p[b + nx + 1]))


@njit(cache=True, error_model="numpy")
def _stencil(p, x, y):
    """Coarse-table corner index and weights (i00, wx, wy) of a point."""
    nxc = int(p[_NXC])
    nyc = int(p[_NYC])
    fx = (x - p[_X0]) * p[_INV_HC]
    fy = (y - p[_Y0]) * p[_INV_HC]
    j = min(max(math.floor(fx), 0), nxc - 2)
    i = min(max(math.floor(fy), 0), nyc - 2)
    return i * nxc + j, fx - j, fy - i


@njit(cache=True, error_model="numpy")
def _remainder(p, x1, y1, x2, y2):
    """H(z1, z2) interpolated bilinearly in each argument on the coarse table."""
    nxc = int(p[_NXC])
    m = nxc * int(p[_NYC])
    tab = p[int(p[_OFF_TAB]):].view(np.float32)
    a, ax, ay = _stencil(p, x1, y1)
    b, bx, by = _stencil(p, x2, y2)
    wa = ((1 - ax) * (1 - ay), ax * (1 - ay), (1 - ax) * ay, ax * ay)
    ia = (a, a + 1, a + nxc, a + nxc + 1)
    wb = ((1 - bx) * (1 - by), bx * (1 - by), (1 - bx) * by, bx * by)
    ib = (b, b + 1, b + nxc, b + nxc + 1)
    total = 0.0
    for k in range(4):
        row = ia[k] * m
        s = 0.0
        for q in range(4):
            s += wb[q] * tab[row + ib[q]]
        total += wa[k] * s
    return total


@njit(cache=True, error_model="numpy")
def _nu(p, x, y):
    return max(_bilinear(p, int(p[_OFF_NU]), x, y), 0.0)


@njit(PAIR_SIGNATURE, cache=True, error_model="numpy")
def grid_pair(x1: float, y1: float, x2: float, y2: float, params: np.ndarray) -> float:
    """Pair energy 4 pi G(z1, z2) = -sqrt(nu1 nu2) ln|z1 - z2|^2 + 4 pi H. Units: E0."""
    dx = x1 - x2
    dy = y1 - y2
    w = math.sqrt(_nu(params, x1, y1) * _nu(params, x2, y2))
    return -w * math.log(dx * dx + dy * dy) + 4.0 * math.pi * _remainder(params, x1, y1, x2, y2)


@njit(cache=True, error_model="numpy")
def _self_from_table(x, y, params):
    """Self energy 2 pi H(z,z) + (nu - 1) ln(L/a_ref) + nu ln(nu) / 2 from the coarse table.
    Units: E0."""
    nu = _nu(params, x, y)
    e = 2.0 * math.pi * _remainder(params, x, y, x, y) + (nu - 1.0) * params[_LNLA]
    if nu > 0.0:
        e += 0.5 * nu * math.log(nu)
    return e


@njit(SELF_SIGNATURE, cache=True, error_model="numpy")
def grid_self(x: float, y: float, sign: int, params: np.ndarray) -> float:
    """Self energy (:func:`_self_from_table`), plus, where holes carry circulation, the
    vortex's energy ``sign`` * F(z) in their flow (odd in the sign; F bilinear on the fine
    nodes). More than ``SELF_NEAR_WALL`` table cells from the wall the even part is read by
    bilinear interpolation of its values at the fine nodes (8 values with the wall distance,
    against the table's 16 + 4; smooth there, so the second interpolation costs little);
    nearer the wall, where it falls as the log of the distance, from the table itself.
    Units: E0."""
    w = _bilinear(params, int(params[_OFF_WALL]), x, y)
    if w * params[_INV_HC] < SELF_NEAR_WALL:
        e = _self_from_table(x, y, params)
    else:
        e = _bilinear(params, int(params[_OFF_SELF]), x, y)
    if params[_OFF_FLOW] > 0.0:
        e += sign * _bilinear(params, int(params[_OFF_FLOW]), x, y)
    return e


@njit(WALL_SIGNATURE, cache=True, error_model="numpy")
def grid_wall_distance(x: float, y: float, params: np.ndarray) -> float:
    """Distance to the nearest dry node, interpolated (negative outside the grid). Units: L."""
    h = params[_HF]
    fx = (x - params[_X0]) / h
    fy = (y - params[_Y0]) / h
    if not (0.0 <= fx <= params[_NXF] - 1 and 0.0 <= fy <= params[_NYF] - 1):
        return -1.0
    return _bilinear(params, int(params[_OFF_WALL]), x, y)


@njit(cache=True, error_model="numpy", inline="always")
def _corner(p, q, nxc, w00, w01, w10, w11):
    """Bilinear interpolation over the second argument in one table row (q: corner index)."""
    return w00 * p[q] + w01 * p[q + 1] + w10 * p[q + nxc] + w11 * p[q + nxc + 1]


@njit(cache=True, error_model="numpy", inline="always")
def _cell_sum(tab, r0, r2, m, b, nxc, v0, v1, v2, v3, w00, w01, w10, w11):
    """sum over the four table rows of one stencil (rows r0, r0 + m, r2, r2 + m, weights v)
    of the bilinear interpolation at the stencil b (weights w)."""
    return (v0 * _corner(tab, r0 + b, nxc, w00, w01, w10, w11)
            + v1 * _corner(tab, r0 + m + b, nxc, w00, w01, w10, w11)
            + v2 * _corner(tab, r2 + b, nxc, w00, w01, w10, w11)
            + v3 * _corner(tab, r2 + m + b, nxc, w00, w01, w10, w11))


@njit(MOVE_SIGNATURE, cache=True, error_model="numpy", fastmath=_FASTMATH)
def grid_move_change(pos, signs, index, x_new, y_new, params, min_dist2, self_fn, pair_fn,
                     ledger, out):
    """E(after) - E(before) for moving vortex ``index``: the new position's stencil and density
    computed once, each other vortex's once. O(N).

    The old position's terms are read from the pair ledger (:data:`MOVE_SIGNATURE`), so only
    the new position's table rows are interpolated (16 values per other vortex). The ledger
    holds the remainder 4 pi H(z, z_j) where nu = 1 (the logarithms' ratios are multiplied
    together, one log per move, as the disk's) and the whole pair energy -sqrt(nu nu_j)
    ln|z - z_j|^2 + 4 pi H elsewhere (one log per pair); its diagonal holds each vortex's
    sqrt(nu), so that no other vortex's density is interpolated. ``self_fn`` and ``pair_fn``
    (part of the common signature) are not needed here.
    Units: positions in L, energies in E0; +inf inside the hard core.
    """
    n = pos.shape[0]
    x_old = pos[index, 0]
    y_old = pos[index, 1]
    s_k = signs[index]
    d = grid_self(x_new, y_new, s_k, params) - grid_self(x_old, y_old, s_k, params)
    nxc = int(params[_NXC])
    m = nxc * int(params[_NYC])
    tab = params[int(params[_OFF_TAB]):].view(np.float32)
    an, anx, any_ = _stencil(params, x_new, y_new)
    n0 = an * m
    n2 = n0 + nxc * m
    v0, v1 = (1.0 - anx) * (1.0 - any_), anx * (1.0 - any_)
    v2, v3 = (1.0 - anx) * any_, anx * any_
    x0, y0, inv_hc = params[_X0], params[_Y0], params[_INV_HC]
    jmax, imax = nxc - 2, int(params[_NYC]) - 2
    rn = math.sqrt(_nu(params, x_new, y_new))
    four_pi = 4.0 * math.pi
    uniform = params[_UNIFORM] > 0.0
    acc = 1.0
    for j in range(n):
        if j == index:
            continue
        xj = pos[j, 0]
        yj = pos[j, 1]
        dxn = x_new - xj
        dyn = y_new - yj
        dn = dxn * dxn + dyn * dyn
        if dn < min_dist2:
            return np.inf
        # the coarse stencil of vortex j (as _stencil, constants hoisted; fx, fy > 0 inside)
        fx = (xj - x0) * inv_hc
        fy = (yj - y0) * inv_hc
        cj = min(int(fx), jmax)
        ci = min(int(fy), imax)
        b = ci * nxc + cj
        bx = fx - cj
        by = fy - ci
        e = four_pi * _cell_sum(tab, n0, n2, m, b, nxc, v0, v1, v2, v3, (1.0 - bx) * (1.0 - by),
                                bx * (1.0 - by), (1.0 - bx) * by, bx * by)
        if uniform:
            # nu = 1: the logarithms' ratios multiplied together, one log per move (as the disk)
            dxo = x_old - xj
            dyo = y_old - yj
            do = dxo * dxo + dyo * dyo
            acc *= dn / do if s_k * signs[j] > 0 else do / dn
            if acc > 1e100 or acc < 1e-100:
                d -= math.log(acc)
                acc = 1.0
        else:
            e -= ledger[j, j] * rn * math.log(dn)
        out[j] = e
        d += s_k * signs[j] * (e - ledger[index, j])
    out[index] = rn
    return d - math.log(acc)


def _check_inputs(mask, density, spacing, origin, hole_windings=None):
    m = np.asarray(mask)
    if m.ndim != 2 or m.dtype != bool:
        raise DomainError(f"mask must be a 2-D boolean array (True = fluid); got dtype {m.dtype} "
                          f"and shape {m.shape}")
    nu = np.asarray(density, dtype=np.float64)
    if nu.shape != m.shape:
        raise DomainError(f"density has shape {nu.shape} but mask has shape {m.shape}; they must "
                          "be on the same grid")
    if min(m.shape) < 3 or not m.any():
        raise DomainError("mask has no fluid (no True node); accepted: a 2-D boolean array with "
                          "fluid nodes strictly inside the grid")
    if m[0].any() or m[-1].any() or m[:, 0].any() or m[:, -1].any():
        raise DomainError("mask touches the grid edge; accepted: fluid nodes strictly inside the "
                          "grid (pad it with at least one row/column of dry nodes)")
    holes = hole_labels(m)
    n_holes = int(holes.max())
    if n_holes and hole_windings is None:
        at = np.argwhere(holes > 0)[0]
        raise DomainError(f"mask has a hole: {int((holes > 0).sum())} dry node(s) enclosed by "
                          f"fluid, the first at (row {at[0]}, column {at[1]}); the circulation "
                          "around a hole is a quantum number of the gas: give hole_windings, "
                          f"{n_holes} whole number(s) of quanta (holes in the order of their "
                          "first node, row by row), or fill a stray dry pixel")
    windings = _check_windings(hole_windings, n_holes)
    inside = nu[m]
    if not np.all(np.isfinite(inside)) or np.any(inside <= 0):
        bad = np.argwhere(m & ~(np.isfinite(nu) & (nu > 0)))[0]
        raise DomainError(f"density at node (row {bad[0]}, column {bad[1]}) inside the fluid is "
                          f"{nu[tuple(bad)]!r}; accepted: finite values > 0 wherever mask is True "
                          "(cut the fluid where the density falls below a threshold)")
    h = float(spacing)
    if not math.isfinite(h) or h <= 0:
        raise DomainError(f"spacing must be a positive length; got {spacing!r}")
    o = np.asarray(origin, dtype=np.float64).reshape(-1)
    if o.shape != (2,) or not np.all(np.isfinite(o)):
        raise DomainError(f"origin must be two finite numbers (x, y) of node (0, 0); got {origin!r}")
    return m, nu, h, o, holes, windings


def _check_windings(hole_windings, n_holes: int) -> tuple[int, ...]:
    """``hole_windings`` as a tuple of ints, one per hole (None: no holes), or a DomainError."""
    windings = () if hole_windings is None else tuple(hole_windings)
    if len(windings) != n_holes or any(isinstance(w, (bool, np.bool_))
                                       or not isinstance(w, (int, np.integer)) for w in windings):
        raise DomainError(f"hole_windings = {hole_windings!r}: the mask has {n_holes} hole(s); "
                          f"accepted: {n_holes} whole number(s) of circulation quanta"
                          + (" (or None)" if n_holes == 0 else ""))
    return tuple(int(w) for w in windings)


def hole_labels(mask: np.ndarray) -> np.ndarray:
    """The holes of a fluid mask, labelled 1, 2, ... in the order of their first node row by
    row (0 elsewhere): the dry components, 4-connected like the stencil's walls, that do not
    reach the grid's edge."""
    dry, _ = label(~mask)
    outer = np.unique(np.concatenate([dry[0], dry[-1], dry[:, 0], dry[:, -1]]))
    enclosed = ~mask & ~np.isin(dry, outer)
    out = np.zeros(mask.shape, dtype=np.int64)
    labs, first = np.unique(dry[enclosed], return_index=True)   # dry[enclosed]: raster order
    for k, lab in enumerate(labs[np.argsort(first)], start=1):
        out[dry == lab] = k
    return out


def _solve_table(mask, nu, h, stride, holes):
    """The remainder H on the coarse nodes (every stride-th node) of the full grid, and, if
    the fluid has holes, their harmonic measures omega_k at the fine nodes and the capacity
    matrix P (the hydrodynamic Green's function's remainder is in the table; see
    :class:`GridDomain`)."""
    ny, nx = mask.shape
    idx = -np.ones(mask.shape, dtype=np.int64)
    idx[mask] = np.arange(int(mask.sum()))
    inv = np.where(mask, 1.0 / np.where(mask, nu, 1.0), 0.0)
    rows, cols, vals = [], [], []
    diag = np.zeros(int(mask.sum()))
    ii, jj = np.nonzero(mask)
    for di, dj in ((0, 1), (0, -1), (1, 0), (-1, 0)):
        ni, nj = ii + di, jj + dj
        wet = mask[ni, nj]
        face = np.where(wet, 0.5 * (inv[ii, jj] + inv[ni, nj]), inv[ii, jj])
        diag += face
        rows.append(idx[ii[wet], jj[wet]])
        cols.append(idx[ni[wet], nj[wet]])
        vals.append(-face[wet])
    n = diag.size
    a = sp.csc_matrix((np.concatenate(vals + [diag]),
                       (np.concatenate(rows + [np.arange(n)]),
                        np.concatenate(cols + [np.arange(n)]))), shape=(n, n))
    lu = splu(a)
    omega, capacity = _harmonic_measures(lu, mask, inv, holes, idx, ii, jj)
    ci = np.arange(0, ny, stride)
    cj = np.arange(0, nx, stride)
    cgi, cgj = np.meshgrid(ci, cj, indexing="ij")
    cgi, cgj = cgi.ravel(), cgj.ravel()
    nu_c = _extend(mask, nu)[cgi, cgj]
    dist = h * np.hypot(cgi[:, None] - cgi[None, :], cgj[:, None] - cgj[None, :])
    w = np.sqrt(nu_c[:, None] * nu_c[None, :])
    with np.errstate(divide="ignore"):
        table = w * np.log(dist) / (2.0 * np.pi)          # G = 0: H = -singular part
    np.fill_diagonal(table, nu_c * (math.log(h * stride)) / (2.0 * np.pi))
    wet_c = np.nonzero(mask[cgi, cgj])[0]
    unknown = idx[cgi[wet_c], cgj[wet_c]]
    lattice = (math.log(h) - _EULER_GAMMA - 1.5 * math.log(2.0)) / (2.0 * np.pi)
    for start in range(0, wet_c.size, 256):
        block = wet_c[start:start + 256]
        rhs = np.zeros((n, block.size))
        rhs[unknown[start:start + 256], np.arange(block.size)] = 1.0   # (delta/h^2) * h^2
        g = lu.solve(rhs)[unknown, :]                                 # at the wet coarse nodes
        sub = g + _lattice_singular(cgi[wet_c], cgj[wet_c], cgi[block], cgj[block], h,
                                    w[np.ix_(wet_c, block)])
        for k, col in enumerate(block):
            r = np.nonzero(wet_c == col)[0][0]
            sub[r, k] = g[r, k] + nu_c[col] * lattice
        table[np.ix_(wet_c, block)] = sub
    if capacity.size:
        # Lin's Green's function at fixed circulations: G_h = G_D + omega(z)^T P^-1 omega(z')
        om_c = omega[:, cgi, cgj]
        table += om_c.T @ np.linalg.solve(capacity, om_c)
    table = 0.5 * (table + table.T)                   # exact symmetry of the solved table
    return table, cj.size, ci.size, omega, capacity


def _harmonic_measures(lu, mask, inv, holes, idx, ii, jj):
    """omega_k (k = 1..K) with -div(nu^-1 grad omega_k) = 0 in the fluid, 1 on hole k, 0 on
    every other dry node (the same five-point operator and LU as G), and the capacity matrix
    P_kl = sum over the faces of hole k of nu^-1 (delta_kl - omega_l(fluid side)), minus the
    flux of omega_l into the fluid through hole k's wall (symmetric, made exactly so).
    Shapes (K, ny, nx) and (K, K); empty without holes."""
    k_holes = int(holes.max())
    omega = np.zeros((k_holes,) + mask.shape)
    if not k_holes:
        return omega, np.zeros((0, 0))
    rhs = np.zeros((ii.size, k_holes))
    for di, dj in ((0, 1), (0, -1), (1, 0), (-1, 0)):
        lab = holes[ii + di, jj + dj]
        on = lab > 0
        np.add.at(rhs, (idx[ii[on], jj[on]], lab[on] - 1), inv[ii[on], jj[on]])
    sol = lu.solve(rhs)
    for k in range(k_holes):
        omega[k][mask] = sol[idx[mask], k]
        omega[k][holes == k + 1] = 1.0
    capacity = np.zeros((k_holes, k_holes))
    for k in range(k_holes):
        for l in range(k_holes):
            capacity[k, l] = np.sum(rhs[:, k] * ((k == l) - sol[:, l]))
    return omega, 0.5 * (capacity + capacity.T)


def _lattice_singular(i1, j1, i2, j2, h, w):
    """Minus the free five-point lattice Green's function at node offsets (off the diagonal):
    (w / 2 pi) ln r - w cos(4 theta) h^2 / (24 pi r^2), its asymptotic expansion to O(r^-2)
    (the potential kernel of the square lattice, from memory; checked against its exact values
    a(2, 0) = 4 - 8/pi and a(1, 1) = 4/pi to 1e-3)."""
    di = (i1[:, None] - i2[None, :]).astype(float)
    dj = (j1[:, None] - j2[None, :]).astype(float)
    r2 = np.where(di * di + dj * dj > 0, di * di + dj * dj, 1.0)
    cos4 = (di ** 4 - 6 * di * di * dj * dj + dj ** 4) / (r2 * r2)
    return w * (0.5 * np.log(r2 * h * h) / (2 * np.pi) - cos4 / (24 * np.pi * r2))


def _extend(mask, nu):
    """nu inside the fluid, the nearest fluid node's value outside (smooth up to the wall)."""
    _, (ei, ej) = distance_transform_edt(~mask, return_indices=True)
    return np.where(mask, nu, nu[ei, ej])


def green_cache_dir() -> Path:
    """$XDG_CACHE_HOME/vortherm/green (or ~/.cache/vortherm/green)."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "vortherm" / "green"


def _load_or_solve(digest, mask, nu, h, stride, holes, cache_dir):
    path = Path(cache_dir or green_cache_dir()) / f"green_{digest}.npz"
    if path.exists():
        try:
            with np.load(path, allow_pickle=False) as z:
                if str(z["digest"]) == digest:
                    return (z["table"], int(z["nxc"]), int(z["nyc"]), z["omega"],
                            z["capacity"])
                raise ValueError("digest does not match the file name")
        except (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile) as exc:
            warnings.warn(GreenCacheWarning(f"{path}: damaged Green's-function cache entry "
                                            f"({type(exc).__name__}: {exc}); rebuilding it now"),
                          stacklevel=3)
    table, nxc, nyc, omega, capacity = _solve_table(mask, nu, h, stride, holes)
    write_npz(path, {"table": table, "nxc": nxc, "nyc": nyc, "omega": omega,
                     "capacity": capacity, "digest": np.array(digest)}, compressed=False)
    return table, nxc, nyc, omega, capacity


@njit(SELF_GRADIENT_SIGNATURE, cache=True, error_model="numpy")
def grid_self_gradient(x: float, y: float, params: np.ndarray) -> complex:
    """Gradient of the self energy, a central difference over one table cell (the energy is
    bilinear within a cell, so a shorter step would see its kinks; this one gives a gradient
    that is continuous across cells). Units: E0 per L."""
    d = 0.5 / params[_INV_HC]
    gx = (grid_self(x + d, y, 1, params) - grid_self(x - d, y, 1, params)) / (2 * d)
    gy = (grid_self(x, y + d, 1, params) - grid_self(x, y - d, 1, params)) / (2 * d)
    return complex(gx, gy)


@njit(PAIR_GRADIENT_SIGNATURE, cache=True, error_model="numpy")
def grid_pair_gradient(x1: float, y1: float, x2: float, y2: float,
                       params: np.ndarray) -> complex:
    """Gradient of the pair energy with respect to (x1, y1): the logarithm's exactly, with the
    density weights' gradient and the remainder's as central differences over a fine and a
    table cell. Units: E0 per L."""
    dx = x1 - x2
    dy = y1 - y2
    r2 = dx * dx + dy * dy
    n1 = _nu(params, x1, y1)
    w2 = math.sqrt(_nu(params, x2, y2))
    w1 = math.sqrt(n1)
    hf = 0.5 / params[_INV_HF]
    gnx = (math.sqrt(_nu(params, x1 + hf, y1)) - math.sqrt(_nu(params, x1 - hf, y1))) / (2 * hf)
    gny = (math.sqrt(_nu(params, x1, y1 + hf)) - math.sqrt(_nu(params, x1, y1 - hf))) / (2 * hf)
    lg = math.log(r2)
    gx = -w2 * (gnx * lg + w1 * 2.0 * dx / r2)
    gy = -w2 * (gny * lg + w1 * 2.0 * dy / r2)
    d = 0.5 / params[_INV_HC]
    four_pi = 4.0 * math.pi
    gx += four_pi * (_remainder(params, x1 + d, y1, x2, y2)
                     - _remainder(params, x1 - d, y1, x2, y2)) / (2 * d)
    gy += four_pi * (_remainder(params, x1, y1 + d, x2, y2)
                     - _remainder(params, x1, y1 - d, x2, y2)) / (2 * d)
    return complex(gx, gy)


@njit(VELOCITY_SIGNATURE, cache=True, error_model="numpy")
def grid_velocity(pos, signs, alpha, alpha_prime, self_gradient, pair_gradient, params, out):
    """Velocities in a fluid of relative density nu: those of
    :func:`thermo.domains.base.pair_sum_velocity` divided by nu at each vortex (Kirchhoff's
    equations with the mass density rho nu in front of the vortex's velocity: a vortex where
    the fluid is thin moves faster for the same energy gradient). Units: L per m L^2 / hbar."""
    pair_sum_velocity(pos, signs, alpha, alpha_prime, self_gradient, pair_gradient, params, out)
    for i in range(pos.shape[0]):
        inv = 1.0 / max(_nu(params, pos[i, 0], pos[i, 1]), 1e-12)
        out[i, 0] *= inv
        out[i, 1] *= inv


@njit(cache=True, error_model="numpy")
def _self_at_nodes(params, xs, ys):
    """:func:`_self_from_table` at the points (xs[i], ys[i])."""
    out = np.empty(xs.size)
    for i in range(xs.size):
        out[i] = _self_from_table(xs[i], ys[i], params)
    return out


def _self_field(params: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """The self energy at the fine nodes (0 at dry nodes, never read: see grid_self).

    Units: E0."""
    ny, nx = mask.shape
    h, x0, y0 = params[_HF], params[_X0], params[_Y0]
    fy, fx = np.meshgrid(np.arange(ny), np.arange(nx), indexing="ij")
    s_f = _self_at_nodes(params, (x0 + fx * h).ravel().astype(float),
                         (y0 + fy * h).ravel().astype(float)).reshape(ny, nx)
    return np.where(mask, s_f, 0.0).ravel()


def _packed32(table: np.ndarray) -> np.ndarray:
    """The remainder table as float32 (half the memory: a table of ~1 MB stays in a core's L2
    cache, where the Monte Carlo's random reads are about twice as fast), two values per
    float64 slot of the params array; the kernels read it through ``.view(np.float32)``.
    H is O(1), so the rounding (~1e-7) is far below the discretisation error (~1e-2)."""
    flat = np.ascontiguousarray(table, dtype=np.float32).ravel()
    if flat.size % 2:
        flat = np.append(flat, np.float32(0.0))
    return flat.view(np.float64)


class GridDomain(Domain):
    r"""Any fluid mask and relative density on a uniform grid, Green's function solved numerically.

    Parameters
    ----------
    mask : array_like of bool, shape (ny, nx)
        True at fluid nodes; dry nodes on every grid edge.
    density : array_like of float, shape (ny, nx)
        Relative areal density nu = n / n_ref, finite and > 0 where mask is True (ignored
        elsewhere).
    spacing : float
        Grid spacing. Units: L.
    origin : (float, float)
        Position (x, y) of node (row 0, column 0). Units: L.
    log_length_over_core : float or None
        ln(L / a_ref), a_ref the effective core radius at nu = 1; required unless nu = 1 in the
        whole fluid.
    stride : int
        Coarse table node every ``stride`` fine nodes (default 2).
    cache_dir : path or None
        Where solved tables are kept (default ``$XDG_CACHE_HOME/vortherm/green``).
    hole_windings : sequence of int or None
        Circulation quanta around each hole of the fluid (dry nodes it encloses), in the order
        of the holes' first nodes row by row (:func:`hole_labels`); required if there are
        holes. The gas is taken at these circulations (point-vortex motion keeps them).

    **Holes.** A hole's circulation is a quantum number of its own, so G is Lin's Green's
    function at fixed circulations (Lin, PNAS 27, 575 (1941)), and with the windings n_k the
    energy gains each vortex's energy in the holes' flow. With G_D the Green's function that
    vanishes on every wall, omega_k the harmonic measure of hole k (-div(nu^-1 grad omega_k)
    = 0, 1 on hole k, 0 on the other walls) and P_kl = -(flux of omega_l into the fluid
    through hole k), the stream function at circulations n_k (counter-clockwise, in quanta)
    is psi = sum_i s_i G_D(., z_i) + sum_k c_k omega_k with c = P^-1 (n + Omega),
    Omega_k = sum_i s_i omega_k(z_i) (the flux of G_D(., z_i) into hole k is omega_k(z_i), by
    Green's identity). Integrating the energy by parts as in the module text, with psi = c_k on
    hole k, gives in E0

    .. math:: E = \sum_{i<j} s_is_j\,4\pi G_h(z_i, z_j) + \sum_i E_{\rm self}(z_i)
              + 4\pi\sum_i s_i\,n^{\mathsf T}P^{-1}\omega(z_i) + 2\pi n^{\mathsf T}P^{-1}n,

    G_h = G_D + omega^T P^-1 omega (smooth, so it goes into the tabulated remainder and the
    self energy's Robin part), the constant last term dropped. For the annulus q < |z| < 1,
    omega = ln|z| / ln q and P = 2 pi / ln(1/q), and this is the annulus domain's energy
    (:mod:`thermo.domains.annulus`; tested).

    Units: lengths in L, energies in E0.
    """

    kind: ClassVar[str] = "grid"
    from_geometry_file = False   # built from arrays; from_sizes is a stand-in
    size_names: ClassVar[tuple[str, ...]] = ("radius",)
    #: fine nodes across the diameter of the uniform disk built by :meth:`from_sizes`
    SIZES_NODES: ClassVar[int] = 40

    def __init__(self, mask, density, spacing: float, origin=(0.0, 0.0),
                 log_length_over_core: float | None = None, stride: int = 2,
                 cache_dir=None, hole_windings=None) -> None:
        m, nu, h, o, holes, windings = _check_inputs(mask, density, spacing, origin,
                                                     hole_windings)
        if isinstance(stride, bool) or not isinstance(stride, (int, np.integer)) or stride < 1:
            raise DomainError(f"stride must be a whole number >= 1; got {stride!r}")
        uniform = bool(np.all(nu[m] == 1.0))
        if log_length_over_core is None:
            if not uniform:
                raise DomainError("log_length_over_core (ln of the length unit over the core "
                                  "radius at nu = 1) is needed when the density is not uniform")
            log_length_over_core = 0.0
        lnla = float(log_length_over_core)
        nu_in = np.where(m, nu, 0.0)
        digest = hashlib.sha1(b"".join([
            np.ascontiguousarray(m).tobytes(), np.ascontiguousarray(nu_in).tobytes(),
            repr((m.shape, h, tuple(o), int(stride), TABLE_VERSION)).encode()])).hexdigest()[:20]
        table, nxc, nyc, omega, capacity = _load_or_solve(digest, m, nu_in, h, int(stride),
                                                          holes, cache_dir)
        ny, nx = m.shape
        wall = distance_transform_edt(m) * h
        header = np.zeros(_HEADER)
        header[[_NXF, _NYF, _X0, _Y0, _HF, _NXC, _NYC, _STRIDE, _LNLA]] = \
            [nx, ny, o[0], o[1], h, nxc, nyc, stride, lnla]
        header[_OFF_NU] = _HEADER
        header[_OFF_WALL] = _HEADER + nx * ny
        header[_OFF_SELF] = _HEADER + 2 * nx * ny
        header[_OFF_TAB] = _HEADER + 3 * nx * ny
        header[_UNIFORM] = 1.0 if uniform else 0.0
        header[_INV_HF], header[_INV_HC] = 1.0 / h, 1.0 / (h * stride)
        base = np.ascontiguousarray(np.concatenate(
            [header, _extend(m, nu_in).ravel(), wall.ravel(), np.zeros(nx * ny),
             _packed32(table)]))
        # the self energy at the fine nodes, read by bilinear interpolation away from the wall
        base[_HEADER + 2 * nx * ny: _HEADER + 3 * nx * ny] = _self_field(base, m)
        self._mask, self._h, self._origin = m, h, o
        self._digest, self._lnla = digest, lnla
        self._omega, self._capacity, self._holes = omega, capacity, holes
        self._hole_distance = None
        self._base = base
        self._windings, self._params = windings, self._with_flow(windings)

    def _with_flow(self, windings: tuple[int, ...]) -> np.ndarray:
        """The kernels' parameters at these windings: the table and fields of this fluid, and
        after them the vortex's energy in the holes' flow, 4 pi n^T P^-1 omega(z) (nothing if
        every n is 0)."""
        if not any(windings):
            return self._base
        coef = np.linalg.solve(self._capacity, np.asarray(windings, dtype=np.float64))
        flow = 4.0 * np.pi * np.tensordot(coef, self._omega, axes=1).ravel()
        params = np.concatenate([self._base, flow])
        params[_OFF_FLOW] = self._base.size
        return params

    @classmethod
    def from_sizes(cls, sizes: Mapping[str, float]) -> tuple[GridDomain, float]:
        """A uniform disk of ``sizes["radius"]`` on a grid of :attr:`SIZES_NODES` across; the
        radius is the length unit. Units: those of ``sizes``."""
        radius = check_sizes(cls, sizes)["radius"]
        n = cls.SIZES_NODES + 4
        h = 2.0 / cls.SIZES_NODES
        x = (np.arange(n) - (n - 1) / 2) * h
        mask = (x[None, :] ** 2 + x[:, None] ** 2) < 1.0
        return cls(mask, np.ones_like(x[None, :] * x[:, None]), h, (x[0], x[0])), radius

    def __eq__(self, other) -> bool:
        return isinstance(other, GridDomain) and self.key() == other.key()

    def __hash__(self) -> int:
        return hash(self.key())

    def key(self) -> tuple:
        """("grid", digest of mask, density, grid and settings, ln(L/a_ref)), and the holes'
        windings if the fluid has holes."""
        base = ("grid", self._digest, round(self._lnla, 12))
        return base + (self._windings,) if self._windings else base

    @property
    def hole_circulation(self) -> tuple[int, ...]:
        """Circulation quanta on each hole, in the order of :func:`hole_labels` (empty for a
        simply connected fluid). Units: quanta."""
        return self._windings

    def at_hole_circulation(self, windings) -> GridDomain:
        """The same fluid at other circulations on its holes: the table and fields are shared,
        only the flow term is new (this domain itself if the windings are its own)."""
        w = _check_windings(windings, len(self._windings))
        if w == self._windings:
            return self
        other = copy.copy(self)
        other._windings, other._params = w, self._with_flow(w)
        return other

    def hole_region(self, pos, cut: float) -> np.ndarray:
        """k where ``pos`` is less than ``cut`` from the nodes of hole k (the nearest such
        hole), else 0; distances bilinear on the fine nodes. Units: L."""
        p = as_points(pos, "pos")
        flat = p.reshape(-1, 2)
        out = np.zeros(flat.shape[0], dtype=np.int64)
        best = np.full(flat.shape[0], float(cut))
        if self._hole_distance is None:          # the fine nodes' distance to each hole, once
            self._hole_distance = [distance_transform_edt(self._holes != k) * self._h
                                   for k in range(1, len(self._windings) + 1)]
        for k, dist in enumerate(self._hole_distance, start=1):
            d = self._fine_bilinear(dist, flat)
            near = d < best
            out[near], best[near] = k, d[near]
        return out.reshape(p.shape[:-1])

    def _fine_bilinear(self, field: np.ndarray, flat: np.ndarray) -> np.ndarray:
        """Bilinear interpolation of fine-node fields (..., ny, nx) at points (M, 2)."""
        fx = (flat[:, 0] - self._origin[0]) / self._h
        fy = (flat[:, 1] - self._origin[1]) / self._h
        ny, nx = self._mask.shape
        j = np.clip(np.floor(fx).astype(int), 0, nx - 2)
        i = np.clip(np.floor(fy).astype(int), 0, ny - 2)
        tx, ty = fx - j, fy - i
        return ((1 - ty) * ((1 - tx) * field[..., i, j] + tx * field[..., i, j + 1])
                + ty * ((1 - tx) * field[..., i + 1, j] + tx * field[..., i + 1, j + 1]))

    @property
    def capacity(self) -> np.ndarray:
        """The holes' capacity matrix P (K, K); see the class text. Dimensionless."""
        return self._capacity.copy()

    def local_density(self, pos) -> np.ndarray:
        """The relative density nu at ``pos`` (..., 2), bilinear on the fine nodes (as the
        kernels read it). Dimensionless."""
        p = as_points(pos, "pos")
        ny, nx = self._mask.shape
        off = _HEADER
        nu = self._params[off:off + nx * ny].reshape(ny, nx)
        return np.maximum(self._fine_bilinear(nu, p.reshape(-1, 2)), 0.0).reshape(p.shape[:-1])

    def harmonic_measure(self, pos) -> np.ndarray:
        """omega_k at ``pos`` (..., 2), bilinear on the fine nodes: shape (K, ...).
        Dimensionless."""
        p = as_points(pos, "pos")
        val = self._fine_bilinear(self._omega, p.reshape(-1, 2))
        return val.reshape((self._omega.shape[0],) + p.shape[:-1])

    def kernels(self) -> DomainKernels:
        """Compiled kernels; params packs the header, fine nu, fine wall distance, the table."""
        return DomainKernels(grid_self, grid_pair, grid_wall_distance, grid_move_change,
                             self._params)

    def gradient_kernels(self) -> GradientKernels:
        """Energy gradients (central differences over one table cell where the energy is
        interpolated, the pair logarithm's exactly) and the density-weighted velocity kernel,
        for point-vortex dynamics. Units: E0 per L.

        Raises DomainError where a hole carries circulation: the self-gradient signature has
        no sign, and the holes' flow moves vortices and antivortices differently."""
        if any(self._windings):
            raise DomainError(f"point-vortex dynamics in a grid domain whose holes carry "
                              f"circulation ({self._windings} quanta) is not modelled; "
                              "accepted: a simply connected fluid or holes at zero winding")
        return GradientKernels(grid_self_gradient, grid_pair_gradient, grid_velocity,
                               self._params)

    @property
    def area(self) -> float:
        """Fluid nodes times the cell area. Units: L^2."""
        return float(self._mask.sum()) * self._h ** 2

    @property
    def max_step(self) -> float:
        """The larger side of the grid. Units: L."""
        return self._h * max(self._mask.shape)

    def distance_to_wall(self, pos) -> np.ndarray:
        """Distance to the nearest dry node (bilinear), negative outside the grid. Units: L."""
        p = as_points(pos, "pos")
        flat = p.reshape(-1, 2)
        out = np.array([grid_wall_distance(x, y, self._params) if np.isfinite(x + y) else np.nan
                        for x, y in flat])
        return out.reshape(p.shape[:-1])

    def sample_uniform(self, rng: np.random.Generator, n: int, margin: float = 0.0) -> np.ndarray:
        """n points uniform where the distance to the wall exceeds ``margin`` (rejection).

        Units: L.
        """
        ii, jj = np.nonzero(self._mask)
        lo = self._origin + self._h * np.array([jj.min() - 1, ii.min() - 1])
        hi = self._origin + self._h * np.array([jj.max() + 1, ii.max() + 1])
        out = np.empty((0, 2))
        for _ in range(1000):
            if len(out) >= n:
                break
            cand = lo + (hi - lo) * rng.random((max(4 * n, 16), 2))
            out = np.concatenate([out, cand[self.distance_to_wall(cand) > margin]])
        if len(out) < n:
            raise DomainError(f"a margin of {margin:g} L leaves no room in the grid domain")
        return out[:n]
