"""beta and omega of vortex configurations in the rotating ensemble exp[-beta (H - omega M)].

Sign convention: p(x) proportional to exp[-beta (H(x) - omega M(x))], M = sum_i s_i |u_i|^2
(the factor exp(beta omega M) favours M of the sign of beta omega). In the natural parameters (beta, gamma = beta omega) this is an
exponential family with sufficient statistics (H, M) (any statistics text):

* **Ensemble** (:func:`estimate_rotating_ensemble`). Shots are grouped by (N+, N-), each group
  g with its own (beta, omega) table (thermo.rotation.table); the groups share
  theta = (beta~ N, omega~ / N) (``common="beta_n"``, the mean-field scaling: H ~ N^2, M ~ N)
  or (beta~, omega~) (``common="beta"``). In both cases gamma_g = beta_g omega_g is common, so
  the log-likelihood

      l(theta) = sum_g W_g [-beta_g Hbar_g + gamma Mbar_g - ln Z_g(beta_g, omega_g)]

  is concave in (beta, gamma); its maximum (Newton in (beta, gamma) on the exact MBAR
  cumulants) solves <H>_g, <M>_g = the weighted means. W_g sums the shots' weights (1/tau_int
  for frames of a correlated run, as for beta alone), so the intervals count effectively
  independent shots. Intervals are profile-likelihood ones on the tabulated ln Z (chi^2 with
  one degree of freedom; the joint 95% region with two), and the test of omega = 0 is the
  likelihood ratio against the best fit at omega = 0 (chi^2_1; equivalent to gamma = 0).
* **One configuration** (:func:`estimate_rotating_single`): the microcanonical
  (dS/dH, -dS/dM / dS/dH) at its (H, M), from the canonical inverse (beta_c, gamma_c) whose
  means are (H, M) and the first Edgeworth correction: for the density p of x = (H, M) at
  (beta_c, gamma_c), S = ln Z + beta_c H - gamma_c M + ln p and at the mean
  d ln p / dx_a = -(1/2) L_ai k_ijk L_jk (L the inverse covariance, k the third cumulants;
  the two-variable form of thermo.dos.tables.beta_saddle_from_cumulants). Its intervals are
  the one-shot profile-likelihood intervals, extended to contain the value.
* **Honesty.** An ensemble estimate or interval that reaches ONE edge of the sampled
  (beta, omega) rectangle is redone on tables with that range doubled (:func:`widened_settings`,
  up to ``MAX_WIDEN`` times, each table cached like every build; ``extra["widened"]`` counts
  them); what still reaches an edge is reported as a bound on that side (``bounds``). A single
  configuration is not widened (its one-shot intervals usually span the range). The spread of the estimate over
  the table's bootstrap replicates (one Newton step each) widens the intervals in quadrature
  (``table_error``).

Units: beta in 1/E0, omega in E0 (per unit of M, M in the squared disk radius); beta~ N and
omega~ / N dimensionless.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy.stats import chi2

from thermo.energy import energy_batch
from thermo.estimate import group_shots, signs_of
from thermo.errors import ConfigurationError
from thermo.fit import Q68, Q95, Z95, level_set, widen
from thermo.rotation.cache import load_or_build_table
from thermo.rotation.table import DEFAULT_SETTINGS, RotatingSettings, RotatingTable

Q95_JOINT = float(chi2.ppf(0.95, 2))
#: how many times the sampled range may be doubled for one estimate (see widened_settings)
MAX_WIDEN = 2
#: fine grid of the likelihood surfaces (beta x omega points)
N_FINE = (201, 101)
COMMON = ("beta_n", "beta")


@dataclass(frozen=True)
class RotationEstimate:
    """beta and omega of a configuration or an ensemble.

    Attributes
    ----------
    beta, omega : estimates for the largest group (beta~, omega~).
    beta_ci68, beta_ci95, omega_ci68, omega_ci95 : profile intervals (a bound's open side is
        infinite).
    beta_n, omega_n : beta~ N and omega~ / N of the largest group; beta_n_ci95, omega_n_ci95.
    joint95 : ((beta lo, beta hi), (omega lo, omega hi)) bounding box of the joint 95% region.
    stderr : (se of beta, se of omega) from the Fisher information and the table error.
    table_error : (beta, omega) spread over the table's bootstrap replicates.
    omega_pvalue : likelihood-ratio p-value of omega = 0; omega_nonzero : p < 0.05 and the
        95% interval of omega excludes 0.
    bounds : tuple of "beta low", "beta high", "omega low", "omega high" edges reached.
    method, n_shots, n_effective, n_plus, n_minus, groups, common, verdict.

    Units: beta in 1/E0, omega in E0.
    """

    beta: float
    omega: float
    beta_ci68: tuple[float, float]
    beta_ci95: tuple[float, float]
    omega_ci68: tuple[float, float]
    omega_ci95: tuple[float, float]
    beta_n: float
    omega_n: float
    beta_n_ci95: tuple[float, float]
    omega_n_ci95: tuple[float, float]
    joint95: tuple
    stderr: tuple[float, float]
    table_error: tuple[float, float]
    omega_pvalue: float
    omega_nonzero: bool
    bounds: tuple
    method: str
    n_shots: int
    n_effective: float
    n_plus: int
    n_minus: int
    groups: tuple
    common: str = "beta_n"
    verdict: str = ""
    extra: dict = field(default_factory=dict)


@dataclass
class _Group:
    key: tuple[int, int]
    table: RotatingTable
    c: float          # beta_g = c theta_beta
    d: float          # omega_g = d theta_omega
    weight: float
    h_mean: float
    m_mean: float


def _stats(domain, key, shots) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Shot indices, H and M of one (N+, N-) group of :func:`thermo.estimate.group_shots`."""
    pos, idx = shots
    signs = signs_of(*key)
    return idx, energy_batch(pos, signs, domain), domain.angular_impulse(pos, signs)


def _theta_box(groups) -> tuple[tuple[float, float], tuple[float, float]]:
    lo_b = max(g.table.beta_range[0] / g.c for g in groups)
    hi_b = min(g.table.beta_range[1] / g.c for g in groups)
    lo_w = max(g.table.omega_range[0] / g.d for g in groups)
    hi_w = min(g.table.omega_range[1] / g.d for g in groups)
    if not (lo_b < hi_b and lo_w < hi_w):
        raise ConfigurationError("the groups' tables share no common (beta, omega) range")
    return (lo_b, hi_b), (lo_w, hi_w)


def _surface(groups, tb, tw) -> np.ndarray:
    """l(theta) on the grid tb x tw from the tables' ln Z splines."""
    ll = np.zeros((tb.size, tw.size))
    for g in groups:
        b, w = g.c * tb, g.d * tw
        lz = g.table.log_z_spline()(b, w)
        ll += g.weight * (-b[:, None] * g.h_mean + (b[:, None] * w[None, :]) * g.m_mean - lz)
    return ll


def _newton(groups, theta_b: float, gamma: float, replicate=None, steps: int = 30):
    """Maximise l in (theta_beta, gamma) by Newton from a start; returns (tb, gamma, fisher)."""
    box_b, _ = _theta_box(groups)
    clipped_before = False
    for _ in range(steps):
        score = np.zeros(2)
        info = np.zeros((2, 2))
        clipped = False
        for g in groups:
            b = g.c * theta_b
            w = gamma / b if abs(b) > 1e-12 else 0.0
            lo, hi = g.table.omega_range
            clipped |= not lo <= w <= hi
            w = float(np.clip(w, lo, hi))
            mean, cov, _ = g.table.cumulants(b if abs(b) > 1e-12 else 0.0,
                                             w if abs(b) > 1e-12 else 0.0, replicate,
                                             third=False)
            score += g.weight * np.array([g.c * (mean[0] - g.h_mean), g.m_mean - mean[1]])
            info += g.weight * np.array([[g.c ** 2 * cov[0, 0], -g.c * cov[0, 1]],
                                         [-g.c * cov[0, 1], cov[1, 1]]])
        try:
            step = np.linalg.solve(info, score)
        except np.linalg.LinAlgError:
            break
        if replicate is not None:       # one step from the central solution
            return theta_b + step[0], gamma + step[1], info
        if clipped and clipped_before:
            break       # the maximum lies beyond the sampled omegas: a bound (see _result)
        clipped_before = clipped
        theta_b = float(np.clip(theta_b + step[0], *box_b))
        gamma += step[1]
        # converged far below any statistical error (the intervals are ~1/sqrt(W) wide)
        if np.all(np.abs(step) < 1e-7 * (1 + abs(theta_b) + abs(gamma))):
            break
    return theta_b, gamma, info


def _profile(axis, prof, level, t_hat):
    lo, hi, at_lo, at_hi = level_set(axis, 2.0 * (prof.max() - prof), level, t_hat)
    return (lo, hi), at_lo, at_hi


def _open(ci, at_lo, at_hi):
    inf = float("inf")
    return (-inf if at_lo else ci[0], inf if at_hi else ci[1])


def _result(groups, theta_b, theta_w, ll, tb, tw, err, method, n_shots, n_eff, common,
            extend=False) -> RotationEstimate:
    """Intervals, bounds, the omega = 0 test and the verdict from a likelihood surface."""
    main = max(groups, key=lambda g: (g.weight, -abs(g.key[0] - g.key[1])))
    n = sum(main.key)
    prof_b, prof_w = ll.max(axis=1), ll.max(axis=0)
    cis, bounds = {}, []
    for name, axis, prof, hat, e in (("beta", tb, prof_b, theta_b, err[0]),
                                     ("omega", tw, prof_w, theta_w, err[1])):
        c68, _, _ = _profile(axis, prof, Q68, hat)
        c95, lo_edge, hi_edge = _profile(axis, prof, Q95, hat)
        if extend:           # one shot: the intervals contain the microcanonical value
            c68 = (min(c68[0], hat), max(c68[1], hat))
            c95 = (min(c95[0], hat), max(c95[1], hat))
        c68, c95 = widen(c68, hat, e, 1.0), widen(c95, hat, e, Z95)
        bounds += [f"{name} low"] * lo_edge + [f"{name} high"] * hi_edge
        cis[name] = (_open(c68, lo_edge, hi_edge), _open(c95, lo_edge, hi_edge))
    inside = 2.0 * (ll.max() - ll) <= Q95_JOINT
    rows, cols = np.flatnonzero(inside.any(axis=1)), np.flatnonzero(inside.any(axis=0))
    joint = ((float(tb[rows[0]]), float(tb[rows[-1]])), (float(tw[cols[0]]), float(tw[cols[-1]])))
    j0 = int(np.argmin(np.abs(tw)))
    lr = max(2.0 * (ll.max() - ll[:, j0].max()), 0.0) if tw[0] <= 0 <= tw[-1] else np.nan
    p = float(chi2.sf(lr, 1)) if np.isfinite(lr) else np.nan
    w95 = cis["omega"][1]
    nonzero = bool(np.isfinite(p) and p < 0.05 and not (w95[0] <= 0.0 <= w95[1]))
    to_b = (lambda t: t / n) if common == "beta_n" else (lambda t: t)
    to_w = (lambda t: t * n) if common == "beta_n" else (lambda t: t)
    bn = (lambda t: t) if common == "beta_n" else (lambda t: t * n)
    wn = (lambda t: t) if common == "beta_n" else (lambda t: t / n)
    beta, omega = to_b(theta_b), to_w(theta_w)
    words = ("omega significantly non-zero" if nonzero else
             "omega consistent with 0" if np.isfinite(p) else "omega = 0 not tested")
    b95, o95 = cis["beta"][1], cis["omega"][1]
    verdict = (f"beta~ N = {bn(theta_b):.3g} (95%: {bn(b95[0]):.3g} .. {bn(b95[1]):.3g}), "
               f"omega~ / N = {wn(theta_w):.3g} (95%: {wn(o95[0]):.3g} .. {wn(o95[1]):.3g}); "
               f"{words} (likelihood ratio p = {p:.2g})")
    if bounds:
        verdict += "; reaches the sampled range at " + ", ".join(bounds) + " (a bound there)"
    if "omega low" in bounds and "omega high" in bounds:
        verdict += "; omega is not determined (near beta = 0 the data hardly depend on it)"
    cis_b = tuple(tuple(to_b(x) for x in ci) for ci in cis["beta"])
    cis_w = tuple(tuple(to_w(x) for x in ci) for ci in cis["omega"])
    return RotationEstimate(
        beta=float(beta), omega=float(omega), beta_ci68=cis_b[0], beta_ci95=cis_b[1],
        omega_ci68=cis_w[0], omega_ci95=cis_w[1], beta_n=float(bn(theta_b)),
        omega_n=float(wn(theta_w)), beta_n_ci95=tuple(bn(x) for x in b95),
        omega_n_ci95=tuple(wn(x) for x in o95),
        joint95=(tuple(to_b(x) for x in joint[0]), tuple(to_w(x) for x in joint[1])),
        stderr=(float(to_b(err[2])), float(to_w(err[3]))),
        table_error=(float(to_b(err[0])), float(to_w(err[1]))), omega_pvalue=p,
        omega_nonzero=nonzero, bounds=tuple(bounds), method=method, n_shots=int(n_shots),
        n_effective=float(n_eff), n_plus=main.key[0], n_minus=main.key[1],
        groups=tuple((g.key[0], g.key[1]) for g in groups), common=common, verdict=verdict)


def _errors(groups, theta_b, gamma, info):
    """(table error of theta_b, of theta_w, Fisher se of theta_b, of theta_w)."""
    theta_w = gamma / theta_b if theta_b != 0 else 0.0
    n_boot = min(g.table.boot_log_denom.shape[0] for g in groups)
    reps = np.array([_newton(groups, theta_b, gamma, replicate=r)[:2] for r in range(n_boot)])
    with np.errstate(divide="ignore", invalid="ignore"):
        rep_w = reps[:, 1] / reps[:, 0]
    err_b = float(np.std(reps[:, 0], ddof=1))
    err_w = float(np.std(rep_w, ddof=1)) if theta_b != 0 else float("nan")
    cov = np.linalg.pinv(info)
    jac = np.array([[1.0, 0.0], [-gamma / theta_b ** 2, 1.0 / theta_b]]) if theta_b else np.eye(2)
    cov_bw = jac @ cov @ jac.T
    return err_b, err_w, float(np.sqrt(cov_bw[0, 0])), float(np.sqrt(cov_bw[1, 1])), theta_w


def _provider(domain, core_radius, cache_dir, settings, seed, progress, table_provider):
    if table_provider is not None:
        return table_provider
    return lambda npl, nmi: load_or_build_table(npl, nmi, domain, core_radius, cache_dir,
                                                seed, settings, progress)


def estimate_rotating_ensemble(configs: Sequence, domain: Any, core_radius: float, *,
                               weights: Sequence[float] | None = None, common: str = "beta_n",
                               cache_dir: Any = None,
                               settings: RotatingSettings = DEFAULT_SETTINGS,
                               seed: int | None = None,
                               table_provider: Callable[[int, int], RotatingTable] | None = None,
                               progress: Callable[[int, int], Any] | None = None
                               ) -> RotationEstimate:
    """Maximum-likelihood (beta, omega) of an ensemble of shots (module docstring).

    Parameters
    ----------
    configs : sequence of (positions (N, 2), signs (N,)); domain : a Disk; core_radius : a.
    weights : per-shot weights in (0, 1] (1/tau_int for frames of a correlated run).
    common : "beta_n" (groups share beta~ N, omega~ / N) or "beta" (beta~, omega~).
    cache_dir, settings, seed : the tables' cache (thermo.rotation.cache).
    table_provider : (n_plus, n_minus) -> RotatingTable, replacing the cache.
    progress : ``progress(done, total)`` of table builds, in sweeps.

    Units: beta in 1/E0, omega in E0.
    """
    if common not in COMMON:
        raise ConfigurationError(f"common = {common!r}; accepted: {', '.join(COMMON)}")
    grouped = group_shots(configs, domain, core_radius)
    n_shots = sum(len(v[1]) for v in grouped.values())
    if n_shots == 0:
        raise ConfigurationError("no configurations given; pass a list of (positions, signs)")
    w = np.ones(n_shots) if weights is None else np.asarray(weights, float)
    if w.shape != (n_shots,) or np.any(~np.isfinite(w)) or np.any(w <= 0) or np.any(w > 1):
        raise ConfigurationError(f"weights: need {n_shots} numbers in (0, 1], one per shot; "
                                 f"got shape {w.shape}")
    small = sorted(k for k in grouped if sum(k) < 2)
    if small:
        raise ConfigurationError(f"shots with fewer than two vortices (groups {small}): beta "
                                 "and omega are undefined for them; drop them")
    stats = {key: _stats(domain, key, shots) for key, shots in sorted(grouped.items())}
    widened = 0
    while True:
        provide = _provider(domain, core_radius, cache_dir, settings, seed, progress,
                            table_provider)
        groups = []
        for key, (idx, h, m) in stats.items():
            wg = w[idx]
            n = sum(key)
            c, d = (1.0 / n, float(n)) if common == "beta_n" else (1.0, 1.0)
            groups.append(_Group(key, provide(*key), c, d, float(wg.sum()),
                                 float(wg @ h / wg.sum()), float(wg @ m / wg.sum())))
        est = _fit(groups, "ensemble maximum likelihood", n_shots, float(w.sum()), common)
        wider = widened_settings(settings, est.bounds)
        if table_provider is not None or wider is None or widened >= MAX_WIDEN:
            return replace(est, extra={**est.extra, "widened": widened})
        settings, widened = wider, widened + 1


def widened_settings(settings: RotatingSettings, bounds) -> RotatingSettings | None:
    """Settings with the sampled range doubled on the axis whose ONE side an estimate reached.

    As the beta-only ladder is widened (thermo.estimate, ``reach``): ranges, not clipping.
    Both omega edges reached means omega is not determined (beta near 0), which a wider range
    does not cure; then only a one-sided beta bound widens. None when nothing is to widen.

    Units: omega_max_n dimensionless; beta in 1/E0.
    """
    b = {"beta low", "beta high"} & set(bounds)
    o = {"omega low", "omega high"} & set(bounds)
    changes = {}
    if len(o) == 1:
        changes["omega_max_n"] = 2.0 * settings.omega_max_n
    if len(b) == 1:
        changes.update(beta_max=2.0 * settings.beta_max, overshoot=2.0 * settings.overshoot,
                       n_betas=settings.n_betas + 4)
    return replace(settings, **changes) if changes else None


def _grid_fit(groups):
    """The likelihood surface on the fine grid and Newton's maximum from its grid maximum."""
    (b0, b1), (w0, w1) = _theta_box(groups)
    tb, tw = np.linspace(b0, b1, N_FINE[0]), np.linspace(w0, w1, N_FINE[1])
    ll = _surface(groups, tb, tw)
    i, j = np.unravel_index(np.argmax(ll), ll.shape)
    theta_b, gamma, info = _newton(groups, float(tb[i]), float(tb[i] * tw[j]))
    return tb, tw, ll, (i, j), theta_b, gamma, info


def _fit(groups, method, n_shots, n_eff, common, single_point=None,
         grid_fit=None) -> RotationEstimate:
    tb, tw, ll, (_, j), theta_b, gamma, info = grid_fit or _grid_fit(groups)
    w0, w1 = tw[0], tw[-1]
    t_b, t_g = theta_b, gamma
    e_b, e_w, se_b, se_w, theta_w = _errors(groups, t_b, t_g, info)
    if not (w0 <= theta_w <= w1) or not np.isfinite(theta_w):
        theta_w = float(tw[j])               # ill-determined omega (beta ~ 0): grid maximum
    extend = single_point is not None
    if extend:
        theta_b, theta_w = single_point
    return _result(groups, theta_b, theta_w, ll, tb, tw,
                   (e_b, e_w, np.hypot(se_b, e_b), np.hypot(se_w, e_w)), method, n_shots,
                   n_eff, common, extend=extend)


def microcanonical(table: RotatingTable, h: float, m: float, beta_c: float, gamma_c: float
                   ) -> tuple[float, float]:
    """(dS/dH, -dS/dM / dS/dH) at (h, m) from the canonical inverse (beta_c, gamma_c).

    Units: beta in 1/E0, omega in E0.
    """
    omega_c = gamma_c / beta_c if beta_c != 0 else 0.0
    _, cov, k3 = table.cumulants(beta_c, omega_c)
    lam = np.linalg.inv(cov)
    corr = -0.5 * np.einsum("ai,ijk,jk->a", lam, k3, lam)
    ds_dh = beta_c + corr[0]
    ds_dm = -gamma_c + corr[1]
    return float(ds_dh), float(-ds_dm / ds_dh) if ds_dh != 0 else float("nan")


def estimate_rotating_single(positions: Any, signs: Any, domain: Any, core_radius: float, *,
                             cache_dir: Any = None,
                             settings: RotatingSettings = DEFAULT_SETTINGS,
                             seed: int | None = None,
                             table_provider: Callable[[int, int], RotatingTable] | None = None,
                             progress: Callable[[int, int], Any] | None = None
                             ) -> RotationEstimate:
    """Microcanonical (beta, omega) of one configuration at its (H, M) (module docstring).

    Units: beta in 1/E0, omega in E0.
    """
    grouped = group_shots([(positions, signs)], domain, core_radius)
    key, shots = next(iter(grouped.items()))
    if sum(key) < 2:
        raise ConfigurationError(f"{sum(key)} vortex: beta and omega are undefined (for one "
                                 "vortex H and M are functions of one radius); need >= 2")
    _, h, m = _stats(domain, key, shots)
    provide = _provider(domain, core_radius, cache_dir, settings, seed, progress, table_provider)
    n = sum(key)
    g = _Group(key, provide(*key), 1.0 / n, float(n), 1.0, float(h[0]), float(m[0]))
    grid_fit = _grid_fit([g])
    tb, tw, _, (_, j), theta_b, gamma, _ = grid_fit
    beta_mic, omega_mic = microcanonical(g.table, g.h_mean, g.m_mean, theta_b / n, gamma)
    point = (float(np.clip(beta_mic * n, tb[0], tb[-1])),
             float(np.clip(omega_mic / n, tw[0], tw[-1])) if np.isfinite(omega_mic)
             else float(tw[j]))
    return _fit([g], "microcanonical", 1, 1.0, "beta_n", single_point=point, grid_fit=grid_fit)
