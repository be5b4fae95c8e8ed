"""The output folder of a sweep: its manifest, and the check that a rerun is the same sweep.

A sweep folder is resumed point by point, so it must never join runs of two protocols. The
manifest keeps, for every point, its overrides and a digest of what its run depends on (the
resolved protocol, its text and the static trap on the grid, so an edited mask image counts);
a rerun whose digests differ is refused by name, or the changed points are moved aside and
computed again when asked to.

Units: none (bookkeeping).
"""

from __future__ import annotations

import hashlib
import json
import shutil
import time
from pathlib import Path
from typing import Any, Callable, Mapping

from gpe.errors import VorthermError
from gpe.sweep.file import Point, Sweep, SweepError
from gpe.sweep.table import SUMMARY_FORMAT_VERSION, read_json, write_json

# NumPy and the protocol are imported inside protocol_fingerprint, for the reason given in
# gpe/sweep/execute.py (spawned workers import the sweep modules before their thread limits).


def protocol_fingerprint(base: str, overrides: tuple[str, ...]) -> dict:
    """What a point's run depends on: a digest of its resolved protocol and static trap.

    The digest covers the protocol text, the overrides, every resolved value and the static
    potential on the grid, so an edited mask image changes it too. ``settings`` is the resolved
    protocol flattened to ``key: value`` (for naming what changed).
    """
    import warnings

    import numpy as np  # imported here: see the note at the top of this module

    from gpe.errors import ProtocolWarning
    from gpe.setup.protocol import load_protocol

    try:
        with warnings.catch_warnings():   # shown once when the sweep file was checked
            warnings.simplefilter("ignore", ProtocolWarning)
            protocol = load_protocol(base, overrides)
            potential = protocol.build_trap()
    except VorthermError as exc:          # an invalid point fails on its own when it runs
        return {"digest": f"invalid: {exc}", "settings": {}}
    resolved = protocol.to_dict()
    resolved.pop("source_name", None)
    h = hashlib.sha256(json.dumps(resolved, sort_keys=True).encode())
    h.update(protocol.source_text.encode())
    h.update(np.ascontiguousarray(potential, dtype=np.float64).tobytes())
    return {"digest": h.hexdigest(), "settings": _flatten(resolved)}


def _flatten(tree: Any, prefix: str = "") -> dict:
    if isinstance(tree, dict):
        out = {}
        for k, v in tree.items():
            out.update(_flatten(v, f"{prefix}{k}."))
        return out
    if isinstance(tree, list) and tree and all(isinstance(v, dict) for v in tree):
        out = {}
        for i, v in enumerate(tree):
            out.update(_flatten(v, f"{prefix}{i}."))
        return out
    return {prefix[:-1]: tree}


def _changes(old: Mapping, new: Mapping, limit: int = 6) -> str:
    keys = sorted(k for k in set(old) | set(new) if old.get(k) != new.get(k)
                  and not k.startswith(("units.", "atoms.")))
    shown = [f"{k}: {old.get(k)!r} -> {new.get(k)!r}" for k in keys[:limit]]
    return "; ".join(shown) + (f"; and {len(keys) - limit} more" if len(keys) > limit else "")


def prepare_output(sweep: Sweep, out_dir: Path, fingerprint: Callable[[str, tuple], dict],
             restart_changed: bool) -> list[Point]:
    """Create the output folder; refuse one that belongs to a different sweep or protocol.

    A point whose protocol (base file, overrides, files it reads) changed since its run was
    started is refused by name, or, with ``restart_changed``, its run file and record are moved
    to ``superseded/<time>/`` and it is computed again.
    """
    points = sweep.points()
    manifest = out_dir / "manifest.json"
    old = read_json(manifest) if manifest.exists() else None
    prints = {p.point_id: fingerprint(str(sweep.base), p.overrides) for p in points}
    new = {"format_version": SUMMARY_FORMAT_VERSION, "sweep_file": sweep.source,
           "base": str(sweep.base), "points": {p.point_id: list(p.overrides) for p in points},
           "digests": {pid: f["digest"] for pid, f in prints.items()}}
    base_print = fingerprint(str(sweep.base), ())
    new["base_settings"] = base_print["settings"]
    changed = []
    if old is not None:
        for pid, overrides in old.get("points", {}).items():
            if pid in new["points"] and new["points"][pid] != overrides:
                raise SweepError(
                    f"output folder '{out_dir}' belongs to a different sweep: point {pid} was "
                    f"{overrides}, now {new['points'][pid]}; choose a new output folder (finished "
                    f"runs are never overwritten)")
        old_digests = old.get("digests", {})
        changed = sorted(pid for pid in new["digests"] if pid in old.get("points", {})
                         and old_digests.get(pid) != new["digests"][pid]
                         and ((out_dir / "runs" / f"{pid}.h5").exists()
                              or (out_dir / "points" / f"{pid}.json").exists()))
        if changed and not restart_changed:
            what = _changes(old.get("base_settings", {}), new["base_settings"])
            what = (f"changed in the base protocol: {what}" if what else
                    "the resolved base protocol is the same, so a file it reads (a mask image) or "
                    "the overrides' meaning changed")
            raise SweepError(
                f"output folder '{out_dir}' was started with another protocol: {len(changed)} of "
                f"{len(points)} points differ (e.g. {changed[0]}); {what}. Its runs are kept. "
                f"Choose a new output folder (-o), or rerun with --restart-changed to move the "
                f"changed points' files to {out_dir / 'superseded'} and compute them again")
        new["points"] = {**old.get("points", {}), **new["points"]}
        new["digests"] = {**old_digests, **new["digests"]}
    (out_dir / "runs").mkdir(parents=True, exist_ok=True)
    (out_dir / "points").mkdir(exist_ok=True)
    if changed:
        aside = out_dir / "superseded" / time.strftime("%Y%m%d-%H%M%S")
        aside.mkdir(parents=True, exist_ok=True)
        for pid in changed:
            for path in (out_dir / "runs" / f"{pid}.h5", out_dir / "points" / f"{pid}.json"):
                if path.exists():
                    shutil.move(str(path), str(aside / path.name))
    write_json(manifest, new)
    (out_dir / "sweep.toml").write_text(sweep.text, encoding="utf-8")
    return points
