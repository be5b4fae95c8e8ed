"""Tests of thermo.rotation.table and thermo.rotation.cache: MBAR over (beta, omega), on disk."""

import warnings

import numpy as np
import pytest
from scipy import integrate

from thermo.domains.disk import Disk
from thermo.dos.cache import CacheWarning
from thermo.errors import SamplerError
from thermo.rotation.cache import load_or_build_table, table_path
from thermo.rotation.sampler import run_rotating
from thermo.rotation.table import RotatingSettings, table_from_samples

TINY = RotatingSettings(n_betas=4, n_omegas=2, n_sweeps=200, burn_in=50, n_boot=2)


def test_one_vortex_partition_function_over_beta_and_omega(rng):
    """[exact] One vortex of sign +1: Z(beta, omega) = pi int_0^{(1-a)^2} (1 - x)^(-beta)
    exp(beta omega x) dx (x = r^2; derivation in test_sampler.py), which is pi / (1 - beta)
    at omega = 0 without the core. The MBAR table's ln Z relative to its first state is
    compared at sampled and at intermediate states, exactly (by reweighting) and through the
    tabulated spline; the tolerance is a few times the bootstrap spread."""
    core = 1e-3
    res = run_rotating(Disk(), 1, 0, [0.6, 0.0, -1.0], [-1.0, 0.0, 1.0], 8000, core, rng, thin=4)
    tab = table_from_samples(res, 8, rng, "disk", {})
    xm = (1 - core) ** 2

    def log_z(b, w):
        return np.log(np.pi * integrate.quad(lambda x: (1 - x) ** (-b) * np.exp(b * w * x),
                                             0, xm)[0])
    b0, w0 = res.betas[0], res.omegas[0]
    spline = tab.log_z_spline()
    for b, w in ((0.6, 1.0), (0.3, 0.5), (0.0, 0.7), (-0.5, -0.5), (-1.0, 1.0), (-0.8, 0.2)):
        exact = log_z(b, w) - log_z(b0, w0)
        direct = tab.log_z(b, w)
        reps = np.array([tab.log_z(b, w, r) for r in range(8)])
        tol = 5 * reps.std(ddof=1) + 1e-3
        assert abs(direct - exact) < tol, (b, w, direct, exact, tol)
        assert abs(float(spline(b, w)[0, 0]) - direct) < 2e-3      # interpolation error
    # [exact] omega = 0 in closed form: Z(beta) = pi [1 - (1 - xm)^(1 - beta)] / (1 - beta),
    # -> pi / (1 - beta) as the core a -> 0 (the core costs 0.087 in ln Z at beta = 0.6 here)
    closed = np.log((1 - (1 - xm) ** 0.4) / 0.4) - np.log(xm)
    assert abs((tab.log_z(0.6, 0.0) - tab.log_z(0.0, 0.0)) - closed) < 0.02
    # the means of (H, M) at a state equal those of its own samples (MBAR self-consistency)
    mean, _, _ = tab.cumulants(res.betas[4], res.omegas[4])
    np.testing.assert_allclose(mean, [res.energies[4].mean(), res.impulses[4].mean()],
                               rtol=0.05, atol=0.01)
    with pytest.raises(SamplerError, match="outside the sampled states"):
        tab.check_state(2.0, 0.0)


def test_cache_reuses_exact_settings_and_rebuilds_damaged_entries(tmp_path):
    d = Disk()
    first = load_or_build_table(1, 1, d, 0.02, cache_dir=tmp_path, settings=TINY)
    path = table_path(1, 1, d, 0.02, tmp_path, TINY)
    assert path.exists()
    again = load_or_build_table(1, 1, d, 0.02, cache_dir=tmp_path, settings=TINY)
    assert again is first                               # remembered in this process
    other = RotatingSettings(n_betas=4, n_omegas=2, n_sweeps=200, burn_in=50, n_boot=2,
                             omega_max_n=0.5)
    assert table_path(1, 1, d, 0.02, tmp_path, other) != path      # the omega range is keyed
    path.write_bytes(b"not a zip file")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        rebuilt = load_or_build_table(1, 1, d, 0.02, cache_dir=tmp_path, settings=TINY)
    assert any(issubclass(w.category, CacheWarning) and str(path) in str(w.message)
               for w in caught)
    # seeded from the key: the rebuild gives the same samples
    np.testing.assert_array_equal(rebuilt.energies, first.energies)
    with pytest.raises(SamplerError, match="at least two vortices"):
        load_or_build_table(1, 0, d, 0.02, cache_dir=tmp_path, settings=TINY)
    with pytest.raises(SamplerError, match="n_omegas"):
        RotatingSettings(n_omegas=1)
