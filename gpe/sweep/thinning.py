"""Snapshot thinning of finished sweep runs, so that a night of points does not fill a disk.

A sweep file's ``[output] keep_snapshots`` is ``"all"`` (default), ``"last"`` or an integer K
(every K-th frame, the last one always). A finished run file is rewritten, through the run-file
API, as a complete run file of the kept frames only: their snapshots, observables and vortex
rows (renumbered, tracks kept), the ground state, the static trap, the protocol and the final
checkpoint. The rewrite goes to ``<name>.thin`` beside the file and replaces it in one
``os.replace``: a killed thinning leaves the full file. The root attribute ``snapshots_kept``
(JSON: the setting, the original frame count and the original index of every kept frame)
marks a thinned file; thinning it again is a no-op.

Units: none (frame indices).
"""

from __future__ import annotations

import json
import logging
import os
from pathlib import Path

logger = logging.getLogger(__name__)

KEPT_ATTR = "snapshots_kept"


def kept_frames(n_frames: int, keep) -> list[int]:
    """Indices of the frames kept out of ``n_frames`` under ``keep`` ("all", "last" or K)."""
    if n_frames <= 0:
        return []
    if keep == "all" or keep == 1:
        return list(range(n_frames))
    if keep == "last":
        return [n_frames - 1]
    return sorted(set(range(0, n_frames, int(keep))) | {n_frames - 1})


def thin_snapshots(run_path, keep) -> list[int]:
    """Rewrite the complete run file ``run_path`` with the frames ``keep`` selects.

    Returns the original indices of the frames the file holds afterwards. An incomplete run is
    refused (it must resume first); a file thinned before is left as it is (with a warning
    when it was thinned with another setting).
    """
    from gpe.errors import RunFileError   # imported here: see gpe/sweep/execute.py
    from gpe.run.runfile import RunFile

    path = Path(run_path)
    with RunFile.open(path, "r") as run:
        if not run.is_complete():
            raise RunFileError(f"{path}: the run is not complete; its snapshots are thinned "
                               "only after it finished")
        if KEPT_ATTR in run.attrs:
            done = json.loads(str(run.attrs[KEPT_ATTR]))
            if done["keep"] != keep:
                logger.warning("%s: snapshots were kept with keep_snapshots = %r before, not %r; "
                               "the file is left as it is", path, done["keep"], keep)
            return list(done["frames"])
        n = run.n_frames
        frames = kept_frames(n, keep)
        if len(frames) == n:
            return frames
        tmp = path.with_name(path.name + ".thin")
        tmp.unlink(missing_ok=True)   # left by a thinning that was killed
        _rewrite(run, tmp, frames, keep)
    os.replace(tmp, path)
    logger.info("%s: kept %d of %d snapshots (keep_snapshots = %r)", path, len(frames), n, keep)
    return frames


def _rewrite(run, tmp: Path, frames: list[int], keep) -> None:
    import numpy as np

    from gpe.errors import RunFileError
    from gpe.run.runfile import RunFile

    first = np.asarray(run.psi(0))
    trap = run.static_potential()
    try:
        ground = run.ground_state_psi()
    except RunFileError:   # a run file without a stored ground state keeps none
        ground = None
    out = RunFile.create(tmp, run.grid, protocol_text=run.protocol_text(),
                         protocol_json=run.protocol_json(),
                         protocol_source=run.protocol_source(),
                         protocol_overrides=run.protocol_overrides(), units=run.units(),
                         static_potential=trap, ground_state_psi=ground,
                         snapshot_dtype=first.dtype, trap_arrays=run.trap_arrays())
    try:
        for key, value in run.attrs.items():
            if key not in out.attrs and key != "complete":
                out.attrs[key] = value
        times = run.frame_times()
        observables = run.read_observables()
        units = {name: run.observable_unit(name) for name in observables}
        table = run.read_vortices()
        for new, old in enumerate(frames):
            rows = table[table["frame"] == old].copy()
            rows["frame"] = new
            out.append_frame(float(times[old]), run.psi(old),
                             {name: float(v[old]) for name, v in observables.items()},
                             vortices=rows, units=units)
        # point-vortex frames after a hand-off (gpe/run/pointstore.py) carry no snapshot: all
        # are kept, renumbered after the kept snapshots
        for k, t in enumerate(run.point_times()):
            rows = table[table["frame"] == run.n_frames + k].copy()
            rows["frame"] = len(frames) + k
            out.append_point_frame(float(t), rows)
        state = run.read_point_state()
        if state is not None:
            out.write_point_state(state.pop("pos"), state.pop("signs"), **state)
        if run.has_checkpoint():
            ck = run.read_checkpoint()
            out.write_checkpoint(ck.psi, ck.t, ck.step, len(frames), rng=ck.rng())
        out.attrs[KEPT_ATTR] = json.dumps({"keep": keep, "of_frames": int(run.n_frames),
                                           "frames": [int(f) for f in frames]})
        out.mark_complete()
    except BaseException:
        out.close()
        tmp.unlink(missing_ok=True)
        raise
    out.close()
