"""Moving Gaussian beams: switch-on/off ramps, paths, rigid arrays and the BeamSet.

A beam is ``V0 exp(-2 r^2 / w^2)`` (``w`` the 1/e^2 intensity waist) with sin^2 switch-on/off
ramps, moving on a path (static, line, circle, polyline); a rigid array of beams moves with its
path point. :class:`BeamSet` expands every array into single beams and fills the solver's
preallocated amplitude and centre arrays in place at each step. The static traps live in the
gpe.field.traps package.

Units: lengths in xi, times in hbar/mu, energies in mu, speeds in c, angles in rad.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol as _TypingProtocol
from typing import Sequence

import numpy as np

from gpe.field.grid import Grid


# ------------------------------------------------------------------------------------------
# ramps and paths
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Ramp:
    """sin^2 switch-on at ``on_time`` over ``on_duration``; cos^2 switch-off at ``off_time``.

    ``off_time = None`` keeps the beam on. Durations of 0 give a sudden switch.

    Units: hbar/mu.
    """

    on_time: float = field(default=0.0, metadata={"dim": "time"})
    on_duration: float = field(default=0.0, metadata={"dim": "time"})
    off_time: float | None = field(default=None, metadata={"dim": "time"})
    off_duration: float = field(default=0.0, metadata={"dim": "time"})

    def factor(self, t):
        """Amplitude factor in [0, 1] at time(s) ``t``."""
        t = np.asarray(t, dtype=float)
        up = _ramp_up(t - self.on_time, self.on_duration)
        if self.off_time is None:
            return up
        return up * (1.0 - _ramp_up(t - self.off_time, self.off_duration))


def _ramp_up(s: np.ndarray, duration: float) -> np.ndarray:
    if duration <= 0:
        return (s >= 0).astype(float)
    return np.sin(0.5 * np.pi * np.clip(s / duration, 0.0, 1.0)) ** 2


class BeamPath(_TypingProtocol):
    """What every path provides: ``position(t) -> (x, y)`` for scalar or array t."""

    def position(self, t): ...

    @property
    def max_speed(self) -> float: ...


@dataclass(frozen=True)
class StaticPath:
    """A beam at rest at ``(x, y)``. Units: xi."""

    x: float = field(default=0.0, metadata={"dim": "length"})
    y: float = field(default=0.0, metadata={"dim": "length"})

    def position(self, t):
        t = np.asarray(t, dtype=float)
        return np.full(t.shape, self.x), np.full(t.shape, self.y)

    @property
    def max_speed(self) -> float:
        return 0.0


@dataclass(frozen=True)
class LinePath:
    """Straight sweep from ``start`` to ``end`` at constant ``speed``, beginning at ``start_time``.

    ``mode = "once"`` stops at ``end``; ``"back_and_forth"`` reflects at both ends forever.

    Units: xi, c, hbar/mu.
    """

    start: tuple[float, float] = field(metadata={"dim": "length"})
    end: tuple[float, float] = field(metadata={"dim": "length"})
    speed: float = field(metadata={"dim": "speed"})
    mode: str = "once"
    start_time: float = field(default=0.0, metadata={"dim": "time"})

    @property
    def length(self) -> float:
        return math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])

    def position(self, t):
        t = np.asarray(t, dtype=float)
        L = self.length
        s = self.speed * np.maximum(t - self.start_time, 0.0)
        if self.mode == "back_and_forth":
            s = np.mod(s, 2 * L)
            s = np.where(s > L, 2 * L - s, s)
        else:
            s = np.minimum(s, L)
        f = s / L
        return (self.start[0] + f * (self.end[0] - self.start[0]),
                self.start[1] + f * (self.end[1] - self.start[1]))

    @property
    def max_speed(self) -> float:
        return self.speed


@dataclass(frozen=True)
class CirclePath:
    """Uniform circular motion about ``centre``.

    ``angular_speed`` > 0; ``sense`` = +1 counterclockwise, -1 clockwise; angle measured from
    the +x axis, ``start_angle`` at ``start_time`` (the beam rests there before).

    Units: xi, rad per hbar/mu, rad, hbar/mu.
    """

    radius: float = field(metadata={"dim": "length"})
    angular_speed: float = field(metadata={"dim": "rate"})
    centre: tuple[float, float] = field(default=(0.0, 0.0), metadata={"dim": "length"})
    start_angle: float = 0.0
    sense: int = 1
    start_time: float = field(default=0.0, metadata={"dim": "time"})

    def position(self, t):
        t = np.asarray(t, dtype=float)
        theta = self.start_angle + self.sense * self.angular_speed * np.maximum(t - self.start_time, 0.0)
        return self.centre[0] + self.radius * np.cos(theta), self.centre[1] + self.radius * np.sin(theta)

    @property
    def max_speed(self) -> float:
        return self.radius * self.angular_speed


@dataclass(frozen=True)
class PolylinePath:
    """Piecewise straight motion through ``points`` with ``speeds[i]`` on segment i.

    ``mode``: ``"once"`` stops at the last point; ``"back_and_forth"`` retraces the segments
    backwards (same speed per segment) and repeats; ``"loop"`` closes the path from the last
    point to the first (``speeds`` then has one entry per point) and repeats.

    Units: xi, c, hbar/mu.
    """

    points: tuple[tuple[float, float], ...] = field(metadata={"dim": "length"})
    speeds: tuple[float, ...] = field(metadata={"dim": "speed"})
    mode: str = "once"
    start_time: float = field(default=0.0, metadata={"dim": "time"})

    def _legs(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Start points, end points and durations of the legs of one period."""
        p = np.asarray(self.points, dtype=float)
        v = np.asarray(self.speeds, dtype=float)
        a, b = p[:-1], p[1:]
        if self.mode == "loop":
            a, b = p, np.roll(p, -1, axis=0)
        elif self.mode == "back_and_forth":
            a, b, v = np.vstack([a, b[::-1]]), np.vstack([b, a[::-1]]), np.concatenate([v, v[::-1]])
        durations = np.hypot(*(b - a).T) / v
        return a, b, durations

    def position(self, t):
        t = np.asarray(t, dtype=float)
        a, b, durations = self._legs()
        ends = np.cumsum(durations)
        period = ends[-1]
        s = np.maximum(t - self.start_time, 0.0)
        s = np.mod(s, period) if self.mode in ("loop", "back_and_forth") else np.minimum(s, period)
        leg = np.minimum(np.searchsorted(ends, s, side="right"), len(ends) - 1)
        begin = ends[leg] - durations[leg]
        f = np.clip((s - begin) / durations[leg], 0.0, 1.0)
        x = a[leg, 0] + f * (b[leg, 0] - a[leg, 0])
        y = a[leg, 1] + f * (b[leg, 1] - a[leg, 1])
        return x, y

    @property
    def max_speed(self) -> float:
        return float(max(self.speeds))


def array_offsets(columns: int, rows: int, spacing_x: float, spacing_y: float,
                  angle: float = 0.0) -> tuple[tuple[float, float], ...]:
    """Offsets of a rigid ``rows`` x ``columns`` array of beams centred on the path point.

    ``angle`` rotates the array counterclockwise (the array keeps this orientation while it moves).

    Units: xi, rad.
    """
    ox = (np.arange(columns) - 0.5 * (columns - 1)) * spacing_x
    oy = (np.arange(rows) - 0.5 * (rows - 1)) * spacing_y
    OX, OY = np.meshgrid(ox, oy, indexing="xy")
    c, s = math.cos(angle), math.sin(angle)
    return tuple((float(c * x - s * y), float(s * x + c * y)) for x, y in zip(OX.ravel(), OY.ravel()))


@dataclass(frozen=True)
class Beam:
    """One Gaussian beam (or rigid array of identical beams) ``height * exp(-2 r^2 / waist^2)``.

    Units: waist xi, height mu.
    """

    waist: float = field(metadata={"dim": "length"})
    height: float = field(metadata={"dim": "energy"})
    path: object = field(default_factory=StaticPath)
    ramp: Ramp = field(default_factory=Ramp)
    offsets: tuple[tuple[float, float], ...] = field(default=((0.0, 0.0),), metadata={"dim": "length"})


class BeamSet:
    """All beams of a protocol, rigid arrays expanded into individual beams.

    Parameters
    ----------
    beams : sequence of Beam
        May be empty.

    Units
    -----
    lengths xi, times hbar/mu, heights mu.
    """

    def __init__(self, beams: Sequence[Beam] = ()) -> None:
        self.beams = tuple(beams)
        self._slices = []
        start = 0
        for beam in self.beams:
            n = len(beam.offsets)
            self._slices.append((slice(start, start + n), np.asarray(beam.offsets, dtype=float).reshape(n, 2)))
            start += n
        self.n_beams = start
        self.waists = np.array([b.waist for b in self.beams for _ in b.offsets], dtype=np.float64)
        self.waists.setflags(write=False)

    def evaluate(self, t: float, amp: np.ndarray, cx: np.ndarray, cy: np.ndarray) -> None:
        """Fill ``amp``, ``cx``, ``cy`` (each ``(n_beams,)``) in place at time ``t``.

        Units: t in hbar/mu; amp in mu (ramps included); centres in xi.
        """
        for beam, (sl, off) in zip(self.beams, self._slices):
            x, y = beam.path.position(t)
            amp[sl] = beam.height * float(beam.ramp.factor(t))
            cx[sl] = off[:, 0]
            cx[sl] += float(x)
            cy[sl] = off[:, 1]
            cy[sl] += float(y)

    def positions(self, t: float) -> np.ndarray:
        """Beam centres at time ``t``, shape ``(n_beams, 2)``. Units: xi."""
        amp, cx, cy = np.empty(self.n_beams), np.empty(self.n_beams), np.empty(self.n_beams)
        self.evaluate(t, amp, cx, cy)
        return np.column_stack([cx, cy])

    def amplitudes(self, t: float) -> np.ndarray:
        """Peak heights including ramps at time ``t``, shape ``(n_beams,)``. Units: mu."""
        amp, cx, cy = np.empty(self.n_beams), np.empty(self.n_beams), np.empty(self.n_beams)
        self.evaluate(t, amp, cx, cy)
        return amp

    def potential(self, t: float, grid: Grid) -> np.ndarray:
        """Total beam potential on the grid at time ``t`` (allocates; for diagnostics). Units: mu."""
        amp, cx, cy = np.empty(self.n_beams), np.empty(self.n_beams), np.empty(self.n_beams)
        self.evaluate(t, amp, cx, cy)
        V = np.zeros(grid.shape)
        for a, x0, y0, w in zip(amp, cx, cy, self.waists):
            if a != 0.0:
                V += a * np.exp(-2.0 * (grid.Y - y0) ** 2 / w**2) * np.exp(-2.0 * (grid.X - x0) ** 2 / w**2)
        return V

    def max_height(self) -> float:
        """Largest |peak height| of a single beam (0 without beams).

        The magnitude, so that an attractive beam (negative height, a well) counts as much as a
        repulsive one in the time-step checks: the phase a beam turns per step is |V0| dt.

        Units: mu.
        """
        return max((abs(b.height) for b in self.beams), default=0.0)

    def max_speed(self) -> float:
        """Largest path speed of any beam. Units: c."""
        return max((b.path.max_speed for b in self.beams), default=0.0)


@dataclass(frozen=True)
class BeamExcursion:
    """Where and when a switched-on beam centre first comes closer than one waist to the edge."""

    beam_index: int   # index into BeamSet.beams (the protocol's [[beams]] entry)
    time: float       # hbar/mu
    x: float          # xi
    y: float          # xi
    limit_x: float    # allowed |x| (xi)
    limit_y: float    # allowed |y| (xi)


def find_beam_excursion(beams: BeamSet, grid: Grid, duration: float) -> BeamExcursion | None:
    """First time in ``[0, duration]`` a switched-on beam centre leaves the grid minus one waist.

    Times are sampled finely enough that no beam moves more than a quarter waist between
    samples. Returns ``None`` if every beam stays inside.

    Units: hbar/mu, xi.
    """
    half_x = 0.5 * grid.length_x
    half_y = 0.5 * grid.length_y
    first: BeamExcursion | None = None
    for index, beam in enumerate(beams.beams):
        speed = beam.path.max_speed
        n = 2 + int(min(math.ceil(duration * speed / (0.25 * beam.waist)), 200_000))
        t = np.linspace(0.0, duration, max(n, 201))
        x, y = beam.path.position(t)
        on = beam.ramp.factor(t) > 0
        limit_x, limit_y = half_x - beam.waist, half_y - beam.waist
        for ox, oy in beam.offsets:
            bad = on & ((np.abs(x + ox) > limit_x) | (np.abs(y + oy) > limit_y))
            if bad.any():
                k = int(np.argmax(bad))
                tk = _refine_exit(beam, ox, oy, limit_x, limit_y, t[k - 1], t[k]) if k > 0 else t[k]
                if first is None or tk < first.time:
                    px, py = beam.path.position(tk)
                    first = BeamExcursion(index, float(tk), float(px + ox), float(py + oy),
                                          limit_x, limit_y)
    return first


def _refine_exit(beam: Beam, ox: float, oy: float, limit_x: float, limit_y: float,
                 t_in: float, t_out: float) -> float:
    """Bisect the first crossing between a sample inside and one outside (paths are continuous)."""
    for _ in range(50):
        mid = 0.5 * (t_in + t_out)
        px, py = beam.path.position(mid)
        outside = abs(px + ox) > limit_x or abs(py + oy) > limit_y
        if outside and beam.ramp.factor(mid) > 0:
            t_out = mid
        else:
            t_in = mid
    return t_out
