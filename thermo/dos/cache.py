"""On-disk cache of densities of states (thermo.dos.model), keyed by (N+, N-, domain, core radius).

A density of states costs a parallel-tempering run and an MBAR bootstrap to build (seconds to
minutes), and the estimators ask for the same few keys again and again, across processes. So
:func:`load_or_build` keeps each build as a compressed npz file (samples, MBAR solution,
bootstrap replicates and the tables of :mod:`thermo.dos.tables`) under
``$XDG_CACHE_HOME/vortherm/dos``, one file per key *and* requested settings (effort and ladder
reach), and remembers loaded files in memory so repeated estimates in one process do not re-read
them. A request is served only by a build made with exactly its settings, and every build is
seeded from its key and reach: the same estimate gives the same numbers whatever else ran before
(a bigger build left by another command is never substituted). Files are written atomically
(temporary file, then rename), so concurrent processes never read half a file; the temporary
file of a writer that was killed is removed by the next save of that entry.

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0; core radius in the domain's length
unit.
"""

from __future__ import annotations

import hashlib
import json
import os
import warnings
import zipfile
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np

from thermo.atomic import write_npz
from thermo.dos import tables as dos_tables
from thermo.dos.build import DosSettings, build
from thermo.dos.model import DensityOfStates
from thermo.errors import SamplerError

#: bump when the file layout changes: it is part of :func:`cache_key`, so files of another
#: version are left alone (and refused by :func:`load`) and the build is redone under a new name
FORMAT_VERSION = 6  # 6: one file per requested settings (exact reuse only); 5: configurations
# of the observed subset kept; bootstrap blocks shared across rungs; ladders of several reaches
#: densities of states already read in this process: path -> (mtime_ns, size, dos), so
#: repeated estimates do not re-read the npz (a changed file is read again)
_LOADED: dict[Path, tuple[int, int, DensityOfStates]] = {}


def default_cache_dir() -> "os.PathLike[str]":
    """$XDG_CACHE_HOME/vortherm/dos (or ~/.cache/vortherm/dos)."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "vortherm" / "dos"


def cache_key(n_plus: int, n_minus: int, domain: Any, core_radius: float) -> tuple:
    """(N+, N-, domain key, core radius, format version): what a stored DOS depends on."""
    return (int(n_plus), int(n_minus), tuple(domain.key()), float(core_radius), FORMAT_VERSION)


def build_seed(key: tuple, reach: int = 0) -> int:
    """The seed of a build of ``key``: a hash of the key (and reach), stable across processes."""
    return int(hashlib.sha1(repr((key, int(reach))).encode()).hexdigest()[:15], 16)


def settings_request(settings: DosSettings) -> dict:
    """The requested settings as plain JSON data: what a stored build must match exactly."""
    req = asdict(settings)
    req["betas"] = None if settings.betas is None else [float(b) for b in settings.betas]
    return {k: (int(v) if isinstance(v, (bool, np.integer)) else v) for k, v in req.items()}


def cache_path(n_plus: int, n_minus: int, domain: Any, core_radius: float,
               cache_dir: Any = None, settings: DosSettings = DosSettings()) -> Path:
    """File name of the cached density of states for this key and these settings."""
    key = cache_key(n_plus, n_minus, domain, core_radius)
    request = json.dumps(settings_request(settings), sort_keys=True)
    digest = hashlib.sha1(repr((key, request)).encode()).hexdigest()[:16]
    d = Path(cache_dir) if cache_dir is not None else Path(default_cache_dir())
    return d / f"dos_{int(n_plus)}p{int(n_minus)}m_{digest}.npz"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:      # another user's process: alive
        return True
    return True


def _remove_stale_parts(path: Path) -> None:
    """Delete temporary files of ``path`` left by writers that no longer run (SIGKILLed)."""
    for part in path.parent.glob(f"{path.name}.*.part"):
        pid = part.name[len(path.name) + 1:-len(".part")]
        if pid.isdigit() and int(pid) != os.getpid() and not _alive(int(pid)):
            part.unlink(missing_ok=True)


def save(dos: DensityOfStates, path: Any, key: tuple, request: dict | None = None) -> None:
    """Write a DensityOfStates to ``path`` (npz), atomically (temp file, then rename).

    ``request`` is the settings the build was asked for (:func:`settings_request`), stored so
    that a load can check it. The temporary file is ``<name>.<pid>.part``; those of dead writers
    are removed first.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    _remove_stale_parts(path)
    meta = dict(n_plus=dos.n_plus, n_minus=dos.n_minus, domain_key=dos.domain_key,
                core_radius=dos.core_radius, settings=dos.settings, key=repr(key),
                request=request, format_version=FORMAT_VERSION)
    arrays = dict(betas=dos.betas, n_k=dos.n_k, energies=dos.energies, f=dos.f,
                  log_denom=dos.log_denom, boot_f=dos.boot_f, boot_counts=dos.boot_counts,
                  sample_index=dos.sample_index, sample_positions=dos.sample_positions,
                  meta=np.array(json.dumps(meta)))
    arrays.update({f"obs__{k}": v for k, v in dos.observables.items()})
    arrays.update({f"diag__{k}": v for k, v in dos.diagnostics.items()})
    if dos.has_tables():   # the tables cost more than a load: a second process reuses them
        arrays.update({f"tab__{k}": v for k, v in dos.tables.items()})
    write_npz(path, arrays)


class CacheWarning(UserWarning):
    """A cached density of states was damaged and is being rebuilt; the message names the file."""


def load(path: Any) -> tuple[DensityOfStates, dict]:
    """Read a DensityOfStates written by :func:`save`; returns (dos, metadata).

    Raises
    ------
    SamplerError
        Naming the file, when it is of another format version, truncated or otherwise damaged.
    """
    try:
        return _read(Path(path))
    except SamplerError:
        raise
    except (OSError, EOFError, ValueError, KeyError, zipfile.BadZipFile) as exc:
        raise SamplerError(f"{path}: damaged density-of-states cache entry ({type(exc).__name__}: "
                           f"{exc}); it is rebuilt by the next estimate, or delete it") from None


def _read(path: Path) -> tuple[DensityOfStates, dict]:
    with np.load(path, allow_pickle=False) as z:
        meta = json.loads(str(z["meta"]))
        if meta.get("format_version") != FORMAT_VERSION:
            raise SamplerError(f"{path}: DOS cache format {meta.get('format_version')} != "
                               f"{FORMAT_VERSION}; delete the file to rebuild it")
        obs = {k[5:]: z[k] for k in z.files if k.startswith("obs__")}
        diag = {k[6:]: z[k] for k in z.files if k.startswith("diag__")}
        dos = DensityOfStates(
            n_plus=int(meta["n_plus"]), n_minus=int(meta["n_minus"]),
            domain_key=meta["domain_key"], core_radius=float(meta["core_radius"]),
            betas=z["betas"], n_k=z["n_k"], energies=z["energies"], f=z["f"],
            log_denom=z["log_denom"], boot_f=z["boot_f"], boot_counts=z["boot_counts"],
            observables=obs, diagnostics=diag, settings=meta["settings"],
            sample_index=z["sample_index"], sample_positions=z["sample_positions"])
        tables = {k[5:]: z[k] for k in z.files if k.startswith("tab__")}
    if dos_tables.tables_valid(tables, dos):
        object.__setattr__(dos, "_tables", tables)
    return dos, meta


def load_or_build(n_plus: int, n_minus: int, domain: Any, core_radius: float,
                  cache_dir: Any = None, seed: int | np.random.Generator | None = None,
                  settings: DosSettings = DosSettings(), progress=None) -> DensityOfStates:
    """The density of states for (N+, N-, domain, core radius), from disk if possible.

    The file is keyed by :func:`cache_key` and the requested ``settings``; a stored build is
    reused only when it was asked for with exactly these settings (so the result never depends
    on what else is in the cache), otherwise it is built and stored.

    Parameters
    ----------
    n_plus, n_minus : vortex numbers; domain : a thermo.domains.base.Domain;
    core_radius : hard-core radius a (domain length unit).
    cache_dir : directory; default ``$XDG_CACHE_HOME/vortherm/dos``.
    seed : int or Generator for a build (a cache hit ignores it); None (the default) derives
        the seed from the cache key and the reach (:func:`build_seed`), so different gases
        do not share one seed's statistical error while a rebuild of one key is reproducible.
    settings : DosSettings (effort).
    progress : callable ``progress(done, total)`` for a build, in Monte Carlo sweeps
        (:func:`thermo.dos.build.build`); a stored entry is loaded without calling it.

    Units: energies in E0, betas in 1/E0, a in the domain's length unit.
    """
    if int(n_plus) < 0 or int(n_minus) < 0 or int(n_plus) + int(n_minus) < 1:
        raise SamplerError(f"need n_plus, n_minus >= 0 and at least one vortex; got "
                           f"({n_plus}, {n_minus})")
    path = cache_path(n_plus, n_minus, domain, core_radius, cache_dir, settings)
    request = settings_request(settings)
    key = cache_key(n_plus, n_minus, domain, core_radius)
    if path.exists():
        st = path.stat()
        hit = _LOADED.get(path)
        if hit is not None and hit[:2] == (st.st_mtime_ns, st.st_size):
            return hit[2]
        try:
            dos, meta = load(path)
        except SamplerError as exc:     # damaged entry: say so, rebuild it in place
            warnings.warn(CacheWarning(f"{exc}; rebuilding it now"), stacklevel=2)
            dos, meta = None, {}
        if dos is not None and meta.get("request") == request and meta.get("key") == repr(key):
            if not dos.has_tables():     # written before tables existed: add them once
                _ = dos.tables
                save(dos, path, key, request)
            _remember(path, dos)
            return dos
    if seed is None:
        seed = build_seed(key, settings.reach)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    dos = build(n_plus, n_minus, domain, core_radius, settings, rng, progress=progress)
    _ = dos.tables                       # computed once here, stored with the samples
    save(dos, path, key, request)
    _remember(path, dos)
    return dos


def _remember(path: Path, dos: DensityOfStates) -> None:
    st = path.stat()
    _LOADED[path] = (st.st_mtime_ns, st.st_size, dos)
