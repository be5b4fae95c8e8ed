"""Quantized vortices of a 2D condensate: detection by phase winding, sub-grid refinement, and
the vortex table. Tracking across frames and annihilation / creation events are in
:mod:`gpe.analysis.tracking` (their names are still importable from here).

Positions are in healing lengths xi, times in hbar/mu, as everywhere in ``gpe``. Arrays are
(ny, nx) with row = y, like :class:`gpe.field.grid.Grid`.

Detection
---------
Every grid plaquette (four neighbouring grid points) is tested: the wrapped phase differences
along its four edges, taken counter-clockwise in the (x, y) plane, sum to 2 pi s with winding
number s. A plaquette with s != 0 holds a vortex of sign s (psi ~ exp(+i theta) is s = +1).
Only plaquettes inside the fluid count: the local background density there must reach
``threshold`` times the reference (peak) background density, and an optional region mask
(the trap region) must contain all four corners. The background is either given (e.g. the
ground-state density) or estimated from the frame itself by a grey-scale closing of the
density, which fills vortex cores but does not push the fluid edge outwards, so the
low-density tail and the outside of the trap, where the phase is noise, give no ghost vortices.
A closing cannot fill a core whose dip opens onto a hard wall's depleted layer, so an optional
``floor`` (the runs give the Thomas-Fermi density mu - V of the potential, beams included)
keeps a plaquette where that density reaches the threshold too: it is 0 where the fluid ends,
so it lets no ghost in.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy import ndimage

from gpe.errors import VorthermError

__all__ = [
    "VORTEX_DTYPE",
    "Detection",
    "find_vortices",
    "fluid_background",
    "detect_frames",
    "frame_rows",
]

#: Rows of the vortex table; the same columns as the run file's ``vortices`` dataset.
#: ``track`` is -1 until :func:`gpe.analysis.tracking.track_vortices` has linked the frames.
VORTEX_DTYPE = np.dtype(
    [("frame", "<i8"), ("t", "<f8"), ("x", "<f8"), ("y", "<f8"), ("sign", "i1"), ("track", "<i8")]
)

_TWO_PI = 2.0 * np.pi


@dataclass(frozen=True)
class Detection:
    """Vortices found in one frame.

    Units: x, y in xi; sign dimensionless (+1 counter-clockwise circulation, -1 clockwise).

    Attributes
    ----------
    x, y : np.ndarray (M,) float64
    sign : np.ndarray (M,) int8
    refined : np.ndarray (M,) bool
        True where the bilinear zero was found inside the plaquette, False where the
        plaquette centre was used instead.
    """

    x: np.ndarray
    y: np.ndarray
    sign: np.ndarray
    refined: np.ndarray

    def __len__(self) -> int:
        return int(self.x.size)

    @property
    def positions(self) -> np.ndarray:
        """(M, 2) array of (x, y) in xi."""
        return np.column_stack([self.x, self.y])

    @property
    def n_plus(self) -> int:
        return int(np.count_nonzero(self.sign > 0))

    @property
    def n_minus(self) -> int:
        return int(np.count_nonzero(self.sign < 0))


def _uniform_spacing(coord: np.ndarray, name: str) -> float:
    coord = np.asarray(coord, dtype=np.float64)
    if coord.ndim != 1 or coord.size < 2:
        raise VorthermError(f"vortex detection: coordinate '{name}' must be a 1-D array of at "
                            f"least 2 points, got shape {coord.shape}")
    steps = np.diff(coord)
    h = float(steps.mean())
    if h <= 0 or np.max(np.abs(steps - h)) > 1e-6 * h:
        raise VorthermError(f"vortex detection: coordinate '{name}' must be increasing and "
                            "uniformly spaced (a gpe.field.grid.Grid axis)")
    return h


def _check_threshold(threshold: float) -> float:
    threshold = float(threshold)
    if not (0.0 < threshold < 1.0):
        raise VorthermError(f"vortex detection: threshold = {threshold!r} is outside (0, 1); "
                            "it is a fraction of the peak background density, e.g. 0.1")
    return threshold


def fluid_background(density: np.ndarray, dx: float, dy: float,
                     fill_radius: float = 2.0) -> tuple[np.ndarray, int, int]:
    """Local background density of a frame, with vortex cores filled in.

    The density is max-pooled over blocks of about 0.75 healing lengths, then closed
    (grey dilation followed by grey erosion) with a window of half-width ``fill_radius``.
    A closing fills holes narrower than the window (vortex cores) but leaves the edge of a
    large region where it is, unlike a plain smoothing that spreads the fluid outwards.

    Units: density in n0 (|psi|^2); dx, dy, fill_radius in xi.

    Returns
    -------
    background : np.ndarray (ny // by, nx // bx) float64
        Background on the coarse block grid.
    bx, by : int
        Block sizes in grid points (x and y).
    """
    if fill_radius <= 0:
        raise VorthermError(f"vortex detection: fill_radius = {fill_radius!r} must be > 0 (xi)")
    ny, nx = density.shape
    # Blocks of ~0.75 xi keep the coarse grid small (the closing is then cheap) while the
    # fluid edge moves outwards by less than one block.
    bx = max(1, min(nx, int(0.75 / dx)))
    by = max(1, min(ny, int(0.75 / dy)))
    pooled = _block_max(np.ascontiguousarray(density, dtype=np.float64), by, bx)
    wx = 2 * int(np.ceil(fill_radius / (bx * dx))) + 1
    wy = 2 * int(np.ceil(fill_radius / (by * dy))) + 1
    background = ndimage.grey_closing(pooled, size=(wy, wx), mode="nearest")
    return background, bx, by


@njit(cache=True, fastmath=False)
def _winding_candidates(phase: np.ndarray):
    """Plaquettes of a phase array (ny, nx) with non-zero winding.

    Returns (jj, ii, s): lower-left corner indices and winding numbers. The edge differences
    are wrapped into [-pi, pi]; their counter-clockwise sum is 2 pi s exactly up to round-off.
    fastmath stays off: the wrap relies on exact rounding of the differences.
    """
    ny, nx = phase.shape
    wind = np.zeros((ny - 1, nx - 1), dtype=np.int8)
    two_pi = 2.0 * np.pi
    count = 0
    for j in range(ny - 1):
        for i in range(nx - 1):
            p00 = phase[j, i]
            p10 = phase[j, i + 1]
            p11 = phase[j + 1, i + 1]
            p01 = phase[j + 1, i]
            total = 0.0
            for d in (p10 - p00, p11 - p10, p01 - p11, p00 - p01):
                total += d - two_pi * np.rint(d / two_pi)
            s = np.rint(total / two_pi)
            if s != 0.0:
                wind[j, i] = np.int8(s)
                count += 1
    jj = np.empty(count, dtype=np.int64)
    ii = np.empty(count, dtype=np.int64)
    ss = np.empty(count, dtype=np.int8)
    k = 0
    for j in range(ny - 1):
        for i in range(nx - 1):
            if wind[j, i] != 0:
                jj[k] = j
                ii[k] = i
                ss[k] = wind[j, i]
                k += 1
    return jj, ii, ss


@njit(cache=True)
def _block_max(density: np.ndarray, by: int, bx: int) -> np.ndarray:
    """Maximum of the density over blocks of by x bx points (partial blocks at the end)."""
    ny, nx = density.shape
    cy = (ny + by - 1) // by
    cx = (nx + bx - 1) // bx
    out = np.zeros((cy, cx))
    for j in range(ny):
        for i in range(nx):
            v = density[j, i]
            if v > out[j // by, i // bx]:
                out[j // by, i // bx] = v
    return out


def _bilinear_zeros(p00, p10, p01, p11):
    """Zero (u, v) in [0, 1]^2 of the bilinear interpolant of four complex corner values.

    psi(u, v) = a + b u + c v + d u v. Writing v = -(a + b u)/(c + d u), v is real only if
    Im[(a + b u) conj(c + d u)] = 0, a quadratic in u. Returns u, v, ok (vectorised).
    """
    a = p00
    b = p10 - p00
    c = p01 - p00
    d = p11 - p10 - p01 + p00
    qa = np.imag(b * np.conj(d))
    qb = np.imag(a * np.conj(d) + b * np.conj(c))
    qc = np.imag(a * np.conj(c))
    scale = np.abs(qa) + np.abs(qb) + np.abs(qc) + 1e-300
    u_best = np.full(a.shape, 0.5)
    v_best = np.full(a.shape, 0.5)
    ok = np.zeros(a.shape, dtype=bool)
    linear = np.abs(qa) <= 1e-12 * scale
    disc = qb * qb - 4.0 * qa * qc
    sq = np.sqrt(np.maximum(disc, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        # numerically stable roots of qa u^2 + qb u + qc
        qq = -0.5 * (qb + np.copysign(sq, qb))
        r1 = np.where(linear, -qc / qb, qq / qa)
        r2 = np.where(linear, np.nan, qc / qq)
        for u in (r1, r2):
            den = c + d * u
            v = -np.real((a + b * u) * np.conj(den)) / (np.abs(den) ** 2)
            tol = 1e-9
            good = (np.isfinite(u) & np.isfinite(v) & (disc >= 0) & (u >= -tol) & (u <= 1 + tol)
                    & (v >= -tol) & (v <= 1 + tol) & ~ok)
            u_best = np.where(good, u, u_best)
            v_best = np.where(good, v, v_best)
            ok |= good
    return np.clip(u_best, 0.0, 1.0), np.clip(v_best, 0.0, 1.0), ok


def _lagrange4(u):
    """Cubic Lagrange weights on the nodes -1, 0, 1, 2 and their derivatives, shape (4, M)."""
    w = np.stack([-u * (u - 1) * (u - 2) / 6, (u + 1) * (u - 1) * (u - 2) / 2,
                  -(u + 1) * u * (u - 2) / 2, (u + 1) * u * (u - 1) / 6])
    dw = np.stack([-(3 * u * u - 6 * u + 2) / 6, (3 * u * u - 4 * u - 1) / 2,
                   -(3 * u * u - 2 * u - 2) / 2, (3 * u * u - 1) / 6])
    return w, dw


def _cubic_polish(psi, jj, ii, u, v, periodic, iterations=6):
    """Newton iterations for the zero of the bicubic (4 x 4 Lagrange) interpolant of psi.

    The bilinear zero is exact only for a field linear across the plaquette; the core profile
    and the neighbours' flow bend psi on the scale of xi, an O(dx^2) error. The bicubic
    interpolant reduces it to O(dx^4). Starts from the bilinear (u, v); where the stencil
    leaves a non-periodic array or Newton goes further than half a cell beyond the plaquette,
    the bilinear value is kept. (Near an edge the discrete winding may sit in the plaquette
    next to the continuum zero, hence the half-cell allowance.)
    """
    ny, nx = psi.shape
    offs = np.arange(-1, 3)
    rows = jj[:, None] + offs[None, :]
    cols = ii[:, None] + offs[None, :]
    if periodic:
        inside = np.ones(jj.size, dtype=bool)
    else:
        inside = (jj >= 1) & (jj <= ny - 3) & (ii >= 1) & (ii <= nx - 3)
    rows, cols = rows % ny, cols % nx
    stencil = psi[rows[:, :, None], cols[:, None, :]]          # (M, 4 rows=v, 4 cols=u)
    uu, vv = u.copy(), v.copy()
    for _ in range(iterations):
        wu, dwu = _lagrange4(uu)
        wv, dwv = _lagrange4(vv)
        f = np.einsum("mab,am,bm->m", stencil, wv, wu)
        fu = np.einsum("mab,am,bm->m", stencil, wv, dwu)
        fv = np.einsum("mab,am,bm->m", stencil, dwv, wu)
        det = fu.real * fv.imag - fv.real * fu.imag
        with np.errstate(divide="ignore", invalid="ignore"):
            du = -(fv.imag * f.real - fv.real * f.imag) / det
            dv = -(-fu.imag * f.real + fu.real * f.imag) / det
        uu = uu + np.where(np.isfinite(du), du, 0.0)
        vv = vv + np.where(np.isfinite(dv), dv, 0.0)
    good = (inside & np.isfinite(uu) & np.isfinite(vv)
            & (uu >= -0.5) & (uu <= 1.5) & (vv >= -0.5) & (vv <= 1.5))
    return np.where(good, uu, u), np.where(good, vv, v)


def find_vortices(psi: np.ndarray, x: np.ndarray, y: np.ndarray, *,
                  threshold: float = 0.1,
                  background: np.ndarray | None = None,
                  region: np.ndarray | None = None,
                  fill_radius: float = 2.0,
                  refine: str = "cubic",
                  periodic: bool = False,
                  floor: np.ndarray | None = None) -> Detection:
    """Find the quantized vortices of one frame by phase winding.

    Parameters
    ----------
    psi : complex array (ny, nx)
        Wavefunction, row = y.
    x, y : float arrays (nx,), (ny,)
        Uniform grid coordinates (``grid.x``, ``grid.y``).
    threshold : float in (0, 1)
        A plaquette counts only where the background density reaches ``threshold`` times the
        peak background density.
    background : float array (ny, nx), optional
        Background density, e.g. the ground-state |psi0|^2. Default: estimated from |psi|^2 by
        :func:`fluid_background` (cores filled by a grey closing of half-width ``fill_radius``).
    region : bool array (ny, nx), optional
        Where the fluid may be (e.g. the trap region); a plaquette counts only if all four of
        its corners are inside.
    fill_radius : float
        Half-width of the closing window that fills cores, used without ``background``.
    refine : {"cubic", "bilinear", "none"}
        "bilinear": sub-grid position from the zero of the bilinear interpolant of psi in the
        plaquette (the plaquette centre where no zero lies inside). "cubic" (default): that
        zero polished by Newton steps on the bicubic interpolant of the surrounding 4 x 4
        points (error O(dx^4) instead of O(dx^2)). "none": the plaquette centre.
    periodic : bool
        Also test the plaquettes that wrap around the box edges.
    floor : float array (ny, nx), optional
        A density the fluid holds whatever the frame shows, e.g. the Thomas-Fermi density
        mu - V of the potential: a plaquette counts where the background reaches ``threshold``
        times its peak *or* the floor reaches ``threshold`` times the floor's peak (at all four
        corners). Next to a hard wall a core
        merges with the wall's depleted layer, and the closing of the frame's own density
        (which cannot fill a dip open to the outside) drops below the threshold there: a real
        vortex 1.5-2.5 xi from the wall was left out. The floor keeps it; outside the trap and
        inside a beam taller than mu it is 0, so the ghost suppression there is unchanged.

    Returns
    -------
    Detection

    Units
    -----
    x, y, fill_radius in xi; psi in sqrt(n0); background in n0 (|psi|^2).
    """
    threshold = _check_threshold(threshold)
    if refine not in ("cubic", "bilinear", "none"):
        raise VorthermError(f"vortex detection: refine = {refine!r}; accepted: 'cubic', "
                            "'bilinear', 'none'")
    psi = np.asarray(psi)
    if psi.ndim != 2 or not np.iscomplexobj(psi):
        raise VorthermError(f"vortex detection: psi must be a complex 2-D array (ny, nx), "
                            f"got dtype {psi.dtype} and shape {psi.shape}")
    ny, nx = psi.shape
    if len(x) != nx or len(y) != ny:
        raise VorthermError(f"vortex detection: psi has shape (ny, nx) = {psi.shape} but "
                            f"len(x) = {len(x)}, len(y) = {len(y)}")
    dx = _uniform_spacing(x, "x")
    dy = _uniform_spacing(y, "y")
    for name, arr in (("background", background), ("region", region), ("floor", floor)):
        if arr is not None and np.shape(arr) != psi.shape:
            raise VorthermError(f"vortex detection: '{name}' has shape {np.shape(arr)}, "
                                f"expected the shape of psi {psi.shape}")

    field = np.pad(psi, ((0, 1), (0, 1)), mode="wrap") if periodic else psi
    jj, ii, wind = _winding_candidates(np.angle(field))
    if jj.size:
        # fluid test only at candidate plaquettes (lower-left corner index jj, ii)
        if background is not None:
            bg = np.asarray(background, dtype=np.float64)
            ref = float(bg.max())
            keep = np.ones(jj.size, dtype=bool)
            for dj in (0, 1):
                for di in (0, 1):
                    keep &= bg[(jj + dj) % ny, (ii + di) % nx] >= threshold * ref
        else:
            dens = psi.real ** 2 + psi.imag ** 2
            bg, bx, by = fluid_background(dens, dx, dy, fill_radius)
            ref = float(bg.max())
            keep = bg[np.minimum(jj // by, bg.shape[0] - 1),
                      np.minimum(ii // bx, bg.shape[1] - 1)] >= threshold * ref
        if floor is not None:
            fl = np.asarray(floor, dtype=np.float64)
            fref = float(fl.max())
            at_floor = np.full(jj.size, fref > 0.0)
            for dj in (0, 1):
                for di in (0, 1):
                    at_floor &= fl[(jj + dj) % ny, (ii + di) % nx] >= threshold * fref
            keep |= at_floor
        if ref <= 0.0:
            keep[:] = False
        if region is not None:
            reg = np.asarray(region, dtype=bool)
            for dj in (0, 1):
                for di in (0, 1):
                    keep &= reg[(jj + dj) % ny, (ii + di) % nx]
        jj, ii = jj[keep], ii[keep]
        wind = wind[keep]
    # winding numbers |s| > 1 in one plaquette are not expected on a resolved grid; keep the sign
    sign = np.sign(wind).astype(np.int8)

    u = np.full(jj.size, 0.5)
    v = np.full(jj.size, 0.5)
    ok = np.zeros(jj.size, dtype=bool)
    if refine != "none" and jj.size:
        j1 = (jj + 1) % ny
        i1 = (ii + 1) % nx
        u, v, ok = _bilinear_zeros(psi[jj, ii], psi[jj, i1], psi[j1, ii], psi[j1, i1])
        if refine == "cubic":
            u, v = _cubic_polish(psi, jj, ii, u, v, periodic)
    xs = x[0] + (ii + u) * dx
    ys = y[0] + (jj + v) * dy
    if periodic:
        xs = x[0] + np.mod(xs - x[0], nx * dx)
        ys = y[0] + np.mod(ys - y[0], ny * dy)
    return Detection(x=xs, y=ys, sign=sign, refined=ok)


def detect_frames(frames, x: np.ndarray, y: np.ndarray, times, **detect_options) -> np.ndarray:
    """Detect vortices in a sequence of frames and stack them into one vortex table.

    Parameters
    ----------
    frames : iterable of complex arrays (ny, nx)
        Wavefunctions in output order (a list, an (F, ny, nx) array or an h5py dataset).
    x, y : float arrays
        Grid coordinates.
    times : float array (F,)
        Output time of every frame.
    **detect_options
        Passed to :func:`find_vortices` (threshold, background, region, ...).

    Returns
    -------
    np.ndarray of VORTEX_DTYPE, with track = -1 (see :func:`gpe.analysis.tracking.track_vortices`).

    Units
    -----
    x, y in xi; times in hbar/mu.
    """
    times = np.asarray(times, dtype=np.float64)
    tables = []
    n = 0
    for n, psi in enumerate(frames):
        if n >= times.size:
            raise VorthermError(f"detect_frames: more frames than times ({times.size} given)")
        det = find_vortices(np.asarray(psi), x, y, **detect_options)
        rows = np.empty(len(det), dtype=VORTEX_DTYPE)
        rows["frame"] = n
        rows["t"] = times[n]
        rows["x"] = det.x
        rows["y"] = det.y
        rows["sign"] = det.sign
        rows["track"] = -1
        tables.append(rows)
    if tables and n + 1 != times.size:
        raise VorthermError(f"detect_frames: {n + 1} frames but {times.size} times")
    return np.concatenate(tables) if tables else np.empty(0, dtype=VORTEX_DTYPE)


def check_vortex_table(table: np.ndarray) -> np.ndarray:
    table = np.asarray(table)
    if table.dtype.names is None or any(k not in table.dtype.names for k in VORTEX_DTYPE.names):
        raise VorthermError("vortex table: expected a structured array with columns "
                            f"{VORTEX_DTYPE.names}, got dtype {table.dtype}")
    return table


def frame_rows(table: np.ndarray, frame: int, n_frames: int | None = None) -> np.ndarray:
    """Rows of one frame of a vortex table.

    Parameters
    ----------
    table : VORTEX_DTYPE array
    frame : int
        Frame index, 0 <= frame < n_frames; negative values count from the end.
    n_frames : int, optional
        Number of frames of the run (default: last frame in the table + 1).

    Units
    -----
    As the table (xi, hbar/mu).
    """
    table = check_vortex_table(table)
    if n_frames is None:
        n_frames = int(table["frame"].max()) + 1 if table.size else 0
    index = int(frame)
    if index < 0:
        index += n_frames
    if not (0 <= index < n_frames):
        raise VorthermError(f"vortex table: frame {frame} is out of range; the run has "
                            f"{n_frames} frames (0..{n_frames - 1}, or negative from the end)")
    return table[table["frame"] == index]
