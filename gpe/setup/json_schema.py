"""The protocol file as a JSON Schema (draft 2020-12), generated from gpe.setup.schema.

Editors that validate TOML against a JSON Schema (Even Better TOML / taplo, for one) complete and
check protocol files with it: the keys of every table with their unit suffixes, value types,
choices and signs, which keys a trap shape or path kind reads, and which keys the unit system
allows (``units = "healing"`` takes only the natural suffixes). It is written by
``vortherm schema``.

The schema checks the form of a protocol; what depends on several keys at once (a beam that
leaves the grid, one spelling of a key given twice, the time step) is checked when the
protocol is read (gpe.setup.protocol), so a protocol the schema accepts can still be refused.

Units: the suffixes of gpe.setup.schema.SUFFIXES; defaults of dimensioned keys are given for
their natural-unit spelling (``padding_xi``), as the schema stores them.
"""

from __future__ import annotations

from typing import Any

from gpe import __version__
from gpe.setup.schema import FIXED_UNITS, SCHEMA, SELECTED, SUFFIX_LABELS, SUFFIXES, SIM_OUT, Spec

#: The schema's own identifier (``$id``).
SCHEMA_ID = "urn:vortherm:protocol"
_DRAFT = "https://json-schema.org/draft/2020-12/schema"
MODES = ("SI", "healing")
# "SI" and "healing" in any letter case, as the protocol reader takes them
_MODE_PATTERN = {"SI": "^[sS][iI]$", "healing": "^[hH][eE][aA][lL][iI][nN][gG]$"}
_NUMBER = {"type": "number"}
#: Tables whose keys depend on one of their values (trap shape, path kind), with its default.
_SELECTORS = {"trap": ("shape", None), "beams.path": ("kind", "static")}


def _names(table: str, base: str, spec: Spec, mode: str) -> list[str]:
    if spec.dim is None:
        return [base]
    return [f"{base}_{suffix}" for suffix in SUFFIXES[spec.dim][mode]]


def _value_schema(table: str, base: str, spec: Spec, mode: str, suffix: str = "") -> dict:
    signs = {"positive": {"exclusiveMinimum": 0}, "nonneg": {"minimum": 0},
             "nonzero": {"not": {"const": 0}}}.get(spec.check, {})
    kind = spec.kind
    if kind in ("table", "tables"):
        child = f"{table}.{base}" if table else base     # the nested table's schema name
        ref = {"$ref": f"#/$defs/{mode}.{child}"}
        return ref if kind == "table" else {"type": "array", "items": ref}
    if kind == "float":
        out = {**_NUMBER, **signs}
    elif kind == "int":
        out = {"type": "integer", **signs}
    elif kind == "str":
        out = {"type": "string"}
    elif kind == "bool":
        out = {"type": "boolean"}
    elif kind == "vec2":
        out = {"type": "array", "items": _NUMBER, "minItems": 2, "maxItems": 2}
    elif kind == "points":
        pair = {"type": "array", "items": _NUMBER, "minItems": 2, "maxItems": 2}
        out = {"type": "array", "items": pair, "minItems": 2}
    elif kind == "floats":
        out = {"type": "array", "items": {**_NUMBER, **signs}, "minItems": 1}
    else:  # a new kind in the schema must be described here too
        raise TypeError(f"schema kind {kind!r} of {table}.{base} has no JSON Schema form")
    if spec.choices:
        out["enum"] = list(spec.choices)
    unit = SUFFIX_LABELS.get(suffix) or FIXED_UNITS.get((table, base), "")
    out["description"] = f"{spec.dim or kind}" + (f" in {unit}" if unit else "")
    natural = spec.dim is None or suffix == SIM_OUT.get(spec.dim, suffix)
    if spec.default is not None and natural and not isinstance(spec.default, (dict, list)):
        out["default"] = list(spec.default) if isinstance(spec.default, tuple) else spec.default
    return out


def _required(table: str, specs: dict[str, Spec], bases, mode: str) -> list[dict]:
    """One ``anyOf`` of the accepted spellings per required key (a key has several)."""
    return [{"anyOf": [{"required": [n]} for n in _names(table, b, specs[b], mode)]}
            for b in sorted(bases) if specs[b].required]


def _table_schema(table: str, mode: str) -> dict:
    specs = SCHEMA[table]
    props = {name: _value_schema(table, base, spec, mode, name[len(base) + 1:])
             for base, spec in specs.items() for name in _names(table, base, spec, mode)}
    if table == "":
        props["units"] = {"type": "string", "pattern": _MODE_PATTERN[mode],
                          "description": "unit system: SI (default) or healing", "default": "SI"}
    out: dict[str, Any] = {"type": "object", "properties": props, "additionalProperties": False}
    if table not in _SELECTORS:
        if required := _required(table, specs, specs, mode):
            out["allOf"] = required
        return out
    selector, default = _SELECTORS[table]
    branches = []
    for (name, choice), bases in sorted(SELECTED.items()):
        if name != table:
            continue
        allowed = sorted(n for b in bases for n in _names(table, b, specs[b], mode))
        when: dict[str, Any] = {"properties": {selector: {"const": choice}}}
        if choice != default:
            when["required"] = [selector]
        then: dict[str, Any] = {"propertyNames": {"enum": allowed}}
        if required := _required(table, specs, bases, mode):
            then["allOf"] = required
        branches.append({"if": when, "then": then})
    out["allOf"] = branches + (_required(table, specs, [selector], mode) if default is None else [])
    return out


def protocol_json_schema() -> dict:
    """The JSON Schema of a protocol file (as TOML read into JSON), draft 2020-12.

    Units: none (key names carry the unit suffixes).
    """
    defs = {f"{mode}.{table or 'top'}": _table_schema(table, mode)
            for mode in MODES for table in SCHEMA}
    healing = {"properties": {"units": {"pattern": _MODE_PATTERN["healing"]}},
               "required": ["units"]}
    return {
        "$schema": _DRAFT, "$id": SCHEMA_ID,
        "title": "vortherm protocol file",
        "description": (f"Keys of a vortherm {__version__} protocol (TOML). Generated from "
                        "gpe.setup.schema; reference: docs/protocol.md."),
        "type": "object",
        "if": healing, "then": {"$ref": "#/$defs/healing.top"}, "else": {"$ref": "#/$defs/SI.top"},
        "$defs": defs,
    }
