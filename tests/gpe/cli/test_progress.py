"""Tests of gpe.cli.progress: the text progress bar (what it draws, where and when)."""

import io
import math
import sys

import pytest

from gpe.cli import progress
from gpe.cli.progress import ProgressBar, _format_seconds


class FakeClock:
    """Stands in for time.perf_counter, so elapsed time and ETA are known exactly."""

    def __init__(self, now: float = 100.0) -> None:
        self.now = now

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock(monkeypatch):
    fake = FakeClock()
    monkeypatch.setattr(progress.time, "perf_counter", fake)
    return fake


def test_final_line_shows_done_total_percentage_and_bar(clock):
    out = io.StringIO()
    bar = ProgressBar(200.0, label="run", unit="tau", stream=out, width=20)
    bar.update(50.0, extra="3 vortices")
    bar.close()
    text = out.getvalue()
    assert text.endswith("\n") and text.count("\n") == 1
    line = text.rstrip("\n")
    assert line.startswith("run [")
    assert "50/200 tau" in line
    assert " 25.0%" in line                       # 50 / 200
    assert "[" + "#" * 5 + "." * 15 + "]" in line  # a quarter of 20 cells filled
    assert line.endswith("  3 vortices")


def test_done_is_clamped_to_the_bar(clock):
    out = io.StringIO()
    bar = ProgressBar(10.0, stream=out, width=10)
    bar.update(12.0)          # overshoot (last step past the end) still reads as complete
    bar.close()
    assert "100.0%" in out.getvalue() and "#" * 10 in out.getvalue()
    empty = io.StringIO()
    nothing = ProgressBar(0.0, stream=empty, width=10)   # no work at all: 0 %, no division
    nothing.close()
    assert "  0.0%" in empty.getvalue() and "." * 10 in empty.getvalue()


def test_non_interactive_stream_gets_only_the_final_line(clock):
    out = io.StringIO()   # not a terminal: isatty() is False
    bar = ProgressBar(100.0, unit="ms", stream=out, min_interval=0.0)
    assert not bar.interactive
    for done in (10.0, 20.0, 30.0):
        clock.now += 1.0
        bar.update(done)
    assert out.getvalue() == ""
    bar.close()
    assert "\r" not in out.getvalue()
    assert out.getvalue().count("\n") == 1 and "30/100 ms" in out.getvalue()


def test_interactive_stream_redraws_in_place_at_most_every_min_interval(clock):
    out = io.StringIO()
    bar = ProgressBar(100.0, stream=out, min_interval=0.5, force=True)
    assert bar.interactive
    clock.now += 1.0
    bar.update(10.0)          # drawn
    clock.now += 0.1
    bar.update(20.0)          # too soon after the last draw: skipped
    clock.now += 0.5
    bar.update(30.0)          # drawn
    bar.close()               # always drawn
    draws = out.getvalue().split("\r")[1:]
    assert len(draws) == 3
    assert "10/100" in draws[0] and "30/100" in draws[1] and draws[2].endswith("\n")
    assert not any("20/100" in d for d in draws)


def test_elapsed_and_eta_follow_the_linear_extrapolation(clock):
    # ETA = elapsed * (1 - f) / f for the fraction f done: 10 s for a quarter -> 30 s left
    out = io.StringIO()
    bar = ProgressBar(200.0, stream=out)
    clock.now += 10.0
    bar.update(50.0)
    bar.close()
    assert "elapsed 00:10  ETA 00:30" in out.getvalue()
    # past an hour the hours are shown: 1 h for half the work -> 1 h left
    out = io.StringIO()
    bar = ProgressBar(2.0, stream=out)
    clock.now += 3600.0
    bar.update(1.0)
    bar.close()
    assert "elapsed 1:00:00  ETA 1:00:00" in out.getvalue()


def test_eta_is_unknown_before_any_progress(clock):
    out = io.StringIO()
    bar = ProgressBar(5.0, stream=out)
    clock.now += 7.0
    bar.close()
    assert "elapsed 00:07  ETA --:--" in out.getvalue()


@pytest.mark.parametrize("seconds, text", [
    (0.0, "00:00"), (59.4, "00:59"), (59.6, "01:00"), (61.0, "01:01"),
    (3599.0, "59:59"), (3600.0, "1:00:00"), (3725.0, "1:02:05"), (36000.0, "10:00:00"),
    (math.nan, "--:--"), (math.inf, "--:--"),
])
def test_seconds_format(seconds, text):
    assert _format_seconds(seconds) == text


def test_default_stream_is_the_standard_error_of_the_moment(clock, monkeypatch):
    bar = ProgressBar(4.0, label="sweep", unit="points")
    later = io.StringIO()
    monkeypatch.setattr(sys, "stderr", later)   # e.g. replaced by a test harness after creation
    bar.update(1.0)
    bar.close()
    assert "sweep [" in later.getvalue() and "1/4 points" in later.getvalue()
