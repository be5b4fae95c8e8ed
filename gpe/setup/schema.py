"""The protocol schema: every key, its unit suffixes, and the checked, unit-aware reading of a table.

``SCHEMA`` lists the keys of each TOML table (:class:`Spec`: kind, dimension, default in simulation
units, allowed choices, sign check); ``SELECTED`` narrows a table to the keys that mean something
for one trap shape or path kind. The [trap] keys come from the shape classes of gpe.field.traps,
each naming the keys it reads, so a new shape brings its keys with it. :class:`Section` reads
one table against its schema and fails with a :class:`~gpe.errors.ProtocolError` naming the
file, key and what would be accepted; ``apply_overrides`` applies ``--set`` strings before
validation; ``describe`` writes resolved dataclasses back out with every dimensioned value in
simulation units and SI. Resolution into configuration objects lives in gpe/setup/protocol.py.

Units: values come out of :meth:`Section.get` in simulation units (xi, hbar/mu, mu, c, rad per
hbar/mu), except in the [atoms] table (SI).
"""

from __future__ import annotations

import dataclasses
import difflib
import json
import math
import re
import tomllib
from dataclasses import dataclass
from typing import Any, NoReturn, Sequence

import numpy as np
import scipy.constants as const

from gpe.errors import ProtocolError
from gpe.field.traps.base import trap_shapes
from gpe.setup.units import BOHR_RADIUS_M, HealingUnits

# unit suffixes by dimension and unit system; the first one is used in messages and JSON
SUFFIXES = {
    "length": {"SI": ("um", "xi"), "healing": ("xi",)},
    "time": {"SI": ("ms", "tau"), "healing": ("tau",)},
    "energy": {"SI": ("mu", "nK"), "healing": ("mu",)},
    "temperature": {"SI": ("nK", "mu"), "healing": ("nK", "mu")},   # k_B T; nK in both systems
    "speed": {"SI": ("um_per_ms", "c"), "healing": ("c",)},
    "rate": {"SI": ("hz", "rad_per_ms", "rad_per_tau"), "healing": ("rad_per_tau",)},
    "angle": {"SI": ("deg", "rad"), "healing": ("deg", "rad")},
    "chem_pot": {"SI": ("nK", "hz"), "healing": ("nK", "hz")},       # absolute, in [atoms]
    "axial": {"SI": ("hz",), "healing": ("hz",)},
    "scat": {"SI": ("a0", "nm"), "healing": ("a0", "nm")},
}
SI_OUT = {"length": "um", "time": "ms", "energy": "nK", "speed": "um_per_ms", "rate": "hz"}
SIM_OUT = {"length": "xi", "time": "tau", "energy": "mu", "speed": "c", "rate": "rad_per_tau"}
#: How each unit suffix is written in table headers and on axes.
SUFFIX_LABELS = {"um": "um", "xi": "xi", "ms": "ms", "tau": "hbar/mu", "mu": "mu", "nK": "nK",
                 "um_per_ms": "um/ms", "c": "c", "hz": "Hz", "rad_per_ms": "rad/ms",
                 "rad_per_tau": "rad/(hbar/mu)", "deg": "deg", "rad": "rad", "a0": "a0", "nm": "nm"}
#: Units of the keys whose unit is fixed by their name, not by a suffix.
FIXED_UNITS = {("evolution", "checkpoint_every_s"): "s"}


@dataclass(frozen=True)
class Spec:
    """One key of the schema: value kind, dimension, default (simulation units) and checks."""

    kind: str                 # float int str bool vec2 points floats table tables
    dim: str | None = None
    required: bool = False
    default: Any = None
    choices: tuple = ()
    check: str = ""           # positive | nonneg | nonzero


def _trap_tables() -> tuple[dict[str, Spec], dict[tuple[str, str], set[str]]]:
    """The [trap] table's keys and each shape's key set, from the shape classes in gpe.field.traps.

    Raises
    ------
    TypeError
        If two shapes describe the same key differently (one table has one spec per key).
    """
    shapes = trap_shapes()
    specs = {"shape": Spec("str", required=True, choices=tuple(shapes))}
    owner: dict[str, str] = {}
    for name, shape in shapes.items():
        for key, kwargs in shape.protocol_keys.items():
            spec = Spec(**kwargs)
            if specs.setdefault(key, spec) != spec:
                raise TypeError(f"trap key {key!r} is described as {specs[key]} by the {owner[key]} shape and "
                                f"as {spec} by the {name} shape; accepted: one description per key")
            owner.setdefault(key, name)
    selected = {("trap", name): {"shape", *shape.protocol_keys} for name, shape in shapes.items()}
    return specs, selected


_TRAP_SPECS, _TRAP_SELECTED = _trap_tables()
F, I, S = "float", "int", "str"
SCHEMA: dict[str, dict[str, Spec]] = {
    "": {"units": Spec(S, choices=("SI", "healing"), default="SI"), "name": Spec(S, default=""),
         "description": Spec(S, default=""), "atoms": Spec("table", required=True),
         "trap": Spec("table", required=True), "grid": Spec("table", required=True),
         "ground_state": Spec("table", default={}), "evolution": Spec("table", required=True),
         "beams": Spec("tables", default=[])},
    "atoms": {"species": Spec(S, required=True), "number": Spec(F, check="positive"),
              "chemical_potential": Spec(F, "chem_pot", check="positive"),
              "scattering_length": Spec(F, "scat", check="positive"),
              "axial_frequency": Spec(F, "axial", required=True, check="positive")},
    "trap": _TRAP_SPECS,
    "grid": {"nx": Spec(I, required=True, check="positive"), "ny": Spec(I, check="positive"),
             "size": Spec(F, "length", check="positive"), "size_x": Spec(F, "length", check="positive"),
             "size_y": Spec(F, "length", check="positive"), "spacing": Spec(F, "length", check="positive"),
             "padding": Spec(F, "length", default=8.0, check="nonneg")},
    "ground_state": {"dt": Spec(F, "time", default=0.05, check="positive"),
                     "mu_tolerance": Spec(F, default=1e-7, check="positive"),
                     "energy_tolerance": Spec(F, default=1e-9, check="positive"),
                     "max_steps": Spec(I, default=20000, check="positive"),
                     "fixed": Spec(S, default="number", choices=("number", "chemical_potential")),
                     "noise_amplitude": Spec(F, default=0.0, check="nonneg"),
                     "imprint": Spec("tables", default=[])},
    "ground_state.imprint": {"x": Spec(F, "length", True), "y": Spec(F, "length", True),
                             "sign": Spec(I, required=True, choices=(1, -1))},
    "evolution": {"duration": Spec(F, "time", True, check="positive"),
                  "dt": Spec(F, "time", True, check="positive"),
                  "output_interval": Spec(F, "time", True, check="positive"),
                  "damping": Spec(F, default=0.0, check="nonneg"),
                  "precision": Spec(S, default="complex128", choices=("complex128", "complex64")),
                  "seed": Spec(I, default=0, check="nonneg"),
                  "checkpoint_every_outputs": Spec(I, default=10, check="positive"),
                  "checkpoint_every_s": Spec(F, default=600.0, check="positive"),
                  "fft_planning": Spec(S, default="reproducible", choices=("reproducible", "measured")),
                  # hand-off to point-vortex dynamics (thermo.dynamics) after the GPE part
                  "points_until": Spec(F, "time", check="positive"),
                  "points_output_interval": Spec(F, "time", check="positive"),
                  "points_friction": Spec(F, check="nonneg"),
                  "points_friction_prime": Spec(F, default=0.0),
                  "points_tolerance": Spec(F, default=1e-8, check="positive"),
                  # -- finite temperature: the stochastic projected GPE (gpe/field/stochastic.py) --
                  "temperature": Spec(F, "temperature", default=0.0, check="nonneg"),
                  "cutoff": Spec(F, "energy", check="positive")},
    "beams": {"waist": Spec(F, "length", True, check="positive"),
              "height": Spec(F, "energy", True, check="nonzero"),
              "switch_on_time": Spec(F, "time", default=0.0, check="nonneg"),
              "switch_on_duration": Spec(F, "time", default=0.0, check="nonneg"),
              "switch_off_time": Spec(F, "time", check="nonneg"),
              "switch_off_duration": Spec(F, "time", default=0.0, check="nonneg"),
              "path": Spec("table", default={}), "array": Spec("table")},
    "beams.path": {"kind": Spec(S, default="static", choices=("static", "line", "circle", "polyline")),
                   "position": Spec("vec2", "length", default=(0.0, 0.0)),
                   "start": Spec("vec2", "length", True), "end": Spec("vec2", "length", True),
                   "centre": Spec("vec2", "length", default=(0.0, 0.0)),
                   "radius": Spec(F, "length", True, check="positive"),
                   "speed": Spec(F, "speed", check="positive"),
                   "speeds": Spec("floats", "speed", check="positive"),
                   "angular_speed": Spec(F, "rate", check="positive"),
                   "points": Spec("points", "length", True),
                   "mode": Spec(S, default="once", choices=("once", "back_and_forth", "loop")),
                   "start_angle": Spec(F, "angle", default=0.0),
                   "sense": Spec(S, default="counterclockwise", choices=("counterclockwise", "clockwise")),
                   "start_time": Spec(F, "time", default=0.0, check="nonneg")},
    "beams.array": {"columns": Spec(I, default=1, check="positive"), "rows": Spec(I, default=1, check="positive"),
                    "spacing": Spec(F, "length", check="positive"),
                    "spacing_y": Spec(F, "length", check="positive"), "angle": Spec(F, "angle", default=0.0)},
}
# keys that are meaningful only for one trap shape (from the shape classes) / path kind
SELECTED = {
    **_TRAP_SELECTED,
    ("beams.path", "static"): {"kind", "position"},
    ("beams.path", "line"): {"kind", "start", "end", "speed", "mode", "start_time"},
    ("beams.path", "circle"): {"kind", "radius", "angular_speed", "speed", "centre", "start_angle",
                               "sense", "start_time"},
    ("beams.path", "polyline"): {"kind", "points", "speed", "speeds", "mode", "start_time"},
}
_MISSING = object()


class ReadingContext:
    """What every error message needs: the file, the unit system and the overrides."""

    def __init__(self, source: str, overridden: dict[str, str]) -> None:
        self.source, self.overridden = source, overridden
        self.mode = "SI"
        self.units: HealingUnits | None = None

    def fail(self, where: str, key: str, problem: str, accepted: str) -> NoReturn:
        path = f"{where}.{key}" if where else key
        note = f" (value set by --set {self.overridden[path]})" if path in self.overridden else ""
        raise ProtocolError(f"{self.source}: [{where or 'top level'}] {key}: {problem}{note}. "
                            f"Accepted: {accepted}.")

    def names(self, base: str, spec: Spec) -> list[str]:
        return [base] if spec.dim is None else [f"{base}_{s}" for s in SUFFIXES[spec.dim][self.mode]]

    def to_sim(self, dim: str, suffix: str, value):
        """Convert a value written with ``suffix`` to simulation units (or SI in [atoms])."""
        v, u = np.asarray(value, dtype=float), self.units
        factor = {
            "xi": 1.0, "tau": 1.0, "mu": 1.0, "c": 1.0, "rad_per_tau": 1.0, "rad": 1.0,
            "deg": math.pi / 180, "a0": BOHR_RADIUS_M, "nm": 1e-9,
        }.get(suffix)
        if dim == "chem_pot":
            factor = const.k * 1e-9 if suffix == "nK" else const.h
        elif dim == "axial":
            factor = 2 * math.pi
        elif factor is None:   # SI suffixes need the units
            factor = {"um": 1e-6 / u.length_m, "ms": 1e-3 / u.time_s, "nK": 1e-9 * const.k / u.mu_J,
                      "um_per_ms": 1e-3 / u.speed_m_s, "hz": 2 * math.pi * u.time_s,
                      "rad_per_ms": 1e3 * u.time_s}[suffix]
        out = v * factor
        out = out.tolist()
        return tuple(tuple(row) for row in out) if v.ndim == 2 else tuple(out) if v.ndim == 1 else out


class Section:
    """The keys of one TOML table, checked against the schema, with unit-aware access."""

    def __init__(self, ctx: ReadingContext, where: str, schema: str, table: Any, selector: str = "") -> None:
        self.ctx, self.where, self.specs = ctx, where, SCHEMA[schema]
        self.values: dict[str, tuple[Any, str, str]] = {}
        allowed, self.selected = set(self.specs), ""
        if selector:
            choice = table.get(selector, self.specs[selector].default)
            if choice is None:
                self.fail(selector, "missing required value", " or ".join(
                    json.dumps(c) for c in self.specs[selector].choices))
            self._check_value(selector, selector, choice)
            allowed, self.selected = SELECTED[(schema, choice)], f'{selector} = "{choice}"'
        for key, value in table.items():
            base, suffix = self._split(key, allowed)
            if base in self.values:
                self.fail(key, f"given twice (also as {self.values[base][2]})",
                          "one of " + ", ".join(ctx.names(base, self.specs[base])))
            self._check_value(base, key, value)
            self.values[base] = (value, suffix, key)
        for base in sorted(allowed):
            spec = self.specs[base]
            if spec.required and base not in self.values:
                self.fail(base, "missing required value", " or ".join(ctx.names(base, spec)))

    def _split(self, key: str, allowed: set) -> tuple[str, str]:
        """Split ``key`` into schema base name and unit suffix, or fail with a useful message."""
        ctx = self.ctx
        valid = [n for b in sorted(allowed) for n in ctx.names(b, self.specs[b])]
        unused = f"not used with {self.selected}", f"keys for {self.selected}: {', '.join(valid)}"
        if key in self.specs and self.specs[key].dim is None:
            if key not in allowed:
                ctx.fail(self.where, key, *unused)
            return key, ""
        for base in sorted(self.specs, key=len, reverse=True):   # longest first: size_x before size
            spec = self.specs[base]
            if spec.dim is None or not (key == base or key.startswith(base + "_")):
                continue
            if base not in allowed:
                ctx.fail(self.where, key, *unused)
            suffix = key[len(base) + 1:]
            if key != base and suffix in SUFFIXES[spec.dim][ctx.mode]:
                return base, suffix
            why = ("needs a unit suffix" if key == base else
                   f"unit suffix '_{suffix}' is not accepted with units = \"{ctx.mode}\"")
            ctx.fail(self.where, key, why, ", ".join(ctx.names(base, spec)))
        near = difflib.get_close_matches(key, valid, n=1, cutoff=0.5)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        ctx.fail(self.where, key, f"unknown key{hint}", ", ".join(valid))

    def _check_value(self, base: str, key: str, value: Any) -> None:
        spec = self.specs[base]
        number = lambda v: isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
        ok = {
            "float": number(value), "int": isinstance(value, int) and not isinstance(value, bool),
            "str": isinstance(value, str), "bool": isinstance(value, bool),
            "vec2": isinstance(value, list) and len(value) == 2 and all(map(number, value)),
            "points": isinstance(value, list) and len(value) >= 2 and all(
                isinstance(p, list) and len(p) == 2 and all(map(number, p)) for p in value),
            "floats": isinstance(value, list) and len(value) >= 1 and all(map(number, value)),
            "table": isinstance(value, dict),
            "tables": isinstance(value, list) and all(isinstance(v, dict) for v in value),
        }[spec.kind]
        what = {"float": "a number", "int": "an integer", "str": "a string", "bool": "true or false",
                "vec2": "a pair [x, y]", "points": "a list of at least two [x, y] points",
                "floats": "a list of numbers", "table": "a table", "tables": "a list of tables"}[spec.kind]
        if not ok:
            self.fail(key, f"value {value!r} is not {what}", what)
        if spec.choices and value not in spec.choices:
            self.fail(key, f"value {value!r} is not allowed", " or ".join(json.dumps(c) for c in spec.choices))
        flat = np.ravel(np.asarray(value, dtype=float)) if spec.kind in (F, I, "floats") else []
        bad = {"positive": lambda v: v <= 0, "nonneg": lambda v: v < 0, "nonzero": lambda v: v == 0}
        if spec.check and any(bad[spec.check](v) for v in flat):
            words = {"positive": "> 0", "nonneg": ">= 0", "nonzero": "non-zero"}[spec.check]
            self.fail(key, f"value {value!r} must be {words}", f"{what} {words}")

    def has(self, base: str) -> bool:
        return base in self.values

    def key(self, base: str) -> str:
        """The key as written in the file (or its first accepted spelling if absent)."""
        return self.values[base][2] if base in self.values else self.ctx.names(base, self.specs[base])[0]

    def raw(self, base: str) -> tuple[Any, str]:
        return self.values[base][:2]

    def get(self, base: str, default: Any = _MISSING) -> Any:
        """Value in simulation units (SI in [atoms]); the schema default if absent."""
        spec = self.specs[base]
        if base not in self.values:
            return spec.default if default is _MISSING else default
        value, suffix, _ = self.values[base]
        return self.ctx.to_sim(spec.dim, suffix, value) if spec.dim else value

    def need(self, base: str, why: str = "missing required value") -> Any:
        if base not in self.values:
            self.fail(base, why, " or ".join(self.ctx.names(base, self.specs[base])))
        return self.get(base)

    def one_of(self, first: str, second: str, required: bool = True) -> str | None:
        """Which of two alternative keys is given (fails if both, or neither when required)."""
        names = " or ".join(self.ctx.names(first, self.specs[first]) + self.ctx.names(second, self.specs[second]))
        if self.has(first) and self.has(second):
            self.fail(second, f"give either {self.key(first)} or {self.key(second)}, not both", names)
        if required and not (self.has(first) or self.has(second)):
            self.fail(first, "missing required value", names)
        return first if self.has(first) else second if self.has(second) else None

    def pair(self, both: str, x: str, y: str, si: bool = False) -> tuple[Any, Any]:
        """(x, y) from ``both`` or from ``x`` and ``y`` (e.g. size / size_x, size_y); in SI if ``si``."""
        read = self.si_value if si else self.get
        if self.has(both):
            if self.has(x) or self.has(y):
                self.fail(x if self.has(x) else y, f"give either {self.key(both)} or {x}/{y}, not both",
                          f"{self.key(both)}, or {self.key(x)} with {self.key(y)}")
            return read(both), read(both)
        for name in (x, y):
            if not self.has(name):
                self.fail(name, "missing required value", f"{self.key(both)}, or {self.key(x)} with {self.key(y)}")
        return read(x), read(y)

    def si_value(self, base: str) -> float:
        """A trap size or frequency in SI (m, rad/s), for use before the units are known (they
        follow from atoms.number); healing-unit spellings are refused."""
        value, suffix = self.raw(base)
        if suffix not in ("um", "hz", "rad_per_ms"):
            si_names = [n for n in self.ctx.names(base, self.specs[base]) if not n.endswith(("xi", "rad_per_tau"))]
            self.fail(base, "with atoms.number the trap must be given in SI units (a size in healing "
                      "lengths depends on mu, which the atom number is meant to fix)", ", ".join(si_names))
        return value * {"um": 1e-6, "hz": 2 * math.pi, "rad_per_ms": 1e3}[suffix]

    def fail(self, base_or_key: str, problem: str, accepted: str) -> NoReturn:
        key = self.key(base_or_key) if base_or_key in self.specs else base_or_key
        self.ctx.fail(self.where, key, problem, accepted)

def unit_of_key(key: str) -> str:
    """The unit a protocol key is written in, from the schema: ``beams.0.path.speed_um_per_ms``
    -> ``"um/ms"``, ``evolution.duration_tau`` -> ``"hbar/mu"``, ``evolution.damping`` -> ``""``.

    Unknown keys give ``""`` (the protocol itself reports them when it is read).
    """
    parts = key.split(".")
    section = ".".join(p for p in parts[:-1] if not p.isdigit())
    name = parts[-1]
    specs = SCHEMA.get(section, {})
    if (section, name) in FIXED_UNITS:
        return FIXED_UNITS[(section, name)]
    for base in sorted(specs, key=len, reverse=True):   # longest first: size_x before size
        spec = specs[base]
        if spec.dim is None or not name.startswith(base + "_"):
            continue
        suffix = name[len(base) + 1:]
        if any(suffix in names for names in SUFFIXES[spec.dim].values()):
            return SUFFIX_LABELS[suffix]
    return ""


def describe_value(name: str, value: Any, dim: str, u: HealingUnits) -> dict:
    si = {"length": u.length_m * 1e6, "time": u.time_s * 1e3, "energy": u.temperature_K * 1e9,
          "speed": u.speed_m_s * 1e3, "rate": 1.0 / (2 * math.pi * u.time_s)}[dim]
    if value is None:
        return {f"{name}_{SIM_OUT[dim]}": None}
    return {f"{name}_{SIM_OUT[dim]}": np.asarray(value, dtype=float).tolist(),
            f"{name}_{SI_OUT[dim]}": (np.asarray(value, dtype=float) * si).tolist()}


#: Power of mu_solved/mu by which a value in each healing unit is divided when it is expressed
#: in the solved mu's own units (xi ~ mu^-1/2, hbar/mu ~ mu^-1, c ~ mu^1/2).
_SOLVED_POWERS = {"xi": -0.5, "tau": -1.0, "mu": 1.0, "c": 0.5, "rad_per_tau": 1.0}


def in_solved_mu(described: dict, ratio: float) -> dict:
    """The healing-unit values of a described protocol (``Protocol.to_dict()``) re-expressed in
    the units of the solved chemical potential mu_s = ratio * mu (lengths in xi_s, times in
    hbar/mu_s, energies in mu_s, speeds in c_s); SI values and unitless entries are left out.

    Units: ratio = mu_s / mu, dimensionless; the keys keep their healing suffixes, now meaning
    the solved units.
    """
    out: dict = {}
    for key, value in described.items():
        if isinstance(value, dict):
            sub = in_solved_mu(value, ratio)
            if sub:
                out[key] = sub
        elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            out[key] = [in_solved_mu(v, ratio) for v in value]
        elif value is not None and not isinstance(value, (str, bool)):
            suffix = next((s for s in sorted(_SOLVED_POWERS, key=len, reverse=True)
                           if key.endswith("_" + s)), None)
            if suffix is not None:
                out[key] = (np.asarray(value, dtype=float) / ratio ** _SOLVED_POWERS[suffix]).tolist()
    return out


def describe(obj: Any, u: HealingUnits) -> dict:
    out: dict[str, Any] = {"type": type(obj).__name__}
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if dataclasses.is_dataclass(value):
            out[f.name] = describe(value, u)
        elif f.metadata.get("dim"):
            out.update(describe_value(f.name, value, f.metadata["dim"], u))
        else:
            out[f.name] = list(value) if isinstance(value, tuple) else value
    return out



# ------------------------------------------------------------------------------------------
# --set overrides
# ------------------------------------------------------------------------------------------
_ALL_SUFFIXES = {s for d in SUFFIXES.values() for m in d.values() for s in m}
_DIM_BASES = sorted({b for specs in SCHEMA.values() for b, s in specs.items() if s.dim}, key=len, reverse=True)
_OVERRIDE_HELP = ("section.key=value with the value in TOML syntax, e.g. evolution.damping=0.01, "
                  "trap.shape=\"disk\" or beams.0.path.speed_c=0.5")


def _parse_override_value(text: str, source: str, override: str) -> Any:
    try:
        return tomllib.loads(f"v = {text.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_\-]*", text.strip()):
            return text.strip()           # a bare word is taken as a string: trap.shape=disk
        raise ProtocolError(f"{source}: --set {override}: value {text!r} is not a TOML value. "
                            f"Accepted: {_OVERRIDE_HELP}.") from None


def apply_overrides(data: dict, overrides: Sequence[str], source: str) -> dict[str, str]:
    """Apply ``--set a.b.c=value`` overrides to the parsed TOML in place; returns path -> text."""
    done: dict[str, str] = {}
    for text in overrides:
        path, sep, value_text = text.partition("=")
        parts = [p.strip() for p in path.split(".")]
        if not sep or not all(parts):
            raise ProtocolError(f"{source}: --set {text}: not of the form section.key=value. "
                                f"Accepted: {_OVERRIDE_HELP}.")
        node: Any = data
        for depth, part in enumerate(parts[:-1]):
            here = ".".join(parts[:depth]) or "top level"
            if isinstance(node, list):
                if not part.isdigit() or int(part) >= len(node):
                    raise ProtocolError(f"{source}: --set {text}: '{part}' is not an entry of "
                                        f"{here} ({len(node)} entries). Accepted: an index 0 to {len(node) - 1}.")
                node = node[int(part)]
            elif isinstance(node, dict):
                if part not in node and parts[depth + 1].isdigit():
                    raise ProtocolError(f"{source}: --set {text}: the file has no [[{part}]] entries. "
                                        f"Accepted: add the [[{part}]] table to the file first.")
                node = node.setdefault(part, {})
            else:
                raise ProtocolError(f"{source}: --set {text}: {here} is a value, not a table. "
                                    f"Accepted: {_OVERRIDE_HELP}.")
        if not isinstance(node, dict):
            raise ProtocolError(f"{source}: --set {text}: {'.'.join(parts[:-1])} is not a table. "
                                f"Accepted: {_OVERRIDE_HELP}.")
        key = parts[-1]
        # a new unit spelling replaces the old one: speed_c=0.5 replaces speed_um_per_ms
        for base in _DIM_BASES:
            if key.startswith(base + "_") and key[len(base) + 1:] in _ALL_SUFFIXES:
                for old in [k for k in node if k != key and k.startswith(base + "_")
                            and k[len(base) + 1:] in _ALL_SUFFIXES]:
                    del node[old]
                break
        node[key] = _parse_override_value(value_text, source, text)
        done[".".join(parts)] = text
    return done
