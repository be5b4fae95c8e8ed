"""Tests of gpe.cli.progress: the tqdm bar where someone watches, log lines where nobody does."""

import io
import logging
import math

import pytest

from gpe.cli import progress
from gpe.cli.progress import counter, dos_progress, run_progress, sweep_progress
from gpe.run.simulate import RunProgress
from gpe.sweep.execute import Progress


class FakeClock:
    """Stands in for time.monotonic, so elapsed times and ETAs are known exactly."""

    def __init__(self, now: float = 100.0) -> None:
        self.now = now

    def __call__(self) -> float:
        return self.now


@pytest.fixture
def clock(monkeypatch):
    fake = FakeClock()
    monkeypatch.setattr(progress.time, "monotonic", fake)
    return fake


@pytest.fixture
def lines(caplog):
    caplog.set_level(logging.INFO, logger=progress.logger.name)
    return lambda: [r.getMessage() for r in caplog.records if r.name == progress.logger.name]


@pytest.fixture
def no_bars(monkeypatch):
    monkeypatch.setitem(progress.SETTINGS, "bars", False)


def test_a_line_every_tenth_of_the_work(clock, lines, no_bars):
    c = counter("ground state", "steps")
    for done in range(0, 101):
        clock.now += 1.0
        c(done, 100)
    got = lines()
    assert len(got) == 11                       # 0 %, 10 %, ..., 100 %
    assert got[5].startswith("ground state: 50/100 steps (50%)")
    # ETA = elapsed * (1 - f) / f: 50 s for half the work -> 50 s left
    assert "elapsed 00:50, ETA 00:50" in got[5]
    assert got[-1].startswith("ground state: 100/100 steps (100%)") and c.closed
    c(100, 100)                                 # closed: later calls change nothing
    assert len(lines()) == 11


def test_a_line_at_least_every_log_seconds(clock, lines, no_bars):
    c = counter("run", "ms", log_seconds=60.0)
    c(0.0, 1000.0)
    clock.now += 30.0
    c(1.0, 1000.0)        # not yet a tenth, not yet a minute
    clock.now += 31.0
    c(2.0, 1000.0)        # a minute since the last line
    got = lines()
    assert len(got) == 2 and got[1].startswith("run: 2/1000 ms (0%)")


def test_a_total_that_shrinks_to_done_ends_the_bar_full(clock, lines, no_bars):
    # the ground state: (steps, max_steps) until it converges, then (steps, steps)
    c = counter("ground state", "steps")
    c(50, 200_000)
    c(100, 200_000)
    c(150, 150)
    assert c.closed and lines()[-1].startswith("ground state: 150/150 steps (100%)")


def test_the_bar_is_drawn_on_the_stream_when_enabled(monkeypatch, clock):
    monkeypatch.setitem(progress.SETTINGS, "bars", True)
    out = io.StringIO()
    c = counter("ground state", "steps", stream=out)
    c(10, 40, "x1")
    c(40, 40, "x2")
    text = out.getvalue()
    assert "ground state: 100%" in text and "40/40 steps" in text and "x2" in text
    assert text.endswith("\n")


def test_no_bar_unless_a_terminal_or_a_notebook(monkeypatch):
    monkeypatch.setitem(progress.SETTINGS, "bars", None)
    assert not progress.in_notebook()          # pytest is not a Jupyter kernel
    assert not progress.bars_enabled(io.StringIO())
    tty = io.StringIO()
    tty.isatty = lambda: True
    assert progress.bars_enabled(tty)
    monkeypatch.setitem(progress.SETTINGS, "bars", False)   # -q
    assert not progress.bars_enabled(tty)


def test_run_progress_shows_time_rate_and_vortex_numbers(clock, lines, no_bars):
    draw = run_progress()
    for t in (2.0, 4.0, 6.0, 8.0, 10.0):
        clock.now += 1.0
        draw(RunProgress(t, 10.0, int(20 * t), 123.0, 2, 1, "ms"))
    got = lines()
    assert got[0].startswith("run: 2/10 ms (20%)") and got[0].endswith("123 steps/s, N+=2 N-=1")
    assert got[-1].startswith("run: 10/10 ms (100%)")


def test_sweep_progress_counts_every_finished_point(clock, lines, no_bars):
    bar = sweep_progress()
    bar(Progress(total=4, done=0, skipped=1, running=2, failed=0, pending=1, elapsed_s=0.0,
                 eta_s=None))
    bar(Progress(total=4, done=2, skipped=1, running=0, failed=1, pending=0, elapsed_s=3.0,
                 eta_s=0.0))
    got = lines()
    assert got[0].startswith("sweep: 1/4 points (25%)") and "skipped 1" in got[0]
    assert got[-1].startswith("sweep: 4/4 points (100%)") and "failed 1" in got[-1]
    bar.close()   # idempotent after a full bar


@pytest.mark.parametrize("seconds, text", [
    (0.0, "00:00"), (59.4, "00:59"), (59.6, "01:00"), (3599.0, "59:59"), (3600.0, "1:00:00"),
    (3725.0, "1:02:05"), (math.nan, "--:--"), (math.inf, "--:--"),
])
def test_seconds_format(seconds, text):
    assert progress._format_seconds(seconds) == text


def test_dos_progress_opens_one_bar_per_build(clock, lines, no_bars):
    draw = dos_progress()
    for done in (0, 50, 100):                  # a build of 100 sweeps
        clock.now += 1.0
        draw(done, 100)
    for done in (0, 100, 200):                 # the next build (another vortex number)
        clock.now += 1.0
        draw(done, 200)
    got = lines()
    # a line where each build starts and ends (log_every = 1 by default here)
    assert [g.split(" (")[0] for g in got] == [
        "density of states: 0/100 sweeps", "density of states: 100/100 sweeps",
        "density of states: 0/200 sweeps", "density of states: 200/200 sweeps"]


def test_dos_progress_logs_a_long_build_once_a_minute(clock, lines, no_bars):
    draw = dos_progress()
    draw(0, 1000)
    clock.now += 61.0
    draw(100, 1000)                            # a tenth, but a minute since the last line
    clock.now += 1.0
    draw(200, 1000)
    assert [g.split(" (")[0] for g in lines()] == [
        "density of states: 0/1000 sweeps", "density of states: 100/1000 sweeps"]


def test_dos_progress_starts_afresh_after_a_build_that_did_not_finish(clock, lines, no_bars):
    draw = dos_progress(log_every=1.0)
    draw(0, 100)
    draw(60, 100)                              # the build stops here (an error, a Ctrl-C)
    draw(0, 80)                                # the next build: a new bar from zero
    draw(80, 80)
    got = lines()
    assert got[-1].startswith("density of states: 80/80 sweeps (100%)")
    assert sum(g.startswith("density of states: 0/") for g in got) == 2


def test_dos_progress_draws_a_bar_of_sweeps(monkeypatch, clock):
    monkeypatch.setitem(progress.SETTINGS, "bars", True)
    out = io.StringIO()
    draw = dos_progress(stream=out)
    draw(300, 1200)
    draw(1200, 1200)
    text = out.getvalue()
    assert "density of states: 100%" in text and "1200/1200 sweeps" in text


def test_vortherm_temperature_reports_its_density_of_states_builds(tiny_run, tmp_path, capsys,
                                                                   monkeypatch):
    from gpe.cli.main import main

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    args = ["temperature", str(tiny_run), "--no-systematics", "--csv", str(tmp_path / "t.csv")]
    assert main(args) == 0
    err = capsys.readouterr().err           # standard error is no terminal here: lines
    assert "density of states: 0/" in err and "sweeps (100%)" in err
    assert main([*args, "--force"]) == 0    # the same vortex numbers: all cached
    assert "density of states" not in capsys.readouterr().err
