r"""The stochastic stage of the solver: the projector and the thermal noise of the SPGPE.

The stochastic projected GPE in its simple-growth form (Blakie, Bradley, Davis, Ballagh &
Gardiner, Adv. Phys. 57, 363 (2008); Rooney, Bradley & Blakie, PRA 81, 023630 (2010)) is

.. math:: d\psi = \mathcal P\left\{-i(1 - i\gamma)(L - \mu)\psi\,dt + dW\right\},
          \qquad \langle dW^*(\mathbf r) dW(\mathbf r')\rangle = 2\gamma k_B T\,
          \delta(\mathbf r - \mathbf r')\,dt

in simulation units (hbar = 1, energies in mu).  :math:`\mathcal P` projects onto the plane
waves with :math:`k^2/2 \le \epsilon_{cut}`, a disk in k space.  With psi scaled so that
|psi|^2 = n/n0, the noise of the physical field, whose modes hold atoms, becomes
:math:`2\gamma k_B T\,\tilde g\,\delta\,dt` with :math:`\tilde g = 1/(n_0\xi^2)` the norm of one
atom (``norm_per_atom``); an ideal gas then holds k_B T/(eps_k - mu) atoms per mode (the
classical-field equipartition).

How the solver uses this (:class:`gpe.field.solver.Solver`): the projector is folded into
the kinetic factors (they are zero outside the disk), so it costs nothing per step; the noise
of one step, dW over dt, is drawn directly for the projected Fourier modes and added in k
space right after the step's nonlinear sub-step, before the next kinetic factor, so no FFT
pair is added.  The draws come from an explicit, seeded ``numpy.random.Generator`` whose state
is part of the run's checkpoint.

Units: simulation units (k in 1/xi, energies in mu, times in hbar/mu, psi in sqrt(n0)).
"""

from __future__ import annotations

import math

import numpy as np

from gpe.errors import VorthermError
from gpe.field import kernels
from gpe.field.grid import Grid


def largest_cutoff(grid: Grid) -> float:
    """The largest projector energy k_cut^2/2 whose disk fits in the grid's k space.

    The disk must lie inside the box |kx| <= pi/dx, |ky| <= pi/dy of the FFT modes, or the
    projector would not be isotropic.  Units: mu (k in 1/xi).
    """
    k_max = min(math.pi / grid.dx, math.pi / grid.dy)
    return 0.5 * k_max * k_max


def projector(grid: Grid, cutoff: float) -> np.ndarray:
    """Boolean (ny, nx) mask of the Fourier modes kept by the projector, k^2/2 <= cutoff.

    Raises
    ------
    VorthermError
        If ``cutoff`` is not positive or exceeds :func:`largest_cutoff`.

    Units: cutoff in mu.
    """
    limit = largest_cutoff(grid)
    if not (math.isfinite(cutoff) and 0 < cutoff <= limit * (1 + 1e-12)):
        raise VorthermError(
            f"projector cutoff {cutoff!r} mu is outside (0, {limit:.4g}] mu: the disk "
            f"k^2/2 <= cutoff must fit in the grid's k space (k_max = pi/dx = "
            f"{math.sqrt(2 * limit):.4g} 1/xi); use a smaller cutoff or a finer grid")
    return grid.k2 <= 2.0 * cutoff


class ThermalNoise:
    """The noise increments of the projected modes, drawn and added in place.

    Parameters
    ----------
    grid : Grid
    mask : (ny, nx) bool, the projector (:func:`projector`)
    gamma, temperature, norm_per_atom, dt : float
        Damping, k_B T (mu), norm of one atom (xi^2 n0), time step (hbar/mu).
    rng : numpy.random.Generator
        The source of the draws; its state is the noise's state (``rng.bit_generator.state``).

    Notes
    -----
    White noise of variance sigma^2 = 2 gamma T g~ dt / dA per grid cell has, in numpy's
    unnormalised FFT, independent modes of variance N sigma^2 (N grid points); each projected
    mode gets such a complex Gaussian, the others none.  Nothing is allocated per step.

    Units: as in the module docstring.
    """

    def __init__(self, grid: Grid, mask: np.ndarray, gamma: float, temperature: float,
                 norm_per_atom: float, dt: float, rng: np.random.Generator | None) -> None:
        if not hasattr(rng, "standard_normal"):
            raise VorthermError("the thermal noise (temperature > 0) needs a seeded "
                                "numpy.random.Generator, e.g. np.random.default_rng(seed)")
        rows, cols = np.nonzero(mask)
        self.rows = np.ascontiguousarray(rows, dtype=np.int64)
        self.cols = np.ascontiguousarray(cols, dtype=np.int64)
        self.normals = np.empty((2, self.rows.size))
        variance_per_cell = 2.0 * gamma * temperature * norm_per_atom * dt / grid.cell_area
        # each real component carries half of the complex variance N sigma^2
        self.amplitude = math.sqrt(0.5 * grid.nx * grid.ny * variance_per_cell)
        self.rng = rng

    @property
    def n_modes(self) -> int:
        """Number of projected modes (the noise draws 2 n_modes normals per step)."""
        return int(self.rows.size)

    def add(self, psi_k: np.ndarray) -> None:
        """Add one step's noise to the (unnormalised) Fourier field ``psi_k``, in place."""
        self.rng.standard_normal(out=self.normals)
        kernels.add_mode_noise(psi_k, self.rows, self.cols, self.normals, self.amplitude)
