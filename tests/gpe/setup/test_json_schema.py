"""The JSON Schema of the protocol file: valid itself, accepts the shipped protocols, and refuses
what the protocol reader refuses for the form of a key or value. Checked with the jsonschema
library (an independent implementation of draft 2020-12)."""

import copy
import tomllib
from pathlib import Path

import jsonschema
import pytest
from tiny_protocol import TINY

from gpe.cli.main import main
from gpe.errors import ProtocolError
from gpe.run.jsontext import loads_strict
from gpe.setup.json_schema import protocol_json_schema
from gpe.setup.protocol import example_protocol_text, parse_protocol, protocol_from_dict

ROOT = Path(__file__).resolve().parents[3]
VALIDATOR = jsonschema.Draft202012Validator(protocol_json_schema())


def test_the_schema_is_a_valid_draft_2020_12_schema():
    jsonschema.Draft202012Validator.check_schema(protocol_json_schema())


@pytest.mark.parametrize("name, text", [
    ("example", example_protocol_text()),
    ("demo", (ROOT / "runs" / "demo.toml").read_text(encoding="utf-8")),
    ("tiny (healing units)", TINY),
])
def test_shipped_protocols_validate(name, text):
    assert [e.message for e in VALIDATOR.iter_errors(tomllib.loads(text))] == []


def _set(data, dotted, value):
    *parents, key = dotted.split(".")
    node = data
    for part in parents:
        node = node[int(part)] if part.isdigit() else node[part]
    if value is _DELETE:
        del node[key]
    else:
        node[key] = value


_DELETE = object()
BROKEN = [
    ("trap.radus_xi", 20.0, "unknown key"),
    ("trap.radius_um", 20.0, "SI suffix in a healing-unit protocol"),
    ("evolution.duration_tau", _DELETE, "missing required key"),
    ("evolution.precision", "complex256", "not one of the choices"),
    ("trap.radius_xi", -5.0, "negative size"),
    ("trap.size_xi", 10.0, "a key of another trap shape"),
    ("beams.0.path.radius_xi", 4.0, "a key of another path kind"),
    ("grid.nx", 64.5, "not an integer"),
    ("beams.0.path.start_xi", [1.0], "not a pair"),
    ("beams.0.height_mu", 0.0, "zero where non-zero is required"),
    ("units", "kelvin", "unknown unit system"),
]


@pytest.mark.parametrize("dotted, value, why", BROKEN, ids=[b[2] for b in BROKEN])
def test_a_broken_protocol_fails_the_schema_and_the_reader(dotted, value, why):
    data = copy.deepcopy(tomllib.loads(TINY))
    _set(data, dotted, value)
    assert list(VALIDATOR.iter_errors(data)), why
    with pytest.raises(ProtocolError):
        protocol_from_dict(data, source="broken")


def test_the_unit_system_decides_which_suffixes_the_schema_takes():
    healing = tomllib.loads(TINY)
    si = copy.deepcopy(healing)
    si["units"] = "SI"
    si["trap"]["radius_um"] = si["trap"].pop("radius_xi")
    assert list(VALIDATOR.iter_errors(healing)) == []
    assert list(VALIDATOR.iter_errors(si)) == []                # um is an SI spelling
    healing["trap"]["radius_um"] = healing["trap"].pop("radius_xi")
    assert list(VALIDATOR.iter_errors(healing))                 # but not a healing one
    parse_protocol(TINY.replace('units = "healing"', 'units = "HEALING"'), "caps")  # any case
    caps = tomllib.loads(TINY.replace('units = "healing"', 'units = "HEALING"'))
    assert list(VALIDATOR.iter_errors(caps)) == []


def test_vortherm_schema_prints_and_writes_strict_json(tmp_path, capsys):
    assert main(["schema"]) == 0
    assert loads_strict(capsys.readouterr().out) == protocol_json_schema()
    out = tmp_path / "protocol.schema.json"
    assert main(["schema", "-o", str(out)]) == 0
    assert loads_strict(out.read_text(encoding="utf-8")) == protocol_json_schema()
    assert main(["schema", "-o", str(out)]) == 2                 # refuses to overwrite
    assert "--force" in capsys.readouterr().err
    assert main(["schema", "-o", str(out), "--force"]) == 0
