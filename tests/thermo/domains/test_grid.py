"""Tests of thermo.domains.grid: the numerical Green's function against the analytic domains."""

import warnings

import numpy as np
import pytest

from thermo.domains.annulus import Annulus
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.domains.grid import GreenCacheWarning, GridDomain
from thermo.dos.build import DosSettings
from thermo.energy import energy, energy_batch, energy_change
from thermo.errors import DomainError
from thermo.estimate import estimate_ensemble
from thermo.sampler import run_tempering

SIGNS = np.array([1, 1, 1, -1, -1, -1])


def _grid(n, half_x=1.0, half_y=1.0):
    """Nodes across [-half, half] with two dry rows beyond, spacing 2 half_y / n."""
    h = 2.0 * half_y / n
    x = np.arange(-half_x - 2 * h, half_x + 2.5 * h, h)
    y = np.arange(-half_y - 2 * h, half_y + 2.5 * h, h)
    return x, y, h


def _max_error(reference, inside, n, tmp_path, margin=0.15, stride=2, **grid):
    rng = np.random.default_rng(5)
    conf = np.stack([reference.sample_uniform(rng, 6, margin=margin) for _ in range(20)])
    x, y, h = _grid(n, **grid)
    mask = inside(x[None, :], y[:, None])
    dom = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=stride,
                     cache_dir=tmp_path)
    return np.max(np.abs(energy_batch(conf, SIGNS, dom) - energy_batch(conf, SIGNS, reference)))


def test_uniform_disk_converges_to_the_analytic_disk(tmp_path):
    # Disk Kirchhoff-Routh energy [pub: Lin, PNAS 27, 570 (1941)]; the staircase wall makes
    # the scheme first order in h [common practice], so doubling the grid must about halve the
    # error. Measured (table every 4th node; the staircase, not the table, dominates: stride 2
    # gives 0.38 and 0.23): 0.385 (40 nodes across) and 0.213 (80) on energies of mean size 5.5.
    coarse = _max_error(Disk(), lambda x, y: x * x + y * y < 1.0, 40, tmp_path, stride=4)
    fine = _max_error(Disk(), lambda x, y: x * x + y * y < 1.0, 80, tmp_path, stride=4)
    assert coarse < 0.45 and fine < 0.7 * coarse


def test_rectangle_converges_to_the_theta_function_box(tmp_path):
    # Box Green's function from theta functions [method: Crowdy, Solved Problems in Vortex
    # Dynamics (2020)]; for a rectangle aligned with the grid the wall sits on the dry nodes
    # exactly, so the error is that of the interpolation (second order) [common practice].
    # Measured (table every 3rd node): 0.080 (24 nodes along y) and 0.016 (48).
    box = Box(1.5)
    inside = lambda x, y: (np.abs(x) < 0.75 - 1e-9) & (np.abs(y) < 0.5 - 1e-9)
    kw = {"margin": 0.12, "stride": 3, "half_x": 0.75, "half_y": 0.5}
    coarse = _max_error(box, inside, 24, tmp_path, **kw)
    fine = _max_error(box, inside, 48, tmp_path, **kw)
    assert coarse < 0.1 and fine < 0.35 * coarse


def _grid_annulus(q, n, tmp_path, windings):
    x, y, h = _grid(n)
    rr = x[None, :] ** 2 + y[:, None] ** 2
    mask = (rr < 1.0) & (rr > q * q)
    return GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=4,
                      hole_windings=windings, cache_dir=tmp_path)


@pytest.mark.parametrize("winding", [0, 2])
def test_annulus_converges_to_the_prime_function_annulus(winding, tmp_path):
    # The grid's hole carries a fixed circulation (Lin's Green's function at fixed
    # circulations, G_D + omega omega' / P, and each vortex's energy in the hole's flow
    # [pub: Lin, PNAS 27, 575 (1941)]); the annulus domain is the analytic one (prime
    # function [method: Crowdy, Solved Problems in Vortex Dynamics (2020)]), so the energies
    # of random configurations must agree, the error shrinking with the grid (first order at
    # the staircase walls [common practice]). Measured (table every 4th node), 40 and 80
    # nodes across: 0.67 / 0.35 at zero winding, 0.76 / 0.36 with two quanta, on energies of
    # mean size 6.8.
    q = 0.3
    ann = Annulus(q, hole_winding=winding)
    rng = np.random.default_rng(6)
    conf = np.stack([ann.sample_uniform(rng, 6, margin=0.12) for _ in range(20)])
    ref = energy_batch(conf, SIGNS, ann)
    errors = [np.max(np.abs(energy_batch(conf, SIGNS, _grid_annulus(q, n, tmp_path, [winding]))
                            - ref)) for n in (40, 80)]
    assert errors[0] < 0.9 and errors[1] < 0.7 * errors[0]


def test_hole_capacity_and_harmonic_measure_of_the_annulus(tmp_path):
    # For q < |z| < 1: omega = ln|z| / ln q and P = 2 pi / ln(1/q) [exact, potential theory of
    # the annulus]; the five-point solution on a staircase is first order in the spacing
    # [common practice]. Measured: P low by 4.3% (80 nodes across) and 2.0% (160); omega
    # within 0.022 and 0.012 at radii 0.4-0.9.
    q = 0.3
    r = np.linspace(0.4, 0.9, 6)
    pts = np.stack([r * np.cos(0.7 * np.arange(6)), r * np.sin(0.7 * np.arange(6))], axis=-1)
    exact_p, exact_om = 2 * np.pi / np.log(1 / q), np.log(r) / np.log(q)
    errs = []
    for n in (80, 160):
        dom = _grid_annulus(q, n, tmp_path, [0])
        assert dom.capacity.shape == (1, 1) and dom.hole_circulation == (0,)
        errs.append((abs(dom.capacity[0, 0] / exact_p - 1),
                     np.max(np.abs(dom.harmonic_measure(pts)[0] - exact_om))))
    assert errs[0][0] < 0.06 and errs[1][0] < 0.6 * errs[0][0]
    assert errs[0][1] < 0.03 and errs[1][1] < 0.7 * errs[0][1]


def test_two_holes_take_their_windings_in_raster_order(tmp_path):
    # two holes of equal size placed symmetrically: the capacity matrix is symmetric with
    # equal diagonal [exact, by symmetry], positive definite with negative off-diagonal
    # (potential theory [pub: Lin, PNAS 27, 575 (1941)]); a vortex's energy in the holes'
    # flow changes sign with the windings, and windings (1, 0) and (0, 1) are mirror images
    # [exact, by the mirror symmetry x -> -x of the mask].
    h = 2.2 / 60
    x = y = (np.arange(64) - 31.5) * h          # symmetric nodes: the mask is exactly mirrored
    rr = x[None, :] ** 2 + y[:, None] ** 2
    hole = lambda cx: (x[None, :] - cx) ** 2 + y[:, None] ** 2 < 0.2 ** 2
    mask = (rr < 1.0) & ~hole(-0.45) & ~hole(0.45)
    d10 = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=4,
                     hole_windings=(1, 0), cache_dir=tmp_path)
    d01 = d10.at_hole_circulation((0, 1))
    p = d10.capacity
    assert np.allclose(p, p.T) and abs(p[0, 0] / p[1, 1] - 1) < 1e-6 and p[0, 1] < 0
    assert np.all(np.linalg.eigvalsh(p) > 0)
    pos, mirror = np.array([[-0.2, 0.3]]), np.array([[0.2, 0.3]])
    e10 = energy(pos, [1], d10) - energy(pos, [-1], d10)
    e01 = energy(mirror, [1], d01) - energy(mirror, [-1], d01)
    assert abs(e10) > 0.1 and abs(e10 - e01) < 1e-6 * abs(e10)
    # a domain at other windings shares the table; it is the one built at them [exact]
    fresh = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=4,
                       hole_windings=(0, 1), cache_dir=tmp_path)
    assert d10.at_hole_circulation((1, 0)) is d10 and d01.key() == fresh.key() != d10.key()
    assert energy(mirror, [1], d01) == energy(mirror, [1], fresh)
    with pytest.raises(DomainError, match=r"hole_windings = \(1,\): the mask has 2 hole"):
        GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=4, hole_windings=(1,),
                   cache_dir=tmp_path)
    with pytest.raises(DomainError, match="not modelled"):
        d10.gradient_kernels()
    # the gas's inner boundaries: points within the cut of hole 1 (left, first row by row
    # among equal rows: raster order), of hole 2, and of neither (holes of radius 0.2, so
    # 0.05 and 0.25 from their edges, against a cut of 0.15 and nodes 0.037 apart)
    pts = np.array([[-0.45, 0.25], [0.45, -0.25], [0.0, 0.6], [-0.45, 0.45]])
    assert list(d10.hole_region(pts, 0.15)) == [1, 2, 0, 0]


def test_bad_inputs_are_refused_by_name(tmp_path):
    ok = np.zeros((8, 8), bool)
    ok[2:6, 2:6] = True
    one = np.ones((8, 8))
    with pytest.raises(DomainError, match="no fluid"):
        GridDomain(np.zeros((8, 8), bool), one, 0.1, cache_dir=tmp_path)
    edge = ok.copy()
    edge[0, 3] = True
    with pytest.raises(DomainError, match="touches the grid edge"):
        GridDomain(edge, one, 0.1, cache_dir=tmp_path)
    bad = one.copy()
    bad[3, 3] = -0.5
    with pytest.raises(DomainError, match=r"density at node \(row 3, column 3\)"):
        GridDomain(ok, bad, 0.1, log_length_over_core=3.0, cache_dir=tmp_path)
    bad[3, 3] = np.nan
    with pytest.raises(DomainError, match="density"):
        GridDomain(ok, bad, 0.1, log_length_over_core=3.0, cache_dir=tmp_path)
    with pytest.raises(DomainError, match="shape"):
        GridDomain(ok, np.ones((8, 9)), 0.1, cache_dir=tmp_path)
    with pytest.raises(DomainError, match="log_length_over_core"):
        GridDomain(ok, 0.5 * one, 0.1, cache_dir=tmp_path)
    holed = ok.copy()
    holed[3, 4] = False      # one dry node inside the fluid: a hole, whose circulation is lost
    with pytest.raises(DomainError, match=r"mask has a hole: 1 dry node\(s\) enclosed by "
                                          r"fluid, the first at \(row 3, column 4\).*give "
                                          r"hole_windings"):
        GridDomain(holed, one, 0.1, cache_dir=tmp_path)
    with pytest.raises(DomainError, match="whole number"):
        GridDomain(holed, one, 0.1, cache_dir=tmp_path, hole_windings=[0.5])


def test_cache_reuses_and_rebuilds_a_damaged_table(tmp_path):
    # The key follows the digest; a damaged file is named in a warning and rebuilt.
    x, y, h = _grid(20)
    mask = x[None, :] ** 2 + y[:, None] ** 2 < 1.0
    a = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), cache_dir=tmp_path)
    files = list(tmp_path.glob("green_*.npz"))
    assert len(files) == 1 and a.key()[1] in files[0].name
    files[0].write_bytes(b"not a table")
    with pytest.warns(GreenCacheWarning, match=files[0].name):
        b = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), cache_dir=tmp_path)
    np.testing.assert_array_equal(a.kernels().params, b.kernels().params)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), cache_dir=tmp_path)
    other = GridDomain(mask, np.where(mask, 0.8, 0.0), h, (x[0], y[0]),
                       log_length_over_core=3.0, cache_dir=tmp_path)
    assert other.key() != a.key()


def thomas_fermi_domain(n=40, cut=0.05, tmp_path=None):
    """Harmonic trap, nu = 1 - r^2 / R^2 (length unit R), fluid where nu > ``cut``.

    Cutting at nu = 0.05 moves the wall by 2.5 % of R; with nu ~ 2 (R - r)/R near the edge a
    flux F through the cut layer changes G by F int nu dr ~ F R cut^2 / 4 there, so setting
    G = 0 at the cut instead of at R changes G by ~6e-4 of its scale; and the Thomas-Fermi
    profile itself fails within the edge layer, where nu ~ 0.1 for R = 50 healing lengths
    (Dalfovo, Pitaevskii & Stringari, PRA 54, 4213 (1996), from memory)."""
    x, y, h = _grid(n)
    nu = 1.0 - x[None, :] ** 2 - y[:, None] ** 2
    return GridDomain(nu > cut, np.where(nu > cut, nu, 0.0), h, (x[0], y[0]),
                      log_length_over_core=np.log(50.0), cache_dir=tmp_path)


@pytest.mark.slow
@pytest.mark.parametrize("beta", [-0.4, 0.5])
def test_beta_recovered_in_a_harmonic_trap(beta, tmp_path):
    """STYLE.md: estimators are tested on data drawn at a known parameter. Eight ensembles of
    shots drawn by the sampler at beta in the Thomas-Fermi domain (seeds 1-8, one density of
    states for all): their 95% intervals hold beta in at least 6 of 8 [binomial: a calibrated
    interval fails this with probability 0.6%], and the sign is right in at least 7."""
    dom = thomas_fermi_domain(tmp_path=tmp_path)
    core = 0.03
    covered = right_sign = 0
    for seed in range(1, 9):
        run = run_tempering(dom, 2, 2, [beta], 60 * 30, core, np.random.default_rng(seed),
                            thin=30)
        configs = [(p, run.signs) for p in run.positions[0]]
        res = estimate_ensemble(configs, dom, core, cache_dir=tmp_path, seed=0,
                                settings=DosSettings(n_temps=10, n_sweeps=1500, n_boot=20))
        covered += res.beta_ci95[0] <= beta <= res.beta_ci95[1]
        right_sign += res.temperature_sign == ("negative" if beta < 0 else "positive")
    assert covered >= 6, covered
    assert right_sign >= 7, right_sign


@pytest.mark.parametrize("harmonic", [False, True])
def test_move_kernel_is_the_energy_difference(harmonic, tmp_path):
    # [exact] the move kernel (its uniform-density branch multiplies the logarithms together)
    # must equal E(after) - E(before) of the whole configuration.
    if harmonic:
        dom = thomas_fermi_domain(n=24, tmp_path=tmp_path)
    else:
        x, y, h = _grid(24)
        mask = x[None, :] ** 2 + y[:, None] ** 2 < 1.0
        dom = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), cache_dir=tmp_path)
    rng = np.random.default_rng(8)
    pts = dom.sample_uniform(rng, 12, margin=0.15)
    conf, new = pts[:6], pts[6:]
    for k in range(6):
        moved = conf.copy()
        moved[k] = new[k]
        ref = energy(moved, SIGNS, dom) - energy(conf, SIGNS, dom)
        assert energy_change(conf, SIGNS, dom, k, new[k]) == pytest.approx(ref, rel=1e-10, abs=1e-10)
