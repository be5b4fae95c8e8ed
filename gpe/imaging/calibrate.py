"""A detection model measured on simulation: the finder against the run's own vortices.

:func:`calibrate` takes the finder's detections in rendered images of simulated frames and the
true vortices of those frames (phase-winding detection of the run, in the images' pixel
coordinates), matches them one to one (gpe.analysis.tracking.match_points: optimal
assignment, links up to ``match_px`` long) and measures

* the **detection efficiency** against the distance to the wall (the fluid boundary the finder
  reports) and against the distance to the nearest other vortex (pair separation), each in
  bins with its binomial standard error; the separation curve also split by the sign of that
  nearest vortex (like or opposite), since imaging treats the two kinds of close pair
  differently (a like pair's dips merge into one, an opposite pair's flows cancel);
* the **position error** (rms per coordinate of the matched pairs);
* the **false positives** per image (detections matched to no true vortex);
* the **sign-error rate** among matched detections with a known sign.

:meth:`DetectionModel.imaging_um` turns these into the four numbers of the thermometry's
imaging model (thermo.data.degrade.ImagingModel, the ``[imaging]`` table of a geometry TOML):
``edge_loss_um`` and ``resolution_um`` are where the efficiency against wall distance and
against separation first reaches 1/2 (linear interpolation between bin centres; 0 when
every bin is at 1/2 or more), ``blur_um`` the rms error, ``sign_error`` the rate. The step
functions of that model stand in for the measured curves; the curves themselves are kept in
the model file. False positives are measured and reported, not modelled by the thermometry.

Units: pixels in, micrometres in the model (``pixel_um`` converts).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from gpe.analysis.tracking import match_points
from gpe.imaging.finder import Found
from gpe.imaging.render import ImagingError
from gpe.run.jsontext import dumps_strict


@dataclass(frozen=True)
class DetectionModel:
    """Measured detection model (module docstring).

    Units: lengths in um; efficiencies and rates dimensionless; counts of vortices.
    """

    pixel_um: float
    wall_edges_um: tuple
    wall_efficiency: tuple
    wall_error: tuple
    wall_counts: tuple
    sep_edges_um: tuple
    sep_efficiency: tuple
    sep_error: tuple
    sep_counts: tuple
    like_sep_efficiency: tuple
    like_sep_counts: tuple
    opposite_sep_efficiency: tuple
    opposite_sep_counts: tuple
    blur_um: float
    sign_error: float
    false_per_image: float
    n_true: int
    n_matched: int
    n_images: int

    def imaging_um(self) -> dict:
        """The ``[imaging]`` table (thermo.data.geometry.IMAGING_KEYS) of this model. Units: um."""
        return {"blur_um": float(self.blur_um),
                "edge_loss_um": _half_crossing(self.wall_edges_um, self.wall_efficiency),
                "resolution_um": _half_crossing(self.sep_edges_um, self.sep_efficiency),
                "sign_error": float(min(self.sign_error, 0.49)
                                    if math.isfinite(self.sign_error) else 0.0)}

    def notes(self) -> list[str]:
        """What the step model of :meth:`imaging_um` cannot represent, in words (may be empty)."""
        out = []
        for name, eff in (("distance to the wall", self.wall_efficiency),
                          ("pair separation", self.sep_efficiency)):
            e = np.array([np.nan if v is None else v for v in eff], dtype=float)
            if np.isfinite(e).any() and np.nanmax(e) < 0.5:
                out.append(f"the efficiency stays below 1/2 at every {name} measured: the "
                           "imaging loses most vortices everywhere, which the thermometry's "
                           "imaging model (edge loss, resolution, blur, sign errors) cannot "
                           "represent; improve the resolution or the signal")
        if self.false_per_image >= 1.0:
            out.append(f"{self.false_per_image:.2f} false detections per image: the thermometry "
                       "does not model false positives; raise the least score")
        return out

    def write(self, path) -> Path:
        """Write the model as strict JSON (curves and the [imaging] numbers; NaN as null)."""
        path = Path(path)
        data = asdict(self)
        data["imaging_um"] = self.imaging_um()
        data["notes"] = self.notes()
        path.write_text(dumps_strict(data, indent=1) + "\n", encoding="utf-8")
        return path


def _half_crossing(edges, eff) -> float:
    """Smallest distance from which the efficiency stays >= 1/2, interpolated (0 if none below)."""
    centres = 0.5 * (np.asarray(edges[:-1]) + np.asarray(edges[1:]))
    e = np.array([np.nan if v is None else v for v in eff], dtype=float)
    ok = np.isfinite(e)
    centres, e = centres[ok], e[ok]
    below = np.nonzero(e < 0.5)[0]
    if below.size == 0:
        return 0.0
    i = int(below.max())
    if i + 1 >= e.size:
        return float(centres[-1])
    # between the last bin below 1/2 and the next one above
    f = (0.5 - e[i]) / (e[i + 1] - e[i])
    return float(centres[i] + f * (centres[i + 1] - centres[i]))


def _binned(values, hit, edges):
    idx = np.digitize(values, edges) - 1
    eff, err, cnt = [], [], []
    for b in range(len(edges) - 1):
        sel = idx == b
        n = int(sel.sum())
        cnt.append(n)
        if n == 0:
            eff.append(float("nan"))
            err.append(float("nan"))
            continue
        p = float(hit[sel].mean())
        eff.append(p)
        err.append(math.sqrt(max(p * (1 - p), 1.0 / n) / n))
    return tuple(eff), tuple(err), tuple(cnt)


def nearest_other(xy: np.ndarray, signs=None):
    """Distance from each point to the nearest other point of the same image (inf if alone);
    with ``signs``, also whether that nearest point has the same sign (False if alone)."""
    if len(xy) < 2:
        far = np.full(len(xy), np.inf)
        return far if signs is None else (far, np.zeros(len(xy), bool))
    d = np.hypot(xy[:, None, 0] - xy[None, :, 0], xy[:, None, 1] - xy[None, :, 1])
    np.fill_diagonal(d, np.inf)
    if signs is None:
        return d.min(axis=1)
    signs = np.asarray(signs)
    return d.min(axis=1), signs[d.argmin(axis=1)] == signs


def match_image(found: Found, true_xy: np.ndarray, match_px: float):
    """Indices (i_found, i_true) of matched detections and true vortices of one image."""
    return match_points(np.column_stack([found.x, found.y]), true_xy, match_px)


def calibrate(found: list[Found], truth: list[tuple[np.ndarray, np.ndarray]], pixel_um: float,
              *, match_px: float, wall_edges_um=None, sep_edges_um=None) -> DetectionModel:
    """Measure the detection model from detections and the true vortices (module docstring).

    Parameters
    ----------
    found : the finder's result per image.
    truth : per image, (positions (N, 2) in pixels (column, row), signs (N,)).
    pixel_um : pixel size.
    match_px : longest link of a detection to a true vortex.
    wall_edges_um, sep_edges_um : bin edges (default 0..8 um by 1 um, and 0..8 um by 1 um).

    Units: pixels in; um in the model.
    """
    if len(found) != len(truth) or not found:
        raise ImagingError(f"calibration needs detections and true vortices for the same images; "
                           f"got {len(found)} and {len(truth)} (accepted: one or more of each)")
    if not (math.isfinite(pixel_um) and pixel_um > 0):
        raise ImagingError(f"pixel_um = {pixel_um!r}; accepted a pixel size > 0 um")
    wall_edges = np.asarray(wall_edges_um if wall_edges_um is not None
                            else np.arange(0.0, 8.01, 1.0))
    sep_edges = np.asarray(sep_edges_um if sep_edges_um is not None
                           else np.arange(0.0, 8.01, 1.0))
    wall, sep, like, hit, err, sign_ok, sign_known = [], [], [], [], [], [], []
    false = 0
    for fd, (xy, sg) in zip(found, truth):
        xy = np.asarray(xy, dtype=float).reshape(-1, 2)
        sg = np.asarray(sg)
        i_f, i_t = match_image(fd, xy, match_px)
        h = np.zeros(len(xy), bool)
        h[i_t] = True
        cx, cy = fd.boundary.center_px
        wall.append((fd.boundary.radius_px - np.hypot(xy[:, 0] - cx, xy[:, 1] - cy)) * pixel_um)
        d_near, like_near = nearest_other(xy, sg)
        sep.append(d_near * pixel_um)
        like.append(like_near)
        hit.append(h)
        false += len(fd) - len(i_f)
        err.append(np.column_stack([fd.x[i_f] - xy[i_t, 0], fd.y[i_f] - xy[i_t, 1]]))
        known = fd.sign[i_f] != 0
        sign_known.append(known)
        sign_ok.append(fd.sign[i_f][known] == sg[i_t][known])
    wall_a, sep_a, hit_a = np.concatenate(wall), np.concatenate(sep), np.concatenate(hit)
    err_a = np.concatenate(err) * pixel_um
    n_known = int(np.concatenate(sign_known).sum()) if sign_known else 0
    sign_rate = (float(1.0 - np.concatenate(sign_ok).mean()) if n_known else float("nan"))
    w_eff, w_err, w_cnt = _binned(wall_a, hit_a, wall_edges)
    s_eff, s_err, s_cnt = _binned(sep_a, hit_a, sep_edges)
    like_a = np.concatenate(like)
    l_eff, _, l_cnt = _binned(sep_a[like_a], hit_a[like_a], sep_edges)
    o_eff, _, o_cnt = _binned(sep_a[~like_a], hit_a[~like_a], sep_edges)
    blur = float(np.sqrt(np.mean(err_a ** 2))) if len(err_a) else float("nan")
    return DetectionModel(
        pixel_um=float(pixel_um), wall_edges_um=tuple(map(float, wall_edges)),
        wall_efficiency=w_eff, wall_error=w_err, wall_counts=w_cnt,
        sep_edges_um=tuple(map(float, sep_edges)), sep_efficiency=s_eff, sep_error=s_err,
        sep_counts=s_cnt, like_sep_efficiency=l_eff, like_sep_counts=l_cnt,
        opposite_sep_efficiency=o_eff, opposite_sep_counts=o_cnt, blur_um=blur,
        sign_error=sign_rate,
        false_per_image=false / len(found), n_true=int(hit_a.size),
        n_matched=int(hit_a.sum()), n_images=len(found))
