"""Diagnostics: named, unit-carrying pure functions of one output frame.

Each diagnostic is registered once with its name, unit and description; the pipeline evaluates
all of them at every output time and the run file stores each as ``observables/<name>`` with its
unit. ``vortherm describe`` lists them. A diagnostic may return one number or, for a group that
is cheaper to compute together (the energies share one FFT), a dict of numbers whose names are
registered as members of the group.

Units: simulation units (xi, hbar/mu, mu, n0), as each entry states.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from gpe.field.solver import observables
from thermo.quantities import QUANTITIES


@dataclass(frozen=True)
class FrameState:
    """What a diagnostic may read: the field and its surroundings at one output time.

    Attributes
    ----------
    psi : (ny, nx) complex field in sqrt(n0).
    t : time in hbar/mu.
    grid : gpe.field.grid.Grid.
    v_static, v_beam : (ny, nx) trap and beam potentials in mu (v_beam None without beams).
    g : interaction strength (1 in healing units).
    units : gpe.setup.units.HealingUnits (SI factors).
    vortices : rows of the vortex table for this frame (VORTEX_DTYPE).
    """

    psi: np.ndarray
    t: float
    grid: object
    v_static: np.ndarray
    v_beam: np.ndarray | None
    g: float
    units: object
    vortices: np.ndarray


@dataclass(frozen=True)
class Diagnostic:
    """A registered quantity: name, unit, description and the function computing it."""

    name: str
    unit: str
    description: str
    function: Callable[[FrameState], object]
    group: str = ""


#: name -> Diagnostic, in registration order.
REGISTRY: dict[str, Diagnostic] = {}
_GROUPS: dict[str, Callable[[FrameState], dict]] = {}


def diagnostic(name: str, unit: str, description: str):
    """Decorator registering ``function(state) -> float`` as the observable ``name``."""
    def register(function: Callable[[FrameState], float]) -> Callable[[FrameState], float]:
        if name in REGISTRY:
            raise ValueError(f"diagnostic {name!r} is registered twice")
        REGISTRY[name] = Diagnostic(name, unit, description, function)
        return function
    return register


def diagnostic_group(group: str, members: dict[str, tuple[str, str]]):
    """Decorator registering ``function(state) -> dict`` that yields several observables at once.

    ``members`` maps each returned name to (unit, description).
    """
    def register(function: Callable[[FrameState], dict]) -> Callable[[FrameState], dict]:
        for name, (unit, description) in members.items():
            if name in REGISTRY:
                raise ValueError(f"diagnostic {name!r} is registered twice")
            REGISTRY[name] = Diagnostic(name, unit, description, function, group)
        _GROUPS[group] = function
        return function
    return register


def units() -> dict[str, str]:
    """name -> unit of every registered diagnostic."""
    return {name: d.unit for name, d in REGISTRY.items()}


def evaluate(state: FrameState) -> dict[str, float]:
    """Every registered diagnostic of one frame (groups computed once)."""
    out: dict[str, float] = {}
    for group, function in _GROUPS.items():
        values = function(state)
        for name, d in REGISTRY.items():
            if d.group == group:
                out[name] = float(values[name])
    for name, d in REGISTRY.items():
        if not d.group:
            out[name] = float(d.function(state))
    return out


def describe() -> str:
    """A table of the registered diagnostics: name, unit, description."""
    width = max(len(n) for n in REGISTRY)
    unit_width = max(len(d.unit) for d in REGISTRY.values())
    return "\n".join(f"{d.name:<{width}}  [{d.unit:<{unit_width}}]  {d.description}"
                     for d in REGISTRY.values())


# ------------------------------------------------------------------------------------------
# the built-in diagnostics
# ------------------------------------------------------------------------------------------
_E = "mu n0 xi^2"


@diagnostic_group("energies", {
    "norm": ("n0 xi^2", "integral of |psi|^2 (atom number / (n0 xi^2))"),
    "e_kin": (_E, "kinetic energy (1/2) int |grad psi|^2, spectral"),
    "e_trap": (_E, "trap energy int V_trap |psi|^2"),
    "e_beam": (_E, "beam energy int V_beam |psi|^2"),
    "e_int": (_E, "interaction energy (g/2) int |psi|^4"),
    "energy": (_E, "total energy e_kin + e_trap + e_beam + e_int"),
    "mu": ("mu", "chemical potential (e_kin + e_trap + e_beam + 2 e_int) / norm"),
    "lz": ("hbar n0 xi^2", "angular momentum about the grid centre"),
})
def _energies(state: FrameState) -> dict:
    return observables(state.psi, state.grid, state.v_static, state.v_beam, state.g)


@diagnostic("atom_number", "1", "atom number N = n0 xi^2 * norm")
def _atom_number(state: FrameState) -> float:
    norm = state.grid.integrate(state.psi.real ** 2 + state.psi.imag ** 2)
    return state.units.atom_number(norm)


@diagnostic("n_plus", QUANTITIES["n_plus"].unit, QUANTITIES["n_plus"].description)
def _n_plus(state: FrameState) -> float:
    return float(np.count_nonzero(state.vortices["sign"] > 0))


@diagnostic("n_minus", QUANTITIES["n_minus"].unit, QUANTITIES["n_minus"].description)
def _n_minus(state: FrameState) -> float:
    return float(np.count_nonzero(state.vortices["sign"] < 0))
