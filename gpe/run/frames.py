"""Which frames of a run form its ensemble, and how correlated they are.

* :func:`ensemble_frames`: a window, one time, or by default the frames after the last beam has
  switched off (:func:`drive_end`); a time outside the run or a window without frames is an
  error naming the times the run has.
* the weights (thermo.data.units.series_weights): frames of one run are correlated; a series of
  n frames with integrated autocorrelation time tau_int is worth n / tau_int independent shots,
  so each frame weighs 1/tau_int in the ensemble fit (thermo/estimate.py).
* :class:`RunSeries`: a run file read once, with its frames mapped onto the point-vortex gas for
  any choice of core radius, wall layer and wall cut (gpe/run/gas.py). In an annulus the gas is
  at the circulation its hole carries, read from each frame's field (:meth:`RunSeries.gas`).

Units: times in hbar/mu (or ms where said); tau_int in frames.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from gpe.analysis.circulation import plaquette_windings, winding_around_region
from gpe.errors import VorthermError
from gpe.run.gas import CORE_RADIUS_XI, WALL_LAYER_XI, domain_for_trap, gas_configuration
from gpe.run.reading import protocol_of
from gpe.run.runfile import RunFile
from thermo.admission import CoreRadiusWarning, core_radius_note


def drive_end(protocol) -> tuple[float | None, str]:
    """When the last beam has switched off (hbar/mu), or None with the reason.

    Units: hbar/mu.
    """
    if not protocol.beams:
        return 0.0, "no beams: every frame"
    ends = [b.ramp.off_time + b.ramp.off_duration if b.ramp.off_time is not None else None
            for b in protocol.beams]
    if any(e is None for e in ends):
        return None, "a beam never switches off"
    return float(max(ends)), ""


def ensemble_frames(times: np.ndarray, *, at_time: float | None = None,
                    window: tuple[float, float] | None = None, default: str = "after_drive",
                    after: float | None = None, source: str = "run",
                    unit: str = "hbar/mu") -> list[int]:
    """The frames that form a run's ensemble.

    Parameters
    ----------
    times : output times of the run, in ``unit`` (hbar/mu unless said otherwise).
    at_time : the one frame nearest to this time; a time outside the run's frames is an error.
    window : every frame with ``t0 <= t <= t1``; a window with no frame is an error.
    default : what neither means: ``"after_drive"`` (every frame at or after ``after``, the
        time the last beam has switched off; the last third of the frames when ``after`` is
        None, i.e. a beam never switches off), ``"last_third"`` or ``"last"`` (the final frame).

    Frames of one run are correlated: thermo.data.units.series_weights counts them.
    """
    times = np.asarray(times, dtype=float)
    if len(times) == 0:
        raise VorthermError(f"{source}: the run file holds no frames")
    span = f"frames span {times[0]:.4g}..{times[-1]:.4g} {unit}"
    if window is not None:
        t0, t1 = float(window[0]), float(window[1])
        if not t0 <= t1:
            raise VorthermError(f"{source}: window {t0:.4g}..{t1:.4g} {unit} ends before it "
                                "starts; give the earlier time first")
        frames = [i for i, t in enumerate(times) if t0 - 1e-9 <= t <= t1 + 1e-9]
        if not frames:
            raise VorthermError(f"{source}: no frame in the window {t0:.4g}..{t1:.4g} {unit} "
                                f"({span})")
        return frames
    if at_time is not None:
        step = float(np.median(np.diff(times))) if len(times) > 1 else 0.0
        if not times[0] - 0.5 * step - 1e-9 <= at_time <= times[-1] + 0.5 * step + 1e-9:
            raise VorthermError(f"{source}: time {at_time:.4g} {unit} is outside the run "
                                f"({span})")
        return [int(np.argmin(np.abs(times - at_time)))]
    if default == "last":
        return [len(times) - 1]
    if default == "after_drive" and after is not None:
        frames = [i for i, t in enumerate(times) if t >= after - 1e-9]
        if not frames:
            raise VorthermError(f"{source}: no frame after the drive ends at t = {after:.4g} "
                                f"{unit} ({span}); choose a window")
        return frames
    if default in ("last_third", "after_drive"):
        last = max(1, len(times) // 3)
        return list(range(len(times) - last, len(times)))
    raise VorthermError(f"ensemble default {default!r}; accepted: 'after_drive', 'last_third', "
                        "'last'")


def quanta(windings: tuple[int, ...]):
    """Circulation quanta as a report shows them: the number for one hole, the tuple for more."""
    return windings[0] if len(windings) == 1 else tuple(windings)


@dataclass(frozen=True)
class RunSeries:
    """One run's frames as the thermometry needs them: times, vortex table, trap, protocol."""

    path: str
    protocol: object
    times: np.ndarray
    table: np.ndarray
    complete: bool

    @classmethod
    def read(cls, run_path) -> "RunSeries":
        with RunFile.open(run_path, "r") as run:
            return cls(str(run_path), protocol_of(run), np.asarray(run.timeline()),
                       run.read_vortices(), run.is_complete())

    def frames(self, *, at_time=None, window=None, default="after_drive", time_unit="tau"):
        """:func:`ensemble_frames` with times in ``time_unit`` ("tau" = hbar/mu, or "ms")."""
        if time_unit not in ("tau", "ms"):
            raise VorthermError(f"time unit {time_unit!r}; accepted: 'tau', 'ms'")
        conv = self.protocol.units.time_to_ms if time_unit == "ms" else (lambda t: t)
        end, _ = drive_end(self.protocol)
        return ensemble_frames(conv(self.times), at_time=at_time, window=window,
                               default=default, after=None if end is None else conv(end),
                               source=self.path, unit="ms" if time_unit == "ms" else "hbar/mu")

    def gas(self, frames, *, core_xi=CORE_RADIUS_XI, wall_xi=WALL_LAYER_XI, wall_cut=1.0,
            one_circulation=True):
        """(vortex domain, {frame: Admitted}) with these modelling choices (gpe/run/gas.py).

        In a domain with holes (an annulus, a mask with holes) the domain is at the circulation
        on the holes that all ``frames`` share (:meth:`hole_windings`); with
        ``one_circulation=False`` it is left at none and frames may differ
        (:meth:`frame_domains` gives each frame's).
        """
        vd = domain_for_trap(self.protocol.trap, core_xi, wall_xi)
        note = core_radius_note(vd.core_radius, vd.domain,
                                max((int(np.count_nonzero(self.table["frame"] == f))
                                     for f in set(frames)), default=0),
                                where=Path(self.path).name)
        if note:
            warnings.warn(CoreRadiusWarning(note), stacklevel=2)
        out = {}
        for f in sorted(set(frames)):
            rows = self.table[self.table["frame"] == f]
            out[f] = gas_configuration(rows["x"], rows["y"], rows["sign"], vd, wall_cut=wall_cut)
        if vd.domain.hole_circulation and one_circulation:
            vd = replace(vd, domain=vd.domain.at_hole_circulation(
                self.hole_winding(frames, vd, core_xi * wall_cut)))
        return vd, out

    def hole_windings(self, frames, vd, cut_xi: float) -> dict[int, tuple[int, ...]]:
        """Circulation quanta on the domain's holes in each of ``frames``: {frame: windings}.

        The phase winding along the loop that bounds the gas on the inside of each hole (the
        shrunk wall plus the wall cut ``cut_xi``): it counts the hole's circulation and any
        vortex left out of the gas between that loop and the wall. The loop is the edge of the
        grid plaquettes within the cut of the hole (:meth:`Domain.hole_region`), whose windings
        add up to the loop's (gpe.analysis.circulation).

        Units: cut_xi in xi.
        """
        windings = {}
        n_holes = len(vd.domain.hole_circulation)
        with RunFile.open(self.path, "r") as run:
            grid = run.grid
            xc = 0.5 * (grid.x[1:] + grid.x[:-1])
            yc = 0.5 * (grid.y[1:] + grid.y[:-1])
            X, Y = np.meshgrid((xc - vd.center[0]) / vd.scale, (yc - vd.center[1]) / vd.scale)
            which = vd.domain.hole_region(np.stack([X, Y], axis=-1), cut_xi / vd.scale)
            for f in sorted(set(frames)):
                psi = run.psi(f)
                plaquettes = plaquette_windings(psi)          # once for all the holes
                windings[f] = tuple(
                    winding_around_region(psi, which == k, windings=plaquettes,
                                          where=f"{Path(self.path).name} frame {f}")
                    for k in range(1, n_holes + 1))
        return windings

    def frame_domains(self, frames, vd, cut_xi: float) -> dict[int, object]:
        """The thermo domain of each frame: ``vd.domain``, or in a domain with holes that
        domain at the frame's circulation on its holes. Units: cut_xi in xi."""
        if not vd.domain.hole_circulation:
            return {f: vd.domain for f in frames}
        return {f: vd.domain.at_hole_circulation(w)
                for f, w in self.hole_windings(frames, vd, cut_xi).items()}

    def hole_winding(self, frames, vd, cut_xi: float) -> tuple[int, ...]:
        """Circulation quanta on the domain's holes, the same in every one of ``frames``.

        Raises
        ------
        VorthermError
            If the frames' windings differ (a vortex crossed into a hole): the ensemble is at
            one circulation, so the message lists where it changes and asks for a window.

        Units: cut_xi in xi.
        """
        windings = self.hole_windings(frames, vd, cut_xi)
        values = sorted(set(windings.values()))
        if len(values) > 1:
            order = sorted(windings)
            changes = [f"frame {f} (t = {self.times[f]:.4g} hbar/mu): {quanta(windings[f])}"
                       for i, f in enumerate(order) if i == 0 or windings[f] != windings[order[i - 1]]]
            raise VorthermError(
                f"{Path(self.path).name}: the circulation on the {vd.domain.kind}'s hole "
                "changes within "
                f"the ensemble's frames ({', '.join(changes)} quanta from there on); the gas is "
                "at one circulation: choose a window of frames where it is constant "
                "(--window-ms / --time-ms)")
        return values[0]
