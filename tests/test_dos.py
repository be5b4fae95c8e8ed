"""Tests of thermo.dos: MBAR pooling, canonical reweighting, ln g(E), beta(E), disk cache."""

from types import SimpleNamespace

import numpy as np
import pytest

from thermo import dos as dosmod
from thermo.dos import DensityOfStates, DosSettings, solve_mbar


def _one_vortex_result(rng, betas, n_samples):
    """Exact canonical samples of one vortex in the unit disk (no core).

    [exact] E = ln(1 - |u|^2) = ln x with x = 1 - |u|^2 uniform at beta = 0 (area
    measure), so p_beta(x) = (1 - beta) x^(-beta): x = U^(1/(1 - beta)). Hence
    <E> = -1/(1 - beta), Var E = 1/(1 - beta)^2, g(E) = e^E and beta_micro(E) = 1.
    """
    x = rng.random((len(betas), n_samples)) ** (1.0 / (1.0 - betas[:, None]))
    return SimpleNamespace(betas=np.asarray(betas), energies=np.log(x), n_plus=1, n_minus=0,
                           core_radius=0.0, domain=None)


@pytest.fixture(scope="module")
def one_vortex_dos():
    rng = np.random.default_rng(11)
    res = _one_vortex_result(rng, np.linspace(-3.0, 0.7, 10), 1200)
    return DensityOfStates.from_tempering(res, n_boot=30, rng=rng)


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
    assert good.sum() >= 10
    assert np.all(np.abs(ln_g[good] - exact[good]) < 4 * err[good] + 0.02), centres
    lo, hi = one_vortex_dos.energy_range()
    e = np.linspace(lo, hi, 7)[1:-1]
    beta, berr = one_vortex_dos.beta_micro(e)
    assert np.all(np.abs(beta - 1.0) < 4 * berr + 0.02), (beta, berr)
    assert np.all(np.isnan(one_vortex_dos.beta_micro([lo - 5.0, hi + 1.0])[0]))


def test_mbar_free_energies_agree_with_pymbar(rng):
    """Independent implementation: pymbar 4 (Shirts & Chodera 2008) on the same u_kn."""
    pymbar = pytest.importorskip("pymbar")
    res = _one_vortex_result(rng, np.linspace(-2.0, 0.5, 6), 300)
    flat = res.energies.reshape(-1)
    f, _ = solve_mbar(flat, res.betas, np.full(6, 300))
    ref = pymbar.MBAR(np.outer(res.betas, flat), np.full(6, 300)).f_k
    np.testing.assert_allclose(f - f[0], ref - ref[0], atol=1e-7)


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


def test_save_load_roundtrip(tmp_path, one_vortex_dos):
    path = tmp_path / "x.npz"
    dosmod.save(one_vortex_dos, path, ("k",))
    back, meta = dosmod.load(path)
    for name in ("betas", "energies", "f", "log_denom", "boot_f", "boot_counts"):
        np.testing.assert_array_equal(getattr(back, name), getattr(one_vortex_dos, name))
    np.testing.assert_array_equal(back.mean_energy(0.1)[0], one_vortex_dos.mean_energy(0.1)[0])


def test_settings_are_validated():
    from thermo.errors import SamplerError
    with pytest.raises(SamplerError, match="n_sweeps"):
        DosSettings(n_sweeps=1)


# ------------------------------------------------------------------ with the real sampler
@pytest.fixture(scope="module")
def small_gas(tmp_path_factory):
    """2+2 neutral gas in the unit disk, core 0.01, modest effort (cached in a tmp dir)."""
    from thermo.domains import Disk
    cache = tmp_path_factory.mktemp("dos_cache")
    settings = DosSettings(n_temps=12, n_sweeps=2000, n_boot=20)
    before = dosmod.BUILD_COUNT
    d = dosmod.load_or_build(2, 2, Disk(), 0.01, cache_dir=cache, seed=3, settings=settings)
    assert dosmod.BUILD_COUNT == before + 1
    return d, cache, settings


def test_reweighted_mean_energy_matches_direct_sampling_off_ladder(small_gas):
    """MBAR-reweighted <E>(beta) vs a direct single-temperature Metropolis run at betas
    between the rungs (both signs); |difference| < 4 combined standard errors, the direct
    error from the integrated autocorrelation time (Sokal's windowing, common practice)."""
    from thermo.domains import Disk
    from thermo.sampler import run_tempering
    d, _, _ = small_gas
    ladder = np.sort(d.betas)
    for beta in (-0.5, 0.4):
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
    d, _, _ = small_gas
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
    d, _, _ = small_gas
    res = d.canonical_many([0.0], ["c1", "dipole_moment"])
    c1, c1_err = res["c1"]
    assert abs(c1[0] + 1 / 3) < 4 * c1_err[0] + 0.01


def test_cache_hit_returns_identical_arrays_without_resampling(small_gas):
    from thermo.domains import Disk
    d, cache, settings = small_gas
    path = dosmod.cache_path(2, 2, Disk(), 0.01, cache)
    mtime = path.stat().st_mtime_ns
    before = dosmod.BUILD_COUNT
    again = dosmod.load_or_build(2, 2, Disk(), 0.01, cache_dir=cache, seed=99, settings=settings)
    assert dosmod.BUILD_COUNT == before and path.stat().st_mtime_ns == mtime
    for name in ("betas", "energies", "f", "log_denom", "boot_f", "boot_counts"):
        np.testing.assert_array_equal(getattr(again, name), getattr(d, name))
    for k, v in d.observables.items():
        np.testing.assert_array_equal(again.observables[k], v)


def test_tables_match_direct_reweighting(small_gas):
    """The tabulated curves (thermo.dos_tables) are interpolations of the direct MBAR
    reweighting: at energies and betas between table points they agree to a small
    fraction of the bootstrap error, and the tabulated error is the bootstrap error."""
    d, _, _ = small_gas
    lo, hi = d.energy_range()
    e = np.linspace(lo, hi, 41)[1:-1] + 0.37 * (hi - lo) / 40     # off the table's grid
    b_tab, err_tab = d.beta_micro(e)
    b_dir, err_dir = d.beta_micro(e, direct=True)
    ok = np.isfinite(b_dir) & np.isfinite(err_dir)    # NaN error: a replicate's range ends
    assert ok.sum() >= 30
    assert np.all(np.abs(b_tab[ok] - b_dir[ok]) < 0.2 * err_dir[ok])
    np.testing.assert_allclose(err_tab[ok], err_dir[ok], rtol=0.1)
    grid, mean, mean_err = d.canonical_curve("energy")
    beta = 0.5 * (grid[1:] + grid[:-1])[::7]
    direct, direct_err = d.mean_energy(beta)
    assert np.all(np.abs(np.interp(beta, grid, mean) - direct) < 0.2 * direct_err)
    np.testing.assert_allclose(d.log_z_spline()(beta), d.log_z(beta), atol=1e-4)


def test_tables_are_stored_and_loaded_objects_reused(small_gas):
    """A second process reads the tables from the cache file instead of recomputing
    them; within a process the loaded object itself is reused."""
    from thermo.domains import Disk
    d, cache, settings = small_gas
    path = dosmod.cache_path(2, 2, Disk(), 0.01, cache)
    back, _ = dosmod.load(path)
    assert back.has_tables()
    for name, value in d.tables.items():
        np.testing.assert_array_equal(back.tables[name], value)
    first = dosmod.load_or_build(2, 2, Disk(), 0.01, cache_dir=cache, settings=settings)
    assert dosmod.load_or_build(2, 2, Disk(), 0.01, cache_dir=cache, settings=settings) is first
