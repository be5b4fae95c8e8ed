"""Two-dimensional complex FFTs for the split-step solver, behind one small interface.

Two backends implement :class:`FFTBackend`:

* :class:`PyFFTWBackend` -- FFTW plans built once (``FFTW_MEASURE`` by default) on SIMD-aligned
  scratch arrays and re-targeted at the caller's arrays without copying. Plans use all available
  cores by default. FFTW "wisdom" (the result of plan measurement) is cached on disk per host in
  the user's cache directory, so measuring happens once per machine and shape.
* :class:`ScipyBackend` -- ``scipy.fft`` with ``workers=threads``; the "auto" backend of the
  reproducible planning mode (:data:`PLANNING`) and the fallback when pyFFTW is missing. It
  writes through ``overwrite_x`` (in place, no allocation, for C-contiguous complex arrays) and
  copies into ``out`` otherwise.

Both transform the last two axes of a C-contiguous ``(ny, nx)`` array of ``complex128`` or
``complex64``, in place (``out is a`` or ``out=None``) or into a preallocated ``out``.
Normalization follows ``numpy.fft``: the forward transform is unscaled and the inverse divides by
``nx * ny`` unless ``normalise=False`` (the solver folds 1/N into its kinetic factor instead of
spending a pass over the array on it).

Units: none (dimensionless transforms).
"""

from __future__ import annotations

import base64
import json
import os
import socket
import tempfile
from pathlib import Path
from typing import Protocol, runtime_checkable

import numpy as np

from gpe.errors import VorthermError

# pyFFTW's threads come from the GNU OpenMP runtime it bundles, which reads OMP_WAIT_POLICY once
# when pyFFTW is first imported (lazily, below).  Passive waiting stops idle FFT workers from
# spinning on the cores the solver's numba kernels need next; see gpe/field/kernels.py for the numbers.
# setdefault keeps a user's own setting.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

_SUPPORTED = (np.dtype(np.complex128), np.dtype(np.complex64))


def available_threads() -> int:
    """Number of cores this process may run on (respects CPU affinity, e.g. under a scheduler)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not every platform has sched_getaffinity
        return max(1, os.cpu_count() or 1)


def auto_threads(shape: tuple[int, ...], min_points_per_thread: int = 1 << 16) -> int:
    """Threads worth using for arrays of ``shape``: one for small grids, all cores for large.

    Below ~65k points per thread the synchronisation of a threaded FFT or kernel costs more
    than it saves (measured on 2 cores; common practice for FFTW).
    """
    points = int(np.prod(shape))
    return max(1, min(available_threads(), points // min_points_per_thread))


@runtime_checkable
class FFTBackend(Protocol):
    """What the solver needs from an FFT implementation.

    Attributes ``name``, ``shape``, ``dtype``, ``threads``; ``empty()`` returns an array suited
    to the backend (aligned for FFTW); ``forward``/``inverse`` transform the last two axes.
    """

    name: str
    shape: tuple[int, int]
    dtype: np.dtype
    threads: int

    def empty(self) -> np.ndarray: ...

    def forward(self, a: np.ndarray, out: np.ndarray | None = None) -> np.ndarray: ...

    def inverse(
        self, a: np.ndarray, out: np.ndarray | None = None, normalise: bool = True
    ) -> np.ndarray: ...


def _check_array(backend: FFTBackend, a: np.ndarray, role: str) -> None:
    if a.shape != backend.shape or a.dtype != backend.dtype or not a.flags.c_contiguous:
        raise VorthermError(
            f"{backend.name} FFT was planned for a C-contiguous {backend.dtype} array of shape "
            f"{backend.shape}; got {role} with dtype {a.dtype}, shape {a.shape}, "
            f"C-contiguous={a.flags.c_contiguous}"
        )


class ScipyBackend:
    """``scipy.fft`` backend (fallback). See the module docstring for conventions."""

    name = "scipy"

    def __init__(self, shape: tuple[int, int], dtype, threads: int | None = None) -> None:
        import scipy.fft

        self._fft = scipy.fft
        self.shape = tuple(int(s) for s in shape)
        self.dtype = np.dtype(dtype)
        self.threads = available_threads() if threads is None else int(threads)

    def empty(self) -> np.ndarray:
        """An uninitialised array of the planned shape and dtype."""
        return np.empty(self.shape, self.dtype)

    def _finish(self, result: np.ndarray, a: np.ndarray, out: np.ndarray | None) -> np.ndarray:
        target = a if out is None else out
        if not np.shares_memory(result, target) or result.ctypes.data != target.ctypes.data:
            target[...] = result
        return target

    def forward(self, a: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Unscaled forward transform of ``a`` into ``out`` (``None``: in place)."""
        _check_array(self, a, "input")
        if out is not None:
            _check_array(self, out, "output")
        in_place = out is None or out is a
        result = self._fft.fft2(a, overwrite_x=in_place, workers=self.threads)
        return self._finish(result, a, out)

    def inverse(
        self, a: np.ndarray, out: np.ndarray | None = None, normalise: bool = True
    ) -> np.ndarray:
        """Inverse transform, divided by ``nx*ny`` when ``normalise`` (``out=None``: in place)."""
        _check_array(self, a, "input")
        if out is not None:
            _check_array(self, out, "output")
        in_place = out is None or out is a
        norm = "backward" if normalise else "forward"
        result = self._fft.ifft2(a, overwrite_x=in_place, workers=self.threads, norm=norm)
        return self._finish(result, a, out)


# -- FFTW wisdom cache -------------------------------------------------------------------------
_wisdom_loaded: set[str] = set()


def default_wisdom_path() -> Path:
    """Per-host wisdom file in ``$XDG_CACHE_HOME/vortherm`` (``~/.cache/vortherm`` by default).

    Wisdom is specific to the CPU, so the host name is part of the file name.
    """
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    host = "".join(c if c.isalnum() or c in "-_." else "_" for c in socket.gethostname())
    return Path(base) / "vortherm" / f"fftw-wisdom-{host or 'unknown'}.json"


def load_wisdom(path: Path) -> bool:
    """Import FFTW wisdom from ``path``; a missing or damaged file only costs planning time.

    Returns True when wisdom was imported.
    """
    import pyfftw

    try:
        blobs = json.loads(path.read_text(encoding="ascii"))["wisdom"]
        wisdom = tuple(base64.b64decode(b) for b in blobs)
        pyfftw.import_wisdom(wisdom)
    except (OSError, ValueError, KeyError, TypeError):
        return False
    return True


def save_wisdom(path: Path) -> bool:
    """Write the process's FFTW wisdom to ``path`` atomically (temporary file + rename).

    Concurrent writers (sweep workers) cannot leave a half-written file; the last writer wins,
    which only loses wisdom, never correctness. Returns True on success.
    """
    import pyfftw

    blobs = [base64.b64encode(w).decode("ascii") for w in pyfftw.export_wisdom()]
    text = json.dumps({"format": "fftw-wisdom", "pyfftw": pyfftw.__version__, "wisdom": blobs})
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=path.name, suffix=".tmp", dir=path.parent)
        try:
            with os.fdopen(fd, "w", encoding="ascii") as handle:
                handle.write(text)
            os.replace(tmp, path)
        except OSError:
            os.unlink(tmp)
            raise
    except OSError:
        return False
    return True


class PyFFTWBackend:
    """pyFFTW backend with plans built once. See the module docstring for conventions.

    Parameters
    ----------
    shape : (ny, nx)
    dtype : complex128 or complex64
    threads : int, optional
        FFTW threads; all available cores by default.
    planner : str
        FFTW planner flag, ``"FFTW_MEASURE"`` by default (``"FFTW_ESTIMATE"`` plans instantly).
    wisdom : bool or path
        True: load/save the per-host cache file; a path: use that file; False: no cache.
    """

    name = "pyfftw"

    def __init__(
        self,
        shape: tuple[int, int],
        dtype,
        threads: int | None = None,
        planner: str = "FFTW_MEASURE",
        wisdom: bool | str | os.PathLike = True,
    ) -> None:
        import pyfftw

        self._pyfftw = pyfftw
        self.shape = tuple(int(s) for s in shape)
        self.dtype = np.dtype(dtype)
        self.threads = available_threads() if threads is None else int(threads)
        path = None
        if wisdom is True:
            path = default_wisdom_path()
        elif wisdom:
            path = Path(wisdom)
        if path is not None and str(path) not in _wisdom_loaded:
            load_wisdom(path)
            _wisdom_loaded.add(str(path))
        before = pyfftw.export_wisdom() if path is not None else None

        # Planning with FFTW_MEASURE overwrites its arrays, so plans are made on scratch arrays
        # and later pointed at the caller's arrays with update_arrays (no copy).
        a = self.empty()
        b = self.empty()
        common = dict(axes=(-2, -1), flags=(planner,), threads=self.threads)
        self._plans = {
            ("f", True): pyfftw.FFTW(a, a, direction="FFTW_FORWARD", **common),
            ("b", True): pyfftw.FFTW(a, a, direction="FFTW_BACKWARD", **common),
            ("f", False): pyfftw.FFTW(a, b, direction="FFTW_FORWARD", **common),
            ("b", False): pyfftw.FFTW(a, b, direction="FFTW_BACKWARD", **common),
        }
        self._scale = 1.0 / (self.shape[0] * self.shape[1])
        self._bounce = self.empty()  # for callers whose arrays are not SIMD-aligned
        if path is not None and pyfftw.export_wisdom() != before:
            save_wisdom(path)

    def empty(self) -> np.ndarray:
        """An uninitialised SIMD-aligned array of the planned shape and dtype."""
        return self._pyfftw.empty_aligned(self.shape, dtype=self.dtype)

    def _run(self, direction: str, a: np.ndarray, out: np.ndarray | None) -> np.ndarray:
        _check_array(self, a, "input")
        if out is None:
            out = a
        else:
            _check_array(self, out, "output")
        align = self._pyfftw.simd_alignment
        if a.ctypes.data % align or out.ctypes.data % align:
            # Rare path: run in place on the aligned bounce buffer (one copy each way).
            self._bounce[...] = a
            plan = self._plans[(direction, True)]
            plan.update_arrays(self._bounce, self._bounce)
            plan.execute()
            out[...] = self._bounce
            return out
        plan = self._plans[(direction, out is a)]
        plan.update_arrays(a, out)
        plan.execute()
        return out

    def forward(self, a: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Unscaled forward transform of ``a`` into ``out`` (``None``: in place)."""
        return self._run("f", a, out)

    def inverse(
        self, a: np.ndarray, out: np.ndarray | None = None, normalise: bool = True
    ) -> np.ndarray:
        """Inverse transform, divided by ``nx*ny`` when ``normalise`` (``out=None``: in place)."""
        result = self._run("b", a, out)
        if normalise:
            result *= self._scale
        return result


def pyfftw_available() -> bool:
    """True when pyFFTW can be imported."""
    try:
        import pyfftw  # noqa: F401
    except ImportError:
        return False
    return True


#: FFT planning modes. "reproducible": transforms fixed by rule, never by timing, so two
#: processes with the same shape and precision transform identically and a run resumed
#: elsewhere continues bit for bit. With the "auto" backend this is scipy.fft (pocketfft: no
#: planning at all; each 1D transform is computed the same way whatever the thread count),
#: because FFTW_ESTIMATE plans for the strided column pass are slow: at 256^2 and 512^2 a 2D
#: estimate-mode transform took 3.0 and 13.5 ms against 0.37 and ~1.1 ms measured and 0.7 and
#: 3.3 ms with scipy.fft (one thread; benchmarks/step.py). With the "pyfftw" backend asked
#: for explicitly it is FFTW_ESTIMATE with the process's wisdom forgotten first (FFTW applies
#: any wisdom it holds even to estimate-mode plans, which would make them depend on what was
#: planned before in the process). "measured": FFTW_MEASURE plans timed on this machine and
#: kept as wisdom: fastest, but the plan (and so the last bits of every transform) may differ
#: between processes and machines.
PLANNING = {"reproducible": {"planner": "FFTW_ESTIMATE", "wisdom": False, "deterministic": True},
            "measured": {"planner": "FFTW_MEASURE", "wisdom": True, "deterministic": False}}


def planning_options(planning: str) -> dict:
    """The pyFFTW options of a planning mode (see :data:`PLANNING`)."""
    if planning not in PLANNING:
        raise VorthermError(f"FFT planning {planning!r}; accepted: "
                            + ", ".join(f'"{k}"' for k in PLANNING))
    return dict(PLANNING[planning])


def make_fft(
    shape: tuple[int, int],
    dtype=np.complex128,
    backend: str = "auto",
    threads: int | None = None,
    **options,
) -> FFTBackend:
    """Build a 2D FFT backend for arrays of ``shape`` and ``dtype``.

    Parameters
    ----------
    shape : (ny, nx)
    dtype : complex128 or complex64
    backend : {"auto", "pyfftw", "scipy"}
        "auto" takes pyFFTW when it is installed and scipy.fft otherwise.
    threads : int, optional
        Worker threads; all available cores by default.
    **options
        Passed to :class:`PyFFTWBackend` (``planner``, ``wisdom``); ignored by scipy.
        ``deterministic`` (from :func:`planning_options`): the "auto" backend is then scipy.fft,
        and an explicit "pyfftw" plans with no wisdom in the process (see :data:`PLANNING`).

    Units: none.
    """
    dtype = np.dtype(dtype)
    if dtype not in _SUPPORTED:
        raise VorthermError(f"FFT dtype must be complex128 or complex64, got {dtype}")
    if len(shape) != 2 or min(shape) < 1:
        raise VorthermError(f"FFT shape must be (ny, nx) with positive sizes, got {shape!r}")
    if threads is not None and int(threads) < 1:
        raise VorthermError(f"FFT threads must be >= 1 or None (all cores), got {threads!r}")
    deterministic = options.pop("deterministic", False)
    if backend == "auto":
        backend = "pyfftw" if pyfftw_available() and not deterministic else "scipy"
    if backend == "pyfftw":
        if not pyfftw_available():
            raise VorthermError('fft backend "pyfftw" requested but pyFFTW is not installed; '
                                'install pyfftw or use "scipy" or "auto"')
        if deterministic:
            import pyfftw

            pyfftw.forget_wisdom()   # estimate-mode plans would otherwise reuse measured ones
        return PyFFTWBackend(shape, dtype, threads, **options)
    if backend == "scipy":
        return ScipyBackend(shape, dtype, threads)
    raise VorthermError(f'unknown fft backend {backend!r}; accepted: "auto", "pyfftw", "scipy"')
