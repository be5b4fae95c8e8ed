"""The hand-off from the GPE to point-vortex dynamics (gpe/run/points.py, gpe/run/pointstore.py).

The tiny protocol of tests/helpers/tiny_protocol.py (64^2 grid, disk of radius 20 xi) runs its
GPE part; the point vortices continue to ``points_until``.
"""

import logging
import shutil

import numpy as np
import pytest
from tiny_protocol import healing_header, tiny_protocol_text

from gpe.errors import ProtocolError, SimulationError
from gpe.figures import standard
from gpe.run import products, reading
from gpe.run import simulate as pipeline
from gpe.run.frames import RunSeries
from gpe.run.runfile import RunFile
from gpe.setup.protocol import parse_protocol
from gpe.sweep.thinning import thin_snapshots

HANDOFF = "points_until_tau = 210.0\npoints_output_interval_tau = 20.0\n"
TINY_POINTS = tiny_protocol_text(duration=10.0, output_interval=2.0, rows=3, speed=0.6).replace(
    "seed = 3\n", "seed = 3\n" + HANDOFF)


def _protocol(text=TINY_POINTS, source="tiny.toml"):
    return parse_protocol(text, source=source)


@pytest.fixture(scope="module")
def handoff_run(tmp_path_factory):
    """The tiny protocol with a hand-off, simulated once: (run file, progress reports)."""
    told = []
    out = pipeline.simulate(_protocol(), tmp_path_factory.mktemp("handoff") / "p.h5",
                            progress=told.append)
    return out, told


def test_handoff_continues_the_last_frame_on_one_time_line(handoff_run):
    out, told = handoff_run
    # the progress callback hears of every point frame too, marked as such
    assert [p.t for p in told if p.phase == "points"] == [30.0 + 20.0 * k for k in range(10)]
    with RunFile.open(out) as run:
        n_gpe, n_points = run.n_frames, run.n_point_frames
        times, table = run.timeline(), run.read_vortices()
        last_gpe = table[table["frame"] == n_gpe - 1]
    assert (n_gpe, n_points) == (6, 10)
    np.testing.assert_allclose(times, np.r_[np.arange(6) * 2.0, 10.0 + 20.0 * np.arange(1, 11)])
    # the first point frame starts from the last GPE frame's vortices: same signs, and each
    # vortex has moved by less than 20 hbar/mu x the speed of sound (c = 1 in healing units)
    first = table[table["frame"] == n_gpe]
    assert sorted(first["sign"]) == sorted(last_gpe["sign"]) and len(first) > 0
    d = np.hypot(first["x"][:, None] - last_gpe["x"][None], first["y"][:, None] - last_gpe["y"][None])
    assert np.all(d.min(axis=1) < 20.0)
    # every vortex stays inside the trap (disk radius 20 xi, centred)
    assert np.all(np.hypot(table["x"], table["y"]) < 20.0)
    # the thermometry reads the point frames: the series holds all 16 times, and tracks link
    # the point frames to the GPE ones
    series = RunSeries.read(out)
    assert len(series.times) == 16 and series.frames(default="last") == [15]
    assert set(first["track"]) <= set(last_gpe["track"])
    assert "point-vortex dynamics" in reading.summary_text(out)


@pytest.mark.slow
def test_figures_redetection_and_thinning_keep_the_point_frames(handoff_run, tmp_path):
    out = tmp_path / "copy.h5"
    shutil.copy(handoff_run[0], out)
    with RunFile.open(out) as run:
        times, table = run.timeline(), run.read_vortices()
    # the standard figures draw the vortex counts over the whole time line
    names = [p.name for p in standard.make_figures(out, tmp_path / "figures")]
    assert "copy_vortex_counts.png" in names
    # re-detecting the snapshots (stored) and thinning them keep the point frames as they are
    products.redetect(out, store=True, csv_path=tmp_path / "v.csv")
    thin_snapshots(out, "last")
    with RunFile.open(out) as run:
        assert (run.n_frames, run.n_point_frames) == (1, 10)
        after = run.read_vortices()
        np.testing.assert_array_equal(run.timeline(), np.r_[times[5], times[6:]])
    for k in range(10):
        old, new = table[table["frame"] == 6 + k], after[after["frame"] == 1 + k]
        np.testing.assert_array_equal(np.sort(new[["x", "y"]]), np.sort(old[["x", "y"]]))


class _Stop(Exception):
    pass


def test_a_crash_in_the_point_part_resumes_to_the_same_table(tmp_path, monkeypatch, caplog):
    """Bitwise: the resumed hand-off continues from the stored integrator state."""
    whole = pipeline.simulate(_protocol(), tmp_path / "whole.h5")
    with RunFile.open(whole) as run:
        expected = run.read_vortices()

    def stop_in_points(progress):            # after the 4th point frame and its state
        if progress.t >= 90.0 - 1e-9:
            raise _Stop

    part = tmp_path / "part.h5"
    with pytest.raises(_Stop):
        pipeline.simulate(_protocol(), part, progress=stop_in_points)
    assert not reading.is_complete(part)
    with RunFile.open(part) as run:
        assert run.n_point_frames == 4 and run.read_point_state()["frame"] == 4
    # a second crash between a point frame and its state (the frame must be recomputed)
    calls = {"n": 0}
    original = RunFile.write_point_state

    def fail_once(self, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 3:
            raise _Stop
        return original(self, *args, **kwargs)

    monkeypatch.setattr(RunFile, "write_point_state", fail_once)
    with pytest.raises(_Stop):
        pipeline.simulate(_protocol(), part, resume=True)
    monkeypatch.setattr(RunFile, "write_point_state", original)
    with caplog.at_level(logging.INFO, logger="gpe.run.points"):
        pipeline.simulate(_protocol(), part, resume=True)
    # 6 snapshots + 6 point frames with their state; the 7th (frame 12) lost its state: redone
    assert "resuming the point-vortex part at frame 12" in caplog.text
    with RunFile.open(part) as run:
        got = run.read_vortices()
        assert run.is_complete()
    np.testing.assert_array_equal(got, expected)


@pytest.mark.parametrize("extra, key", [
    ("points_until_tau = 8.0\n", "points_until_tau"),           # before the GPE part ends
    ("points_until_tau = 10.0\n", "points_until_tau"),          # at its end
    ("points_friction = 0.05\n", "points_friction"),            # without points_until
    ("points_until_tau = 50.0\npoints_friction = 1.5\n", "points_friction"),
])
def test_bad_handoff_keys_name_the_key(extra, key):
    text = tiny_protocol_text(duration=10.0, output_interval=2.0).replace("seed = 3\n",
                                                                          "seed = 3\n" + extra)
    with pytest.raises(ProtocolError, match=rf"\[evolution\] {key}: .*Accepted"):
        _protocol(text)


def test_a_trap_without_a_point_vortex_domain_fails_before_any_file(tmp_path):
    text = TINY_POINTS.replace('shape = "disk"\nradius_xi = 20.0',
                               'shape = "annulus"\ninner_radius_xi = 5.0\nouter_radius_xi = 20.0')
    with pytest.raises(SimulationError, match=r"\[evolution\] points_until: the annulus trap"):
        pipeline.simulate(_protocol(text), tmp_path / "a.h5")
    assert not list(tmp_path.iterdir())
    # a mask with a hole: its grid domain carries the hole's circulation, the dynamics does not
    c = (np.arange(81) - 40) * 0.5
    r = np.hypot(*np.meshgrid(c, c))
    np.save(tmp_path / "ring.npy", ((r <= 20.0) & (r >= 5.0)).astype(float))
    text = TINY_POINTS.replace('shape = "disk"\nradius_xi = 20.0',
                               'shape = "mask"\nfile = "ring.npy"\npixel_size_xi = 0.5')
    with pytest.raises(SimulationError, match=r"points_until: the mask trap cannot hand off.*"
                                              r"has a hole"):
        pipeline.simulate(parse_protocol(text, source="ring.toml", base_dir=tmp_path),
                          tmp_path / "r.h5")
    assert not (tmp_path / "r.h5").exists()


def _three_vortices(duration, interval, points=""):
    """Three well-separated imprinted vortices in the tiny disk, no beams, no damping."""
    return healing_header("three") + f"""[trap]
shape = "disk"
radius_xi = 20.0
[grid]
nx = 64
size_xi = 48.0
[ground_state]
dt_tau = 0.05
[[ground_state.imprint]]
x_xi = 8.0
y_xi = 0.0
sign = 1
[[ground_state.imprint]]
x_xi = -6.0
y_xi = 0.0
sign = 1
[[ground_state.imprint]]
x_xi = 0.0
y_xi = 11.0
sign = -1
[evolution]
duration_tau = {duration}
dt_tau = 0.05
output_interval_tau = {interval}
{points}"""


@pytest.mark.slow
def test_point_model_follows_the_gpe_for_50_ms(tmp_path):
    """Three vortices 6-11 xi from the centre of a 20 xi disk, 130 hbar/mu = 49.6 ms (87Rb at
    mu = 20 nK). The GPE runs the whole time; the hand-off runs 2.6 hbar/mu of GPE and then
    point vortices in the disk of radius R - 1 xi (gpe/run/gas.py). Over 50 ms the vortices
    travel 6-9 xi; the two agree to within 1 xi (the tolerance stated in
    docs/point-dynamics.md: the GPE positions wobble by ~0.5 xi about the point-model path,
    sound from the imprint; the grid spacing is 0.75 xi)."""
    gpe = pipeline.simulate(_protocol(_three_vortices(132.6, 2.6), "gpe.toml"), tmp_path / "g.h5")
    pts = pipeline.simulate(_protocol(_three_vortices(
        2.6, 2.6, "points_until_tau = 132.6\npoints_output_interval_tau = 26.0\npoints_friction = 0.0\n"),
        "pts.toml"), tmp_path / "p.h5")
    with RunFile.open(gpe) as run:
        g_times, g_table = run.timeline(), run.read_vortices()
    with RunFile.open(pts) as run:
        p_times, p_table = run.timeline(), run.read_vortices()
        assert run.n_point_frames == 5
    for fp, t in enumerate(p_times[2:], start=2):
        fg = int(np.argmin(np.abs(g_times - t)))
        assert abs(g_times[fg] - t) < 1e-9
        a, b = g_table[g_table["frame"] == fg], p_table[p_table["frame"] == fp]
        assert len(a) == len(b) == 3
        d = np.hypot(a["x"][:, None] - b["x"][None], a["y"][:, None] - b["y"][None])
        same_sign = a["sign"][:, None] == b["sign"][None]
        assert np.all(np.min(np.where(same_sign, d, np.inf), axis=1) < 1.0)
    # the vortices moved much more than the tolerance (followed along their tracks)
    start, end = p_table[p_table["frame"] == 0], p_table[p_table["frame"] == len(p_times) - 1]
    assert sorted(start["track"]) == sorted(end["track"])
    a, b = np.sort(start, order="track"), np.sort(end, order="track")
    assert np.min(np.hypot(a["x"] - b["x"], a["y"] - b["y"])) > 5.0
