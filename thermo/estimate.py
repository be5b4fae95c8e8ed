"""Inverse temperature beta of vortex configurations: estimates that state their range.

* **Ensemble of shots** (:func:`estimate_ensemble`). The Boltzmann distribution is an
  exponential family in beta with sufficient statistic E, so the maximum-likelihood estimate
  solves  sum_i [E_i - <E>_beta] = 0  (any statistics text; reference-values.md). Shots are
  grouped by (N+, N-); each group has its own density of states, and the groups share one
  parameter theta: beta~ N (``common="beta_n"``, the default: gases of different vortex number
  drawn at one beta~ N, e.g. one stirring protocol with shot-to-shot number fluctuations) or
  beta~ itself (``common="beta"``). With beta_g = c_g theta (c_g = 1/N_g or 1) the score is

      U(theta) = sum_g c_g [S_g - W_g m_g(c_g theta)],   V(theta) = sum_g c_g^2 W_g v_g(c_g theta),

  where S_g is the (weighted) sum of the group's statistic, W_g its weight, m_g and v_g the
  canonical mean and variance of the statistic (solved in thermo/fit.py: the root of U, the
  score interval, P(beta < 0) from the confidence distribution).
* **Weights.** Shots carry weights w_i <= 1: frames of one simulated run are correlated, and a
  series of n frames with integrated autocorrelation time tau is worth n/tau independent shots;
  each of its frames gets w = 1/tau (gpe/run/thermometry.py), so W_g counts effectively
  independent shots and ``n_effective`` reports their number.
* **Imaging.** With an imaging model (thermo.imaged) the statistic is the energy of the
  configuration *as imaged* and m_g, v_g are those of the reference ensembles pushed through
  the same model, so theta refers to the gas before imaging. Without one (the default) the
  statistic is the energy and m_g, v_g come from the density of states: then U is exactly the
  likelihood score.
* **One shot** (:func:`estimate_single`): the microcanonical beta(E) = dS/dE at its energy; its
  interval is the set of canonical betas under which one draw of the energy is typical (the
  one-shot likelihood interval).

**Ranges, not clipping.** A density of states covers a ladder of betas. When an estimate or its
95% interval reaches the end of the ladder, the ladder is widened (``DosSettings.reach``, up to
``MAX_REACH``; cached like every build) and the estimate redone; if it still reaches the end the
result is a one-sided **bound**: ``bound="upper"`` means beta~ N < ``beta_n`` (the interval's open
side is -inf), ``"lower"`` the mirror.

**The density of states' own error.** Every bootstrap replicate of the density of states gives
its own root; their spread widens the intervals in quadrature and is reported as
``dos_error``.

Units: energies in E0 = rho kappa^2/(4 pi); beta in 1/E0 (beta~); beta~ N dimensionless;
positions scaled by the domain size.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field, replace
from typing import Any, Callable, Sequence

import numpy as np
from scipy.special import jn_zeros

from thermo.classify import structure_observables
from thermo.curves import Curves
from thermo.dos.build import MAX_REACH, DosSettings
from thermo.dos.cache import load_or_build
from thermo.dos.model import DensityOfStates
from thermo.energy import energy_batch, validate_configuration
from thermo.equilibrium import structure_check
from thermo.errors import ConfigurationError
from thermo.fit import Q68, Q95, Z95, Part, level_set, solve, widen
from thermo.imaged import imaged_curves, reference_groups

#: what the groups of an ensemble share: beta~ N or beta~
COMMON = ("beta_n", "beta")


@dataclass(frozen=True)
class BetaEstimate:
    """Result of a temperature estimate.

    Attributes
    ----------
    beta : beta~ of the largest group (for ``common="beta_n"``: beta_n / N of that group).
    beta_ci68, beta_ci95 : (low, high) intervals of beta~ (one side infinite for a bound).
    beta_n, beta_n_ci68, beta_n_ci95 : the same for beta~ N (the fitted common value for
        ``common="beta_n"``; beta~ times N of the largest group otherwise).
    bound : None, "upper" (beta~ N < beta_n: the data lie beyond the widest ladder on the
        negative side) or "lower" (beta~ N > beta_n). With a bound, beta/beta_n hold the
        limit's value.
    stderr : standard error of beta~ (Fisher information and density-of-states error in
        quadrature; NaN for a bound).
    dos_error : the density of states' contribution to the error of beta~ N.
    method : "ensemble maximum likelihood", "ensemble, imaging model", "microcanonical" or
        "undefined".
    n_shots : configurations; n_effective : effectively independent ones (sum of weights).
    n_plus, n_minus : vortex numbers of the largest group; groups : ((n_plus, n_minus,
        n_shots), ...) of every group (for imaging: the reference gases).
    common : "beta_n" or "beta".
    reach : the ladder reach the estimate needed (thermo.dos.build.DosSettings.reach).
    energy_per_vortex : mean energy / N (E0 per vortex).
    temperature_sign : "negative", "positive" or "undetermined" (95% interval contains 0).
    prob_negative : probability that beta < 0 (confidence distribution), NaN only when beta
        is undefined.
    clustering : mean over shots of D, C1, dipole/cluster/free fractions, nn distance.
    structure_betas : name -> (beta, standard error) from inverting canonical curves.
    not_in_equilibrium : True when a structure estimate disagrees with the energy one.
    thresholds : name -> beta value (collapse bounds, clustering onset) for the largest group.
    regime : where beta sits relative to the thresholds, in words.
    imaging : description of the imaging model the estimate allowed for ("" for none).
    verdict : one plain-language sentence.

    Units: beta in 1/E0; beta_n dimensionless; energy_per_vortex in E0; D in the domain size.
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
    beta_n: float = float("nan")
    beta_n_ci68: tuple[float, float] = (float("nan"), float("nan"))
    beta_n_ci95: tuple[float, float] = (float("nan"), float("nan"))
    bound: str | None = None
    dos_error: float = float("nan")
    n_effective: float = float("nan")
    common: str = "beta_n"
    reach: int = 0
    imaging: str = ""
    clustering: dict = field(default_factory=dict)
    structure_betas: dict = field(default_factory=dict)
    not_in_equilibrium: bool = False
    thresholds: dict = field(default_factory=dict)
    regime: str = ""
    verdict: str = ""


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


def _regime(beta: float, th: dict[str, float], n: int, bound: str | None) -> str:
    if not np.isfinite(beta):
        return "undefined"
    rel = {"upper": "<", "lower": ">"}.get(bound, "=")
    parts = [f"beta~ N {rel} {beta * n:.3g}"]
    if "clustering_onset" in th:
        onset = th["clustering_onset"]
        if beta < onset and bound != "lower":
            parts.append(f"beyond the mean-field clustering onset (beta~ N = {onset * n:.4g})")
        elif beta > onset and bound != "upper":
            parts.append(f"above the clustering onset (beta~ N = {onset * n:.4g})")
    if "like_sign_collapse" in th and beta < th["like_sign_collapse"] and bound != "lower":
        parts.append("past the like-sign collapse bound (held up only by the core)")
    if beta > th["pair_collapse"] and bound != "upper":
        parts.append("past the pair-collapse bound beta~ = 1 (held up only by the core)")
    return "; ".join(parts)


def _undefined(n_shots: int, n_plus: int, n_minus: int, why: str) -> BetaEstimate:
    nan = float("nan")
    return BetaEstimate(beta=nan, beta_ci68=(nan, nan), beta_ci95=(nan, nan), stderr=nan,
                        method="undefined", n_shots=n_shots, n_plus=n_plus, n_minus=n_minus,
                        groups=((n_plus, n_minus, n_shots),), energy_per_vortex=nan,
                        temperature_sign="undetermined", prob_negative=nan,
                        regime="undefined", verdict=why)


def group_shots(configs: Sequence, domain: Any, core_radius: float):
    """Validate shots and group them by (N+, N-), positive vortices first.

    Returns key -> (positions (S, N, 2), shot indices (S,)).
    """
    groups: dict[tuple[int, int], tuple[list, list]] = {}
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
        bucket = groups.setdefault(key, ([], []))
        bucket[0].append(p[order])
        bucket[1].append(k)
    return {k: (np.stack(v[0]), np.array(v[1])) for k, v in groups.items()}


def signs_of(n_plus: int, n_minus: int) -> np.ndarray:
    """The signs of an (N+, N-) configuration, positive vortices first."""
    return np.concatenate([np.ones(n_plus, int), -np.ones(n_minus, int)])


def _sign(ci95) -> tuple[str, str]:
    if ci95[1] < 0:
        return "negative", "negative temperature (clustered side)"
    if ci95[0] > 0:
        return "positive", "positive temperature"
    return "undetermined", "temperature sign not resolved"


def _bounded(sol_ci68, sol_ci95, limit: str):
    """(value, ci68, ci95, bound) of a result that reaches a ladder end: a one-sided limit."""
    inf = float("inf")
    if limit == "low":
        return sol_ci95[1], (-inf, sol_ci68[1]), (-inf, sol_ci95[1]), "upper"
    return sol_ci95[0], (sol_ci68[0], inf), (sol_ci95[0], inf), "lower"


def _verdict(words, sign, prob_neg, value, ci95, bound, n, th, regime, extra=()) -> str:
    conf = prob_neg if sign != "positive" else 1.0 - prob_neg
    if bound:
        rel = "<" if bound == "upper" else ">"
        core = (f"beta~ N {rel} {value * n:.3g} at 95% (a bound: the configurations lie beyond "
                f"the widest ladder the density of states was built on, so only this side is "
                f"known)")
    else:
        core = (f"beta~ N = {value * n:.3g} (95%: {ci95[0] * n:.3g} .. {ci95[1] * n:.3g})")
    if sign == "undetermined":
        text = f"{words}: P(beta~ < 0) = {100 * prob_neg:.0f}%, {core}"
    else:
        text = f"{words}, P = {100 * conf:.0f}% for this sign: {core}"
    return "; ".join([text, regime.split("; ", 1)[1]] if "; " in regime else [text]) + \
        "".join(f"; {e}" for e in extra)


def default_provider(domain, core_radius, cache_dir, settings, seed, progress=None
                     ) -> Callable[[int, int, int], DensityOfStates]:
    """(n_plus, n_minus, reach) -> the cached density of states (thermo.dos.cache); a build
    reports its sweeps to ``progress(done, total)`` when given."""
    def provide(npl: int, nmi: int, reach: int = 0) -> DensityOfStates:
        return load_or_build(npl, nmi, domain, core_radius, cache_dir=cache_dir, seed=seed,
                             settings=replace(settings, reach=max(reach, settings.reach)),
                             progress=progress)
    return provide


def estimate_ensemble(configs: Sequence, domain: Any, core_radius: float, *,
                      weights: Sequence[float] | None = None, common: str = "beta_n",
                      imaging: Any = None, imaging_seed: int = 0,
                      cache_dir: Any = None, settings: DosSettings = DosSettings(),
                      seed: int | None = None,
                      dos_provider: Callable[[int, int], DensityOfStates] | None = None,
                      equilibrium_z: float = 3.0, n_grid: int = 2001,
                      progress: Callable[[int, int], Any] | None = None) -> BetaEstimate:
    """beta~ N (or beta~) shared by an ensemble of shots (see the module docstring).

    Parameters
    ----------
    configs : sequence of (positions (N, 2), signs (N,)) pairs; N+ / N- may differ per shot.
    domain : a thermo domain; core_radius : hard-core radius a (length unit).
    weights : per-shot weights in (0, 1] (1/tau for frames of a correlated series); default 1.
    common : "beta_n" (groups share beta~ N) or "beta" (they share beta~).
    imaging : a thermo.data.degrade.ImagingModel the configurations went through, or None;
        imaging_seed seeds the draws of the reference ensembles through it.
    cache_dir, settings, seed : passed to :func:`thermo.dos.cache.load_or_build` (seed None:
        derived from each cache key).
    dos_provider : callable (n_plus, n_minus) -> DensityOfStates, replacing the cache (the
        ladder is then not widened).
    equilibrium_z : disagreement (in combined standard errors) that sets
        ``not_in_equilibrium``.
    n_grid : points of the theta grid.
    progress : ``progress(done, total)`` of every density-of-states build (Monte Carlo sweeps;
        thermo.dos.build.build), or None.

    Units: beta in 1/E0; positions in the domain size.
    """
    if common not in COMMON:
        raise ConfigurationError(f"common = {common!r}; accepted: {', '.join(COMMON)}")
    grouped = group_shots(configs, domain, core_radius)
    if not grouped:
        raise ConfigurationError("no configurations given; pass a list of (positions, signs)")
    n_shots = sum(len(v[1]) for v in grouped.values())
    w = np.ones(n_shots) if weights is None else np.asarray(weights, float)
    if w.shape != (n_shots,) or np.any(~np.isfinite(w)) or np.any(w <= 0) or np.any(w > 1):
        raise ConfigurationError(f"weights: need {n_shots} numbers in (0, 1], one per shot; "
                                 f"got shape {w.shape}")
    counts = Counter({k: len(v[1]) for k, v in grouped.items()})
    groups_t = tuple((k[0], k[1], counts[k]) for k in sorted(counts))
    if any(sum(k) < 2 for k in counts):
        if all(sum(k) < 2 for k in counts):
            key = counts.most_common(1)[0][0]
            return _undefined(n_shots, *key, "beta undefined for one vortex: a lone vortex "
                              "has no partner to exchange energy with, so there is no vortex-gas "
                              "temperature to measure (need at least two vortices per shot)")
        raise ConfigurationError(f"shots with fewer than two vortices mixed with others: "
                                 f"groups {groups_t}; drop them (beta undefined for one vortex)")
    # the statistic of every shot: its energy (as imaged, when there is an imaging model)
    stat = np.empty(n_shots)
    for key, (pos, idx) in grouped.items():
        stat[idx] = energy_batch(pos, signs_of(*key), domain)
    n_of = np.empty(n_shots)
    for key, (_, idx) in grouped.items():
        n_of[idx] = sum(key)
    if imaging is not None:
        ref_of = reference_groups(grouped, imaging, domain, core_radius)
    else:
        ref_of = {k: k for k in grouped}
    members: dict[tuple[int, int], list[int]] = {}
    for key, (_, idx) in grouped.items():
        members.setdefault(ref_of[key], []).extend(int(i) for i in idx)
    if any(sum(k) < 2 for k in members):
        raise ConfigurationError(f"imaging model: reference gases {sorted(members)} include "
                                 "fewer than two vortices; beta is undefined for them")
    ref_counts = {k: len(v) for k, v in members.items()}
    key_main = max(ref_counts, key=lambda k: (ref_counts[k], -abs(k[0] - k[1])))
    n_main = sum(key_main)
    provider = (default_provider(domain, core_radius, cache_dir, settings, seed, progress)
                if dos_provider is None else (lambda a, b, reach=0: dos_provider(a, b)))
    can_widen = dos_provider is None
    reach = settings.reach
    while True:
        doses = {k: provider(*k, reach) for k in members}
        parts = []
        for k, idx in members.items():
            curves = (Curves.of_energy(doses[k]) if imaging is None else
                      imaged_curves(doses[k], domain, core_radius, imaging, imaging_seed))
            c = 1.0 / sum(k) if common == "beta_n" else 1.0
            parts.append(Part(k, c, float(w[idx].sum()), float((w[idx] * stat[idx]).sum()),
                              curves))
        sol = solve(parts, n_grid)
        if sol.limit and can_widen and reach < MAX_REACH:
            reach += 1
            continue
        break
    # theta -> beta~ N and beta~ of the largest group
    to_n = 1.0 if common == "beta_n" else float(n_main)
    dos_err = sol.dos_error
    bound = None
    if sol.limit:
        t_val, t68, t95, bound = _bounded(sol.ci68, sol.ci95, sol.limit)
        se_t = float("nan")
    else:
        t_val = sol.theta
        t68 = widen(sol.ci68, t_val, dos_err, 1.0)
        t95 = widen(sol.ci95, t_val, dos_err, Z95)
        se_t = float(np.hypot(sol.fisher, dos_err))
    b_n = t_val * to_n
    bn68, bn95 = (t68[0] * to_n, t68[1] * to_n), (t95[0] * to_n, t95[1] * to_n)
    beta = b_n / n_main
    b68, b95 = (bn68[0] / n_main, bn68[1] / n_main), (bn95[0] / n_main, bn95[1] / n_main)
    th = thresholds(*key_main, domain)
    sign, words = _sign(b95)
    se = se_t if common == "beta" else se_t / n_main      # of beta~ of the largest group
    extra = []
    clustering, structure_betas, flag = {}, {}, False
    if key_main in grouped:
        pos_main = grouped[key_main][0]
        dos_main = doses[key_main]
        c_main = 1.0 / n_main if common == "beta_n" else 1.0
        lo_b, hi_b = sol.span[0] * c_main, sol.span[1] * c_main
        past_pairs = b95[0] > th["pair_collapse"]
        if imaging is None and not bound and not past_pairs:
            clustering, structure_betas, flag = structure_check(
                pos_main, key_main, dos_main, lo_b, hi_b, beta, se, equilibrium_z)
        else:
            if past_pairs and not bound:
                # bound pairs held at ~2a by the core: the structure curves there follow the
                # core's details and mix slowly in the sampler (measured: C1 and the cluster
                # fraction of equilibrium 3+3 shots at beta~ = 1.5 invert to 2-3.2), so they
                # cannot judge equilibrium
                extra.append("structure check not made past the pair-collapse bound")
            clustering = {k: float(np.mean(v)) for k, v in
                          structure_observables(pos_main, signs_of(*key_main)).items()}
    if sol.both_ends and not bound:
        extra.append("the 95% interval spans the whole ladder: these shots hardly constrain beta")
    if flag:
        extra.append("structure and energy disagree: not in equilibrium")
    if imaging is not None:
        extra.append("beta refers to the gas before imaging (reference ensembles pushed "
                     "through the imaging model)")
    regime = _regime(beta, th, n_main, bound)
    verdict = _verdict(words, sign, sol.prob_negative, beta, b95, bound, n_main, th, regime,
                       extra)
    return BetaEstimate(
        beta=float(beta), beta_ci68=b68, beta_ci95=b95, stderr=float(se),
        method="ensemble maximum likelihood" if imaging is None else "ensemble, imaging model",
        n_shots=n_shots, n_plus=key_main[0], n_minus=key_main[1],
        groups=tuple((k[0], k[1], ref_counts[k]) for k in sorted(ref_counts)),
        energy_per_vortex=float(np.mean(stat / n_of)), temperature_sign=sign,
        prob_negative=float(sol.prob_negative), beta_n=float(b_n), beta_n_ci68=bn68,
        beta_n_ci95=bn95, bound=bound,
        dos_error=float(dos_err * to_n) if not bound else float("nan"),
        n_effective=float(w.sum()), common=common,
        reach=max(int(d.settings.get("reach", 0)) for d in doses.values()),
        imaging="" if imaging is None else repr(imaging), clustering=clustering,
        structure_betas=structure_betas, not_in_equilibrium=flag, thresholds=th,
        regime=regime, verdict=verdict)


def _interval(beta_grid, ll, level):
    """Profile-likelihood interval {beta: 2 (l_max - l) <= level}, and whether it reaches the
    low / high end of the grid."""
    drop = 2.0 * (ll.max() - ll)
    lo, hi, at_lo, at_hi = level_set(beta_grid, drop, level, float(beta_grid[np.argmax(ll)]))
    return (lo, hi), at_lo, at_hi


def estimate_single(positions: Any, signs: Any, domain: Any, core_radius: float, *,
                    cache_dir: Any = None, settings: DosSettings = DosSettings(),
                    seed: int | None = None,
                    dos_provider: Callable[[int, int], DensityOfStates] | None = None,
                    progress: Callable[[int, int], Any] | None = None) -> BetaEstimate:
    """beta of one configuration: microcanonical beta(E) at its energy.

    ``beta`` is dS/dE at the shot's energy (the temperature of an isolated gas with that
    energy). ``beta_ci68``/``beta_ci95`` are the one-shot likelihood intervals (canonical
    betas under which this energy is typical, i.e. the finite-N energy fluctuation),
    extended to contain ``beta`` and widened by the density-of-states bootstrap error. When
    the energy or the interval reaches the end of the ladder, the ladder is widened; if that
    does not suffice the result is a bound (see the module docstring). ``progress(done,
    total)`` is told the sweeps of every density-of-states build it needs.

    Units: beta in 1/E0.
    """
    grouped = group_shots([(positions, signs)], domain, core_radius)
    key = next(iter(grouped))
    if sum(key) < 2:
        return _undefined(1, *key, "beta undefined for one vortex: a lone vortex has "
                          "no partner to exchange energy with, so there is no vortex-gas "
                          "temperature to measure (need at least two vortices)"
                          if sum(key) == 1 else "no vortex: no vortex-gas temperature")
    pos = grouped[key][0]
    e = float(energy_batch(pos, signs_of(*key), domain)[0])
    provider = (default_provider(domain, core_radius, cache_dir, settings, seed, progress)
                if dos_provider is None else (lambda a, b, reach=0: dos_provider(a, b)))
    reach = settings.reach
    while True:
        dos = provider(*key, reach)
        lo, hi = dos.beta_range
        fine = np.linspace(lo, hi, 2001)
        lz = dos.log_z_spline()
        lz_fine = dos._memo("lz_fine", lambda: lz(fine))
        ll = -fine * e - lz_fine
        ci68, _, _ = _interval(fine, ll, Q68)
        ci95, at_lo, at_hi = _interval(fine, ll, Q95)
        b_mic, b_err = (float(x[0]) for x in dos.beta_micro([e]))
        limit = "low" if at_lo and not at_hi else "high" if at_hi and not at_lo else ""
        if not np.isfinite(b_mic) and not limit:
            limit = "low" if e > dos.energy_range()[1] else "high"
        if limit and dos_provider is None and reach < MAX_REACH:
            reach += 1
            continue
        break
    n = sum(key)
    w = np.exp(ll - ll.max())
    prob_neg = float(w[fine < 0].sum() / w.sum())
    bound = None
    if limit:
        if not np.isfinite(b_mic):
            b_mic = float(np.clip(fine[np.argmax(ll)], lo, hi))
        value, ci68, ci95, bound = _bounded(ci68, ci95, limit)
        if limit == "low":
            value = max(value, b_mic)
            ci68, ci95 = (ci68[0], max(ci68[1], b_mic)), (ci95[0], value)
        else:
            value = min(value, b_mic)
            ci68, ci95 = (min(ci68[0], b_mic), ci68[1]), (value, ci95[1])
        se = float("nan")
    else:
        value = b_mic
        ci68 = (min(ci68[0], b_mic), max(ci68[1], b_mic))
        ci95 = (min(ci95[0], b_mic), max(ci95[1], b_mic))
        ci68, ci95 = widen(ci68, b_mic, b_err, 1.0), widen(ci95, b_mic, b_err, Z95)
        grid, var_e, _ = dos.canonical_curve("energy_variance")
        se = float(np.hypot(1.0 / np.sqrt(float(np.interp(b_mic, grid, var_e))), b_err))
    th = thresholds(*key, domain)
    sign, words = _sign(ci95)
    regime = _regime(value, th, n, bound)
    clustering = {k: float(v[0]) for k, v in structure_observables(pos, signs_of(*key)).items()}
    return BetaEstimate(
        beta=float(value), beta_ci68=ci68, beta_ci95=ci95, stderr=se, method="microcanonical",
        n_shots=1, n_plus=key[0], n_minus=key[1], groups=((*key, 1),),
        energy_per_vortex=e / n, temperature_sign=sign, prob_negative=prob_neg,
        beta_n=float(value * n), beta_n_ci68=(ci68[0] * n, ci68[1] * n),
        beta_n_ci95=(ci95[0] * n, ci95[1] * n), bound=bound,
        dos_error=float(b_err * n) if not bound else float("nan"), n_effective=1.0,
        common="beta_n", reach=int(dos.settings.get("reach", 0)), clustering=clustering, thresholds=th,
        regime=regime, verdict=_verdict(words, sign, prob_neg, value, ci95, bound, n, th,
                                        regime))
