"""Tests of thermo.rotation.estimate: beta and omega of one configuration and of ensembles."""

import numpy as np
import pytest

from thermo.data.units import series_weights
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.errors import ConfigurationError, DomainError
from thermo.rotation.estimate import (
    estimate_rotating_ensemble,
    estimate_rotating_single,
    microcanonical,
)
from thermo.rotation.sampler import run_rotating
from thermo.rotation.table import RotatingSettings, RotatingTable, build_table

CORE = 0.02


def _synthetic_table(e, m, beta0, omega0) -> RotatingTable:
    """A one-state table of samples drawn at (beta0, omega0): MBAR's denominator is then
    n exp(-u0) exactly (Shirts & Chodera 2008, eq. 11 with K = 1)."""
    n = e.size
    ld = np.log(n) - beta0 * (e - omega0 * m)
    one = np.array([0.0, 1.0])
    return RotatingTable(
        n_plus=1, n_minus=1, domain_key="synthetic", core_radius=0.0,
        betas=np.array([beta0]), omegas=np.array([omega0]), beta_axis=np.array([beta0]),
        omega_axis=np.array([omega0]), n_k=np.array([float(n)]), energies=e, impulses=m,
        f=np.zeros(1), log_denom=ld, boot_log_denom=np.stack([ld, ld]),
        boot_counts=np.ones((2, n), np.uint16), grid_betas=one, grid_omegas=one,
        log_z_grid=np.zeros((2, 2)))


def test_microcanonical_beta_and_omega_on_a_known_density_of_states(rng):
    """[exact] Let y1 ~ Gamma(k1), y2 ~ Gamma(k2) be independent with g(y) = y1^(k1-1)
    y2^(k2-1), and (H, M) = A y. Then S(H, M) = (k - 1) . ln y + const, so
    (dS/dH, dS/dM) = A^-T ((k - 1)/y), and beta = dS/dH, omega = -(dS/dM)/(dS/dH) (the weight
    is exp(-beta H + beta omega M)). The canonical state with mean (H, M) has rates k/y in y;
    for Gamma densities the first Edgeworth correction -(1/2) L k3 L is exact (the 1-D case is
    the one-vortex identity of thermo.dos.tables.beta_saddle_from_cumulants), and both sides
    transform covariantly under A, so microcanonical() must reproduce the exact gradient up to
    the sampling error of the cumulants (~0.3% here). The samples are drawn at a state 10% off
    the target one, so the reweighting is exercised."""
    k = np.array([6.0, 4.0])
    a = np.array([[1.0, 0.5], [0.3, 1.0]])
    inv_t = np.linalg.inv(a).T
    y_star = np.array([3.0, 1.5])
    mu_star = k / y_star
    mu_base = mu_star * np.array([1.1, 0.9])
    nat_base = -inv_t @ mu_base                      # (-beta0, gamma0) with A^T (-b, g) = -mu
    beta0, gamma0 = -nat_base[0], nat_base[1]
    y = np.column_stack([rng.gamma(k[0], 1 / mu_base[0], 400_000),
                         rng.gamma(k[1], 1 / mu_base[1], 400_000)])
    x = y @ a.T
    table = _synthetic_table(x[:, 0], x[:, 1], beta0, gamma0 / beta0)
    nat_c = -inv_t @ mu_star
    beta_c, gamma_c = -nat_c[0], nat_c[1]
    h, m = a @ y_star
    grad = inv_t @ ((k - 1) / y_star)
    beta_exact, omega_exact = grad[0], -grad[1] / grad[0]
    beta_mic, omega_mic = microcanonical(table, h, m, beta_c, gamma_c)
    assert beta_mic == pytest.approx(beta_exact, rel=0.01)
    assert omega_mic == pytest.approx(omega_exact, rel=0.01)
    # and the uncorrected canonical inverse is visibly off (the correction matters here)
    assert abs(beta_c - beta_exact) > 0.1 * abs(beta_exact)


def _draws(n_plus, n_minus, beta_n, omega_n, rng, shots=100, thin=40):
    n = n_plus + n_minus
    res = run_rotating(Disk(), n_plus, n_minus, [beta_n / n], [omega_n * n], shots * thin,
                       CORE, rng, thin=thin, burn_in=600)
    configs = [(p, res.signs) for p in res.positions[0]]
    weights, _ = series_weights(configs, Disk())   # frames of one run: 1/tau_int each
    return configs, weights


@pytest.mark.slow
def test_recovery_at_known_beta_and_omega_with_nominal_coverage(rng):
    """Estimators are tested on data drawn at a known parameter (common practice, STYLE.md):
    ensembles of 150 frames of one run (weights 1/tau_int) drawn at a known (beta~ N, omega~/N),
    a single-sign gas rotating (omega != 0) and a neutral gas at omega = 0; the 95% profile
    intervals must cover the truth at close to the nominal rate: with 24 repeats, at least
    20 (P(X <= 19 | p = 0.95) = 0.008, binomial), and the 68% ones neither too often nor too
    rarely (10..22 of 24, p = 0.68 within +-2.7 sd). omega != 0 must be detected in most repeats
    of the rotating gas and rarely (<= 4 of 24, about the 5% false-alarm rate) at omega = 0."""
    settings = RotatingSettings(n_betas=10, n_omegas=7, omega_max_n=1.5, n_sweeps=3000,
                                n_boot=4)
    repeats = 24
    for (npl, nmi, bn, wn) in ((3, 0, -1.6, 0.8), (2, 2, -3.0, 0.0)):
        table = build_table(npl, nmi, Disk(), CORE, settings, np.random.default_rng(7 + npl))
        cover95 = {"beta": 0, "omega": 0}
        cover68 = {"beta": 0, "omega": 0}
        flagged = 0
        for _ in range(repeats):
            configs, w = _draws(npl, nmi, bn, wn, rng, shots=150)
            est = estimate_rotating_ensemble(configs, Disk(), CORE, weights=w,
                                             table_provider=lambda a, b, t=table: t)
            n = npl + nmi
            truth = {"beta": bn / n, "omega": wn * n}
            for name, value in truth.items():
                lo95, hi95 = getattr(est, f"{name}_ci95")
                lo68, hi68 = getattr(est, f"{name}_ci68")
                cover95[name] += lo95 <= value <= hi95
                cover68[name] += lo68 <= value <= hi68
            flagged += est.omega_nonzero
        for name, covered in cover95.items():
            assert covered >= 20, (npl, nmi, name, cover95, cover68)
            assert 10 <= cover68[name] <= 22, (npl, nmi, name, cover95, cover68)
        if wn != 0:
            assert flagged >= repeats // 2, (npl, nmi, flagged)
        else:
            assert flagged <= 4, (npl, nmi, flagged)


def test_single_configuration_and_bad_input(rng):
    table = build_table(2, 2, Disk(), CORE, RotatingSettings(n_betas=6, n_omegas=3, burn_in=300,
                                                             n_sweeps=600, n_boot=2),
                        np.random.default_rng(3))
    configs, _ = _draws(2, 2, -3.0, 0.0, rng, shots=5)
    one = estimate_rotating_single(*configs[0], Disk(), CORE,
                                   table_provider=lambda a, b: table)
    assert one.method == "microcanonical" and one.n_shots == 1
    assert one.beta_ci95[0] <= one.beta <= one.beta_ci95[1]
    assert one.omega_ci95[0] <= one.omega <= one.omega_ci95[1]
    with pytest.raises(ConfigurationError, match="weights"):
        estimate_rotating_ensemble(configs, Disk(), CORE, weights=[1.0],
                                   table_provider=lambda a, b: table)
    with pytest.raises(ConfigurationError, match="fewer than two vortices"):
        estimate_rotating_ensemble([(np.zeros((1, 2)), [1])], Disk(), CORE,
                                   table_provider=lambda a, b: table)
    with pytest.raises(ConfigurationError, match="common"):
        estimate_rotating_ensemble(configs, Disk(), CORE, common="omega",
                                   table_provider=lambda a, b: table)
    box = Box.from_sizes({"width": 1.0, "height": 1.0})[0]
    with pytest.raises(DomainError, match="does not conserve"):
        estimate_rotating_ensemble([(np.array([[0.1, 0.1], [-0.1, 0.2]]), [1, -1])], box,
                                   CORE, table_provider=lambda a, b: table)


@pytest.mark.slow
def test_mixed_vortex_numbers_share_beta_n_and_omega_over_n(rng):
    """Shots of two vortex numbers drawn at one (beta~ N, omega~ / N) (a protocol whose vortex
    number fluctuates from shot to shot): the joint fit over both groups (each with its own
    table) covers the truth with intervals narrower than either group's alone (the likelihoods
    add; common practice for a shared parameter)."""
    settings = RotatingSettings(n_betas=8, n_omegas=5, n_sweeps=1500, n_boot=4)
    truth = (-2.0, 0.5)
    shots, weights, alone = [], [], {}
    for key in ((2, 2), (3, 2)):
        table = build_table(*key, Disk(), CORE, settings, np.random.default_rng(sum(key)))
        c, w = _draws(*key, *truth, rng, shots=150)
        shots += c
        weights += list(w)
        alone[key] = (table, estimate_rotating_ensemble(c, Disk(), CORE, weights=w,
                                                        table_provider=lambda a, b, t=table: t))
    both = estimate_rotating_ensemble(shots, Disk(), CORE, weights=weights,
                                      table_provider=lambda a, b: alone[(a, b)][0])
    assert both.groups == ((2, 2), (3, 2))
    lo, hi = both.beta_n_ci95
    assert lo <= truth[0] <= hi
    lo, hi = both.omega_n_ci95
    assert lo <= truth[1] <= hi
    for _, est in alone.values():
        assert (both.beta_n_ci95[1] - both.beta_n_ci95[0]
                < est.beta_n_ci95[1] - est.beta_n_ci95[0])


@pytest.mark.slow
def test_an_estimate_beyond_the_sampled_omegas_widens_the_tables(rng, tmp_path):
    """Ranges, not clipping (as for beta alone): shots drawn at omega~/N = 0.8 fitted first on
    tables sampled only to omega~/N = 0.5 reach that edge; the estimate is redone on tables of
    twice (and, if its interval still reaches the edge, four times) the range, each cached, and
    then covers the truth without a bound."""
    settings = RotatingSettings(n_betas=8, n_omegas=5, omega_max_n=0.5, n_sweeps=1500,
                                n_boot=4)
    configs, w = _draws(3, 0, -1.6, 0.8, rng, shots=150)
    est = estimate_rotating_ensemble(configs, Disk(), CORE, weights=w, cache_dir=tmp_path,
                                     settings=settings)
    assert est.extra["widened"] >= 1 and not est.bounds, est.verdict
    lo, hi = est.omega_n_ci95
    assert lo <= 0.8 <= hi
    assert len(list(tmp_path.glob("rot_3p0m_*.npz"))) == est.extra["widened"] + 1
