"""Tabulated curves of a density of states: what the estimators read at every call.

A :class:`thermo.dos.model.DensityOfStates` answers canonical and microcanonical questions by
reweighting all pooled samples, once per bootstrap replicate. That costs
O(points x samples x replicates) and is the same for every configuration asked about, so
the curves are computed once per density of states on fine grids and then interpolated:

* on a beta grid over the ladder: ln Z(beta) - ln Z(0) (central and every replicate),
  <E>, Var E and the structure observables with bootstrap errors;
* on an energy grid over :meth:`~thermo.dos.model.DensityOfStates.energy_range`: the
  microcanonical beta(E) = dS/dE and its bootstrap error, twice: by a kernel estimate of
  the tilted energy density (:func:`beta_micro_kernel`) and by the saddle-point
  (cumulant) expansion of :func:`beta_saddle_from_cumulants`.

The grids are fine enough that interpolation errors are far below the bootstrap errors
(checked in tests/test_dos_tables.py against the direct evaluation). Work is done in chunks of
rows so memory stays bounded for large pooled sample sets.

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.interpolate import CubicHermiteSpline

#: bump when the content or grids of the tables change (stored tables are then recomputed)
TABLE_VERSION = 6  # 6: mean_energy_reps
N_BETA = 161         # beta grid points for ln Z, <E>, Var E, observables
N_ENERGY = 201       # energy grid points for beta_micro
N_TILT = N_BETA      # beta grid inverting <E>(beta) inside beta_micro: the same grid, reused
_CHUNK_ELEMENTS = 2_000_000   # rows x samples per chunk (~16 MB of float64)
#: energy bin width times max |beta| of the ladder. Every state's reduced potential is
#: beta_k E, so samples in one bin differ in every weight by at most a factor
#: exp(BIN_BETA_WIDTH); with the bin's mean energy as its representative the first-order
#: error cancels and the second-order one is ~BIN_BETA_WIDTH^2 / 24 ~ 1e-4 in ln weight,
#: nearly the same for all bins (so it drops out of normalised averages). The cost of MBAR,
#: its bootstrap and the tables then follows the number of bins, not of samples.
BIN_BETA_WIDTH = 0.05


def _lse_rows(a: np.ndarray) -> np.ndarray:
    m = a.max(axis=1, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    return np.log(np.exp(a - m).sum(axis=1)) + m[:, 0]


def tilted_moments(energies: np.ndarray, lw0: np.ndarray, betas: np.ndarray,
                   values: np.ndarray | None = None
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    """Moments under the weights exp(lw0 - beta E), chunked over beta.

    Parameters
    ----------
    energies : (n,) sample energies; lw0 : (n,) log weights at beta = 0 (finite).
    betas : (M,); values : optional (V, n) further per-sample observables.

    Returns
    -------
    log_sum : (M,) ln sum_n exp(lw0 - beta E_n); mean, var, kappa3 : (M,) first three
    cumulants of E; value_means : (M, V) or None.

    Units: E in E0, beta in 1/E0.
    """
    e = np.asarray(energies, float)
    shift = float(np.mean(e)) if e.size else 0.0
    es = e - shift
    b = np.atleast_1d(np.asarray(betas, float))
    m = b.size
    log_sum, mean, var, k3 = np.empty(m), np.empty(m), np.empty(m), np.empty(m)
    vmeans = None if values is None else np.empty((m, values.shape[0]))
    rows = max(1, _CHUNK_ELEMENTS // max(e.size, 1))
    for start in range(0, m, rows):
        sl = slice(start, min(m, start + rows))
        lw = lw0[None, :] - np.outer(b[sl], e)
        top = lw.max(axis=1, keepdims=True)
        np.subtract(lw, top, out=lw)
        np.exp(lw, out=lw)
        tot = lw.sum(axis=1)
        log_sum[sl] = np.log(tot) + top[:, 0]
        lw /= tot[:, None]
        m1 = lw @ es
        m2 = lw @ (es * es)
        m3 = lw @ (es * es * es)
        mean[sl] = m1 + shift
        var[sl] = m2 - m1 * m1
        k3[sl] = m3 - 3 * m1 * m2 + 2 * m1 ** 3
        if values is not None:
            vmeans[sl] = lw @ values.T
    return log_sum, mean, var, k3, vmeans


def beta_micro_kernel(energies: np.ndarray, lw0: np.ndarray, e: np.ndarray,
                      tilt_grid: np.ndarray, tilt_moments: tuple | None = None) -> np.ndarray:
    """beta(E) = dS/dE at energies ``e`` for one set of sample weights (see below).

    g(E) = exp(beta' E) p_beta'(E) for any beta'; with beta' such that <E>_beta' = E the
    tilted density is peaked at E, so a Gaussian-kernel estimate of its log derivative
    there is nearly unbiased (exact for a Gaussian p, any bandwidth). NaN where E lies
    outside the range of <E> over ``tilt_grid``; ``tilt_moments`` = (<E>, Var E) on that
    grid when already known.

    Units: E in E0, beta in 1/E0.
    """
    e = np.atleast_1d(np.asarray(e, float))
    if tilt_moments is None:
        _, mean, var, _, _ = tilted_moments(energies, lw0, tilt_grid)
    else:
        mean, var = tilt_moments
    order = np.argsort(mean)
    b_tilt = np.interp(e, mean[order], tilt_grid[order], left=np.nan, right=np.nan)
    sd = np.sqrt(np.interp(e, mean[order], var[order]))
    out = np.full(e.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(b_tilt))
    rows = max(1, _CHUNK_ELEMENTS // max(energies.size, 1))
    for start in range(0, ok.size, rows):
        idx = ok[start:start + rows]
        lw = lw0[None, :] - np.outer(b_tilt[idx], energies)
        lw -= _lse_rows(lw)[:, None]
        h = 0.3 * sd[idx]
        z = (e[idx][:, None] - energies[None, :]) / h[:, None]
        kern = np.exp(lw - 0.5 * z * z)
        dlogp = -(kern * z).sum(axis=1) / (h * kern.sum(axis=1))
        out[idx] = b_tilt[idx] + dlogp
    return out


def beta_saddle_from_cumulants(e: np.ndarray, grid: np.ndarray, mean: np.ndarray,
                               var: np.ndarray, kappa3: np.ndarray) -> np.ndarray:
    """dS/dE from canonical cumulants: beta_c(E) - kappa3 / (2 kappa2^2) at beta_c(E).

    Derivation. The canonical density of E is p_beta(E) = g(E) exp(-beta E) / Z(beta), so
    for any beta, S(E) = ln g(E) = ln Z(beta) + beta E + ln p_beta(E) and

        dS/dE = beta + d ln p_beta / dE      (beta held fixed).

    Choose beta = beta_c(E), the canonical inverse (<E>_beta_c = E), so that E is the mean
    of p_beta_c. Write p by its Edgeworth series in z = (E' - E)/sigma, sigma^2 = kappa2:
    p = phi(z)/sigma [1 + kappa3/(6 sigma^3) He3(z) + O(1/N)] with He3 = z^3 - 3z. At z = 0
    phi'/phi = 0 and He3'(0) = -3, so d ln p/dE = -kappa3 / (2 kappa2^2) + r, hence

        beta_mic(E) = beta_c(E) - kappa3 / (2 kappa2^2),     kappa_n at beta_c(E).

    For extensive cumulants (kappa_n ~ N) the correction is O(1/N) and the remainder r
    is O(1/N^2): it collects kappa5 / (8 kappa2^3) (He5'(0) = 15) and kappa3 kappa4 /
    kappa2^4 terms (He4'(0) = He6'(0) = 0, the even terms drop). For one vortex in a disk
    (p_beta(E) proportional to exp((1 - beta) E), E < 0: kappa2 = (1 - beta)^-2,
    kappa3 = -2 (1 - beta)^-3) the correction is 1 - beta_c, so beta_mic = 1 = dS/dE
    exactly: the remainder vanishes there.

    The inversion E -> beta_c uses cubic Hermite interpolation with the exact slope
    d<E>/d beta = -kappa2 at each grid point (linear interpolation would make an error
    ~ d beta^2 kappa3 / kappa2, as large as the correction where kappa2 is large).

    Parameters
    ----------
    e : (M,) energies; grid : (G,) betas; mean, var, kappa3 : (G,) cumulants of E there.

    Returns
    -------
    (M,) beta_mic; NaN outside the range of <E> over the grid.

    Units: E in E0, beta in 1/E0.
    """
    e = np.atleast_1d(np.asarray(e, float))
    order = np.argsort(mean)
    m, b, v = mean[order], grid[order], var[order]
    keep = np.concatenate([[True], np.diff(m) > 0])   # strictly increasing knots
    m, b, v = m[keep], b[keep], v[keep]
    corr = (kappa3 / (2.0 * var * var))[order][keep]
    out = np.full(e.shape, np.nan)
    inside = (e >= m[0]) & (e <= m[-1]) & np.isfinite(e)
    if m.size < 2 or not inside.any():
        return out
    b_c = CubicHermiteSpline(m, b, -1.0 / v)(e[inside])
    # the correction is itself O(1/N) and smooth in beta: linear interpolation suffices
    c_of_e = np.interp(b_c, b[::-1], corr[::-1])
    out[inside] = b_c - c_of_e
    return out


def energy_bins(energies: np.ndarray, betas: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fine energy bins for the pooled samples (equal blocks per state, in ladder order).

    The width at energy E is BIN_BETA_WIDTH / b(E), b(E) the largest |beta_k| among the
    states whose samples span E (at least 2 % of max |beta|). Why that suffices: a sample
    at E carries weight at a target beta only if states near that beta reach E, and the
    MBAR denominator's slope d ln(sum_k ...)/dE is an average of -beta_k over the states
    that reach E; so every weight varies across a bin by at most ~exp(BIN_BETA_WIDTH).
    Narrow bins are spent only where the high-|beta| states sample.

    Returns
    -------
    idx : (Ntot,) bin of each sample (only occupied bins are numbered);
    e_bin : (nb,) mean energy of the samples in each bin (its representative).

    Units: E in E0, beta in 1/E0.
    """
    e = np.asarray(energies, float)
    b = np.abs(np.atleast_1d(np.asarray(betas, float)))
    bmax = float(b.max()) if b.size else 0.0
    lo, hi = (float(e.min()), float(e.max())) if e.size else (0.0, 0.0)
    if bmax == 0 or hi <= lo:
        raw = np.floor((e - lo) / (max(hi - lo, 1.0) * 1e-4)).astype(np.int64)
    else:
        grid = np.linspace(lo, hi, 8193)
        cap = np.full(grid.size, 0.02 * bmax)
        per_state = e.reshape(b.size, -1) if e.size % b.size == 0 else e[None, :]
        caps = b if per_state.shape[0] == b.size else np.array([bmax])
        for row, bk in zip(per_state, caps):
            step = grid[1] - grid[0]
            inside = (grid >= row.min() - step) & (grid <= row.max() + step)
            cap[inside] = np.maximum(cap[inside], bk)
        # bin coordinate: integral of b(E) / BIN_BETA_WIDTH, so a unit step is one bin
        t = np.concatenate([[0.0], np.cumsum(np.maximum(cap[1:], cap[:-1]) * np.diff(grid))])
        raw = np.floor(np.interp(e, grid, t) / BIN_BETA_WIDTH).astype(np.int64)
    _, idx = np.unique(raw, return_inverse=True)
    idx = idx.ravel()
    e_bin = np.bincount(idx, e) / np.bincount(idx)
    return idx, e_bin


def binned_log_denom(e_bin: np.ndarray, betas: np.ndarray, f: np.ndarray,
                     n_k: np.ndarray) -> np.ndarray:
    """MBAR denominators ln sum_k N_k exp(f_k - beta_k E) at the bin energies."""
    a = -np.outer(betas, e_bin) + (np.asarray(f, float) + np.log(n_k))[:, None]
    return _lse_rows(a.T)


def binned_sets(dos: Any) -> list[dict]:
    """Binned log weights at beta = 0 of the central estimate and of every replicate.

    Each entry: ``e``, ``lw0`` (occupied bins of that weighting) and, when the DOS has
    observables, ``e_obs``, ``lw0_obs``, ``vals`` (V, nb_obs): the bin means of the
    observables over the samples where they were evaluated (they may be evaluated on a
    subset, NaN elsewhere) with the log weights of those samples.
    """
    idx, e_bin = dos.energy_bins()
    nb = e_bin.size
    k = dos.betas.size
    names = sorted(dos.observables)
    vals = np.stack([dos.observables[n] for n in names]) if names else None
    mask = np.isfinite(vals).all(axis=0) if names else None
    out = []
    pairs = [(dos.f, None)] + list(zip(dos.boot_f, dos.boot_counts))
    for f, counts in pairs:
        c = np.ones(idx.size) if counts is None else counts.astype(float)
        n_k = c.reshape(k, -1).sum(axis=1)
        ld = binned_log_denom(e_bin, dos.betas, f, n_k)
        tot = np.bincount(idx, c, minlength=nb)
        occ = tot > 0
        item = dict(e=e_bin[occ], lw0=np.log(tot[occ]) - ld[occ])
        if names:
            io, co = idx[mask], c[mask]
            tot_o = np.bincount(io, co, minlength=nb)
            occ_o = tot_o > 0
            sums = np.stack([np.bincount(io, co * v[mask], minlength=nb) for v in vals])
            item.update(e_obs=e_bin[occ_o], lw0_obs=np.log(tot_o[occ_o]) - ld[occ_o],
                        vals=sums[:, occ_o] / tot_o[occ_o])
        out.append(item)
    return out


def compute_tables(dos: Any) -> dict[str, np.ndarray]:
    """All tables of a DensityOfStates (central value and every bootstrap replicate).

    Returns a dict of arrays: ``beta`` (N_BETA,), ``log_z`` (N_BETA,), ``log_z_reps``
    (B, N_BETA), ``mean_energy``/``var_energy`` (N_BETA,) and their ``_err``,
    ``mean_energy_reps`` (B, N_BETA),
    ``obs__<name>``/``obs_err__<name>`` (N_BETA,), ``energy`` (increasing),
    ``beta_micro``/``beta_micro_err`` (about N_ENERGY + N_BETA,), ``version`` ().

    Units: E in E0, beta in 1/E0.
    """
    lo, hi = dos.beta_range
    grid = np.linspace(lo, hi, N_BETA)
    names = sorted(dos.observables)
    sets = binned_sets(dos)
    log_z, mean, var, kap3, obs = [], [], [], [], []
    for st in sets:
        ls, mu, v, k3, _ = tilted_moments(st["e"], st["lw0"], grid)
        vm = (tilted_moments(st["e_obs"], st["lw0_obs"], grid, st["vals"])[4]
              if names else None)
        ls0 = _lse_rows(st["lw0"][None, :])[0]
        log_z.append(ls - ls0)
        mean.append(mu)
        var.append(v)
        kap3.append(k3)
        obs.append(vm)
    # energy grid: uniform in E, plus the images <E>(beta) of the beta grid, which crowd
    # where beta(E) bends fastest (the high-beta end); ends = <E> at the ladder's ends
    e_lo, e_hi = dos.energy_range()
    e_grid = np.unique(np.concatenate([np.linspace(e_lo, e_hi, N_ENERGY),
                                       np.clip(mean[0], e_lo, e_hi)]))
    micro = np.array([beta_micro_kernel(st["e"], st["lw0"], e_grid, grid, (mu, v))
                      for st, mu, v in zip(sets, mean, var)])
    saddle = np.array([beta_saddle_from_cumulants(e_grid, grid, mu, v, k3)
                       for mu, v, k3 in zip(mean, var, kap3)])

    def err(stack):
        reps = np.asarray(stack[1:])
        if reps.shape[0] < 2:
            return np.full(reps.shape[1:], np.nan)
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(reps).all(axis=0), reps.std(axis=0, ddof=1), np.nan)

    out = dict(version=np.array(TABLE_VERSION), beta=grid, log_z=log_z[0],
               log_z_reps=np.array(log_z[1:]).reshape(len(sets) - 1, N_BETA),
               mean_energy=mean[0], mean_energy_err=err(mean),
               mean_energy_reps=np.array(mean[1:]).reshape(len(sets) - 1, N_BETA),
               var_energy=var[0], var_energy_err=err(var),
               energy=e_grid, beta_micro=micro[0], beta_micro_err=err(micro),
               beta_saddle=saddle[0], beta_saddle_err=err(saddle))
    for i, name in enumerate(names):
        stack = [o[:, i] for o in obs]
        out[f"obs__{name}"] = stack[0]
        out[f"obs_err__{name}"] = err(stack)
    return out


def tables_valid(tables: dict | None, dos: Any) -> bool:
    """True when stored tables match this table version and the DOS's observables."""
    if not tables or int(tables.get("version", -1)) != TABLE_VERSION:
        return False
    need = {"beta", "log_z", "log_z_reps", "mean_energy", "mean_energy_reps", "var_energy", "energy",
            "beta_micro", "beta_micro_err", "beta_saddle", "beta_saddle_err"} | {f"obs__{k}" for k in dos.observables}
    return need <= set(tables) and tables["log_z_reps"].shape[0] == dos.boot_f.shape[0]
