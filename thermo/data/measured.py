"""Reading measured vortex tables (CSV or HDF5) into thermo configurations.

A measured table lists one vortex per row: the shot (experimental run / image) it was
seen in, its position and the sign of its circulation, optionally a time ``t`` and a
``weight`` (e.g. a detection confidence; carried along, not used by the statistics).
Positions are either micrometres about the trap centre or camera pixels with a pixel
size and the pixel coordinates of the centre.

The geometry (disk radius, or box width and height, and the vortex core radius) comes
from keyword arguments or from a small TOML file beside the table (same stem,
``.toml``); keyword arguments override the file key by key. The geometry, the pixel
calibration and that file are handled by :mod:`thermo.data.geometry`. Without a core radius
the table gets ``DEFAULT_CORE`` (2% of the domain size).

The usable vortices of every shot then pass the one admission rule of the thermometry
(:func:`thermo.admission.admit`, the same as for simulated frames): vortices within one core
radius of the wall are left out, and both vortices of any pair closer than two core radii
(the minimum separation of the hard-core model is 2a). The counts are kept per shot
(``MeasuredEnsemble.admitted``) and reported beside every estimate.

A row is unusable if a field is missing or not a finite number, the sign is not +-1,
the position lies outside the domain or it repeats a position of its shot. Rows that cannot
be used are never dropped silently: every one is listed with its
file line (CSV) or table index (HDF5) and the reason, in a :class:`MeasuredTableWarning`
and in ``MeasuredEnsemble.problems``; with ``strict=True`` the first one raises
:class:`MeasuredTableError` instead.

No axis flip is applied to pixel coordinates (image rows often grow downwards). A
mirror image changes none of the statistics computed by thermo (energies, structure
observables and beta are reflection invariant), so the only requirement is that the
signs were assigned in the same frame as the positions.
"""

from __future__ import annotations

import csv
import io
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Sequence

import h5py
import numpy as np

from thermo.admission import Admitted, CoreRadiusWarning, admit, core_radius_note
from thermo.data.geometry import (
    Geometry,
    PixelCalibration,
    pixels_to_um,
    read_utf8_text,
    resolve_geometry,
)
from thermo.errors import MeasuredTableError

#: core radius of a table that gives none, in units of the domain size (disk radius, box height)
DEFAULT_CORE = 0.02


class MeasuredTableWarning(UserWarning):
    """Rows of a measured vortex table were left out; the message lists them."""


REQUIRED_COLUMNS = ("shot", "x", "y", "sign")
OPTIONAL_COLUMNS = ("t", "weight")
ACCEPTED_SIGNS = "+1, -1, 1, +, - (also 1.0 / -1.0)"
_SIGN_WORDS = {"+1": 1, "1": 1, "+": 1, "1.0": 1, "+1.0": 1,
               "-1": -1, "-": -1, "-1.0": -1}
# Positions that agree to this many micrometres in one shot are the same vortex
# listed twice (a copy/paste or double detection), far below any optical resolution.
_DUPLICATE_TOL_UM = 1e-9
_MAX_LISTED = 20


@dataclass(frozen=True)
class RowProblem:
    """One unusable row of a measured table.

    Attributes
    ----------
    source : file name.
    row : CSV file line number (1-based, comment lines counted) or HDF5 table index
        (0-based), see ``where``.
    where : ``"line"`` or ``"index"``.
    reason : what is wrong and, where it helps, what would be accepted.
    shot : shot id of the row if it could be read, else ``None``.
    """

    source: str
    row: int
    where: str
    reason: str
    shot: str | None = None

    def __str__(self) -> str:
        return f"{self.source}, {self.where} {self.row}: {self.reason}"


@dataclass(frozen=True)
class MeasuredShot:
    """The usable vortices of one shot.

    Attributes
    ----------
    shot : shot id as written in the table.
    positions : (N, 2) scaled positions (thermo convention).
    signs : (N,) int8, +1 / -1.
    rows : (N,) source line numbers / indices of these vortices.
    t : time of the shot if the table has a ``t`` column (mean over its rows), else None.
    weights : (N,) float or None.

    Units: positions in units of the domain size; t as in the table.
    """

    shot: str
    positions: np.ndarray
    signs: np.ndarray
    rows: np.ndarray
    t: float | None = None
    weights: np.ndarray | None = None


@dataclass(frozen=True)
class MeasuredEnsemble:
    """A measured table turned into thermo configurations.

    Attributes
    ----------
    source : file name.
    shots : one :class:`MeasuredShot` per shot id, in order of first appearance (shots
        whose rows were all unusable are kept, with zero vortices).
    geometry : the :class:`Geometry` used; domain : the thermo domain object.
    core_radius : core radius in scaled units (``core_um / length_scale_um``, or
        ``DEFAULT_CORE`` when the table gives none: ``core_given`` says which).
    length_scale_um : micrometres per scaled unit (disk radius or box height).
    problems : every unusable row (and other notes on the table), see :class:`RowProblem`.
    n_rows : data rows read (usable or not).

    Units: positions scaled by the domain size; length_scale_um in micrometres.
    """

    source: str
    shots: tuple[MeasuredShot, ...]
    geometry: Geometry
    domain: Any
    core_radius: float
    length_scale_um: float
    problems: tuple[RowProblem, ...] = field(default=())
    n_rows: int = 0
    core_given: bool = True

    @property
    def raw_configurations(self) -> list[tuple[np.ndarray, np.ndarray]]:
        """``[(positions (N, 2), signs (N,)), ...]`` one per shot: every usable row."""
        return [(s.positions, s.signs) for s in self.shots]

    def admitted_with(self, core_radius: float | None = None, wall_cut: float = 1.0,
                      scale: float = 1.0) -> list[Admitted]:
        """Every shot through :func:`thermo.admission.admit` (default: the table's core).

        ``scale`` multiplies the positions first (an effective domain radius R_eff = R /
        scale: used to measure how the result depends on where the wall is taken to be).
        """
        core = self.core_radius if core_radius is None else core_radius
        return [admit(np.asarray(p) * scale, s, self.domain, core, wall_cut=wall_cut)
                for p, s in self.raw_configurations]

    @property
    def admitted(self) -> list[Admitted]:
        """The shots as the thermometry holds them, with what was left out (cached)."""
        got = self.__dict__.get("_admitted")
        if got is None:
            got = self.admitted_with()
            object.__setattr__(self, "_admitted", got)
        return got

    @property
    def configurations(self) -> list[tuple[np.ndarray, np.ndarray]]:
        """``[(positions (N, 2), signs (N,)), ...]`` one per shot, after the admission rule."""
        return [(a.positions, a.signs) for a in self.admitted]

    @property
    def shot_ids(self) -> list[str]:
        return [s.shot for s in self.shots]

    @property
    def n_vortices(self) -> np.ndarray:
        """(S,) vortex count per shot."""
        return np.array([len(s.signs) for s in self.shots], dtype=np.int64)


# ---------------------------------------------------------------- table input

_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def _read_csv_rows(path: Path) -> tuple[list[str], list[tuple[int, list[str]]]]:
    """Header and (line number, fields) of every data line; # comments and blanks skipped.

    The file is UTF-8, with or without a byte-order mark (:func:`read_utf8_text` refuses
    other encodings by line and byte); an HDF5 file given a text name is refused as such.
    """
    with path.open("rb") as fh:
        if fh.read(len(_HDF5_SIGNATURE)) == _HDF5_SIGNATURE:
            raise MeasuredTableError(
                f"{path}: an HDF5 file, not a CSV text table; name it .h5 (or .hdf5) to read "
                "it as an HDF5 vortex table")
    header: list[str] | None = None
    rows: list[tuple[int, list[str]]] = []
    with io.StringIO(read_utf8_text(path), newline="") as fh:
        for lineno, line in enumerate(fh, start=1):
            stripped = line.strip()
            if not stripped or stripped.startswith("#"):
                continue
            fields = [f.strip() for f in next(csv.reader([stripped]))]
            if header is None:
                header = [f.lower() for f in fields]
            else:
                rows.append((lineno, fields))
    if header is None:
        raise MeasuredTableError(
            f"{path}: no header line; expected columns {list(REQUIRED_COLUMNS)}"
            f" (+ optional {list(OPTIONAL_COLUMNS)})")
    return header, rows


def _hdf5_value(v: Any) -> str:
    if isinstance(v, bytes):
        return v.decode("utf-8", "replace").strip()
    if isinstance(v, (float, np.floating)):
        return repr(float(v))
    return str(v).strip()


def _read_hdf5_rows(path: Path, dataset: str | None
                    ) -> tuple[list[str], list[tuple[int, list[str]]]]:
    """Columns from a compound dataset, or from a group of equal-length 1D datasets."""
    with h5py.File(path, "r") as f:
        name = dataset
        if name is None:
            for cand in ("vortices", "measured", "table"):
                if cand in f:
                    name = cand
                    break
        if name is None:
            if all(c in f for c in REQUIRED_COLUMNS):
                name = "/"
            else:
                raise MeasuredTableError(
                    f"{path}: no vortex table found; give dataset= (a compound dataset or "
                    f"a group with datasets {list(REQUIRED_COLUMNS)}); top level has "
                    f"{sorted(f.keys())}")
        obj = f[name]
        if isinstance(obj, h5py.Dataset):
            if obj.dtype.names is None:
                raise MeasuredTableError(
                    f"{path}:{name} is not a compound dataset; its fields would have to be "
                    f"{list(REQUIRED_COLUMNS)}")
            header = [n.lower() for n in obj.dtype.names]
            data = obj[()]
            columns = [data[n] for n in obj.dtype.names]
        else:
            header = [k.lower() for k in obj.keys()]
            columns = [obj[k][()] for k in obj.keys()]
            lengths = {np.shape(c)[0] if np.ndim(c) else -1 for c in columns}
            if len(lengths) != 1 or -1 in lengths:
                raise MeasuredTableError(
                    f"{path}:{name}: the column datasets must be 1D and of equal length; "
                    f"found lengths {sorted(lengths)}")
    n = len(columns[0]) if columns else 0
    rows = [(i, [_hdf5_value(c[i]) for c in columns]) for i in range(n)]
    return header, rows


def read_measured(path: str | Path, *, shape: str | None = None,
                  radius_um: float | None = None, width_um: float | None = None,
                  height_um: float | None = None, core_um: float | None = None,
                  inner_radius_um: float | None = None, hole_winding: int | None = None,
                  pixel_um: float | None = None, center_px: Sequence[float] | None = None,
                  geometry_file: str | Path | None = None, dataset: str | None = None,
                  strict: bool = False, imaging_um: dict | None = None) -> MeasuredEnsemble:
    """Read a measured vortex table (CSV, or HDF5 by suffix .h5/.hdf5) into configurations.

    Parameters
    ----------
    path : the table. CSV: header ``shot, x, y, sign`` (+ optional ``t``, ``weight``),
        ``#`` comment lines allowed; UTF-8 text, with or without a byte-order mark (other
        encodings are refused by line and byte). HDF5: a compound dataset, or a group of 1D datasets,
        with the same columns (``dataset`` names it; default ``vortices``, ``measured``,
        ``table`` or the root group).
    shape, radius_um, width_um, height_um, inner_radius_um, hole_winding, core_um : geometry
        (override the TOML beside the table, see :func:`resolve_geometry`).
    pixel_um, center_px : give these when x, y are pixel coordinates.
    geometry_file : TOML to use instead of ``<stem>.toml`` beside the table.
    strict : raise :class:`MeasuredTableError` on the first unusable row instead of
        warning and leaving it out.

    Returns
    -------
    MeasuredEnsemble

    Units: table positions in um (or pixels with pixel_um in um/pixel); result
    positions scaled by the domain size (disk radius 1; box height 1, centred).
    """
    path = Path(path)
    if not path.exists():
        raise MeasuredTableError(f"measured table {path} does not exist")
    geometry, calib = resolve_geometry(
        path, shape=shape, radius_um=radius_um, width_um=width_um, height_um=height_um,
        core_um=core_um, inner_radius_um=inner_radius_um, hole_winding=hole_winding,
        pixel_um=pixel_um, center_px=center_px, geometry_file=geometry_file,
        imaging_um=imaging_um)
    is_hdf5 = path.suffix.lower() in (".h5", ".hdf5", ".hdf")
    header, raw_rows = _read_hdf5_rows(path, dataset) if is_hdf5 else _read_csv_rows(path)
    where = "index" if is_hdf5 else "line"
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing or len(set(header)) != len(header):
        raise MeasuredTableError(
            f"{path}: columns found {header}; required {list(REQUIRED_COLUMNS)} "
            f"(+ optional {list(OPTIONAL_COLUMNS)}), each once"
            + (f"; missing {missing}" if missing else "; some column is repeated"))
    problems: list[RowProblem] = []
    unknown_cols = [c for c in header if c not in REQUIRED_COLUMNS + OPTIONAL_COLUMNS]
    if unknown_cols:
        # A column we do not know is not a row problem; it is noted and ignored.
        problems.append(RowProblem(path.name, 0, "header", f"column(s) {unknown_cols} "
                                   f"ignored; known: {list(REQUIRED_COLUMNS + OPTIONAL_COLUMNS)}"))
    col = {c: header.index(c) for c in header}
    domain = geometry.domain()
    def report(row: int, reason: str, shot: str | None = None) -> None:
        prob = RowProblem(path.name, row, where, reason, shot)
        if strict:
            raise MeasuredTableError(
                f"{prob}. Accepted: shot id, finite x and y inside the domain "
                f"({_describe(geometry, calib)}), sign one of {ACCEPTED_SIGNS}, one row "
                f"per vortex (no repeated position in a shot)")
        problems.append(prob)

    # shot -> list of (row, x_um, y_um, sign, t, weight), in order of appearance
    shots: dict[str, list[tuple[int, float, float, int, float, float]]] = {}
    seen: dict[tuple[str, float, float], int] = {}
    for row, fields in raw_rows:
        if len(fields) != len(header):
            report(row, f"has {len(fields)} fields, the header has {len(header)}")
            continue
        shot = fields[col["shot"]]
        if shot == "":
            report(row, "missing shot id")
            continue
        shots.setdefault(shot, [])
        vals: dict[str, float] = {}
        bad = None
        for name in ("x", "y") + tuple(c for c in OPTIONAL_COLUMNS if c in col):
            text = fields[col[name]]
            if text == "":
                bad = f"missing {name}"
                break
            try:
                v = float(text)
            except ValueError:
                bad = f"{name} is not a number: {text!r}"
                break
            if not math.isfinite(v):
                bad = f"{name} is {text} (not finite)"
                break
            vals[name] = v
        if bad is not None:
            report(row, bad, shot)
            continue
        stext = fields[col["sign"]]
        if stext == "":
            report(row, f"missing sign (accepted: {ACCEPTED_SIGNS})", shot)
            continue
        sign = _SIGN_WORDS.get(stext.replace(" ", ""))
        if sign is None:
            report(row, f"unknown sign {stext!r} (accepted: {ACCEPTED_SIGNS})", shot)
            continue
        xy = np.array([vals["x"], vals["y"]])
        xy_um = pixels_to_um(xy, calib) if calib is not None else xy
        scaled = geometry.to_scaled(xy_um)
        if not bool(np.asarray(domain.contains(scaled[None, :])).reshape(-1)[0]):
            report(row, f"position ({xy_um[0]:.4g}, {xy_um[1]:.4g}) um is outside the "
                   f"domain ({_describe(geometry, None)})", shot)
            continue
        key = (shot, round(xy_um[0] / _DUPLICATE_TOL_UM), round(xy_um[1] / _DUPLICATE_TOL_UM))
        if key in seen:
            report(row, f"duplicate position of {where} {seen[key]} in shot {shot!r}", shot)
            continue
        seen[key] = row
        shots[shot].append((row, float(xy_um[0]), float(xy_um[1]), sign,
                            vals.get("t", math.nan), vals.get("weight", math.nan)))

    out: list[MeasuredShot] = []
    for shot, items in shots.items():
        arr = np.array([it[1:3] for it in items], dtype=np.float64).reshape(-1, 2)
        t = None
        if "t" in col and items:
            ts = np.array([it[4] for it in items])
            t = float(ts.mean())
            if np.ptp(ts) > 0:
                problems.append(RowProblem(
                    path.name, items[0][0], where,
                    f"shot {shot!r} has rows with different t ({ts.min():g}..{ts.max():g});"
                    f" the shot keeps all its rows and t = mean", shot))
        out.append(MeasuredShot(
            shot=shot, positions=geometry.to_scaled(arr) if len(items) else arr,
            signs=np.array([it[3] for it in items], dtype=np.int8),
            rows=np.array([it[0] for it in items], dtype=np.int64), t=t,
            weights=np.array([it[5] for it in items]) if "weight" in col else None))
    if problems:
        _warn(path, problems)
    core = DEFAULT_CORE if geometry.core_um is None else geometry.core_um / geometry.length_scale_um
    note = core_radius_note(core, domain, max((len(s.signs) for s in out), default=0),
                            where=path.name)
    if note:
        warnings.warn(CoreRadiusWarning(note), stacklevel=2)
    return MeasuredEnsemble(
        source=path.name, shots=tuple(out), geometry=geometry, domain=domain,
        core_radius=core,
        core_given=geometry.core_um is not None,
        length_scale_um=geometry.length_scale_um, problems=tuple(problems),
        n_rows=len(raw_rows))


def _describe(geometry: Geometry, calib: PixelCalibration | None) -> str:
    if geometry.shape == "disk":
        text = f"disk of radius {geometry.radius_um:g} um about the centre"
    elif geometry.shape == "grid":
        text = (f"{geometry.image_kind} image {Path(geometry.image_file).name} (fluid reaching "
                f"{geometry.length_scale_um:g} um from the centre)")
        if geometry.hole_winding is not None:
            text += f" with {geometry.hole_winding} circulation quanta on its hole(s)"
    elif geometry.shape == "annulus":
        text = (f"annulus {geometry.inner_radius_um:g} < r < {geometry.radius_um:g} um about the "
                f"centre with {geometry.hole_winding or 0} circulation quanta on its hole")
    else:
        text = f"box {geometry.width_um:g} x {geometry.height_um:g} um about the centre"
    if calib is not None:
        text += (f"; pixels of {calib.pixel_um:g} um with the centre at "
                 f"({calib.center_px[0]:g}, {calib.center_px[1]:g}) px")
    return text


def _warn(path: Path, problems: Iterable[RowProblem]) -> None:
    problems = list(problems)
    listed = "\n  ".join(str(p) for p in problems[:_MAX_LISTED])
    more = (f"\n  ... and {len(problems) - _MAX_LISTED} more (see .problems)"
            if len(problems) > _MAX_LISTED else "")
    warnings.warn(f"{path.name}: {len(problems)} row(s) left out or noted:\n  {listed}{more}",
                  MeasuredTableWarning, stacklevel=3)
