"""The thermometry subcommands: ``vortherm temperature`` (run files and measured tables) and
``vortherm compare``, end to end through the command line."""

import json

import numpy as np

from gpe.cli.main import main


def test_temperature_json_has_the_promised_fields(tiny_run, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert main(["temperature", str(tiny_run), "--json", "--csv", str(tmp_path / "t.csv")]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert len(doc["frames"]) == 6
    for rec in doc["frames"] + [doc["ensemble"]]:
        for key in ("beta", "beta_ci68", "beta_ci95", "verdict"):
            assert key in rec
    for rec in doc["frames"]:
        for key in ("n_plus", "n_minus", "energy_per_vortex"):
            assert key in rec
    assert isinstance(doc["verdict"], str) and doc["verdict"]
    assert (tmp_path / "t.csv").read_text().startswith("t,frame,")


def _write_table(path, rng, shots=6, n=6, radius_um=30.0):
    """A measured-format table of uniformly placed neutral shots (test data, drawn at beta = 0)."""
    lines = ["# test table: uniform positions (beta = 0), not a measurement", "shot,x,y,sign"]
    for shot in range(shots):
        r = radius_um * 0.9 * np.sqrt(rng.random(n))
        phi = 2 * np.pi * rng.random(n)
        for k in range(n):
            sign = "+1" if k < n // 2 else "-1"
            lines.append(f"{shot},{r[k] * np.cos(phi[k]):.3f},{r[k] * np.sin(phi[k]):.3f},{sign}")
    lines.append("99,1.0,2.0,?")                    # an unusable row, reported by number
    path.write_text("\n".join(lines) + "\n")


def test_temperature_of_a_measured_table(tmp_path, capsys, monkeypatch, rng):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    table = tmp_path / "shots.csv"
    _write_table(table, rng)
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--core-um", "0.3",
                 "--json"]) == 0
    captured = capsys.readouterr()
    doc = json.loads(captured.out)
    assert len(doc["shots"]) == 7                  # six usable shots and the emptied shot 99
    assert doc["ensemble"]["n_shots"] == 6
    lo, hi = doc["ensemble"]["beta_ci95"]
    assert lo < hi
    assert "line" in captured.err and "?" in captured.err


def test_temperature_needs_a_geometry(tmp_path, capsys, rng):
    table = tmp_path / "nogeo.csv"
    _write_table(table, rng)
    assert main(["temperature", str(table)]) == 2
    assert "nogeo" in capsys.readouterr().err


def test_compare_writes_table_json_and_figure(tiny, tmp_path, capsys, monkeypatch, rng):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    runs = []
    for seed in (1, 2):
        out = tmp_path / f"s{seed}.h5"
        assert main(["run", str(tiny), "-o", str(out), "--set", f"evolution.seed={seed}"]) == 0
        runs.append(str(out))
    table = tmp_path / "shots.csv"
    _write_table(table, rng, radius_um=10.0)
    (tmp_path / "shots.toml").write_text('shape = "disk"\nradius_um = 10.0\ncore_um = 0.1\n')
    stem = tmp_path / "cmp"
    capsys.readouterr()                            # drop the run summaries
    assert main(["compare", *runs, "--measured", str(table), "-o", str(stem), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    names = [row["quantity"] for row in doc["rows"]]
    for q in ("n_plus", "n_minus", "energy_per_vortex", "c1", "mean_nn_distance"):
        assert q in names
    for suffix in (".csv", ".json", ".png"):
        assert stem.with_suffix(suffix).exists()


def test_strict_stops_at_the_first_bad_row(tmp_path, capsys, rng):
    table = tmp_path / "shots.csv"
    _write_table(table, rng, shots=2)
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--strict"]) == 2
    err = capsys.readouterr().err
    assert "shots.csv" in err and "line" in err and "sign" in err


def test_a_latin1_table_is_refused_by_line_and_byte(tmp_path, capsys):
    table = tmp_path / "labo.csv"
    table.write_bytes("# mesur\u00e9 le 3 mai\nshot,x,y,sign\n0,1.0,2.0,+1\n".encode("latin-1"))
    assert main(["temperature", str(table), "--disk-radius-um", "30"]) == 2
    err = capsys.readouterr().err
    assert "labo.csv, line 1" in err and "byte 7" in err and "save it as UTF-8" in err

