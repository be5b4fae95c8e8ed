"""Tests of thermo.dos.tables: the tabulated curves of a density of states."""

import numpy as np
import pytest
from dos_samples import small_gas_dos


@pytest.fixture(scope="module")
def small_gas():
    """2+2 neutral gas in the unit disk, core 0.01, modest effort (tests/dos_samples.py)."""
    return small_gas_dos()


def test_tables_match_direct_reweighting(small_gas):
    """The tabulated curves (thermo.dos.tables) are interpolations of the direct MBAR
    reweighting: at energies and betas between table points they agree to a small
    fraction of the bootstrap error, and the tabulated error is the bootstrap error."""
    d = small_gas
    lo, hi = d.energy_range()
    e = np.linspace(lo, hi, 41)[1:-1] + 0.37 * (hi - lo) / 40     # off the table's grid
    b_tab, err_tab = d.beta_micro(e)
    b_dir, err_dir = d.beta_micro(e, direct=True)
    ok = np.isfinite(b_dir) & np.isfinite(err_dir)    # NaN error: a replicate's range ends
    assert ok.sum() >= 30
    assert np.all(np.abs(b_tab[ok] - b_dir[ok]) < 0.2 * err_dir[ok])
    np.testing.assert_allclose(err_tab[ok], err_dir[ok], rtol=0.1)
    k_tab, kerr_tab = d.beta_micro(e, method="kernel")
    k_dir, kerr_dir = d.beta_micro(e, method="kernel", direct=True)
    ok = np.isfinite(k_dir) & np.isfinite(kerr_dir)
    assert ok.sum() >= 30
    assert np.all(np.abs(k_tab[ok] - k_dir[ok]) < 0.2 * kerr_dir[ok])
    np.testing.assert_allclose(kerr_tab[ok], kerr_dir[ok], rtol=0.1)
    grid, mean, mean_err = d.canonical_curve("energy")
    beta = 0.5 * (grid[1:] + grid[:-1])[::7]
    direct, direct_err = d.mean_energy(beta)
    assert np.all(np.abs(np.interp(beta, grid, mean) - direct) < 0.2 * direct_err)
    np.testing.assert_allclose(d.log_z_spline()(beta), d.log_z(beta), atol=1e-4)
