"""Every JSON document the run side writes is strict JSON (RFC 8259 has no NaN or Infinity):
``vortherm temperature --json``, the vortex table's JSON sidecar and ``vortherm schema`` all
parse with ``json.loads(text, parse_constant=<raises>)``, the way a strict parser (JavaScript's
JSON.parse, jq) reads them. The sweep and compare documents are checked beside their modules."""

import json
import math

import numpy as np
import pytest

from gpe.cli.main import main
from gpe.run import report


def _refuse(name):
    raise ValueError(f"{name} is not JSON (RFC 8259)")


def strict_loads(text):
    """The reference reader: Python's json with the non-standard constants refused."""
    return json.loads(text, parse_constant=_refuse)


def test_the_reference_reader_refuses_what_python_writes_by_default():
    # json.dumps writes NaN and Infinity unless told not to (Python json docs, allow_nan);
    # the reader of these tests must refuse them, or the tests below could not fail
    for value in (math.nan, math.inf, -math.inf):
        with pytest.raises(ValueError, match="not JSON"):
            strict_loads(json.dumps({"beta": value}))


def test_json_report_writes_null_for_every_nan_and_infinity():
    nan, inf = math.nan, math.inf
    frame = {"beta": np.float64(nan), "beta_ci95": [np.float64(-inf), -1.0], "bound": "upper",
             "n_plus": np.int64(3), "n_minus": 0, "verdict": "no vortex"}
    result = {"kind": "run", "records": [frame], "ensemble": {"beta_n": nan, "tau_frames": [inf]},
              "onset": "none", "source": "x.h5", "domain": "disk", "time_unit": "ms"}
    doc = strict_loads(json.dumps(report.json_report(result), allow_nan=False))
    assert doc["frames"][0]["beta"] is None
    assert doc["frames"][0]["beta_ci95"] == [None, -1.0]     # the open side of a bound
    assert doc["frames"][0]["n_plus"] == 3 and isinstance(doc["frames"][0]["n_plus"], int)
    assert doc["ensemble"] == {"beta_n": None, "tau_frames": [None]}


def test_report_has_one_strict_helper_the_shared_one():
    # one helper for strict JSON across both packages (thermo.jsontext, re-exported by
    # gpe.run.jsontext; thermo cannot import gpe)
    import thermo.data.compare
    import thermo.jsontext
    from gpe.run import jsontext

    assert not hasattr(report, "strict") and not hasattr(thermo.data.compare, "_json_safe")
    assert report.strict_json is jsontext.strict_json is thermo.jsontext.strict_json
    assert thermo.data.compare.strict_json is thermo.jsontext.strict_json


def test_temperature_json_with_a_frame_without_vortices_is_strict(tiny_run, tmp_path, capsys,
                                                                 monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert main(["temperature", str(tiny_run), "--json", "--csv", str(tmp_path / "t.csv"),
                 "--no-systematics"]) == 0
    doc = strict_loads(capsys.readouterr().out)
    # the initial frame (the ground state) holds no vortex: beta is undefined there, a NaN in
    # the result, so the document carries null for it
    first = doc["frames"][0]
    assert first["n_plus"] + first["n_minus"] == 0
    assert first["beta"] is None and first["beta_n"] is None
    assert first["beta_ci95"] == [None, None]


def test_temperature_json_with_systematics_is_strict(tiny_run, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert main(["temperature", str(tiny_run), "--json", "--csv", str(tmp_path / "s.csv")]) == 0
    doc = strict_loads(capsys.readouterr().out)
    assert "frames" in doc and "ensemble" in doc


def test_the_vortex_sidecar_is_strict(tiny_run, tmp_path, capsys):
    csv = tmp_path / "v.csv"
    assert main(["vortices", str(tiny_run), "--csv", str(csv)]) == 0
    meta = strict_loads((tmp_path / "v.json").read_text(encoding="utf-8"))
    assert meta["run_file"] == str(tiny_run)


def test_the_protocol_schema_is_strict(tmp_path, capsys):
    assert main(["schema"]) == 0
    printed = strict_loads(capsys.readouterr().out)
    assert main(["schema", "-o", str(tmp_path / "p.schema.json")]) == 0
    written = strict_loads((tmp_path / "p.schema.json").read_text(encoding="utf-8"))
    assert printed == written and written["$schema"].endswith("2020-12/schema")
