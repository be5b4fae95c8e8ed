"""The score equation of an ensemble fit and its intervals, on the ladder every group covers.

Groups g (thermo.estimate) share one parameter theta; group g sits at beta_g = c_g theta and
carries the weighted sum S_g of its statistic, its weight W_g and the canonical curves m_g,
v_g of that statistic (thermo.curves). The score and its variance are

    U(theta) = sum_g c_g [S_g - W_g m_g(c_g theta)],   V(theta) = sum_g c_g^2 W_g v_g(c_g theta);

the estimate is the root of U and the interval the set {U^2 <= q V} (Rao's score interval;
C. R. Rao, Proc. Camb. Phil. Soc. 44, 50 (1948)); P(theta < 0) is the confidence distribution
Phi(U(0)/sqrt V(0)). Every bootstrap replicate of the curves gives its own root: their spread is
the density of states' error. Results that reach an end of the grid say so (``limit``).

Units: theta in the parts' parameter (beta~ N for c = 1/N, beta~ for c = 1).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy.special import ndtr
from scipy.stats import chi2

from thermo.curves import Curves

Q68 = float(chi2.ppf(0.682689492, 1))   # = 1: one-sigma level
Q95 = float(chi2.ppf(0.95, 1))
Z95 = float(np.sqrt(Q95))


@dataclass(frozen=True)
class Part:
    """One group of an ensemble fit: c = d beta / d theta, weight W, statistic sum S."""

    key: tuple[int, int]
    c: float
    weight: float
    total: float
    curves: Curves


@dataclass(frozen=True)
class Solution:
    """The fit of theta (beta~ N or beta~): estimate, intervals and how they end."""

    theta: float
    ci68: tuple[float, float]
    ci95: tuple[float, float]
    limit: str          # "", "low" or "high": which end of the ladder the result reaches
    both_ends: bool     # the interval spans the whole common ladder
    dos_error: float
    fisher: float
    prob_negative: float
    span: tuple[float, float]


def connected(inside: np.ndarray, i0: int) -> tuple[int, int]:
    lo = hi = i0
    while lo > 0 and inside[lo - 1]:
        lo -= 1
    while hi < len(inside) - 1 and inside[hi + 1]:
        hi += 1
    return lo, hi


def score_root(theta, u) -> tuple[float, str]:
    """Root of an increasing u on the grid: (theta, "") or (edge, "low"/"high")."""
    if u[0] > 0:
        return float(theta[0]), "low"
    if u[-1] < 0:
        return float(theta[-1]), "high"
    i = int(np.flatnonzero(u <= 0)[-1]) if np.any(u <= 0) else 0
    i = min(i, len(u) - 2)
    du = u[i + 1] - u[i]
    frac = 0.0 if du == 0 else float(-u[i] / du)
    return float(theta[i] + min(max(frac, 0.0), 1.0) * (theta[i + 1] - theta[i])), ""


def level_set(theta, stat, level, t_hat) -> tuple[float, float, bool, bool]:
    """The connected set {stat <= level} around t_hat, edges interpolated, and whether it
    reaches the low / high end of the grid."""
    inside = stat <= level
    i0 = int(np.clip(np.searchsorted(theta, t_hat), 0, len(theta) - 1))
    if not inside[i0]:
        near = np.flatnonzero(inside)
        if near.size == 0:
            return t_hat, t_hat, bool(i0 == 0), bool(i0 == len(theta) - 1)
        i0 = int(near[np.argmin(np.abs(near - i0))])
    lo_i, hi_i = connected(inside, i0)

    def edge(i_in, i_out):
        x0, x1, y0, y1 = theta[i_in], theta[i_out], stat[i_in], stat[i_out]
        return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0)) if y1 != y0 else float(x0)

    lo = float(theta[0]) if lo_i == 0 else edge(lo_i, lo_i - 1)
    hi = float(theta[-1]) if hi_i == len(theta) - 1 else edge(hi_i, hi_i + 1)
    return lo, hi, lo_i == 0, hi_i == len(theta) - 1


def solve(parts: Sequence[Part], n_grid: int = 2001) -> Solution:
    """Root of the score U(theta) and the score intervals, over the ladder every group covers.

    Units: theta in the parts' parameter (beta~ N for c = 1/N, beta~ for c = 1).
    """
    lo = max(p.curves.beta[0] / p.c for p in parts)
    hi = min(p.curves.beta[-1] / p.c for p in parts)
    theta = np.linspace(lo, hi, n_grid)

    def score(mean_of):
        return sum(p.c * (p.total - p.weight * np.interp(p.c * theta, p.curves.beta, mean_of(p)))
                   for p in parts)

    u = score(lambda p: p.curves.mean)
    v = sum(p.c ** 2 * p.weight * np.interp(p.c * theta, p.curves.beta, p.curves.var)
            for p in parts)
    v = np.maximum(v, 1e-300)
    t_hat, side = score_root(theta, u)
    stat = u * u / v
    lo68, hi68, _, _ = level_set(theta, stat, Q68, t_hat)
    lo95, hi95, at_lo, at_hi = level_set(theta, stat, Q95, t_hat)
    limit = side or ("low" if at_lo and not at_hi else "high" if at_hi and not at_lo else "")
    both = at_lo and at_hi
    n_rep = min(p.curves.mean_reps.shape[0] for p in parts)
    i0 = int(np.argmin(np.abs(theta)))
    roots, pneg = [], []
    for r in range(n_rep):
        ur = score(lambda p: p.curves.mean_reps[r])
        tr, sr = score_root(theta, ur)
        if not sr:
            roots.append(tr)
        pneg.append(float(ndtr(ur[i0] / np.sqrt(v[i0]))))
    dos_err = float(np.std(roots, ddof=1)) if len(roots) > 1 else 0.0
    prob_neg = float(np.mean(pneg)) if pneg else float(ndtr(u[i0] / np.sqrt(v[i0])))
    fisher = 1.0 / float(np.sqrt(np.interp(t_hat, theta, v)))
    return Solution(theta=t_hat, ci68=(lo68, hi68), ci95=(lo95, hi95), limit=limit,
                    both_ends=both, dos_error=dos_err, fisher=fisher,
                    prob_negative=prob_neg, span=(float(lo), float(hi)))


def widen(ci, b_hat, extra, z):
    lo, hi = ci
    return (b_hat - float(np.hypot(b_hat - lo, z * extra)),
            b_hat + float(np.hypot(hi - b_hat, z * extra)))
