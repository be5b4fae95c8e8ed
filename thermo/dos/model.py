"""Density of states S(E) = ln g(E) of the point-vortex gas from parallel-tempering samples.

All replicas of a tempering run are pooled with the multistate Bennett acceptance ratio
(MBAR; Shirts & Chodera, J. Chem. Phys. 129, 124105 (2008)). Every state has the reduced
potential u_k(x) = beta_k E(x), so the self-consistent MBAR equations

.. math::
    f_i = -\\ln \\sum_n \\frac{e^{-\\beta_i E_n}}{\\sum_k N_k e^{f_k - \\beta_k E_n}}

involve only the pooled energies, which are therefore binned finely in E (width
0.05 / max |beta|, :func:`thermo.dos.tables.energy_bins`) before solving. They are solved
by Newton's method on the convex MBAR objective (K ~ 20 states, so the K x K Hessian is
cheap); this takes a handful of
iterations from a thermodynamic-integration start, which makes a block bootstrap of the
whole estimate (re-solving for every replicate) affordable. pymbar 4 solves the same
equations and is used in the tests as an independent check.

From the solution: ln Z(beta) at any beta, canonical averages of the energy and of any
per-sample observable (the structure observables of thermo.classify), ln g(E) on bins and
the microcanonical beta(E) = dS/dE. Uncertainties are the spread over a block bootstrap
(contiguous blocks of each temperature's series, so autocorrelation is respected).

:func:`thermo.dos.build.build` runs the sampler and pools it; :mod:`thermo.dos.cache` keeps builds
on disk (:func:`~thermo.dos.cache.load_or_build`).

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0 (beta~).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy.interpolate import CubicSpline

from thermo.classify import structure_observables
from thermo.dos import tables as dos_tables
from thermo.errors import SamplerError
from thermo.mbar import free_energies_by_integration, logsumexp, solve_mbar, tau_int


@dataclass(frozen=True)
class DensityOfStates:
    """MBAR solution for one (N+, N-, domain, core radius), with bootstrap replicates.

    Attributes
    ----------
    n_plus, n_minus : vortex numbers; domain_key : str(domain.key()); core_radius : a.
    betas : (K,) ladder; n_k : (K,) samples per state; energies : (Ntot,) pooled.
    f : (K,) free energies; log_denom : (Ntot,) MBAR denominators.
    boot_f : (B, K) bootstrap free energies; boot_counts : (B, Ntot) uint16 multiplicities.
    observables : dict name -> (Ntot,) per-sample observables (thermo.classify).
    diagnostics : dict of the sampler's acceptance, swap acceptance, tau, ess arrays.
    settings : dict of the effort settings used to build it.
    sample_index : (M,) indices into the pooled samples whose configurations are kept;
    sample_positions : (M, N, 2) float32 those configurations, positive vortices first
        (about OBSERVED_PER_REPLICA per rung; the structure observables are evaluated on them).

    Units: energies in E0, betas in 1/E0.
    """

    n_plus: int
    n_minus: int
    domain_key: str
    core_radius: float
    betas: np.ndarray
    n_k: np.ndarray
    energies: np.ndarray
    f: np.ndarray
    log_denom: np.ndarray
    boot_f: np.ndarray
    boot_counts: np.ndarray
    observables: dict = field(default_factory=dict)
    diagnostics: dict = field(default_factory=dict)
    settings: dict = field(default_factory=dict)
    sample_index: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    sample_positions: np.ndarray = field(default_factory=lambda: np.zeros((0, 0, 2), np.float32))

    # ------------------------------------------------------------------ core
    @property
    def n_vortices(self) -> int:
        return self.n_plus + self.n_minus

    @property
    def beta_range(self) -> tuple[float, float]:
        """(lowest, highest) beta of the ladder; reweighting is trusted inside it."""
        return float(self.betas.min()), float(self.betas.max())

    def energy_bins(self) -> tuple[np.ndarray, np.ndarray]:
        """(bin of each pooled sample, bin energies): see thermo.dos.tables.energy_bins."""
        return self._memo("bins", lambda: dos_tables.energy_bins(self.energies, self.betas))

    def _replicate_log_denoms(self) -> list[np.ndarray]:
        cache = self.__dict__.get("_ld_cache")
        if cache is None:
            base = -np.outer(self.betas, self.energies)
            k = self.betas.size
            cache = []
            for fb, cb in zip(self.boot_f, self.boot_counts):
                ln_n = np.log(cb.reshape(k, -1).sum(axis=1).astype(float))
                cache.append(logsumexp(base + (fb + ln_n)[:, None], axis=0))
            object.__setattr__(self, "_ld_cache", cache)
        return cache

    def _log_weights(self, beta: np.ndarray, ld: np.ndarray,
                     counts: np.ndarray | None) -> np.ndarray:
        lw = -np.outer(beta, self.energies) - ld[None, :]
        if counts is not None:
            with np.errstate(divide="ignore"):
                lw = lw + np.log(counts.astype(float))[None, :]
        return lw

    def _check_beta(self, beta: Any) -> np.ndarray:
        b = np.atleast_1d(np.asarray(beta, float))
        lo, hi = self.beta_range
        span = hi - lo
        if np.any(~np.isfinite(b)) or np.any(b < lo - 0.02 * span) or np.any(b > hi + 0.02 * span):
            raise SamplerError(
                f"beta = {b} lies outside the sampled ladder [{lo:.4g}, {hi:.4g}] (1/E0); "
                "reweighting cannot extrapolate: rebuild with a wider ladder")
        return b

    def _weights(self, beta: np.ndarray, ld, counts) -> np.ndarray:
        lw = self._log_weights(beta, ld, counts)
        lw -= lw.max(axis=1, keepdims=True)
        np.exp(lw, out=lw)
        lw /= lw.sum(axis=1, keepdims=True)
        return lw

    def _moments(self, beta: np.ndarray, values: np.ndarray, ld, counts):
        """Weighted mean and variance of ``values`` at each beta (chunked, no (M, n) matrix)."""
        is_energy = values is self.energies
        lw0, e, v = -ld, self.energies, values
        # observables may be evaluated on a subset of the samples (NaN elsewhere)
        keep = None if is_energy else np.isfinite(values)
        if counts is not None:
            keep = counts > 0 if keep is None else keep & (counts > 0)
        if keep is not None:
            c = 1.0 if counts is None else counts[keep].astype(float)
            lw0 = lw0[keep] + np.log(c)
            e, v = e[keep], v[keep]
        if is_energy:
            _, mean, var, _, _ = dos_tables.tilted_moments(e, lw0, beta)
            return mean, var
        shift = float(np.mean(v))
        vs = v - shift
        _, _, _, _, vm = dos_tables.tilted_moments(e, lw0, beta, np.stack([vs, vs * vs]))
        return vm[:, 0] + shift, vm[:, 1] - vm[:, 0] ** 2

    def _with_errors(self, fn, max_replicates: int | None = None):
        value = fn(self.log_denom, None)
        pairs = list(zip(self._replicate_log_denoms(), self.boot_counts))[:max_replicates]
        reps = np.array([fn(ld, c) for ld, c in pairs])
        err = reps.std(axis=0, ddof=1) if len(reps) > 1 else np.full_like(value, np.nan)
        return value, err

    def canonical_many(self, beta: Any, names: Sequence[str],
                       max_replicates: int | None = None) -> dict[str, tuple]:
        """Canonical (mean, mean_err) of several observables, weights computed once.

        Units: those of each observable.
        """
        b = self._check_beta(beta)
        vals = []
        for name in names:
            if name == "energy":
                vals.append(self.energies)
            elif name in self.observables:
                vals.append(self.observables[name])
            else:
                raise SamplerError(f"unknown observable {name!r}; available: "
                                   f"{['energy', *sorted(self.observables)]}")
        stack = np.stack(vals)                                  # (V, Ntot)
        # observables may be evaluated on a subset of the samples (NaN elsewhere): each
        # average is normalised over the samples where its observable exists
        ok = np.isfinite(stack)
        filled = np.where(ok, stack, 0.0)

        def fn(ld, c):
            w = self._weights(b, ld, c)
            return (w @ filled.T) / (w @ ok.T)                   # (M, V)

        mean, err = self._with_errors(fn, max_replicates)
        return {name: (mean[:, i], err[:, i]) for i, name in enumerate(names)}

    def subset_averages(self, index: np.ndarray, values: np.ndarray, beta: Any
                        ) -> tuple[np.ndarray, np.ndarray]:
        """Canonical averages of per-sample values known on a subset of the pooled samples.

        Parameters
        ----------
        index : (M,) indices into the pooled samples (e.g. ``sample_index``).
        values : (V, M) values on those samples.
        beta : (B,) betas inside the ladder.

        Returns
        -------
        central (B, V) and replicates (R, B, V) (one per bootstrap replicate). The averages
        are self-normalised over the subset, as for the structure observables.

        Units: those of the values.
        """
        b = self._check_beta(beta)
        idx = np.asarray(index, np.int64)
        vals = np.atleast_2d(np.asarray(values, float))
        e = self.energies[idx]

        def average(ld, counts):
            lw = -np.outer(b, e) - ld[idx][None, :]
            if counts is not None:
                with np.errstate(divide="ignore"):
                    lw = lw + np.log(counts[idx].astype(float))[None, :]
            lw -= lw.max(axis=1, keepdims=True)
            w = np.exp(lw)
            w /= w.sum(axis=1, keepdims=True)
            return w @ vals.T

        central = average(self.log_denom, None)
        reps = np.array([average(ld, c) for ld, c in zip(self._replicate_log_denoms(),
                                                          self.boot_counts)])
        return central, reps

    # ------------------------------------------------------------ canonical
    def log_z(self, beta: Any) -> np.ndarray:
        """ln Z(beta) - ln Z(0), i.e. ln <exp(-beta E)> over uniform positions.

        Units: dimensionless; beta in 1/E0.
        """
        b = self._check_beta(beta)
        return self._log_z(b, self.log_denom, None)

    def _log_z(self, b, ld, counts):
        lw = self._log_weights(b, ld, counts)
        l0 = self._log_weights(np.zeros(1), ld, counts)
        return logsumexp(lw, axis=1) - logsumexp(l0, axis=1)

    def log_z_replicates(self, beta: Any, max_replicates: int | None = None) -> np.ndarray:
        """(B, M) bootstrap replicates of ln Z(beta) - ln Z(0)."""
        b = self._check_beta(beta)
        pairs = list(zip(self._replicate_log_denoms(), self.boot_counts))[:max_replicates]
        return np.array([self._log_z(b, ld, c) for ld, c in pairs])

    def canonical(self, beta: Any, observable: str = "energy"
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Canonical mean and variance of an observable at the given beta(s).

        Parameters
        ----------
        beta : float or (M,) array inside the ladder range (1/E0).
        observable : "energy" or a key of ``observables`` (e.g. "dipole_moment", "c1",
            "cluster_fraction").

        Returns
        -------
        mean, mean_err, var, var_err : (M,) arrays (bootstrap standard errors).

        Units: those of the observable (energy in E0).
        """
        b = self._check_beta(beta)
        if observable == "energy":
            values = self.energies
        elif observable in self.observables:
            values = self.observables[observable]
        else:
            raise SamplerError(f"unknown observable {observable!r}; available: "
                               f"{['energy', *sorted(self.observables)]}")
        both, both_err = self._with_errors(
            lambda ld, c: np.concatenate(self._moments(b, values, ld, c)))
        m = b.size
        return both[:m], both_err[:m], both[m:], both_err[m:]

    def mean_energy(self, beta: Any) -> tuple[np.ndarray, np.ndarray]:
        """<E>(beta) and its bootstrap standard error. Units: E0."""
        m, me, _, _ = self.canonical(beta)
        return m, me

    def energy_variance(self, beta: Any) -> tuple[np.ndarray, np.ndarray]:
        """Var E(beta) and its bootstrap standard error. Units: E0^2."""
        _, _, v, ve = self.canonical(beta)
        return v, ve

    # ------------------------------------------------------- microcanonical
    def log_dos(self, bins: int | np.ndarray = 60
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """ln g(E) on energy bins, normalised so that the integral of g is 1.

        g(E) is the probability density of E for uniform independent positions (beta = 0),
        so S(E) = ln g(E) up to the constant N ln(area).

        Returns
        -------
        edges : (B+1,), ln_g : (B,), ln_g_err : (B,) (NaN where a bin is empty).

        Units: E in E0; g in 1/E0.
        """
        edges = np.histogram_bin_edges(self.energies, bins)

        def fn(ld, counts):
            lw = -ld if counts is None else -ld + np.log(np.maximum(counts, 1e-300))
            lw = lw - logsumexp(lw)
            idx = np.clip(np.digitize(self.energies, edges) - 1, 0, len(edges) - 2)
            nb = len(edges) - 1
            top = np.full(nb, -np.inf)
            np.maximum.at(top, idx, lw)         # per-bin shift: no underflow in sparse bins
            safe = np.where(np.isfinite(top), top, 0.0)
            with np.errstate(divide="ignore"):
                out = np.log(np.bincount(idx, np.exp(lw - safe[idx]), minlength=nb)) + safe
            return out - np.log(np.diff(edges))

        val, _ = fn(self.log_denom, None), None
        reps = np.array([fn(ld, c) for ld, c in zip(self._replicate_log_denoms(),
                                                     self.boot_counts)])
        with np.errstate(invalid="ignore"):
            err = np.where(np.isfinite(reps).all(axis=0), reps.std(axis=0, ddof=1), np.nan)
        val = np.where(np.isfinite(val), val, np.nan)
        return edges, val, err

    def energy_range(self) -> tuple[float, float]:
        """Energies covered by the ladder: (<E>(beta_max), <E>(beta_min)). Units: E0."""
        lo, hi = self.beta_range
        m = self._moments(np.array([hi, lo]), self.energies, self.log_denom, None)[0]
        return float(m[0]), float(m[1])

    def _weighted_energies(self, ld, counts) -> tuple[np.ndarray, np.ndarray]:
        """Pooled energies and their log weights at beta = 0 (a bootstrap replicate's counts
        applied when given)."""
        lw0 = -ld
        en = self.energies
        if counts is not None:
            keep = counts > 0
            lw0 = lw0[keep] + np.log(counts[keep].astype(float))
            en = en[keep]
        return en, lw0

    def _beta_micro(self, e: np.ndarray, ld, counts, grid: np.ndarray) -> np.ndarray:
        en, lw0 = self._weighted_energies(ld, counts)
        return dos_tables.beta_micro_kernel(en, lw0, e, grid)

    def _beta_saddle(self, e: np.ndarray, ld, counts, grid: np.ndarray) -> np.ndarray:
        en, lw0 = self._weighted_energies(ld, counts)
        _, mean, var, k3, _ = dos_tables.tilted_moments(en, lw0, grid)
        return dos_tables.beta_saddle_from_cumulants(e, grid, mean, var, k3)

    def beta_micro(self, energy: Any, n_grid: int = dos_tables.N_TILT, direct: bool = False,
                   method: str = "saddle") -> tuple[np.ndarray, np.ndarray]:
        """Microcanonical beta(E) = dS/dE with a bootstrap standard error.

        ``method="saddle"`` (default): beta_c(E) - kappa3 / (2 kappa2^2) from the canonical
        cumulants at the canonical inverse beta_c(E) (derivation and O(1/N^2) remainder in
        :func:`thermo.dos.tables.beta_saddle_from_cumulants`); it has nearly the precision
        of the canonical curves. ``method="kernel"``: kernel estimate of the log derivative
        of the tilted energy density (no expansion, but several times noisier).

        NaN outside :meth:`energy_range` (no samples there to differentiate). By default
        the value is interpolated from :attr:`tables` (computed once per density of
        states on a fine energy grid); ``direct=True`` (or a non-default ``n_grid``)
        reweights all samples for these energies instead.

        Units: E in E0, beta in 1/E0.
        """
        if method not in ("saddle", "kernel"):
            raise SamplerError(f"beta_micro method = {method!r}; accepted: 'saddle', 'kernel'")
        e = np.atleast_1d(np.asarray(energy, float))
        if not direct and n_grid == dos_tables.N_TILT:
            t = self.tables
            name = "beta_saddle" if method == "saddle" else "beta_micro"
            grid, val, err = t["energy"], t[name], t[name + "_err"]
            inside = (e >= grid[0]) & (e <= grid[-1])
            b = np.where(inside, np.interp(e, grid, val), np.nan)
            be = np.where(inside, np.interp(e, grid, err), np.nan)
            return b, be
        lo, hi = self.beta_range
        grid = np.linspace(lo, hi, n_grid)
        fn = self._beta_saddle if method == "saddle" else self._beta_micro
        return self._with_errors(lambda ld, c: fn(e, ld, c, grid))

    # ---------------------------------------------------------------- tables
    @property
    def tables(self) -> dict:
        """Curves on fine grids (see :mod:`thermo.dos.tables`), computed once and memoised.

        Units: E in E0, beta in 1/E0.
        """
        t = self.__dict__.get("_tables")
        if t is None:
            t = dos_tables.compute_tables(self)
            object.__setattr__(self, "_tables", t)
        return t

    def has_tables(self) -> bool:
        """True when the tables are already computed (or were read from the cache file)."""
        return self.__dict__.get("_tables") is not None

    def _memo(self, name: str, factory):
        cache = self.__dict__.setdefault("_memo_cache", {})
        if name not in cache:
            cache[name] = factory()
        return cache[name]

    def log_z_spline(self) -> Any:
        """Cubic spline of ln Z(beta) - ln Z(0) over the ladder (from :attr:`tables`)."""
        t = self.tables
        return self._memo("lz", lambda: CubicSpline(t["beta"], t["log_z"]))

    def log_z_replicate_splines(self, max_replicates: int | None = None) -> list:
        """Cubic splines of the bootstrap replicates of ln Z(beta) - ln Z(0)."""
        t = self.tables
        reps = self._memo("lz_reps", lambda: [CubicSpline(t["beta"], r)
                                              for r in t["log_z_reps"]])
        return reps[:max_replicates]

    def canonical_curve(self, name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(beta grid, mean, bootstrap error) of "energy", "energy_variance" or an observable.

        Units: beta in 1/E0; those of the observable.
        """
        t = self.tables
        if name == "energy":
            return t["beta"], t["mean_energy"], t["mean_energy_err"]
        if name == "energy_variance":
            return t["beta"], t["var_energy"], t["var_energy_err"]
        if f"obs__{name}" not in t:
            raise SamplerError(f"unknown observable {name!r}; available: "
                               f"{['energy', *sorted(self.observables)]}")
        return t["beta"], t[f"obs__{name}"], t[f"obs_err__{name}"]

    # ---------------------------------------------------------------- build
    @classmethod
    def from_tempering(cls, result: Any, n_boot: int = 40, n_blocks: int | None = None,
                       rng: np.random.Generator | None = None,
                       domain_key: str | None = None, settings: dict | None = None,
                       observables: dict | None = None, position_stride: int = 1
                       ) -> "DensityOfStates":
        """Pool every replica of a tempering run (``TemperingResult``) with MBAR.

        Parameters
        ----------
        result : object with ``betas (K,)``, ``energies (K, S)``, ``n_plus``, ``n_minus``,
            ``core_radius``, ``domain`` and optionally ``positions (K, S, N, 2)``, ``signs``.
        n_boot : bootstrap replicates for the uncertainties.
        n_blocks : blocks per temperature series; default from the integrated
            autocorrelation time of the energy (blocks >= 4 tau long, at least 10).
        observables : precomputed dict name -> (K*S,) arrays; by default the structure
            observables of thermo.classify are computed from ``positions``.
        position_stride : ``result.positions`` holds every ``position_stride``-th recorded
            sample (thermo.sampler.run_tempering's argument of that name).

        Units: energies in E0, betas in 1/E0.
        """
        rng = np.random.default_rng() if rng is None else rng
        betas = np.asarray(result.betas, float)
        en = np.asarray(result.energies, float)
        if en.ndim != 2 or en.shape[0] != betas.size or en.shape[1] < 2:
            raise SamplerError(f"energies must have shape (K={betas.size}, S>=2); got {en.shape}")
        k, s = en.shape
        n_k = np.full(k, s)
        flat = en.reshape(-1)
        # MBAR and every bootstrap replicate are solved on fine energy bins (see
        # thermo.dos.tables.energy_bins): the cost follows the bins, not the samples
        bin_of, e_bin = dos_tables.energy_bins(flat, betas)
        nb = e_bin.size
        f0 = free_energies_by_integration(betas, en.mean(axis=1))
        f, _ = solve_mbar(e_bin, betas, n_k, counts=np.bincount(bin_of, minlength=nb),
                          f_init=f0)
        ld = logsumexp(-np.outer(betas, flat) + (f + np.log(n_k))[:, None], axis=0)

        if n_blocks is None:
            tau = max(tau_int(row) for row in en)
            n_blocks = int(max(MIN_BLOCKS, min(s, s // max(1, int(np.ceil(BLOCK_TAUS * tau))))))
        n_blocks = int(min(n_blocks, s))
        block_len = s // n_blocks
        boot_f = np.empty((n_boot, k))
        boot_counts = np.zeros((n_boot, k * s), dtype=np.uint16)
        for r in range(n_boot):
            counts = np.zeros((k, s))
            # the same time blocks on every rung: replica swaps correlate the rungs' series
            # at equal times, and resampling them independently would drop that covariance
            starts = rng.integers(0, s - block_len + 1, size=n_blocks)
            idx = (starts[:, None] + np.arange(block_len)[None, :]).ravel()
            for i in range(k):
                np.add.at(counts[i], idx, 1.0)
            c = counts.reshape(-1)
            boot_f[r], _ = solve_mbar(e_bin, betas, counts.sum(axis=1),
                                      counts=np.bincount(bin_of, c, minlength=nb), f_init=f)
            boot_counts[r] = c.astype(np.uint16)

        # the configurations of an evenly strided subset of about OBSERVED_PER_REPLICA samples
        # per rung are kept: the structure observables (which cost far more per sample than the
        # energy, and need less precision than beta(E)) are evaluated on them, and an imaging
        # model can be applied to them later (thermo.imaged); NaN marks the other samples
        pos = getattr(result, "positions", None)
        signs = getattr(result, "signs", None)
        sample_index = np.zeros(0, np.int64)
        sample_positions = np.zeros((0, result.n_plus + result.n_minus, 2), np.float32)
        if pos is not None and signs is not None and np.shape(pos)[1] > 0:
            p = np.asarray(pos, float)
            sub = max(1, p.shape[1] // OBSERVED_PER_REPLICA)
            p = p[:, ::sub]
            stride = position_stride * sub
            cols = np.arange(p.shape[1]) * stride
            keep = cols < s
            p = p[:, keep]
            sample_index = (np.arange(k)[:, None] * s + cols[keep][None, :]).ravel()
            sample_positions = p.reshape(-1, *p.shape[2:]).astype(np.float32)
            if observables is None and p.shape[2] >= 2:
                observables = {}
                for name, v in structure_observables(p.reshape(-1, *p.shape[2:]), signs).items():
                    full = np.full(k * s, np.nan)
                    full[sample_index] = np.asarray(v)
                    observables[name] = full
        observables = observables or {}
        diag = {name: np.asarray(getattr(result, name)) for name in
                ("acceptance", "swap_acceptance", "tau_int", "ess") if hasattr(result, name)}
        dom = getattr(result, "domain", None)
        key = domain_key if domain_key is not None else (
            str(dom.key()) if dom is not None and hasattr(dom, "key") else "")
        return cls(n_plus=int(result.n_plus), n_minus=int(result.n_minus), domain_key=key,
                   core_radius=float(result.core_radius), betas=betas, n_k=n_k,
                   energies=flat, f=f, log_denom=ld, boot_f=boot_f, boot_counts=boot_counts,
                   observables={kk: np.asarray(v, float) for kk, v in observables.items()},
                   diagnostics=diag, settings=dict(settings or {}),
                   sample_index=sample_index, sample_positions=sample_positions)


#: block bootstrap: at least this many blocks per series, each at least BLOCK_TAUS x tau_int
MIN_BLOCKS = 10
BLOCK_TAUS = 4.0
#: samples per replica on which the structure observables are evaluated (strided subset)
OBSERVED_PER_REPLICA = 1000
