"""The command line: every subcommand end to end on a tiny protocol, and its bad-input paths.

Each bad input must give a one-paragraph error naming the file/key and what is accepted, a
non-zero exit code, and no partial output file.
"""

import json

import h5py
import numpy as np
import pytest
from tiny_protocol import TINY

from gpe.cli.main import main


def test_init_writes_a_protocol_that_parses(tmp_path, capsys):
    from gpe.setup.protocol import load_protocol

    path = tmp_path / "my.toml"
    assert main(["init", str(path)]) == 0
    assert load_protocol(path).name == "example"
    assert main(["init", str(path)]) == 2          # refuses to overwrite
    assert "--force" in capsys.readouterr().err


def test_run_prints_summary_and_set_overrides_reach_the_file(tiny, tmp_path, capsys):
    out = tmp_path / "hot.h5"
    assert main(["run", str(tiny), "-o", str(out), "--set", "evolution.damping=0.02"]) == 0
    text = capsys.readouterr().out
    for word in ("healing length", "sound speed", "chemical potential", "N+ ="):
        assert word in text
    with h5py.File(out, "r") as f:
        resolved = json.loads(f.attrs["protocol_json"])
        assert f.attrs["complete"]
    assert "evolution.damping=0.02" in json.dumps(resolved) or resolved["evolution"]["gamma"] == 0.02


@pytest.mark.parametrize("override, words", [
    ("trap.radus_xi=20", ["radus_xi", "radius_xi"]),                   # unknown key, nearest
    ("trap.radius_mm=20", ["radius_mm", "radius_xi"]),                 # wrong unit suffix
    ("trap.radius_xi=-5", ["radius_xi", "> 0"]),                       # negative size
    ("beams.0.path.start_xi=[23.0, 1.0]", ["beams", "grid"]),          # beam leaves the grid
])
def test_bad_protocol_exits_nonzero_without_output(tiny, tmp_path, capsys, override, words):
    out = tmp_path / "bad.h5"
    assert main(["run", str(tiny), "-o", str(out), "--set", override]) == 2
    err = capsys.readouterr().err
    assert "tiny.toml" in err
    for w in words:
        assert w in err
    assert not out.exists()
    assert not list(tmp_path.glob("bad.h5*"))


def test_missing_required_section_is_named(tmp_path, capsys):
    path = tmp_path / "nosec.toml"
    path.write_text(TINY.split("[evolution]")[0])
    assert main(["run", str(path)]) == 2
    err = capsys.readouterr().err
    assert "evolution" in err and "nosec.toml" in err


def test_unreadable_mask_image_is_named(tmp_path, capsys):
    (tmp_path / "broken.png").write_bytes(b"not an image at all")
    text = TINY.replace('shape = "disk"\nradius_xi = 20.0',
                        'shape = "mask"\nfile = "broken.png"\npixel_size_xi = 0.5')
    path = tmp_path / "mask.toml"
    path.write_text(text)
    assert main(["run", str(path), "-o", str(tmp_path / "mask.h5")]) == 2
    assert "broken.png" in capsys.readouterr().err
    assert not (tmp_path / "mask.h5").exists()


def test_seeds_write_one_file_per_seed(tiny, tmp_path):
    out = tmp_path / "ens.h5"
    assert main(["run", str(tiny), "-o", str(out), "--seeds", "1-2"]) == 0
    assert (tmp_path / "ens_seed1.h5").exists() and (tmp_path / "ens_seed2.h5").exists()
    with h5py.File(tmp_path / "ens_seed1.h5") as a, h5py.File(tmp_path / "ens_seed2.h5") as b:
        assert not np.array_equal(a["snapshots/psi"][0], b["snapshots/psi"][0])


def test_vortices_exports_csv_and_checks_its_options(tiny_run, tmp_path, capsys):
    csv = tmp_path / "v.csv"
    with h5py.File(tiny_run) as f:
        before = f["vortices"][...]
    assert main(["vortices", str(tiny_run), "--csv", str(csv), "--threshold", "0.3"]) == 0
    assert csv.read_text().splitlines()[0] == "frame,t_ms,x_um,y_um,sign,track"
    with h5py.File(tiny_run) as f:                 # unchanged without --store
        np.testing.assert_array_equal(f["vortices"][...], before)
    assert main(["vortices", str(tiny_run), "--threshold", "1.5"]) == 2
    assert "0 < threshold < 1" in capsys.readouterr().err
    assert main(["vortices", str(tiny_run), "--frames", "99"]) == 2
    assert "out of range" in capsys.readouterr().err


def test_run_file_without_snapshots_is_refused(tmp_path, capsys):
    path = tmp_path / "empty.h5"
    with h5py.File(path, "w") as f:
        f.attrs["note"] = "not a run"
    assert main(["vortices", str(path)]) == 2
    assert "empty.h5" in capsys.readouterr().err


def test_plot_writes_figures(tiny_run, tmp_path):
    out = tmp_path / "fig"
    assert main(["plot", str(tiny_run), "--frames", "0,-1", "-o", str(out)]) == 0
    names = sorted(p.name for p in out.glob("*.png"))
    assert "tiny_density_phase.png" in names and "tiny_vortex_counts.png" in names
    assert "tiny_energies.png" in names


@pytest.mark.parametrize("fmt, magic", [("pdf", b"%PDF"), ("svg", b"<?xml")])
def test_plot_writes_vector_figures(tiny_run, tmp_path, fmt, magic):
    out = tmp_path / "fig"
    assert main(["plot", str(tiny_run), "-o", str(out), "--format", fmt.upper()]) == 0
    files = sorted(out.iterdir())
    assert files and all(p.suffix == f".{fmt}" for p in files)
    assert all(p.read_bytes().startswith(magic) for p in files)


def test_plot_keeps_existing_figures_unless_forced(tiny_run, tmp_path, capsys):
    out = tmp_path / "fig"
    assert main(["plot", str(tiny_run), "-o", str(out)]) == 0
    before = {p.name: p.stat().st_mtime_ns for p in out.iterdir()}
    assert main(["plot", str(tiny_run), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "tiny_density_phase.png" in err and "--force" in err
    assert {p.name: p.stat().st_mtime_ns for p in out.iterdir()} == before   # untouched
    assert main(["plot", str(tiny_run), "-o", str(out), "--format", "svg"]) == 0  # other names
    assert main(["plot", str(tiny_run), "-o", str(out), "--force"]) == 0
    with pytest.raises(SystemExit) as stop:                  # argparse names the choices
        main(["plot", str(tiny_run), "-o", str(out), "--format", "eps"])
    assert stop.value.code == 2 and "png" in capsys.readouterr().err


def test_describe_lists_every_observable_with_its_unit(capsys):
    from gpe.analysis import diagnostics

    assert main(["describe"]) == 0
    out = capsys.readouterr().out
    for name, d in diagnostics.REGISTRY.items():
        assert name in out and d.unit in out


@pytest.mark.slow
def test_demo_runs_end_to_end(tmp_path, capsys, monkeypatch):
    """The README's first command: the demo scenario simulated, detected, drawn and its
    temperature measured, with every promised output on disk."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    out = tmp_path / "demo"
    assert main(["demo", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "verdict:" in text and str(out.resolve()) in text
    for name in ("demo.h5", "demo.toml", "demo_vortices.csv", "demo_temperature.csv",
                 "demo_temperature.png", "figures/demo_density_phase.png"):
        assert (out / name).exists(), name
    from gpe.run import reading

    assert reading.is_complete(out / "demo.h5")


def test_sweep_with_a_bad_scheduler_address_writes_nothing(tmp_path, capsys):
    (tmp_path / "base.toml").write_text(TINY)
    sweep = tmp_path / "s.toml"
    sweep.write_text('base = "base.toml"\nseeds = 1\n[[axes]]\nkey = "beams.0.path.speed_c"\n'
                     'values = [0.3, 0.7]\n[measure]\nquantities = ["beta"]\n')
    out = tmp_path / "out"
    assert main(["sweep", str(sweep), "-o", str(out), "--scheduler", "head-node:87x6"]) == 2
    err = capsys.readouterr().err
    assert "head-node:87x6" in err and "tcp://HOST:PORT" in err and "Traceback" not in err
    assert not out.exists()


def test_vortices_keeps_an_existing_csv_unless_forced(tiny_run, tmp_path, capsys):
    default = tmp_path / "tiny_vortices.csv"             # RUN_vortices.csv beside the run
    assert main(["vortices", str(tiny_run)]) == 0
    first = default.read_text()
    default.write_text("kept\n")
    assert main(["vortices", str(tiny_run)]) == 2
    err = capsys.readouterr().err
    assert str(default) in err and "--force" in err and "--csv" in err
    assert default.read_text() == "kept\n"
    assert main(["vortices", str(tiny_run), "--force"]) == 0
    assert default.read_text() == first


def test_the_sweep_summary_names_every_point_with_its_values_and_units(tmp_path):
    from sweep_stand_in import run_stand_in, write_sweep_file

    from gpe.cli.commands import sweep_summary_text

    result = run_stand_in(write_sweep_file(tmp_path), tmp_path / "out", workers=1)
    text = sweep_summary_text(result).splitlines()
    assert text[0].startswith("sweep summary: 8 of 8 runs measured")
    head = text[1].split()
    assert head[:2] == ["beam", "speed"] and "[1/E0]" in text[1] and "n_plus" in text[1]
    assert len(text) == 2 + len(result.points)
    for line, point in zip(text[2:], result.points):
        cells = line.split()
        assert float(cells[0]) == point["beams.0.path.speed_c"]
        assert float(cells[1]) == point["beams.0.waist_um"]
        assert cells[2] == "2/2"
        assert float(cells[3]) == pytest.approx(point["beta_mean"], rel=1e-3)
        assert float(cells[-2]) == pytest.approx(point["n_plus_mean"], rel=1e-3)
        assert float(cells[-1]) == pytest.approx(point["dipole_fraction_mean"], rel=1e-3)
