"""Tests of thermo.data.degrade: imaging degradation of simulated vortex configurations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from thermo.data.degrade import DegradeError, ImagingModel, degrade, degrade_many
from thermo.domains.box import Box
from thermo.domains.disk import Disk


def test_zero_model_is_exactly_the_identity(rng):
    disk = Disk()
    configs = [(disk.sample_uniform(rng, n), rng.choice([-1, 1], size=n).astype(np.int8))
               for n in (0, 1, 7, 20)]
    state = rng.bit_generator.state
    out = degrade_many(configs, disk, ImagingModel(), rng)
    assert rng.bit_generator.state == state          # no random numbers drawn
    for (p0, s0), (p1, s1) in zip(configs, out):
        np.testing.assert_array_equal(p1, p0)
        np.testing.assert_array_equal(s1, s0)
        assert s1.dtype == s0.dtype
        assert p1 is not p0                            # a copy, the input is never changed


def test_opposite_pair_below_resolution_is_lost_like_pair_merged(rng):
    disk = Disk()
    pos = np.array([[0.0, 0.0], [0.02, 0.0],           # +- pair, 0.02 apart: lost
                    [0.5, 0.0], [0.5, 0.03],           # ++ pair, 0.03 apart: merged
                    [-0.5, 0.0]])                      # alone: kept
    signs = np.array([1, -1, 1, 1, -1])
    p, s = degrade(pos, signs, disk, ImagingModel(resolution=0.05), rng)
    order = np.argsort(p[:, 0])
    np.testing.assert_allclose(p[order], [[-0.5, 0.0], [0.5, 0.015]], atol=1e-15)
    np.testing.assert_array_equal(s[order], [-1, 1])


def test_resolution_rule_leaves_no_close_pair(rng):
    """After the rule no two recorded vortices are closer than the resolution."""
    disk = Disk()
    for _ in range(20):
        pos = 0.3 * disk.sample_uniform(rng, 30)
        signs = rng.choice([-1, 1], size=30)
        p, s = degrade(pos, signs, disk, ImagingModel(resolution=0.08), rng)
        if len(s) >= 2:
            d = np.linalg.norm(p[:, None] - p[None], axis=-1)[np.triu_indices(len(s), 1)]
            assert d.min() >= 0.08
        # [exact] a lost pair removes one vortex of each sign and a merge one of its sign,
        # so neither species can grow; merges keep the sign, so a one-sign gas stays so
        assert np.sum(s > 0) <= np.sum(signs > 0) and np.sum(s < 0) <= np.sum(signs < 0)
    p, s = degrade(0.2 * disk.sample_uniform(rng, 30), np.ones(30, dtype=np.int64), disk,
                   ImagingModel(resolution=0.08), rng)
    assert 1 <= len(s) < 30 and np.all(s == 1)


def test_edge_loss_uses_distance_to_wall(rng):
    pos = np.array([[0.0, 0.0], [0.93, 0.0], [0.0, -0.89]])
    p, s = degrade(pos, [1, 1, -1], Disk(), ImagingModel(edge_loss=0.1), rng)
    np.testing.assert_array_equal(p, [[0.0, 0.0], [0.0, -0.89]])
    box = Box(2.0)   # [-1, 1] x [-1/2, 1/2]
    p, _ = degrade([[0.95, 0.0], [0.0, 0.45], [0.5, 0.3]], [1, -1, 1], box,
                   ImagingModel(edge_loss=0.1), rng)
    np.testing.assert_array_equal(p, [[0.5, 0.3]])


def test_blur_has_the_stated_standard_deviation(rng):
    """Displacements of vortices far from the wall are N(0, blur^2) per coordinate.

    Check [exact]: sum of squares of 2n independent N(0, sigma^2) variables / sigma^2 is
    chi-square with 2n degrees of freedom; accept inside its central 99.9% range.
    """
    sigma = 0.01
    pos = 0.5 * Disk().sample_uniform(rng, 2000)
    p, s = degrade(pos, np.ones(2000, dtype=np.int64), Disk(), ImagingModel(blur=sigma), rng)
    disp = (p - pos).ravel()
    stat = np.sum(disp ** 2) / sigma ** 2
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], df=disp.size)
    assert lo < stat < hi
    assert stats.kstest(disp / sigma, "norm").pvalue > 0.001


def test_blur_keeps_every_vortex_inside(rng):
    pos = np.array([[0.999, 0.0], [0.0, -0.9995]] * 50)
    p, s = degrade(pos, np.ones(100, dtype=np.int64), Disk(), ImagingModel(blur=0.01), rng)
    assert len(s) == 100 and Disk().contains(p).all()


def test_sign_flip_rate_is_binomial(rng):
    """Flips are Bernoulli(p): the count lies inside the two-sided 99.9% binomial range."""
    n, prob = 5000, 0.02
    signs = np.where(rng.random(n) < 0.5, 1, -1)
    pos = Disk().sample_uniform(rng, n)
    _, s = degrade(pos, signs, Disk(), ImagingModel(sign_flip=prob), rng)
    k = int(np.sum(s != signs))
    lo, hi = stats.binom.ppf([0.0005, 0.9995], n, prob)
    assert lo <= k <= hi


def test_bad_model_and_input_raise():
    with pytest.raises(DegradeError, match="sign_flip"):
        ImagingModel(sign_flip=1.5)
    with pytest.raises(DegradeError, match="blur"):
        ImagingModel(blur=-0.1)
    with pytest.raises(DegradeError, match=r"\+1 or -1"):
        degrade([[0, 0]], [0], Disk(), ImagingModel(blur=0.1), np.random.default_rng(0))
    m = ImagingModel.from_um(40.0, blur_um=0.5, resolution_um=2.0)
    assert m.blur == pytest.approx(0.0125) and m.resolution == pytest.approx(0.05)


def test_blur_with_core_keeps_a_valid_hard_core_configuration(rng):
    """thermo.energy.validate_configuration accepts every blurred configuration."""
    from thermo.energy import validate_configuration
    from thermo.sampler import run_tempering
    core = 0.02
    res = run_tempering(Disk(), 8, 8, [0.5, 0.0, -0.2], n_sweeps=200, core_radius=core,
                        rng=rng, burn_in=100, thin=20)
    configs = [(p, res.signs) for p in res.positions[-1]]
    out = degrade_many(configs, Disk(), ImagingModel(blur=0.02), rng, core_radius=core)
    for p, s in out:
        validate_configuration(p, s, Disk(), core)
