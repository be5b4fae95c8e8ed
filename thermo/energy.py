"""Point-vortex (Kirchhoff-Routh) energy in a bounded domain, single and batched.

.. math::

    E = \\sum_i \\ln r_c(z_i) + \\sum_{i<j} s_i s_j\\, 4\\pi G(z_i, z_j)

in units of :math:`E_0 = \\rho\\kappa^2/(4\\pi)`, positions scaled by the domain's length unit,
the constant :math:`N\\ln(L/a)` dropped (see :mod:`thermo.domains.base`). For the unit disk this is

.. math::

    E = \\sum_i \\ln(1 - |u_i|^2)
        + \\sum_{i<j} s_i s_j \\ln\\frac{|1 - u_i\\bar u_j|^2}{|u_i - u_j|^2}

(Kirchhoff-Routh function with the image at :math:`u/|u|^2`; Lin, PNAS 27, 570 (1941)).

Units: energies in E0; positions dimensionless; signs +1/-1.
"""

from __future__ import annotations

import numpy as np
from numba import njit, types

from thermo.domains.base import (PARAMS, POINTS, SIGNS, Domain, PairKernel, SelfKernel,
                                 fill_ledger, kernel_array)
from thermo.errors import ConfigurationError

__all__ = ["energy", "energy_batch", "energy_change", "validate_configuration",
           "total_energy_kernel"]


# fastmath off: the sums mix large positive and negative logarithms, and NaN/inf must
# propagate so that invalid configurations are caught, not silently folded away.
@njit(types.float64(POINTS, SIGNS, SelfKernel, PairKernel, PARAMS), cache=True)
def total_energy_kernel(pos, signs, self_fn, pair_fn, params):
    """Energy of one configuration, pos (N, 2), signs (N,) int64. O(N^2).

    ``self_fn`` and ``pair_fn`` are the domain's kernels and ``params`` their parameter vector
    (:class:`~thermo.domains.base.DomainKernels`). Units: positions in the length unit, E0.
    """
    n = pos.shape[0]
    e = 0.0
    for i in range(n):
        xi = pos[i, 0]
        yi = pos[i, 1]
        e += self_fn(xi, yi, signs[i], params)
        for j in range(i + 1, n):
            e += signs[i] * signs[j] * pair_fn(xi, yi, pos[j, 0], pos[j, 1], params)
    return e


@njit(types.void(types.float64[:, :, ::1], types.int64[:, ::1], SelfKernel, PairKernel, PARAMS,
                 types.float64[::1]), cache=True)
def _batch_kernel(pos, signs, self_fn, pair_fn, params, out):
    for s in range(pos.shape[0]):
        out[s] = total_energy_kernel(pos[s], signs[s], self_fn, pair_fn, params)


def validate_configuration(pos, signs, domain: Domain, core_radius: float = 0.0,
                           batched: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Check and convert a configuration; raise :class:`ConfigurationError` naming the rows.

    Parameters
    ----------
    pos : array_like, shape (N, 2) or (S, N, 2) if ``batched``
        Scaled positions. Units: the domain's length unit.
    signs : array_like of int, shape (N,) (or (S, N) if ``batched``)
        +1 or -1 each.
    domain : Domain (a Disk, a Box, ...)
    core_radius : float
        Hard-core radius a: every vortex must be farther than a from the wall and the centres
        at least 2a apart (checked only if a > 0). Units: length unit.
    batched : bool
        Whether ``pos`` carries a leading sample axis.

    Returns
    -------
    pos : numpy.ndarray float64, C-contiguous
    signs : numpy.ndarray int64, shape (N,) or (S, N)
    """
    p = kernel_array(np.asarray(pos, dtype=np.float64), np.float64)
    want = 3 if batched else 2
    shape_txt = "(S, N, 2)" if batched else "(N, 2)"
    if p.ndim != want or p.shape[-1] != 2:
        raise ConfigurationError(f"positions must have shape {shape_txt}; got {p.shape}")
    n = p.shape[-2]
    s_raw = np.asarray(signs)
    if s_raw.shape not in ((n,), p.shape[:-1]):
        raise ConfigurationError(
            f"signs must have shape ({n},) matching the {n} vortices of the positions"
            + (f" or {p.shape[:-1]}" if batched else "") + f"; got {s_raw.shape}")
    bad = ~np.isin(s_raw, (1, -1))
    if bad.any():
        idx = np.argwhere(bad)[0]
        raise ConfigurationError(
            f"sign of vortex at index {tuple(int(i) for i in idx)} is {s_raw[tuple(idx)].item()!r}; "
            "only +1 and -1 are accepted (unknown signs must be resolved before thermometry)")
    s = kernel_array(s_raw.astype(np.int64), np.int64)
    finite = np.isfinite(p).all(axis=-1)
    if not finite.all():
        idx = tuple(int(i) for i in np.argwhere(~finite)[0])
        raise ConfigurationError(f"vortex at index {idx} has non-finite coordinates {p[idx]}")
    inside = domain.contains(p, margin=core_radius)
    if not inside.all():
        idx = tuple(int(i) for i in np.argwhere(~inside)[0])
        where = "inside the domain" if core_radius == 0 else \
            f"farther than the core radius {core_radius} from the wall"
        raise ConfigurationError(
            f"vortex at index {idx} at {p[idx]} is not {where} ({domain.kind} {domain.key()}; "
            f"{np.count_nonzero(~inside)} vortices fail); positions must be scaled by the "
            "domain size (disk: radius 1; box: [-aspect/2, aspect/2] x [-1/2, 1/2])")
    if core_radius > 0 and n > 1:
        flat = p.reshape(-1, n, 2)
        for k, conf in enumerate(flat):
            d2 = ((conf[:, None, :] - conf[None, :, :]) ** 2).sum(-1)
            d2[np.diag_indices(n)] = np.inf
            if d2.min() < (2.0 * core_radius) ** 2:
                i, j = np.unravel_index(np.argmin(d2), d2.shape)
                pre = f"sample {k}: " if batched else ""
                raise ConfigurationError(
                    f"{pre}vortices {i} and {j} are {np.sqrt(d2[i, j]):.3g} apart, closer than "
                    f"twice the core radius {core_radius}")
    return p, s


def _coincidence_error(p: np.ndarray, prefix: str = "") -> ConfigurationError:
    n = p.shape[0]
    d2 = ((p[:, None, :] - p[None, :, :]) ** 2).sum(-1)
    d2[np.diag_indices(n)] = np.inf
    i, j = np.unravel_index(np.argmin(d2), d2.shape)
    return ConfigurationError(
        f"{prefix}the energy is not finite: vortices {i} and {j} coincide (distance "
        f"{np.sqrt(d2[i, j]):.3g}); point vortices must be at distinct positions")


def energy(pos, signs, domain: Domain) -> float:
    """Kirchhoff-Routh energy of one configuration.

    Parameters
    ----------
    pos : array_like, shape (N, 2)
        Scaled positions (disk: u = r/R; box: see :class:`thermo.domains.box.Box`).
    signs : array_like of int, shape (N,)
        Circulation signs, +1 or -1.
    domain : Domain (a Disk, a Box, ...)

    Returns
    -------
    float
        Energy. Units: E0 = rho kappa^2 / (4 pi), constant N ln(L/a) dropped.
    """
    p, s = validate_configuration(pos, signs, domain)
    k = domain.kernels()
    e = total_energy_kernel(p, s, k.self_energy, k.pair_energy, k.params)
    if not np.isfinite(e):
        raise _coincidence_error(p)
    return float(e)


def energy_batch(pos, signs, domain: Domain) -> np.ndarray:
    """Energies of S configurations of the same N vortices.

    Parameters
    ----------
    pos : array_like, shape (S, N, 2)
        Scaled positions.
    signs : array_like of int, shape (N,) or (S, N)
        Signs shared by all samples, or one row per sample.
    domain : Domain (a Disk, a Box, ...)

    Returns
    -------
    numpy.ndarray, shape (S,)
        Energies. Units: E0.
    """
    p, s = validate_configuration(pos, signs, domain, batched=True)
    if s.ndim == 1:
        s = kernel_array(np.broadcast_to(s, p.shape[:-1]), np.int64)
    k = domain.kernels()
    out = np.empty(p.shape[0])
    _batch_kernel(p, s, k.self_energy, k.pair_energy, k.params, out)
    bad = ~np.isfinite(out)
    if bad.any():
        k = int(np.argmax(bad))
        raise _coincidence_error(p[k], prefix=f"sample {k}: ")
    return out


def energy_change(pos, signs, domain: Domain, index: int, new_position) -> float:
    """Energy change when vortex ``index`` moves to ``new_position`` (O(N)).

    Parameters
    ----------
    pos : array_like, shape (N, 2)
    signs : array_like of int, shape (N,)
    domain : Domain (a Disk, a Box, ...)
    index : int
        Row of the vortex that moves.
    new_position : array_like, shape (2,)

    Returns
    -------
    float
        E(after) - E(before). Units: E0.
    """
    p, s = validate_configuration(pos, signs, domain)
    if not (0 <= int(index) < p.shape[0]):
        raise ConfigurationError(f"index {index} is out of range for {p.shape[0]} vortices")
    new = np.asarray(new_position, dtype=np.float64).reshape(2)
    validate_configuration(new[None, :], s[:1], domain)
    k = domain.kernels()
    n = p.shape[0]
    rows = n if k.keeps_ledger else 0               # the disk's kernel reads no ledger
    ledger, out = np.zeros((rows, rows)), np.zeros(n)
    if k.keeps_ledger:
        fill_ledger(p, s, k.params, k.self_energy, k.pair_energy, k.move_change, ledger, out)
    return float(k.move_change(p, s, int(index), new[0], new[1], k.params, 0.0, k.self_energy,
                               k.pair_energy, ledger, out))
