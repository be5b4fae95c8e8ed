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


def test_annulus_converges_to_the_prime_function_annulus(tmp_path):
    # hole_winding 0: the numerical G = 0 on both circles is the Dirichlet Green's function,
    # which differs from the annulus's hydrodynamic one by ln|z| ln|a| / (2 pi ln(1/q))
    # [pub: Lin, PNAS 27, 575 (1941)]; compare the Dirichlet energies. Measured (table every
    # 4th node): 0.69 (40 nodes across) and 0.36 (80), staircase walls on both circles.
    q = 0.3
    ann = Annulus(q)
    rng = np.random.default_rng(6)
    conf = np.stack([ann.sample_uniform(rng, 6, margin=0.12) for _ in range(20)])
    r = np.log(np.hypot(conf[..., 0], conf[..., 1]))
    s = SIGNS.astype(float)
    pair_corr = 0.5 * (np.einsum("i,si->s", s, r) ** 2 - np.einsum("si->s", (s * r) ** 2))
    lin = 2.0 / np.log(1 / q) * (np.einsum("si->s", r ** 2) / 2 + pair_corr)
    ref = energy_batch(conf, SIGNS, ann) - lin
    errors = []
    for n in (40, 80):
        x, y, h = _grid(n)
        rr = x[None, :] ** 2 + y[:, None] ** 2
        mask = (rr < 1.0) & (rr > q * q)
        dom = GridDomain(mask, np.ones(mask.shape), h, (x[0], y[0]), stride=4, allow_holes=True,
                         cache_dir=tmp_path)
        errors.append(np.max(np.abs(energy_batch(conf, SIGNS, dom) - ref)))
    assert errors[0] < 0.8 and errors[1] < 0.7 * errors[0]


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
    with pytest.raises(DomainError, match=r"mask has a hole: 1 dry node\(s\) enclosed by fluid, "
                                          r"the first at \(row 3, column 4\)"):
        GridDomain(holed, one, 0.1, cache_dir=tmp_path)


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
