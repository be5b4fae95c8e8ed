"""Tests of thermo.rotation.meanfield: Poisson-Boltzmann and linearised vortex densities."""

import numpy as np
import pytest
from scipy import integrate, special

from thermo.autocorr import integrated_autocorr_time
from thermo.domains.disk import Disk
from thermo.errors import ConfigurationError
from thermo.rotation.meanfield import linear_profile, radial_fit, solve_profile
from thermo.rotation.sampler import run_rotating


def _mean_r2(profile, sign):
    n = profile.n_plus if sign > 0 else profile.n_minus
    r = profile.r
    return integrate.simpson(r ** 3 * n, x=r) / integrate.simpson(r * n, x=r)


def test_beta_zero_is_uniform_with_the_exact_stream_function():
    """[exact] beta = 0: n_s = N_s / pi; -lap psi = 4 pi Q / pi = 4 Q with psi(1) = 0 gives
    psi = Q (1 - r^2)."""
    p = solve_profile(7, 2, 0.0, 3.0)
    assert p.converged
    np.testing.assert_allclose(p.n_plus, 7 / np.pi, rtol=1e-6)
    np.testing.assert_allclose(p.n_minus, 2 / np.pi, rtol=1e-6)
    np.testing.assert_allclose(p.psi, 5 * (1 - p.r ** 2), atol=1e-5)


@pytest.mark.parametrize("counts, omega_n", [((20, 0), -0.6), ((10, 10), 0.8), ((8, 3), 0.4)])
def test_poisson_boltzmann_tends_to_the_linearised_profile_at_second_order(counts, omega_n):
    """[exact] The linearised equation is the first order of the Poisson-Boltzmann one in
    beta, so their difference must fall as beta^2: about 4x per halving of beta. This checks
    the solve_bvp solution and the closed form (I0/I1 Bessel functions) against each other;
    both conserve the vortex numbers."""
    n = sum(counts)
    diffs = []
    for beta_n in (-0.2, -0.1, -0.05):
        beta, omega = beta_n / n, omega_n * n
        pb = solve_profile(*counts, beta, omega)
        lin = linear_profile(*counts, beta, omega, r=pb.r)
        assert pb.converged
        for dens, count in ((pb.n_plus, counts[0]), (pb.n_minus, counts[1])):
            assert integrate.trapezoid(2 * np.pi * pb.r * dens, pb.r) == pytest.approx(
                count, rel=1e-3, abs=1e-6)
        diffs.append(np.max(np.abs(pb.n_plus - lin.n_plus)) / (n / np.pi))
    ratios = np.array(diffs[:-1]) / np.array(diffs[1:])
    assert np.all((ratios > 3.6) & (ratios < 4.6)), (diffs, ratios)   # 4 + O(beta)


def test_linear_profile_ends_at_the_neutral_clustering_onset():
    """[pub] Esler & Ashbee, J. Fluid Mech. 779, 275 (2015): the linearised sinh-Poisson
    problem in the disk first admits a non-uniform solution at beta~ N = -j_{1,1}^2 / 4
    = -3.6705; the closed form diverges there (J1(a) = 0) and is refused beyond it. Its small-
    kappa limit is n_s = (N_s/pi)[1 + beta s (Q + omega)(r^2 - 1/2)] [exact, first order], so
    <r^2>_s = 1/2 + beta s (Q + omega)/12."""
    onset = -special.jn_zeros(1, 1)[0] ** 2 / 4
    assert onset == pytest.approx(-3.6705, abs=1e-4)          # reference-values.md
    n = 20
    linear_profile(10, 10, (onset + 1e-3) / n, 5.0)
    with pytest.raises(ConfigurationError, match="onset"):
        linear_profile(10, 10, (onset - 1e-3) / n, 5.0)
    # the response grows without bound towards the onset
    amp = [np.ptp(linear_profile(10, 10, (onset + d) / n, 5.0).n_plus) for d in (0.1, 0.01)]
    assert amp[1] > 5 * amp[0]
    p = linear_profile(6, 2, 1e-4, 3.0, r=np.linspace(0, 1, 2001))
    for s in (1, -1):
        assert _mean_r2(p, s) == pytest.approx(0.5 + 1e-4 * s * (4 + 3.0) / 12, abs=1e-7)


@pytest.mark.parametrize("counts, beta, omega", [((8, 0), -0.02, -4.0), ((4, 4), -0.02, 6.0),
                                                 ((6, 2), 0.03, -3.0)])
def test_sampled_radial_moments_at_small_beta_match_first_order_theory(counts, beta, omega, rng):
    """[exact] First order in beta at any N: <x_i>_beta = <x_i>_0 - beta Cov_0(x_i, H - omega M)
    with x = r^2 uniform on [0, 1] at beta = 0 and independent positions (core 1e-3,
    negligible). Cov(x, ln(1 - x)) = -1/4 (self term); E_j[4 pi G(u_i, u_j)] = 1 - x_i (the
    mean Green's function of a uniform vortex, -lap psi = 4 with psi(1) = 0), so a pair term
    gives s_i s_j Cov(x, 1 - x) = -s_i s_j / 12; Cov(x_i, omega s_i x_i) = omega s_i / 12. Hence

        <r^2>_s = 1/2 + beta/6 + beta s (Q + omega) / 12,

    the mean-field value 1/2 + beta s (Q + omega)/12 of the linearised profile
    (test_linear_profile_ends_at_the_neutral_clustering_onset) plus beta/6, which is O(1/N)
    at fixed beta N (self energy beta/4 less the vortex's own share of the mean field,
    beta/12): the sampled profile approaches the linearised mean field as N grows."""
    n_plus, n_minus = counts
    n, q = n_plus + n_minus, n_plus - n_minus
    res = run_rotating(Disk(), n_plus, n_minus, [beta], [omega], 20000, 1e-3, rng, thin=2)
    r2 = (res.positions[0] ** 2).sum(-1)
    lin = linear_profile(n_plus, n_minus, beta, omega)
    for s, cols in ((1, slice(0, n_plus)), (-1, slice(n_plus, n))):
        if n_plus if s > 0 else n_minus:
            x = r2[:, cols].mean(axis=1)
            se = np.sqrt(max(integrated_autocorr_time(x), 1.0) * x.var(ddof=1) / x.size)
            exact = 0.5 + beta / 6 + beta * s * (q + omega) / 12
            assert abs(x.mean() - exact) < 4.5 * se, (s, x.mean(), exact, se)
            # the mean-field part: the linearised profile's own <r^2>
            assert _mean_r2(lin, s) == pytest.approx(exact - beta / 6, abs=2e-3)


def test_radial_fit_accepts_its_own_profile_and_rejects_another(rng):
    """Shots drawn from the profile itself (independent radii by inverse transform) give an
    ordinary chi^2; a profile of the opposite rotation is rejected (common practice: Pearson
    chi^2 of binned counts)."""
    prof = solve_profile(12, 0, -1.0 / 12, -0.6 * 12)
    other = solve_profile(12, 0, -1.0 / 12, 0.6 * 12)
    r = prof.r
    cdf = integrate.cumulative_trapezoid(2 * np.pi * r * prof.n_plus, r, initial=0.0) / 12
    shots = []
    for _ in range(300):
        radii = np.interp(rng.random(12), cdf, r)
        phi = rng.random(12) * 2 * np.pi
        shots.append((np.column_stack([radii * np.cos(phi), radii * np.sin(phi)]),
                      np.ones(12, int)))
    good, bad = radial_fit(shots, prof), radial_fit(shots, other)
    assert good.pvalue > 1e-3
    assert bad.pvalue < 1e-6
    assert good.observed_plus.sum() == pytest.approx(12.0)
    with pytest.raises(ConfigurationError, match="n_bins"):
        radial_fit(shots, prof, n_bins=1)
