"""Tests of thermo.rotation.sampler: replica exchange over (beta, omega) states."""

import numpy as np
import pytest
from scipy import integrate

from thermo.autocorr import integrated_autocorr_time
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.errors import DomainError, SamplerError
from thermo.rotation.sampler import exchange_pairs, run_rotating, state_grid


def _mean_and_se(x):
    """Mean and its standard error sqrt(tau_int Var / n) for a correlated series."""
    tau = integrated_autocorr_time(x)
    return x.mean(), np.sqrt(max(tau, 1.0) * x.var(ddof=1) / len(x))


def test_one_vortex_radial_density_at_every_state(rng):
    """One vortex of sign s in the unit disk at (beta, omega).

    Derivation [exact]: H = ln(1 - r^2) (the image term, reference-values.md) and M = s r^2,
    so the weight exp[-beta (H - omega M)] = (1 - r^2)^(-beta) exp(beta omega s r^2). With
    x = r^2 the area element is dA = pi dx, so x has the density
    p(x) proportional to (1 - x)^(-beta) exp(beta omega s x) on [0, (1 - a)^2) (the hard core
    a keeps the centre a from the wall). At omega = 0, Z = pi int_0^1 (1-x)^(-beta) dx =
    pi / (1 - beta) (without the core). The means of x and x^2 are compared with quadrature;
    the states are sampled together, so the exchange rule is exercised too (a wrong rule
    would bias the states it connects). Both signs are checked.
    """
    core = 1e-3
    betas, omegas = [0.5, 0.0, -1.0], [-1.0, 0.0, 1.5]
    xm = (1 - core) ** 2
    for n_plus, n_minus, s in ((1, 0, 1), (0, 1, -1)):
        res = run_rotating(Disk(), n_plus, n_minus, betas, omegas, 12000, core, rng, thin=2)
        assert np.all(res.swap_acceptance[np.isfinite(res.swap_acceptance)] > 0.2)
        for k in range(res.betas.size):
            b, w = res.betas[k], res.omegas[k]
            x = (res.positions[k, :, 0] ** 2).sum(-1)
            np.testing.assert_allclose(res.impulses[k], s * x, atol=1e-9)   # M = s r^2

            def weight(u, b=b, w=w, s=s):
                return (1 - u) ** (-b) * np.exp(b * w * s * u)
            z = integrate.quad(weight, 0, xm)[0]
            for power in (1, 2):
                exact = integrate.quad(lambda u, p=power: u ** p * weight(u), 0, xm)[0] / z
                m, se = _mean_and_se(x ** power)
                assert abs(m - exact) < 4.5 * se, (b, w, power, m, exact, se)


def test_angular_impulse_at_beta_zero_has_variance_n_over_12(rng):
    """[exact] beta = 0: positions uniform, |u|^2 uniform on [0, 1], so M = sum s_i |u_i|^2 has
    mean 0 for a neutral gas and variance N/12 (reference-values.md); the tiny core changes this
    by O(a). A state at beta = 0 is the same for every omega; both are checked."""
    core = 1e-3
    res = run_rotating(Disk(), 3, 3, [0.0], [-2.0, 2.0], 20000, core, rng, thin=4)
    for k in range(2):
        m_series = res.impulses[k]
        mean, se = _mean_and_se(m_series)
        assert abs(mean) < 4.5 * se
        var = m_series.var(ddof=1)
        tau = max(integrated_autocorr_time(m_series), 1.0)
        # relative error of a variance ~ sqrt(2 tau / n) for a nearly Gaussian series
        assert abs(var - 6 / 12) < 4.5 * (6 / 12) * np.sqrt(2 * tau / m_series.size)


def test_state_grid_and_exchange_pairs_connect_neighbours():
    b, w = state_grid([1.0, 0.0, -1.0], [-1.0, 1.0])
    np.testing.assert_array_equal(b, [1, 1, 0, 0, -1, -1])
    np.testing.assert_array_equal(w, [-1, 1, -1, 1, -1, 1])
    pairs = exchange_pairs(3, 2)
    found = {tuple(p) for s in pairs for p in s if p[0] >= 0}
    # beta neighbours (0-2, 1-3, 2-4, 3-5) and omega neighbours (0-1, 2-3, 4-5), each once
    assert found == {(0, 2), (1, 3), (2, 4), (3, 5), (0, 1), (2, 3), (4, 5)}
    for s in pairs:                      # a set never uses a state twice
        used = [i for p in s if p[0] >= 0 for i in p]
        assert len(used) == len(set(used))


def test_bad_input_is_refused(rng):
    with pytest.raises(DomainError, match="does not conserve the angular impulse"):
        run_rotating(Box.from_sizes({"width": 1.0, "height": 1.0})[0], 1, 1, [0.0], [0.0],
                     10, 0.01, rng)
    with pytest.raises(SamplerError, match="omegas must be strictly monotonic"):
        run_rotating(Disk(), 1, 1, [0.0], [1.0, 1.0], 10, 0.01, rng)
    with pytest.raises(SamplerError, match="core_radius"):
        run_rotating(Disk(), 1, 1, [0.0], [0.0], 10, 0.0, rng)
