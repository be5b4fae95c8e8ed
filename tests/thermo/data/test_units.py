"""thermo.data.units: tests of difference that count correlated frames as what they are worth.

The null hypothesis holds by construction in every test here (both sides drawn from the same
distribution), so a test at the 5% level must reject in about 5% of repeats. The simulated side
is an AR(1) series x_t = rho x_{t-1} + e_t, whose integrated autocorrelation time is exactly
tau_int = (1 + rho) / (1 - rho) [A. D. Sokal, Monte Carlo Methods in Statistical Mechanics
(1996), the exponential autocorrelation rho^t summed]; the measured side is independent draws of
the same stationary normal distribution, variance 1 / (1 - rho^2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from thermo.data.units import MIN_EFFECTIVE, SeriesSample, difference_of_means, ks_pvalue


def _ar1(rng, n, rho):
    x = np.empty(n)
    x[0] = rng.normal() / math.sqrt(1 - rho**2)     # start in the stationary distribution
    e = rng.normal(size=n)
    for t in range(1, n):
        x[t] = rho * x[t - 1] + e[t]
    return x


def test_effective_size_of_an_ar1_series_matches_its_exact_autocorrelation_time():
    rng = np.random.default_rng(1)
    rho, n = 0.8, 20_000
    sample = SeriesSample.of(_ar1(rng, n, rho), np.zeros(n, dtype=int))
    exact = n * (1 - rho) / (1 + rho)                  # n / tau_int, tau_int = 9
    assert abs(sample.n_effective - exact) < 0.1 * exact


def test_independent_shots_count_one_each_and_nan_is_left_out():
    x = np.array([1.0, np.nan, 3.0, 4.0, 2.0])
    sample = SeriesSample.of(x, np.arange(5))
    assert sample.n == 4 and sample.n_effective == 4.0 and sample.mean() == 2.5
    assert sample.variance_of_mean() == pytest.approx(np.var([1, 3, 4, 2], ddof=1) / 4)


def test_ks_pvalue_agrees_with_scipy_for_independent_samples():
    """For independent samples the effective sizes are the sizes, and Stephens' formula is the
    asymptotic two-sample p-value of scipy.stats.ks_2samp (method="asymp", a reference library)
    to within its small-sample correction."""
    rng = np.random.default_rng(2)
    for _ in range(5):
        a, b = rng.normal(size=300), rng.normal(0.15, 1, size=200)
        res = stats.ks_2samp(a, b, method="asymp")
        assert ks_pvalue(res.statistic, 300, 200) == pytest.approx(res.pvalue, rel=0.1, abs=0.01)


@pytest.mark.slow
def test_correlated_frames_reject_a_true_null_at_the_nominal_rate():
    """200 repeats of one AR(1) run (rho = 0.9, 300 frames, tau_int = 19) against 60 independent
    shots (about 16 effective frames): the frame-by-frame tests (permutation test and KS as if
    every frame were a shot) reject far more often than 5%; the autocorrelation-aware tests
    stay close to it (binomial 200 at p = 0.05 has 99.9% of its mass within 2..21 rejections;
    the mean test is allowed up to 13%, the residual bias of tau_int on a run this short, as
    the module notes say)."""
    rng = np.random.default_rng(3)
    rho, n_frames, n_shots, repeats = 0.9, 300, 60, 200
    sd = 1 / math.sqrt(1 - rho**2)
    naive_perm = naive_ks = boot = ks = 0
    for _ in range(repeats):
        a = _ar1(rng, n_frames, rho)
        b = rng.normal(0, sd, size=n_shots)
        d = difference_of_means(SeriesSample.of(a, np.zeros(n_frames, dtype=int)),
                                SeriesSample.of(b, np.arange(n_shots)))
        boot += d.p_mean < 0.05
        ks += d.p_ks < 0.05
        naive_ks += stats.ks_2samp(a, b).pvalue < 0.05
        naive_perm += stats.permutation_test(
            (a, b), lambda x, y, axis: np.mean(x, axis=axis) - np.mean(y, axis=axis),
            vectorized=True, n_resamples=500, rng=rng).pvalue < 0.05
    assert naive_perm > 40 and naive_ks > 40, (naive_perm, naive_ks)
    assert 2 <= boot <= 26 and ks <= 21, (boot, ks)


def test_too_few_independent_units_give_no_test_and_say_so():
    rng = np.random.default_rng(4)
    a = _ar1(rng, 40, 0.97)               # tau_int ~ 65 frames: about one independent value
    d = difference_of_means(SeriesSample.of(a, np.zeros(40, dtype=int)),
                            SeriesSample.of(rng.normal(size=50), np.arange(50)))
    assert math.isnan(d.p_mean) and math.isnan(d.ci95[0]) and math.isnan(d.p_ks)
    assert d.n_eff_a < MIN_EFFECTIVE and "no test" in d.note and "runs (seeds)" in d.note
    assert d.n_a == 40 and np.isfinite(d.difference)


def test_several_runs_are_independent_series():
    """Two runs of the same process are two series whose effective sizes add; runs whose means
    differ widen the standard error of the pooled mean (their deviation from it counts)."""
    rng = np.random.default_rng(5)
    n = 5000
    a1, a2 = _ar1(rng, n, 0.5), _ar1(rng, n, 0.5)
    both = SeriesSample.of(np.concatenate([a1, a2]), np.repeat([0, 1], n))
    ones = [SeriesSample.of(a, np.zeros(n, dtype=int)) for a in (a1, a2)]
    assert len(both.values) == 2
    assert both.n_effective == pytest.approx(sum(o.n_effective for o in ones))
    # one AR(1) run: Var(mean) = tau_int sigma^2 / n, sigma^2 = 1 / (1 - rho^2) [exact]
    exact = 3.0 * (1 / 0.75) / (2 * n)
    assert both.variance_of_mean() == pytest.approx(exact, rel=0.2)
    shifted = SeriesSample.of(np.concatenate([a1, a2 + 2.0]), np.repeat([0, 1], n))
    assert shifted.variance_of_mean() > 2 * both.variance_of_mean()


def test_the_mean_of_two_correlated_runs_is_covered_at_close_to_the_nominal_rate():
    """Two AR(1) runs (rho = 0.8, 150 frames each, about 33 effective frames together) of a
    process with mean 0: the interval of the pooled mean covers 0 in close to 95% of 300
    repeats (binomial(300, 0.95): 99.9% of its mass above 272 hits; we allow down to 264,
    the short-run bias of tau_int); an interval cut to a range never leaves it."""
    from thermo.data.units import mean_interval

    rng = np.random.default_rng(8)
    hits = 0
    for _ in range(300):
        x = np.concatenate([_ar1(rng, 150, 0.8), _ar1(rng, 150, 0.8)])
        m, lo, hi = mean_interval(SeriesSample.of(x, np.repeat([0, 1], 150)))
        hits += lo <= 0.0 <= hi
    assert hits >= 264, hits
    counts = SeriesSample.of(np.array([0.0, 0.0, 1.0, 0.0, 0.0, 0.0]), np.zeros(6, dtype=int))
    m, lo, hi = mean_interval(counts, lower=0.0)
    assert lo == 0.0 and m == pytest.approx(1 / 6) and hi > m
