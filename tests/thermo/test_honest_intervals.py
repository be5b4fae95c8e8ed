"""Temperatures that state their range: coverage of the intervals for mixed vortex numbers,
imaged configurations and correlated frames, and the density of states' own error.

Every check draws data at a known beta with the project's sampler (STYLE.md: estimators are
tested on data drawn at a known parameter) and asks whether the stated 95% interval covers it
as often as it promises (the definition of a confidence interval; any statistics text).
"""

import numpy as np
import pytest

from thermo.data.units import series_weights
from thermo.data.degrade import ImagingModel, degrade
from thermo.domains.disk import Disk
from thermo.dos.build import DosSettings, build
from thermo.estimate import estimate_ensemble, estimate_single
from thermo.sampler import run_tempering

CORE = 0.02
QUICK = DosSettings(n_sweeps=800, n_boot=12)
STANDARD = DosSettings(n_sweeps=4000, n_boot=40)     # gpe.run.thermometry.EFFORT["standard"]


@pytest.fixture(scope="module")
def cache(tmp_path_factory):
    return tmp_path_factory.mktemp("dos_honest")


def _draw(n_plus, n_minus, beta, n_shots, rng, thin=60, burn_in=2000):
    run = run_tempering(Disk(), n_plus, n_minus, [beta], n_shots * thin, CORE, rng, thin=thin,
                        burn_in=burn_in)
    return [(p, run.signs) for p in run.positions[0]]


def test_mixed_vortex_numbers_share_one_beta_n(cache):
    """Neutral gases of 4, 6 and 8 vortices drawn at one beta~N = -2 (each at beta~ = -2/N):
    the joint fit with a common beta~N covers -2 and lists the three groups."""
    rng = np.random.default_rng(11)
    configs = sum((_draw(n // 2, n // 2, -2.0 / n, 40, rng) for n in (4, 6, 8)), [])
    est = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=QUICK)
    assert est.common == "beta_n" and est.bound is None
    assert sorted(g[:2] for g in est.groups) == [(2, 2), (3, 3), (4, 4)]
    assert est.beta_n_ci95[0] <= -2.0 <= est.beta_n_ci95[1], est
    assert est.temperature_sign == "negative"
    # the same shots fitted with one beta~ shared: a different model, a different answer
    other = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=QUICK,
                              common="beta")
    assert other.common == "beta" and other.beta_n != pytest.approx(est.beta_n, abs=1e-6)


def test_imaging_model_recovers_the_gas_before_imaging(cache):
    """Shots drawn at beta~N = -3 (5+5) and degraded (blur 0.03 R, 5% wrong signs): with the
    imaging model the fit covers the true beta~N; the imaged shots' energies are lower than
    the clean ones (blur and wrong signs break up the clusters), which is what the model
    corrects."""
    rng = np.random.default_rng(5)
    clean = _draw(5, 5, -0.3, 120, rng)
    model = ImagingModel(blur=0.03, sign_flip=0.05)
    imaged = [degrade(p, s, Disk(), model, rng, core_radius=CORE) for p, s in clean]
    with_model = estimate_ensemble(imaged, Disk(), CORE, cache_dir=cache, settings=QUICK,
                                   imaging=model)
    assert with_model.method == "ensemble, imaging model"
    assert with_model.beta_n_ci95[0] <= -3.0 <= with_model.beta_n_ci95[1], with_model
    naive = estimate_ensemble(imaged, Disk(), CORE, cache_dir=cache, settings=QUICK)
    assert naive.beta_n > with_model.beta_n


@pytest.mark.slow
def test_correlated_frames_naive_interval_undercovers_weighted_does_not(cache):
    """Frames of one equilibrium series one sweep apart (strongly correlated): treating them as
    independent shots undercovers; weighting them by 1/tau_int (gpe.run.thermometry.
    thermo.data.units.series_weights, Sokal's window) restores close to nominal coverage."""
    beta, n_rep, n_frames = -0.35, 40, 240
    rng = np.random.default_rng(2026)
    naive_hits = weighted_hits = 0
    taus = []
    for _ in range(n_rep):
        configs = _draw(3, 3, beta, n_frames, rng, thin=1, burn_in=400)
        w, tau = series_weights(configs, Disk())
        taus.append(tau)
        naive = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=QUICK,
                                  common="beta")
        weighted = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=QUICK,
                                     common="beta", weights=w)
        naive_hits += naive.beta_ci95[0] <= beta <= naive.beta_ci95[1]
        weighted_hits += weighted.beta_ci95[0] <= beta <= weighted.beta_ci95[1]
        assert weighted.n_effective == pytest.approx(n_frames / tau)
    assert np.median(taus) > 3          # the frames are correlated
    # binomial(40, 0.95): fewer than 33 hits has probability < 0.1%
    print("correlated coverage", weighted_hits, naive_hits, np.median(taus))
    assert weighted_hits >= 33, (weighted_hits, naive_hits, np.median(taus))
    assert naive_hits < weighted_hits


@pytest.mark.slow
def test_mixed_n_coverage_is_close_to_nominal(cache):
    """40 repeats of a mixed 4/6/8-vortex ensemble at beta~N = -2: the 95% interval of the
    common beta~N covers the truth in >= 33 of 40 (binomial(40, 0.95): P(< 33) < 0.1%)."""
    rng = np.random.default_rng(77)
    hits = 0
    for _ in range(40):
        configs = sum((_draw(n // 2, n // 2, -2.0 / n, 10, rng) for n in (4, 6, 8)), [])
        est = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=QUICK)
        hits += est.beta_n_ci95[0] <= -2.0 <= est.beta_n_ci95[1]
    print("mixed coverage", hits)
    assert hits >= 33, hits


@pytest.mark.slow
def test_bootstrap_error_matches_the_scatter_of_independent_builds():
    """The density of states' stated error (block bootstrap, blocks shared by all rungs, burn-in
    long enough that builds do not carry their own bias) against the scatter of 24 builds from
    independent seeds (the definition of a standard error): the ratio scatter / stated, pooled
    over five betas of a 2+2 gas at the default (quick) effort, lies in [0.7, 1.45]. Measured
    before the shared blocks and the longer burn-in: 1.5-2.4; now 1.14 here (0.74-1.3 over
    other seeds and 3+3)."""
    d = Disk()
    betas = np.array([-0.8, -0.4, 0.0, 0.3, 0.7])
    vals, errs = [], []
    for seed in range(24):
        dos = build(2, 2, d, CORE, QUICK, np.random.default_rng(1000 + seed))
        m, e = dos.mean_energy(betas)
        vals.append(m)
        errs.append(e)
    vals, errs = np.array(vals), np.array(errs)
    ratio = np.sqrt(np.mean(vals.var(axis=0, ddof=1)) / np.mean(errs ** 2))
    print("bootstrap ratio", ratio)
    assert 0.7 <= ratio <= 1.45, ratio


def test_beyond_the_pair_collapse_bound_the_ladder_is_widened(cache):
    """A 3+3 gas at beta~ = +1.5, past the pair-collapse bound beta~ = 1 of the core-free gas
    (held up by the core, a = 0.01): the ladder is widened past 1 and the interval covers 1.5
    (it used to come back as 1.0000 [0.9994, 1.0000]); no per-shot interval is NaN."""
    rng = np.random.default_rng(3)
    run = run_tempering(Disk(), 3, 3, [1.5], 300 * 60, 0.01, rng, thin=60, burn_in=3000)
    configs = [(p, run.signs) for p in run.positions[0]]
    est = estimate_ensemble(configs, Disk(), 0.01, cache_dir=cache, settings=QUICK,
                            common="beta")
    assert est.reach >= 1 and est.bound is None
    assert est.beta_ci95[0] <= 1.5 <= est.beta_ci95[1], est
    assert not est.not_in_equilibrium
    for p, s in configs[:40]:
        one = estimate_single(p, s, Disk(), 0.01, cache_dir=cache, settings=QUICK)
        assert np.all(~np.isnan(one.beta_ci95)) and np.isfinite(one.prob_negative)


@pytest.mark.slow
def test_imaging_model_coverage_is_close_to_nominal(cache):
    """30 repeats of 60 imaged 4+4 shots drawn at beta~N = -3 (blur 0.03 R, 5% wrong signs):
    with the imaging model the 95% interval covers -3 in >= 25 of 30 (binomial(30, 0.95):
    P(< 25) < 2%); without it, the imaged shots' temperature is biased (fewer hits). At the
    effort the tool uses with an imaging model (gpe.run.thermometry.IMAGING_EFFORT, standard;
    measured 28/30, naive 0/30): the one quick table of this gas is 0.19 off here (2.6 of its
    stated errors) and covered 23/30, which is why an imaging model raises the effort."""
    rng = np.random.default_rng(99)
    model = ImagingModel(blur=0.03, sign_flip=0.05)
    hits = naive_hits = 0
    for _ in range(30):
        clean = _draw(4, 4, -3.0 / 8, 60, rng)
        imaged = [degrade(p, s, Disk(), model, rng, core_radius=CORE) for p, s in clean]
        est = estimate_ensemble(imaged, Disk(), CORE, cache_dir=cache, settings=STANDARD,
                                imaging=model)
        naive = estimate_ensemble(imaged, Disk(), CORE, cache_dir=cache, settings=STANDARD)
        hits += est.beta_n_ci95[0] <= -3.0 <= est.beta_n_ci95[1]
        naive_hits += naive.beta_n_ci95[0] <= -3.0 <= naive.beta_n_ci95[1]
    print("imaging coverage", hits, naive_hits)
    assert hits >= 25, (hits, naive_hits)
    assert naive_hits < hits
