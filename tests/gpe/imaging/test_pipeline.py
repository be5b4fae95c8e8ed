"""Run file -> images -> finder -> measured table, against the run's own vortices."""

import dataclasses
import math
import warnings

import numpy as np
import pytest

from gpe.imaging.calibrate import match_image
from gpe.imaging.files import read_images
from gpe.imaging.pipeline import (
    calibrate_stack,
    expected_core_px,
    find_all,
    find_stack,
    render_run,
    stack_truth,
)
from gpe.imaging.render import Camera, ImagingError
from gpe.run.runfile import RunFile
from gpe.setup.units import HealingUnits
from imprint_run import simulate_imprint_run
from thermo.data.measured import read_measured

GOOD = Camera(pixel_um=0.4, psf_um=0.3, counts_per_n0=400.0, bragg_axis="x")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """16 vortices imprinted out to 18.5 xi of a 20 xi disk, relaxed and moving (1-2 s)."""
    folder = tmp_path_factory.mktemp("imaging")
    return simulate_imprint_run(folder, n=16, placement_radius=18.5, min_sep=3.5,
                                duration=10.0)


@pytest.fixture(scope="module")
def stack(run):
    path = run.with_name("good_images.h5")
    render_run(run, path, GOOD, seed=1)
    return read_images(path)


def test_the_finder_finds_the_runs_vortices_away_from_the_wall_within_half_a_pixel(run, stack):
    """The run's phase-winding vortices are the truth (the zeros of the field, checked to
    0.06 xi by Fourier interpolation of the stored field). At 0.4 um pixels and a 0.3 um PSF,
    pooled over three renders (independent shot noise): of the vortices further than 2 xi from
    the trap wall at least 95% are found within 0.5 pixel, with fewer than 1 false detection per
    image (thresholds: the issue's, common practice for a finder at good resolution); every
    sign right. In the band 2-3 xi from the wall, where a core sits on the cloud's steep edge,
    at least 85% (a threshold of this test, from the measurement below).

    Measured with the edge-profile envelope and the neighbours divided out in the refit:
    267/270 beyond 2 xi and 48/51 in the band (before: 257/270 and 38/51, which fails the
    band). Not every run does as well (docs/imaging.md): over four runs and three renders each,
    94.7% beyond 2 xi pooled; one run with pairs 1.4-2.9 xi apart and strong sound gives 85-88%."""
    stacks = [stack]
    for seed in (2, 3):
        path = run.with_name(f"good_images_{seed}.h5")
        render_run(run, path, GOOD, seed=seed)
        stacks.append(read_images(path))
    with RunFile.open(run) as r:
        xi_um = HealingUnits.from_dict(r.units()).length_m * 1e6
    wall_d, err, signs_ok = [], [], []
    false = images = 0
    for st in stacks:
        found = find_all(st)
        images += len(found)
        for fd, (xy, sg) in zip(found, stack_truth(st)):
            i_f, i_t = match_image(fd, xy, st.core_px)
            x_um = (xy[:, 0] + 0.5) * GOOD.pixel_um + st.attrs["x0_um"]
            y_um = (xy[:, 1] + 0.5) * GOOD.pixel_um + st.attrs["y0_um"]
            wall_d.append(20.0 - np.hypot(x_um, y_um) / xi_um)
            e = np.full(len(xy), np.inf)
            e[i_t] = np.hypot(fd.x[i_f] - xy[i_t, 0], fd.y[i_f] - xy[i_t, 1])
            err.append(e)
            signs_ok.append(fd.sign[i_f] == sg[i_t])
            false += len(fd) - len(i_f)
    wall_d, err = np.concatenate(wall_d), np.concatenate(err)
    far4, far3, far2 = wall_d > 4.0, wall_d > 3.0, wall_d > 2.0
    band = far2 & ~far3
    assert far4.sum() >= 120 and band.sum() >= 30   # both bands are populated
    assert np.mean(err[far2] < 0.5) >= 0.95
    assert np.mean(err[band] < 0.5) >= 0.85
    assert false / images < 1.0
    assert np.concatenate(signs_ok).all()


def test_the_table_reads_as_a_measured_table_with_the_runs_geometry(run, stack, tmp_path):
    """The CSV and its TOML are what thermo.data.measured reads: one shot per frame, positions in
    the disk, the radius within 2% of the run's point-vortex domain (R - 1 xi wall layer, the
    half-density contour of a hard wall is 1.25 xi inside it) and the centre the trap's."""
    model = calibrate_stack(stack)
    csv, toml = find_stack(stack, tmp_path / "t.csv", model=model)
    with warnings.catch_warnings():
        warnings.simplefilter("error")                       # no row left out
        table = read_measured(csv)
    with RunFile.open(run) as r:
        xi_um = HealingUnits.from_dict(r.units()).length_m * 1e6
    assert table.geometry.radius_um == pytest.approx(19.0 * xi_um, rel=0.02)
    assert len(table.shots) == len(stack)
    n_true = np.bincount(stack.truth["image"], minlength=len(stack))
    assert abs(table.n_vortices.sum() - n_true.sum()) <= 0.1 * n_true.sum()
    im = table.geometry.imaging_model()
    assert im is not None and im.blur == pytest.approx(
        model.blur_um / table.geometry.length_scale_um)
    cx, cy = (-stack.attrs["x0_um"] / GOOD.pixel_um - 0.5, -stack.attrs["y0_um"] / GOOD.pixel_um - 0.5)
    assert tuple(table.geometry.imaging_um) and "center_px" in toml.read_text()
    centre = [float(v) for v in toml.read_text().split("center_px = [")[1].split("]")[0].split(",")]
    assert centre == pytest.approx([cx, cy], abs=0.3)


def test_the_fluid_pixels_can_be_the_tables_domain(stack, tmp_path):
    """boundary="mask": the fluid pixels become the table's grid domain (its own Green's
    function, thermo.data.cloud_image). For the run's disk-shaped cloud [exact geometry] the mask
    has the area of the equal-area disk that boundary="disk" writes (to a pixel's staircase) and
    the positions are scaled by its farthest fluid pixel, about that radius."""
    csv_d, _ = find_stack(stack, tmp_path / "d.csv")
    csv_m, toml = find_stack(stack, tmp_path / "m.csv", boundary="mask")
    assert 'mask_file = "m_fluid.png"' in toml.read_text()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        disk, grid = read_measured(csv_d), read_measured(csv_m)
    assert grid.domain.kind == "grid" and len(grid.shots) == len(disk.shots)
    r_um = disk.geometry.radius_um
    assert grid.domain.area * grid.length_scale_um ** 2 == pytest.approx(math.pi * r_um ** 2,
                                                                         rel=0.03)
    assert grid.length_scale_um == pytest.approx(r_um, rel=0.05)
    assert sum(len(c[1]) for c in grid.configurations) == pytest.approx(
        sum(len(c[1]) for c in disk.configurations), abs=3)
    with pytest.raises(ImagingError, match="boundary = 'hexagon'"):
        find_stack(stack, tmp_path / "x.csv", boundary="hexagon")


def test_every_position_lies_on_the_image_after_an_expansion_to_its_edge(run, tmp_path):
    """After 0.5 ms of flight the cloud fills the field of view: a dip at the edge must not be
    refitted off the image (it once was, and the sign step then read outside the array)."""
    path = tmp_path / "tof.h5"
    render_run(run, path, Camera(pixel_um=0.5, psf_um=0.5, tof_ms=0.5, counts_per_n0=400.0,
                                 bragg_axis="x"), seed=1)
    tof = read_images(path)
    ny, nx = tof.density.shape[1:]
    for fd in find_all(tof):
        assert np.all((fd.x >= 0) & (fd.x <= nx - 1) & (fd.y >= 0) & (fd.y <= ny - 1))
        assert np.all(np.abs(fd.sign) == 1)


def test_unknown_signs_are_written_empty_and_reported_by_the_reader(run, tmp_path):
    path = tmp_path / "nosign.h5"
    render_run(run, path, Camera(pixel_um=0.4, psf_um=0.3, counts_per_n0=400.0), frames=[0, 1],
               seed=2)
    csv, _ = find_stack(read_images(path), tmp_path / "n.csv")
    with pytest.warns(UserWarning, match="missing sign"):
        table = read_measured(csv)
    assert table.n_vortices.sum() == 0 and len(table.problems) > 10


def test_expected_core_width_follows_the_free_expansion_of_a_gaussian():
    """[exact] sigma(t)^2 = sigma0^2 + (hbar t / m sigma0)^2 with sigma0 = 1 xi, plus the PSF in
    quadrature; 1 ms is 1/0.38191 hbar/mu for these units."""
    units = HealingUnits(mass_kg=1.4431608971788639e-25, mu_J=2.761298e-31,
                         g2d_Jm2=6.018684450476965e-45)
    um = units.length_m * 1e6
    cam = Camera(pixel_um=0.5, psf_um=0.4, tof_ms=1.0)
    t = 1e-3 / units.time_s
    assert expected_core_px(cam, units) == pytest.approx(
        math.sqrt(1 + t ** 2 + (0.4 / um) ** 2) * um / 0.5, rel=1e-12)


def test_bad_requests_are_refused(run, stack, tmp_path):
    with pytest.raises(ImagingError, match="picture format"):
        render_run(run, tmp_path / "a.h5", GOOD, picture_format="jpeg")
    with pytest.raises(ImagingError, match="no frames chosen"):
        render_run(run, tmp_path / "a.h5", GOOD, frames=[])
    with pytest.raises(ImagingError, match="no 'truth' table"):
        calibrate_stack(dataclasses.replace(stack, truth=None))


def _round_trip(run, tmp_path, stem: str):
    """Run -> images (GOOD camera) -> finder -> table with the detection model measured on the
    same stack -> temperature. Returns the run's own ensemble, the table's ensemble and the
    table's combined interval: its 95% statistical interval widened, in quadrature, by the
    imaging systematic (the shift of beta~N between the table fitted through its measured
    imaging model and fitted as if imaging were perfect)."""
    from gpe.run.thermometry import temperature_of_run, temperature_of_table

    images = tmp_path / f"{stem}_images.h5"
    render_run(run, images, GOOD, seed=1)
    stack = read_images(images)
    model = calibrate_stack(stack)
    csv, _ = find_stack(stack, tmp_path / f"{stem}.csv", model=model)
    own = temperature_of_run(run, per_frame=False, systematics=False)["ensemble"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")              # the reader's notes on left-out rows
        measured = temperature_of_table(csv, systematics=False)["ensemble"]
        perfect = temperature_of_table(csv, systematics=False,
                                       imaging_um={k: 0.0 for k in model.imaging_um()}
                                       )["ensemble"]
    b = measured["beta_n"]
    lo, hi = measured["beta_n_ci95"]
    shift = abs(b - perfect["beta_n"])
    low = -math.inf if not math.isfinite(lo) else b - math.hypot(b - lo, shift)
    high = math.inf if not math.isfinite(hi) else b + math.hypot(hi - b, shift)
    print(f"run beta~N {own['beta_n']:.3f}; table {b:.3f}, combined [{low:.3f}, {high:.3f}]")
    return own, measured, (low, high), len(stack)


@pytest.mark.slow
def test_round_trip_run_images_table_temperature_gives_the_runs_own_beta(tmp_path):
    """Simulated run (8 vortices, 6 frames: the thermometry through an imaging model builds its
    densities of states at standard effort, ~4 s per vortex-number group) -> rendered images ->
    finder -> measured table -> temperature (_round_trip). The run's own beta~N
    (gpe.run.thermometry on its phase-winding vortices) lies inside the table's combined
    interval."""
    run = simulate_imprint_run(tmp_path, n=8, placement_radius=16.0, min_sep=4.0,
                               duration=10.0)
    own, measured, (low, high), n_images = _round_trip(run, tmp_path, "rt")
    assert measured["n_shots"] == n_images
    # the finder's table holds the run's 4 + 4 in most shots (a false pair may add a group)
    groups = {(g["n_plus"], g["n_minus"]): g["shots"] for g in measured["groups"]}
    assert groups.get((4, 4), 0) >= n_images - 1
    assert low <= own["beta_n"] <= high


@pytest.mark.slow
def test_round_trip_of_two_like_sign_clusters_keeps_the_runs_negative_beta(tmp_path):
    """The regime that matters for negative temperatures: 6 + 6 vortices imprinted as two
    like-sign clusters (Gaussian spread 2.8 xi about (-8, 0) and (8, 0) xi, at least 3 xi
    apart), relaxed and moving for 20 hbar/mu (11 frames), then _round_trip. The run's own
    beta~N is negative and lies inside the table's combined interval; the table's is negative
    too. Measured on three such configurations (imprint seeds 4, 5, 6; this test is seed 4):
    run -3.71 / table -3.85 (-4.43 .. -3.32); run -3.88 / table a bound < -3.74; run -4.03 /
    table -4.05 (-4.58 .. -3.57), every one inside. Before the finder's depth test and
    edge-profile refit seed 5 fell outside (a bound < -4.26 against -3.88), with 1.2 false
    detections per image against 0.09-0.36 now; seed 4 was inside then too (-3.87)."""
    from gpe.run.simulate import simulate
    from gpe.setup.protocol import parse_protocol
    from imprint_run import imprinted_disk_text

    rng = np.random.default_rng(4)
    pos, signs = [], []
    for cx, s in ((-8.0, 1), (8.0, -1)):
        k = 0
        while k < 6:
            p = np.array([cx, 0.0]) + rng.normal(0.0, 2.8, 2)
            if np.hypot(*p) < 16.0 and all(np.hypot(*(p - q)) > 3.0 for q in pos):
                pos.append(p)
                signs.append(s)
                k += 1
    text = imprinted_disk_text(pos, signs, name="clusters", duration=20.0, output_interval=2.0)
    run = simulate(parse_protocol(text, source=str(tmp_path / "clusters.toml")),
                   tmp_path / "clusters.h5")
    own, measured, (low, high), n_images = _round_trip(run, tmp_path, "clusters")
    assert measured["n_shots"] == n_images
    assert own["beta_n"] < 0 and measured["beta_n"] < 0
    assert low <= own["beta_n"] <= high
