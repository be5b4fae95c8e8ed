"""Tracking of quantized vortices across output frames, and annihilation / creation events.

The input is a vortex table (:data:`gpe.analysis.vortices.VORTEX_DTYPE`, one row per vortex and frame) as
written by :func:`gpe.analysis.vortices.detect_frames`. :func:`track_vortices` links vortices of equal sign
between consecutive frames into tracks; :func:`find_events` pairs + and - tracks that end (or
start) together into annihilations (or creations). The public names are also importable from
:mod:`gpe.analysis.vortices`, where they lived before.

Positions are in healing lengths xi, times in hbar/mu, speeds in c = xi mu / hbar, as everywhere
in ``gpe``.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import linear_sum_assignment

from gpe.analysis.vortices import check_vortex_table
from gpe.errors import VorthermError

__all__ = [
    "ANNIHILATION",
    "CREATION",
    "EVENT_DTYPE",
    "find_events",
    "match_points",
    "track_vortices",
]

ANNIHILATION = -1
CREATION = 1

#: Rows of the event table. ``frame_before``/``frame_after`` bracket the event; ``t`` is the
#: estimated event time inside that interval; (x, y) the midpoint of the pair.
EVENT_DTYPE = np.dtype(
    [
        ("kind", "i1"),
        ("frame_before", "<i8"),
        ("frame_after", "<i8"),
        ("t", "<f8"),
        ("x", "<f8"),
        ("y", "<f8"),
        ("separation", "<f8"),
        ("track_plus", "<i8"),
        ("track_minus", "<i8"),
    ]
)


def _frame_times(table: np.ndarray, frame_times) -> np.ndarray:
    """Time of every frame 0..F-1, from the given array or from the table itself."""
    if frame_times is not None:
        frame_times = np.asarray(frame_times, dtype=np.float64)
        if table.size and table["frame"].max() >= frame_times.size:
            raise VorthermError(f"vortex table: frame {int(table['frame'].max())} is out of "
                                f"range for {frame_times.size} frame times")
        return frame_times
    if table.size == 0:
        return np.empty(0)
    frames, first = np.unique(table["frame"], return_index=True)
    n_frames = int(frames[-1]) + 1
    # frames without vortices are missing from the table: interpolate their times
    return np.interp(np.arange(n_frames), frames, table["t"][first])


def _max_displacement(dt: float, max_speed: float, safety: float, min_displacement: float):
    return safety * max_speed * abs(dt) + min_displacement


def track_vortices(table: np.ndarray, frame_times=None, *, max_speed: float = 1.0,
                   safety: float = 1.5, min_displacement: float = 0.5) -> np.ndarray:
    """Link vortices of equal sign between consecutive frames into tracks.

    Between frames f and f+1 the vortices of each sign are matched by optimal assignment
    (``scipy.optimize.linear_sum_assignment``, cost = squared displacement); a link is allowed
    only for displacements up to ``safety * max_speed * (t[f+1] - t[f]) + min_displacement``.
    Vortices move slower than sound (c = 1 in healing units) except during the last instants
    before annihilation, hence the default max_speed = 1 with a safety factor (common
    practice). Unmatched vortices start new tracks.

    Parameters
    ----------
    table : VORTEX_DTYPE array
    frame_times : float array (F,), optional
        Time of every frame, needed when frames without vortices exist at the end.

    Returns
    -------
    A copy of the table, sorted by (frame, sign), with the ``track`` column filled (0, 1, ...).

    Units
    -----
    max_speed in c = xi mu / hbar; min_displacement in xi; times in hbar/mu.
    """
    table = check_vortex_table(table)
    for name, val in (("max_speed", max_speed), ("safety", safety)):
        if not val > 0:
            raise VorthermError(f"track_vortices: {name} = {val!r} must be > 0")
    if min_displacement < 0:
        raise VorthermError(f"track_vortices: min_displacement = {min_displacement!r} must be >= 0")
    out = np.sort(table.copy(), order=["frame", "sign"], kind="stable")
    times = _frame_times(out, frame_times)
    out["track"] = -1
    next_id = 0
    starts = np.searchsorted(out["frame"], np.arange(times.size + 1))
    prev = np.empty(0, dtype=np.int64)
    for f in range(times.size):
        cur = np.arange(starts[f], starts[f + 1])
        if f > 0 and prev.size and cur.size:
            limit = _max_displacement(times[f] - times[f - 1], max_speed, safety, min_displacement)
            for s in (-1, 1):
                p = prev[out["sign"][prev] == s]
                c = cur[out["sign"][cur] == s]
                if not (p.size and c.size):
                    continue
                d2 = ((out["x"][p, None] - out["x"][None, c]) ** 2
                      + (out["y"][p, None] - out["y"][None, c]) ** 2)
                forbidden = d2 > limit ** 2
                # a forbidden link costs more than any set of allowed ones: the assignment
                # first maximises the number of allowed links, then minimises displacement
                cost = np.where(forbidden, 1.0 + d2.size * limit ** 2 * 4.0, d2)
                rows, cols = linear_sum_assignment(cost)
                good = ~forbidden[rows, cols]
                out["track"][c[cols[good]]] = out["track"][p[rows[good]]]
        new = cur[out["track"][cur] < 0]
        out["track"][new] = np.arange(next_id, next_id + new.size)
        next_id += new.size
        prev = cur
    return out


def match_points(a, b, limit: float) -> tuple[np.ndarray, np.ndarray]:
    """Optimal one-to-one matching of points ``a`` (N, 2) to ``b`` (M, 2) closer than ``limit``.

    ``scipy.optimize.linear_sum_assignment`` with cost = distance, links longer than ``limit``
    forbidden (they cost more than any set of allowed ones, so the assignment first maximises
    the number of allowed links, then minimises their total length). Returns the indices
    (ia, ib) of the matched pairs. Used for track ends here and for detections against true
    vortices (gpe.imaging.calibrate).

    Units: any length, the same for a, b and limit.
    """
    a = np.asarray(a, dtype=np.float64).reshape(-1, 2)
    b = np.asarray(b, dtype=np.float64).reshape(-1, 2)
    if not (len(a) and len(b)):
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    d = np.hypot(a[:, None, 0] - b[None, :, 0], a[:, None, 1] - b[None, :, 1])
    forbidden = d > limit
    cost = np.where(forbidden, 1.0 + d.size * limit * 4.0, d)
    rows, cols = linear_sum_assignment(cost)
    good = ~forbidden[rows, cols]
    return rows[good].astype(np.int64), cols[good].astype(np.int64)


def _pair_ends(ends_plus, ends_minus, pos, limit):
    """Optimal +/- pairing of track ends closer than limit. Returns list of (i_plus, i_minus)."""
    rows, cols = match_points(pos[ends_plus], pos[ends_minus], limit)
    return [(ends_plus[r], ends_minus[c]) for r, c in zip(rows, cols)]


def find_events(tracked: np.ndarray, frame_times=None, *, max_speed: float = 1.0,
                safety: float = 1.5, min_displacement: float = 0.5,
                pair_distance: float | None = None) -> np.ndarray:
    """Annihilation and creation events from a tracked vortex table.

    A + track and a - track that both end at frame f (not the last frame), with last
    positions closer than ``pair_distance``, form an annihilation between frames f and f+1;
    two tracks starting together at frame f+1 (not the first frame) form a creation. Tracks
    that end or start alone (leaving or entering the fluid) are not events. The event time is
    extrapolated from the approach (or separation) rate of the pair over its last (first) two
    frames, clipped to the bracketing interval; with one frame only it is the midpoint.

    Parameters
    ----------
    tracked : VORTEX_DTYPE array with tracks (from :func:`track_vortices`).
    frame_times : float array (F,), optional
        Time of every frame; give it when the last frames hold no vortices.
    pair_distance : float, optional
        Default: twice the largest displacement allowed between the two frames (both
        vortices may approach at up to ``max_speed``), and at least 4 xi.

    Returns
    -------
    np.ndarray of EVENT_DTYPE, sorted by time; kind is ANNIHILATION (-1) or CREATION (+1).

    Units
    -----
    xi, hbar/mu; max_speed in c.
    """
    tracked = check_vortex_table(tracked)
    if tracked.size and tracked["track"].min() < 0:
        raise VorthermError("find_events: the table has untracked rows (track = -1); "
                            "run track_vortices first")
    times = _frame_times(tracked, frame_times)
    n_frames = times.size
    events = []
    if tracked.size == 0:
        return np.empty(0, dtype=EVENT_DTYPE)
    order = np.lexsort((tracked["frame"], tracked["track"]))
    tab = tracked[order]
    _, first = np.unique(tab["track"], return_index=True)
    last = np.r_[first[1:], tab.size] - 1
    pos = np.column_stack([tab["x"], tab["y"]])

    def separation(i_plus, i_minus):
        return float(np.hypot(*(pos[i_plus] - pos[i_minus])))

    for kind, ends, step in ((ANNIHILATION, last, -1), (CREATION, first, +1)):
        end_frames = tab["frame"][ends]
        for f in np.unique(end_frames):
            if kind == ANNIHILATION and f >= n_frames - 1:
                continue
            if kind == CREATION and f <= 0:
                continue
            f_before, f_after = (f, f + 1) if kind == ANNIHILATION else (f - 1, f)
            dt = times[f_after] - times[f_before]
            limit = pair_distance
            if limit is None:
                limit = max(4.0, 2.0 * _max_displacement(dt, max_speed, safety, min_displacement))
            here = ends[end_frames == f]
            plus = here[tab["sign"][here] > 0]
            minus = here[tab["sign"][here] < 0]
            for ip, im in _pair_ends(plus, minus, pos, limit):
                d0 = separation(ip, im)
                t_event = 0.5 * (times[f_before] + times[f_after])
                # the neighbouring rows of the same tracks (one frame further from the event)
                jp, jm = ip + step, im + step
                if (0 <= jp < tab.size and 0 <= jm < tab.size
                        and tab["track"][jp] == tab["track"][ip]
                        and tab["track"][jm] == tab["track"][im]
                        and tab["frame"][jp] == tab["frame"][jm]):
                    d1 = separation(jp, jm)
                    rate = (d1 - d0) / abs(tab["t"][jp] - tab["t"][ip])
                    if rate > 0:
                        t_edge = times[f]
                        t_event = t_edge - step * d0 / rate
                        t_event = min(max(t_event, times[f_before]), times[f_after])
                events.append((kind, f_before, f_after, t_event,
                               0.5 * (pos[ip, 0] + pos[im, 0]), 0.5 * (pos[ip, 1] + pos[im, 1]),
                               d0, tab["track"][ip], tab["track"][im]))
    out = np.array(events, dtype=EVENT_DTYPE)
    return np.sort(out, order=["t", "kind"]) if out.size else out
