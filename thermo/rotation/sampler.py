"""Replica exchange over states (beta, omega) of the rotating point-vortex ensemble.

In a domain that conserves the signed angular impulse M = sum_i s_i |u_i|^2 (the disk,
:attr:`thermo.domains.base.Domain.conserves_angular_impulse`) the equilibrium ensemble of the
point-vortex gas is

.. math:: p(x) \\propto \\exp[-\\beta (H(x) - \\omega M(x))]

(sign convention of this package; the factor exp(beta omega M) favours M of the sign of
beta omega: at beta > 0 and omega > 0 positive vortices far from the centre and negative ones
near it, at beta < 0 the reverse; at omega = 0 it is the canonical ensemble of
:mod:`thermo.sampler`). Each state k has the reduced potential u_k = beta_k (H - omega_k M).

One sweep = N single-vortex Metropolis moves per replica (acceptance
min{1, exp(-beta (dH - omega dM))}, same hard core and proposals as :mod:`thermo.sampler`),
then one round of exchanges on one of several disjoint sets of neighbouring state pairs
(cycled sweep by sweep: along beta at fixed omega and along omega at fixed beta, even and odd
pairs), accepted with min{1, exp[u_a(x_a) + u_b(x_b) - u_a(x_b) - u_b(x_a)]}, the general
replica-exchange rule [Hukushima & Nemoto, JPSJ 65, 1604 (1996); Earl & Deem, PCCP 7, 3910
(2005)], which for omega_a = omega_b is the tempering rule of :mod:`thermo.sampler`.

Units: energies in E0 = rho kappa^2/(4 pi), beta in 1/E0, omega in E0 per unit of M (M in
the squared length unit, the disk radius), lengths in the domain's length unit.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from thermo.autocorr import integrated_autocorr_time
from thermo.domains.base import Domain, kernel_array
from thermo.energy import total_energy_kernel
from thermo.errors import SamplerError
from thermo.sampler import default_ladder, exchange_kernel, impulse_kernel, ledger_arrays

__all__ = ["RotatingSamples", "default_axes", "exchange_pairs", "run_rotating", "state_grid"]


def state_grid(betas, omegas) -> tuple[np.ndarray, np.ndarray]:
    """The states of a rectangular (beta, omega) grid, beta-major: state ib * K_w + iw.

    Units: beta in 1/E0, omega in E0.
    """
    b = np.asarray(betas, float).ravel()
    w = np.asarray(omegas, float).ravel()
    if b.size < 1 or w.size < 1 or not (np.all(np.isfinite(b)) and np.all(np.isfinite(w))):
        raise SamplerError(f"betas and omegas must be non-empty lists of finite numbers; got "
                           f"{betas!r} and {omegas!r}")
    for name, v in (("betas", b), ("omegas", w)):
        if v.size > 1 and not (np.all(np.diff(v) > 0) or np.all(np.diff(v) < 0)):
            raise SamplerError(f"{name} must be strictly monotonic, so that exchanges are "
                               f"between neighbouring states; got {v}")
    return np.repeat(b, w.size), np.tile(w, b.size)


def exchange_pairs(n_betas: int, n_omegas: int) -> np.ndarray:
    """Disjoint sets of neighbouring state pairs of a :func:`state_grid`, shape (S, P, 2).

    Four sets (fewer when an axis has one point): beta-neighbours (ib even, ib odd) at fixed
    omega, then omega-neighbours (iw even, iw odd) at fixed beta; rows are padded with -1.
    """
    sets = []
    for axis in (0, 1):
        for parity in (0, 1):
            pairs = []
            for ib in range(n_betas):
                for iw in range(n_omegas):
                    if axis == 0 and ib % 2 == parity and ib + 1 < n_betas:
                        pairs.append((ib * n_omegas + iw, (ib + 1) * n_omegas + iw))
                    if axis == 1 and iw % 2 == parity and iw + 1 < n_omegas:
                        pairs.append((ib * n_omegas + iw, ib * n_omegas + iw + 1))
            if pairs:
                sets.append(pairs)
    if not sets:
        return np.full((1, 1, 2), -1, np.int64)
    width = max(len(p) for p in sets)
    out = np.full((len(sets), width, 2), -1, np.int64)
    for k, p in enumerate(sets):
        out[k, :len(p)] = p
    return out


@dataclass(frozen=True)
class RotatingSamples:
    """Samples and diagnostics of a replica-exchange run over (beta, omega) states.

    Attributes
    ----------
    betas, omegas : (K,) the states (beta-major grid, :func:`state_grid`). Units: 1/E0, E0.
    n_betas, n_omegas : grid shape.
    energies, impulses : (K, S) H and M of each recorded sample. Units: E0, length unit^2.
    positions : (K, ceil(S / position_stride), N, 2) recorded configurations.
    signs : (N,) int64, positive first; n_plus, n_minus : int; core_radius : float.
    acceptance : (K,) production move acceptance.
    swap_acceptance : (S_sets, P) production exchange acceptance of every pair of
        :func:`exchange_pairs` (NaN for padding).
    tau_int : (K,) integrated autocorrelation time, in recorded samples, of the slower of
        H and M at each state.
    domain : Domain; step_sizes : (K,); burn_in, thin, seed : int.
    """

    betas: np.ndarray
    omegas: np.ndarray
    n_betas: int
    n_omegas: int
    energies: np.ndarray
    impulses: np.ndarray
    positions: np.ndarray
    signs: np.ndarray
    n_plus: int
    n_minus: int
    core_radius: float
    acceptance: np.ndarray
    swap_acceptance: np.ndarray
    tau_int: np.ndarray
    domain: Domain
    step_sizes: np.ndarray
    burn_in: int
    thin: int
    seed: int

    @property
    def n_samples(self) -> int:
        """Recorded samples per state, S."""
        return int(self.energies.shape[1])


def _initial(domain, n, core, rng) -> np.ndarray:
    pos = np.empty((n, 2))
    for i in range(n):
        for _ in range(10000):
            p = domain.sample_uniform(rng, 1, margin=core)[0]
            if i == 0 or np.min(((pos[:i] - p) ** 2).sum(1)) >= 4 * core * core:
                pos[i] = p
                break
        else:
            raise SamplerError(f"cannot place {n} vortices with core radius {core} in "
                               f"{domain.key()}: use a smaller core_radius")
    return pos


def _check_run(domain, n_plus, n_minus, n_sweeps, thin, core_radius, burn_in) -> int:
    if not isinstance(domain, Domain):
        raise SamplerError(f"domain must be a thermo domain (a Disk); got {domain!r}")
    if not domain.conserves_angular_impulse:
        domain.angular_impulse(np.zeros((1, 2)), [1])      # raises the DomainError
    for name, v in (("n_plus", n_plus), ("n_minus", n_minus)):
        if not isinstance(v, (int, np.integer)) or v < 0:
            raise SamplerError(f"{name} = {v!r}: must be a non-negative integer")
    if n_plus + n_minus < 1:
        raise SamplerError("n_plus + n_minus must be at least 1 vortex")
    if not (isinstance(n_sweeps, (int, np.integer)) and n_sweeps >= 1):
        raise SamplerError(f"n_sweeps = {n_sweeps!r}: must be a positive integer")
    if not (isinstance(thin, (int, np.integer)) and 1 <= thin <= n_sweeps):
        raise SamplerError(f"thin = {thin!r}: must be an integer between 1 and n_sweeps")
    if not (isinstance(core_radius, (int, float)) and math.isfinite(core_radius)
            and 0 < core_radius < 0.25):
        raise SamplerError(f"core_radius = {core_radius!r}: must be > 0 and < 0.25 domain units")
    burn = max(200, n_sweeps // 5) if burn_in is None else burn_in
    if not (isinstance(burn, (int, np.integer)) and burn >= 0):
        raise SamplerError(f"burn_in = {burn_in!r}: must be a non-negative integer")
    return int(burn)


def run_rotating(domain: Domain, n_plus: int, n_minus: int, betas, omegas, n_sweeps: int,
                 core_radius: float, rng: np.random.Generator, burn_in: int | None = None,
                 thin: int = 1, position_stride: int = 1, target_acceptance: float = 0.4,
                 progress=None, n_reports: int = 20) -> RotatingSamples:
    """Sample exp[-beta (H - omega M)] on a (beta, omega) grid by replica exchange.

    Parameters
    ----------
    domain : a domain that conserves M (a Disk).
    n_plus, n_minus : vortex numbers.
    betas, omegas : strictly monotonic axes of the state grid (:func:`state_grid`).
        Units: 1/E0 and E0.
    n_sweeps, core_radius, rng, burn_in, thin, position_stride, target_acceptance :
        as for :func:`thermo.sampler.run_tempering`.
    progress : callable ``progress(done, total)`` of sweeps, or None; ``n_reports`` pieces.

    Returns
    -------
    RotatingSamples
    """
    burn = _check_run(domain, n_plus, n_minus, n_sweeps, thin, core_radius, burn_in)
    if not (isinstance(position_stride, (int, np.integer)) and position_stride >= 1):
        raise SamplerError(f"position_stride = {position_stride!r}: must be a positive integer")
    b_axis, w_axis = np.asarray(betas, float).ravel(), np.asarray(omegas, float).ravel()
    b_states, w_states = state_grid(b_axis, w_axis)
    b_states, w_states = kernel_array(b_states, np.float64), kernel_array(w_states, np.float64)
    n = int(n_plus) + int(n_minus)
    k_rep = b_states.size
    signs = np.array([1] * int(n_plus) + [-1] * int(n_minus), dtype=np.int64)
    pos = kernel_array(np.stack([_initial(domain, n, core_radius, rng) for _ in range(k_rep)]),
                       np.float64)
    kern = domain.kernels()
    energies = np.array([total_energy_kernel(pos[k], signs, kern.self_energy, kern.pair_energy,
                                             kern.params) for k in range(k_rep)])
    impulses = np.array([impulse_kernel(pos[k], signs) for k in range(k_rep)])
    steps = np.full(k_rep, min(0.3, domain.max_step / 4))
    s_rec = n_sweeps // thin
    out_e, out_m = np.empty((k_rep, s_rec)), np.empty((k_rep, s_rec))
    out_pos = np.empty((k_rep, -(-s_rec // position_stride), n, 2))
    pairs = exchange_pairs(b_axis.size, w_axis.size)
    swap_acc, swap_att = np.zeros(pairs.shape[:2]), np.zeros(pairs.shape[:2])
    move_acc, move_att = np.zeros(k_rep), np.zeros(k_rep)
    block_acc, block_att = np.zeros(k_rep), np.zeros(k_rep)
    seed = int(rng.integers(0, 2**31 - 1))
    n_total = int(burn + s_rec * thin)
    ledgers, slots, work = ledger_arrays(k_rep, n, kern.keeps_ledger)
    if progress is None or n_total <= 1:
        edges = [0, n_total]
    else:
        grid = np.linspace(0, n_total, min(n_reports, n_total) + 1).round()
        edges = np.unique(grid).astype(int).tolist()
    for start, stop in itertools.pairwise(edges):
        exchange_kernel(pos, energies, impulses, signs, b_states, w_states, steps,
                         float(domain.max_step), *kern, float(core_radius), int(start),
                         int(stop), burn, int(thin), max(5, math.ceil(200 / n)),
                         float(target_acceptance), out_e, out_m, out_pos, move_acc, move_att,
                         pairs, swap_acc, swap_att, seed, int(position_stride), block_acc,
                         block_att, ledgers, slots, work)
        if progress is not None:
            progress(int(stop), n_total)
    tau = np.array([max(integrated_autocorr_time(e), integrated_autocorr_time(m))
                    for e, m in zip(out_e, out_m)])
    with np.errstate(invalid="ignore", divide="ignore"):
        swap_rate = np.where(pairs[..., 0] >= 0, swap_acc / np.maximum(swap_att, 1), np.nan)
    return RotatingSamples(
        betas=b_states, omegas=w_states, n_betas=int(b_axis.size), n_omegas=int(w_axis.size),
        energies=out_e, impulses=out_m, positions=out_pos, signs=signs, n_plus=int(n_plus),
        n_minus=int(n_minus), core_radius=float(core_radius),
        acceptance=move_acc / np.maximum(move_att, 1), swap_acceptance=swap_rate, tau_int=tau,
        domain=domain, step_sizes=steps.copy(), burn_in=burn, thin=int(thin), seed=seed)


def default_axes(n_plus: int, n_minus: int, core_radius: float, domain: Domain,
                 n_betas: int = 12, n_omegas: int = 5, omega_max_n: float = 1.0,
                 beta_max: float = 1.0, overshoot: float = 1.15
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Axes of a default state grid: the beta ladder of :func:`thermo.sampler.default_ladder`
    and omega evenly over [-omega_max_n N, omega_max_n N].

    Why omega ~ N: in the mean-field limit H ~ N^2 and M ~ N, so beta~ N and omega~ / N are
    the quantities that stay finite (the single-species stream function is N (1 - r^2) at
    beta = 0, so omega~ = -N cancels its r^2 term; thermo.rotation.meanfield).

    Units: beta in 1/E0, omega in E0.
    """
    if not (isinstance(n_omegas, (int, np.integer)) and n_omegas >= 1):
        raise SamplerError(f"n_omegas = {n_omegas!r}: must be a positive integer")
    if not (math.isfinite(omega_max_n) and omega_max_n >= 0):
        raise SamplerError(f"omega_max_n = {omega_max_n!r}: must be >= 0 (omega~ / N)")
    if n_omegas > 1 and omega_max_n == 0:
        raise SamplerError("omega_max_n = 0 needs n_omegas = 1")
    betas = default_ladder(n_plus, n_minus, core_radius, domain, n_temps=n_betas,
                           beta_max=beta_max, overshoot=overshoot)
    n = n_plus + n_minus
    omegas = (np.linspace(-1.0, 1.0, n_omegas) if n_omegas > 1 else np.zeros(1)) * omega_max_n * n
    return betas, omegas
