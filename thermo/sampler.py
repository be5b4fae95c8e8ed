"""Canonical Monte Carlo of the point-vortex gas with parallel tempering, both signs of beta.

N+ positive and N- negative vortices (neutral, non-neutral or single species) move in a domain
(:class:`~thermo.domains.base.Domain`: a disk, a box, ...) with a hard core: every centre
stays farther than the core radius ``a`` from the wall and at least ``2a`` from every other
centre (non-overlapping discs of radius a that cannot cross the wall -- equivalently, every
vortex stays at least 2a from every image). The core makes the canonical ensemble exist at
every beta, beyond the pair collapse (beta > 1) and the like-sign collapse (beta < -2/N_max).

One sweep = N single-vortex Metropolis moves per replica (uniform displacement in a square of
half-width ``step``; acceptance min{1, exp(-beta dE)}), then one round of neighbour swaps on
alternating even/odd pairs of the beta ladder, accepted with
min{1, exp[(beta_i - beta_j)(E_i - E_j)]} [Hukushima & Nemoto, JPSJ 65, 1604 (1996)].
Step sizes are tuned towards a target acceptance during burn-in only, then frozen, so the
production chain satisfies detailed balance.

Units: energies in E0 = rho kappa^2/(4 pi), beta in 1/E0 (beta~), lengths in the domain's
length unit (disk radius; box side along y).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from numba import njit, types

from thermo.autocorr import integrated_autocorr_time
from thermo.domains.base import KERNEL_TYPES, SIGNS, Domain, fill_ledger, kernel_array
from thermo.energy import total_energy_kernel, validate_configuration
from thermo.errors import SamplerError

__all__ = ["TemperingResult", "run_tempering", "default_ladder", "adaptive_ladder",
           "swap_probability"]

# Step-size bounds and adaptation block (common practice: aim at ~40 % acceptance).
_MIN_STEP = 1e-5
_ENERGY_REFRESH = 64       # sweeps between exact recomputations of E (stops round-off drift)


@njit(cache=True)
def swap_probability(beta_i: float, beta_j: float, e_i: float, e_j: float) -> float:
    """Acceptance probability of exchanging the configurations at beta_i and beta_j.

    .. math:: p = \\min\\{1, \\exp[(\\beta_i - \\beta_j)(E_i - E_j)]\\}

    Units: beta in 1/E0, energies in E0.
    """
    x = (beta_i - beta_j) * (e_i - e_j)
    if x >= 0.0:
        return 1.0
    return math.exp(x)


_V, _I, _F = types.float64[::1], types.int64, types.float64


def neighbour_pairs(n_states: int) -> np.ndarray:
    """The two alternating sets of neighbour exchanges (0-1, 2-3, ... then 1-2, 3-4, ...) of a
    ladder of ``n_states``, shape (2, P, 2), rows padded with -1 (:func:`exchange_kernel`)."""
    p = max(n_states // 2, 1)
    out = np.full((2, p, 2), -1, dtype=np.int64)
    for parity in (0, 1):
        ks = np.arange(parity, n_states - 1, 2)
        out[parity, :ks.size, 0], out[parity, :ks.size, 1] = ks, ks + 1
    return out


# kernels as first-class functions (*domain.kernels()): compiled once for all domains, cached
@njit(cache=True)
def impulse_kernel(conf, signs):
    m = 0.0
    for i in range(conf.shape[0]):
        m += signs[i] * (conf[i, 0] * conf[i, 0] + conf[i, 1] * conf[i, 1])
    return m


@njit(types.void(types.float64[:, :, ::1], _V, _V, SIGNS, _V, _V, _V, _F, *KERNEL_TYPES, _F,
                 _I, _I, _I, _I, _I, _F, types.float64[:, ::1], types.float64[:, ::1],
                 types.float64[:, :, :, ::1], _V, _V, types.int64[:, :, ::1],
                 types.float64[:, ::1], types.float64[:, ::1], _I, _I, _V, _V,
                 types.float64[:, :, ::1], types.int64[::1], _V), cache=True)
def exchange_kernel(pos, energies, impulses, signs, betas, omegas, steps, max_step, self_fn,
                     pair_fn, wall_fn, move_fn, params, keeps_ledger, core, sweep_start,
                     sweep_stop, burn_in, thin, adapt_every, target, out_e, out_m, out_pos,
                     move_acc, move_att, pairs, swap_acc, swap_att, seed, pos_stride, block_acc,
                     block_att, ledgers, slots, work):
    # the one Metropolis and replica-exchange loop of the project: states k at (beta_k,
    # omega_k) sample exp[-beta (E - omega M)], M = sum s |u|^2 tracked beside E (omega = 0:
    # plain parallel tempering, thermo.sampler.run_tempering); exchanges between the pairs of
    # the set ``sweep % n_sets`` (rows padded with -1). Sweeps sweep_start..sweep_stop-1 of one
    # chain: called once for a whole run or in consecutive pieces (progress reports in between)
    # with the same arrays; the generator is seeded at the first sweep only and numba keeps its
    # state between calls in a thread, so the pieces draw exactly the numbers of one call.
    # State k's pair ledger (thermo.domains.base.MOVE_SIGNATURE), if the move kernel keeps
    # one, is ledgers[slots[k]]: filled at the start of every call and at every energy
    # refresh, row and column i set on an accepted move of vortex i, its slot exchanged with
    # the configuration's
    if sweep_start == 0:
        np.random.seed(seed)
    n_rep = pos.shape[0]
    n = pos.shape[1]
    for k in range(n_rep if keeps_ledger else 0):
        fill_ledger(pos[k], signs, params, self_fn, pair_fn, move_fn, ledgers[slots[k]], work)
    n_sets = pairs.shape[0]
    min_d2 = 4.0 * core * core
    rec = (sweep_start - burn_in) // thin if sweep_start > burn_in else 0
    for sweep in range(sweep_start, sweep_stop):
        production = sweep >= burn_in
        for k in range(n_rep):
            beta = betas[k]
            omega = omegas[k]
            h = steps[k]
            conf = pos[k]
            ledger = ledgers[slots[k]]
            acc = 0
            for _ in range(n):
                i = np.random.randint(0, n)
                xn = conf[i, 0] + h * (2.0 * np.random.random() - 1.0)
                yn = conf[i, 1] + h * (2.0 * np.random.random() - 1.0)
                if wall_fn(xn, yn, params) <= core:
                    continue
                de = move_fn(conf, signs, i, xn, yn, params, min_d2, self_fn, pair_fn, ledger,
                             work)
                if de == np.inf:
                    continue
                dm = signs[i] * (xn * xn + yn * yn - conf[i, 0] * conf[i, 0]
                                 - conf[i, 1] * conf[i, 1])
                du = beta * (de - omega * dm)
                if du <= 0.0 or np.random.random() < math.exp(-du):
                    conf[i, 0] = xn
                    conf[i, 1] = yn
                    energies[k] += de
                    impulses[k] += dm
                    acc += 1
                    if keeps_ledger:
                        for j in range(n):
                            ledger[i, j] = work[j]
                            ledger[j, i] = work[j]
            if production:
                move_acc[k] += acc
                move_att[k] += n
            else:
                block_acc[k] += acc
                block_att[k] += n
            if (sweep + 1) % _ENERGY_REFRESH == 0:
                energies[k] = total_energy_kernel(conf, signs, self_fn, pair_fn, params)
                impulses[k] = impulse_kernel(conf, signs)
                if keeps_ledger:
                    fill_ledger(conf, signs, params, self_fn, pair_fn, move_fn, ledger, work)
        s = sweep % n_sets
        for p in range(pairs.shape[1]):
            a = pairs[s, p, 0]
            b = pairs[s, p, 1]
            if a < 0:
                break
            ea, eb, ma, mb = energies[a], energies[b], impulses[a], impulses[b]
            # log of the exchange ratio: beta_a (E - omega_a M) + ... rearranged so that at
            # omega = 0 it is (beta_a - beta_b)(E_a - E_b) to the last bit
            x = ((betas[a] - betas[b]) * (ea - eb)
                 - (betas[a] * omegas[a] - betas[b] * omegas[b]) * (ma - mb))
            if production:
                swap_att[s, p] += 1
            if x >= 0.0 or np.random.random() < math.exp(x):
                if production:
                    swap_acc[s, p] += 1
                for i in range(n):
                    for c in range(2):
                        t = pos[a, i, c]
                        pos[a, i, c] = pos[b, i, c]
                        pos[b, i, c] = t
                energies[a], energies[b] = eb, ea
                impulses[a], impulses[b] = mb, ma
                slots[a], slots[b] = slots[b], slots[a]
        if not production and (sweep + 1) % adapt_every == 0:
            for k in range(n_rep):
                rate = block_acc[k] / max(block_att[k], 1.0)
                st = steps[k] * math.exp(2.0 * (rate - target))
                steps[k] = min(max(st, _MIN_STEP), max_step)
                block_acc[k] = 0.0
                block_att[k] = 0.0
        if production and (sweep - burn_in + 1) % thin == 0:
            for k in range(n_rep):
                out_e[k, rec] = energies[k]
                out_m[k, rec] = impulses[k]
                if rec % pos_stride == 0:
                    for i in range(n):
                        out_pos[k, rec // pos_stride, i, 0] = pos[k, i, 0]
                        out_pos[k, rec // pos_stride, i, 1] = pos[k, i, 1]
            rec += 1


def ledger_arrays(n_states: int, n: int, keeps_ledger: bool = True
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Work arrays of :func:`exchange_kernel`'s pair ledgers for ``n_states`` configurations of
    ``n`` vortices: the ledgers (n_states, n, n; empty rows if the kernel keeps none), the slot
    of each state and the move kernel's output row
    (:data:`thermo.domains.base.MOVE_SIGNATURE`)."""
    rows = n if keeps_ledger else 0
    return (np.zeros((n_states, rows, rows)), np.arange(n_states, dtype=np.int64), np.zeros(n))


def _pieces(n_total: int, progress, n_reports: int) -> list[tuple[int, int]]:
    """Consecutive (start, stop) sweep ranges: one without progress, else ``n_reports``."""
    if progress is None or n_total <= 1:
        return [(0, n_total)]
    if not (isinstance(n_reports, (int, np.integer)) and n_reports >= 1):
        raise SamplerError(f"n_reports = {n_reports!r}: must be a positive integer")
    edges = np.unique(np.linspace(0, n_total, min(n_reports, n_total) + 1).round().astype(int))
    return [(int(a), int(b)) for a, b in itertools.pairwise(edges)]


@dataclass(frozen=True)
class TemperingResult:
    """Samples and diagnostics of a parallel-tempering run.

    Attributes
    ----------
    betas : ndarray (K,)
        Inverse temperatures of the ladder, in the order given. Units: 1/E0.
    energies : ndarray (K, S)
        Energy of each recorded sample at each beta. Units: E0.
    positions : ndarray (K, ceil(S / position_stride), N, 2)
        Recorded configurations at each beta (scaled positions): those of the recorded
        samples 0, position_stride, 2 position_stride, ... (every sample by default).
    signs : ndarray int64 (N,)
        Signs: the first n_plus are +1, the rest -1.
    acceptance : ndarray (K,)
        Fraction of accepted single-vortex moves in production, per beta.
    swap_acceptance : ndarray (K-1,)
        Fraction of accepted swaps between beta_k and beta_{k+1} in production.
    tau_int : ndarray (K,)
        Integrated autocorrelation time of E per beta, in recorded samples (Sokal window).
    ess : ndarray (K,)
        Effective sample size S / tau_int per beta.
    n_plus, n_minus : int
    core_radius : float
        Hard-core radius a (length unit).
    domain : Domain (a Disk, a Box, ...)
    step_sizes : ndarray (K,)
        Frozen move half-widths after burn-in (length unit).
    burn_in, thin : int
        Sweeps discarded before recording; sweeps between recorded samples.
    seed : int
        Seed handed to the compiled loop (drawn from the caller's Generator).
    """

    betas: np.ndarray
    energies: np.ndarray
    positions: np.ndarray
    signs: np.ndarray
    acceptance: np.ndarray
    swap_acceptance: np.ndarray
    tau_int: np.ndarray
    ess: np.ndarray
    n_plus: int
    n_minus: int
    core_radius: float
    domain: Domain
    step_sizes: np.ndarray
    burn_in: int
    thin: int
    seed: int

    @property
    def n_samples(self) -> int:
        """Recorded samples per beta, S."""
        return int(self.energies.shape[1])

    def mean_energy(self) -> np.ndarray:
        """<E> per beta, shape (K,). Units: E0."""
        return self.energies.mean(axis=1)

    def energy_standard_error(self) -> np.ndarray:
        """Standard error of <E> per beta, sqrt(tau_int Var(E) / S), shape (K,). Units: E0."""
        var = self.energies.var(axis=1, ddof=1)
        return np.sqrt(np.where(np.isfinite(self.tau_int), self.tau_int, 1.0) * var / self.n_samples)


def _check_counts(n_plus, n_minus) -> tuple[int, int]:
    for name, v in (("n_plus", n_plus), ("n_minus", n_minus)):
        if not isinstance(v, (int, np.integer)) or v < 0:
            raise SamplerError(f"{name} = {v!r}: must be a non-negative integer")
    if n_plus + n_minus < 1:
        raise SamplerError("n_plus + n_minus must be at least 1 vortex")
    return int(n_plus), int(n_minus)


def _initial_configuration(domain, n, core, rng) -> np.ndarray:
    """Random sequential addition of n non-overlapping cores (raises if the gas is too dense)."""
    pos = np.empty((n, 2))
    for i in range(n):
        for _ in range(10000):
            p = domain.sample_uniform(rng, 1, margin=core)[0]
            if i == 0 or np.min(((pos[:i] - p) ** 2).sum(1)) >= 4 * core * core:
                pos[i] = p
                break
        else:
            raise SamplerError(
                f"cannot place {n} vortices with core radius {core} in {domain.key()}: the "
                "cores fill too much of the domain; use a smaller core_radius")
    return pos


def run_tempering(domain: Domain, n_plus: int, n_minus: int, betas, n_sweeps: int,
                  core_radius: float, rng: np.random.Generator, burn_in: int | None = None,
                  thin: int = 1, initial=None, target_acceptance: float = 0.4,
                  position_stride: int = 1, progress=None, n_reports: int = 20
                  ) -> TemperingResult:
    """Sample the canonical ensemble at every beta of a ladder with parallel tempering.

    Parameters
    ----------
    domain : Domain (a Disk, a Box, ...)
    n_plus, n_minus : int
        Numbers of positive and negative vortices (fixed).
    betas : array_like (K,)
        Strictly monotonic ladder of inverse temperatures, any signs. Units: 1/E0.
    n_sweeps : int
        Production sweeps after burn-in (one sweep = N moves per replica + one swap round).
    core_radius : float
        Hard-core radius a > 0 (length unit): centres at least 2a apart and farther than a
        from the wall.
    rng : numpy.random.Generator
        Source of the initial configurations and of the compiled loop's seed.
    burn_in : int, optional
        Sweeps discarded first, during which step sizes adapt; default max(200, n_sweeps//5).
    thin : int
        Record every ``thin``-th production sweep; S = n_sweeps // thin samples.
    initial : array_like (N, 2) or (K, N, 2), optional
        Starting positions (first n_plus rows positive); default: random non-overlapping.
    target_acceptance : float
        Move acceptance aimed at during burn-in (common practice: 0.3-0.5).
    position_stride : int
        Keep the configuration of every ``position_stride``-th recorded sample only (the
        energies of all): where E decorrelates in a few sweeps, recording it often pays,
        while storing every configuration would cost K S N 16 bytes.
    progress : callable ``progress(done, total)``, optional
        Called with the sweeps done (burn-in included) of all, ``n_reports`` times at most,
        the last time with done == total; the samples are the same with or without it.
    n_reports : int
        Number of pieces the sweeps are run in when ``progress`` is given.

    Returns
    -------
    TemperingResult
    """
    n_plus, n_minus = _check_counts(n_plus, n_minus)
    n = n_plus + n_minus
    b = kernel_array(np.asarray(betas, dtype=np.float64).ravel(), np.float64)
    if b.size < 1 or not np.all(np.isfinite(b)):
        raise SamplerError(f"betas must be a non-empty list of finite numbers; got {betas!r}")
    if b.size > 1:
        d = np.diff(b)
        if not (np.all(d > 0) or np.all(d < 0)):
            raise SamplerError("betas must be strictly increasing or strictly decreasing, so that "
                               "swaps are between neighbouring temperatures")
    if not (isinstance(n_sweeps, (int, np.integer)) and n_sweeps >= 1):
        raise SamplerError(f"n_sweeps = {n_sweeps!r}: must be a positive integer")
    if not (isinstance(thin, (int, np.integer)) and 1 <= thin <= n_sweeps):
        raise SamplerError(f"thin = {thin!r}: must be an integer between 1 and n_sweeps")
    burn = max(200, n_sweeps // 5) if burn_in is None else burn_in
    if not (isinstance(burn, (int, np.integer)) and burn >= 0):
        raise SamplerError(f"burn_in = {burn_in!r}: must be a non-negative integer")
    if not (isinstance(core_radius, (int, float)) and math.isfinite(core_radius) and 0 < core_radius < 0.25):
        raise SamplerError(f"core_radius = {core_radius!r}: must be > 0 (it regularizes the "
                           "collapse) and < 0.25 domain units")
    if not (isinstance(position_stride, (int, np.integer)) and position_stride >= 1):
        raise SamplerError(f"position_stride = {position_stride!r}: must be a positive integer")
    if not (0.05 <= target_acceptance <= 0.95):
        raise SamplerError(f"target_acceptance = {target_acceptance!r}: must be in [0.05, 0.95]")
    signs = np.array([1] * n_plus + [-1] * n_minus, dtype=np.int64)
    k_rep = b.size
    if initial is None:
        pos = np.stack([_initial_configuration(domain, n, core_radius, rng) for _ in range(k_rep)])
    else:
        init = np.asarray(initial, dtype=np.float64)
        if init.shape == (n, 2):
            init = np.broadcast_to(init, (k_rep, n, 2))
        if init.shape != (k_rep, n, 2):
            raise SamplerError(f"initial must have shape ({n}, 2) or ({k_rep}, {n}, 2); got {init.shape}")
        validate_configuration(init, signs, domain, core_radius=core_radius, batched=True)
        pos = init.copy()
    pos = kernel_array(pos, np.float64)
    kern = domain.kernels()
    energies = np.array([total_energy_kernel(pos[k], signs, kern.self_energy, kern.pair_energy,
                                             kern.params) for k in range(k_rep)])
    size = domain.max_step
    steps = np.full(k_rep, min(0.3, size / 4))
    s_rec = n_sweeps // thin
    out_e = np.empty((k_rep, s_rec))
    out_pos = np.empty((k_rep, -(-s_rec // position_stride), n, 2))
    move_acc = np.zeros(k_rep)
    move_att = np.zeros(k_rep)
    pairs = neighbour_pairs(k_rep)
    swap_acc, swap_att = np.zeros(pairs.shape[:2]), np.zeros(pairs.shape[:2])
    seed = int(rng.integers(0, 2**31 - 1))
    adapt_every = max(5, int(math.ceil(200 / n)))
    n_total = int(burn + s_rec * thin)
    block_acc, block_att = np.zeros(k_rep), np.zeros(k_rep)
    impulses, out_m = np.zeros(k_rep), np.empty((k_rep, s_rec))   # tracked, unused at omega = 0
    omegas = np.zeros(k_rep)
    ledgers, slots, work = ledger_arrays(k_rep, n, kern.keeps_ledger)
    for start, stop in _pieces(n_total, progress, n_reports):
        exchange_kernel(pos, energies, impulses, signs, b, omegas, steps, size, *kern,
                        float(core_radius), start, stop, int(burn), int(thin), adapt_every,
                        float(target_acceptance), out_e, out_m, out_pos, move_acc, move_att,
                        pairs, swap_acc, swap_att, seed, int(position_stride), block_acc,
                        block_att, ledgers, slots, work)
        if progress is not None:
            progress(stop, n_total)
    # per neighbour pair (k, k + 1): set k % 2, slot k // 2
    k_pairs = np.arange(max(k_rep - 1, 0))
    swap_acc, swap_att = swap_acc[k_pairs % 2, k_pairs // 2], swap_att[k_pairs % 2, k_pairs // 2]
    tau = np.array([integrated_autocorr_time(e) for e in out_e])
    with np.errstate(invalid="ignore", divide="ignore"):
        ess = s_rec / tau
        swap_rate = swap_acc / np.maximum(swap_att, 1)
    return TemperingResult(
        betas=b, energies=out_e, positions=out_pos, signs=signs,
        acceptance=move_acc / np.maximum(move_att, 1), swap_acceptance=swap_rate,
        tau_int=tau, ess=ess, n_plus=n_plus, n_minus=n_minus, core_radius=float(core_radius),
        domain=domain, step_sizes=steps.copy(), burn_in=int(burn), thin=int(thin), seed=seed)


def default_ladder(n_plus: int, n_minus: int, core_radius: float, domain: Domain,
                   n_temps: int = 24, beta_max: float = 1.0, overshoot: float = 1.15) -> np.ndarray:
    """A beta ladder from +beta_max through 0 down to just beyond the like-sign collapse.

    The negative end is ``overshoot`` x (-2 / max(N+, N-)): a cluster of k like-sign vortices
    collapses once beta < -2/k (power counting; -4/N for a neutral gas, -2/N for one species,
    reference-values.md), regularized here by the core. The top is the pair-collapse bound
    beta_max = 1 (a +- pair at separation r weighs r^(1 - 2 beta) dr, integrable only for
    beta < 1; the same holds for a vortex and its image): beyond it every pair sits at the
    core and the statistics measure the core radius, not a point-vortex temperature, and
    stirred condensates are not expected there. Rungs above 1 (the earlier top was 2) cost
    sampling where no measurement falls and, because E hardly changes there, they are the
    least precise part of beta(E). Spacing follows where <E> changes fastest (the spacing
    should scale as 1/std(E)): for beta < 0 the points go as
    beta_min sin(pi t / 2), t uniform, crowding towards the clustering/collapse end; for
    beta > 0 as beta_max t^2, crowding towards beta = 0, where the free +- pairs bind and E
    falls steeply. ~55 % of the points lie at negative beta.
    This is a heuristic starting point: :func:`thermo.dos.build.build` uses
    :func:`adaptive_ladder`, which runs it briefly and respaces the rungs by the measured
    std(E); check ``TemperingResult.swap_acceptance``.

    Parameters
    ----------
    n_plus, n_minus : int
    core_radius : float
        Core radius (validated; the ladder shape does not depend on it). Length unit.
    domain : Domain (a Disk, a Box, ...)
        The domain (the thresholds are domain-independent power counting).
    n_temps : int
        Number of betas K >= 3 (0 is always included).
    beta_max, overshoot : float

    Returns
    -------
    ndarray (K,)
        Decreasing betas, from beta_max to the negative end. Units: 1/E0.
    """
    n_plus, n_minus = _check_counts(n_plus, n_minus)
    if not isinstance(domain, Domain):
        raise SamplerError(f"domain must be a thermo domain (Disk, Box, ...); got {domain!r}")
    if not (math.isfinite(core_radius) and core_radius > 0):
        raise SamplerError(f"core_radius = {core_radius!r}: must be > 0")
    if not (isinstance(n_temps, (int, np.integer)) and n_temps >= 3):
        raise SamplerError(f"n_temps = {n_temps!r}: must be an integer >= 3")
    if not (beta_max > 0 and overshoot > 0):
        raise SamplerError("beta_max and overshoot must be positive")
    beta_min = -overshoot * 2.0 / max(n_plus, n_minus)
    n_neg = int(round(0.55 * (n_temps - 1)))
    n_pos = n_temps - 1 - n_neg
    neg = beta_min * np.sin(0.5 * np.pi * np.arange(1, n_neg + 1) / n_neg)
    pos = beta_max * (np.arange(1, n_pos + 1) / n_pos) ** 2
    return np.concatenate((pos[::-1], [0.0], neg))


def pilot_burn_in(pilot_sweeps: int) -> int:
    """Burn-in sweeps of the pilot run of :func:`adaptive_ladder`."""
    return max(200, int(pilot_sweeps) // 4)


def adaptive_ladder(n_plus: int, n_minus: int, core_radius: float, domain: Domain,
                    rng: np.random.Generator, n_temps: int = 24, pilot_sweeps: int = 1000,
                    max_swap_gap: float = 1.5, beta_max: float = 1.0,
                    overshoot: float = 1.15, progress=None) -> np.ndarray:
    """A ladder with the same ends as :func:`default_ladder`, spaced from a short pilot run.

    Why: the error of beta read off <E>(beta) (or off dS/dE) is SE(<E>)/Var(E) ~
    1/sqrt(n_eff Var(E)) (Cramer-Rao for the exponential family p(E) ~ g(E) exp(-beta E)),
    and MBAR pools the rungs within ~1/sigma_E of beta. With rho(beta) rungs per unit beta
    the samples pooled at beta grow as rho/sigma_E, so the squared error goes as
    1/(sigma_E rho): an even error needs rho ~ 1/sigma_E, i.e. MORE rungs where E hardly
    fluctuates (the bound-pair side, beta > 0) and fewer at the clustering end, where
    sigma_E is 30x larger. Swaps need beta gaps with |d beta| sigma_E <~ 2 (acceptance
    ~ erfc(|d beta| sigma_E / 2) for Gaussian E, common practice), so the density is
    rho = max(A / sigma_E, sigma_E / max_swap_gap) with A set by the number of rungs,
    doubled over the last ~2/sigma_E below beta_max (MBAR pools from one side there); beta = 0
    is kept as a rung.

    The pilot runs ``default_ladder`` (same n_temps) for ``pilot_sweeps`` sweeps; sigma_E is
    interpolated in ln sigma_E, linearly in beta, between the pilot rungs.

    Parameters
    ----------
    n_plus, n_minus, core_radius, domain : as for :func:`default_ladder`.
    rng : numpy.random.Generator
        Source of the pilot run.
    n_temps : int
        Number of rungs K >= 3.
    pilot_sweeps : int
        Sweeps of the pilot run (after its own burn-in).
    max_swap_gap : float
        Largest |d beta| sigma_E allowed between neighbours (dimensionless).
    beta_max, overshoot : float
        Ends of the ladder, as for :func:`default_ladder`.
    progress : callable ``progress(done, total)``, optional
        Sweeps of the pilot run, as for :func:`run_tempering`.

    Returns
    -------
    ndarray (K,)
        Decreasing betas, from beta_max to the negative end. Units: 1/E0.
    """
    pilot = default_ladder(n_plus, n_minus, core_radius, domain, n_temps=n_temps,
                           beta_max=beta_max, overshoot=overshoot)
    if not (isinstance(pilot_sweeps, (int, np.integer)) and pilot_sweeps >= 50):
        raise SamplerError(f"pilot_sweeps = {pilot_sweeps!r}: must be an integer >= 50")
    if not (math.isfinite(max_swap_gap) and max_swap_gap > 0):
        raise SamplerError(f"max_swap_gap = {max_swap_gap!r}: must be > 0")
    res = run_tempering(domain, n_plus, n_minus, pilot, int(pilot_sweeps), core_radius, rng,
                        burn_in=pilot_burn_in(pilot_sweeps), progress=progress)
    sd = res.energies.std(axis=1, ddof=1)
    b_inc = pilot[::-1]
    ln_sd = np.log(np.maximum(sd[::-1], 1e-12))
    grid = np.linspace(b_inc[0], b_inc[-1], 4001)
    sig = np.exp(np.interp(grid, b_inc, ln_sd))

    # MBAR at the top end pools rungs from one side only, so the error there is ~2x the
    # interior one: double the density over the last ~2/sigma_E below beta_max
    boost = 1.0 + np.exp(-(grid[-1] - grid) * sig[-1] / 2.0)

    def cumulative(a):
        rho = np.maximum(a * boost / sig, sig / max_swap_gap)
        return np.concatenate(([0.0], np.cumsum(0.5 * (rho[1:] + rho[:-1]) * np.diff(grid))))

    # the swap floor alone may already need more than K - 1 gaps: then A = 0 (swap-limited)
    lo, hi = 0.0, 1.0
    while cumulative(hi)[-1] < n_temps - 1:
        hi *= 2.0
    if cumulative(lo)[-1] >= n_temps - 1:
        hi = lo
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if cumulative(mid)[-1] < n_temps - 1:
            lo = mid
        else:
            hi = mid
    c = cumulative(hi)
    # beta = 0 stays a rung, as in default_ladder: the uniform ensemble is known exactly
    # there and it divides the two signs; the gaps are shared in proportion to the integral
    c0 = float(np.interp(0.0, grid, c))
    m = int(min(max(round((n_temps - 1) * c0 / c[-1]), 1), n_temps - 2))
    targets = np.concatenate((np.linspace(0.0, c0, m + 1), np.linspace(c0, c[-1], n_temps - m)[1:]))
    betas = np.interp(targets, c, grid)
    betas[0], betas[m], betas[-1] = b_inc[0], 0.0, b_inc[-1]
    return betas[::-1].copy()
