"""The interface every trap shape implements, the smooth wall they share, and shape discovery.

A trap is a frozen, keyword-only dataclass in simulation units. Every module of this package
except this one (and modules whose name starts with an underscore) defines exactly one concrete
subclass of :class:`Trap`; :func:`trap_shapes` finds them, so adding a shape is adding a module.

A shape knows the keys of the protocol's [trap] table it uses and how to build itself from that
checked table; its Thomas-Fermi chemical potential for an atom number, from the table's SI
values (needed before the healing units exist, since mu fixes them); its extent, area and
Thomas-Fermi norm; its potential and signed distance to the wall on a grid; where vortices
may be detected; and the point-vortex domain (:class:`VortexDomain`) that stands in for it in
thermometry, if it has one. A shape read from a file (a mask image) keeps what it read
(:meth:`Trap.stored_arrays`), so that a run file can hold it and the trap can be rebuilt from the
run file alone.

Hard-walled shapes derive from :class:`WalledTrap`: ``V = V_wall (1 + tanh(d / w_edge)) / 2``
with ``d`` the signed distance outside the allowed region (negative inside), so the wall is at
half height on the region's edge and the spectral solver never sees a step.

Units: lengths in xi, energies in mu, angular frequencies in rad per hbar/mu; SI only where a
name ends in ``_si`` (m, m^2, J, kg, rad/s).
"""

from __future__ import annotations

import functools
import importlib
import inspect
import pkgutil
import types
from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar, Mapping, NoReturn
from typing import Protocol as _TypingProtocol

import numpy as np

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from thermo.domains.base import Domain

#: Default wall height of hard-walled traps: five times mu keeps the density out of the wall.
DEFAULT_WALL_HEIGHT = 5.0
#: The ``wall_height`` key, shared by every shape (the harmonic trap's cap).
WALL_HEIGHT_KEY = {"kind": "float", "dim": "energy", "check": "positive"}
#: A required positive length key (radius, pixel size ...).
LENGTH_KEY = {"kind": "float", "dim": "length", "required": True, "check": "positive"}
#: An optional positive length key (one of a pair such as size / size_x, size_y).
OPTIONAL_LENGTH_KEY = {"kind": "float", "dim": "length", "check": "positive"}


@dataclass(frozen=True)
class VortexDomain:
    """The point-vortex stand-in for a trap.

    Attributes
    ----------
    domain : thermo.domains.base.Domain
        The unit domain (disk, box, annulus, or a grid domain for harmonic and mask traps).
    scale : float
        Length of one domain unit (disk: R_eff; box: the side along y).
    center : (float, float)
        Trap centre.
    core_radius : float
        Hard core in domain units.
    approximate : str
        Empty for flat-bottomed traps; otherwise why the model is only an approximation.

    Units
    -----
    scale and centre in xi; core radius in domain units.
    """

    domain: Domain
    scale: float
    center: tuple[float, float]
    core_radius: float
    approximate: str = ""

    def to_domain(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Positions in xi -> (N, 2) positions in domain units."""
        return np.column_stack(((np.asarray(x) - self.center[0]) / self.scale,
                                (np.asarray(y) - self.center[1]) / self.scale))


class TrapSection(_TypingProtocol):
    """The checked [trap] table of a protocol, as a shape reads it (gpe.setup.schema.Section).

    Units: :meth:`get` and :meth:`pair` give simulation units; :meth:`si_value` gives m or rad/s.
    """

    def get(self, base: str, default: Any = ...) -> Any: ...

    def has(self, base: str) -> bool: ...

    def pair(self, both: str, x: str, y: str, si: bool = False) -> tuple[float, float]: ...

    def si_value(self, base: str) -> float: ...

    def fail(self, base_or_key: str, problem: str, accepted: str) -> NoReturn: ...

    def stored(self, name: str) -> np.ndarray | None:
        """The array ``name`` a run file kept of a file this table names (:meth:`Trap.stored_arrays`).

        None when the table is read for a new run: the shape then reads its files from disk.
        """


class Trap(ABC):
    """A static trap in simulation units; each shape is a frozen, keyword-only dataclass.

    Attributes
    ----------
    shape : str
        The shape's name: its value of ``trap.shape`` in a protocol.
    protocol_keys : dict
        The keys of the [trap] table the shape uses besides ``shape``: base name -> keyword
        arguments of gpe.setup.schema.Spec (kind, dim, required, default, choices, check). A key
        used by several shapes must be described the same way by each.

    Units
    -----
    lengths xi, energies mu, angular frequencies rad per hbar/mu.
    """

    shape: ClassVar[str] = ""
    protocol_keys: ClassVar[Mapping[str, Mapping[str, Any]]] = {}

    @classmethod
    @abstractmethod
    def from_section(cls, sec: TrapSection, base_dir: Path) -> Trap:
        """The trap from the checked [trap] table; relative file names are taken from ``base_dir``.

        Units: as :meth:`TrapSection.get` gives them (simulation units).
        """

    @classmethod
    @abstractmethod
    def chemical_potential_si(cls, sec: TrapSection, base_dir: Path, number: float, g2d_Jm2: float,
                              mass_kg: float) -> float:
        """Thomas-Fermi chemical potential of ``number`` atoms, from the table's SI sizes.

        Units: g2D in J m^2, mass in kg; returns J.
        """

    @abstractmethod
    def extent(self) -> tuple[float, float]:
        """Full width along x and y of the region the condensate may fill. Units: xi."""

    @abstractmethod
    def area(self) -> float:
        """Area of the region the condensate fills (at mu = 1 where that depends on mu). Units: xi^2."""

    @abstractmethod
    def thomas_fermi_norm(self) -> float:
        """Integral of the Thomas-Fermi density ``max(1 - V, 0)`` at mu = 1 over the plane.

        Divided by the dimensionless coupling it is the atom number of the ground state.
        Units: xi^2 (density in n0).
        """

    @abstractmethod
    def potential(self, grid: Grid) -> np.ndarray:
        """The static potential on the grid, a C-contiguous ``(ny, nx)`` float64 array. Units: mu."""

    @abstractmethod
    def signed_distance(self, grid: Grid) -> np.ndarray:
        """Signed distance of every grid point to the wall, negative inside. Units: xi."""

    @abstractmethod
    def detection_region(self, v_static: np.ndarray) -> np.ndarray:
        """Boolean ``(ny, nx)`` mask of where vortices may be reported, from this trap's potential.

        Units: ``v_static`` in mu.
        """

    def stored_arrays(self) -> dict[str, np.ndarray]:
        """The arrays this trap read from files, by name; none for shapes given by numbers alone.

        A run file keeps them (``potential/<name>``), and a protocol read back from a run file
        finds them in :meth:`TrapSection.stored`, so the trap is rebuilt without its files.

        Units: as the shape defines each array.
        """
        return {}

    def fits_in(self, length_x: float, length_y: float) -> bool:
        """Whether the trap fits into a periodic grid of this size. Units: xi."""
        ext_x, ext_y = self.extent()
        return ext_x <= length_x and ext_y <= length_y

    def vortex_domain(self, core_radius_xi: float, wall_layer_xi: float) -> VortexDomain:
        """The point-vortex domain standing in for this trap; this default refuses (no domain).

        ``wall_layer_xi`` is the depleted layer at a hard wall, ``core_radius_xi`` the vortex hard
        core.

        Raises
        ------
        VorthermError
            For a shape without a point-vortex domain.

        Units
        -----
        lengths xi.
        """
        raise VorthermError(f"thermometry: trap shape {self.shape!r} has no point-vortex domain; accepted "
                            "shapes: disk, box, annulus, harmonic, mask")


@dataclass(frozen=True, kw_only=True)
class WalledTrap(Trap):
    """A flat-bottomed trap: a smooth tanh wall around an allowed region.

    Parameters
    ----------
    wall_height : float
        Height ``V_wall`` of the wall.
    edge_width : float
        Width ``w_edge`` of the tanh wall (0: a sharp step).

    Units
    -----
    wall height mu, edge width xi.
    """

    protocol_keys: ClassVar[Mapping[str, Mapping[str, Any]]] = {
        "wall_height": WALL_HEIGHT_KEY,
        "edge_width": {"kind": "float", "dim": "length", "default": 1.0, "check": "nonneg"}}

    wall_height: float = field(default=DEFAULT_WALL_HEIGHT, metadata={"dim": "energy"})
    edge_width: float = field(default=1.0, metadata={"dim": "length"})

    @staticmethod
    def wall_from_section(sec: TrapSection) -> dict[str, float]:
        """``wall_height`` and ``edge_width`` from the table (defaults filled in). Units: mu, xi."""
        return {"wall_height": sec.get("wall_height", DEFAULT_WALL_HEIGHT), "edge_width": sec.get("edge_width")}

    @classmethod
    @abstractmethod
    def area_si(cls, sec: TrapSection, base_dir: Path) -> float:
        """Area of the allowed region from the table's SI sizes. Units: m^2."""

    @classmethod
    def chemical_potential_si(cls, sec: TrapSection, base_dir: Path, number: float, g2d_Jm2: float,
                              mass_kg: float) -> float:
        """Flat Thomas-Fermi profile: ``n = mu / g2D`` over the area A, so ``mu = g2D N / A``.

        Units: g2D in J m^2, mass in kg (unused); returns J.
        """
        return g2d_Jm2 * number / cls.area_si(sec, base_dir)

    def thomas_fermi_norm(self) -> float:
        """The area: the Thomas-Fermi density is 1 (n0) inside the wall. Units: xi^2."""
        return self.area()

    def potential(self, grid: Grid) -> np.ndarray:
        """``smooth_wall`` of the signed distance on the grid, ``(ny, nx)`` float64. Units: mu."""
        wall = smooth_wall(self.signed_distance(grid), self.wall_height, self.edge_width)
        return np.ascontiguousarray(wall, dtype=np.float64)

    def detection_region(self, v_static: np.ndarray) -> np.ndarray:
        """Inside the wall: below half the wall height. Units: ``v_static`` in mu."""
        return v_static < 0.5 * self.wall_height


def smooth_wall(distance: np.ndarray, wall_height: float, edge_width: float) -> np.ndarray:
    """``V_wall (1 + tanh(d / w_edge)) / 2``; a sharp step if ``edge_width`` is 0.

    Units: distance and edge width in xi, wall height in mu; returns mu.
    """
    if edge_width <= 0:
        return np.where(distance > 0, wall_height, np.where(distance == 0, 0.5 * wall_height, 0.0))
    return wall_height * 0.5 * (1.0 + np.tanh(distance / edge_width))


# ------------------------------------------------------------------------------------------
# discovery
# ------------------------------------------------------------------------------------------
def shape_of_module(module: types.ModuleType) -> type[Trap]:
    """The one trap shape a module of this package defines.

    Raises
    ------
    TypeError
        If the module defines no concrete :class:`Trap` subclass with a name, or more than one.

    Units: none.
    """
    found = [obj for obj in vars(module).values()
             if isinstance(obj, type) and issubclass(obj, Trap) and obj.__module__ == module.__name__
             and not inspect.isabstract(obj)]
    if len(found) != 1 or not found[0].shape:
        names = ", ".join(f"{c.__name__} (shape {c.shape!r})" for c in found) or "none"
        raise TypeError(f"{module.__name__} defines {len(found)} trap shapes ({names}); accepted: exactly "
                        f"one concrete subclass of {__name__}.Trap with a non-empty shape name per module of "
                        f"{__package__} (helpers go in modules whose name starts with '_')")
    return found[0]


@functools.cache
def trap_shapes() -> Mapping[str, type[Trap]]:
    """Every trap shape class of this package by shape name, sorted by name (read-only).

    Raises
    ------
    TypeError
        If a module breaks the one-shape-per-module rule or two shapes share a name.

    Units: none.
    """
    shapes: dict[str, type[Trap]] = {}
    for info in pkgutil.iter_modules([str(Path(__file__).parent)]):
        if info.name == "base" or info.name.startswith("_"):
            continue
        cls = shape_of_module(importlib.import_module(f"{__package__}.{info.name}"))
        if cls.shape in shapes:
            raise TypeError(f"trap shape name {cls.shape!r} is used by {shapes[cls.shape].__module__} "
                            f"and {cls.__module__}; accepted: one module per shape name")
        shapes[cls.shape] = cls
    return types.MappingProxyType(dict(sorted(shapes.items())))
