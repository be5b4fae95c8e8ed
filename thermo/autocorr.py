"""The one estimator of integrated autocorrelation times, for Monte Carlo chains and time series.

Used by the sampler (effective sample sizes of each rung), by MBAR's block bootstrap (block
lengths) and wherever correlated samples are counted.

Units: tau_int in units of the sampling interval.
"""

from __future__ import annotations

import numpy as np


def integrated_autocorr_time(x: np.ndarray, c: float = 5.0) -> float:
    """Integrated autocorrelation time with Sokal's automatic window.

    .. math:: \\tau_{int}(M) = 1 + 2\\sum_{t=1}^{M} \\rho(t),

    taking the smallest window M with M >= c tau_int(M) [A. D. Sokal, "Monte Carlo Methods in
    Statistical Mechanics: Foundations and New Algorithms" (1996); c = 5 is common practice]. With this
    definition the variance of the mean is tau_int Var(x) / n and the effective sample size
    n / tau_int.

    Parameters
    ----------
    x : array_like, shape (n,)
        A stationary time series.
    c : float
        Window factor.

    Returns
    -------
    float
        tau_int in units of the sampling interval (>= 0); NaN for a constant series.
    """
    return autocorr_window(x, c)[0]


def autocorr_window(x: np.ndarray, c: float = 5.0) -> tuple[float, int]:
    """:func:`integrated_autocorr_time` and the window M it chose (``(nan, 0)`` for a constant
    or too short series).

    Units: tau_int and M in units of the sampling interval.
    """
    y = np.asarray(x, dtype=np.float64)
    n = y.size
    if n < 2:
        return float("nan"), 0
    y = y - y.mean()
    f = np.fft.rfft(y, 2 * n)
    acf = np.fft.irfft(f * np.conj(f))[:n]
    if acf[0] <= 0.0:
        return float("nan"), 0
    rho = acf / acf[0]
    taus = 2.0 * np.cumsum(rho) - 1.0
    m = np.arange(n)
    ok = m >= c * taus
    window = int(np.argmax(ok)) if ok.any() else n - 1
    return float(taus[window]), window
