"""The detection model recovers known detection properties, and predicts a second render."""

import itertools

import numpy as np
import pytest

from gpe.analysis.tracking import match_points
from gpe.field.grid import Grid
from gpe.imaging.calibrate import calibrate
from gpe.imaging.finder import Boundary, Found, find_cores
from gpe.imaging.pipeline import expected_core_px
from gpe.imaging.render import Camera, ImagingError, render_frame
from gpe.setup.units import HealingUnits
from thermo.data.geometry import check_imaging
from vortex_fields import imprint, random_configuration

UNITS = HealingUnits(mass_kg=1.4431608971788639e-25, mu_J=2.761298e-31,
                     g2d_Jm2=6.018684450476965e-45)


def test_match_points_is_the_optimal_assignment(rng):
    """[exact] against brute force over all permutations: the fewest forbidden links, then the
    smallest total distance."""
    for _ in range(20):
        a, b = rng.uniform(0, 5, (4, 2)), rng.uniform(0, 5, (4, 2))
        ia, ib = match_points(a, b, 2.0)
        d = np.hypot(*(a[:, None] - b[None]).transpose(2, 0, 1))
        best = min(itertools.permutations(range(4)),
                   key=lambda p: (sum(d[i, p[i]] > 2 for i in range(4)),
                                  sum(d[i, p[i]] for i in range(4) if d[i, p[i]] <= 2)))
        want = {(i, best[i]) for i in range(4) if d[i, best[i]] <= 2}
        assert set(zip(ia.tolist(), ib.tolist())) == want


def _synthetic(rng, n_images=60, blur_px=0.3, wall_cut_px=4.0, flip=0.1, false=2):
    """Detections made by a known rule: true vortices uniform in a disk of radius 40 px, those
    within wall_cut_px of the wall missed, the others seen with a Gaussian error of blur_px per
    coordinate and their sign flipped with probability flip; ``false`` extra detections per image
    far outside the disk, where no vortex is."""
    found, truth = [], []
    boundary = Boundary(center_px=(50.0, 50.0), radius_px=40.0, bulk=1.0)
    for _ in range(n_images):
        r = 40 * np.sqrt(rng.uniform(0, 1, 8))
        phi = rng.uniform(0, 2 * np.pi, 8)
        xy = np.column_stack([50 + r * np.cos(phi), 50 + r * np.sin(phi)])
        s = rng.choice([-1, 1], 8)
        seen = 40 - r > wall_cut_px
        det = xy[seen] + rng.normal(0, blur_px, (int(seen.sum()), 2))
        sg = np.where(rng.random(int(seen.sum())) < flip, -s[seen], s[seen])
        extra = np.array([[200.0 + 10 * k, 200.0] for k in range(false)]).reshape(-1, 2)
        x = np.r_[det[:, 0], extra[:, 0]]
        y = np.r_[det[:, 1], extra[:, 1]]
        k = len(x)
        found.append(Found(x=x, y=y, sign=np.r_[sg, np.ones(false)].astype(np.int8),
                           score=np.ones(k), depth=np.ones(k), width=np.ones(k),
                           fitted=np.ones(k, bool), boundary=boundary))
        truth.append((xy, s))
    return found, truth


def test_calibration_recovers_the_rule_the_detections_were_made_with(rng):
    found, truth = _synthetic(rng)
    model = calibrate(found, truth, pixel_um=0.5, match_px=2.0)
    im = model.imaging_um()
    # 60 x 8 vortices, ~430 matched: the rms of ~860 Gaussian errors is within ~3% (1/sqrt(2n))
    assert im["blur_um"] == pytest.approx(0.3 * 0.5, rel=0.1)
    # [exact] a step at 4 px = 2 um: the efficiency is 0 below, 1 above, crossing 1/2 inside the
    # bin that holds the step (1 um bins: between the centres 1.5 and 2.5 um)
    assert 1.5 <= im["edge_loss_um"] <= 2.5
    assert model.wall_efficiency[0] == 0.0 and model.wall_efficiency[3] == 1.0
    # binomial: ~430 signs at p = 0.1 -> standard error 0.015
    assert im["sign_error"] == pytest.approx(0.1, abs=0.05)
    assert model.false_per_image == 2.0                          # [exact] as constructed
    check_imaging(im, "model")                                   # a valid [imaging] table
    assert any("false detections" in n for n in model.notes())    # 2 per image, not modelled
    lost = calibrate(*_synthetic(rng, wall_cut_px=60.0, false=0), pixel_um=0.5, match_px=2.0)
    assert any("below 1/2 at every distance to the wall" in n for n in lost.notes())


def test_calibration_needs_detections_and_truth_for_the_same_images():
    with pytest.raises(ImagingError, match="same images"):
        calibrate([], [], pixel_um=0.5, match_px=1.0)


def _render_set(seed, psf_um, n_fields=6):
    """Fields of 14 cores at random in a disk, 2 xi or more apart (many close pairs), rendered."""
    rng = np.random.default_rng(seed)
    grid = Grid(128, 128, 48.0, 48.0)
    d = 20.0 - np.hypot(grid.X, grid.Y)
    env = np.tanh(np.maximum(d, 0) / np.sqrt(2))
    camera = Camera(pixel_um=0.4, psf_um=psf_um, counts_per_n0=400.0, bragg_axis="x")
    core = expected_core_px(camera, UNITS)
    found, truth = [], []
    for _ in range(n_fields):
        pos, signs = random_configuration(rng, 14, 17.0, 2.0, radius=17.0)
        img = render_frame(env * imprint(grid.X, grid.Y, pos, signs), grid, UNITS, camera, rng)
        found.append(find_cores(img.density, core, bragg=img.bragg))
        tx, ty = img.to_pixels(pos[:, 0], pos[:, 1])
        truth.append((np.column_stack([tx, ty]), signs))
    return calibrate(found, truth, 0.4, match_px=max(1.0, core))


def _pooled(models, sel):
    """Efficiency over the separation bins ``sel`` of several models (counts-weighted)."""
    hits = sum(np.nansum(np.array(m.sep_efficiency)[sel] * np.array(m.sep_counts)[sel])
               for m in models)
    return hits / sum(np.array(m.sep_counts)[sel].sum() for m in models)


def test_efficiency_falls_with_resolution_and_a_second_render_agrees_with_the_calibration():
    """Two independent sets (configurations and noise) at each PSF: the overall efficiency of
    the second lies within 3 binomial standard errors of the first (the calibration predicts
    it); the efficiency falls as the PSF widens, and at 0.5 um the closest pairs (nearest
    neighbour 1-2 um) are found less often than the others."""
    overall = []
    for psf in (0.3, 0.5, 0.8):
        a, b = _render_set(1, psf), _render_set(2, psf)
        pa, pb = a.n_matched / a.n_true, b.n_matched / b.n_true
        se = np.sqrt(max(pa * (1 - pa), 1 / a.n_true) / a.n_true
                     + max(pb * (1 - pb), 1 / b.n_true) / b.n_true)
        assert abs(pa - pb) < 3 * se, (psf, pa, pb)
        overall.append((a.n_matched + b.n_matched) / (a.n_true + b.n_true))
        if psf == 0.5:
            close, rest = _pooled([a, b], slice(1, 2)), _pooled([a, b], slice(2, None))
            assert close < rest - 0.2, (close, rest)
    assert overall[0] > overall[1] > overall[2]
    assert overall[0] - overall[2] > 0.3


def test_close_pairs_are_measured_apart_by_the_sign_of_the_neighbour():
    """Detections by a known rule: pairs 2.4 px (1.2 um) apart, like-sign pairs both seen,
    opposite-sign pairs both missed, isolated vortices seen. [exact, as constructed] The pair
    separation's like-sign curve is 1 and its opposite-sign curve 0 in the 1-2 um bin, the
    pooled curve 1/2 there, and every count adds up."""
    boundary = Boundary(center_px=(50.0, 50.0), radius_px=45.0, bulk=1.0)
    found, truth = [], []
    for k in range(10):
        xy, sg, seen = [], [], []
        for j, (cx, cy) in enumerate([(30, 30), (70, 30), (30, 70), (70, 70)]):
            a = 0.3 * k + j
            off = 1.2 * np.array([np.cos(a), np.sin(a)])
            s2 = 1 if j % 2 == 0 else -1              # pairs 0, 2 like; 1, 3 opposite
            xy += [np.array([cx, cy]) + off, np.array([cx, cy]) - off]
            sg += [1, s2]
            seen += [s2 == 1, s2 == 1]
        xy += [np.array([50.0, 50.0])]
        sg += [-1]
        seen += [True]
        xy, sg, seen = np.array(xy), np.array(sg), np.array(seen)
        det = xy[seen]
        found.append(Found(x=det[:, 0], y=det[:, 1], sign=sg[seen].astype(np.int8),
                           score=np.ones(len(det)), depth=np.ones(len(det)),
                           width=np.ones(len(det)), fitted=np.ones(len(det), bool),
                           boundary=boundary))
        truth.append((xy, sg))
    model = calibrate(found, truth, pixel_um=0.5, match_px=1.0)
    assert model.like_sep_efficiency[1] == 1.0 and model.like_sep_counts[1] == 40
    assert model.opposite_sep_efficiency[1] == 0.0 and model.opposite_sep_counts[1] == 40
    assert model.sep_efficiency[1] == 0.5
    assert sum(model.like_sep_counts) + sum(model.opposite_sep_counts) == model.n_true - 10
