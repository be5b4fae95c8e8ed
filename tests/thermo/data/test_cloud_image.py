"""Measured tables whose domain is the cloud's own image: a fluid mask or a density image."""

import math

import numpy as np
import pytest
from PIL import Image

from thermo.data.geometry import resolve_geometry
from thermo.data.measured import read_measured
from thermo.domains.annulus import Annulus
from thermo.domains.disk import Disk
from thermo.dynamics.velocity import velocities
from thermo.energy import energy_batch
from thermo.errors import MeasuredTableError

N_PX = 241                    # image side; the centre pixel is (120, 120)
CENTRE = 120.0
RADIUS_PX = 100.0
PIXEL_UM = 0.5
SIGNS = np.array([1, 1, 1, -1, -1, -1])


def _radius2():
    c = np.arange(N_PX) - CENTRE
    return c[None, :] ** 2 + c[:, None] ** 2


def _table(folder, geometry_text, rows="shot,x,y,sign\n"):
    csv = folder / "cloud.csv"
    csv.write_text(rows)
    csv.with_suffix(".toml").write_text(geometry_text)
    return csv


def _mask_geometry(folder):
    img = np.where(_radius2() <= RADIUS_PX ** 2, 255, 0).astype(np.uint8)
    Image.fromarray(img).save(folder / "mask.png")
    return ('mask_file = "mask.png"\nimage_pixel_um = 0.5\nimage_center_px = [120.0, 120.0]\n'
            "core_um = 0.3\n")


def _density_geometry(folder, core_um=0.8):
    np.save(folder / "density.npy", np.clip(1.0 - _radius2() / RADIUS_PX ** 2, 0.0, None) * 800.0)
    return (f'density_file = "density.npy"\nimage_pixel_um = 0.5\n'
            f"image_center_px = [120.0, 120.0]\ncore_um = {core_um}\n")


def test_a_mask_image_of_a_disk_gives_the_disks_energies(tmp_path):
    """[pub] Kirchhoff-Routh energy of the disk, Lin, PNAS 27, 570 (1941). The mask's domain has
    its length unit L at the farthest fluid pixel (100.5 px) and drops ln(L/a) per vortex where
    the disk of radius R = 100 px drops ln(R/a), so E_grid = E_disk + N ln(R/L) [exact]; the rest
    is the grid's staircase (80 nodes across: measured 0.18; tests/thermo/domains/test_grid.py)."""
    geometry, _ = resolve_geometry(_table(tmp_path, _mask_geometry(tmp_path)))
    assert geometry.shape == "grid" and geometry.image_kind == "mask"
    dom, scale = geometry.domain(), geometry.length_scale_um
    assert dom.kind == "grid" and scale == pytest.approx(100.5 * PIXEL_UM)
    assert dom.area * scale ** 2 == pytest.approx(math.pi * (RADIUS_PX * PIXEL_UM) ** 2, rel=0.01)
    rng = np.random.default_rng(3)
    conf = np.stack([Disk().sample_uniform(rng, 6, margin=0.15) for _ in range(20)])
    r_over_l = RADIUS_PX / 100.5
    e_grid = energy_batch(conf * r_over_l, SIGNS, dom)
    e_disk = energy_batch(conf, SIGNS, Disk()) + 6 * math.log(r_over_l)
    assert np.max(np.abs(e_grid - e_disk)) < 0.3


def test_a_density_image_of_a_thomas_fermi_cloud_gives_fetter_svidzinsky_precession(tmp_path):
    """[pub] Fetter & Svidzinsky, J. Phys.: Condens. Matter 13, R135 (2001): in a Thomas-Fermi
    cloud a vortex at r0 precesses at Omega proportional to 1/(1 - r0^2/R^2) (ln(R/xi) prefactor
    uncertain at order one, so the ratio to the centre's rate is tested, to 5% out to 0.3 R, as
    for a harmonic trap's domain in tests/gpe/run/test_thermometry.py; falling slowly further
    out). Omega is thermo.dynamics' angular velocity, -(dE_self/dr) / (2 r nu(r)); here
    L = sqrt(0.95) R (the fluid ends at 5% of the peak density)."""
    geometry, _ = resolve_geometry(_table(tmp_path, _density_geometry(tmp_path)))
    dom = geometry.domain()
    assert geometry.image_kind == "density"
    assert dom.area == pytest.approx(math.pi, rel=0.03)       # the unit disk of radius L
    big_r = 1.0 / math.sqrt(0.95)                             # R in units of L

    def omega(u):                  # u = r0 / R: the point-vortex dynamics' angular velocity
        return velocities([[u * big_r, 0.0]], [1], dom)[0, 1] / (u * big_r)

    base = omega(0.1) * (1.0 - 0.01)
    law = [omega(u) * (1.0 - u * u) / base for u in (0.2, 0.3, 0.4)]
    assert law[0] == pytest.approx(1.0, abs=0.05) and law[1] == pytest.approx(1.0, abs=0.05)
    assert law[0] > law[1] > law[2] > 0.9


def test_a_table_over_a_density_image_reads_in_that_domain(tmp_path):
    rows = "shot,x,y,sign\n0,10.0,0.0,1\n0,-10.0,5.0,-1\n1,0.0,-20.0,1\n1,3.0,3.0,-1\n"
    table = read_measured(_table(tmp_path, _density_geometry(tmp_path), rows))
    assert table.domain.kind == "grid" and len(table.shots) == 2
    scale = math.sqrt(0.95) * RADIUS_PX * PIXEL_UM
    assert table.length_scale_um == pytest.approx(scale, rel=0.01)
    pos, signs = table.configurations[0]
    np.testing.assert_allclose(pos, [[10.0 / table.length_scale_um, 0.0],
                                     [-10.0 / table.length_scale_um, 5.0 / table.length_scale_um]])
    assert list(signs) == [1, -1]


def test_a_ring_mask_image_gives_the_annulus_at_the_tables_hole_winding(tmp_path):
    """A mask of the ring 30 < r < 100 px with hole_winding = 2 is the annulus of q = 0.3 at
    two quanta (thermo.domains.annulus: prime function [method: Crowdy, Solved Problems in
    Vortex Dynamics (2020)], the hole's flow [pub: Lin, PNAS 27, 575 (1941)]): energies agree
    to the grid's staircase (measured 0.38 at 80 nodes across, energies of mean size 8.7) after
    the same N ln(R/L) shift as the disk above [exact]; a winding count that does not match the
    holes is refused."""
    img = np.where((_radius2() <= RADIUS_PX ** 2) & (_radius2() >= 30.0 ** 2), 255, 0)
    Image.fromarray(img.astype(np.uint8)).save(tmp_path / "ring.png")
    text = ('mask_file = "ring.png"\nimage_pixel_um = 0.5\nimage_center_px = [120.0, 120.0]\n'
            "core_um = 0.3\n")
    geometry, _ = resolve_geometry(_table(tmp_path, text + "hole_winding = 2\n"))
    dom = geometry.domain()
    assert dom.hole_circulation == (2,)
    ann = Annulus(0.3, hole_winding=2)
    rng = np.random.default_rng(4)
    conf = np.stack([ann.sample_uniform(rng, 6, margin=0.15) for _ in range(20)])
    r_over_l = RADIUS_PX / 100.5
    e_grid = energy_batch(conf * r_over_l, SIGNS, dom)
    e_ann = energy_batch(conf, SIGNS, ann) + 6 * math.log(r_over_l)
    assert np.max(np.abs(e_grid - e_ann)) < 0.6
    with pytest.raises(MeasuredTableError, match=r"ring.png \(mask_file\): hole_winding = "
                                                 r"\(1, 2\) but the fluid has 1 hole"):
        resolve_geometry(_table(tmp_path, text + "hole_winding = [1, 2]\n"))[0].domain()
    plain, _ = resolve_geometry(_table(tmp_path, text))
    assert plain.domain().hole_circulation == (0,)


def test_bad_cloud_images_are_refused_by_name(tmp_path):
    def refused(text, match):
        with pytest.raises(MeasuredTableError, match=match):
            resolve_geometry(_table(tmp_path, text))[0].domain()

    refused('mask_file = "nowhere.png"\nimage_pixel_um = 0.5\nimage_center_px = [1, 1]\n',
            r"mask_file = '.*nowhere.png': no such file")
    np.save(tmp_path / "neg.npy", np.full((20, 20), -1.0))
    refused('density_file = "neg.npy"\nimage_pixel_um = 0.5\nimage_center_px = [1, 1]\n'
            "core_um = 0.5\n", r"neg.npy \(density_file\): negative value -1")
    np.save(tmp_path / "flat.npy", np.ones((20, 20)))
    refused('density_file = "flat.npy"\nimage_pixel_um = 0.5\nimage_center_px = [1, 1]\n'
            "core_um = 0.5\n", r"flat.npy \(density_file\): every pixel is 1")
    edge = np.zeros((30, 30))
    edge[5:25, 0:20] = 1.0
    np.save(tmp_path / "edge.npy", edge)
    refused('mask_file = "edge.npy"\nimage_pixel_um = 0.5\nimage_center_px = [10, 15]\n',
            r"edge.npy \(mask_file\): the fluid touches the edge of the image")
    refused(_density_geometry(tmp_path).replace("core_um = 0.8\n", ""),
            r"density.npy \(density_file\): a density image needs core_um")
    refused('mask_file = "mask.png"\ndensity_file = "density.npy"\n',
            "give mask_file or density_file, not both")
    refused('density_file = "density.npy"\ncore_um = 0.8\n',
            "an image geometry needs the image's pixel size and trap centre")
    refused('shape = "disk"\nradius_um = 40.0\nmask_file = "mask.png"\n',
            r"shape = 'grid' is a cloud image.*got shape 'disk'")
    (tmp_path / "bad.png").write_bytes(b"not an image")
    refused('mask_file = "bad.png"\nimage_pixel_um = 0.5\nimage_center_px = [1, 1]\n',
            r"bad.png \(mask_file\): cannot be read")
