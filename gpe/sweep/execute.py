"""Parameter sweeps: a grid of protocol overrides -> one run per point and seed -> a summary table.

A sweep file (TOML) names a base protocol, one or more axes (protocol keys in the protocol's own
units, written exactly as ``--set`` overrides), the noise seeds and what to measure at the end.
:func:`load_sweep` validates it (:mod:`gpe.sweep.file`); :func:`run_sweep` runs every point
through an executor (anything with ``submit`` returning :class:`concurrent.futures.Future`: a
local process pool, a dask distributed ``Client``), resumes an interrupted sweep from its output
folder and writes the tables (CSV and HDF5, described in ``docs/sweep.md``) through
:mod:`gpe.sweep.table`.

Units: axis values in the protocol's units (the key's suffix says which); measurement times in the
protocol's time unit; beta in 1/E0 with E0 = rho kappa^2 / (4 pi); energies per vortex in E0.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import json
import logging
import multiprocessing
import os
import signal
import threading
import time
import traceback
import warnings
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from gpe.errors import VorthermError
from gpe.sweep.file import Measure, Point, Sweep, SweepError, time_unit_factor
from gpe.sweep.manifest import prepare_output, protocol_fingerprint
from gpe.sweep.table import (
    SweepResult,
    ensemble_summary,
    pool_seeds,
    read_json,
    summarise,
    write_json,
)
from gpe.sweep.thinning import thin_snapshots

logger = logging.getLogger(__name__)

# NumPy, h5py and the pipeline are imported inside functions on purpose: a spawned worker imports
# this module first, and the thread-count variables set by ``_init_worker`` only take effect if no
# numerical library has been loaded before.


def default_out_dir(sweep_path: str | os.PathLike) -> Path:
    """Where a sweep writes by default: ``out/<sweep file stem>/`` beside the sweep file."""
    path = Path(sweep_path)
    return path.parent / "out" / path.stem


# -- one point ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class PointTask:
    """Everything a worker needs for one point: plain data only, so it pickles anywhere.

    Units: ``threads`` is the number of FFT/numba threads the point may use.
    """

    point_id: str
    base: str
    overrides: tuple[str, ...]
    run_path: str
    measure: Measure
    threads: int | None = None
    stop_path: str = ""
    log_level: int = logging.WARNING
    coordinator_pid: int = 0
    keep_snapshots: str | int = "all"


def run_point(task: PointTask) -> dict:
    """The default point function: simulate (or resume) the run, then analyse it.

    A complete run file (verified by ``gpe.run.reading.is_complete``) is analysed without
    simulating again; an incomplete one is resumed from its checkpoint.
    """
    from gpe.run import (  # numerics: see the note at the top
        reading,
        simulate,
        thermometry,
    )
    from gpe.setup.protocol import load_protocol

    protocol = load_protocol(task.base, task.overrides)  # an invalid point fails here, cheaply
    run_path = Path(task.run_path)
    if run_path.exists() and not reading.is_complete(run_path):
        # an interrupted run continues with the protocol stored in its own file
        simulate.simulate_resume(run_path, threads=task.threads)
    elif not run_path.exists():
        simulate.simulate(protocol, run_path, threads=task.threads)
    if task.keep_snapshots != "all":
        thin_snapshots(run_path, task.keep_snapshots)   # before measuring: always the kept frames
    scale = time_unit_factor(protocol, task.measure.time_unit)
    m = task.measure
    at_time = None if m.at_time is None else m.at_time * scale
    window = None if m.window is None else (m.window[0] * scale, m.window[1] * scale)
    return thermometry.analyse(run_path, time=at_time, window=window,
                               rotating="omega" in m.quantities)


_WORKER_INTERRUPTED = False


def _execute(point_fn: Callable[[PointTask], Mapping], task: PointTask) -> dict:
    """Run one point in a worker; turn an ordinary failure into a record, so the sweep goes on.

    ``KeyboardInterrupt`` is not caught: it stops the sweep.
    """
    global _WORKER_INTERRUPTED
    if _WORKER_INTERRUPTED or (task.stop_path and os.path.exists(task.stop_path)):
        # the sweep was interrupted after this task was queued: do not start it
        return {"status": "cancelled", "values": {}, "error": "", "elapsed_s": 0.0}
    start = time.perf_counter()
    messages: list[dict] = []
    try:
        with _collected_messages(task, messages):
            raw = point_fn(task)
        values = {}
        for q in task.measure.quantities:
            if q not in raw:
                raise SweepError(f"the analysis returned no '{q}' (it gave {sorted(raw)})")
            values[q] = float(raw[q])
        record = {"status": "ok", "values": values, "error": "",
                  "ensemble": ensemble_summary(raw)}
    except KeyboardInterrupt:
        # Ctrl-C reaches the workers before the main process can leave the stop file; a worker
        # that saw it must not start the tasks still queued for it.
        _WORKER_INTERRUPTED = True
        raise
    except Exception as exc:  # noqa: BLE001 -- any failure of one point is recorded, not fatal
        record = {"status": "failed", "values": {}, "error": f"{type(exc).__name__}: {exc}",
                  "traceback": traceback.format_exc()}
    record["elapsed_s"] = time.perf_counter() - start
    record["messages"] = messages
    return record


class _Collector(logging.Handler):
    def __init__(self, level: int, messages: list[dict]) -> None:
        super().__init__(level)
        self.messages = messages

    def filter(self, record: logging.LogRecord) -> bool:
        return (record.name == "py.warnings" or record.name.split(".")[0] in ("gpe", "thermo")) \
            and record.levelno >= self.level

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append({"level": record.levelname, "logger": record.name,
                              "message": record.getMessage()})


def _one_line_warning(message, category, filename, lineno, line=None) -> str:
    return f"{message}"


@contextlib.contextmanager
def _collected_messages(task: PointTask, messages: list[dict]):
    """In a worker process: the point's log records (from ``task.log_level`` on) and its
    warnings, collected for the coordinator, which logs them with the point id.

    In the coordinator's own process (a thread pool, an in-process dask cluster) the records
    reach its handlers directly, and warnings' global state is not touched from threads.
    """
    if task.coordinator_pid in (0, os.getpid()):
        yield
        return
    root = logging.getLogger()
    handler = _Collector(task.log_level, messages)
    old_level, old_format = root.level, warnings.formatwarning
    root.addHandler(handler)
    root.setLevel(min(task.log_level, old_level or logging.WARNING))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")   # each point reports its own, even if repeated
            warnings.formatwarning = _one_line_warning
            logging.captureWarnings(True)
            try:
                yield
            finally:
                logging.captureWarnings(False)
                warnings.formatwarning = old_format
    finally:
        root.removeHandler(handler)
        root.setLevel(old_level)


def relay_messages(point_id: str, messages) -> None:
    """Log a worker's collected messages in this process, each with its point id."""
    for m in messages or ():
        level = logging.getLevelName(m.get("level", "WARNING"))
        logging.getLogger(m.get("logger") or __name__).log(
            level if isinstance(level, int) else logging.WARNING, "%s: %s", point_id,
            m.get("message", ""))


# -- executors ----------------------------------------------------------------------------------
def usable_cores() -> int:
    """Cores this process may run on (affinity-aware)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def plan_local(cores: int, workers: int | None = None, threads: int | None = None,
               n_tasks: int | None = None) -> tuple[int, int]:
    """Choose (workers, threads per worker) with workers x threads <= cores.

    Independent runs scale better than threads inside one FFT, so the default is one worker
    per core with one thread each; fewer tasks than workers hand the spare cores to threads.
    """
    for name, v in (("workers", workers), ("threads", threads)):
        if v is not None and (isinstance(v, bool) or not isinstance(v, int) or v < 1):
            raise SweepError(f"{name} must be an integer >= 1, got {v!r}")
    if workers is not None and threads is not None and workers * threads > cores:
        raise SweepError(f"{workers} workers x {threads} threads would oversubscribe the "
                         f"{cores} cores; choose workers x threads <= {cores}")
    for name, v in (("workers", workers), ("threads", threads)):
        if v is not None and v > cores:
            raise SweepError(f"{v} {name} exceed the {cores} usable cores")
    if workers is None:
        workers = max(1, cores // threads) if threads else cores
    if n_tasks is not None:
        workers = max(1, min(workers, n_tasks))
    if threads is None:
        threads = max(1, cores // workers)
    return workers, threads


def _init_worker(threads: int, coordinator_pid: int) -> None:
    # Set before numpy/numba/pyfftw are imported in this fresh (spawned) process.
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                "NUMBA_NUM_THREADS"):
        os.environ[var] = str(threads)
    threading.Thread(target=_exit_with_coordinator, args=(coordinator_pid,), daemon=True,
                     name="vortherm-coordinator-watch").start()


def _exit_with_coordinator(coordinator_pid: int, every_s: float = 0.5) -> None:
    """End this worker as soon as the coordinator is gone (killed by SIGKILL, say).

    A worker whose coordinator died would compute on and then block forever holding its run
    file; its checkpoint is already on disk, so the next sweep resumes the point.
    """
    while True:
        time.sleep(every_s)
        if os.getppid() != coordinator_pid:
            os._exit(3)


def local_executor(workers: int, threads: int) -> cf.ProcessPoolExecutor:
    """A process pool of ``workers`` spawned processes, each limited to ``threads`` threads."""
    return cf.ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context(
        "spawn"), initializer=_init_worker, initargs=(threads, os.getpid()))


def connect_scheduler(address: str, timeout: float = 20.0) -> Any:
    """A dask ``distributed.Client`` connected to the scheduler at ``address``.

    The address is checked for its form first (``tcp://HOST:PORT``, ``tls://HOST:PORT``, also
    ``ws://``, ``wss://``, ``ucx://``, or a bare ``HOST:PORT`` meaning tcp; an IPv6 host in
    brackets), then connected within ``timeout``. Every failure -- a malformed address, no
    scheduler listening, a refused TLS handshake -- is a :class:`SweepError` naming the address.

    Units: timeout in seconds.
    """
    schemes = ("tcp", "tls", "ws", "wss", "ucx")
    accepted = ("accepted: tcp://HOST:PORT or tls://HOST:PORT (also ws://, wss://, ucx://), "
                "or HOST:PORT for tcp, e.g. tcp://head:8786")
    text = address.strip() if isinstance(address, str) else ""
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    if rest.startswith("["):  # [IPv6]:port
        host, _, port = rest[1:].partition("]")
        colon, port = port[:1], port[1:]
    else:
        host, colon, port = rest.rpartition(":")
    problem = None
    if not text:
        problem = "it is empty"
    elif scheme.lower() not in schemes:
        problem = f"unknown scheme '{scheme}://'"
    elif "/" in rest or any(c.isspace() for c in rest):
        problem = "a path or a space after the scheme"
    elif not colon:
        problem = "no ':PORT' after the host"
    elif not host:
        problem = "no host name"
    elif not (port.isdigit() and 0 < int(port) < 65536):
        problem = f"port {port!r} is not a number 1..65535"
    if problem is not None:
        raise SweepError(f"scheduler address {address!r} (--scheduler) is not a Dask scheduler "
                         f"address: {problem}; {accepted}")
    try:  # imported here: dask.distributed is an optional extra (vortherm[cluster])
        from distributed import Client
    except ImportError:
        raise SweepError("running on a cluster needs dask.distributed, which is not installed; "
                         "install it with `pip install vortherm[cluster]`") from None
    target = f"{scheme.lower()}://{rest}"
    try:
        return Client(target, timeout=f"{float(timeout)}s")
    except Exception as exc:  # noqa: BLE001 -- dask raises OSError, TimeoutError, ValueError, ...
        raise SweepError(f"cannot connect to the dask scheduler at '{address}' within "
                         f"{float(timeout):g} s ({type(exc).__name__}: {exc}); check that a "
                         "scheduler runs there (`dask scheduler` on the head node) and that "
                         "the address and port are the ones it printed") from None


def _as_executor(executor: Any) -> Any:
    # A dask Client returns its own futures; its concurrent.futures view returns standard ones.
    if hasattr(executor, "get_executor"):
        return executor.get_executor(pure=False)
    if not hasattr(executor, "submit"):
        raise SweepError(f"executor {executor!r} has no submit(); pass a "
                         f"concurrent.futures.Executor or a dask distributed Client")
    return executor



# -- running a sweep ----------------------------------------------------------------------------
@dataclass(frozen=True)
class Progress:
    """A snapshot for the progress bar. ``eta_s`` is None until a point has finished.

    Units: seconds of wall-clock time.
    """

    total: int
    done: int
    skipped: int
    running: int
    failed: int
    pending: int
    elapsed_s: float
    eta_s: float | None


class _Terminated(KeyboardInterrupt):
    """SIGTERM, handled like Ctrl-C: the state and the summary are written before leaving."""


def _raise_terminated(signum, frame) -> None:
    raise _Terminated()


def _default_is_complete(path: Path) -> bool:
    from gpe.run.reading import is_complete

    return is_complete(path)


def run_sweep(sweep: Sweep, out_dir: str | os.PathLike, *, executor: Any = None,
              scheduler: str | None = None, workers: int | None = None,
              threads: int | None = None, point_fn: Callable[[PointTask], Mapping] = run_point,
              is_complete: Callable[[Path], bool] | None = None,
              progress: Callable[[Progress], None] | None = None,
              fingerprint: Callable[[str, tuple], dict] = protocol_fingerprint,
              restart_changed: bool = False,
              pool_fn: Callable[[Sweep, Path, list[Point]], Mapping] | None = pool_seeds
              ) -> SweepResult:
    """Run (or resume) every point of ``sweep`` and write the summary tables into ``out_dir``.

    Parameters
    ----------
    executor : anything with ``submit`` (a ``concurrent.futures.Executor`` or a dask
        ``Client``); None starts a local pool of ``workers`` spawned processes with
        ``threads`` FFT threads each (workers x threads <= cores).
    scheduler : address of a dask scheduler, used when ``executor`` is None.
    point_fn : top-level (picklable) function ``PointTask -> mapping`` with the measured
        quantities; :func:`run_point` runs the full pipeline.
    is_complete : verifies a finished run file; default ``gpe.run.reading.is_complete``.
    progress : called with a :class:`Progress` after each point and about once a second.
    fingerprint : ``(base, overrides) -> {"digest", "settings"}`` of a point's protocol
        (default :func:`protocol_fingerprint`); a rerun whose digests differ is refused.
    restart_changed : move the changed points' files aside and compute them again instead.
    pool_fn : ``(sweep, out_dir, points) -> ensemble record`` of the seeds of one grid point
        that finished, called here at summary time (default :func:`pool_seeds`: beta~ N pooled
        over their run files); a failure leaves NaN and its reason in the point's row.

    Returns
    -------
    SweepResult ; ``interrupted`` is True after Ctrl-C (pending points were cancelled, their
    state kept; rerun to continue).
    """
    out_dir = Path(out_dir)
    own, client, capacity = None, None, None
    if executor is None and scheduler is not None:
        # connect before anything is written: a wrong or unreachable address leaves no folder
        executor = client = connect_scheduler(scheduler)
    elif executor is None:
        plan_local(usable_cores(), workers, threads)  # refuse bad counts before writing, too
    try:
        points = prepare_output(sweep, out_dir, fingerprint, restart_changed)
    except BaseException:
        if client is not None:
            client.close()
        raise
    stop_path = out_dir / "STOP"
    stop_path.unlink(missing_ok=True)
    global _WORKER_INTERRUPTED
    _WORKER_INTERRUPTED = False  # in-process executors share this flag with us
    is_complete = is_complete or _default_is_complete
    measure = asdict(sweep.measure)
    records: dict[str, dict] = {}
    todo: list[Point] = []
    for p in points:
        rec = read_json(out_dir / "points" / f"{p.point_id}.json") or {}
        run_path = out_dir / "runs" / f"{p.point_id}.h5"
        if (rec.get("status") == "ok" and rec.get("measure") == json.loads(json.dumps(measure))
                and rec.get("keep_snapshots", "all") == sweep.output.keep_snapshots
                and _verified(is_complete, run_path)):
            records[p.point_id] = rec
        else:
            todo.append(p)
    n_skipped = len(points) - len(todo)

    if executor is None:
        capacity, threads = plan_local(usable_cores(), workers, threads, max(1, len(todo)))
        executor = own = local_executor(capacity, threads)
    else:
        executor = _as_executor(executor)
        threads = threads or 1  # a cluster worker's share of cores is set where it is started

    # workers report their records from this level on (what this process would show)
    log_level = min(logging.getLogger("gpe").getEffectiveLevel(),
                    logging.getLogger("py.warnings").getEffectiveLevel(), logging.WARNING)
    logger.info("sweep %s: %d points, %d to run, %d finished before; %s", sweep.source,
                len(points), len(todo), n_skipped,
                f"{capacity} workers x {threads} threads" if capacity else "the given executor")
    start = time.monotonic()
    futures: dict[cf.Future, Point] = {}
    interrupted = False
    last_report = 0.0
    n_done_here = 0

    def report(force: bool = False) -> None:
        nonlocal last_report
        now = time.monotonic()
        if progress is None or (not force and now - last_report < 1.0):
            return
        last_report = now
        ok = sum(r["status"] == "ok" for r in records.values())
        failed = sum(r["status"] == "failed" for r in records.values())
        running = sum(f.running() for f in futures if not f.done())
        if capacity is not None:
            running = min(running, capacity)
        left = len(points) - ok - failed
        elapsed = now - start
        eta = elapsed / n_done_here * left if n_done_here else None
        progress(Progress(len(points), ok, n_skipped, running, failed, left - running,
                          elapsed, eta))

    def finish(fut: cf.Future, point: Point) -> None:
        nonlocal n_done_here
        exc = fut.exception()
        if isinstance(exc, KeyboardInterrupt):
            raise KeyboardInterrupt
        if exc is not None:  # the worker itself died (killed, out of memory, lost node)
            outcome = {"status": "failed", "values": {}, "elapsed_s": float("nan"),
                       "error": f"worker lost: {type(exc).__name__}: {exc}; rerun to retry"}
        else:
            outcome = fut.result()
            if outcome["status"] == "cancelled":  # a stop file left by another session
                raise KeyboardInterrupt
        relay_messages(point.point_id, outcome.get("messages"))
        records[point.point_id] = _save_record(out_dir, point, sweep, outcome)
        n_done_here += 1
        if outcome["status"] == "failed":
            logger.warning("%s failed: %s", point.point_id, outcome["error"])
        else:
            logger.info("%s %s in %.3g s", point.point_id, outcome["status"],
                        outcome.get("elapsed_s", float("nan")))

    previous_term = None
    if threading.current_thread() is threading.main_thread():
        previous_term = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        for p in todo:
            task = PointTask(p.point_id, str(sweep.base), p.overrides,
                             str(out_dir / "runs" / f"{p.point_id}.h5"), sweep.measure, threads,
                             str(stop_path), log_level, os.getpid(),
                             sweep.output.keep_snapshots)
            futures[executor.submit(_execute, point_fn, task)] = p
        report(force=True)
        waiting = set(futures)
        while waiting:
            finished, waiting = cf.wait(waiting, timeout=1.0, return_when=cf.FIRST_COMPLETED)
            for fut in sorted(finished, key=lambda f: futures[f].point_id):
                finish(fut, futures[fut])
            report(force=bool(finished))
    except KeyboardInterrupt as exc:
        interrupted = True
        # Tasks already handed to a worker cannot be cancelled; the stop file tells them not to
        # start, so the pool shuts down as soon as the running points are interrupted.
        stop_path.touch()
        if isinstance(exc, _Terminated) and own is not None:
            # Ctrl-C reaches the whole process group; SIGTERM only us: pass it on as an
            # interrupt, so running points stop at once with their checkpoints on disk
            for proc in list(getattr(own, "_processes", {}).values()):
                with contextlib.suppress(ProcessLookupError):
                    os.kill(proc.pid, signal.SIGINT)
        for fut in futures:
            fut.cancel()
    finally:
        if previous_term is not None:
            signal.signal(signal.SIGTERM, previous_term)
        if own is not None:
            own.shutdown(wait=True, cancel_futures=True)
        if client is not None:
            client.close()
    if interrupted:  # keep every point that finished before the pool stopped
        for fut, p in futures.items():
            if (fut.done() and not fut.cancelled() and fut.exception() is None
                    and p.point_id not in records and fut.result()["status"] != "cancelled"):
                relay_messages(p.point_id, fut.result().get("messages"))
                records[p.point_id] = _save_record(out_dir, p, sweep, fut.result())
    result = summarise(sweep, out_dir, points, records, interrupted, pool=pool_fn)
    report(force=True)
    return result


def _verified(is_complete: Callable[[Path], bool], path: Path) -> bool:
    if not path.exists():
        return False
    try:
        return bool(is_complete(path))
    except (VorthermError, OSError):  # an unreadable file is simply not complete
        return False


def _save_record(out_dir: Path, point: Point, sweep: Sweep, outcome: Mapping) -> dict:
    from gpe.run.jsontext import dumps_strict  # imports numpy: see the note at the top

    rec = {"point_id": point.point_id, "grid_id": point.grid_id, "seed": point.seed,
           "overrides": list(point.overrides), "run_file": f"runs/{point.point_id}.h5",
           "measure": asdict(sweep.measure), "keep_snapshots": sweep.output.keep_snapshots,
           **outcome}
    # tuples -> lists, NaN -> None: the record in memory is the one on disk, so reruns compare equal
    rec = json.loads(dumps_strict(rec))
    write_json(out_dir / "points" / f"{point.point_id}.json", rec)
    return rec
