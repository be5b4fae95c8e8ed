"""Tests of thermo.dos.model: MBAR pooling, canonical reweighting, ln g(E), beta(E).

The disk cache is tested in test_dos_cache.py, the tabulated curves in test_dos_tables.py.
"""

import numpy as np
import pytest
from dos_samples import one_vortex_dos as _one_vortex_dos
from dos_samples import small_gas_dos


@pytest.fixture(scope="module")
def one_vortex_dos():
    return _one_vortex_dos(seed=11, n_boot=30)


def test_one_vortex_mean_energy_between_ladder_points(one_vortex_dos):
    """[exact] <E> = -1/(1 - beta~) (reference-values.md, one vortex), at betas between
    the ladder's rungs, both signs; |error| < 4 bootstrap SE (+ a 1% floor for the SE's
    own uncertainty from 30 replicates)."""
    beta = np.array([-2.77, -1.1, -0.05, 0.31, 0.66])
    mean, err = one_vortex_dos.mean_energy(beta)
    exact = -1.0 / (1.0 - beta)
    assert np.all(np.abs(mean - exact) < 4 * err + 0.01 * np.abs(exact)), (mean, exact, err)
    var, verr = one_vortex_dos.energy_variance(beta)
    assert np.all(np.abs(var - exact ** 2) < 4 * verr + 0.02 * exact ** 2)


def test_one_vortex_log_dos_and_micro_beta(one_vortex_dos):
    """[exact] g(E) = e^E for one vortex, so ln g(E) = E and dS/dE = 1 everywhere."""
    edges, ln_g, err = one_vortex_dos.log_dos(25)
    centres = 0.5 * (edges[1:] + edges[:-1])
    # the bin average of e^E over [a, b] is (e^b - e^a)/(b - a)
    exact = np.log(np.diff(np.exp(edges)) / np.diff(edges))
    good = np.isfinite(ln_g) & (err < 0.3)
    # the sparse low-energy tail has large errors; the bootstrap with time blocks shared by
    # all rungs (thermo/dos/model.py) states them honestly, so a few more bins fall out
    assert good.sum() >= 8
    assert np.all(np.abs(ln_g[good] - exact[good]) < 4 * err[good] + 0.02), centres
    lo, hi = one_vortex_dos.energy_range()
    e = np.linspace(lo, hi, 7)[1:-1]
    beta, berr = one_vortex_dos.beta_micro(e)
    assert np.all(np.abs(beta - 1.0) < 4 * berr + 0.02), (beta, berr)
    assert np.all(np.isnan(one_vortex_dos.beta_micro([lo - 5.0, hi + 1.0])[0]))


def test_log_z_is_exact_for_one_vortex(one_vortex_dos):
    """[exact] Z(beta)/Z(0) = 1/(1 - beta) for one vortex."""
    beta = np.array([-2.5, -0.7, 0.4])
    lz = one_vortex_dos.log_z(beta)
    spread = one_vortex_dos.log_z_replicates(beta).std(axis=0, ddof=1)
    assert np.all(np.abs(lz + np.log1p(-beta)) < 4 * spread + 0.01)


def test_outside_ladder_and_unknown_observable_raise(one_vortex_dos):
    from thermo.errors import SamplerError
    with pytest.raises(SamplerError, match="outside the sampled ladder"):
        one_vortex_dos.mean_energy(2.0)
    with pytest.raises(SamplerError, match="unknown observable"):
        one_vortex_dos.canonical(0.0, "no_such_thing")


# ------------------------------------------------------------------ with the real sampler
@pytest.fixture(scope="module")
def small_gas():
    """2+2 neutral gas in the unit disk, core 0.01, modest effort (tests/dos_samples.py)."""
    return small_gas_dos()


def test_reweighted_mean_energy_matches_direct_sampling_off_ladder(small_gas):
    """MBAR-reweighted <E>(beta) vs a direct single-temperature Metropolis run at betas
    between the rungs (both signs); |difference| < 4 combined standard errors, the direct
    error from the integrated autocorrelation time (Sokal's windowing, common practice)."""
    from thermo.domains.disk import Disk
    from thermo.sampler import run_tempering
    d = small_gas
    ladder = np.sort(d.betas)
    for near in (-0.5, 0.4):
        # halfway between the two rungs around `near` (the build spaces its ladder itself)
        k = np.searchsorted(ladder, near)
        beta = 0.5 * (ladder[k - 1] + ladder[k])
        assert np.min(np.abs(ladder - beta)) > 0.01
        run = run_tempering(Disk(), 2, 2, [beta], 6000, 0.01, np.random.default_rng(7))
        e = run.energies[0]
        se_direct = e.std(ddof=1) * np.sqrt(2 * run.tau_int[0] / e.size)
        mean, err = d.mean_energy(beta)
        assert abs(mean[0] - e.mean()) < 4 * np.hypot(err[0], se_direct), \
            (beta, mean, err, e.mean(), se_direct)


def test_beta_zero_mean_energy_is_exact_for_neutral_gas(small_gas):
    """[exact] beta = 0 with the hard core: positions uniform in |u| < 1 - a.

    Self term: <ln(1 - r^2)> = (-1 - (x0 ln x0 - x0)) / (1 - a)^2 with x0 = 2a - a^2
    (substitute x = 1 - r^2). Pair term: <ln|1 - u1 conj(u2)|> = 0 (mean-value property),
    <ln|u1 - u2|> = -1/4 + ln(1 - a) (scaling of the a = 0 value, reference-values.md).
    The 2a pair exclusion changes this by O(a^2 ln a) ~ 1e-3, inside the tolerance.
    For a = 0 this is <E> = -N + (Q^2 - N)/4 of reference-values.md.
    """
    d = small_gas
    a, n, q = 0.01, 4, 0
    x0 = 2 * a - a * a
    self_term = (-1 - (x0 * np.log(x0) - x0)) / (1 - a) ** 2
    pair_term = -2 * (-0.25 + np.log(1 - a))
    exact = n * self_term + (q * q - n) / 2 * pair_term
    mean, err = d.mean_energy(0.0)
    assert abs(mean[0] - exact) < 4 * err[0] + 0.005, (mean, err, exact)


def test_structure_observables_reweight(small_gas):
    """[exact] <C1>(beta = 0) = -1/(N-1) = -1/3 (reference-values.md); the hard core keeps
    the i.i.d. symmetry that the derivation uses, so it holds with the core too."""
    d = small_gas
    res = d.canonical_many([0.0], ["c1", "dipole_moment"])
    c1, c1_err = res["c1"]
    assert abs(c1[0] + 1 / 3) < 4 * c1_err[0] + 0.01


def test_one_vortex_saddle_point_micro_beta_is_exact(one_vortex_dos):
    """[exact] one vortex: p_beta(E) ~ exp((1 - beta) E) on E < 0, so kappa2 = (1 - beta)^-2,
    kappa3 = -2 (1 - beta)^-3 and the cumulant correction -kappa3/(2 kappa2^2) = 1 - beta_c:
    beta_c - kappa3/(2 kappa2^2) = 1 = dS/dE (g(E) = e^E) exactly, at every energy."""
    lo, hi = one_vortex_dos.energy_range()
    e = np.linspace(lo, hi, 9)[1:-1]
    beta, berr = one_vortex_dos.beta_micro(e, method="saddle")
    assert np.all(np.abs(beta - 1.0) < 4 * berr + 0.01), (beta, berr)
    with pytest.raises(Exception, match="accepted"):
        one_vortex_dos.beta_micro(e, method="nope")


def test_saddle_point_micro_beta_agrees_with_kernel_estimate(small_gas):
    """The saddle-point dS/dE (cumulant expansion, thermo.dos.tables) and the direct kernel
    estimate of d ln g/dE (no expansion) agree for the 2+2 gas within 4 bootstrap SE of
    their difference (paired: both from the same replicate), plus 0.02/N per vortex for the
    O(1/N^2) remainder of the expansion. The kernel estimate is exact for a Gaussian
    tilted density, the expansion for an exponential one; they differ in method only."""
    d = small_gas
    lo, hi = d.energy_range()
    e = np.linspace(lo, hi, 12)[1:-1]
    grid = np.linspace(*d.beta_range, 161)
    diff, diff_err = d._with_errors(lambda ld, c: d._beta_saddle(e, ld, c, grid)
                                    - d._beta_micro(e, ld, c, grid))
    ok = np.isfinite(diff) & np.isfinite(diff_err)
    assert ok.sum() >= 8
    assert np.all(np.abs(diff[ok]) < 4 * diff_err[ok] + 0.02 / 4), (e, diff, diff_err)
    # and the saddle-point error is smaller than the kernel one (why it is the default)
    _, s_err = d.beta_micro(e, method="saddle")
    _, k_err = d.beta_micro(e, method="kernel")
    assert np.nanmedian(s_err / k_err) < 1.0
