"""The point-vortex frames of a run file: the time line after the GPE part (layout: docs/runfile.md).

A run with ``[evolution] points_until`` continues its last GPE frame as point vortices
(gpe/run/points.py). Those frames have no wavefunction; they are

* rows of the same ``vortices`` table, with frame numbers continuing after the snapshots
  (``n_frames + k``), so that readers of the table see one time line;
* their times in ``points/t`` (units hbar/mu), counted by ``points.attrs["n_frames"]`` (raised
  last, after the rows and the time: it marks a complete record, as for snapshots);
* the integrator's state after the last complete point frame in ``points/state`` (positions in
  domain units at full precision, signs, scaled time, next step size, counters), replaced
  atomically, so that a resumed hand-off continues bit for bit.

:class:`PointFrames` is a base class of gpe.run.runfile.RunFile (it uses the open HDF5 handle
``self._f``); it lives here because it is one concern of the file.

Units: t in hbar/mu; vortex x, y in xi; state positions in the domain's length unit, its time in
m L^2 / hbar.
"""

from __future__ import annotations

import json

import h5py
import numpy as np

from gpe.errors import RunFileError

#: Scalar attributes of ``points/state`` (besides the datasets ``pos`` and ``signs``).
STATE_ATTRS = ("t", "step", "annihilated", "lost_to_wall", "steps_taken", "steps_rejected",
               "frame")


class PointFrames:
    """Point-vortex frames and hand-off state of a run file (module docstring)."""

    _f: h5py.File

    @property
    def n_point_frames(self) -> int:
        """Number of complete point-vortex frames (0 without a hand-off)."""
        g = self._f.get("points")
        return 0 if g is None else int(g.attrs.get("n_frames", 0))

    def point_times(self) -> np.ndarray:
        """Times of the complete point-vortex frames. Units: hbar/mu."""
        if "points" not in self._f:
            return np.empty(0)
        return self._f["points/t"][: self.n_point_frames]

    def timeline(self) -> np.ndarray:
        """Times of every complete frame: snapshots, then point-vortex frames. Units: hbar/mu."""
        return np.concatenate([self._f["snapshots/t"][: self._f["snapshots"].attrs["n_frames"]],
                               self.point_times()])

    def _points_group(self) -> h5py.Group:
        g = self._f.get("points")
        if g is None:
            g = self._f.create_group("points")
            ds = g.create_dataset("t", shape=(0,), maxshape=(None,), dtype=np.float64,
                                  chunks=(256,))
            ds.attrs[self._units_attr] = "hbar/mu"
            g.attrs["n_frames"] = 0
        return g

    def append_point_frame(self, t: float, rows: np.ndarray) -> int:
        """Append one point-vortex frame (its vortex rows and time); returns its frame number.

        ``rows`` carry frame number ``n_frames + n_point_frames``. Units: t in hbar/mu; x, y in xi.
        """
        g = self._points_group()
        k = self.n_point_frames
        frame = int(self._f["snapshots"].attrs["n_frames"]) + k
        if len(rows):
            if np.any(np.asarray(rows["frame"]) != frame):
                raise RunFileError(f"{self.path}: point-vortex rows for frame {frame} carry other "
                                   "frame numbers")
            self._append_vortex_rows(rows)
        ds = g["t"]
        ds.resize(k + 1, axis=0)
        ds[k] = float(t)
        self._f.flush()
        g.attrs["n_frames"] = k + 1     # the counter last: it marks a complete record
        self._f.flush()
        return frame

    def truncate_point_frames(self, n: int) -> None:
        """Keep the first ``n`` point-vortex frames (rows and times), drop the rest."""
        if "points" not in self._f:
            return
        g = self._f["points"]
        n = min(int(n), self.n_point_frames)
        g.attrs["n_frames"] = n
        if g["t"].shape[0] > n:
            g["t"].resize(n, axis=0)
        last = int(self._f["snapshots"].attrs["n_frames"]) + n
        table = self._f["vortices"]
        if table.shape[0] and table[-1]["frame"] >= last:
            rows = table[...]
            self.replace_vortices(rows[rows["frame"] < last])
        self._f.flush()

    def write_point_state(self, pos: np.ndarray, signs: np.ndarray, **scalars) -> None:
        """Store the integrator's state after a complete point frame, replacing the old atomically.

        ``scalars`` are :data:`STATE_ATTRS` (``frame`` = point frames written at this state) plus
        an optional ``rng_state`` dict. Units: pos in the domain's length unit; t in m L^2/hbar.
        """
        g = self._points_group()
        if "state.new" in g:
            del g["state.new"]
        s = g.create_group("state.new")
        s.create_dataset("pos", data=np.asarray(pos, dtype=np.float64).reshape(-1, 2))
        s.create_dataset("signs", data=np.asarray(signs, dtype=np.int64).reshape(-1))
        for name in STATE_ATTRS:
            s.attrs[name] = scalars[name]
        rng_state = scalars.get("rng_state")
        s.attrs["rng_state"] = "" if rng_state is None else json.dumps(rng_state)
        s.attrs["written"] = True
        self._f.flush()
        if "state" in g:
            del g["state"]
        g.move("state.new", "state")
        self._f.flush()

    def read_point_state(self) -> dict | None:
        """The stored hand-off state (dict with pos, signs and :data:`STATE_ATTRS`) or None."""
        g = self._f.get("points/state")
        if g is None:   # a crash between removing the old state and renaming the new one
            g = self._f.get("points/state.new")
            if g is None or not g.attrs.get("written", False):
                return None
        out = {"pos": g["pos"][...], "signs": g["signs"][...]}
        out.update({name: g.attrs[name].item() for name in STATE_ATTRS})
        state = str(g.attrs["rng_state"])
        out["rng_state"] = json.loads(state) if state else None
        return out
