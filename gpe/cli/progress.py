"""A plain text progress bar for long work, drawn on standard error.

Kept free of third-party dependencies; it redraws at most a few times per second so that it
costs nothing next to the numerics.
"""

from __future__ import annotations

import sys
import time
from typing import Callable, TextIO


def _format_seconds(seconds: float) -> str:
    if seconds != seconds or seconds == float("inf"):  # NaN or unknown
        return "--:--"
    seconds = int(round(seconds))
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours:d}:{minutes:02d}:{secs:02d}" if hours else f"{minutes:02d}:{secs:02d}"


class ProgressBar:
    """Progress towards a known total, with rate and estimated time to completion.

    Parameters
    ----------
    total : float
        The amount of work at completion (for a simulation: the final simulated time).
    label : str
        Text in front of the bar.
    unit : str
        How ``done`` is printed (for a simulation: the time unit).
    stream : TextIO, optional
        Where to draw; standard error by default. Nothing is drawn when it is not a terminal
        and ``force`` is false, except a final line.
    """

    def __init__(self, total: float, label: str = "", unit: str = "", stream: TextIO | None = None,
                 width: int = 28, min_interval: float = 0.2, force: bool = False) -> None:
        self.total = float(total)
        self.label = label
        self.unit = unit
        self._stream = stream
        self.width = width
        self.min_interval = min_interval
        self.interactive = force or getattr(self.stream, "isatty", lambda: False)()

        self._start = time.perf_counter()
        self._last_draw = 0.0
        self._done = 0.0
        self._extra = ""

    @property
    def stream(self) -> TextIO:
        """The stream drawn on: the one given, or the standard error of the moment."""
        return self._stream if self._stream is not None else sys.stderr

    def update(self, done: float, extra: str = "") -> None:
        """Record progress ``done`` (same unit as ``total``) and redraw if due."""
        self._done = float(done)
        self._extra = extra
        now = time.perf_counter()
        if self.interactive and now - self._last_draw >= self.min_interval:
            self._last_draw = now
            self.stream.write("\r" + self._line(now))
            self.stream.flush()

    def _line(self, now: float) -> str:
        frac = 0.0 if self.total <= 0 else min(max(self._done / self.total, 0.0), 1.0)
        filled = int(round(frac * self.width))
        elapsed = now - self._start
        eta = elapsed * (1 - frac) / frac if frac > 0 else float("nan")
        bar = "#" * filled + "." * (self.width - filled)
        text = (f"{self.label} [{bar}] {self._done:.4g}/{self.total:.4g} {self.unit} "
                f"{100 * frac:5.1f}%  elapsed {_format_seconds(elapsed)}  ETA {_format_seconds(eta)}")
        if self._extra:
            text += "  " + self._extra
        return text

    def close(self) -> None:
        """Draw the final state and end the line."""
        self.stream.write(("\r" if self.interactive else "") + self._line(time.perf_counter()) + "\n")
        self.stream.flush()


def terminal_progress_factory() -> Callable[[object], None]:
    """A callback for :func:`gpe.run.simulate.simulate` that draws a progress bar on standard error
    (it receives a ``gpe.run.simulate.RunProgress`` after every output)."""
    state: dict = {}

    def draw(p) -> None:
        if "bar" not in state:
            state["bar"] = ProgressBar(p.t_end, label="run", unit=p.time_unit)
        bar = state["bar"]
        bar.update(p.t, extra=f"{p.steps_per_s:,.0f} steps/s  N+={p.n_plus} N-={p.n_minus}")
        if p.t >= p.t_end * (1 - 1e-12):
            bar.close()

    return draw
