"""Superfluid flow from a wavefunction, and the flow of a set of point vortices (for figures).

Units: lengths in xi, velocities in c = hbar/(m xi) (the sound speed, 1 in healing units),
vorticity in c/xi. In these units hbar/m = 1, so the circulation of one vortex is 2 pi.
Derivatives are spectral: the grid is periodic and a trapped field vanishes at its edges.
"""

from __future__ import annotations

import numpy as np

from gpe.errors import VorthermError

__all__ = [
    "spectral_gradient",
    "current_density",
    "superfluid_velocity",
    "vorticity",
    "point_vortex_velocity",
    "point_vortex_vorticity",
]


def _wavenumbers(grid, shape):
    kx = np.asarray(grid.kx)
    ky = np.asarray(grid.ky)
    if shape != (ky.size, kx.size):
        raise VorthermError(f"flow: field has shape {shape} but the grid is (ny, nx) = "
                            f"{(ky.size, kx.size)}")
    return kx[None, :], ky[:, None]


def spectral_gradient(field: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray]:
    """Spectral derivatives (d/dx, d/dy) of a periodic field on ``grid``.

    For a real field the Nyquist mode is dropped so that the result stays real.
    Units: 1/xi times the unit of ``field``.
    """
    field = np.asarray(field)
    kx, ky = _wavenumbers(grid, field.shape)
    f_k = np.fft.fft2(field)
    ddx = np.fft.ifft2(1j * kx * f_k)
    ddy = np.fft.ifft2(1j * ky * f_k)
    if not np.iscomplexobj(field):
        return ddx.real, ddy.real
    return ddx, ddy


def current_density(psi: np.ndarray, grid) -> tuple[np.ndarray, np.ndarray]:
    """Probability current j = Im(conj(psi) grad psi) (= n v with hbar/m = 1).

    Units: n0 c.
    """
    gx, gy = spectral_gradient(np.asarray(psi, dtype=np.complex128), grid)
    return np.imag(np.conj(psi) * gx), np.imag(np.conj(psi) * gy)


def superfluid_velocity(psi: np.ndarray, grid, *, density_floor: float = 1e-6
                        ) -> tuple[np.ndarray, np.ndarray]:
    """Superfluid velocity v = Im(conj(psi) grad psi) / |psi|^2.

    v diverges as 1/r at a vortex core and is undefined where there are no atoms; it is set to
    zero where |psi|^2 < density_floor * max |psi|^2.

    Units: c = hbar/(m xi).
    """
    if not density_floor >= 0:
        raise VorthermError(f"superfluid_velocity: density_floor = {density_floor!r} must be >= 0")
    jx, jy = current_density(psi, grid)
    n = np.abs(psi) ** 2
    fluid = n > density_floor * n.max()
    safe = np.where(fluid, n, 1.0)
    return np.where(fluid, jx / safe, 0.0), np.where(fluid, jy / safe, 0.0)


def vorticity(vx: np.ndarray, vy: np.ndarray, grid) -> np.ndarray:
    """Spectral curl dvy/dx - dvx/dy of a periodic velocity field. Units: c/xi."""
    dvy_dx, _ = spectral_gradient(vy, grid)
    _, dvx_dy = spectral_gradient(vx, grid)
    return dvy_dx - dvx_dy


def _vortex_sources(positions, signs, disk_radius):
    pos = np.asarray(positions, dtype=np.float64).reshape(-1, 2)
    sgn = np.asarray(signs, dtype=np.float64).reshape(-1)
    if pos.shape[0] != sgn.shape[0]:
        raise VorthermError(f"point vortices: {pos.shape[0]} positions but {sgn.shape[0]} signs")
    if disk_radius is None:
        return pos, sgn
    if not disk_radius > 0:
        raise VorthermError(f"point vortices: disk_radius = {disk_radius!r} must be > 0 (xi)")
    r2 = np.sum(pos ** 2, axis=1)
    if np.any(r2 >= disk_radius ** 2):
        raise VorthermError("point vortices: a vortex lies on or outside the disk of radius "
                            f"{disk_radius} xi")
    # image of a vortex at r0 sits at R^2 r0 / |r0|^2 with the opposite sign (Milne-Thomson
    # circle theorem); a vortex at the centre has its image at infinity
    off = r2 > 0
    images = pos[off] * (disk_radius ** 2 / r2[off])[:, None]
    return np.vstack([pos, images]), np.concatenate([sgn, -sgn[off]])


def point_vortex_velocity(X: np.ndarray, Y: np.ndarray, positions, signs, *,
                          core_radius: float = 0.5, disk_radius: float | None = None
                          ) -> tuple[np.ndarray, np.ndarray]:
    r"""Velocity of point vortices, regularised inside a core.

    .. math:: \mathbf v = \sum_j s_j \frac{\hat z \times (\mathbf r - \mathbf r_j)}
              {|\mathbf r - \mathbf r_j|^2 + a^2}

    (hbar/m = 1: circulation 2 pi per vortex), with image vortices for a disk of radius
    ``disk_radius`` centred at the origin, so that the wall sees no normal flow.

    Units: X, Y, positions, core_radius a, disk_radius in xi; velocity in c.
    """
    if not core_radius >= 0:
        raise VorthermError(f"point_vortex_velocity: core_radius = {core_radius!r} must be >= 0")
    pos, sgn = _vortex_sources(positions, signs, disk_radius)
    vx = np.zeros(np.shape(X))
    vy = np.zeros(np.shape(X))
    a2 = core_radius ** 2
    for (x0, y0), s in zip(pos, sgn):
        dx, dy = X - x0, Y - y0
        inv = s / (dx * dx + dy * dy + a2)
        vx -= dy * inv
        vy += dx * inv
    return vx, vy


def point_vortex_vorticity(X: np.ndarray, Y: np.ndarray, positions, signs, *,
                           core_radius: float = 0.5) -> np.ndarray:
    r"""Vorticity of :func:`point_vortex_velocity` (its exact curl, without images, which lie
    outside the disk): :math:`\omega = \sum_j 2 s_j a^2 / (|\mathbf r-\mathbf r_j|^2 + a^2)^2`,
    whose integral is 2 pi s_j per vortex.

    Units: c/xi.
    """
    if not core_radius > 0:
        raise VorthermError(f"point_vortex_vorticity: core_radius = {core_radius!r} must be > 0")
    pos, sgn = _vortex_sources(positions, signs, None)
    omega = np.zeros(np.shape(X))
    a2 = core_radius ** 2
    for (x0, y0), s in zip(pos, sgn):
        r2 = (X - x0) ** 2 + (Y - y0) ** 2
        omega += 2.0 * s * a2 / (r2 + a2) ** 2
    return omega
