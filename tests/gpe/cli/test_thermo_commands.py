"""The thermometry subcommands: ``vortherm temperature`` (run files and measured tables) and
``vortherm compare``, end to end through the command line."""

import json
import subprocess
import sys

import numpy as np
import pytest
from tiny_protocol import TINY

from gpe.cli.main import main
from gpe.run.runfile import RunFile


def test_temperature_json_has_the_promised_fields(tiny_run, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    assert main(["temperature", str(tiny_run), "--json", "--csv", str(tmp_path / "t.csv"),
                 "--no-systematics"]) == 0

    def refuse(name):
        raise ValueError(f"{name} in strict JSON")

    # strict JSON (RFC 8259): no NaN or Infinity anywhere
    doc = json.loads(capsys.readouterr().out, parse_constant=refuse)
    assert len(doc["frames"]) == 6
    for rec in doc["frames"] + [doc["ensemble"]]:
        for key in ("beta", "beta_ci68", "beta_ci95", "beta_n", "beta_n_ci95", "bound",
                    "verdict"):
            assert key in rec
        assert rec["bound"] in (None, "upper", "lower")
        if rec["beta_n"] is not None and rec["bound"] is None:   # no empty intervals
            assert None not in rec["beta_n_ci95"]
    for rec in doc["frames"]:
        for key in ("n_plus", "n_minus", "energy_per_vortex"):
            assert key in rec
    ens = doc["ensemble"]
    for key in ("n_effective", "groups", "common", "tau_frames", "window"):
        assert key in ens
    assert 0 < ens["n_effective"] <= ens["n_shots"]
    assert isinstance(doc["verdict"], str) and doc["verdict"]
    header = (tmp_path / "t.csv").read_text().splitlines()[0].split(",")
    assert header[:4] == ["t [hbar/mu]", "frame [1]", "n_plus [1]", "n_minus [1]"]
    assert "beta_n [1]" in header and "bound" in header


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


def _seeded_runs(tiny, folder, seeds=(1, 2)) -> list[str]:
    """The tiny protocol run once per seed through the command line; the run files' paths."""
    runs = []
    for seed in seeds:
        out = folder / f"s{seed}.h5"
        assert main(["run", str(tiny), "-o", str(out), "--set", f"evolution.seed={seed}"]) == 0
        runs.append(str(out))
    return runs


def test_compare_writes_table_json_and_figure(tiny, tmp_path, capsys, monkeypatch, rng):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    runs = _seeded_runs(tiny, tmp_path)
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


# -- run files by content, incomplete runs, conflicting options, outputs kept -----------------
@pytest.fixture(scope="module")
def one_run(tmp_path_factory):
    """The tiny protocol simulated once for this module's tests (they work on copies)."""
    folder = tmp_path_factory.mktemp("one_run")
    (folder / "tiny.toml").write_text(TINY)
    assert main(["run", str(folder / "tiny.toml"), "-o", str(folder / "tiny.h5")]) == 0
    return folder / "tiny.h5"


def test_a_truncated_run_file_is_named_not_read_as_a_table(one_run, tmp_path, capsys):
    data = one_run.read_bytes()
    cut = tmp_path / "cut.h5"
    cut.write_bytes(data[:len(data) // 3])
    capsys.readouterr()
    assert main(["temperature", str(cut)]) == 2
    err = capsys.readouterr().err
    assert "cut.h5" in err and "truncated" in err and "no geometry" not in err
    assert list(tmp_path.iterdir()) == [cut]                 # nothing written


def test_a_run_file_still_being_written_is_named_as_locked(one_run, tmp_path, capsys,
                                                           monkeypatch):
    monkeypatch.delenv("HDF5_USE_FILE_LOCKING", raising=False)
    run = tmp_path / "busy.h5"
    run.write_bytes(one_run.read_bytes())
    hold = ("import sys, h5py\nf = h5py.File(sys.argv[1], 'r+')\nprint('open', flush=True)\n"
            "sys.stdin.read()\n")
    writer = subprocess.Popen([sys.executable, "-c", hold, str(run)], text=True,
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE)
    try:
        assert writer.stdout.readline().strip() == "open"
        capsys.readouterr()
        assert main(["temperature", str(run)]) == 2
        err = capsys.readouterr().err
    finally:
        writer.stdin.close()
        writer.wait(timeout=30)
    assert "busy.h5" in err and "locked by another process" in err and "no geometry" not in err
    assert not (tmp_path / "busy_temperature.csv").exists()


@pytest.fixture
def dos_cache(tmp_path_factory, monkeypatch):
    """One density-of-states cache for the module, so each vortex number is built once."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path_factory.getbasetemp() / "dos_cache"))


def test_an_incomplete_run_says_how_many_frames_exist(one_run, tmp_path, capsys, dos_cache):
    # a copy under another name: a run file is known by its content, not by its suffix
    killed = tmp_path / "killed.run"
    killed.write_bytes(one_run.read_bytes())
    with RunFile.open(killed, "r+") as run:
        run.truncate_to_frame(2)       # as a run killed after its second output is left
    capsys.readouterr()
    assert main(["temperature", str(killed), "--json", "--csv", str(tmp_path / "j.csv")]) == 0
    doc = json.loads(capsys.readouterr().out)
    # [exact] the tiny protocol: duration 10, output interval 2 -> outputs t = 0, 2, ..., 10
    assert (doc["run_complete"], doc["frames_stored"], doc["frames_planned"]) == (False, 2, 6)
    assert "only 2 of 6 planned frames" in doc["incomplete"] and len(doc["frames"]) == 2
    assert main(["temperature", str(killed), "--csv", str(tmp_path / "t.csv")]) == 0
    text = capsys.readouterr().out
    notes = [line for line in text.splitlines() if line.startswith("note: incomplete run")]
    assert len(notes) == 1 and "only 2 of 6 planned frames" in notes[0]
    assert text.index(notes[0]) < text.index("verdict:")


def test_a_complete_run_carries_no_incomplete_note(one_run, tmp_path, capsys, dos_cache):
    capsys.readouterr()
    assert main(["temperature", str(one_run), "--json", "--csv", str(tmp_path / "c.csv")]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["run_complete"] is True and doc["frames_stored"] == doc["frames_planned"] == 6
    assert "incomplete" not in doc


def test_conflicting_geometry_options_are_refused_naming_both(one_run, tmp_path, capsys, rng):
    table = tmp_path / "shots.csv"
    _write_table(table, rng)
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--box-um", "60", "40"]) == 2
    err = capsys.readouterr().err
    assert "--disk-radius-um" in err and "--box-um" in err
    assert main(["temperature", str(one_run), "--disk-radius-um", "30"]) == 2
    err = capsys.readouterr().err
    assert "tiny.h5" in err and "--disk-radius-um" in err and "measured tables" in err
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--frames", "1:3"]) == 2
    assert "--frames" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["shots.csv"]   # nothing written


def test_temperature_outputs_are_kept_unless_forced(tmp_path, capsys, rng, dos_cache):
    table = tmp_path / "shots.csv"
    _write_table(table, rng, shots=3, n=4)
    assert main(["temperature", str(table), "--disk-radius-um", "30"]) == 0
    out_csv = tmp_path / "shots_temperature.csv"
    first = out_csv.read_text()
    out_csv.write_text("kept\n")
    capsys.readouterr()
    assert main(["temperature", str(table), "--disk-radius-um", "30"]) == 2
    err = capsys.readouterr().err
    assert str(out_csv) in err and "--force" in err and "--csv" in err
    assert out_csv.read_text() == "kept\n"
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--force"]) == 0
    assert out_csv.read_text() == first
    # the source is never an output, not even with --force
    before = table.read_bytes()
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--csv", str(table),
                 "--force"]) == 2
    assert "input" in capsys.readouterr().err and table.read_bytes() == before


def test_compare_keeps_earlier_outputs_unless_forced(one_run, tmp_path, capsys, rng):
    table = tmp_path / "shots.csv"
    _write_table(table, rng, radius_um=10.0)
    stem = tmp_path / "cmp"
    stem.with_suffix(".json").write_text("{}")
    assert main(["compare", str(one_run), "--measured", str(table), "-o", str(stem)]) == 2
    err = capsys.readouterr().err
    assert "cmp.json" in err and "--force" in err and "-o/--output" in err
    assert stem.with_suffix(".json").read_text() == "{}"
    assert not stem.with_suffix(".csv").exists() and not stem.with_suffix(".png").exists()
    # -o naming the measured table itself would overwrite it: refused even with --force
    assert main(["compare", str(one_run), "--measured", str(table), "-o",
                 str(tmp_path / "shots"), "--force"]) == 2
    assert "input" in capsys.readouterr().err


def test_bad_imaging_options_and_empty_windows_are_refused_naming_the_option(
        tmp_path, capsys, rng, tiny_run):
    """An imaging model with a probability outside [0, 0.5), or a window with no frame, is a
    clear error that names the option; nothing is written."""
    table = tmp_path / "shots.csv"
    _write_table(table, rng)
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--sign-error", "1.5"]) == 2
    assert "--sign-error 1.5" in capsys.readouterr().err
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--blur-um", "-1"]) == 2
    assert "--blur-um -1" in capsys.readouterr().err
    assert not (tmp_path / "shots_temperature.csv").exists()
    # the tiny run is in healing units: no ms scale for --window-ms
    csv = tmp_path / "run_t.csv"
    assert main(["temperature", str(tiny_run), "--window-ms", "1e5", "2e5", "--csv", str(csv)]) == 2
    assert "--window-ms" in capsys.readouterr().err
    assert not csv.exists()


def test_several_runs_are_listed_together_and_pooled_as_independent_series(
        tiny_run, tmp_path, capsys, monkeypatch):
    """Two run files (here two copies of one run, standing in for two seeds): every frame of
    both is listed with its run, and the ensemble pools both runs' frames, each run weighted by
    its own autocorrelation time."""
    import shutil

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    second = tmp_path / "seed2.h5"
    shutil.copy(tiny_run, second)
    csv = tmp_path / "both.csv"
    assert main(["temperature", str(tiny_run), str(second), "--json", "--csv", str(csv),
                 "--no-systematics"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert len(doc["frames"]) == 12
    assert {f["run"] for f in doc["frames"]} == {tiny_run.stem, "seed2"}
    ens = doc["ensemble"]
    assert ens["runs"] == 2 and len(ens["tau_frames"]) == 2
    assert ens["frames"] == 2 * (6 // 3)       # the last third of each run (the beam stays on)
    assert csv.read_text().splitlines()[0].startswith("run,t [hbar/mu],frame [1],")
    # a measured table cannot be mixed with runs
    table = tmp_path / "t.csv"
    table.write_text("shot,x,y,sign\n0,0,0,1\n")
    assert main(["temperature", str(tiny_run), str(table)]) == 2
    assert "must all be run files" in capsys.readouterr().err


def test_compare_keeps_the_measured_geometry_and_core_and_tests_runs_as_series(
        tiny, tmp_path, capsys, monkeypatch, rng):
    """The measured beta~N of a comparison is the table's own ensemble estimate (its geometry,
    its core radius from the TOML beside it), whatever the simulation; the frames of the runs
    are counted as correlated series of independent runs."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    runs = _seeded_runs(tiny, tmp_path)
    table = tmp_path / "shots.csv"
    _write_table(table, rng, shots=12, radius_um=10.0)
    (tmp_path / "shots.toml").write_text('shape = "disk"\nradius_um = 10.0\ncore_um = 0.3\n')
    capsys.readouterr()

    def refuse(name):
        raise ValueError(f"{name} in strict JSON")

    # the table alone first: its per-shot estimates may widen the cached ladder, which the
    # comparisons then load (the same density of states on both paths)
    assert main(["temperature", str(table), "--json", "--no-systematics"]) == 0
    alone = json.loads(capsys.readouterr().out, parse_constant=refuse)["ensemble"]
    docs = []
    for k, sims in enumerate((runs, runs[:1])):
        assert main(["compare", *sims, "--measured", str(table), "-o", str(tmp_path / f"c{k}"),
                     "--json"]) == 0
        docs.append(json.loads(capsys.readouterr().out, parse_constant=refuse))
    for doc in docs:
        measured = doc["beta_n"]["measured"]
        assert measured["beta_n"] == pytest.approx(alone["beta_n"], rel=1e-12)
        assert measured["beta_n_ci95"] == pytest.approx(alone["beta_n_ci95"], rel=1e-12)
        row = next(r for r in doc["rows"] if r["quantity"] == "n_plus")
        # shots are independent: 12 and the shot 99 emptied by its unusable row
        assert row["n_eff_measured"] == pytest.approx(13.0)
        assert doc["sides"]["simulation"]["series"] in (1, 2)
    assert docs[0]["sides"]["simulation"]["series"] == 2
    assert any("independent series" in n for n in docs[0]["notes"])
    import pandas as pd
    table_csv = pd.read_csv(tmp_path / "c0.csv")
    assert "beta_n" in list(table_csv["quantity"]) and "n_eff_simulation" in table_csv.columns


def test_compare_refuses_a_time_outside_the_run_naming_the_option(one_run, tmp_path, capsys, rng):
    table = tmp_path / "shots.csv"
    _write_table(table, rng, radius_um=10.0)
    stem = tmp_path / "cmp"
    assert main(["compare", str(one_run), "--measured", str(table), "-o", str(stem),
                 "--time-ms", "1e6"]) == 2
    err = capsys.readouterr().err
    assert "--time-ms 1e+06" in err or "--time-ms 1000000" in err, err
    assert not any(stem.with_suffix(s).exists() for s in (".csv", ".json", ".png"))
    assert main(["compare", str(one_run), "--measured", str(table), "-o", str(stem),
                 "--sign-error", "0.7"]) == 2
    assert "--sign-error 0.7" in capsys.readouterr().err


@pytest.mark.slow
def test_temperature_rotating_adds_omega_everywhere(tmp_path, capsys, monkeypatch, rng):
    """--rotating: omega for every shot and the ensemble (JSON, CSV, text), the omega = 0 test
    and the mean-field figure; a box has no omega and says so. The (beta, omega) tables are
    built at a reduced effort here (6 x 3 states, 200 sweeps): the numbers are not checked,
    only that every output carries them (the estimators are tested in tests/thermo/rotation)."""
    from gpe.run import rotating
    from thermo.domains.box import Box

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    monkeypatch.setitem(rotating.ROTATING_EFFORT, "quick",
                        {"n_sweeps": 200, "n_boot": 2, "n_betas": 6, "n_omegas": 3,
                         "burn_in": 200})
    table = tmp_path / "shots.csv"
    _write_table(table, rng)
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--json", "--rotating",
                 "--no-systematics", "--plot"]) == 0
    doc = json.loads(capsys.readouterr().out.split("\nfigure written")[0])
    usable = [s for s in doc["shots"] if s["n_plus"] + s["n_minus"] >= 2]
    for rec in usable + [doc["ensemble"]]:
        for key in ("omega", "omega_ci95", "omega_n", "beta_rot_n", "omega_pvalue",
                    "omega_verdict"):
            assert key in rec
    ens = doc["ensemble"]
    assert isinstance(ens["omega_nonzero"], bool)
    assert ens["meanfield"]["dof"] >= 1 and len(ens["meanfield"]["edges"]) == 9
    assert (tmp_path / "shots_meanfield.png").stat().st_size > 0
    header = (tmp_path / "shots_temperature.csv").read_text().splitlines()[0].split(",")
    assert "omega [E0]" in header and "omega_pvalue [1]" in header
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--rotating",
                 "--no-systematics", "--force"]) == 0
    text = capsys.readouterr().out
    assert "omega~/N (95% interval)" in text and "rotating ensemble" in text
    assert "mean field (Poisson-Boltzmann" in text
    box = Box.from_sizes({"width": 1.0, "height": 1.0})[0]
    rec = rotating.ensemble_rotation([(np.array([[0.1, 0.1], [-0.1, 0.2]]), np.array([1, -1]))],
                                     box, 0.02, effort="quick")
    assert np.isnan(rec["omega"]) and "does not conserve the angular impulse" in \
        rec["omega_verdict"]


@pytest.mark.slow
def test_analyse_with_omega_gives_the_rotating_fields_a_sweep_reads(one_run, tmp_path, dos_cache,
                                                                   monkeypatch):
    """A sweep's [measure] quantities = ["omega"] calls analyse(..., rotating=True)
    (gpe.sweep.execute.run_point), which must give a number (or NaN with a reason) under
    "omega" beside beta. Reduced table effort (6 x 3 states, 200 sweeps): the plumbing is
    checked here, the estimator in tests/thermo/rotation."""
    import math

    from gpe.run import rotating
    from gpe.run.thermometry import analyse

    monkeypatch.setitem(rotating.ROTATING_EFFORT, "quick",
                        {"n_sweeps": 200, "n_boot": 2, "n_betas": 6, "n_omegas": 3,
                         "burn_in": 200})
    rec = analyse(one_run, rotating=True)
    assert isinstance(float(rec["omega"]), float) and isinstance(rec["omega_verdict"], str)
    assert "beta" in rec
    if math.isfinite(rec["omega"]):
        lo, hi = rec["omega_ci95"]
        assert lo <= rec["omega"] <= hi
    plain = analyse(one_run)
    assert "omega" not in plain and plain["beta_n"] == rec["beta_n"]   # beta unchanged
