"""The diagnostics registry: every observable has a unit and a description, groups are computed
once, and the values agree with the solver's own observables."""

import numpy as np
import pytest

from gpe.analysis import diagnostics
from gpe.analysis.vortices import VORTEX_DTYPE
from gpe.field.grid import Grid
from gpe.field.solver import observables
from gpe.setup.units import SPECIES, HealingUnits


@pytest.fixture
def state():
    grid = Grid(32, 32, 16.0, 16.0)
    x, y = grid.X, grid.Y
    psi = np.exp(-(x ** 2 + y ** 2) / 20) * np.exp(1j * np.arctan2(y, x)) + 0j
    rows = np.zeros(3, dtype=VORTEX_DTYPE)
    rows["sign"] = [1, 1, -1]
    units = HealingUnits(SPECIES["87Rb"].mass_kg, 1e-30, 1e-45)
    return diagnostics.FrameState(psi, 0.0, grid, 0.5 * (x ** 2 + y ** 2) * 0.01, None, 1.0,
                                  units, rows)


def test_every_diagnostic_has_unit_and_description():
    assert {"norm", "energy", "mu", "lz", "atom_number", "n_plus", "n_minus"} <= set(diagnostics.REGISTRY)
    for d in diagnostics.REGISTRY.values():
        assert d.unit and d.description
    listing = diagnostics.describe()
    assert all(name in listing for name in diagnostics.REGISTRY)


def test_values_match_the_solver_observables_and_counts(state):
    values = diagnostics.evaluate(state)
    direct = observables(state.psi, state.grid, state.v_static, None, 1.0)
    for key, value in direct.items():
        assert values[key] == pytest.approx(value, rel=1e-12)
    assert values["n_plus"] == 2 and values["n_minus"] == 1
    # N = n0 xi^2 * norm [definition of the healing-unit scaling]
    assert values["atom_number"] == pytest.approx(state.units.atom_number(direct["norm"]))


def test_a_name_cannot_be_registered_twice():
    with pytest.raises(ValueError, match="twice"):
        diagnostics.diagnostic("norm", "1", "again")(lambda s: 0.0)
