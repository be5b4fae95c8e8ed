"""Tests of thermo.estimate: beta recovered from configurations drawn at a known beta."""

import numpy as np
import pytest
from scipy import stats

from thermo.domains.disk import Disk
from thermo.dos.build import DosSettings
from thermo.errors import ConfigurationError
from thermo.estimate import estimate_ensemble, estimate_single, thresholds
from thermo.sampler import run_tempering

CORE = 0.01
SETTINGS = DosSettings(n_temps=12, n_sweeps=2000, n_boot=20)


@pytest.fixture(scope="module")
def cache(tmp_path_factory):
    return tmp_path_factory.mktemp("dos_cache")


def _draw(n_plus, n_minus, beta, n_shots, seed, thin=30):
    """Shots drawn by the project's sampler at one beta, thinned to be nearly independent."""
    run = run_tempering(Disk(), n_plus, n_minus, [beta], n_shots * thin, CORE,
                        np.random.default_rng(seed), thin=thin)
    return [(p, run.signs) for p in run.positions[0]]


@pytest.mark.parametrize("n_plus,n_minus,beta", [
    (2, 2, -0.45), (2, 2, 0.5), (3, 0, -0.3), (3, 0, 0.4)])
def test_beta_recovered_inside_its_95_interval(cache, n_plus, n_minus, beta):
    """Estimator recovers the beta it was drawn at (STYLE.md: estimators are tested on data
    drawn at a known parameter); neutral and single-species gases, both signs."""
    configs = _draw(n_plus, n_minus, beta, 80, seed=int(100 * (beta + 1)) + n_minus)
    res = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=SETTINGS)
    assert res.beta_ci95[0] <= beta <= res.beta_ci95[1], res
    assert res.beta_ci95[0] <= res.beta_ci68[0] <= res.beta <= res.beta_ci68[1] <= res.beta_ci95[1]
    # [pub: exponential-family MLE] Fisher standard error [n Var_beta(E)]^(-1/2) is a lower
    # bound of the reported one (which adds the density-of-states error)
    half68 = 0.5 * (res.beta_ci68[1] - res.beta_ci68[0])
    assert 0.5 * res.stderr < half68 < 2.0 * res.stderr
    assert res.temperature_sign == ("negative" if beta < 0 else "positive")
    assert (res.prob_negative > 0.9) == (beta < 0)
    assert str(round(100 * max(res.prob_negative, 1 - res.prob_negative))) in res.verdict
    assert (res.n_plus, res.n_minus, res.n_shots) == (n_plus, n_minus, 80)
    assert res.not_in_equilibrium is False


def test_mixed_groups_and_single_shot(cache):
    """Shots with different (N+, N-) drawn at one beta~, fitted with ``common="beta"``: the
    scores of the groups add."""
    configs = _draw(2, 2, -0.4, 40, seed=5) + _draw(3, 0, -0.4, 40, seed=6)
    res = estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=SETTINGS,
                            common="beta")
    assert len(res.groups) == 2 and res.n_shots == 80
    assert res.beta_ci95[0] <= -0.4 <= res.beta_ci95[1]
    one = estimate_single(*configs[0], Disk(), CORE, cache_dir=cache, settings=SETTINGS)
    assert one.method == "microcanonical" and np.isfinite(one.beta)
    assert one.beta_ci95[0] <= one.beta <= one.beta_ci95[1]
    # one snapshot says much less than 80 shots
    assert one.beta_ci95[1] - one.beta_ci95[0] > res.beta_ci95[1] - res.beta_ci95[0]


def test_out_of_equilibrium_structure_is_flagged(cache):
    """+- dipoles of separation 0.15 R with uniformly placed centres (not a Gibbs state): the
    energy says beta~ ~ 0.8, the structure observables lie outside their canonical curves, so
    the flag must be raised. Tighter dipoles (0.03 R) put the energy past the pair-collapse
    bound beta~ = 1, where the structure check is not made and the verdict says so."""
    def dipoles(separation):
        rng = np.random.default_rng(4)
        configs = []
        for _ in range(60):
            c = Disk().sample_uniform(rng, 2, margin=0.1) * 0.8
            pos = np.concatenate([c, c + [separation, 0.0]])
            configs.append((pos, np.array([1, 1, -1, -1])))
        return estimate_ensemble(configs, Disk(), CORE, cache_dir=cache, settings=SETTINGS)

    res = dipoles(0.15)
    assert res.beta_ci95[1] < 1.0
    assert res.not_in_equilibrium and "not in equilibrium" in res.verdict
    tight = dipoles(0.03)
    assert tight.beta_ci95[0] > 1.0 and not tight.not_in_equilibrium
    assert "structure check not made past the pair-collapse bound" in tight.verdict


def test_thresholds_from_outside_values():
    """Collapse bounds -4/N (neutral), -2/N (one species) [exact power counting,
    reference-values.md]; clustering onset beta~ N = -j11^2/4 = -3.6705 [pub: Esler & Ashbee
    2015], the digits as quoted in reference-values.md."""
    th = thresholds(10, 10)
    assert th["like_sign_collapse"] == pytest.approx(-4 / 20)
    assert th["clustering_onset"] * 20 == pytest.approx(-3.6705, abs=1e-4)
    assert thresholds(6, 0)["like_sign_collapse"] == pytest.approx(-2 / 6)
    assert "clustering_onset" not in thresholds(6, 0)


def test_one_vortex_is_a_clear_undefined_result(cache):
    res = estimate_ensemble([(np.array([[0.1, 0.2]]), np.array([1]))] * 3, Disk(), CORE,
                            cache_dir=cache, settings=SETTINGS)
    assert np.isnan(res.beta) and "beta undefined for one vortex" in res.verdict
    one = estimate_single(np.array([[0.1, 0.2]]), np.array([-1]), Disk(), CORE,
                          cache_dir=cache, settings=SETTINGS)
    assert one.method == "undefined" and "beta undefined for one vortex" in one.verdict


@pytest.mark.parametrize("pos,match", [
    (np.array([[0.0, np.nan], [0.3, 0.0]]), "non-finite"),
    (np.array([[0.0, 0.0], [1.2, 0.0]]), "not"),
    (np.array([[0.0, 0.0], [0.005, 0.0]]), "closer than"),
])
def test_bad_configurations_raise(cache, pos, match):
    with pytest.raises(ConfigurationError, match=match):
        estimate_ensemble([(pos, np.array([1, -1]))], Disk(), CORE, cache_dir=cache,
                          settings=SETTINGS)
    with pytest.raises(ConfigurationError, match="shot 0"):
        estimate_ensemble([(pos, np.array([1, -1]))], Disk(), CORE, cache_dir=cache,
                          settings=SETTINGS)


@pytest.mark.slow
def test_95_interval_coverage_is_nominal(cache):
    """Over 40 independent ensembles the 95% interval must cover the truth at close to its
    nominal rate: reject if the count is below the binomial(40, 0.95) 0.1% quantile."""
    beta, n_rep = -0.45, 40
    configs = _draw(2, 2, beta, 40 * n_rep, seed=2024)
    hits = 0
    for r in range(n_rep):
        res = estimate_ensemble(configs[40 * r:40 * (r + 1)], Disk(), CORE, cache_dir=cache,
                                settings=SETTINGS)
        hits += res.beta_ci95[0] <= beta <= res.beta_ci95[1]
    lowest = stats.binom.ppf(0.001, n_rep, 0.95)
    assert hits >= lowest, (hits, lowest)
    assert hits <= n_rep   # over-coverage is not an error, but report it in the message


def test_energy_beyond_the_ladder_widens_it_or_is_a_bound(tmp_path):
    """Tight like-sign rings far apart have an energy beyond what the first ladder samples: the
    ladder is widened, and what lies beyond the widest one is reported as a bound (a clipped
    value is not a measurement)."""
    import numpy as np

    from thermo.domains.disk import Disk
    from thermo.dos.build import DosSettings
    from thermo.estimate import estimate_single

    ang = np.linspace(0, 2 * np.pi, 3, endpoint=False)
    signs = np.array([1, 1, 1, -1, -1, -1])

    def triangles(r, x):
        ring = r * np.column_stack([np.cos(ang), np.sin(ang)])
        return np.vstack([[x, 0.0] + ring, [-x, 0.0] + ring])

    settings = DosSettings(n_sweeps=400, n_boot=6)
    # beyond the first ladder (beta~ N >= -4.6 for 3+3): the ladder is widened until the
    # energy is inside, and the interval is closed and finite
    est = estimate_single(triangles(0.03, 0.5), signs, Disk(), 0.01, cache_dir=tmp_path,
                          settings=settings)
    assert est.reach >= 1 and est.bound is None
    assert np.isfinite(est.beta_n_ci95).all() and est.beta_n < -4.6
    assert est.beta_n_ci95[0] <= est.beta_n <= est.beta_n_ci95[1]
    # two triangles as tight as the core allows: beyond even the widest ladder, so the answer
    # is an upper bound, never a clipped number with a closed interval
    est = estimate_single(triangles(0.012, 0.6), signs, Disk(), 0.01, cache_dir=tmp_path,
                          settings=settings)
    assert est.reach == 2
    assert est.bound == "upper" and est.beta_ci95[0] == -np.inf
    assert est.beta_n == pytest.approx(6 * est.beta) and est.beta_n == est.beta_n_ci95[1]
    assert "beta~ N <" in est.verdict and "bound" in est.verdict
    assert est.temperature_sign == "negative" and est.prob_negative > 0.99
