"""Tests of difference between two samples whose values are not all independent.

The simulated side of a comparison is made of frames of one or more runs: the frames of one run
are a correlated time series, different runs (seeds) are independent. The measured side is made
of shots, each independent. A permutation test or a two-sample Kolmogorov–Smirnov test that
counts every frame as an independent draw rejects a true null far too often. Here each side is
a set of *series*: a series is one run's frames in time order, or a single shot.

- Effective size: a series of n values with integrated autocorrelation time tau_int (Sokal's
  window M, :func:`thermo.autocorr.autocorr_window`) is worth n / tau_int independent values.
  On short series the windowed estimate is biased low (the subtracted sample mean takes part of
  the correlation); tau_int is multiplied by 1 + (2M + 1)/n [U. Wolff, Comput. Phys. Commun.
  156, 143 (2004), eq. (49)].
- Interval of the difference of means: normal, with the variance of each side's mean from its
  series, Var(mean_r) = tau_int,r s_r^2 / n_r [Sokal, as in thermo.autocorr], or the scatter of
  the series' means when that is larger (runs that disagree widen it); its p-value is the
  two-sided one of Student's t with the Welch–Satterthwaite degrees of freedom from the effective
  sizes [B. L. Welch, Biometrika 34, 28 (1947)]. Measured on AR(1) runs against independent
  shots (tests/thermo/data/test_units.py): a true null is rejected at the 5% level in about 8%
  of repeats for runs of n / tau_int = 16 effective frames, 5% for n / tau_int = 50. (A
  moving-block bootstrap with blocks of 2 tau_int rejected it in 25% for the first case.)
- Kolmogorov–Smirnov: the two-sample statistic D with the effective sizes in Stephens'
  approximation of the asymptotic distribution, p = Q_KS((sqrt(n_e) + 0.12 + 0.11/sqrt(n_e)) D),
  n_e = n_a n_b / (n_a + n_b) [M. A. Stephens, J. R. Stat. Soc. B 32, 115 (1970); W. H. Press
  et al., Numerical Recipes, 3rd ed., section 14.3.3].

Below :data:`MIN_EFFECTIVE` effectively independent values on a side no test is made; the
caller says so.

Units: as the values given; tau_int in units of the sampling interval of each series.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from thermo.autocorr import autocorr_window, integrated_autocorr_time
from thermo.energy import energy

#: Fewest effectively independent values on a side for an interval or a p-value (the
#: project's choice: below it the autocorrelation time itself is too uncertain, and a true
#: null was rejected in 11-13% of repeats at 8 effective frames).
MIN_EFFECTIVE = 10.0


@dataclass(frozen=True)
class SeriesSample:
    """The finite values of one side, grouped in series, with their autocorrelation times.

    Attributes
    ----------
    values : tuple of 1-D arrays, one per series, in time order (finite values only).
    tau : autocorrelation time of each series (1 for a single value or a short series).

    Units: as the values; tau in sampling intervals.
    """

    values: tuple[np.ndarray, ...]
    tau: tuple[float, ...]

    @classmethod
    def of(cls, x: np.ndarray, series: np.ndarray) -> "SeriesSample":
        """Group ``x`` (one value per shot, NaN where undefined) by ``series`` ids.

        Values of one series must be given in time order; a series with fewer than 4 finite
        values, or a constant one, counts its values as independent (tau = 1).
        """
        x = np.asarray(x, dtype=float)
        series = np.asarray(series)
        if x.shape != series.shape:
            raise ValueError(f"values {x.shape} and series ids {series.shape} differ in shape")
        groups, taus = [], []
        for sid in dict.fromkeys(series.tolist()):
            v = x[(series == sid) & np.isfinite(x)]
            if v.size == 0:
                continue
            tau = 1.0
            if v.size >= 4 and np.ptp(v) > 0:
                tau, window = autocorr_window(v)
                tau *= 1.0 + (2 * window + 1) / v.size       # Wolff's bias correction
            groups.append(v)
            taus.append(max(1.0, tau) if math.isfinite(tau) else 1.0)
        return cls(tuple(groups), tuple(taus))

    @property
    def n(self) -> int:
        return int(sum(v.size for v in self.values))

    @property
    def n_effective(self) -> float:
        """Sum over series of n / tau_int."""
        return float(sum(v.size / t for v, t in zip(self.values, self.tau)))

    def mean(self) -> float:
        return float(np.concatenate(self.values).mean()) if self.values else math.nan

    def variance_of_mean(self) -> float:
        """Var of the pooled mean (see the module notes): the larger of the within-series
        estimate sum_r n_r tau_r s_r^2 / n^2 (s_r^2 about the pooled mean) and, for two or
        more series, the between-series one, the scatter of the series means over their
        number (runs whose means differ by more than their own errors widen it)."""
        m = self.mean()
        within = sum(v.size * t * float(np.mean((v - m) ** 2))
                     for v, t in zip(self.values, self.tau)) / self.n**2
        within *= self.n / max(self.n - 1, 1)     # the n / (n - 1) of an unbiased variance
        if len(self.values) < 2:
            return within
        means = np.array([v.mean() for v in self.values])
        return max(within, float(means.var(ddof=1)) / len(means))


@dataclass(frozen=True)
class Difference:
    """Difference of means of two sides with its interval and p-values.

    Attributes
    ----------
    mean_a, mean_b, difference : the means and a - b.
    ci95 : Student-t 95% interval of the difference (NaN, NaN when no test is made).
    se : standard error of the difference.
    p_mean : two-sided p-value of the difference of means (NaN when no test).
    p_ks : Kolmogorov–Smirnov p-value with effective sizes (NaN when no test).
    n_a, n_b : values used; n_eff_a, n_eff_b : effectively independent values.
    note : why no test was made, or "".

    Units: as the values.
    """

    mean_a: float
    mean_b: float
    difference: float
    ci95: tuple[float, float]
    se: float
    p_mean: float
    p_ks: float
    n_a: int
    n_b: int
    n_eff_a: float
    n_eff_b: float
    note: str = ""


def ks_pvalue(statistic: float, n_a: float, n_b: float) -> float:
    """Two-sample Kolmogorov–Smirnov p-value of ``statistic`` for (effective) sizes n_a, n_b
    (Stephens' approximation, see the module notes)."""
    ne = n_a * n_b / (n_a + n_b)
    root = math.sqrt(ne)
    return float(min(1.0, stats.kstwobign.sf((root + 0.12 + 0.11 / root) * statistic)))


def difference_of_means(a: SeriesSample, b: SeriesSample,
                        labels: tuple[str, str] = ("first", "second")) -> Difference:
    """Compare the means and distributions of two sides (see the module notes); ``labels``
    name the sides in the note of a test not made.

    Units: as the values.
    """
    mean_a, mean_b = a.mean(), b.mean()
    nan2 = (math.nan, math.nan)
    base = dict(mean_a=mean_a, mean_b=mean_b, difference=mean_a - mean_b, n_a=a.n, n_b=b.n,
                n_eff_a=a.n_effective, n_eff_b=b.n_effective)
    short = [f"{side} {s.n_effective:.3g}" for side, s in zip(labels, (a, b))
             if s.n_effective < MIN_EFFECTIVE]
    if short:
        return Difference(ci95=nan2, se=math.nan, p_mean=math.nan, p_ks=math.nan,
                          note=(f"no test: effectively independent values {', '.join(short)} "
                                f"(fewer than {MIN_EFFECTIVE:g}); add runs (seeds), frames "
                                f"further apart or shots"), **base)
    xa, xb = np.concatenate(a.values), np.concatenate(b.values)
    if np.ptp(np.concatenate([xa, xb])) == 0:
        return Difference(ci95=(0.0, 0.0), se=0.0, p_mean=1.0, p_ks=1.0, **base)
    va, vb = a.variance_of_mean(), b.variance_of_mean()
    se = math.sqrt(va + vb)
    d = mean_a - mean_b
    dof = (va + vb) ** 2 / (va**2 / (a.n_effective - 1) + vb**2 / (b.n_effective - 1)) \
        if va + vb > 0 else math.inf
    z = float(stats.t.ppf(0.975, dof))
    p_mean = float(2 * stats.t.sf(abs(d) / se, dof)) if se > 0 else float(d == 0)
    p_ks = ks_pvalue(float(stats.ks_2samp(xa, xb).statistic), a.n_effective, b.n_effective)
    return Difference(ci95=(d - z * se, d + z * se), se=se, p_mean=p_mean, p_ks=p_ks, **base)


def mean_interval(sample: SeriesSample, lower: float = -math.inf, upper: float = math.inf,
                  level: float = 0.95) -> tuple[float, float, float]:
    """The mean of one side with its Student-t interval from the effective size (see the
    module notes), cut to the quantity's range [lower, upper] (counts >= 0, fractions in
    [0, 1]); (nan, nan, nan) without two values, (mean, nan, nan) without spread estimate.

    Units: as the values.
    """
    if sample.n < 2:
        m = sample.mean() if sample.n else math.nan
        return m, math.nan, math.nan
    m = sample.mean()
    se = math.sqrt(sample.variance_of_mean())
    dof = max(sample.n_effective - 1.0, 1.0)
    half = float(stats.t.ppf(0.5 + level / 2, dof)) * se
    return m, max(lower, m - half), min(upper, m + half)


def series_weights(configs, domain) -> tuple[np.ndarray, float]:
    """Weights 1/tau_int for the frames of one run (for the fit of beta), and tau_int.

    tau_int is the integrated autocorrelation time (thermo.autocorr, Sokal's window) of the
    energy per vortex along the frames; a series of n frames is worth n / tau_int independent
    shots. Frames with fewer than two vortices are skipped for the series; fewer than 4 usable
    frames count as independent (tau too uncertain to estimate; said in the record). (No
    short-series correction here: the coverage of beta with these weights was measured as it
    is, tests/thermo/test_honest_intervals.py.)

    Units: tau_int in frames.
    """
    e = np.array([energy(p, s, domain) / len(s) for p, s in configs if len(s) >= 2])
    tau = integrated_autocorr_time(e) if e.size >= 4 else math.nan
    tau = max(1.0, tau) if math.isfinite(tau) else 1.0
    return np.full(len(configs), 1.0 / tau), float(tau)
