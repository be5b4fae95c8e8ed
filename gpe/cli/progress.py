"""Progress of long work: a tqdm bar where someone watches, log lines where nobody does.

The numerics only call back (``progress(done, total)`` from the ground state and the
density-of-states builds, a ``RunProgress`` from a run, a sweep ``Progress``); this module turns
those calls into a ``tqdm.auto`` bar -- a widget in a notebook, a bar on a terminal -- and into
INFO lines of the logger ``gpe.cli.progress`` every tenth of the work (and at least once a
minute), which is what a log file or a redirected standard error receives. The command line
(gpe/cli/main.py) decides where those lines go; a notebook may use these callbacks too::

    from gpe.cli.progress import counter, dos_progress, run_progress
    simulate(protocol, "run.h5", progress=run_progress(), ground_state_progress=counter("ground state", "steps"))
    temperature_of_run("run.h5", progress=dos_progress())
"""

from __future__ import annotations

import logging
import math
import sys
import time
from typing import Any, Callable

from tqdm import autonotebook, std

logger = logging.getLogger(__name__)

#: Where bars are drawn and whether they are: set by the command line (-q, --log-file).
SETTINGS = {"bars": None}   # None: when standard error is a terminal or in a notebook


def _format_seconds(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "--:--"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours:d}:{minutes:02d}:{secs:02d}" if hours else f"{minutes:02d}:{secs:02d}"


def in_notebook() -> bool:
    """True inside a Jupyter kernel: ``tqdm.auto`` draws a widget there (with ipywidgets
    installed; without, the text bar, which a notebook shows as well)."""
    if autonotebook.tqdm is not std.tqdm:
        return True
    ipython = sys.modules.get("IPython")
    try:
        shell = ipython.get_ipython() if ipython is not None else None
        return shell is not None and "IPKernelApp" in shell.config
    except Exception:  # noqa: BLE001 -- any odd shell is simply not a notebook
        return False


def bars_enabled(stream: Any = None) -> bool:
    """Whether a bar is drawn: the command line's choice, else in a notebook or on a terminal."""
    if SETTINGS["bars"] is not None:
        return bool(SETTINGS["bars"])
    stream = sys.stderr if stream is None else stream
    return in_notebook() or bool(getattr(stream, "isatty", lambda: False)())


class Counter:
    """A callback ``(done, total)`` drawing a tqdm bar and logging a line every tenth.

    The bar opens at the first call and closes itself when ``done >= total`` (or on
    :meth:`close`); ``total`` may change between calls (a ground state that converges early
    ends with ``done == total``). ``postfix`` text is shown after the bar and in the lines.

    Parameters
    ----------
    label : text before the bar and at the start of every log line.
    unit : what ``done`` counts ("steps", "points", "sweeps", "ms").
    log_every : fraction of the work between two log lines.
    log_seconds : at most this long between two log lines.
    stream : where the bar is drawn (standard error by default).

    Units: ``log_seconds`` in seconds of wall-clock time.
    """

    def __init__(self, label: str, unit: str = "", *, log_every: float = 0.1,
                 log_seconds: float = 60.0, stream: Any = None) -> None:
        self.label, self.unit = label, unit
        self.log_every, self.log_seconds = float(log_every), float(log_seconds)
        self._stream = stream
        self._bar = None
        self._start = None
        self._next_fraction = 0.0
        self._last_log = 0.0
        self.done, self.total = 0.0, 0.0
        self.closed = False

    def __call__(self, done: float, total: float, postfix: str = "") -> None:
        if self.closed:
            return
        now = time.monotonic()
        if self._start is None:
            self._start = self._last_log = now
            if bars_enabled(self._stream):
                self._bar = autonotebook.tqdm(
                    total=float(total), desc=self.label, unit=f" {self.unit}" if self.unit else "it",
                    file=self._stream if self._stream is not None else None, leave=True,
                    dynamic_ncols=True, disable=False, bar_format=_BAR_FORMAT)
        self.done, self.total = float(done), float(total)
        if self._bar is not None:
            if self._bar.total != self.total:
                self._bar.total = self.total
            if postfix:
                self._bar.set_postfix_str(postfix, refresh=False)
            self._bar.update(self.done - self._bar.n)
        fraction = self.done / self.total if self.total > 0 else 1.0
        finished = self.total > 0 and self.done >= self.total
        if finished or fraction >= self._next_fraction or now - self._last_log >= self.log_seconds:
            self._log(now, fraction, postfix)
            while self._next_fraction <= fraction:
                self._next_fraction += self.log_every
        if finished:
            self.close()

    def _log(self, now: float, fraction: float, postfix: str) -> None:
        self._last_log = now
        elapsed = now - self._start
        eta = elapsed * (1 - fraction) / fraction if fraction > 0 else math.inf
        logger.info("%s: %.6g/%.6g %s (%.0f%%), elapsed %s, ETA %s%s", self.label, self.done,
                    self.total, self.unit, 100 * min(fraction, 1.0), _format_seconds(elapsed),
                    _format_seconds(eta), f", {postfix}" if postfix else "")

    def close(self) -> None:
        """End the bar (idempotent)."""
        if self.closed:
            return
        self.closed = True
        if self._bar is not None:
            self._bar.close()

    def __enter__(self) -> "Counter":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


_BAR_FORMAT = "{desc}: {percentage:3.0f}%|{bar}| {n:.6g}/{total:.6g}{unit} [{elapsed}<{remaining}{postfix}]"


def counter(label: str, unit: str = "", **options) -> Counter:
    """A ``(done, total)`` progress callback (ground state, density-of-states builds)."""
    return Counter(label, unit, **options)


def dos_progress(**options) -> Callable[[float, float], None]:
    """A callback for the density-of-states builds of thermometry (``progress=`` of
    gpe.run.thermometry.temperature_of_run and friends, thermo.dos.build.build): one bar
    "density of states" in Monte Carlo sweeps per build, opened at the build's first report
    and closed at its last (done == total); a cached density of states shows none. Log lines
    at the start and the end of a build and once a minute in between (a run's frames need
    dozens of builds of a second or so each), unless ``log_every`` says otherwise."""
    options.setdefault("log_every", 1.0)
    bar: dict[str, Counter] = {}

    def draw(done: float, total: float) -> None:
        current = bar.get("bar")
        if current is not None and not current.closed and done < current.done:
            current.close()             # a build that ended without its last report
        if current is None or current.closed:
            bar["bar"] = current = Counter("density of states", "sweeps", **options)
        current(done, total)

    return draw


def run_progress(**options) -> Callable[[Any], None]:
    """A callback for ``gpe.run.simulate.simulate(progress=...)``: simulated time of the run,
    steps per second and the vortex numbers of the last frame; a second bar ("points") for the
    point-vortex frames after a hand-off."""
    bar: dict[str, Counter] = {}

    def draw(p) -> None:
        phase = p.phase
        if phase not in bar:
            bar[phase] = Counter("run" if phase == "gpe" else phase, p.time_unit, **options)
        rate = "" if phase != "gpe" else f"{p.steps_per_s:,.0f} steps/s, "
        bar[phase](p.t, p.t_end, f"{rate}N+={p.n_plus} N-={p.n_minus}")

    return draw


def sweep_progress(**options) -> Counter:
    """A callback for ``gpe.sweep.execute.run_sweep(progress=...)``: points finished (done,
    skipped or failed) of all, with the running, failed and skipped counts; call ``close()``
    when the sweep returns (an interrupted sweep never reaches its total)."""
    bar = Counter("sweep", "points", **options)

    def draw(p) -> None:
        bar(p.done + p.skipped + p.failed, p.total,
            f"running {p.running}, failed {p.failed}, skipped {p.skipped}")

    return _SweepCounter(bar, draw)


class _SweepCounter:
    def __init__(self, bar: Counter, draw: Callable) -> None:
        self.bar, self._draw = bar, draw

    def __call__(self, p) -> None:
        self._draw(p)

    def close(self) -> None:
        self.bar.close()
