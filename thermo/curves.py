"""The canonical curves an ensemble estimate matches its shots against.

A :class:`Curves` holds the canonical mean and variance of one statistic of a (N+, N-) gas along
the ladder of its density of states, with one mean curve per bootstrap replicate (the density
of states' own error). thermo.estimate solves the score equation on them; the statistic is the
energy (:meth:`Curves.of_energy`) or the energy as an imaging model records it (thermo.imaged).

Units: those of the statistic (E0 for energies); beta in 1/E0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from thermo.dos.model import DensityOfStates


@dataclass(frozen=True)
class Curves:
    """Canonical mean and variance of a group's statistic along the ladder, with replicates.

    ``beta`` increasing (M,); ``mean``, ``var`` (M,); ``mean_reps`` (B, M), one row per
    bootstrap replicate of the density of states. Units: those of the statistic (E0).
    """

    beta: np.ndarray
    mean: np.ndarray
    var: np.ndarray
    mean_reps: np.ndarray

    @classmethod
    def of_energy(cls, dos: DensityOfStates) -> "Curves":
        """<E>(beta) and Var E(beta) of a density of states (its tables)."""
        t = dos.tables
        return cls(t["beta"], t["mean_energy"], t["var_energy"], t["mean_energy_reps"])
