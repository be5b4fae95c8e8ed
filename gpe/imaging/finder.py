"""Vortex cores in density images: envelope removal, dips, sub-pixel fit, scores, boundary, signs.

:func:`find_cores` works on one absorption image (any camera: rendered by gpe.imaging.render
or read from a file by gpe.imaging.files), in pixels:

1. **Envelope**: the image, lightly smoothed (Gaussian, ``core_px / 2``) against shot noise, is
   closed (grey dilation then erosion, near-round octagonal window of half-width 2 core
   widths): a closing fills dips narrower than its window (the cores) and leaves the edge of
   the cloud where it is, unlike a plain smoothing that would draw false dips along the edge
   (and, the window being near round, draws no corners there either).
2. **Fluid boundary**: the bulk level is the median of the envelope where it exceeds half its
   maximum; the fluid is where the envelope exceeds half the bulk level. Its centroid is the
   centre, and the radius of the disk of the same area the boundary radius (the half-density
   contour of a hard wall sits about 1.25 xi inside the wall, close to the wall layer that
   gpe.run.gas takes off the trap radius).
3. **Candidates**: the relative depletion d = 1 - image/envelope, smoothed with a Gaussian of
   half the core width (a matched filter for a dip of that size), has local maxima where the
   envelope exceeds ``CANDIDATE_FLOOR`` = 0.4 of the bulk level (a little beyond the fluid's
   half-density contour, where the maximum of a core next to the wall can lie; d is computed
   out to where the envelope is a fifth of the bulk level, so that the dip of a core next to
   the boundary is not cut in half); their **score** is the smoothed depletion (less its median over the
   fluid) over the noise the smoothing leaves of the pixel noise, sigma_pix / (2 sqrt(pi) s) for
   a Gaussian of s pixels; sigma_pix comes from second differences (:func:`pixel_noise`), which
   the cores themselves hardly affect, so a crowded image does not raise its own threshold.
   A candidate also needs a filtered depth of at least ``MIN_DEPTH`` = 5% of the envelope.
4. **Sub-pixel position**: the ratio image/envelope is fitted, in a window of half-width 2
   core widths around each candidate, with a Gaussian dip on a plane,
   ``(c0 + c1 u + c2 v)(1 - A exp(-r^2/2w^2))`` (a few damped Gauss-Newton steps, all
   candidates at once). The plane takes up what the closing gets wrong next to the wall (its
   fill level at a core there is set by the low rim on the wall side, which would pull a plain
   dip fit away from the wall by up to half a pixel). The position of a symmetric dip does not
   depend on the exact shape of its profile, so a Gaussian stands in for the core profile
   convolved with the optics. Fits that leave the window or give a width outside [0.3, 3]
   core widths keep the candidate's pixel position and are flagged.
   **Refit** (4b): the envelope is then estimated again from the image with the fitted dips
   divided out (no closing), as the cloud's edge profile times a slow modulation
   (:func:`profile_envelope`: the profile is the median across the whole edge at each level of
   the smoothed envelope, so a core on the steep edge does not leave its own residual in it),
   and every dip is fitted again from its first position with the *other* dips divided out of
   its window. Measured on rendered frames of four simulated runs (three renders each; before,
   the refit smoothed the cleaned image locally and fitted each dip alone): beyond 2 xi from
   the wall 94.7% of the vortices are found within half a pixel (91.2% before), and 2-3 xi
   from the wall 89% (76% before) (docs/imaging.md).
   **Depth** (4c, when the optics are known, ``optics_px``): a vortex core is a zero of the
   field, and a zero stays a zero in free expansion, so in the image its dip has the depth
   that the optics leave of a full one: for a Gaussian core of rms width s seen through
   optics of rms width o, 1 - o^2 / (s^2 + o^2) = 1 - (optics_px / core_px)^2 (the blurred
   dip keeps its area, depth times width squared). A fitted dip must reach
   ``CORE_DEPTH_SHARE`` = 1/2 of that, and a candidate whose fit failed (no depth) is
   dropped. On rendered frames of a stirred run (the demo, 41 frames after the beams are off,
   0.4 um pixels, 0.3 um PSF) the matched vortices' fitted depths are 0.68 or more and the
   unmatched detections' median is 0.14 (sound): false detections per image fall from 21.2 to
   1.15, and the vortices found from 868 to 866 of 897 (docs/imaging.md).
5. **Signs** from a velocity-selective image when one is given (gpe.imaging.render's channel):
   the selected fraction b = bragg/envelope minus its local mean is weighed with (y - y0)
   (axis x) or (x - x0) (axis y) over a ring from 1 to 2.5 core widths around the core; the
   flow along x of a vortex of circulation s is -s (y - y0)/r^2, so the sign is minus the
   sign of the first sum (plus for the second). Without a velocity image the signs are 0: unknown.

Pixel coordinates: (column, row) of the array, centres at integers; a positive vortex turns
counter-clockwise in these coordinates (row index growing upwards).

Units: pixels throughout (``core_px`` the expected rms core width of the dip in the image).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from gpe.imaging.render import ImagingError

#: default least score of a detection (smoothed depletion over its noise; common practice ~5)
MIN_SCORE = 5.0
_MAD_TO_SIGMA = 1.4826
#: half-width of the closing window, in core widths
CLOSING_HALF_WIDTH = 2.0
#: the depletion is computed where the envelope exceeds this fraction of the bulk level, wider
#: than the fluid (1/2), so that the dip of a core next to the boundary is not cut in half
DEPLETION_FLOOR = 0.2
#: least depth of a candidate after the matched filter, as a fraction of the envelope: a
#: noiseless image has no noise to set a threshold, and shallower dips are ripples of the optics
MIN_DEPTH = 0.05
#: candidates are looked for where the envelope exceeds this fraction of the bulk level, a little
#: beyond the fluid (1/2): the closing's envelope dips at a core next to the wall, and the
#: depletion's maximum of such a core can lie just outside the half-density contour
CANDIDATE_FLOOR = 0.4
#: half-width of the window of the sub-pixel fit, in core widths
FIT_HALF_WIDTH = 2.0
#: outer radius of the ring the sign is read from, in core widths
SIGN_RING = 2.5
#: width of the matched filter, in core widths
MATCHED = 0.5
#: with the optics known, a fitted dip must reach this share of the depth a vortex core would
#: have in the image (module docstring, step 4c)
CORE_DEPTH_SHARE = 0.5
#: the refit's envelope: the edge profile is tabulated against the level of the closing's
#: envelope smoothed over this many core widths, in this many bins of equal pixel count, and
#: the slow modulation around it is smoothed over ``PROFILE_MODULATION`` core widths
PROFILE_LEVEL_SMOOTHING = 1.0
PROFILE_BINS = 40
PROFILE_MODULATION = 1.5


@dataclass(frozen=True)
class Boundary:
    """The fluid region of an image: centre, radius of the equal-area disk, bulk level.

    Units: pixels; bulk in image counts.
    """

    center_px: tuple[float, float]
    radius_px: float
    bulk: float


@dataclass(frozen=True)
class Found:
    """Vortex cores found in one image.

    Attributes
    ----------
    x, y : (K,) sub-pixel positions (column, row).
    sign : (K,) int8, +1 / -1, 0 where unknown.
    score : (K,) smoothed depletion over its noise level.
    depth : (K,) fitted depletion amplitude A (fraction of the envelope).
    width : (K,) fitted rms width w.
    fitted : (K,) bool, False where the fit failed and the pixel position is kept.
    boundary : the fluid :class:`Boundary`.

    Units: pixels.
    """

    x: np.ndarray
    y: np.ndarray
    sign: np.ndarray
    score: np.ndarray
    depth: np.ndarray
    width: np.ndarray
    fitted: np.ndarray
    boundary: Boundary

    def __len__(self) -> int:
        return int(self.x.size)


def check_image(image, name: str = "image") -> np.ndarray:
    """A 2D, non-empty, finite, non-negative image as float64, or an ImagingError naming it."""
    arr = np.asarray(image)
    if arr.ndim != 2:
        raise ImagingError(f"{name}: shape {arr.shape}; accepted a 2D image (rows, columns)")
    if min(arr.shape) < 8:
        raise ImagingError(f"{name}: shape {arr.shape}; accepted at least 8 x 8 pixels")
    if not np.issubdtype(arr.dtype, np.number) or np.iscomplexobj(arr):
        raise ImagingError(f"{name}: data type {arr.dtype}; accepted real numbers (counts)")
    arr = arr.astype(np.float64)
    if not np.all(np.isfinite(arr)):
        raise ImagingError(f"{name}: holds NaN or infinite pixels; accepted finite counts")
    if arr.min() < 0:
        raise ImagingError(f"{name}: negative pixels (min {arr.min():g}); accepted counts >= 0 "
                           "(an optical density image, not a difference image)")
    if arr.max() <= 0:
        raise ImagingError(f"{name}: empty image (every pixel is 0); accepted an image of a cloud")
    return arr


def pixel_noise(values: np.ndarray, where: np.ndarray) -> float:
    """Standard deviation of the pixel noise of an image, from its second differences.

    The image is filtered with the 3 x 3 kernel [[1, -2, 1], [-2, 4, -2], [1, -2, 1]] (the
    difference of two Laplacians), which cancels smooth structure up to second order and turns
    white noise of deviation sigma into noise of deviation 6 sigma (its squared weights sum to
    36): sigma = 1.4826 MAD / 6 over ``where`` (Immerkaer, Computer Vision and Image
    Understanding 64, 300 (1996), with a median in place of his mean, against the cores).

    Units: those of ``values``.
    """
    kernel = np.array([[1.0, -2.0, 1.0], [-2.0, 4.0, -2.0], [1.0, -2.0, 1.0]])
    out = ndimage.convolve(values, kernel, mode="nearest")[where]
    if out.size == 0:
        return 0.0
    return _MAD_TO_SIGMA * float(np.median(np.abs(out - np.median(out)))) / 6.0


def envelope(image: np.ndarray, core_px: float) -> np.ndarray:
    """Cloud envelope with the cores filled: light smoothing, then a grey closing.

    Units: pixels; output in image counts.
    """
    smooth = ndimage.gaussian_filter(image, 0.5 * core_px, mode="nearest")
    h = math.ceil(CLOSING_HALF_WIDTH * core_px)
    return _octagon_filter(_octagon_filter(smooth, h, ndimage.maximum_filter), h,
                           ndimage.minimum_filter)


_CROSS = np.array([[False, True, False], [True, True, True], [False, True, False]])


def _octagon_filter(values: np.ndarray, h: int, extremum) -> np.ndarray:
    """Max (or min) filter over an octagon of half-width h: a square of half-width ~0.6 h
    (separable, cheap) followed by a diamond of radius ~0.4 h (repeated 3 x 3 crosses). Close to
    round (diagonal reach 1.13 h against the square's 1.41 h), so the closing draws no corners
    at the cloud's edge, at a fraction of the cost of a disk-shaped window."""
    a = max(1, round(0.6 * h))
    out = extremum(values, size=2 * a + 1, mode="nearest")
    for _ in range(h - a):
        out = extremum(out, footprint=_CROSS, mode="nearest")
    return out


def profile_envelope(clean: np.ndarray, env: np.ndarray, core_px: float,
                     bulk: float) -> np.ndarray:
    """The refit's envelope (module docstring, step 4b): the edge profile times a modulation.

    ``clean`` is the image with the fitted dips divided out, ``env`` the closing's envelope.
    Near the wall a core lies on the steep edge of the cloud, where any local smoothing of
    ``clean`` leaves part of the core's residual in the envelope and a dip fitted against it
    lands outwards. Instead the edge profile is measured along the whole edge at once: the
    closing's envelope, smoothed over ``PROFILE_LEVEL_SMOOTHING`` core widths, serves as the
    coordinate across the edge (its level sets follow the cloud's contour, for any shape),
    and the profile is the median of ``clean`` in ``PROFILE_BINS`` level bins of equal
    pixel count (a core covers a small part of a bin's ring, so the median ignores it). What
    the profile misses (a cloud brighter on one side, the bulk's own structure) is a
    modulation, ``clean`` over the profile smoothed over ``PROFILE_MODULATION`` core widths.
    Falls back to ``clean`` smoothed over half a core width when the edge has too few pixels
    for the bins.

    Units: pixels; output in image counts.
    """
    level = ndimage.gaussian_filter(env, PROFILE_LEVEL_SMOOTHING * core_px, mode="nearest")
    edge = (level > 0.02 * bulk) & (level < 0.98 * bulk)
    if edge.sum() < 16 * PROFILE_BINS:
        return ndimage.gaussian_filter(clean, 0.5 * core_px, mode="nearest")
    lv, vals = level[edge], clean[edge]
    order = np.argsort(lv, kind="stable")
    parts = np.array_split(order, PROFILE_BINS)
    mids = np.array([float(np.median(lv[i])) for i in parts])
    prof = np.array([float(np.median(vals[i])) for i in parts])
    shape = np.interp(level, mids, prof)
    ratio = np.where(shape > 0.05 * bulk, clean / np.maximum(shape, 1e-300), 1.0)
    return shape * ndimage.gaussian_filter(ratio, PROFILE_MODULATION * core_px, mode="nearest")


def fluid_boundary(env: np.ndarray) -> tuple[Boundary, np.ndarray]:
    """The fluid region of an envelope (module docstring, step 2) and its mask."""
    top = float(env.max())
    bulk = float(np.median(env[env > 0.5 * top]))
    mask = env > 0.5 * bulk
    if mask.sum() < 16:
        raise ImagingError("no fluid found: fewer than 16 pixels above half the bulk level")
    rows, cols = np.nonzero(mask)
    return Boundary(center_px=(float(cols.mean()), float(rows.mean())),
                    radius_px=float(math.sqrt(mask.sum() / math.pi)), bulk=bulk), mask


def _windows(values: np.ndarray, ix: np.ndarray, iy: np.ndarray, h: int) -> np.ndarray:
    """(K, (2h+1)^2) windows of ``values`` centred on the pixels (ix, iy), zero outside."""
    offs = np.arange(-h, h + 1)
    oy, ox = np.meshgrid(offs, offs, indexing="ij")
    padded = np.pad(values, h, mode="constant")
    return padded[iy[:, None, None] + h + oy[None], ix[:, None, None] + h + ox[None]].reshape(
        len(ix), -1)


def _fit_dips(ratio: np.ndarray, inside: np.ndarray, x0: np.ndarray, y0: np.ndarray,
              core_px: float, iterations: int = 10, dips=None):
    """Damped Gauss-Newton fit of (c0 + c1 u + c2 v)(1 - A exp(-r^2/2w^2)) around each (x0, y0).

    ``ratio`` is image / envelope, fitted where ``inside`` (the envelope above
    DEPLETION_FLOOR of the bulk); (u, v) are the offsets from the window's centre pixel. The
    plane is what the closing's envelope gets wrong near the wall (its fill level is set by the
    low rim on the wall side), so a dip there is not pulled away from the wall. All candidates
    at once. ``dips`` = (A, w) of an earlier fit at (x0, y0), one per candidate: each window
    then has every *other* candidate's dip divided out, so that a neighbour's dip reaching into
    the window does not pull the fit towards it. Returns the parameters (A, x, y, w, c0, c1,
    c2) and the fits that succeeded.

    Units: pixels.
    """
    h = max(2, math.ceil(FIT_HALF_WIDTH * core_px))
    offs = np.arange(-h, h + 1)
    oy, ox = (o.reshape(1, -1).astype(float) for o in np.meshgrid(offs, offs, indexing="ij"))
    ix, iy = np.rint(x0).astype(int), np.rint(y0).astype(int)
    gx, gy = ix[:, None] + ox, iy[:, None] + oy
    if dips is None:
        win = _windows(ratio, ix, iy, h)
    else:
        depth, width = (np.asarray(v, dtype=float)[:, None] for v in dips)
        all_dips = _dip_model(ratio.shape, x0, y0, depth[:, 0], width[:, 0])
        own = 1.0 - np.clip(depth, 0.0, _DEEPEST) * np.exp(
            -((gx - x0[:, None]) ** 2 + (gy - y0[:, None]) ** 2) / (2.0 * width * width))
        win = _windows(ratio / all_dips, ix, iy, h) * own
    wt = _windows(inside.astype(float), ix, iy, h)
    k = len(ix)
    p = np.zeros((k, 7))
    p[:, 0], p[:, 1], p[:, 2], p[:, 3], p[:, 4] = 0.5, x0, y0, core_px, 1.0
    lam = 1e-2
    for _ in range(iterations):
        a, xc, yc, w, c0, c1, c2 = (c[:, None] for c in p.T)
        dx, dy = gx - xc, gy - yc
        g = np.exp(-(dx * dx + dy * dy) / (2 * w * w))
        back, dip = c0 + c1 * ox + c2 * oy, 1.0 - a * g
        r = (win - back * dip) * wt
        bag = back * a * g
        jac = np.stack([-back * g, -bag * dx / w ** 2, -bag * dy / w ** 2,
                        -bag * (dx * dx + dy * dy) / w ** 3, dip, dip * ox, dip * oy],
                       axis=2) * wt[..., None]
        jtj = np.einsum("kni,knj->kij", jac, jac)
        jtj += lam * np.eye(7)[None] * np.maximum(np.einsum("kii->ki", jtj), 1e-12)[:, None, :]
        p = p + np.linalg.solve(jtj, np.einsum("kni,kn->ki", jac, r)[..., None])[..., 0]
        p[:, 3] = np.clip(np.abs(p[:, 3]), 0.1 * core_px, 10 * core_px)
    ok = ((np.abs(p[:, 1] - x0) < 0.5 * h) & (np.abs(p[:, 2] - y0) < 0.5 * h)
          & (p[:, 3] > 0.3 * core_px) & (p[:, 3] < 3.0 * core_px) & (p[:, 0] > 0)
          & np.all(np.isfinite(p), axis=1))
    return p, ok


#: fitted dips are divided out with their depth capped here, so that the division stays finite
_DEEPEST = 0.98


def _dip_model(shape, x, y, depth, width) -> np.ndarray:
    """The product of the fitted dips 1 - A exp(-r^2 / 2 w^2), each out to 5 w (depths capped
    at ``_DEEPEST``, so that dividing by the model stays finite). Units: pixels."""
    model = np.ones(shape)
    for xc, yc, a, w in zip(x, y, np.clip(depth, 0.0, _DEEPEST), width):
        h = math.ceil(5.0 * w)
        i0, i1 = max(0, int(yc) - h), min(shape[0], int(yc) + h + 2)
        j0, j1 = max(0, int(xc) - h), min(shape[1], int(xc) + h + 2)
        if i0 >= i1 or j0 >= j1:
            continue
        rr = (np.arange(i0, i1)[:, None] - yc) ** 2 + (np.arange(j0, j1)[None, :] - xc) ** 2
        model[i0:i1, j0:j1] *= 1.0 - a * np.exp(-rr / (2.0 * w * w))
    return model


def _signs(bragg: np.ndarray, env: np.ndarray, x: np.ndarray, y: np.ndarray, axis: str,
           core_px: float) -> np.ndarray:
    """Sign of each core from the velocity-selective image (module docstring, step 5)."""
    h = max(3, math.ceil(SIGN_RING * core_px))
    offs = np.arange(-h, h + 1)
    oy, ox = np.meshgrid(offs, offs, indexing="ij")
    frac = np.where(env > 0, bragg / np.maximum(env, 1e-300), 0.0)
    padded = np.pad(frac, h, mode="constant")
    ix = np.clip(np.rint(x).astype(int), 0, bragg.shape[1] - 1)
    iy = np.clip(np.rint(y).astype(int), 0, bragg.shape[0] - 1)
    win = padded[iy[:, None, None] + h + oy[None], ix[:, None, None] + h + ox[None]]
    dx = ix[:, None, None] + ox[None] - x[:, None, None]
    dy = iy[:, None, None] + oy[None] - y[:, None, None]
    r2 = dx * dx + dy * dy
    ring = (r2 >= core_px ** 2) & (r2 <= h * h)
    mean = (win * ring).sum(axis=(1, 2)) / np.maximum(ring.sum(axis=(1, 2)), 1)
    lever = dy if axis == "x" else dx
    moment = ((win - mean[:, None, None]) * lever * ring).sum(axis=(1, 2))
    sign = -np.sign(moment) if axis == "x" else np.sign(moment)
    return sign.astype(np.int8)


def find_cores(image, core_px: float, *, bragg=None, bragg_axis: str = "x",
               min_score: float = MIN_SCORE, optics_px: float | None = None,
               name: str = "image") -> Found:
    """Vortex cores of one density image (module docstring for the method).

    Parameters
    ----------
    image : 2D array of counts (column density), rows = y.
    core_px : expected rms width of a core's dip in the image (after expansion and optics).
    bragg : velocity-selective image of the same shape, or None (signs unknown, 0).
    bragg_axis : the velocity axis of ``bragg``, "x" (columns) or "y" (rows).
    min_score : least score of a detection.
    optics_px : rms width of the optics (PSF with the pixel's own averaging), or None (not
        known: no depth test, step 4c).
    name : what to call the image in errors (its file name).

    Returns
    -------
    Found

    Units: pixels; images in counts.
    """
    img = check_image(image, name)
    if not (isinstance(core_px, (int, float)) and math.isfinite(core_px) and core_px > 0):
        raise ImagingError(f"{name}: core width {core_px!r} pixels; accepted a width > 0")
    if bragg is not None:
        bragg = check_image(bragg, f"{name} (velocity image)") if np.any(bragg) else \
            np.asarray(bragg, dtype=float)
        if bragg.shape != img.shape:
            raise ImagingError(f"{name}: velocity image of shape {bragg.shape}, density image "
                               f"{img.shape}; accepted two images of the same shape")
    if bragg_axis not in ("x", "y"):
        raise ImagingError(f"bragg_axis = {bragg_axis!r}; accepted 'x' or 'y'")
    if optics_px is not None and not (math.isfinite(optics_px) and optics_px >= 0):
        raise ImagingError(f"{name}: optics width {optics_px!r} pixels; accepted a width >= 0 "
                           "(or none: no depth test)")
    env = envelope(img, core_px)
    boundary, mask = fluid_boundary(env)
    dep = np.where(env > DEPLETION_FLOOR * boundary.bulk, 1.0 - img / np.maximum(env, 1e-300), 0.0)
    smooth = ndimage.gaussian_filter(dep, MATCHED * core_px, mode="constant")
    level = float(np.median(smooth[mask]))
    noise = pixel_noise(dep, mask) / (2.0 * math.sqrt(math.pi) * MATCHED * core_px)
    score_map = (smooth - level) / max(noise, 1e-12)
    size = 2 * math.ceil(core_px) + 1
    peaks = (smooth == ndimage.maximum_filter(smooth, size, mode="constant")) \
        & (env > CANDIDATE_FLOOR * boundary.bulk) \
        & (score_map > min_score) & (smooth - level > MIN_DEPTH)
    iy, ix = np.nonzero(peaks)
    score = score_map[iy, ix]
    if ix.size == 0:
        empty = np.zeros(0)
        return Found(empty, empty.copy(), np.zeros(0, np.int8), empty.copy(), empty.copy(),
                     empty.copy(), np.zeros(0, bool), boundary)
    # sub-pixel start: a parabola through the smoothed depletion's three-point neighbourhood
    sp = np.pad(smooth, 1, mode="edge")
    cx = sp[iy + 1, ix + 1]
    ddx = sp[iy + 1, ix + 2] - 2 * cx + sp[iy + 1, ix]
    ddy = sp[iy + 2, ix + 1] - 2 * cx + sp[iy, ix + 1]
    sx = np.where(ddx < 0, -0.5 * (sp[iy + 1, ix + 2] - sp[iy + 1, ix]) / np.where(ddx < 0, ddx, -1), 0)
    sy = np.where(ddy < 0, -0.5 * (sp[iy + 2, ix + 1] - sp[iy, ix + 1]) / np.where(ddy < 0, ddy, -1), 0)
    x0, y0 = ix + np.clip(sx, -0.5, 0.5), iy + np.clip(sy, -0.5, 0.5)
    inside = env > DEPLETION_FLOOR * boundary.bulk
    p, ok = _fit_dips(np.where(inside, img / np.maximum(env, 1e-300), 0.0), inside, x0, y0,
                      core_px)
    x = np.where(ok, p[:, 1], x0)
    y = np.where(ok, p[:, 2], y0)
    if ok.any():
        # step 4b: the envelope again, from the image with the fitted dips divided out (no
        # closing: the closing's fill level next to the wall is what pulled the fits), and the
        # dips fitted again from where they were found, each with the others divided out
        clean = img / _dip_model(img.shape, p[ok, 1], p[ok, 2], p[ok, 0], p[ok, 3])
        env = np.where(inside, profile_envelope(clean, env, core_px, boundary.bulk), env)
        p2, ok2 = _fit_dips(np.where(inside, img / np.maximum(env, 1e-300), 0.0), inside, x, y,
                            core_px, dips=(np.where(ok, p[:, 0], 0.0),
                                           np.where(ok, p[:, 3], core_px)))
        # a refit is kept only near the candidate's own pixel (as the first fit's test) and on
        # the image
        reach = 0.5 * max(2, math.ceil(FIT_HALF_WIDTH * core_px))
        ok2 &= ((np.abs(p2[:, 1] - x0) < reach) & (np.abs(p2[:, 2] - y0) < reach)
                & (p2[:, 1] >= 0) & (p2[:, 1] <= img.shape[1] - 1)
                & (p2[:, 2] >= 0) & (p2[:, 2] <= img.shape[0] - 1))
        p = np.where(ok2[:, None], p2, p)
        ok = ok | ok2
        x = np.where(ok2, p2[:, 1], x)
        y = np.where(ok2, p2[:, 2], y)
    depth = np.where(ok, p[:, 0], smooth[iy, ix])
    width = np.where(ok, p[:, 3], core_px)
    if optics_px is not None:
        # step 4c: a vortex core is a zero of the field, so its dip is as deep as the optics
        # let it be; sound and density ripples make shallower ones (and dips that cannot be
        # fitted show no depth at all)
        keep = ok & (depth >= CORE_DEPTH_SHARE * max(0.0, 1.0 - (optics_px / core_px) ** 2))
        x, y, score, depth, width, ok = (v[keep] for v in (x, y, score, depth, width, ok))
    sign = (np.zeros(x.size, np.int8) if bragg is None
            else _signs(bragg, env, x, y, bragg_axis, core_px))
    return Found(x=x, y=y, sign=sign, score=score, depth=depth, width=width, fitted=ok,
                 boundary=boundary)
