"""The memory a run needs, checked against what the machine has before anything is allocated.

Every large array of a run has the size of the grid, so the memory of a run is a number of
bytes per grid point times ``N = nx * ny``. :func:`estimate_run_memory` counts those bytes stage
by stage from the arrays each stage of :func:`gpe.run.simulate.simulate` holds, with the dtypes
the protocol asks for: the static trap and its coordinates, the imaginary-time ground state, the
real-time solver, and the output of a frame (observables, beam potential, snapshot). A stage
holds its own arrays and whatever the stages before it still keep; the peak of the run is the
largest stage. :func:`check_memory` compares the peak with the memory the operating system
reports as available (:func:`available_memory`) and refuses a run that cannot fit, before a
grid-sized array is allocated and before a file is created.

The counts follow the code (gpe.field.ground_state, gpe.field.solver, gpe.field.solver.observables,
gpe.run.simulate); tests/test_memory.py holds them against the arrays a small run allocates.

Units: bytes; grid points.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from gpe.errors import SimulationError

#: Bytes per grid point of a float64 array (potentials, coordinates, |k|^2, densities).
_F = 8
#: Bytes per grid point of a complex128 array (the ground state and the observables always use it).
_Z = 16
#: Bytes per grid point of the boolean detection region.
_B = 1
#: The static trap while it is built: its coordinates (kept by the grid) and the wall formula's
#: temporaries; 11 float64 arrays bounds every shape (the mask's resampling and two distance
#: transforms need the most, a disk 5).
_TRAP_BUILD = 11 * _F
#: The observables of one field (gpe.field.solver.observables): the density, the transform and
#: two spectral derivatives, and three complex temporaries of the angular-momentum integrand.
_OBSERVABLES = _F + 6 * _Z
#: The snapshot of a frame in the run file: the complex64 copy and HDF5's compression buffers.
_SNAPSHOT = 3 * 8


@dataclass(frozen=True)
class MemoryEstimate:
    """What a run holds in memory, stage by stage.

    Attributes
    ----------
    grid_points : int
        ``nx * ny``.
    stages : mapping of str to int
        Peak bytes while each stage runs, including what the earlier stages still hold, in the
        order the stages run.
    solver : int
        Bytes the real-time solver keeps for the whole evolution (its field, FFT buffers,
        static potential, kinetic and damping factors).

    Units
    -----
    bytes.
    """

    grid_points: int
    stages: Mapping[str, int]
    solver: int

    @property
    def peak(self) -> int:
        """The largest stage. Units: bytes."""
        return max(self.stages.values())

    @property
    def peak_stage(self) -> str:
        """Name of the largest stage."""
        return max(self.stages, key=self.stages.get)


def solver_bytes(grid_points: int, precision: str, damped: bool) -> int:
    """Bytes a :class:`gpe.field.solver.Solver` keeps: its arrays of the grid's size.

    The field and the three FFT buffers (two planning arrays and the alignment bounce buffer)
    in the solver's precision, its copy of the static potential, the half and full kinetic
    factors, and with damping the three precomputed factors of the static potential.

    Units: bytes.
    """
    c = np.dtype(precision).itemsize
    return grid_points * (4 * c + _F + 2 * c + (3 * _F if damped else 0))


def estimate_run_memory(protocol, *, resume: bool = False,
                        precision: str | None = None) -> MemoryEstimate:
    """Peak memory of :func:`gpe.run.simulate.simulate` for ``protocol``, stage by stage.

    Parameters
    ----------
    protocol : gpe.setup.protocol.Protocol
    resume : bool
        A resumed run reads its trap and state from the run file: no trap build, no ground
        state, the checkpoint instead of the ground state and its noisy copy.
    precision : {"complex128", "complex64"}, optional
        The solver's precision (default: the protocol's ``evolution.precision``).

    Returns
    -------
    MemoryEstimate

    Units
    -----
    bytes.
    """
    g, ev = protocol.grid, protocol.evolution
    n = g.nx * g.ny
    precision = precision or ev.precision
    c = np.dtype(precision).itemsize
    # kept from the first stage on: the coordinates the trap and the observables use (grid.X,
    # grid.Y, cached by the grid), the static potential and the detection region
    kept = 2 * _F + _F + _B
    stages: dict[str, int] = {}
    if not resume:
        stages["static trap"] = n * (_TRAP_BUILD + _F + _B)
        imprint = _Z if protocol.ground_state.imprint_positions else 0   # the pinned phase
        # trap, beam and kernel potentials; the Thomas-Fermi guess; the field and three FFT
        # buffers; |k|^2 and the three kinetic factors; a convergence check's observables
        ground = 3 * _F + _Z + imprint + 4 * _Z + 2 * _F + 2 * _Z + _OBSERVABLES
        stages["ground state"] = n * (kept + ground)
        # the ground state, its noisy copy and the noise (two normals, complex, scaled, plus one)
        stages["initial noise"] = n * (kept + _F + 2 * _Z + 2 * _F + 3 * _Z)
        state = 2 * _Z                       # the ground state and the initial field stay held
    else:
        state = c                            # the checkpoint's field
    solver = solver_bytes(n, precision, ev.gamma > 0)
    before = n * (kept + _F + state)         # + |k|^2, cached by the grid
    # the time-step check: the density and four float temporaries of the local phase
    stages["solver"] = before + solver + n * 5 * _F
    beam = _F if protocol.beams else 0       # the beam potential of a frame, for e_beam
    observables = _OBSERVABLES + (_Z if c != _Z else 0)   # a complex128 copy of a complex64 field
    stages["frame output"] = before + solver + n * (beam + max(observables, _SNAPSHOT))
    return MemoryEstimate(grid_points=n, stages=stages, solver=solver)


def available_memory() -> tuple[int, str] | None:
    """Bytes the operating system says can still be allocated, and where that number comes from.

    Linux: ``MemAvailable`` of /proc/meminfo (free memory plus the caches that can be dropped,
    without swapping). Elsewhere: free physical pages times the page size (``os.sysconf``).
    None when neither is known.

    Units: bytes.
    """
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024, "MemAvailable in /proc/meminfo"
    except (OSError, ValueError, IndexError):
        pass
    try:
        pages, size = os.sysconf("SC_AVPHYS_PAGES"), os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        return None
    return int(pages) * int(size), "free physical pages (os.sysconf)"


def check_memory(protocol, *, resume: bool = False, available: int | None = None) -> MemoryEstimate:
    """Refuse a run whose estimated peak memory exceeds the memory available.

    Parameters
    ----------
    protocol : gpe.setup.protocol.Protocol
    resume : bool
        Estimate a resumed run (see :func:`estimate_run_memory`).
    available : int, optional
        Bytes to compare with; by default :func:`available_memory` (no check when the system
        does not tell).

    Returns
    -------
    MemoryEstimate

    Raises
    ------
    SimulationError
        Naming ``grid.nx`` and ``grid.ny``, the estimate, the memory available and a grid (or
        precision) that would fit.

    Units
    -----
    bytes.
    """
    estimate = estimate_run_memory(protocol, resume=resume)
    if available is None:
        found = available_memory()
        if found is None:
            return estimate
        available, source = found
    else:
        source = "as given"
    if estimate.peak <= available:
        return estimate
    g = protocol.grid
    fit = math.sqrt(available / estimate.peak)
    nx_fit, ny_fit = 2 * int(g.nx * fit / 2), 2 * int(g.ny * fit / 2)
    example = 2 ** int(math.log2(nx_fit)) if nx_fit >= 8 else 8   # powers of two are fastest
    cheaper = ""
    if protocol.evolution.precision == "complex128":
        single = estimate_run_memory(protocol, resume=resume, precision="complex64").peak
        cheaper = (f", or evolution.precision = \"complex64\" (about {_gib(single)}"
                   f"{', which fits' if single <= available else ''})")
    raise SimulationError(
        f"{protocol.source_name}: grid.nx = {g.nx}, grid.ny = {g.ny} ({estimate.grid_points:,} grid "
        f"points) need about {_gib(estimate.peak)} of memory at the run's peak ({estimate.peak_stage}, "
        f"~{estimate.peak / estimate.grid_points:.0f} bytes per grid point), but {_gib(available)} is "
        f"available ({source}); the run was not started and no file was written. Accepted: a grid "
        f"of at most about {nx_fit} x {ny_fit} points (e.g. grid.nx = {example}){cheaper}, or a machine "
        "or job with more free memory")


def _gib(n_bytes: float) -> str:
    return f"{n_bytes / 2**30:.3g} GiB"
