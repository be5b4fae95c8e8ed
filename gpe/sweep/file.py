"""The sweep file: parse and validate it into a frozen :class:`Sweep` of axes, seeds and measure.

A sweep file (TOML) names a base protocol, one or more axes (protocol keys in the protocol's own
units, written exactly as ``--set`` overrides), the noise seeds and what to measure at the end
(``docs/sweep.md``). :func:`load_sweep` / :func:`parse_sweep` check every key and name the file,
the table and what would be accepted; :meth:`Sweep.points` expands the grid into one
:class:`Point` (overrides and seed) per run. Running the points is :mod:`gpe.sweep.execute`'s job.

Units: axis values in the protocol's units (the key's suffix says which); measurement times in the
protocol's time unit unless the key says ``_ms`` or ``_tau`` (hbar/mu).
"""

from __future__ import annotations

import difflib
import itertools
import json
import math
import os
import tomllib
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from collections.abc import Mapping, Sequence

from gpe.errors import ProtocolError, VorthermError

# Nothing numerical is imported here: a spawned sweep worker imports this module (through
# gpe.sweep.execute) before its thread-count variables are set.

#: Quantities a sweep may measure (units and meanings in thermo.quantities.QUANTITIES).
MEASURABLE = ("beta", "n_plus", "n_minus", "dipole_fraction", "cluster_fraction", "free_fraction",
              "energy_per_vortex", "omega")
#: measured only when asked for by name: each costs its own tables (omega: the (beta, omega)
#: tables of thermo.rotation, disk traps only)
ON_REQUEST = ("omega",)
#: what a [measure] table without ``quantities`` measures
DEFAULT_QUANTITIES = tuple(q for q in MEASURABLE if q not in ON_REQUEST)

SEED_KEY = "evolution.seed"

_TOP_KEYS = ("base", "axes", "seeds", "measure", "output", "name", "description")
_OUTPUT_KEYS = ("keep_snapshots",)
_AXIS_KEYS = ("key", "values", "range", "label", "unit")
_RANGE_KEYS = ("start", "stop", "num", "scale")
_MEASURE_KEYS = ("at_time", "at_time_ms", "at_time_tau", "window", "window_ms", "window_tau",
                 "quantities")


class SweepError(VorthermError):
    """A sweep file, output folder or executor setting is invalid."""


# -- the sweep file -----------------------------------------------------------------------------
@dataclass(frozen=True)
class Axis:
    """One swept protocol key.

    Units: ``values`` in the unit named by ``unit`` (the protocol's own unit for that key).
    """

    key: str
    values: tuple
    unit: str = ""
    label: str = ""
    scale: str = "linear"

    @property
    def title(self) -> str:
        """Axis title for tables and plots, e.g. ``beam speed [c]``."""
        name = self.label or self.key
        return f"{name} [{self.unit}]" if self.unit else name


@dataclass(frozen=True)
class Measure:
    """What to read from each finished run.

    Units: ``at_time`` and ``window`` in ``time_unit``: "ms", "tau" (hbar/mu) or "protocol"
    (the protocol's own time unit: ms for ``units = "SI"``, tau for ``units = "healing"``).
    Neither given means the final frame.
    """

    at_time: float | None = None
    window: tuple[float, float] | None = None
    quantities: tuple[str, ...] = DEFAULT_QUANTITIES
    time_unit: str = "protocol"


@dataclass(frozen=True)
class Output:
    """What each point keeps on disk: ``keep_snapshots`` is "all", "last" or K (every K-th
    frame and the last), applied when the run is complete, before it is measured
    (gpe/sweep/thinning.py).
    """

    keep_snapshots: str | int = "all"


@dataclass(frozen=True)
class Point:
    """One run of the sweep: a grid point and a noise seed.

    ``point_id`` (``p003_s1``) is the grid index and the seed; it names the run file.
    """

    point_id: str
    grid_id: str
    index: int
    seed: int
    coords: tuple
    overrides: tuple[str, ...]


@dataclass(frozen=True)
class Sweep:
    """A validated sweep file. Build it with :func:`load_sweep` or :func:`parse_sweep`."""

    source: str
    base: Path
    axes: tuple[Axis, ...]
    seeds: tuple[int, ...]
    measure: Measure
    text: str = field(repr=False)
    output: Output = field(default_factory=Output)

    def points(self) -> list[Point]:
        """All points, grid index major and seed minor (the first axis varies slowest)."""
        n_grid = math.prod(len(a.values) for a in self.axes)
        width = max(3, len(str(n_grid - 1)))
        points = []
        for index, coords in enumerate(itertools.product(*(a.values for a in self.axes))):
            grid_id = f"p{index:0{width}d}"
            base = tuple(f"{a.key}={format_value(v)}" for a, v in zip(self.axes, coords))
            for seed in self.seeds:
                points.append(Point(f"{grid_id}_s{seed}", grid_id, index, seed, coords,
                                    base + (f"{SEED_KEY}={seed}",)))
        return points


def format_value(value: Any) -> str:
    """Write a value as the right-hand side of a ``--set key=value`` override (TOML syntax)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    return json.dumps(str(value))


def _unknown(where: str, key: str, accepted: Sequence[str]) -> SweepError:
    near = difflib.get_close_matches(key, accepted, n=1)
    hint = f"did you mean '{near[0]}'? " if near else ""
    return SweepError(f"{where}: unknown key '{key}'; {hint}accepted: {', '.join(accepted)}")


def _check_keys(where: str, table: Mapping, accepted: Sequence[str]) -> None:
    for key in table:
        if key not in accepted:
            raise _unknown(where, key, accepted)


def _number(where: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SweepError(f"{where}: expected a finite number, got {value!r}")
    return float(value)


def _parse_axis(src: str, i: int, table: Any) -> Axis:
    where = f"{src}: [[axes]] #{i + 1}"
    if not isinstance(table, dict):
        raise SweepError(f"{where}: each axis must be a table with key and values (or range)")
    _check_keys(where, table, _AXIS_KEYS)
    key = table.get("key")
    if not isinstance(key, str) or not key or "=" in key or key != key.strip():
        raise SweepError(f"{where}.key: expected a protocol key such as "
                         f"'beams.0.path.speed_c' (same syntax as --set), got {key!r}")
    if key == SEED_KEY:
        raise SweepError(f"{where}.key: '{SEED_KEY}' is swept by the top-level 'seeds' entry")
    where = f"{src}: axis '{key}'"
    if ("values" in table) == ("range" in table):
        raise SweepError(f"{where}: give exactly one of 'values = [...]' or "
                         f"'range = {{start, stop, num, scale}}'")
    scale = "linear"
    if "values" in table:
        values = table["values"]
        if not isinstance(values, list) or not values:
            raise SweepError(f"{where}.values: expected a non-empty list, got {values!r}")
        for v in values:
            if not isinstance(v, (int, float, str, bool)):
                raise SweepError(f"{where}.values: {v!r} is not a number, string or boolean")
        if len({json.dumps(v) for v in values}) != len(values):
            raise SweepError(f"{where}.values: duplicate values in {values!r}")
        values = tuple(values)
    else:
        rng = table["range"]
        if not isinstance(rng, dict):
            raise SweepError(f"{where}.range: expected {{start = .., stop = .., num = ..}}")
        _check_keys(f"{where}.range", rng, _RANGE_KEYS)
        for k in ("start", "stop", "num"):
            if k not in rng:
                raise SweepError(f"{where}.range: missing '{k}' (needs start, stop, num)")
        start, stop = _number(f"{where}.range.start", rng["start"]), _number(
            f"{where}.range.stop", rng["stop"])
        num, scale = rng["num"], rng.get("scale", "linear")
        if isinstance(num, bool) or not isinstance(num, int) or num < 1:
            raise SweepError(f"{where}.range.num: expected an integer >= 1, got {num!r}")
        if scale not in ("linear", "log"):
            raise SweepError(f"{where}.range.scale: expected 'linear' or 'log', got {scale!r}")
        if num > 1 and start == stop:
            raise SweepError(f"{where}.range: start == stop gives {num} identical values")
        if scale == "log" and (start <= 0 or stop <= 0):
            raise SweepError(f"{where}.range: a log range needs start > 0 and stop > 0")
        values = tuple(_spaced(start, stop, num, scale))
    unit = table.get("unit", _key_unit(key))
    label = table.get("label", "")
    for name, v in (("unit", unit), ("label", label)):
        if not isinstance(v, str):
            raise SweepError(f"{where}.{name}: expected a string, got {v!r}")
    return Axis(key, values, unit, label, scale)


def _spaced(start: float, stop: float, num: int, scale: str) -> list[float]:
    if num == 1:
        return [start]
    if scale == "log":
        a, b = math.log(start), math.log(stop)
        vals = [math.exp(a + (b - a) * i / (num - 1)) for i in range(num)]
    else:
        vals = [start + (stop - start) * i / (num - 1) for i in range(num)]
    vals[0], vals[-1] = start, stop  # exact end points, whatever the rounding
    # 12 significant digits keep ids and overrides readable without changing the physics.
    return [float(f"{v:.12g}") for v in vals]


def _key_unit(key: str) -> str:
    """The unit of a swept protocol key, from the protocol schema (its one unit-suffix table)."""
    # imported here: the schema loads NumPy, and a spawned worker imports this module before
    # its thread-count variables are set (see the note at the top)
    from gpe.setup.schema import unit_of_key

    return unit_of_key(key)


def _parse_seeds(src: str, seeds: Any) -> tuple[int, ...]:
    where = f"{src}: seeds"
    if isinstance(seeds, int) and not isinstance(seeds, bool):
        if seeds < 1:
            raise SweepError(f"{where}: expected a count >= 1 or a list of seeds, got {seeds}")
        return tuple(range(seeds))
    if isinstance(seeds, list) and seeds:
        if any(isinstance(s, bool) or not isinstance(s, int) or s < 0 for s in seeds):
            raise SweepError(f"{where}: seeds must be integers >= 0, got {seeds!r}")
        if len(set(seeds)) != len(seeds):
            raise SweepError(f"{where}: duplicate seeds in {seeds!r}")
        return tuple(seeds)
    raise SweepError(f"{where}: expected a count (seeds = 2) or a list (seeds = [1, 7]), "
                     f"got {seeds!r}")


def _parse_measure(src: str, table: Any) -> Measure:
    where = f"{src}: [measure]"
    if not isinstance(table, dict):
        raise SweepError(f"{where}: expected a table")
    _check_keys(where, table, _MEASURE_KEYS)
    given = [k for k in table if k != "quantities"]
    if len(given) > 1:
        raise SweepError(f"{where}: give one of at_time or window, not both ({given})")
    at_time = window = None
    unit = "protocol"
    if given:
        key = given[0]
        unit = key.rsplit("_", 1)[1] if key.endswith(("_ms", "_tau")) else "protocol"
        if key.startswith("at_time"):
            at_time = _number(f"{where}.{key}", table[key])
        else:
            w = table[key]
            if not isinstance(w, list) or len(w) != 2:
                raise SweepError(f"{where}.{key}: expected [t0, t1], got {w!r}")
            window = (_number(f"{where}.{key}", w[0]), _number(f"{where}.{key}", w[1]))
            if not window[0] < window[1]:
                raise SweepError(f"{where}.{key}: needs t0 < t1, got {w!r}")
    quantities = table.get("quantities", list(DEFAULT_QUANTITIES))
    if not isinstance(quantities, list) or not quantities:
        raise SweepError(f"{where}.quantities: expected a non-empty list of names")
    for q in quantities:
        if q not in MEASURABLE:
            raise _unknown(f"{where}.quantities", str(q), MEASURABLE)
    if "beta" not in quantities:
        quantities = ["beta", *quantities]  # the phase map and the negative-beta fraction need it
    return Measure(at_time, window, tuple(dict.fromkeys(quantities)), unit)


def _parse_output(src: str, table: Any) -> Output:
    where = f"{src}: [output]"
    if not isinstance(table, dict):
        raise SweepError(f"{where}: expected a table, e.g. [output] keep_snapshots = \"last\"")
    _check_keys(where, table, _OUTPUT_KEYS)
    keep = table.get("keep_snapshots", "all")
    accepted = ('accepted: "all" (default), "last", or a whole number K >= 1 for every K-th '
                'frame (the last one always kept)')
    if isinstance(keep, str):
        if keep not in ("all", "last"):
            raise SweepError(f"{where}.keep_snapshots: {keep!r} is not a choice; {accepted}")
    elif isinstance(keep, bool) or not isinstance(keep, int) or keep < 1:
        raise SweepError(f"{where}.keep_snapshots: {keep!r} is not a choice; {accepted}")
    return Output("all" if keep == 1 else keep)


def time_unit_factor(protocol: Any, time_unit: str) -> float:
    """Factor from a measurement time unit ("ms", "tau" or "protocol") to hbar/mu."""
    if time_unit == "protocol":
        time_unit = "tau" if str(protocol.unit_system).lower() == "healing" else "ms"
    return 1.0 if time_unit == "tau" else protocol.units.ms_to_time(1.0)


def parse_sweep(text: str, source: str | os.PathLike, *, check_protocol: bool = True) -> Sweep:
    """Parse and validate sweep-file text; ``source`` is the file path (base is relative to it).

    With ``check_protocol`` the base protocol is loaded once per axis with that axis overridden,
    so that a misspelt protocol key is reported now and not after a night of failed runs, and
    once per grid point, so that a ``[measure]`` time outside a point's run, or a window with
    no frame that ``[output] keep_snapshots`` keeps, is refused before any point runs.
    """
    src = str(source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SweepError(f"{src}: not valid TOML: {exc}") from None
    _check_keys(src, data, _TOP_KEYS)
    base = data.get("base")
    if not isinstance(base, str) or not base:
        raise SweepError(f"{src}: base: expected the protocol file, e.g. base = \"demo.toml\"")
    base_path = (Path(source).parent / base).resolve()
    if not base_path.is_file():
        raise SweepError(f"{src}: base: protocol file '{base_path}' not found "
                         f"(the path is relative to the sweep file)")
    axes_data = data.get("axes")
    if not isinstance(axes_data, list) or not axes_data:
        raise SweepError(f"{src}: needs at least one [[axes]] table with key and values")
    axes = tuple(_parse_axis(src, i, t) for i, t in enumerate(axes_data))
    keys = [a.key for a in axes]
    if len(set(keys)) != len(keys):
        raise SweepError(f"{src}: the same key appears on two axes: {keys}")
    seeds = _parse_seeds(src, data.get("seeds", 1))
    measure = _parse_measure(src, data.get("measure", {}))
    output = _parse_output(src, data.get("output", {}))
    sweep = Sweep(src, base_path, axes, seeds, measure, text, output)
    if check_protocol:
        _check_axis_keys(sweep)
        _check_measure_times(sweep)
    return sweep


def load_sweep(path: str | os.PathLike, *, check_protocol: bool = True) -> Sweep:
    """Read and validate a sweep file (see ``docs/sweep.md``)."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise SweepError(f"cannot read sweep file '{path}': {exc.strerror}") from None
    return parse_sweep(text, path, check_protocol=check_protocol)


def _check_axis_keys(sweep: Sweep) -> None:
    # imported here: the protocol loads NumPy (see the note at the top of this module)
    from gpe.setup.protocol import load_protocol

    for axis in sweep.axes:
        # A key is valid if the protocol accepts it with at least one of its values; a value that
        # is only invalid at some points is reported per point when the sweep runs.
        errors = []
        for value in axis.values:
            try:
                with warnings.catch_warnings():  # each run reports its own warnings
                    warnings.simplefilter("ignore")
                    load_protocol(sweep.base, [f"{axis.key}={format_value(value)}",
                                               f"{SEED_KEY}={sweep.seeds[0]}"])
                break
            except ProtocolError as exc:
                errors.append(str(exc))
        else:
            raise SweepError(f"{sweep.source}: axis '{axis.key}': the base protocol "
                             f"{sweep.base.name} rejects every value: {errors[0]}")


def _measure_key(m: Measure) -> str:
    stem = "at_time" if m.at_time is not None else "window"
    return stem if m.time_unit == "protocol" else f"{stem}_{m.time_unit}"


def _check_measure_times(sweep: Sweep) -> None:
    """Every grid point's run must hold the measured time or a kept frame in the window."""
    # imported here: the protocol loads NumPy (see the note at the top of this module)
    from gpe.setup.protocol import load_protocol
    from gpe.sweep.thinning import kept_frames

    m = sweep.measure
    if m.at_time is None and m.window is None:
        return
    key = f"[measure] {_measure_key(m)}"
    keep = sweep.output.keep_snapshots
    seen = set()
    for point in sweep.points():
        if point.grid_id in seen:
            continue
        seen.add(point.grid_id)
        try:
            with warnings.catch_warnings():  # each run reports its own warnings
                warnings.simplefilter("ignore")
                protocol = load_protocol(sweep.base, point.overrides)
        except ProtocolError:
            continue                         # this point fails on its own when it runs
        ev = protocol.evolution
        scale = time_unit_factor(protocol, m.time_unit)
        interval = ev.output_interval / scale
        end = ev.n_outputs * interval
        times = [i * interval for i in kept_frames(ev.n_outputs + 1, keep)]
        unit = m.time_unit if m.time_unit != "protocol" else (
            "tau" if str(protocol.unit_system).lower() == "healing" else "ms")
        where = (f"{sweep.source}: {key}" + (f" at point {point.grid_id} "
                 f"({', '.join(point.overrides[:-1])})" if len(point.overrides) > 1 else ""))
        span = f"the run spans 0 .. {end:.6g} {unit}"
        tol = 1e-9 * max(1.0, end)
        kept = ("" if keep == "all" else f" (keep_snapshots = {keep!r} keeps frames at "
                f"{_some(times)} {unit})")
        if m.window is not None:
            t0, t1 = m.window
            if t0 < -tol or t1 > end + tol:
                raise SweepError(f"{where}: window [{t0:.6g}, {t1:.6g}] {unit} is not inside the "
                                 f"run; {span}; accepted: 0 <= t0 < t1 <= {end:.6g} {unit}")
            if not any(t0 - tol <= t <= t1 + tol for t in times):
                raise SweepError(f"{where}: no {'kept ' if kept else ''}frame in the window "
                                 f"[{t0:.6g}, {t1:.6g}] {unit}{kept or f' (frames every {interval:.6g} {unit})'}; "
                                 "accepted: a window holding at least one frame")
        else:
            t = m.at_time
            if t < -tol or t > end + tol:
                raise SweepError(f"{where}: time {t:.6g} {unit} is outside the run; {span}; "
                                 f"accepted: 0 <= at_time <= {end:.6g} {unit}")
            nearest = min(times, key=lambda s: abs(s - t))
            if kept and abs(nearest - t) > 0.5 * interval + tol:
                raise SweepError(f"{where}: time {t:.6g} {unit} is not a kept frame{kept}; the "
                                 f"nearest is {nearest:.6g} {unit}; accepted: a kept frame's time")


def _some(times: Sequence[float], n: int = 4) -> str:
    shown = ", ".join(f"{t:.6g}" for t in times[:n])
    return shown + (f", ..., {times[-1]:.6g}" if len(times) > n else "")
