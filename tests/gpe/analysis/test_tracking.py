"""Tests of gpe.analysis.tracking: linking vortices across frames, annihilation and creation events.

The frames are synthetic fields (tests/vortex_fields.py) that vanish exactly at the imprinted
centres, moved along known paths, so every true identity and event time is known.
"""

import numpy as np
import pytest
from vortex_fields import axis, imprint, random_configuration

from gpe.analysis.tracking import ANNIHILATION, CREATION, find_events, track_vortices
from gpe.analysis.vortices import VORTEX_DTYPE, detect_frames
from gpe.errors import VorthermError


def moving_frames(X, Y, times, centres_fn, signs):
    return [imprint(X, Y, centres_fn(t), signs) for t in times]


def test_moving_dipole_keeps_its_two_tracks():
    """A dipole of separation d moving at 1/d (Saffman 1992; speed only sets the scene)."""
    n, length = 96, 48.0
    x = axis(n, length)
    X, Y = np.meshgrid(x, x, indexing="xy")
    d = 4.0
    times = np.arange(0.0, 60.0, 4.0)
    centres = lambda t: np.array([[-15 + t / d, d / 2], [-15 + t / d, -d / 2]])  # noqa: E731
    table = detect_frames(moving_frames(X, Y, times, centres, [1, -1]), x, x, times)
    tracked = track_vortices(table, times)
    assert np.unique(tracked["track"]).size == 2
    for tr in np.unique(tracked["track"]):
        rows = tracked[tracked["track"] == tr]
        assert rows.size == times.size
        assert np.unique(rows["sign"]).size == 1
    assert find_events(tracked, times).size == 0


def test_tracking_recovers_identities_of_a_crowd(rng):
    """30 vortices each displaced by up to 0.4 xi per frame keep their identities."""
    n, length = 128, 64.0
    x = axis(n, length)
    X, Y = np.meshgrid(x, x, indexing="xy")
    positions, signs = random_configuration(rng, 30, 22.0, 4.0)
    steps = rng.uniform(-0.28, 0.28, (6,) + positions.shape)
    path = positions + np.concatenate([np.zeros((1,) + positions.shape), np.cumsum(steps, 0)])
    times = np.arange(path.shape[0]) * 0.5
    table = detect_frames([imprint(X, Y, p, signs) for p in path], x, x, times)
    tracked = track_vortices(table, times)
    assert np.unique(tracked["track"]).size == len(positions)
    for tr in np.unique(tracked["track"]):
        rows = tracked[tracked["track"] == tr]
        start = np.argmin(np.hypot(*(path[0] - [rows["x"][0], rows["y"][0]]).T))
        truth = path[rows["frame"], start]
        assert np.hypot(rows["x"] - truth[:, 0], rows["y"] - truth[:, 1]).max() < 0.05


def test_annihilating_pair_gives_one_event_at_the_right_time():
    """A +- pair approaching at constant rate with zero separation at t_a = 13.3, then gone:
    one annihilation, between the frames that bracket t_a, near (0, 0). The linear approach
    makes the extrapolated time exact up to the detection error. [exact for the synthetic
    motion]"""
    n, length = 96, 48.0
    x = axis(n, length)
    X, Y = np.meshgrid(x, x, indexing="xy")
    t_a, rate = 13.3, 0.5
    times = np.arange(0.0, 20.0, 2.0)
    frames = []
    for t in times:
        sep = rate * (t_a - t)
        frames.append(imprint(X, Y, [[2.0, sep / 2 + 1.0], [2.0, -sep / 2 + 1.0]], [1, -1])
                      if sep > 0 else np.ones_like(X, dtype=complex))
    table = detect_frames(frames, x, x, times)
    tracked = track_vortices(table, times)
    events = find_events(tracked, times)
    assert events.size == 1
    ev = events[0]
    assert ev["kind"] == ANNIHILATION
    assert times[ev["frame_before"]] < t_a < times[ev["frame_after"]]
    # last seen 0.65 xi apart on a dx = 0.5 xi grid, where each zero is placed to ~0.03 xi;
    # through the approach rate 0.5 that is ~0.1 in time: allow 0.15 (7.5% of the interval)
    assert ev["t"] == pytest.approx(t_a, abs=0.15)
    assert ev["x"] == pytest.approx(2.0, abs=0.05) and ev["y"] == pytest.approx(1.0, abs=0.05)

    # the same film backwards is a creation at the mirrored time
    rev_times = times[-1] - times[::-1]
    rev = track_vortices(detect_frames(frames[::-1], x, x, rev_times), rev_times)
    created = find_events(rev, rev_times)
    assert created.size == 1 and created[0]["kind"] == CREATION
    assert created[0]["t"] == pytest.approx(times[-1] - t_a, abs=0.15)


def test_vortex_leaving_is_not_an_event():
    n, length = 64, 32.0
    x = axis(n, length)
    X, Y = np.meshgrid(x, x, indexing="xy")
    times = np.arange(5.0)
    frames = [imprint(X, Y, [[0.0, 0.0], [8.0, 0.0]], [1, -1]) for _ in range(3)]
    frames += [imprint(X, Y, [[0.0, 0.0]], [1])] * 2      # the - vortex disappears alone
    tracked = track_vortices(detect_frames(frames, x, x, times), times)
    assert find_events(tracked, times, pair_distance=4.0).size == 0


def test_tracking_table_errors():
    with pytest.raises(VorthermError, match="columns"):
        track_vortices(np.zeros(3))
    table = np.zeros(3, dtype=VORTEX_DTYPE)
    table["frame"] = [0, 1, 1]
    table["track"] = -1
    with pytest.raises(VorthermError, match="track_vortices first"):
        find_events(table)
