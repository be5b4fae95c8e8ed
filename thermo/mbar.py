"""The multistate Bennett acceptance ratio (MBAR) for states u_k = beta_k E.

Shirts & Chodera, J. Chem. Phys. 129, 124105 (2008). Every state's reduced potential is
beta_k E, so the self-consistent equations involve only the pooled energies (or energy bins
with their occupations); they are solved by Newton's method on the convex MBAR objective from a
thermodynamic-integration start. Also the integrated autocorrelation time used to size the
bootstrap blocks. pymbar 4 solves the same equations and is used in the tests as an independent
check.

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0; free energies dimensionless.
"""

from __future__ import annotations

import numpy as np

from thermo.autocorr import integrated_autocorr_time


def logsumexp(a: np.ndarray, axis: int | None = None, keepdims: bool = False) -> np.ndarray:
    """ln sum exp(a) along an axis; plain numpy (scipy's version is ~3x slower here)."""
    a = np.asarray(a, float)
    m = np.max(a, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    with np.errstate(divide="ignore"):
        out = np.log(np.sum(np.exp(a - m), axis=axis, keepdims=True)) + m
    return out if keepdims else np.squeeze(out, axis=axis) if axis is not None else out.item()


def tau_int(x: np.ndarray) -> float:
    """Integrated autocorrelation time (in samples, at least 1) for sizing bootstrap blocks.

    Sokal's automatic window (``thermo.sampler.integrated_autocorr_time``); a series too short
    or constant counts as uncorrelated.
    """
    x = np.asarray(x, float)
    if x.size < 8:
        return 1.0
    tau = integrated_autocorr_time(x)
    return max(1.0, tau) if np.isfinite(tau) else 1.0


def solve_mbar(energies: np.ndarray, betas: np.ndarray, n_k: np.ndarray,
               counts: np.ndarray | None = None, f_init: np.ndarray | None = None,
               tol: float = 1e-10, max_iter: int = 200, reduced: np.ndarray | None = None
               ) -> tuple[np.ndarray, np.ndarray]:
    """Solve the MBAR equations for states u_k = beta_k E by Newton's method.

    Parameters
    ----------
    energies : (Ntot,) pooled energies; betas : (K,); n_k : (K,) samples per state.
    counts : (Ntot,) multiplicity of each energy (bootstrap, or the occupation of energy
        bins when ``energies`` are bin energies), default all ones.
    f_init : (K,) starting free energies; default from thermodynamic integration (needs
        the energies in state order, n_k per state, i.e. not binned), or zeros when
        ``reduced`` is given.
    reduced : (K, Ntot) reduced potentials u_k(x_n) of general states (e.g.
        beta_k (E - omega_k M), thermo.rotation), replacing beta_k E_n; ``energies`` and
        ``betas`` are then not used.

    Returns
    -------
    f : (K,) dimensionless free energies -ln Z_k (gauge f[0] = 0).
    log_denom : (Ntot,) ln sum_k N_k exp(f_k - beta_k E_n).

    Units: energies in E0, betas in 1/E0, f dimensionless.
    """
    ln_n = np.log(np.asarray(n_k, float))
    if reduced is not None:
        minus_u = -np.asarray(reduced, float) + ln_n[:, None]
        c = np.ones(minus_u.shape[1]) if counts is None else np.asarray(counts, float)
        f = _self_consistent(minus_u, ln_n, c) if f_init is None else np.array(f_init, float)
        return _newton(minus_u, ln_n, c, f - f[0], tol, max_iter)
    e = np.asarray(energies, float)
    b = np.asarray(betas, float)
    c = np.ones_like(e) if counts is None else np.asarray(counts, float)
    k = b.size
    if f_init is None:
        # d f / d beta = <E>: per-state means of consecutive blocks of n_k samples
        offsets = np.concatenate([[0], np.cumsum(n_k)]).astype(int)
        means = np.array([np.average(e[offsets[i]:offsets[i + 1]],
                                     weights=c[offsets[i]:offsets[i + 1]] + 1e-300)
                          for i in range(k)])
        f = free_energies_by_integration(b, means)
    else:
        f = np.array(f_init, float)
    f -= f[0]
    minus_u = -np.outer(b, e) + ln_n[:, None]               # (K, Ntot)
    return _newton(minus_u, ln_n, c, f, tol, max_iter)


def _self_consistent(minus_u, ln_n, c, tol: float = 1e-3, max_iter: int = 12) -> np.ndarray:
    """A start for Newton: a few self-consistent MBAR iterations from f = 0.

    Slower to converge than Newton but safe from any start (Shirts & Chodera 2008, eq. 11):
    states that no sample of another state reaches yet make Newton's Hessian singular at
    f = 0.
    """
    ln_c = np.log(np.where(c > 0, c, 1e-300))
    f = np.zeros(minus_u.shape[0])
    for _ in range(max_iter):
        ld = logsumexp(minus_u + f[:, None], axis=0)
        new = -logsumexp(minus_u - ln_n[:, None] - ld[None, :] + ln_c[None, :], axis=1)
        new -= new[0]
        if np.max(np.abs(new - f)) < tol:
            return new
        f = new
    return f


def _newton(minus_u, ln_n, c, f, tol, max_iter):
    """Newton iterations on the convex MBAR objective (gauge f[0] = 0)."""
    k = ln_n.size

    def objective(fv):
        a = minus_u + fv[:, None]
        ld = logsumexp(a, axis=0)
        return float(c @ ld - np.exp(ln_n) @ fv), a, ld

    obj, a, ld = objective(f)
    for _ in range(max_iter):
        pi = np.exp(a - ld[None, :])
        pc = pi * c[None, :]
        grad = pc.sum(axis=1) - np.exp(ln_n)
        if np.max(np.abs(grad) / np.exp(ln_n)) < tol:
            break
        hess = np.diag(pc.sum(axis=1)) - pc @ pi.T
        step = np.zeros(k)
        try:
            step[1:] = np.linalg.solve(hess[1:, 1:], -grad[1:])
        except np.linalg.LinAlgError:      # identical states (e.g. every omega at beta = 0)
            step[1:] = np.linalg.lstsq(hess[1:, 1:], -grad[1:], rcond=None)[0]
        t = 1.0
        while True:  # backtracking keeps Newton monotone far from the solution
            new_obj, new_a, new_ld = objective(f + t * step)
            if new_obj <= obj + 1e-12 * abs(obj) or t < 1e-8:
                break
            t *= 0.5
        f, obj, a, ld = f + t * step, new_obj, new_a, new_ld
    return f, ld


def free_energies_by_integration(betas: np.ndarray, means: np.ndarray) -> np.ndarray:
    """Free energies from d f / d beta = <E> (trapezoid over the sorted ladder), f[0] = 0."""
    order = np.argsort(betas)
    f = np.zeros(betas.size)
    f[order] = np.concatenate([[0], np.cumsum(0.5 * np.diff(betas[order])
                                              * (means[order][1:] + means[order][:-1]))])
    return f - f[0]
