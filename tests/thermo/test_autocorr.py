"""Tests of thermo.autocorr: the integrated autocorrelation time."""

import numpy as np
import pytest

from thermo.autocorr import integrated_autocorr_time


def test_autocorrelation_time_of_ar1(rng):
    # AR(1) x_t = phi x_{t-1} + noise has rho(t) = phi^t, so tau_int = (1 + phi)/(1 - phi)
    # [exact]. Sokal's error estimate var(tau)/tau^2 ~ 2(2M+1)/n gives ~3 %; allow 12 %.
    phi, n = 0.8, 200_000
    noise = rng.normal(size=n)
    x = np.empty(n)
    x[0] = noise[0] / np.sqrt(1 - phi**2)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + noise[t]
    assert integrated_autocorr_time(x) == pytest.approx((1 + phi) / (1 - phi), rel=0.12)
    assert integrated_autocorr_time(noise) == pytest.approx(1.0, abs=0.1)
    assert np.isnan(integrated_autocorr_time(np.ones(100)))
