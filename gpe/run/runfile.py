"""The run file: one HDF5 file per simulation (layout in docs/runfile.md).

Records are written data first and counter last: a frame's ``psi``, ``t``, observables and
vortex rows are appended, flushed, and only then ``snapshots.attrs["n_frames"]`` is raised.
Whatever lies past that counter is an unfinished record and is cut away when the file is opened
for writing.  Checkpoints and vortex-table replacements are written to a ``*.new`` object and
renamed over the old one, so a crash leaves either the old or the new version, never a mix.

Units: every dataset carries a ``units`` attribute (CF convention; simulation units: xi, hbar/mu,
mu, n0; format 1 called it ``unit``, and readers accept both); the root attributes ``unit_*`` give
the SI value of each unit. Every dataset has HDF5 dimension scales (gpe/run/scales.py), so netCDF
readers (``xarray.open_datatree(path, engine="h5netcdf")``) see named axes with coordinates.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

from gpe import __version__
from gpe.errors import RunFileError
from gpe.field.grid import Grid
from gpe.run import scales
from gpe.run.pointstore import PointFrames
from gpe.run.scales import LEGACY_UNITS_ATTR, UNITS_ATTR, units_of

FORMAT_NAME = "vortherm-run"
#: 2: ``units`` attributes and dimension scales (coordinates /x, /y, /t, /vortex at the root)
FORMAT_VERSION = 2
#: versions this code reads (and resumes: a format-1 file keeps ``unit`` and gets no scales)
READABLE_FORMAT_VERSIONS = (1, 2)

#: Rows of the ``vortices`` dataset (the same columns as gpe.analysis.vortices.VORTEX_DTYPE).
VORTEX_ROW = np.dtype([("frame", "<i8"), ("t", "<f8"), ("x", "<f8"), ("y", "<f8"),
                       ("sign", "i1"), ("track", "<i8")])
#: The unit of each column of the vortex table (simulation units).
VORTEX_UNITS = {"frame": "1", "t": "hbar/mu", "x": "xi", "y": "xi", "sign": "1", "track": "1"}

@dataclass(frozen=True)
class Checkpoint:
    """State needed to resume: full-precision psi at time t after ``step`` steps, with
    ``frame`` complete frames written, and the RNG state (``numpy`` bit-generator dict or None).

    Units: psi in sqrt(n0); t in hbar/mu.
    """

    psi: np.ndarray
    t: float
    step: int
    frame: int
    rng_state: dict | None

    def rng(self) -> np.random.Generator | None:
        """A Generator restored to the saved state (None when none was saved)."""
        if self.rng_state is None:
            return None
        bit_generator = getattr(np.random, self.rng_state["bit_generator"])()
        bit_generator.state = self.rng_state
        return np.random.Generator(bit_generator)


class RunFile(PointFrames):
    """An open run file.  Use :meth:`create` or :meth:`open`; works as a context manager.

    Point-vortex frames after a hand-off (their rows, times and state): the methods of
    gpe.run.pointstore.PointFrames.
    """

    def __init__(self, handle: h5py.File, path: Path) -> None:
        self._f = handle
        self.path = path

    # -- creating and opening ----------------------------------------------------------------
    @classmethod
    def create(cls, path, grid: Grid | None = None, *, protocol=None, protocol_text: str = "",
               protocol_json: str = "{}", protocol_source: str = "",
               protocol_overrides: Sequence[str] = (), units: Mapping[str, float] | None = None,
               static_potential: np.ndarray | None = None,
               ground_state_psi: np.ndarray | None = None, snapshot_dtype="complex64",
               compression: str | None = "gzip", extra_attrs: Mapping | None = None,
               overwrite: bool = False,
               trap_arrays: Mapping[str, np.ndarray] | None = None) -> "RunFile":
        """Create a new run file (refuses to overwrite unless ``overwrite``).

        ``protocol`` (a gpe.setup.protocol.Protocol) supplies grid, protocol text/JSON/source/
        overrides, units and the arrays its trap read from files (``trap_arrays``, e.g. a mask's
        allowed pixels, stored as ``potential/<name>``) at once; the explicit arguments serve
        callers without one. With the static potential and those arrays the file is
        self-contained: its protocol is rebuilt without the files beside the original one.
        """
        path = Path(path)
        if protocol is not None:
            grid = protocol.grid
            protocol_text, protocol_json = protocol.source_text, protocol.to_json()
            protocol_source, protocol_overrides = protocol.source_name, protocol.overrides
            units = protocol.units.as_dict()
            trap_arrays = protocol.trap.stored_arrays()
        if grid is None:
            raise RunFileError(f"{path}: RunFile.create needs grid= or protocol=")
        trap_arrays = dict(trap_arrays or {})
        for name in trap_arrays:
            if name == "trap" or not name.isidentifier():
                raise RunFileError(f"{path}: trap array name {name!r} cannot be stored as "
                                   "potential/<name>; accepted: an identifier other than 'trap'")
        if path.exists() and not overwrite:
            raise RunFileError(f"{path}: exists already; pass overwrite=True or choose another name")
        snapshot_dtype = np.dtype(snapshot_dtype)
        if snapshot_dtype not in (np.complex64, np.complex128):
            raise RunFileError(f"{path}: snapshot_dtype must be complex64 or complex128")
        f = h5py.File(path, "w")
        a = f.attrs
        a["format"] = FORMAT_NAME
        a["format_version"] = FORMAT_VERSION
        a["package_version"] = __version__
        a["protocol_text"] = protocol_text
        a["protocol_json"] = protocol_json
        a["protocol_source"] = protocol_source
        a["protocol_overrides"] = json.dumps(list(protocol_overrides))
        a["complete"] = False
        for key, value in (units or {}).items():
            a[f"unit_{key}"] = float(value)
        for key, value in (extra_attrs or {}).items():
            a[key] = value
        # the coordinates at the root, where every group's datasets can see them as scales
        x = scales.coordinate(f, "x", np.asarray(grid.x), "xi", "x about the grid centre")
        y = scales.coordinate(f, "y", np.asarray(grid.y), "xi", "y about the grid centre")
        times = scales.coordinate(f, "t", np.empty(0), "hbar/mu", "time", growing=True)
        rows = scales.coordinate(f, "vortex", np.empty(0, np.int64), "1",
                                 "row of the vortex table", growing=True)
        g = f.create_group("grid")
        g.attrs.update(nx=grid.nx, ny=grid.ny, length_x=grid.length_x, length_y=grid.length_y,
                       units="xi")
        g["x"], g["y"] = x, y           # hard links: format 1's names for the same datasets
        pot = f.create_group("potential")
        if static_potential is not None:
            _dataset(pot, "trap", np.asarray(static_potential, np.float64), "mu", (y, x))
        for name, array in trap_arrays.items():
            array = np.asarray(array)
            # booleans as 0/1 bytes (readable everywhere), marked so that they come back as bool
            ds = _dataset(pot, name, array.astype(np.uint8) if array.dtype == bool else array, "1",
                          scales.array_scales(pot, name, array.shape))
            ds.attrs["boolean"] = array.dtype == bool
        if ground_state_psi is not None:
            _dataset(f.create_group("ground_state"), "psi", np.asarray(ground_state_psi),
                     "sqrt(n0)", (y, x))
        snaps = f.create_group("snapshots")
        snaps.attrs["n_frames"] = 0
        options = dict(compression=compression, shuffle=True) if compression else {}
        psi = snaps.create_dataset("psi", shape=(0, grid.ny, grid.nx), dtype=snapshot_dtype,
                                   maxshape=(None, grid.ny, grid.nx),
                                   chunks=(1, grid.ny, grid.nx), **options)
        psi.attrs[UNITS_ATTR] = "sqrt(n0)"
        scales.attach(psi, (times, y, x))
        snaps["t"] = times
        f.create_group("observables")
        scales.attach(_vortex_dataset(f, "vortices", np.empty(0, VORTEX_ROW), UNITS_ATTR), [rows])
        f.flush()
        return cls(f, path)

    @classmethod
    def open(cls, path, mode: str = "r", resume: bool = False) -> "RunFile":
        """Open an existing run file; ``mode`` "r" (read) or "r+"/"a" (read-write).

        Writable opens cut unfinished records; ``resume=True`` also cuts every frame after the
        checkpoint, so a resumed run rewrites them exactly as an uninterrupted one would.
        """
        path = Path(path)
        if mode not in ("r", "r+", "a"):
            raise RunFileError(f"{path}: mode must be 'r', 'r+' or 'a', got {mode!r}")
        if not path.exists():
            raise RunFileError(f"{path}: no such run file (expected an HDF5 file written by "
                               "`vortherm run`)")
        try:
            f = h5py.File(path, "r" if mode == "r" else "r+")
        except OSError as exc:
            raise RunFileError(f"{path}: cannot be opened as HDF5: it is not an HDF5 file, or it "
                               "is truncated (a copy or write cut short), or it is locked by "
                               "another process that has it open for writing (a run still "
                               "going: wait until it has finished); expected a vortherm run "
                               f"file. HDF5 said: {exc}") from exc
        run = cls(f, path)
        try:
            run._check_format()
            if mode != "r":
                run._recover()
                if resume:
                    run.truncate_to_frame(run.read_checkpoint().frame)
        except BaseException:
            f.close()
            raise
        return run

    def _check_format(self) -> None:
        a = self._f.attrs
        if a.get("format") != FORMAT_NAME or "format_version" not in a:
            raise RunFileError(f"{self.path}: not a vortherm run file (root attributes "
                               f"format='{FORMAT_NAME}' and format_version are missing)")
        version = int(a["format_version"])
        if version not in READABLE_FORMAT_VERSIONS:
            raise RunFileError(f"{self.path}: run file format_version {version} is not "
                               f"supported; this vortherm ({__version__}) reads versions "
                               f"{', '.join(map(str, READABLE_FORMAT_VERSIONS))}")
        for name in ("grid", "snapshots/psi", "snapshots/t", "observables"):
            if name not in self._f:
                raise RunFileError(f"{self.path}: damaged run file, '{name}' is missing")

    def _recover(self) -> None:
        """Finish or discard interrupted replacements and cut unfinished frames."""
        f = self._f
        for name in ("checkpoint", "vortices"):
            new = f"{name}.new"
            if new in f:
                if name not in f and f[new].attrs.get("written", False):
                    f.move(new, name)
                else:
                    scales.delete(f, new)
        scales.sync_index(f, "vortices", "vortex")
        self.truncate_to_frame(self.n_frames)

    @property
    def _units_attr(self) -> str:
        """The unit attribute's name in this file: "units", or "unit" in a format-1 file."""
        return UNITS_ATTR if int(self._f.attrs["format_version"]) >= 2 else LEGACY_UNITS_ATTR

    def close(self) -> None:
        """Flush and close the file (idempotent)."""
        if self._f.id.valid:
            self._f.close()

    def __enter__(self) -> "RunFile":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- metadata ------------------------------------------------------------------------------
    @property
    def attrs(self) -> h5py.AttributeManager:
        """Root attributes (read them; write through the methods)."""
        return self._f.attrs

    def attrs_float(self, name: str) -> float:
        """A numeric root attribute, e.g. ``mu_run``."""
        if name not in self._f.attrs:
            raise RunFileError(f"{self.path}: root attribute '{name}' is missing")
        return float(self._f.attrs[name])

    def protocol_text(self) -> str:
        """The protocol file, verbatim."""
        return str(self._f.attrs["protocol_text"])

    def protocol_json(self) -> str:
        """The resolved protocol as JSON."""
        return str(self._f.attrs["protocol_json"])

    def protocol_source(self) -> str:
        """Name (path) of the protocol file the run was started from."""
        return str(self._f.attrs["protocol_source"])

    def protocol_overrides(self) -> tuple[str, ...]:
        """The ``--set`` overrides applied on top of the protocol text."""
        return tuple(json.loads(self._f.attrs["protocol_overrides"]))

    def units(self) -> dict[str, float]:
        """SI value of each simulation unit (keys without the ``unit_`` prefix)."""
        return {k[5:]: float(v) for k, v in self._f.attrs.items() if k.startswith("unit_")}

    @property
    def grid(self) -> Grid:
        """The simulation grid."""
        a = self._f["grid"].attrs
        return Grid(int(a["nx"]), int(a["ny"]), float(a["length_x"]), float(a["length_y"]))

    def static_potential(self) -> np.ndarray:
        """The static trap potential (ny, nx). Units: mu."""
        if "potential/trap" not in self._f:
            raise RunFileError(f"{self.path}: no static potential stored ('potential/trap')")
        return self._f["potential/trap"][...]

    def trap_arrays(self) -> dict[str, np.ndarray]:
        """The arrays the trap was read from files (``potential/<name>``, e.g. ``mask``), by name.

        Empty for traps given by numbers alone and for files written before they were kept.
        Units: as the trap shape defines each (the mask: booleans, True = allowed).
        """
        if "potential" not in self._f:
            return {}
        arrays = {}
        for name, ds in self._f["potential"].items():
            if name == "trap" or (isinstance(ds, h5py.Dataset) and ds.is_scale):
                continue   # the potential, and the pixel-index scales of the arrays
            if not isinstance(ds, h5py.Dataset):
                raise RunFileError(f"{self.path}: damaged run file, 'potential/{name}' is not a "
                                   "dataset; expected the arrays of the trap (e.g. potential/mask)")
            data = ds[...]
            arrays[name] = data.astype(bool) if ds.attrs.get("boolean", False) else data
        return arrays

    def ground_state_psi(self) -> np.ndarray:
        """The ground state the run started from. Units: sqrt(n0)."""
        if "ground_state/psi" not in self._f:
            raise RunFileError(f"{self.path}: no ground state stored ('ground_state/psi')")
        return self._f["ground_state/psi"][...]

    def is_complete(self) -> bool:
        """True once :meth:`mark_complete` was called at the end of the run."""
        return bool(self._f.attrs.get("complete", False))

    def mark_complete(self) -> None:
        """Flag the run as finished (the last write of a run)."""
        self._f.attrs["complete"] = True
        self._f.flush()

    # -- frames ----------------------------------------------------------------------------------
    @property
    def n_frames(self) -> int:
        """Number of complete frames."""
        return int(self._f["snapshots"].attrs["n_frames"])

    def frame_times(self) -> np.ndarray:
        """Times of the complete frames. Units: hbar/mu."""
        return self._f["snapshots/t"][: self.n_frames]

    def psi(self, index: int) -> np.ndarray:
        """Wavefunction of frame ``index`` (negative counts from the end). Units: sqrt(n0)."""
        n = self.n_frames
        if n == 0:
            raise RunFileError(f"{self.path}: the run file holds no snapshots yet")
        if not -n <= index < n:
            raise RunFileError(f"{self.path}: frame {index} out of range; frames are 0..{n - 1}")
        return self._f["snapshots/psi"][index % n]

    def frames(self) -> Iterator[tuple[int, float, np.ndarray]]:
        """Iterate over ``(index, t, psi)`` of the complete frames."""
        for index, t in enumerate(self.frame_times()):
            yield index, float(t), self._f["snapshots/psi"][index]

    def append_frame(self, t: float, psi: np.ndarray, observables: Mapping[str, float] | None = None,
                     vortices: np.ndarray | None = None,
                     units: Mapping[str, str] | None = None) -> int:
        """Append one frame (snapshot, observables, vortex rows); returns its index.

        ``units`` gives the unit of each observable, stored as its dataset's ``units``
        attribute when the dataset is first created (see gpe.analysis.diagnostics).
        Units: t in hbar/mu; psi in sqrt(n0); vortex x, y in xi.
        """
        f, n = self._f, self.n_frames
        psi_ds = f["snapshots/psi"]
        if np.shape(psi) != psi_ds.shape[1:]:
            raise RunFileError(f"{self.path}: frame has shape {np.shape(psi)}, the run file "
                               f"stores {psi_ds.shape[1:]}")
        psi_ds.resize(n + 1, axis=0)
        psi_ds[n] = np.asarray(psi).astype(psi_ds.dtype, copy=False)
        _append(f["snapshots/t"], n, float(t))
        obs_group = f["observables"]
        observables = dict(observables or {})
        for name in sorted(set(observables) | set(obs_group)):
            if name not in obs_group:
                ds = obs_group.create_dataset(name, shape=(n,), dtype=np.float64,
                                              maxshape=(None,), chunks=(256,), fillvalue=np.nan)
                ds[...] = np.nan
                ds.attrs[self._units_attr] = (units or {}).get(name, "")
                scales.attach(ds, [scales.root_scale(self._f, "t")])
            _append(obs_group[name], n, float(observables.get(name, np.nan)))
        if vortices is not None and len(vortices):
            if np.any(np.asarray(vortices["frame"]) != n):
                raise RunFileError(f"{self.path}: vortex rows for frame {n} carry other frame "
                                   "numbers")
            self._append_vortex_rows(vortices)
        f.flush()
        f["snapshots"].attrs["n_frames"] = n + 1  # the counter last: it marks a complete record
        f.flush()
        return n

    def _append_vortex_rows(self, vortices: np.ndarray) -> None:
        rows = _vortex_rows(vortices, self.path)
        table = self._f["vortices"]
        start = table.shape[0]
        table.resize(start + len(rows), axis=0)
        table[start:] = rows
        scales.sync_index(self._f, "vortices", "vortex")

    def truncate_to_frame(self, n_frames: int) -> None:
        """Keep frames 0..n_frames-1 (and their observables and vortex rows), drop the rest.

        Point-vortex frames (gpe/run/pointstore.py) continue the last snapshot: they are kept
        (up to their counter) when every complete snapshot is kept, dropped otherwise.
        """
        f = self._f
        n_frames = int(n_frames)
        if not 0 <= n_frames <= f["snapshots/psi"].shape[0]:
            raise RunFileError(f"{self.path}: cannot truncate to {n_frames} frames; the file "
                               f"has {f['snapshots/psi'].shape[0]}")
        if "points" in f and n_frames < self.n_frames:
            del f["points"]
        dropped_complete = n_frames < self.n_frames
        f["snapshots"].attrs["n_frames"] = min(n_frames, self.n_frames)
        for ds in (f["snapshots/psi"], f["snapshots/t"], *f["observables"].values()):
            if ds.shape[0] > n_frames:
                ds.resize(n_frames, axis=0)
        if "points" in f and f["points/t"].shape[0] > self.n_point_frames:
            f["points/t"].resize(self.n_point_frames, axis=0)
        last = f["snapshots"].attrs["n_frames"] + self.n_point_frames
        table = f["vortices"]
        if table.shape[0] and table[-1]["frame"] >= last:
            rows = table[...]
            self.replace_vortices(rows[rows["frame"] < last])
        if dropped_complete:
            f.attrs["complete"] = False
        f.flush()

    def read_observables(self) -> dict[str, np.ndarray]:
        """Every observable of the complete frames, by name (units: :meth:`observable_unit`)."""
        n = self.n_frames
        return {name: ds[:n] for name, ds in self._f["observables"].items()}

    def observable_unit(self, name: str) -> str:
        """Unit of observable ``name`` (its ``units`` attribute; ``unit`` in format-1 files)."""
        if name not in self._f["observables"]:
            raise RunFileError(f"{self.path}: no observable '{name}'; stored: "
                               f"{sorted(self._f['observables'])}")
        return units_of(self._f["observables"][name])

    # -- vortex table ----------------------------------------------------------------------------
    def read_vortices(self) -> np.ndarray:
        """The vortex table of the complete frames (rows frame, t, x, y, sign, track).

        Point-vortex frames after a hand-off are included: their frame numbers continue after
        the snapshots, their times are in :meth:`timeline`.
        """
        rows = self._f["vortices"][...]
        return rows[rows["frame"] < self.n_frames + self.n_point_frames]

    def replace_vortices(self, table: np.ndarray) -> None:
        """Replace the whole vortex table atomically (e.g. after tracking or re-detection)."""
        rows = _vortex_rows(table, self.path)
        f = self._f
        if "vortices.new" in f:
            scales.delete(f, "vortices.new")
        _vortex_dataset(f, "vortices.new", rows, self._units_attr).attrs["written"] = True
        f.flush()
        scales.delete(f, "vortices")
        f.move("vortices.new", "vortices")
        del f["vortices"].attrs["written"]
        scales.sync_index(f, "vortices", "vortex")
        f.flush()

    # -- checkpoint ------------------------------------------------------------------------------
    def write_checkpoint(self, psi: np.ndarray, t: float, step: int, frame: int | None = None,
                         rng: np.random.Generator | None = None) -> None:
        """Store the full-precision state; replaces the previous checkpoint atomically.

        ``frame`` is the number of complete frames the state belongs to (default: all).
        Units: psi in sqrt(n0); t in hbar/mu.
        """
        f = self._f
        frame = self.n_frames if frame is None else int(frame)
        if not 0 <= frame <= self.n_frames:
            raise RunFileError(f"{self.path}: checkpoint frame {frame} is not in 0..{self.n_frames}")
        if "checkpoint.new" in f:
            scales.delete(f, "checkpoint.new")
        g = f.create_group("checkpoint.new")
        axes = (scales.root_scale(f, "y"), scales.root_scale(f, "x"))
        _dataset(g, "psi", np.asarray(psi), "sqrt(n0)", axes, self._units_attr)
        g.attrs["t"] = float(t)
        g.attrs[f"t_{self._units_attr}"] = "hbar/mu"
        g.attrs["frame"] = frame
        g.attrs["rng_state"] = "" if rng is None else json.dumps(rng.bit_generator.state)
        g.attrs["step"] = int(step)
        g.attrs["written"] = True  # last: the group is complete
        f.flush()
        if "checkpoint" in f:
            scales.delete(f, "checkpoint")
        f.move("checkpoint.new", "checkpoint")
        f.flush()

    def has_checkpoint(self) -> bool:
        """True when a complete checkpoint is stored."""
        return "checkpoint" in self._f

    def read_checkpoint(self) -> Checkpoint:
        """The latest checkpoint; RunFileError when the run was never checkpointed."""
        if "checkpoint" not in self._f:
            raise RunFileError(f"{self.path}: no 'checkpoint' group; the run cannot be resumed "
                               "and must be started again")
        g = self._f["checkpoint"]
        state = str(g.attrs["rng_state"])
        return Checkpoint(psi=g["psi"][...], t=float(g.attrs["t"]), step=int(g.attrs["step"]),
                          frame=int(g.attrs["frame"]),
                          rng_state=json.loads(state) if state else None)


def _dataset(group: h5py.Group, name: str, data: np.ndarray, unit: str, axes,
             units_attr: str = UNITS_ATTR) -> h5py.Dataset:
    ds = group.create_dataset(name, data=data)
    ds.attrs[units_attr] = unit
    scales.attach(ds, list(axes))
    return ds


def _append(ds: h5py.Dataset, index: int, value: float) -> None:
    ds.resize(index + 1, axis=0)
    ds[index] = value


def _vortex_dataset(f: h5py.File, name: str, rows: np.ndarray, units_attr: str) -> h5py.Dataset:
    ds = f.create_dataset(name, data=rows, maxshape=(None,), chunks=(1024,))
    # one unit per column: units_<column> ("unit_<column>" in format-1 files)
    ds.attrs.update({f"{units_attr}_{c}": u for c, u in VORTEX_UNITS.items()})
    # the SI factors beside the table, so it can be read without the root attributes
    for key, si_key in (("unit_length_m", "xi_in_m"), ("unit_time_s", "hbar_over_mu_in_s")):
        if key in f.attrs:
            ds.attrs[si_key] = float(f.attrs[key])
    return ds


def _vortex_rows(table: np.ndarray, path: Path) -> np.ndarray:
    table = np.asarray(table)
    names = table.dtype.names or ()
    missing = [c for c in VORTEX_ROW.names if c not in names]
    if missing:
        raise RunFileError(f"{path}: vortex table lacks columns {missing}; expected "
                           f"{VORTEX_ROW.names}")
    rows = np.empty(table.shape[0], VORTEX_ROW)
    for column in VORTEX_ROW.names:
        rows[column] = table[column]
    return rows
