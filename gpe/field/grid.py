"""The periodic 2D grid on which the wavefunction lives.

Arrays are stored as ``(ny, nx)``: a row is a fixed ``y``.  Real-space coordinates are centred,
``x_i = (-nx/2 + i) dx``; wavenumbers are in FFT ordering (``numpy.fft.fftfreq``) so that they
multiply the output of a forward FFT directly.

Units: lengths in healing lengths xi, wavenumbers in 1/xi.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from gpe.errors import VorthermError


@dataclass(frozen=True)
class Grid:
    """A uniform periodic grid of ``nx`` by ``ny`` points covering ``length_x`` by ``length_y``.

    Parameters
    ----------
    nx, ny : int
        Number of points along x and y (even numbers keep the grid symmetric about 0).
    length_x, length_y : float
        Side lengths of the periodic box.

    Units
    -----
    Lengths in xi; wavenumbers in 1/xi; areas in xi^2.

    Notes
    -----
    Derived arrays (``x``, ``kx``, ``k2``, ``X`` ...) are computed once on first access and cached;
    they are read-only so that a shared grid cannot be modified by accident.
    """

    nx: int
    ny: int
    length_x: float
    length_y: float
    _cache: dict = field(default_factory=dict, init=False, repr=False, compare=False, hash=False)

    def __post_init__(self) -> None:
        for name in ("nx", "ny"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 2:
                raise VorthermError(
                    f"Grid.{name} must be an integer >= 2 (got {value!r}); powers of two are fastest"
                )
        for name in ("length_x", "length_y"):
            value = getattr(self, name)
            if not np.isfinite(value) or value <= 0:
                raise VorthermError(f"Grid.{name} must be a positive length in xi (got {value!r})")

    # -- spacing and areas ---------------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int]:
        """Array shape ``(ny, nx)``."""
        return (self.ny, self.nx)

    @property
    def dx(self) -> float:
        """Grid spacing along x. Units: xi."""
        return self.length_x / self.nx

    @property
    def dy(self) -> float:
        """Grid spacing along y. Units: xi."""
        return self.length_y / self.ny

    @property
    def area(self) -> float:
        """Area of the periodic box. Units: xi^2."""
        return self.length_x * self.length_y

    @property
    def cell_area(self) -> float:
        """Area of one grid cell, ``dx * dy``; integrals are ``sum(f) * cell_area``. Units: xi^2."""
        return self.dx * self.dy

    # -- coordinate arrays (cached, read-only) -------------------------------------------------
    def _cached(self, key: str, build) -> np.ndarray:
        array = self._cache.get(key)
        if array is None:
            array = np.ascontiguousarray(build())
            array.setflags(write=False)
            self._cache[key] = array
        return array

    @property
    def x(self) -> np.ndarray:
        """Centred x coordinates, shape ``(nx,)``. Units: xi."""
        return self._cached("x", lambda: (np.arange(self.nx) - self.nx / 2) * self.dx)

    @property
    def y(self) -> np.ndarray:
        """Centred y coordinates, shape ``(ny,)``. Units: xi."""
        return self._cached("y", lambda: (np.arange(self.ny) - self.ny / 2) * self.dy)

    @property
    def kx(self) -> np.ndarray:
        """Wavenumbers along x in FFT ordering, shape ``(nx,)``. Units: 1/xi."""
        return self._cached("kx", lambda: 2 * np.pi * np.fft.fftfreq(self.nx, d=self.dx))

    @property
    def ky(self) -> np.ndarray:
        """Wavenumbers along y in FFT ordering, shape ``(ny,)``. Units: 1/xi."""
        return self._cached("ky", lambda: 2 * np.pi * np.fft.fftfreq(self.ny, d=self.dy))

    @property
    def k2(self) -> np.ndarray:
        """Squared wavenumber ``kx^2 + ky^2``, shape ``(ny, nx)``. Units: 1/xi^2."""
        return self._cached("k2", lambda: self.ky[:, None] ** 2 + self.kx[None, :] ** 2)

    @property
    def X(self) -> np.ndarray:  # noqa: N802 (physics naming)
        """x coordinate of every point, shape ``(ny, nx)``. Units: xi."""
        return self._cached("X", lambda: np.broadcast_to(self.x[None, :], self.shape).copy())

    @property
    def Y(self) -> np.ndarray:  # noqa: N802 (physics naming)
        """y coordinate of every point, shape ``(ny, nx)``. Units: xi."""
        return self._cached("Y", lambda: np.broadcast_to(self.y[:, None], self.shape).copy())

    def integrate(self, values: np.ndarray) -> float:
        """Riemann sum of ``values`` over the box (spectrally exact for band-limited fields).

        Units: unit of ``values`` times xi^2.
        """
        return float(np.sum(values) * self.cell_area)
