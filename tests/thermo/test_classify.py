"""Tests of thermo.classify: labels on hand-made configurations, exact beta = 0 moments.

The beta = 0 ensemble is drawn here directly (uniform in the unit disk, r = sqrt(U)),
independently of the project's sampler, so the exact values test classify alone.
"""

import numpy as np
import pytest

from thermo import classify as cl


def _uniform_disk(rng, shape):
    """Uniform points in the unit disk: r = sqrt(U) gives the area measure."""
    r = np.sqrt(rng.random(shape))
    th = 2 * np.pi * rng.random(shape)
    return np.stack([r * np.cos(th), r * np.sin(th)], axis=-1)


class _UnitDisk:
    """Minimal stand-in with the contract's sample_uniform(rng, n) (test helper)."""

    def sample_uniform(self, rng, n):
        return _uniform_disk(rng, (n,))


def _mean_within(x, exact, n_se=4.0):
    """Sample mean within n_se standard errors of the exact value (4 SE: p ~ 6e-5)."""
    se = x.std(ddof=1) / np.sqrt(x.size)
    assert abs(x.mean() - exact) < n_se * se, (x.mean(), exact, se)


def test_isolated_dipole_cluster_of_three_and_free_vortex():
    pos = np.array([[0.10, 0.00], [0.12, 0.00],                   # dipole
                    [-0.50, 0.50], [-0.45, 0.50], [-0.50, 0.45],  # + cluster of three
                    [0.50, -0.50]])                               # lone - vortex
    signs = np.array([1, -1, 1, 1, 1, -1])
    c = cl.classify(pos, signs)
    assert c.labels.tolist() == [cl.DIPOLE, cl.DIPOLE, cl.CLUSTER, cl.CLUSTER,
                                 cl.CLUSTER, cl.FREE]
    assert c.dipole_partner.tolist() == [1, 0, -1, -1, -1, -1]
    assert c.n_clusters == 1 and c.cluster_id.tolist() == [-1, -1, 0, 0, 0, -1]
    assert (c.dipole_fraction, c.cluster_fraction, c.free_fraction) == (2 / 6, 3 / 6, 1 / 6)
    # the batched labels agree with the single-configuration ones
    assert cl.classify_batch(pos[None], signs)[0].tolist() == c.labels.tolist()


def test_like_sign_pair_split_by_closer_opposite_vortex():
    # A, B (+) are 0.30 apart; the dipole member C (-) is 0.283 from B, so by the rule
    # (opposite-sign distances include dipole members) A and B are not joined.
    pos = np.array([[0.0, 0.0], [0.3, 0.0], [0.5, 0.2], [0.52, 0.2]])
    signs = np.array([1, 1, -1, 1])
    c = cl.classify(pos, signs)
    assert c.labels.tolist() == [cl.FREE, cl.FREE, cl.DIPOLE, cl.DIPOLE]
    # moving A within 0.25 of B joins them into a cluster
    pos[0] = [0.05, 0.0]
    assert cl.classify(pos, signs).labels.tolist()[:2] == [cl.CLUSTER, cl.CLUSTER]


def test_two_separate_clusters_get_separate_ids():
    pos = np.array([[-0.6, 0.0], [-0.55, 0.0], [0.6, 0.0], [0.55, 0.0],
                    [0.0, 0.6], [0.0, -0.6]])
    signs = np.array([1, 1, -1, -1, 1, -1])
    c = cl.classify(pos, signs)
    assert c.n_clusters == 2
    assert c.cluster_id[0] == c.cluster_id[1] != c.cluster_id[2] == c.cluster_id[3]


def test_single_species_gas_is_one_cluster():
    rng = np.random.default_rng(3)
    pos = _uniform_disk(rng, (7,))
    c = cl.classify(pos, np.ones(7, dtype=int))
    assert c.n_clusters == 1 and c.cluster_fraction == 1.0


def test_beta_zero_exact_moments_neutral(rng):
    """Uniform i.i.d. positions (beta = 0), neutral gas of N = 10.

    [exact] <D^2> = sum_i <|u_i|^2>/N^2 = 1/(2N) since <|u|^2> = 1/2 in the unit disk;
    <C1> = -1/(N-1): the nearest neighbour is a uniformly random other vortex, and
    sum_{j != i} s_i s_j = -1 when Q = 0; M = sum s_i |u_i|^2 with |u|^2 ~ U(0,1),
    so <M> = 0 and Var M = N/12 (reference-values.md, point-vortex section).
    """
    n, n_conf = 10, 20000
    signs = np.array([1, -1] * (n // 2))
    obs = cl.structure_observables(_uniform_disk(rng, (n_conf, n)), signs)
    _mean_within(obs["dipole_moment"] ** 2, 1 / (2 * n))
    _mean_within(obs["c1"], -1 / (n - 1))
    m = obs["angular_impulse"]
    _mean_within(m, 0.0)
    # variance of the sample variance for a sum of uniforms: SE(s^2) ~ s^2 sqrt(2/(n-1))
    # would hold for a Gaussian; use the fourth moment instead (distribution-free).
    var_se = np.sqrt((np.mean((m - m.mean()) ** 4) - m.var() ** 2) / n_conf)
    assert abs(m.var(ddof=1) - n / 12) < 4 * var_se
    fr = obs["dipole_fraction"] + obs["cluster_fraction"] + obs["free_fraction"]
    np.testing.assert_allclose(fr, 1.0)


def test_beta_zero_dipole_moment_single_species(rng):
    """[exact] <D^2> = 1/(2N) holds for any signs (only |s_i| = 1 enters)."""
    n = 6
    obs = cl.structure_observables(_uniform_disk(rng, (20000, n)), np.ones(n, dtype=int))
    _mean_within(obs["dipole_moment"] ** 2, 1 / (2 * n))
    _mean_within(obs["angular_impulse"], n / 2)   # [exact] <|u|^2> = 1/2 per vortex


def test_mean_nn_distance_matches_direct_computation(rng):
    pos = _uniform_disk(rng, (5, 8))
    signs = np.array([1, -1, 1, -1, 1, 1, -1, -1])
    obs = cl.structure_observables(pos, signs)
    d = np.linalg.norm(pos[:, :, None] - pos[:, None, :], axis=-1)
    d[:, np.arange(8), np.arange(8)] = np.inf
    np.testing.assert_allclose(obs["mean_nn_distance"], d.min(axis=2).mean(axis=1))


def test_pair_correlation_is_one_for_uniform_positions(rng):
    """An ideal gas has g(r) = 1 at every r, including near the wall (by construction
    of the reference, which is sampled in the same domain)."""
    n = 10
    signs = np.array([1, -1] * 5)
    pc = cl.pair_correlation(_uniform_disk(rng, (4000, n)), signs, _UnitDisk(),
                             bins=12, rng=rng, n_reference=400_000)
    ok = np.isfinite(pc.g_like)
    # bin-wise error: pair counts (Poisson) and the finite reference sample combined
    ref_rel = np.sqrt(1.0 / np.maximum(1, 400_000 * np.diff(pc.r_edges) / pc.r_edges[-1]))
    for g, e in ((pc.g_like, pc.g_like_err), (pc.g_opposite, pc.g_opposite_err)):
        tol = 5 * np.hypot(e, g * ref_rel)
        big = ok & (e < 0.05)
        assert big.sum() >= 8
        assert np.all(np.abs(g[big] - 1) < tol[big]), (g, tol)


def test_dipole_pairs_show_in_g_opposite_at_short_range(rng):
    """Tight dipoles scattered uniformly: g_{+-} peaks at short r, g_{++} does not."""
    centres = _uniform_disk(rng, (2000, 4)) * 0.9
    pos = np.concatenate([centres, centres + [0.02, 0.0]], axis=1)
    signs = np.array([1, 1, 1, 1, -1, -1, -1, -1])
    pc = cl.pair_correlation(pos, signs, _UnitDisk(), bins=40, r_max=2.0, rng=rng)
    assert pc.g_opposite[0] > 10 and pc.g_like[0] < 2


@pytest.mark.parametrize("bad", [
    (np.array([[0.0, np.nan], [0.1, 0.1]]), np.array([1, -1])),
    (np.zeros((3, 3)), np.array([1, -1, 1])),
    (np.zeros((2, 2)), np.array([1, 2])),
    (np.zeros((2, 2)), np.array([1, -1, 1])),
])
def test_bad_input_raises_package_error(bad):
    from thermo.classify import ConfigurationError
    with pytest.raises(ConfigurationError):
        cl.classify(*bad)
