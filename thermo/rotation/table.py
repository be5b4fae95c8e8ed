"""The (beta, omega) table of a vortex gas: replica exchange pooled by MBAR over both.

:func:`build_table` samples exp[-beta (H - omega M)] on a grid of states
(:mod:`thermo.rotation.sampler`) and pools every sample of every state with MBAR [Shirts &
Chodera, J. Chem. Phys. 129, 124105 (2008)] for the reduced potentials
u_k = beta_k (H - omega_k M) (:func:`thermo.mbar.solve_mbar` with ``reduced``). The result, a
:class:`RotatingTable`, answers at any (beta, omega) inside the sampled grid:

* ln Z(beta, omega) (relative to the first state), exactly by reweighting the pooled samples and
  on a fine grid (:attr:`RotatingTable.log_z_grid`, interpolated by a bicubic spline for the
  likelihood surfaces of thermo.rotation.estimate);
* the cumulants of (H, M) up to third order (means, covariance, third cumulants), the
  quantities the maximum-likelihood and microcanonical estimates need;
* the same for every block-bootstrap replicate (contiguous blocks of each state's series, so
  autocorrelation is respected), whose spread is the table's own error.

Units: energies in E0; M in the squared length unit; beta in 1/E0; omega in E0.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.interpolate import RectBivariateSpline

from thermo.errors import SamplerError
from thermo.mbar import logsumexp, solve_mbar
from thermo.rotation.sampler import RotatingSamples, default_axes, run_rotating

#: points of the ln Z grid along beta and along omega
GRID_BETAS, GRID_OMEGAS = 65, 33
#: recorded samples per state when RotatingSettings.thin is None
SAMPLES_PER_STATE = 600
_CHUNK = 3_000_000          # grid points x samples per chunk of the ln Z grid


@dataclass(frozen=True)
class RotatingSettings:
    """Effort and state grid of a (beta, omega) table.

    Attributes
    ----------
    n_betas, n_omegas : grid shape (beta ladder of thermo.sampler.default_ladder; omega evenly
        spaced over [-omega_max_n N, omega_max_n N]).
    omega_max_n : half-width of the omega range in units of N (omega~ / N).
    beta_max, overshoot : ends of the beta ladder (thermo.sampler.default_ladder).
    n_sweeps : production sweeps; burn_in, thin : as for run_tempering (None: defaults,
        thin chosen to keep about SAMPLES_PER_STATE samples per state).
    n_boot : bootstrap replicates of the MBAR solution.

    Units: beta in 1/E0; omega_max_n dimensionless (omega in E0 divided by N).
    """

    n_betas: int = 12
    n_omegas: int = 5
    omega_max_n: float = 1.0
    beta_max: float = 1.0
    overshoot: float = 1.15
    n_sweeps: int = 4000
    burn_in: int | None = None
    thin: int | None = None
    n_boot: int = 8

    def __post_init__(self) -> None:
        if not (isinstance(self.n_betas, (int, np.integer)) and self.n_betas >= 3):
            raise SamplerError(f"RotatingSettings.n_betas = {self.n_betas!r}; need an integer >= 3")
        if not (isinstance(self.n_omegas, (int, np.integer)) and self.n_omegas >= 2):
            raise SamplerError(f"RotatingSettings.n_omegas = {self.n_omegas!r}; need an integer "
                               ">= 2 (omega must be sampled on both sides of its estimate)")
        if not (np.isfinite(self.omega_max_n) and self.omega_max_n > 0):
            raise SamplerError(f"RotatingSettings.omega_max_n = {self.omega_max_n!r}; need > 0")
        if int(self.n_sweeps) < 10:
            raise SamplerError(f"RotatingSettings.n_sweeps = {self.n_sweeps}; need >= 10")
        if int(self.n_boot) < 2:
            raise SamplerError(f"RotatingSettings.n_boot = {self.n_boot}; need >= 2 for errors")


#: the default effort (module-level, so that it is not a call in argument defaults)
DEFAULT_SETTINGS = RotatingSettings()


@dataclass(frozen=True)
class RotatingTable:
    """MBAR over (beta, omega) states for one (N+, N-, domain, core radius).

    Attributes
    ----------
    n_plus, n_minus, domain_key, core_radius : what the table describes.
    betas, omegas : (K,) states (beta-major grid); beta_axis (n_betas,), omega_axis (n_omegas,).
    n_k : (K,) samples per state; energies, impulses : (Ntot,) pooled H and M.
    f : (K,) free energies (f[0] = 0); log_denom : (Ntot,) MBAR denominators.
    boot_log_denom : (B, Ntot) the denominators of every bootstrap replicate;
    boot_counts : (B, Ntot) uint16 multiplicities of the replicates.
    log_z_grid : (GRID_BETAS, GRID_OMEGAS) ln Z relative to the first state on
        grid_betas x grid_omegas (the sampled rectangle).
    diagnostics : acceptance, swap acceptance, tau_int arrays; settings : dict.

    Units: energies in E0, M in length unit^2, beta in 1/E0, omega in E0.
    """

    n_plus: int
    n_minus: int
    domain_key: str
    core_radius: float
    betas: np.ndarray
    omegas: np.ndarray
    beta_axis: np.ndarray
    omega_axis: np.ndarray
    n_k: np.ndarray
    energies: np.ndarray
    impulses: np.ndarray
    f: np.ndarray
    log_denom: np.ndarray
    boot_log_denom: np.ndarray
    boot_counts: np.ndarray
    grid_betas: np.ndarray
    grid_omegas: np.ndarray
    log_z_grid: np.ndarray
    diagnostics: dict = field(default_factory=dict)
    settings: dict = field(default_factory=dict)

    @property
    def n_vortices(self) -> int:
        return self.n_plus + self.n_minus

    @property
    def beta_range(self) -> tuple[float, float]:
        """(lowest, highest) sampled beta. Units: 1/E0."""
        return float(self.beta_axis.min()), float(self.beta_axis.max())

    @property
    def omega_range(self) -> tuple[float, float]:
        """(lowest, highest) sampled omega. Units: E0."""
        return float(self.omega_axis.min()), float(self.omega_axis.max())

    def check_state(self, beta: float, omega: float) -> None:
        """Raise SamplerError for a state outside the sampled rectangle (no extrapolation)."""
        (b0, b1), (w0, w1) = self.beta_range, self.omega_range
        tol_b, tol_w = 1e-9 * (b1 - b0), 1e-9 * (w1 - w0)
        if not (b0 - tol_b <= beta <= b1 + tol_b and w0 - tol_w <= omega <= w1 + tol_w):
            raise SamplerError(f"(beta, omega) = ({beta:.4g}, {omega:.4g}) lies outside the "
                               f"sampled states beta in [{b0:.4g}, {b1:.4g}], omega in "
                               f"[{w0:.4g}, {w1:.4g}]; rebuild with a wider grid")

    def _log_weights(self, beta: float, omega: float, replicate: int | None) -> np.ndarray:
        if replicate is None:
            return -beta * (self.energies - omega * self.impulses) - self.log_denom
        with np.errstate(divide="ignore"):
            return (-beta * (self.energies - omega * self.impulses)
                    - self.boot_log_denom[replicate]
                    + np.log(self.boot_counts[replicate].astype(float)))

    def log_z(self, beta: float, omega: float, replicate: int | None = None) -> float:
        """ln Z(beta, omega) - ln Z(state 0), by reweighting the pooled samples (exact MBAR)."""
        return float(logsumexp(self._log_weights(beta, omega, replicate)))

    def cumulants(self, beta: float, omega: float, replicate: int | None = None,
                  third: bool = True) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Cumulants of x = (H, M) at (beta, omega): mean (2,), covariance (2, 2), third (2, 2, 2).

        ``replicate``: a bootstrap replicate's weights instead of the central ones;
        ``third`` False skips the third cumulants (None).

        Units: H in E0, M in length unit^2 (products accordingly).
        """
        lw = self._log_weights(beta, omega, replicate)
        lw -= lw.max()
        w = np.exp(lw, out=lw)
        w /= w.sum()
        x = self.__dict__.get("_x")
        if x is None:
            x = np.stack([self.energies, self.impulses])        # (2, Ntot), kept
            object.__setattr__(self, "_x", x)
        mean = x @ w
        d = x - mean[:, None]
        dw = d * w
        cov = dw @ d.T
        if not third:
            return mean, cov, None
        k3 = np.empty((2, 2, 2))
        for i, j, k in np.ndindex(2, 2, 2):
            if i <= j <= k:
                val = float((dw[i] * d[j]) @ d[k])
                for perm in {(i, j, k), (i, k, j), (j, i, k), (j, k, i), (k, i, j), (k, j, i)}:
                    k3[perm] = val
        return mean, cov, k3

    def log_z_spline(self):
        """Bicubic spline of :attr:`log_z_grid` (scipy RectBivariateSpline, ascending axes)."""
        cached = self.__dict__.get("_spline")
        if cached is None:
            cached = RectBivariateSpline(self.grid_betas, self.grid_omegas, self.log_z_grid)
            object.__setattr__(self, "_spline", cached)
        return cached


def log_z_on_grid(energies, impulses, log_denom, grid_betas, grid_omegas) -> np.ndarray:
    """ln sum_n exp[-beta (E_n - omega M_n) - log_denom_n] on a grid, chunked over beta.

    Units: E in E0, M in length unit^2, beta in 1/E0, omega in E0.
    """
    out = np.empty((grid_betas.size, grid_omegas.size))
    rows = max(1, _CHUNK // max(energies.size * grid_omegas.size, 1))
    for start in range(0, grid_betas.size, rows):
        b = grid_betas[start:start + rows]                      # (r,)
        a = (-b[:, None, None] * (energies[None, None, :]
                                  - grid_omegas[None, :, None] * impulses[None, None, :])
             - log_denom[None, None, :])
        out[start:start + rows] = logsumexp(a, axis=2)
    return out


def _reduced(samples: RotatingSamples) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    e = samples.energies.ravel()
    m = samples.impulses.ravel()
    u = samples.betas[:, None] * (e[None, :] - samples.omegas[:, None] * m[None, :])
    return e, m, u


def _bootstrap_counts(samples: RotatingSamples, n_boot: int, rng) -> np.ndarray:
    """Block-bootstrap multiplicities (B, Ntot): blocks of ~2 tau_int of each state's series."""
    k, s = samples.energies.shape
    out = np.zeros((n_boot, k * s), np.uint16)
    for kk in range(k):
        tau = samples.tau_int[kk]
        block = int(min(max(2.0 * (tau if np.isfinite(tau) else 1.0), 1.0), max(s // 4, 1)))
        n_blocks = -(-s // block)
        for b in range(n_boot):
            starts = rng.integers(0, s - block + 1, n_blocks)
            idx = (starts[:, None] + np.arange(block)[None, :]).ravel()[:s]
            out[b, kk * s:(kk + 1) * s] = np.bincount(idx, minlength=s)
    return out


def table_from_samples(samples: RotatingSamples, n_boot: int, rng: np.random.Generator,
                       domain_key: str, settings: dict) -> RotatingTable:
    """Pool a replica-exchange run by MBAR, bootstrap it and tabulate ln Z."""
    e, m, u = _reduced(samples)
    n_k = np.full(samples.betas.size, samples.n_samples, float)
    f, ld = solve_mbar(e, samples.betas, n_k, reduced=u)
    counts = _bootstrap_counts(samples, n_boot, rng)
    boot_ld = np.empty((n_boot, e.size))
    for b in range(n_boot):
        fb, _ = solve_mbar(e, samples.betas, n_k, counts=counts[b], f_init=f, reduced=u,
                           tol=1e-7, max_iter=3)
        boot_ld[b] = logsumexp(-u + (fb + np.log(n_k))[:, None], axis=0)
    b_axis = np.unique(samples.betas)
    w_axis = np.unique(samples.omegas)
    gb = np.linspace(b_axis[0], b_axis[-1], GRID_BETAS)
    gw = np.linspace(w_axis[0], w_axis[-1], GRID_OMEGAS)
    lz = log_z_on_grid(e, m, ld, gb, gw)
    diag = {"acceptance": samples.acceptance, "swap_acceptance": samples.swap_acceptance,
            "tau_int": samples.tau_int, "step_sizes": samples.step_sizes}
    return RotatingTable(
        n_plus=samples.n_plus, n_minus=samples.n_minus, domain_key=domain_key,
        core_radius=samples.core_radius, betas=samples.betas, omegas=samples.omegas,
        beta_axis=b_axis, omega_axis=w_axis, n_k=n_k, energies=e, impulses=m, f=f,
        log_denom=ld, boot_log_denom=boot_ld, boot_counts=counts, grid_betas=gb,
        grid_omegas=gw, log_z_grid=lz, diagnostics=diag, settings=dict(settings))


def run_options(n_plus: int, n_minus: int, settings: RotatingSettings) -> dict:
    """burn_in and thin of the replica-exchange run of a build."""
    thin = settings.thin if settings.thin is not None else max(
        1, int(settings.n_sweeps) // SAMPLES_PER_STATE)
    # as for the density of states (thermo.dos.build): a burn-in growing with N, since the
    # clustered end relaxes slowly from random starts
    burn = settings.burn_in if settings.burn_in is not None else max(
        1500, 150 * (n_plus + n_minus), int(settings.n_sweeps) // 5)
    return {"thin": int(thin), "burn_in": int(burn)}


def build_table(n_plus: int, n_minus: int, domain: Any, core_radius: float,
                settings: RotatingSettings = DEFAULT_SETTINGS,
                rng: np.random.Generator | None = None,
                progress: Callable[[int, int], Any] | None = None) -> RotatingTable:
    """Sample the (beta, omega) grid of ``settings`` and pool it (no caching).

    Parameters
    ----------
    n_plus, n_minus : vortex numbers; domain : a domain conserving M (a Disk);
    core_radius : hard-core radius a; settings : RotatingSettings; rng : source of the build.
    progress : ``progress(done, total)`` in Monte Carlo sweeps, or None.

    Units: core radius in the domain's length unit.
    """
    rng = np.random.default_rng() if rng is None else rng
    betas, omegas = default_axes(n_plus, n_minus, core_radius, domain,
                                 n_betas=int(settings.n_betas), n_omegas=int(settings.n_omegas),
                                 omega_max_n=float(settings.omega_max_n),
                                 beta_max=float(settings.beta_max),
                                 overshoot=float(settings.overshoot))
    kw = run_options(n_plus, n_minus, settings)
    samples = run_rotating(domain, n_plus, n_minus, betas, omegas, int(settings.n_sweeps),
                           core_radius, rng, progress=progress, **kw)
    stored = dict(n_betas=int(settings.n_betas), n_omegas=int(settings.n_omegas),
                  omega_max_n=float(settings.omega_max_n), beta_max=float(settings.beta_max),
                  overshoot=float(settings.overshoot), n_sweeps=int(settings.n_sweeps),
                  n_boot=int(settings.n_boot), **kw)
    return table_from_samples(samples, int(settings.n_boot), rng, repr(tuple(domain.key())),
                              stored)
