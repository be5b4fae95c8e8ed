"""Inverse temperature beta of vortex configurations, with intervals and a verdict.

* Ensemble of shots: maximum likelihood in the canonical ensemble. The Boltzmann
  distribution is an exponential family in beta with sufficient statistic E, so the
  estimate solves  <E>_beta = mean(E)  (any statistics text; reference-values.md). Shots
  with different (N+, N-) are grouped; each group has its own density of states and the
  log-likelihoods add:  l(beta) = sum_g [-beta sum_{i in g} E_i - n_g ln Z_g(beta)].
  Intervals: profile likelihood (2 [l_max - l(beta)] <= chi2_1 quantile, 68.27% and 95%),
  widened in quadrature by the spread of the estimate over the density-of-states bootstrap.
* One shot: the microcanonical beta(E) = dS/dE at its energy. Its interval is the set of
  canonical betas under which one draw of the energy is typical (the one-shot likelihood
  interval: the finite-N energy fluctuation), again widened by the density-of-states error.
  So the interval answers "which bath temperatures could have produced this snapshot".
* Cross-check: D, C1 and the cluster fraction averaged over the shots are inverted through
  their canonical curves; disagreement with the energy estimate by more than
  ``equilibrium_z`` combined standard errors is flagged as "not in equilibrium".

"Confidence" of the sign: the flat-prior posterior probability P(beta < 0), i.e. the
normalised likelihood integrated over beta < 0 within the sampled ladder, averaged over the
density-of-states bootstrap replicates.

Units: energies in E0 = rho kappa^2/(4 pi); beta in 1/E0 (beta~); positions scaled by the
domain size.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

import numpy as np
from scipy.optimize import brentq
from scipy.special import jn_zeros
from scipy.stats import chi2

from thermo.classify import structure_observables
from thermo.dos.model import DensityOfStates
from thermo.dos.build import DosSettings
from thermo.dos.cache import load_or_build
from thermo.energy import energy_batch, validate_configuration
from thermo.errors import ConfigurationError

STRUCTURE_OBSERVABLES = ("dipole_moment", "c1", "cluster_fraction")
_Q68 = float(chi2.ppf(0.682689492, 1))   # = 1: one-sigma profile-likelihood level
_Q95 = float(chi2.ppf(0.95, 1))
# bootstrap replicates used at estimate time (cost ~ replicates x grid x samples)
_MAX_REPS = 20


@dataclass(frozen=True)
class BetaEstimate:
    """Result of a temperature estimate.

    Attributes
    ----------
    beta : estimate (NaN when undefined, see ``verdict``).
    beta_ci68, beta_ci95 : (low, high) intervals.
    stderr : Fisher standard error [sum_g n_g Var_g(E)]^(-1/2) at beta, combined in
        quadrature with the density-of-states bootstrap error.
    method : "ensemble maximum likelihood", "microcanonical" or "undefined".
    n_shots : number of configurations; n_plus, n_minus : vortex numbers of the largest
        group; groups : tuple of (n_plus, n_minus, n_shots) for every group.
    energy_per_vortex : mean energy / N (E0 per vortex).
    temperature_sign : "negative", "positive" or "undetermined" (95% interval contains 0).
    prob_negative : flat-prior posterior probability that beta < 0.
    clustering : mean over shots of D, C1, dipole/cluster/free fractions, nn distance.
    structure_betas : name -> (beta, standard error) from inverting canonical curves.
    not_in_equilibrium : True when a structure estimate disagrees with the energy one.
    thresholds : name -> beta value (collapse bounds, clustering onset) for the largest group.
    regime : where beta sits relative to the thresholds, in words.
    verdict : one plain-language sentence.
    range_limited : "low" or "high" when the estimate or its 95% interval reaches the end of
        the beta ladder the density of states was built on (the true value may lie beyond it;
        the interval is then one-sided in truth), else "".

    Units: beta in 1/E0; energy_per_vortex in E0; D and distances in the domain size.
    """

    beta: float
    beta_ci68: tuple[float, float]
    beta_ci95: tuple[float, float]
    stderr: float
    method: str
    n_shots: int
    n_plus: int
    n_minus: int
    groups: tuple
    energy_per_vortex: float
    temperature_sign: str
    prob_negative: float
    clustering: dict = field(default_factory=dict)
    structure_betas: dict = field(default_factory=dict)
    not_in_equilibrium: bool = False
    thresholds: dict = field(default_factory=dict)
    regime: str = ""
    verdict: str = ""
    range_limited: str = ""


def thresholds(n_plus: int, n_minus: int, domain: Any = None) -> dict[str, float]:
    """Known landmarks on the beta axis for (N+, N-).

    * ``pair_collapse`` = 1: a +- pair (or a vortex and its image) collapses for beta > 1
      without a core [exact power counting, reference-values.md].
    * ``like_sign_collapse`` = -2 / max(N+, N-): k like-sign vortices shrinking together have
      E ~ -k(k-1) ln r and phase space r^(2k-3) dr, integrable iff beta > -2/k; this gives
      -4/N for a neutral gas and -2/N for one species [exact; Caglioti et al., CMP 143, 501
      (1992) for the mean-field limit].
    * ``clustering_onset`` = -j_{1,1}^2 / (4 N) for a neutral gas in a disk [pub: Esler &
      Ashbee, JFM (2015)]; absent otherwise (no published value used here).

    Units: 1/E0.
    """
    n = n_plus + n_minus
    out = {"pair_collapse": 1.0}
    if max(n_plus, n_minus) >= 2:
        out["like_sign_collapse"] = -2.0 / max(n_plus, n_minus)
    is_disk = domain is None or getattr(domain, "kind", "disk") == "disk"
    if n_plus == n_minus and n >= 2 and is_disk:
        out["clustering_onset"] = -float(jn_zeros(1, 1)[0]) ** 2 / 4.0 / n
    return out


def _regime(beta: float, th: dict[str, float], n: int) -> str:
    if not np.isfinite(beta):
        return "undefined"
    parts = [f"beta~ N = {beta * n:.3g}"]
    if "clustering_onset" in th:
        onset = th["clustering_onset"]
        parts.append("beyond the mean-field clustering onset (beta~ N = "
                     f"{onset * n:.4g})" if beta < onset else
                     f"above the clustering onset (beta~ N = {onset * n:.4g})")
    if "like_sign_collapse" in th and beta < th["like_sign_collapse"]:
        parts.append("past the like-sign collapse bound (held up only by the core)")
    if beta > th["pair_collapse"]:
        parts.append("past the pair-collapse bound beta~ = 1 (held up only by the core)")
    return "; ".join(parts)


def _undefined(n_shots: int, n_plus: int, n_minus: int, why: str) -> BetaEstimate:
    nan = float("nan")
    return BetaEstimate(beta=nan, beta_ci68=(nan, nan), beta_ci95=(nan, nan), stderr=nan,
                        method="undefined", n_shots=n_shots, n_plus=n_plus, n_minus=n_minus,
                        groups=((n_plus, n_minus, n_shots),), energy_per_vortex=nan,
                        temperature_sign="undetermined", prob_negative=nan,
                        regime="undefined", verdict=why)


def _normalise(configs: Sequence, domain: Any, core_radius: float):
    """Validate shots and group them by (N+, N-), positive vortices first."""
    groups: dict[tuple[int, int], list[np.ndarray]] = {}
    for k, item in enumerate(configs):
        try:
            pos, signs = item
        except (TypeError, ValueError) as exc:
            raise ConfigurationError(
                f"shot {k}: expected a (positions (N, 2), signs (N,)) pair") from exc
        try:
            p, s = validate_configuration(pos, signs, domain, core_radius)
        except ConfigurationError as exc:
            raise ConfigurationError(f"shot {k}: {exc}") from exc
        order = np.argsort(-s, kind="stable")
        key = (int(np.sum(s > 0)), int(np.sum(s < 0)))
        groups.setdefault(key, []).append(p[order])
    return {k: np.stack(v) for k, v in groups.items()}


def _signs(n_plus: int, n_minus: int) -> np.ndarray:
    return np.concatenate([np.ones(n_plus, int), -np.ones(n_minus, int)])


class _Group:
    """One (N+, N-) group: its shots, energies and ln Z(beta) (splines of the DOS tables)."""

    def __init__(self, key, pos, domain, dos: DensityOfStates):
        self.n_plus, self.n_minus = key
        self.pos = pos
        self.dos = dos
        self.energies = energy_batch(pos, _signs(*key), domain)
        self.lz = dos.log_z_spline()

    @property
    def lz_reps(self) -> list:
        return self.dos.log_z_replicate_splines(max_replicates=_MAX_REPS)

    def mean_energy(self, beta: float) -> float:
        d = self.dos
        return float(d._moments(np.array([beta]), d.energies, d.log_denom, None)[0][0])

    def var_energy(self, beta: float) -> float:
        d = self.dos
        return float(d._moments(np.array([beta]), d.energies, d.log_denom, None)[1][0])


def _interval(beta_grid, ll, level, b_hat):
    """Profile-likelihood interval {beta: 2 (l_max - l) <= level} around b_hat."""
    drop = 2.0 * (ll.max() - ll)
    inside = drop <= level
    idx = np.flatnonzero(inside)
    lo_i, hi_i = idx.min(), idx.max()

    def edge(i_in, i_out):
        if i_out < 0 or i_out >= len(beta_grid):
            return float(beta_grid[i_in])
        x0, x1, y0, y1 = beta_grid[i_in], beta_grid[i_out], drop[i_in], drop[i_out]
        return float(x0 + (level - y0) * (x1 - x0) / (y1 - y0))

    return edge(lo_i, lo_i - 1), edge(hi_i, hi_i + 1)


def _widen(ci, b_hat, extra, z):
    lo, hi = ci
    return (b_hat - float(np.hypot(b_hat - lo, z * extra)),
            b_hat + float(np.hypot(hi - b_hat, z * extra)))


def _structure(group: _Group, beta_grid, b_hat, se_hat, z_max):
    """Invert the canonical curves of the structure observables at the shots' means."""
    obs = structure_observables(group.pos, _signs(group.n_plus, group.n_minus))
    means = {k: float(np.mean(v)) for k, v in obs.items()}
    found, flag = {}, False
    n = len(group.pos)
    if n < 2 or not group.dos.observables:
        return means, found, flag
    names = [k for k in STRUCTURE_OBSERVABLES if k in group.dos.observables]
    curves = {}
    for name in names:
        grid, mean, err = group.dos.canonical_curve(name)
        inside = (grid >= beta_grid[0]) & (grid <= beta_grid[-1])
        curves[name] = (mean[inside], err[inside])
    coarse = grid[inside]
    for name in names:
        curve, curve_err = curves[name]
        target = means[name]
        se_obs = float(np.std(obs[name], ddof=1) / np.sqrt(n))
        diff = curve - target
        cross = np.flatnonzero(np.sign(diff[:-1]) != np.sign(diff[1:]))
        if cross.size == 0:
            found[name] = (float("nan"), float("nan"))
            # the shots' mean lies outside the whole canonical curve: not an equilibrium value
            if np.min(np.abs(diff) - 3 * np.hypot(curve_err, se_obs)) > 0:
                flag = True
            continue
        cands = [coarse[i] - diff[i] * (coarse[i + 1] - coarse[i]) / (diff[i + 1] - diff[i])
                 for i in cross]
        j = int(np.argmin(np.abs(np.array(cands) - b_hat)))
        i = cross[j]
        slope = (curve[i + 1] - curve[i]) / (coarse[i + 1] - coarse[i])
        err = float(np.hypot(se_obs, curve_err[i]) / max(abs(slope), 1e-300))
        found[name] = (float(cands[j]), err)
        if abs(cands[j] - b_hat) > z_max * np.hypot(err, se_hat):
            flag = True
    return means, found, flag


def _sign_words(prob_neg: float, ci95) -> tuple[str, str]:
    if ci95[1] < 0:
        return "negative", "negative temperature (clustered side)"
    if ci95[0] > 0:
        return "positive", "positive temperature"
    return "undetermined", "temperature sign not resolved"


def _range_limit(b_hat, ci95, beta_range) -> str:
    """"low"/"high" when the estimate or its 95% interval runs into the end of the ladder."""
    lo, hi = beta_range
    tol = 1e-6 * max(1.0, hi - lo)
    if min(b_hat, ci95[0]) <= lo + tol:
        return "low"
    if max(b_hat, ci95[1]) >= hi - tol:
        return "high"
    return ""


def _finish(b_hat, ci68, ci95, se, prob_neg, method, groups, n_shots, e_mean, n_main,
            key_main, domain, clustering, structure_betas, flag, beta_range):
    th = thresholds(*key_main, domain)
    limit = _range_limit(b_hat, ci95, beta_range)
    sign, words = _sign_words(prob_neg, ci95)
    conf = prob_neg if sign != "positive" else 1.0 - prob_neg
    verdict = (f"{words} with {100 * conf:.0f}% confidence (flat-prior probability of that "
               f"sign): beta~ = {b_hat:.4g} (95%: {ci95[0]:.4g} .. {ci95[1]:.4g}), "
               f"{_regime(b_hat, th, n_main)}")
    if sign == "undetermined":
        verdict = (f"{words}: P(beta~ < 0) = {100 * prob_neg:.0f}%, beta~ = {b_hat:.4g} "
                   f"(95%: {ci95[0]:.4g} .. {ci95[1]:.4g}), {_regime(b_hat, th, n_main)}")
    if limit:
        edge = beta_range[0] if limit == "low" else beta_range[1]
        verdict += (f"; the {'low' if limit == 'low' else 'high'} end of the 95% interval is the "
                    f"end of the sampled ladder (beta~ N = {edge * n_main:.3g}): the energy lies "
                    f"at or beyond what the density of states covers, so beta~ may be "
                    f"{'lower' if limit == 'low' else 'higher'} still")
    if flag:
        verdict += "; structure and energy disagree: not in equilibrium"
    return BetaEstimate(
        beta=float(b_hat), beta_ci68=ci68, beta_ci95=ci95, stderr=float(se), method=method,
        n_shots=n_shots, n_plus=key_main[0], n_minus=key_main[1], groups=groups,
        energy_per_vortex=float(e_mean), temperature_sign=sign, prob_negative=float(prob_neg),
        clustering=clustering, structure_betas=structure_betas, not_in_equilibrium=flag,
        thresholds=th, regime=_regime(b_hat, th, n_main), verdict=verdict,
        range_limited=limit)


def _prepare(configs, domain, core_radius, dos_provider, cache_dir, settings, seed):
    grouped = _normalise(configs, domain, core_radius)
    if not grouped:
        raise ConfigurationError("no configurations given; pass a list of (positions, signs)")
    counts = Counter({k: len(v) for k, v in grouped.items()})
    key_main = counts.most_common(1)[0][0]
    provider = dos_provider or (lambda npl, nmi: load_or_build(
        npl, nmi, domain, core_radius, cache_dir=cache_dir, seed=seed, settings=settings))
    return grouped, counts, key_main, provider


def estimate_ensemble(configs: Sequence, domain: Any, core_radius: float, *,
                      cache_dir: Any = None, settings: DosSettings = DosSettings(),
                      seed: int = 0, rng: np.random.Generator | None = None,
                      dos_provider: Callable[[int, int], DensityOfStates] | None = None,
                      equilibrium_z: float = 3.0, n_grid: int = 2001) -> BetaEstimate:
    """Maximum-likelihood beta of an ensemble of shots (see the module docstring).

    Parameters
    ----------
    configs : sequence of (positions (N, 2), signs (N,)) pairs; N+ / N- may differ per shot.
    domain : thermo.domains.Disk or Box; core_radius : hard-core radius a (length unit).
    cache_dir, settings, seed : passed to :func:`thermo.dos.cache.load_or_build`.
    rng : if given, its first draw seeds a density-of-states build (instead of ``seed``).
    dos_provider : callable (n_plus, n_minus) -> DensityOfStates, replacing the cache.
    equilibrium_z : disagreement (in combined standard errors) that sets
        ``not_in_equilibrium``.
    n_grid : points of the beta grid for the likelihood.

    Returns
    -------
    BetaEstimate

    Units: beta in 1/E0; positions in the domain size.
    """
    if rng is not None:
        seed = int(rng.integers(2 ** 31))
    grouped, counts, key_main, provider = _prepare(configs, domain, core_radius, dos_provider,
                                                   cache_dir, settings, seed)
    n_shots = sum(counts.values())
    groups_t = tuple((k[0], k[1], counts[k]) for k in sorted(counts))
    if sum(key_main) < 2:
        return _undefined(n_shots, *key_main, "beta undefined for one vortex: a lone vortex "
                          "has no partner to exchange energy with, so there is no vortex-gas "
                          "temperature to measure (need at least two vortices per shot)")
    if any(sum(k) < 2 for k in counts):
        raise ConfigurationError(f"shots with fewer than two vortices mixed with others: "
                                 f"groups {groups_t}; drop them (beta undefined for one vortex)")
    doses = {k: provider(*k) for k in grouped}
    lo = max(d.beta_range[0] for d in doses.values())
    hi = min(d.beta_range[1] for d in doses.values())
    gs = [_Group(k, grouped[k], domain, doses[k]) for k in grouped]

    def score(b):
        return sum(len(g.energies) * g.mean_energy(b) - g.energies.sum() for g in gs)

    fine = np.linspace(lo, hi, n_grid)
    ll = sum(-fine * g.energies.sum() - len(g.energies) * g.lz(fine) for g in gs)
    s_lo, s_hi = score(lo), score(hi)
    if s_lo * s_hi < 0:
        b_hat = brentq(score, lo, hi, xtol=1e-10)
    else:
        b_hat = float(fine[np.argmax(ll)])   # mean energy beyond the ladder: edge estimate
    ll_b = sum(-b_hat * g.energies.sum() - len(g.energies) * g.lz(b_hat) for g in gs)
    ll = np.maximum(ll, -np.inf)
    ll_full = np.append(ll, ll_b)
    order = np.argsort(np.append(fine, b_hat))
    bg, llg = np.append(fine, b_hat)[order], ll_full[order]
    ci68, ci95 = _interval(bg, llg, _Q68, b_hat), _interval(bg, llg, _Q95, b_hat)

    # density-of-states uncertainty: re-maximise with every bootstrap replicate
    n_rep = min(len(g.lz_reps) for g in gs)
    reps, post_neg = [], []
    for r in range(n_rep):
        llr = sum(-fine * g.energies.sum() - len(g.energies) * g.lz_reps[r](fine) for g in gs)
        reps.append(fine[np.argmax(llr)])
        w = np.exp(llr - llr.max())
        post_neg.append(w[fine < 0].sum() / w.sum())
    dos_err = float(np.std(reps, ddof=1)) if n_rep > 1 else 0.0
    ci68, ci95 = _widen(ci68, b_hat, dos_err, 1.0), _widen(ci95, b_hat, dos_err, 1.96)
    fisher = 1.0 / np.sqrt(sum(len(g.energies) * g.var_energy(b_hat) for g in gs))
    se = float(np.hypot(fisher, dos_err))
    w = np.exp(ll - ll.max())
    prob_neg = float(np.mean(post_neg)) if post_neg else float(w[fine < 0].sum() / w.sum())

    main = next(g for g in gs if (g.n_plus, g.n_minus) == key_main)
    clustering, structure_betas, flag = _structure(main, fine, b_hat, se, equilibrium_z)
    e_mean = float(np.mean(np.concatenate([g.energies / (g.n_plus + g.n_minus) for g in gs])))
    return _finish(b_hat, ci68, ci95, se, prob_neg, "ensemble maximum likelihood", groups_t,
                   n_shots, e_mean, sum(key_main), key_main, domain, clustering,
                   structure_betas, flag, (lo, hi))


#: the name thermo.data.compare looks for
estimate_ensemble_beta = estimate_ensemble


def estimate_single(positions: Any, signs: Any, domain: Any, core_radius: float, *,
                    cache_dir: Any = None, settings: DosSettings = DosSettings(),
                    seed: int = 0,
                    dos_provider: Callable[[int, int], DensityOfStates] | None = None
                    ) -> BetaEstimate:
    """beta of one configuration: microcanonical beta(E) at its energy.

    ``beta`` is dS/dE at the shot's energy (the temperature of an isolated gas with that
    energy). ``beta_ci68``/``beta_ci95`` are the one-shot likelihood intervals (canonical
    betas under which this energy is typical, i.e. the finite-N energy fluctuation),
    extended to contain ``beta`` and widened by the density-of-states bootstrap error.

    Parameters
    ----------
    positions : (N, 2); signs : (N,) +-1; domain, core_radius : as for estimate_ensemble.

    Returns
    -------
    BetaEstimate (method "microcanonical").

    Units: beta in 1/E0.
    """
    grouped, counts, key_main, provider = _prepare([(positions, signs)], domain, core_radius,
                                                   dos_provider, cache_dir, settings, seed)
    if sum(key_main) < 2:
        return _undefined(1, *key_main, "beta undefined for one vortex: a lone vortex has "
                          "no partner to exchange energy with, so there is no vortex-gas "
                          "temperature to measure (need at least two vortices)")
    dos = provider(*key_main)
    lo, hi = dos.beta_range
    g = _Group(key_main, grouped[key_main], domain, dos)
    e = float(g.energies[0])
    b_mic, b_err = (float(x[0]) for x in dos.beta_micro([e]))
    fine = np.linspace(lo, hi, 2001)
    lz_fine = dos._memo("lz_fine", lambda: g.lz(fine))
    ll = -fine * e - lz_fine
    b_can = float(fine[np.argmax(ll)])
    if not np.isfinite(b_mic):
        b_mic, b_err = b_can, 0.0    # energy outside the range where dS/dE is resolved
    ci68 = _interval(fine, ll, _Q68, b_can)
    ci95 = _interval(fine, ll, _Q95, b_can)
    ci68 = (min(ci68[0], b_mic), max(ci68[1], b_mic))
    ci95 = (min(ci95[0], b_mic), max(ci95[1], b_mic))
    ci68, ci95 = _widen(ci68, b_mic, b_err, 1.0), _widen(ci95, b_mic, b_err, 1.96)
    grid, var_e, _ = dos.canonical_curve("energy_variance")
    fisher = 1.0 / np.sqrt(float(np.interp(b_mic, grid, var_e)))
    w = np.exp(ll - ll.max())
    prob_neg = float(w[fine < 0].sum() / w.sum())
    clustering = {k: float(v[0]) for k, v in
                  structure_observables(g.pos, _signs(*key_main)).items()}
    return _finish(b_mic, ci68, ci95, float(np.hypot(fisher, b_err)), prob_neg,
                   "microcanonical", ((*key_main, 1),), 1, e / sum(key_main), sum(key_main),
                   key_main, domain, clustering, {}, False, (lo, hi))
