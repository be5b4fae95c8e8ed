"""On-disk cache of (beta, omega) tables, one file per key and exact requested settings.

As for the densities of states (:mod:`thermo.dos.cache`): a table is stored as a compressed npz
under ``$XDG_CACHE_HOME/vortherm/dos`` (beside them, files ``rot_*.npz``), named by a digest of
(N+, N-, domain key, core radius, format version) and of the requested
:class:`~thermo.rotation.table.RotatingSettings` (the omega range included), reused only on an
exact match, seeded from that digest, written atomically (temporary file, then rename) and
remembered in memory once read.

Units: as :class:`~thermo.rotation.table.RotatingTable`.
"""

from __future__ import annotations

import hashlib
import json
import warnings
import zipfile
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np

from thermo.atomic import write_npz
from thermo.dos.cache import CacheWarning, default_cache_dir
from thermo.errors import SamplerError
from thermo.rotation.table import (
    DEFAULT_SETTINGS,
    RotatingSettings,
    RotatingTable,
    build_table,
)

#: bump when the file layout changes (it is part of the digest)
FORMAT_VERSION = 1
_ARRAYS = ("betas", "omegas", "beta_axis", "omega_axis", "n_k", "energies", "impulses", "f",
           "log_denom", "boot_log_denom", "boot_counts", "grid_betas", "grid_omegas",
           "log_z_grid")
_LOADED: dict[Path, tuple[int, int, RotatingTable]] = {}


def table_key(n_plus: int, n_minus: int, domain: Any, core_radius: float,
              settings: RotatingSettings) -> str:
    """What a stored table depends on, as a JSON text (the digest is taken of it)."""
    return json.dumps({"n_plus": int(n_plus), "n_minus": int(n_minus),
                       "domain": list(domain.key()), "core_radius": float(core_radius),
                       "format_version": FORMAT_VERSION, "settings": asdict(settings)},
                      sort_keys=True)


def table_path(n_plus: int, n_minus: int, domain: Any, core_radius: float,
               cache_dir: Any = None, settings: RotatingSettings = DEFAULT_SETTINGS) -> Path:
    """File of the cached table for this key and these settings."""
    digest = hashlib.sha1(table_key(n_plus, n_minus, domain, core_radius,
                                    settings).encode()).hexdigest()[:16]
    d = Path(cache_dir) if cache_dir is not None else Path(default_cache_dir())
    return d / f"rot_{int(n_plus)}p{int(n_minus)}m_{digest}.npz"


def save(table: RotatingTable, path: Any, key: str) -> None:
    """Write a table atomically (``<name>.<pid>.part``, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    meta = {"n_plus": table.n_plus, "n_minus": table.n_minus, "domain_key": table.domain_key,
            "core_radius": table.core_radius, "settings": table.settings, "key": key}
    arrays = {k: getattr(table, k) for k in _ARRAYS}
    arrays.update({f"diag__{k}": v for k, v in table.diagnostics.items()})
    arrays["meta"] = np.array(json.dumps(meta))
    write_npz(path, arrays)


def load(path: Any) -> tuple[RotatingTable, str]:
    """Read a table written by :func:`save`: (table, its key). SamplerError names a damaged file."""
    try:
        with np.load(Path(path), allow_pickle=False) as z:
            meta = json.loads(str(z["meta"]))
            diag = {k[6:]: z[k] for k in z.files if k.startswith("diag__")}
            table = RotatingTable(
                n_plus=int(meta["n_plus"]), n_minus=int(meta["n_minus"]),
                domain_key=meta["domain_key"], core_radius=float(meta["core_radius"]),
                diagnostics=diag, settings=meta["settings"], **{k: z[k] for k in _ARRAYS})
    except (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile) as exc:
        raise SamplerError(f"{path}: damaged (beta, omega) table cache entry "
                           f"({type(exc).__name__}: {exc}); it is rebuilt by the next "
                           "estimate, or delete it") from None
    return table, str(meta["key"])


def load_or_build_table(n_plus: int, n_minus: int, domain: Any, core_radius: float,
                        cache_dir: Any = None, seed: int | np.random.Generator | None = None,
                        settings: RotatingSettings = DEFAULT_SETTINGS,
                        progress=None) -> RotatingTable:
    """The (beta, omega) table for this key and settings, from disk if stored, else built.

    ``seed`` None derives the build's seed from the key (a rebuild is reproducible);
    ``progress(done, total)`` is told the sweeps of a build.

    Units: core radius in the domain's length unit.
    """
    if int(n_plus) < 0 or int(n_minus) < 0 or int(n_plus) + int(n_minus) < 2:
        raise SamplerError(f"need n_plus, n_minus >= 0 and at least two vortices; got "
                           f"({n_plus}, {n_minus})")
    key = table_key(n_plus, n_minus, domain, core_radius, settings)
    path = table_path(n_plus, n_minus, domain, core_radius, cache_dir, settings)
    if path.exists():
        st = path.stat()
        hit = _LOADED.get(path)
        if hit is not None and hit[:2] == (st.st_mtime_ns, st.st_size):
            return hit[2]
        try:
            table, stored_key = load(path)
        except SamplerError as exc:
            warnings.warn(CacheWarning(f"{exc}; rebuilding it now"), stacklevel=2)
            table, stored_key = None, ""
        if table is not None and stored_key == key:
            _LOADED[path] = (st.st_mtime_ns, st.st_size, table)
            return table
    if seed is None:
        seed = int(hashlib.sha1(key.encode()).hexdigest()[:15], 16)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    table = build_table(n_plus, n_minus, domain, core_radius, settings, rng, progress)
    save(table, path, key)
    st = path.stat()
    _LOADED[path] = (st.st_mtime_ns, st.st_size, table)
    return table
