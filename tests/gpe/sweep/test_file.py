"""Tests of the sweep-file parser (gpe/sweep/file.py): axes, ranges, seeds, measure, errors.

The file of tests/sweep_stand_in.py and the repository's demo sweep are parsed; running sweeps
is tested in test_sweep.py.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from sweep_stand_in import write_sweep_file

from gpe.sweep.file import MEASURABLE, SweepError, load_sweep, parse_sweep
from thermo.quantities import QUANTITIES

DEMO = Path(__file__).resolve().parents[3] / "runs" / "demo.toml"


@pytest.fixture
def sweep_file(tmp_path):
    return write_sweep_file(tmp_path)


def test_grid_expands_into_readable_points(sweep_file):
    sweep = load_sweep(sweep_file, check_protocol=False)
    points = sweep.points()
    assert [p.point_id for p in points] == [f"p00{i}_s{s}" for i in range(4) for s in (0, 1)]
    assert points[3].overrides == ("beams.0.path.speed_c=0.3", "beams.0.waist_um=4.0",
                                   "evolution.seed=1")
    assert sweep.axes[0].title == "beam speed [c]" and sweep.axes[1].unit == "um"
    assert sweep.measure.window == (80.0, 100.0) and sweep.measure.time_unit == "protocol"


def test_ranges_linear_and_log(tmp_path):
    (tmp_path / "b.toml").write_text("")
    text = ('base = "b.toml"\n[[axes]]\nkey = "a.x_mu"\nrange = {start = 1, stop = 2, num = 3}\n'
            '[[axes]]\nkey = "a.gamma"\nrange = {start = 1e-4, stop = 1e-2, num = 3, '
            'scale = "log"}\n')
    sweep = parse_sweep(text, tmp_path / "s.toml", check_protocol=False)
    assert sweep.axes[0].values == (1.0, 1.5, 2.0)
    np.testing.assert_allclose(sweep.axes[1].values, [1e-4, 1e-3, 1e-2], rtol=1e-12)
    assert sweep.axes[1].scale == "log" and sweep.seeds == (0,)


@pytest.mark.parametrize("bad, message", [
    ("axis = []", "did you mean 'axes'"),
    ('[[axes]]\nkey = "k"\nvalus = [1]', "did you mean 'values'"),
    ('[[axes]]\nkey = "k"\nvalues = [1]\nrange = {start = 0, stop = 1, num = 2}', "exactly one"),
    ('[[axes]]\nkey = "k"\nrange = {start = 0, stop = 1}', "missing 'num'"),
    ('[[axes]]\nkey = "k"\nrange = {start = 0, stop = 1, num = 3, scale = "log"}', "log range"),
    ('[[axes]]\nkey = "evolution.seed"\nvalues = [1]', "seeds"),
    ('[[axes]]\nkey = "k"\nvalues = [1, 1]', "duplicate"),
    ('seeds = 0\n[[axes]]\nkey = "k"\nvalues = [1]', "seeds"),
    ('[[axes]]\nkey = "k"\nvalues = [1]\n[measure]\nquantities = ["betta"]', "did you mean 'beta'"),
    ('[[axes]]\nkey = "k"\nvalues = [1]\n[measure]\nwindow = [5, 1]', "t0 < t1"),
    ('[[axes]]\nkey = "k"\nvalues = [1]\n[measure]\nat_time = 1\nwindow = [0, 1]', "not both"),
    ('[[axes]]\nkey = "k"\nvalues = [1]\n[measure]\nat_time_s = 1', "did you mean 'at_time_ms'"),
])
def test_sweep_file_errors_name_file_and_key(tmp_path, bad, message):
    (tmp_path / "b.toml").write_text("")
    src = tmp_path / "my_sweep.toml"
    src.write_text('base = "b.toml"\n' + bad + "\n")
    with pytest.raises(SweepError) as err:
        load_sweep(src, check_protocol=False)
    assert message in str(err.value) and "my_sweep.toml" in str(err.value)


def test_missing_base_protocol_is_reported(tmp_path):
    with pytest.raises(SweepError, match="nowhere.toml.*relative to the sweep file"):
        parse_sweep('base = "nowhere.toml"\n[[axes]]\nkey = "k"\nvalues = [1]\n',
                    tmp_path / "s.toml", check_protocol=False)


def test_quantity_table_is_complete():
    assert set(MEASURABLE) == {"beta", "n_plus", "n_minus", "dipole_fraction",
                               "cluster_fraction", "free_fraction", "energy_per_vortex", "omega"}
    assert all(q in QUANTITIES for q in MEASURABLE)       # every one has its unit


def test_omega_is_measured_only_when_asked_for(tmp_path):
    """omega costs its own (beta, omega) tables: a [measure] table names it to get it."""
    base = f'base = "{DEMO}"\n[[axes]]\nkey = "beams.0.waist_um"\nvalues = [2.0]\n'
    plain = parse_sweep(base, tmp_path / "s.toml", check_protocol=False)
    assert "omega" not in plain.measure.quantities
    asked = parse_sweep(base + '[measure]\nquantities = ["omega"]\n', tmp_path / "s.toml",
                        check_protocol=False)
    assert asked.measure.quantities == ("beta", "omega")
    with pytest.raises(SweepError, match="omegas"):
        parse_sweep(base + '[measure]\nquantities = ["omegas"]\n', tmp_path / "s.toml",
                    check_protocol=False)


def test_demo_sweep_file_is_valid():
    sweep = load_sweep(DEMO.parent / "demo_sweep.toml")
    assert sweep.base == DEMO and len(sweep.points()) == len(sweep.seeds) * math.prod(
        len(a.values) for a in sweep.axes)
    assert sweep.measure.time_unit == "ms"


def test_misspelt_protocol_key_is_caught_before_running(tmp_path):
    src = tmp_path / "s.toml"
    src.write_text(f'base = "{DEMO}"\n[[axes]]\nkey = "beams.0.wiast_um"\nvalues = [2.0]\n')
    with pytest.raises(SweepError, match=r"s\.toml.*beams\.0\.wiast_um.*did you mean 'waist_um'"):
        load_sweep(src)


@pytest.mark.parametrize("value", [0.1, 1e-12, 3, -2.5, True, False, 'a "quoted" name', "x\\y"])
def test_format_value_is_read_back_by_toml(value):
    """An override's right-hand side is TOML: tomllib must give back the same value and type."""
    import tomllib

    from gpe.sweep.file import format_value

    back = tomllib.loads(f"v = {format_value(value)}")["v"]
    assert back == value and type(back) is type(value)


def test_axis_unit_for_every_suffix_in_the_protocol_schema(tmp_path):
    """Every dimensioned key of the schema, in every suffix it accepts, gets the unit its suffix
    names as the sweep axis unit (the schema's own table; the sweep keeps no copy of it)."""
    from gpe.setup.schema import SCHEMA, SUFFIX_LABELS, SUFFIXES

    expected = {"um": "um", "xi": "xi", "ms": "ms", "tau": "hbar/mu", "mu": "mu", "nK": "nK",
                "um_per_ms": "um/ms", "c": "c", "hz": "Hz", "rad_per_ms": "rad/ms",
                "rad_per_tau": "rad/(hbar/mu)", "deg": "deg", "rad": "rad", "a0": "a0", "nm": "nm"}
    assert SUFFIX_LABELS == expected
    (tmp_path / "p.toml").write_text("")  # the base must exist; it is not read here
    checked = 0
    for section, specs in SCHEMA.items():
        prefix = ".".join(f"{part}.0" if part == "beams" or part == "imprint" else part
                          for part in section.split(".")) if section else ""
        for base, spec in specs.items():
            if spec.dim is None:
                continue
            for suffix in {s for names in SUFFIXES[spec.dim].values() for s in names}:
                key = f"{prefix}.{base}_{suffix}" if prefix else f"{base}_{suffix}"
                text = (f'base = "p.toml"\n[[axes]]\nkey = "{key}"\nvalues = [1.0, 2.0]\n')
                axis = parse_sweep(text, str(tmp_path / "s.toml"), check_protocol=False).axes[0]
                assert axis.unit == expected[suffix], key
                checked += 1
    assert checked > 60
    # the three keys the old copy of the table got wrong
    for key, unit in (("beams.0.path.speed_um_per_ms", "um/ms"), ("trap.frequency_rad_per_ms", "rad/ms"),
                      ("evolution.duration_tau", "hbar/mu"), ("evolution.damping", "")):
        assert parse_sweep(f'base = "p.toml"\n[[axes]]\nkey = "{key}"\nvalues = [1.0]\n',
                           str(tmp_path / "s.toml"), check_protocol=False).axes[0].unit == unit


@pytest.mark.parametrize("table, expected", [
    ("", "all"), ('[output]\nkeep_snapshots = "all"', "all"),
    ('[output]\nkeep_snapshots = "last"', "last"), ("[output]\nkeep_snapshots = 5", 5),
    ("[output]\nkeep_snapshots = 1", "all"),
])
def test_keep_snapshots_choices(sweep_file, table, expected):
    text = sweep_file.read_text() + table + "\n"
    sweep = parse_sweep(text, sweep_file, check_protocol=False)
    assert sweep.output.keep_snapshots == expected


@pytest.mark.parametrize("table, message", [
    ('[output]\nkeep_snapshots = "first"', "'first' is not a choice"),
    ("[output]\nkeep_snapshots = 0", "0 is not a choice"),
    ("[output]\nkeep_snapshots = 2.5", "2.5 is not a choice"),
    ("[output]\nkeep_snapshot = 2", "did you mean 'keep_snapshots'"),
])
def test_bad_keep_snapshots_is_named_with_the_choices(sweep_file, table, message):
    with pytest.raises(SweepError) as err:
        parse_sweep(sweep_file.read_text() + table + "\n", sweep_file, check_protocol=False)
    text = str(err.value)
    assert message in text and "sweep.toml: [output]" in text
    assert "keep_snapshot" in text and ('"last"' in text or "did you mean" in text)


def _timed_sweep(tmp_path, measure: str, output: str = "", axis: str = "") -> str:
    """A sweep of the tiny protocol: outputs every 2 hbar/mu up to 10 (frames 0, 2, ..., 10)."""
    from tiny_protocol import tiny_protocol_text

    (tmp_path / "tiny.toml").write_text(tiny_protocol_text(duration=10.0, output_interval=2.0))
    axis = axis or 'key = "beams.0.path.speed_c"\nvalues = [0.4, 0.6]'
    return (f'base = "tiny.toml"\n[[axes]]\n{axis}\n[measure]\n{measure}\n'
            + (f"[output]\n{output}\n" if output else ""))


@pytest.mark.parametrize("measure, output", [
    ("window_tau = [4.0, 10.0]", ""), ("window = [3.0, 5.0]", "keep_snapshots = 2"),
    ("at_time = 6.0", "keep_snapshots = 3"), ("at_time = 9.5", 'keep_snapshots = "last"'),
    ("window = [0.0, 10.0]", 'keep_snapshots = "last"'), ("at_time_tau = 0", ""),
])
def test_measure_times_inside_the_runs_are_accepted(tmp_path, measure, output):
    src = tmp_path / "s.toml"
    src.write_text(_timed_sweep(tmp_path, measure, output))
    assert load_sweep(src).measure is not None


@pytest.mark.parametrize("measure, output, words", [
    ("window_tau = [8.0, 14.0]", "", ["[measure] window_tau", "not inside the run",
                                      "0 .. 10 tau", "t1 <= 10 tau"]),
    ("window = [-1.0, 1.0]", "", ["[measure] window", "not inside"]),
    ("window = [2.5, 3.5]", "", ["no frame in the window [2.5, 3.5] tau", "every 2 tau"]),
    ("window = [0.5, 6.0]", 'keep_snapshots = "last"',
     ["no kept frame", "keeps frames at 10 tau"]),
    ("window = [1.0, 5.0]", "keep_snapshots = 3", ["no kept frame", "0, 6, 10"]),
    ("at_time = 12.0", "", ["[measure] at_time", "outside the run", "at_time <= 10 tau"]),
    ("at_time = 4.0", 'keep_snapshots = "last"', ["not a kept frame", "nearest is 10 tau"]),
])
def test_measure_times_outside_the_runs_are_refused_before_running(tmp_path, measure, output,
                                                                   words):
    src = tmp_path / "s.toml"
    src.write_text(_timed_sweep(tmp_path, measure, output))
    with pytest.raises(SweepError) as err:
        load_sweep(src)
    text = str(err.value)
    assert "s.toml" in text and "accepted:" in text
    for w in words:
        assert w in text, (w, text)


def test_a_swept_duration_is_checked_point_by_point(tmp_path):
    src = tmp_path / "s.toml"
    src.write_text(_timed_sweep(tmp_path, "window_tau = [6.0, 8.0]",
                                axis='key = "evolution.duration_tau"\nvalues = [10.0, 4.0]'))
    with pytest.raises(SweepError) as err:
        load_sweep(src)
    text = str(err.value)
    assert "point p001 (evolution.duration_tau=4.0)" in text and "0 .. 4 tau" in text


def test_the_command_line_refuses_a_bad_window_before_any_point_runs(tmp_path, capsys):
    from gpe.cli.main import main

    src = tmp_path / "s.toml"
    src.write_text(_timed_sweep(tmp_path, "window_tau = [20.0, 30.0]"))
    out = tmp_path / "out"
    assert main(["sweep", str(src), "-o", str(out)]) == 2
    assert "window_tau" in capsys.readouterr().err and not out.exists()
