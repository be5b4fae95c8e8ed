"""thermo.mbar: our MBAR solver against an independent implementation (pymbar 4), on raw
samples and on the energy bins the builds use; the autocorrelation time on a known process."""

import numpy as np
import pytest
from dos_samples import one_vortex_result

from thermo.mbar import solve_mbar, tau_int


def test_mbar_free_energies_agree_with_pymbar(rng):
    """Independent implementation: pymbar 4 (Shirts & Chodera 2008) on the same u_kn."""
    pymbar = pytest.importorskip("pymbar")
    res = one_vortex_result(rng, np.linspace(-2.0, 0.5, 6), 300)
    flat = res.energies.reshape(-1)
    f, _ = solve_mbar(flat, res.betas, np.full(6, 300))
    ref = pymbar.MBAR(np.outer(res.betas, flat), np.full(6, 300)).f_k
    np.testing.assert_allclose(f - f[0], ref - ref[0], atol=1e-7)


def test_binned_mbar_agrees_with_pymbar_on_the_samples(rng):
    """MBAR solved on the fine energy bins of thermo.dos.tables.energy_bins (as builds do)
    against pymbar 4 (Shirts & Chodera 2008) on the unbinned samples: the binning changes
    the free energies by far less than their statistical error (~0.05 here)."""
    pymbar = pytest.importorskip("pymbar")
    from thermo.dos.tables import energy_bins
    res = one_vortex_result(rng, np.linspace(-2.0, 0.5, 6), 2000)
    flat = res.energies.reshape(-1)
    idx, e_bin = energy_bins(flat, res.betas)
    assert e_bin.size < flat.size / 2          # the bins do pool samples
    f, _ = solve_mbar(e_bin, res.betas, np.full(6, 2000), counts=np.bincount(idx),
                      f_init=np.zeros(6))
    ref = pymbar.MBAR(np.outer(res.betas, flat), np.full(6, 2000)).f_k
    np.testing.assert_allclose(f - f[0], ref - ref[0], atol=2e-3)


def test_autocorrelation_time_of_an_ar1_process(rng):
    """AR(1) x_t = a x_{t-1} + noise has tau_int = (1 + a) / (1 - a) [exact]."""
    a = 0.8
    x = np.zeros(200_000)
    noise = rng.standard_normal(x.size)
    for t in range(1, x.size):
        x[t] = a * x[t - 1] + noise[t]
    assert tau_int(x) == pytest.approx((1 + a) / (1 - a), rel=0.1)
