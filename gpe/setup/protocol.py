"""The protocol file (TOML): parse, apply ``--set`` overrides, validate, resolve units.

Every dimensioned key carries its unit as a suffix (``radius_um``, ``dt_ms``, ``height_mu``,
``speed_c`` ...). ``units = "SI"`` (default) accepts SI suffixes and multiples of the natural
scales (xi, hbar/mu, mu, c); ``units = "healing"`` accepts only the natural ones (the [atoms]
section is always SI). The reference of every key is docs/protocol.md.

Units: the resolved :class:`Protocol` holds lengths in xi, times in hbar/mu, energies in mu,
speeds in c, angular frequencies in rad per hbar/mu; SI values are kept in ``units``/``atoms``.
"""

from __future__ import annotations

import dataclasses
import json
import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import scipy.constants as const
import tomli_w

from gpe.errors import ProtocolError, VorthermError
from gpe.field.beams import (
    Beam,
    BeamSet,
    CirclePath,
    LinePath,
    PolylinePath,
    Ramp,
    StaticPath,
    array_offsets,
)
from gpe.field.grid import Grid
from gpe.field.traps.base import Trap, trap_shapes
from gpe.setup.practice import check_practice
from gpe.setup.schema import (
    ReadingContext,
    Section,
    apply_overrides,
    describe,
    describe_value,
)
from gpe.setup.thermal import resolve_thermal
from gpe.setup.units import BOHR_RADIUS_M, HealingUnits, get_species, quasi2d_coupling


# ------------------------------------------------------------------------------------------
# resolved configuration
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class AtomsConfig:
    """The atoms, in SI. ``norm`` = integral |psi|^2 dx dy (xi^2) that holds ``number`` atoms.

    Units: SI as named; number in atoms; norm in xi^2 (|psi|^2 in n0).
    """

    species: str
    mass_kg: float
    scattering_length_m: float
    axial_frequency_hz: float
    axial_length_m: float
    g2d_Jm2: float
    chemical_potential_J: float
    number: float
    number_given: bool
    norm: float


@dataclass(frozen=True)
class GroundStateConfig:
    """Imaginary-time ground-state settings. Units: dt in hbar/mu, imprint positions in xi."""

    dt: float = field(metadata={"dim": "time"})
    mu_tolerance: float
    energy_tolerance: float
    max_steps: int
    fixed: str
    noise_amplitude: float
    imprint_positions: tuple[tuple[float, float], ...] = field(metadata={"dim": "length"})
    imprint_signs: tuple[int, ...]


@dataclass(frozen=True)
class EvolutionConfig:
    """Real-time evolution settings. Units: times in hbar/mu; gamma dimensionless; seconds of wall time.

    ``temperature`` (k_B T in mu) > 0 runs the stochastic projected GPE with the projector
    energy ``cutoff`` (mu); ``gamma_source`` says whether gamma was "given" ([evolution]
    damping) or "computed" from T and mu (:func:`gpe.setup.units.thermal_damping`).
    """

    duration: float = field(metadata={"dim": "time"})
    dt: float = field(metadata={"dim": "time"})
    output_interval: float = field(metadata={"dim": "time"})
    gamma: float
    precision: str
    seed: int
    checkpoint_every_outputs: int
    checkpoint_every_s: float
    fft_planning: str = "reproducible"
    #: hand-off to point vortices: end time (None: no hand-off), output interval, mutual
    #: friction alpha and alpha', relative tolerance of the adaptive integrator
    points_until: float | None = field(default=None, metadata={"dim": "time"})
    points_output_interval: float | None = field(default=None, metadata={"dim": "time"})
    points_friction: float = 0.0
    points_friction_prime: float = 0.0
    points_tolerance: float = 1e-8
    #: finite temperature (SPGPE): k_B T, projector cutoff energy, where gamma came from
    temperature: float = field(default=0.0, metadata={"dim": "energy"})
    cutoff: float | None = field(default=None, metadata={"dim": "energy"})
    gamma_source: str = "given"

    @property
    def steps_per_output(self) -> int:
        return int(round(self.output_interval / self.dt))

    @property
    def n_outputs(self) -> int:
        """Outputs after t = 0 (the initial state is output 0)."""
        return int(math.floor(self.duration / self.output_interval + 1e-9))

    @property
    def n_steps(self) -> int:
        return self.n_outputs * self.steps_per_output


@dataclass(frozen=True)
class Protocol:
    """A validated protocol, resolved to simulation units (SI factors in ``units``).

    Units: lengths xi, times hbar/mu, energies mu, speeds c (see the config classes).
    """

    source_name: str
    source_text: str
    overrides: tuple[str, ...]
    name: str
    description: str
    unit_system: str
    units: HealingUnits
    atoms: AtomsConfig
    trap: Trap
    grid: Grid
    ground_state: GroundStateConfig
    evolution: EvolutionConfig
    beams: tuple[Beam, ...]

    @property
    def time_unit(self) -> str:
        """The unit in which this protocol's times are shown: "ms" (SI files) or "hbar/mu"."""
        return "ms" if self.unit_system == "SI" else "hbar/mu"

    def display_time(self, t):
        """Simulation time (hbar/mu) -> the protocol's display unit (:attr:`time_unit`)."""
        return self.units.time_to_ms(t) if self.unit_system == "SI" else t

    def build_beams(self) -> BeamSet:
        """The protocol's beams as a :class:`~gpe.field.beams.BeamSet` (may be empty)."""
        return BeamSet(self.beams)

    def build_trap(self) -> np.ndarray:
        """Static trap on the grid, ``(ny, nx)``. Units: mu."""
        return self.trap.potential(self.grid)

    def to_dict(self) -> dict:
        """Fully resolved protocol: every dimensioned value in simulation units and in SI."""
        u, g = self.units, self.grid
        evo = describe(self.evolution, u)
        evo.update(steps_per_output=self.evolution.steps_per_output, n_outputs=self.evolution.n_outputs,
                   n_steps=self.evolution.n_steps)
        return {
            "format": "vortherm-protocol/1", "name": self.name, "description": self.description,
            "source_name": self.source_name, "unit_system": self.unit_system,
            "overrides": list(self.overrides), "units": u.as_dict(),
            "atoms": dataclasses.asdict(self.atoms), "trap": {"shape": self.trap.shape, **describe(self.trap, u)},
            "grid": {"nx": g.nx, "ny": g.ny, **describe_value("length_x", g.length_x, "length", u),
                     **describe_value("length_y", g.length_y, "length", u),
                     **describe_value("dx", g.dx, "length", u), **describe_value("dy", g.dy, "length", u)},
            "ground_state": describe(self.ground_state, u), "evolution": evo,
            "beams": [describe(b, u) for b in self.beams],
        }

    def to_json(self) -> str:
        """:meth:`to_dict` as an indented JSON string."""
        return json.dumps(self.to_dict(), indent=1)



# ------------------------------------------------------------------------------------------
# resolution: atoms and units, trap, grid, settings, beams
# ------------------------------------------------------------------------------------------
class _TrapTable(Section):
    """The checked [trap] table, with the arrays a run file kept of the files it names.

    It is the :class:`~gpe.field.traps.base.TrapSection` the shapes read; ``stored`` is empty for
    a new run (the shapes read their files) and holds a run file's ``potential/<name>`` arrays
    when its protocol is read back (the shapes take those instead).
    """

    def __init__(self, ctx: ReadingContext, table: Any, stored: Mapping[str, np.ndarray]) -> None:
        super().__init__(ctx, "trap", "trap", table, selector="shape")
        self._stored = dict(stored)

    def stored(self, name: str) -> np.ndarray | None:
        """The kept array ``name``, or None for a new run. Units: as the shape defines it."""
        return self._stored.get(name)


def _resolve_atoms(ctx: ReadingContext, sec: Section, trap: Section, shape: type[Trap],
                   base_dir: Path) -> tuple[Any, float, float, float, float]:
    """Species, coupling and mu (J), the trap ``shape`` giving mu for an atom number in SI.

    Returns (species, a_s, omega_z, g2d, mu) and sets ctx.units. Units: SI.
    """
    try:
        species = get_species(sec.get("species"))
    except VorthermError as exc:
        sec.fail("species", str(exc), "87Rb, 23Na, 39K, 41K, 7Li, 133Cs")
    if sec.has("scattering_length"):
        a_s = sec.get("scattering_length")
    elif species.scattering_length_a0 is None:
        sec.fail("scattering_length", f"missing: {species.name} is Feshbach-tuned and has no default",
                 "scattering_length_a0 or scattering_length_nm")
    else:
        a_s = species.scattering_length_a0 * BOHR_RADIUS_M
    omega_z = sec.get("axial_frequency")
    g2d = quasi2d_coupling(species.mass_kg, a_s, omega_z)
    if ctx.mode == "healing" and sec.has("number"):
        sec.fail("number", "with units = \"healing\" the atom number follows from the trap size and "
                 "cannot be set", "chemical_potential_nK or chemical_potential_hz (sets the SI scale)")
    which = sec.one_of("number", "chemical_potential")
    if which == "chemical_potential":
        mu = sec.get("chemical_potential")
    else:
        mu = shape.chemical_potential_si(trap, base_dir, sec.get("number"), g2d, species.mass_kg)
    ctx.units = HealingUnits(species.mass_kg, mu, g2d)
    return species, a_s, omega_z, g2d, mu


def _resolve_grid(sec: Section, trap: Trap) -> Grid:
    nx = sec.get("nx")
    if nx < 8 or nx % 2:
        sec.fail("nx", f"{nx} is not an even number >= 8", "an even integer, e.g. 128, 192 or 256")
    ny = sec.get("ny")
    if ny is not None and (ny < 8 or ny % 2):
        sec.fail("ny", f"{ny} is not an even number >= 8", "an even integer, e.g. 128, 192 or 256")
    ext_x, ext_y = trap.extent()
    if sec.has("size") or sec.has("size_x") or sec.has("size_y"):
        if sec.has("spacing"):
            sec.fail("spacing", "give either the grid size or its spacing, not both", "size_* or spacing_*")
        lx, ly = sec.pair("size", "size_x", "size_y")
    elif sec.has("spacing"):
        lx = nx * sec.get("spacing")
        ny = ny or nx
        ly = ny * sec.get("spacing")
    else:
        lx, ly = ext_x + 2 * sec.get("padding"), ext_y + 2 * sec.get("padding")
    if ny is None:   # keep square cells
        ny = nx if abs(lx - ly) < 1e-9 * lx else max(8, 2 * int(round(0.5 * nx * ly / lx)))
    grid = Grid(nx, ny, lx, ly)
    if not trap.fits_in(lx, ly):
        where = "size_x" if ext_x > lx else "size_y"
        given = [k for k in (where, "size", "spacing") if sec.has(k)]
        sec.fail(given[0] if given else "nx",
                 f"the trap ({ext_x:.4g} x {ext_y:.4g} xi) does not fit into the periodic grid "
                 f"({lx:.4g} x {ly:.4g} xi)", "a grid larger than the trap by a few edge widths "
                 "(or leave the size out: it is then the trap size plus padding_* on each side)")
    return grid


def _resolve_settings(gs: Section, imprints: list[Section], ev: Section,
                      thermal: dict[str, Any]) -> tuple:
    ground = GroundStateConfig(
        dt=gs.get("dt"), mu_tolerance=gs.get("mu_tolerance"), energy_tolerance=gs.get("energy_tolerance"),
        max_steps=gs.get("max_steps"), fixed=gs.get("fixed"), noise_amplitude=gs.get("noise_amplitude"),
        imprint_positions=tuple((s.get("x"), s.get("y")) for s in imprints),
        imprint_signs=tuple(s.get("sign") for s in imprints))
    dt, interval, duration = ev.get("dt"), ev.get("output_interval"), ev.get("duration")
    ratio = interval / dt
    if abs(ratio - round(ratio)) > 1e-6 * ratio or round(ratio) < 1:
        lo, hi = max(1, math.floor(ratio)), math.ceil(ratio)
        ev.fail("output_interval", f"is {ratio:.6g} time steps, not a whole number",
                f"a whole multiple of {ev.key('dt')}, e.g. {lo} or {hi} steps")
    if interval > duration * (1 + 1e-9):
        ev.fail("output_interval", "is longer than evolution.duration", f"{ev.key('output_interval')} <= duration")
    if ev.get("damping") >= 1.0:
        ev.fail("damping", f"gamma = {ev.get('damping')} is not < 1", "a dimensionless gamma in [0, 1), "
                "typically 1e-4 to 3e-2")
    evolution = EvolutionConfig(
        duration=duration, dt=dt, output_interval=interval, gamma=thermal["gamma"],
        precision=ev.get("precision"), seed=ev.get("seed"),
        checkpoint_every_outputs=ev.get("checkpoint_every_outputs"), checkpoint_every_s=ev.get("checkpoint_every_s"),
        fft_planning=ev.get("fft_planning"), temperature=thermal["temperature"],
        cutoff=thermal["cutoff"], gamma_source=thermal["gamma_source"], **_resolve_points(ev, interval, thermal["gamma"]))
    return ground, evolution


def _resolve_points(ev: Section, interval: float, gamma: float) -> dict:
    """The [evolution] points_* keys (hand-off to point-vortex dynamics), checked.

    The friction alpha defaults to the run's damping gamma (given, or computed from the
    temperature of a stochastic run): for the damped GPE the two agree at
    leading order in gamma (Tornkvist & Schroder, PRL 78, 1908 (1997) [memory]).
    """
    keys = ("points_until", "points_output_interval", "points_friction", "points_friction_prime",
            "points_tolerance")
    given = [k for k in keys if ev.has(k)]
    if not ev.has("points_until"):
        if given:
            ev.fail(given[0], "is set but points_until is not, so no hand-off to point vortices "
                    "happens", f"{ev.key('points_until')} (the end of the point-vortex part) "
                    "beside it, or leave the points_* keys out")
        return {}
    until = ev.get("points_until")
    n_outputs = math.floor(ev.get("duration") / interval + 1e-9)
    gpe_end = n_outputs * interval
    if until <= gpe_end * (1 + 1e-9):
        units = ev.ctx.units
        ms = "" if units is None else f" = {units.time_to_ms(gpe_end):.6g} ms"
        ev.fail("points_until", f"ends at or before the GPE part, which ends at its last output "
                f"t = {gpe_end:.6g} hbar/mu{ms}", f"a time after the end of the GPE part "
                f"({ev.key('duration')} rounded down to whole output intervals)")
    alpha = ev.get("points_friction", gamma)
    if not alpha < 1.0:
        ev.fail("points_friction", f"alpha = {alpha} is not < 1", "a mutual friction alpha in [0, 1), "
                "typically 1e-3 to 0.1")
    alpha_prime = ev.get("points_friction_prime")
    if not -1.0 < alpha_prime < 1.0:
        ev.fail("points_friction_prime", f"alpha' = {alpha_prime} is outside (-1, 1)",
                "a dimensionless alpha' in (-1, 1), usually 0")
    rtol = ev.get("points_tolerance")
    if not rtol < 0.1:
        ev.fail("points_tolerance", f"{rtol} is not < 0.1", "a relative tolerance such as 1e-8")
    return {"points_until": until,
            "points_output_interval": ev.get("points_output_interval", interval),
            "points_friction": alpha, "points_friction_prime": alpha_prime,
            "points_tolerance": rtol}


def _resolve_path(sec: Section):
    kind, start_time = sec.get("kind"), sec.get("start_time")
    mode_ok = {"line": ("once", "back_and_forth"), "polyline": ("once", "back_and_forth", "loop")}
    if kind in mode_ok and sec.get("mode") not in mode_ok[kind]:
        sec.fail("mode", f"\"{sec.get('mode')}\" is not a mode of a {kind} path",
                 " or ".join(f'"{m}"' for m in mode_ok[kind]))
    if kind == "static":
        return StaticPath(*sec.get("position"))
    if kind == "line":
        path = LinePath(start=sec.get("start"), end=sec.get("end"), speed=sec.need("speed"),
                        mode=sec.get("mode"), start_time=start_time)
        if path.length == 0:
            sec.fail("end", "equals start (a line of zero length)", "an end point different from start")
        return path
    if kind == "circle":
        radius = sec.get("radius")
        omega = sec.get("angular_speed") if sec.one_of("angular_speed", "speed") == "angular_speed" \
            else sec.get("speed") / radius
        return CirclePath(radius=radius, angular_speed=omega, centre=sec.get("centre"),
                          start_angle=sec.get("start_angle"), start_time=start_time,
                          sense=1 if sec.get("sense") == "counterclockwise" else -1)
    points = sec.get("points")
    n_legs = len(points) - 1 + (sec.get("mode") == "loop")
    if sec.one_of("speed", "speeds") == "speed":
        speeds = (sec.get("speed"),) * n_legs
    else:
        speeds = sec.get("speeds")
        if len(speeds) != n_legs:
            sec.fail("speeds", f"has {len(speeds)} entries for {n_legs} segments", f"{n_legs} speeds (one per "
                     "segment; a loop has one more segment back to the first point), or a single speed_*")
    p = np.asarray(points)
    legs = np.diff(np.vstack([p, p[:1]]) if sec.get("mode") == "loop" else p, axis=0)
    if np.any(np.hypot(*legs.T) == 0):
        sec.fail("points", "two consecutive points coincide (a segment of zero length)", "distinct consecutive points")
    return PolylinePath(points=points, speeds=speeds, mode=sec.get("mode"), start_time=start_time)


def _resolve_beam(beam: Section, path: Section, array: Section | None) -> Beam:
    ramp = Ramp(on_time=beam.get("switch_on_time"), on_duration=beam.get("switch_on_duration"),
                off_time=beam.get("switch_off_time"), off_duration=beam.get("switch_off_duration"))
    if ramp.off_time is not None and ramp.off_time < ramp.on_time + ramp.on_duration:
        beam.fail("switch_off_time", "starts before the switch-on ramp has ended",
                  f"{beam.key('switch_off_time')} >= switch_on_time + switch_on_duration")
    offsets = ((0.0, 0.0),)
    if array is not None:
        cols, rows = array.get("columns"), array.get("rows")
        spacing = array.need("spacing", "needed for more than one beam") if cols * rows > 1 else 0.0
        offsets = array_offsets(cols, rows, spacing, array.get("spacing_y", spacing), array.get("angle"))
    return Beam(waist=beam.get("waist"), height=beam.get("height"), path=_resolve_path(path),
                ramp=ramp, offsets=offsets)


# ------------------------------------------------------------------------------------------
# entry points
# ------------------------------------------------------------------------------------------
def parse_protocol(text: str, source: str = "<protocol>", overrides: Sequence[str] = (),
                   base_dir: str | Path | None = None,
                   stored_arrays: Mapping[str, np.ndarray] | None = None) -> Protocol:
    """Parse, override, validate and resolve a protocol given as TOML text.

    Parameters
    ----------
    text : str
        The TOML text.
    source : str
        Name used in error messages (usually the file path).
    overrides : sequence of str
        ``section.key=value`` strings applied before validation (``beams.0.path.speed_c=0.5``).
    base_dir : path, optional
        Directory against which relative mask paths are resolved (default: working directory).
    stored_arrays : mapping of str to array, optional
        What a run file kept of the files the trap was read from (``Trap.stored_arrays``, e.g.
        the mask's allowed pixels). The trap is rebuilt from them and those files are not read,
        so a run file's protocol needs nothing beside it.

    Returns
    -------
    Protocol

    Raises
    ------
    ProtocolError
        With one paragraph naming the file, the key and what would be accepted.

    Units
    -----
    As written in the file; resolved to simulation units (xi, hbar/mu, mu, c).
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProtocolError(f"{source}: not valid TOML ({exc}). Accepted: TOML syntax, e.g. "
                            "radius_um = 30.0 under a [trap] header; see docs/protocol.md.") from None
    ctx = ReadingContext(source, apply_overrides(data, overrides, source))
    base_dir = Path(base_dir) if base_dir is not None else Path.cwd()
    if isinstance(data.get("units"), str) and data["units"].lower() in ("si", "healing"):
        data["units"] = "SI" if data["units"].lower() == "si" else "healing"   # spelling is not physics
    top = Section(ctx, "", "", data)
    ctx.mode = top.get("units")
    atoms = Section(ctx, "atoms", "atoms", top.get("atoms"))
    trap_sec = _TrapTable(ctx, top.get("trap"), stored_arrays or {})
    grid_sec = Section(ctx, "grid", "grid", top.get("grid"))
    gs = Section(ctx, "ground_state", "ground_state", top.get("ground_state"))
    imprints = [Section(ctx, f"ground_state.imprint.{i}", "ground_state.imprint", t)
                for i, t in enumerate(gs.get("imprint"))]
    ev = Section(ctx, "evolution", "evolution", top.get("evolution"))
    beam_secs = []
    for i, table in enumerate(top.get("beams")):
        b = Section(ctx, f"beams.{i}", "beams", table)
        path = Section(ctx, f"beams.{i}.path", "beams.path", b.get("path"), selector="kind")
        array = Section(ctx, f"beams.{i}.array", "beams.array", b.get("array")) if b.has("array") else None
        beam_secs.append((b, path, array))

    shape = trap_shapes()[trap_sec.get("shape")]
    species, a_s, omega_z, g2d, mu = _resolve_atoms(ctx, atoms, trap_sec, shape, base_dir)
    units = ctx.units
    trap = shape.from_section(trap_sec, base_dir)
    # the Thomas-Fermi norm (xi^2) holds norm / coupling atoms
    number = atoms.get("number") if atoms.has("number") else trap.thomas_fermi_norm() / units.coupling
    atoms_cfg = AtomsConfig(species=species.name, mass_kg=species.mass_kg, scattering_length_m=a_s,
                            axial_frequency_hz=omega_z / (2 * math.pi),
                            axial_length_m=math.sqrt(const.hbar / (species.mass_kg * omega_z)),
                            g2d_Jm2=g2d, chemical_potential_J=mu, number=number,
                            number_given=atoms.has("number"), norm=units.norm_for(number))
    grid = _resolve_grid(grid_sec, trap)
    thermal = resolve_thermal(ev, grid, units, species.mass_kg, a_s)
    ground, evolution = _resolve_settings(gs, imprints, ev, thermal)
    beams = tuple(_resolve_beam(*secs) for secs in beam_secs)
    protocol = Protocol(source_name=source, source_text=text, overrides=tuple(overrides),
                        name=top.get("name") or Path(source).stem, description=top.get("description"),
                        unit_system=ctx.mode, units=units, atoms=atoms_cfg, trap=trap, grid=grid,
                        ground_state=ground, evolution=evolution, beams=beams)
    check_practice(ctx, protocol, grid_sec, ev, beam_secs)
    return protocol


def load_protocol(path: str | Path, overrides: Sequence[str] = ()) -> Protocol:
    """Read a protocol file and resolve it (see :func:`parse_protocol`); masks are relative to it.

    Units: as in the file; resolved to simulation units.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ProtocolError(f"{path}: cannot read the protocol file ({exc}). Accepted: a readable UTF-8 "
                            "TOML file, e.g. one written by `vortherm init`.") from None
    return parse_protocol(text, str(path), overrides, base_dir=path.parent)


def protocol_from_dict(data: Mapping[str, Any], source: str = "<dict>",
                       overrides: Sequence[str] = (), base_dir: str | Path | None = None) -> Protocol:
    """Resolve a protocol given as a dict with the file's tables and keys (see :func:`parse_protocol`).

    The dict is written as TOML text first, so a run file stores it verbatim like a file's
    text and rebuilds the same protocol from it. numpy scalars and arrays are taken as numbers
    and lists; anything else TOML cannot hold is a ProtocolError naming its key.

    Units: as in the dict (``units = "SI"`` or ``"healing"``, the keys' suffixes).
    """
    return parse_protocol(tomli_w.dumps(_toml_ready(data, source, "")), source, overrides,
                          base_dir=base_dir)


def _toml_ready(value: Any, source: str, key: str) -> Any:
    if isinstance(value, Mapping):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise ProtocolError(f"{source}: key {k!r} in {key or 'the top level'} is not a "
                                    "string; accepted: table and key names as strings")
            out[k] = _toml_ready(v, source, f"{key}.{k}" if key else k)
        return out
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_toml_ready(v, source, f"{key}.{i}") for i, v in enumerate(list(value))]
    if isinstance(value, np.generic):
        value = value.item()
    if not isinstance(value, (str, bool, int, float)):
        raise ProtocolError(f"{source}: {key} = {value!r} ({type(value).__name__}) cannot be "
                            "written in a protocol; accepted: numbers, strings, booleans, lists "
                            "and tables (dicts)")
    return value


def example_protocol_text() -> str:
    """The commented example protocol (gpe/setup/templates/example.toml) written by ``vortherm init``."""
    return resources.files("gpe.setup").joinpath("templates/example.toml").read_text(encoding="utf-8")
