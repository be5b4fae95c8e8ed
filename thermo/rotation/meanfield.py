"""Mean-field (Poisson-Boltzmann) vortex densities of the rotating ensemble in the unit disk.

In the mean-field limit of exp[-beta (H - omega M)] every vortex of sign s feels the potential
s (psi(r) - omega r^2), where psi is the stream function of the mean charge density
q = n+ - n- (energy convention of thermo.domains.disk: the pair energy is s_i s_j 4 pi G):

.. math::
    -\\nabla^2 \\psi = 4\\pi (n_+ - n_-), \\quad \\psi(1) = 0, \\qquad
    n_s(r) = N_s \\frac{e^{-\\beta s (\\psi - \\omega r^2)}}{\\int_{|u|<1} e^{-\\beta s (\\psi -
    \\omega r^2)}\\, dA}

(sinh-Poisson for a neutral gas, Liouville-type for a single species). :func:`solve_profile`
solves its axisymmetric branch on a radial grid with scipy's ``solve_bvp`` (unknowns psi, psi'
and the enclosed numbers m_s(r) = int_0^r 2 pi r' n_s dr', with the two normalisations as free
parameters), continuing from beta = 0. Off-axis states (a displaced cluster, a dipole) are not
axisymmetric and are not described; the self (image) energy ln(1 - r^2) of each vortex is
O(1/N) and dropped, as in every mean-field theory.

:func:`linear_profile` is the closed form of the linearised equation (small |beta N|), the one
whose first eigenvalue gives the neutral clustering onset beta N = -j_{1,1}^2 / 4 [Esler &
Ashbee, J. Fluid Mech. 779, 275 (2015)]: with chi = psi - omega r^2 - <psi - omega r^2>,
Q = N+ - N-, kappa = 4 beta N and a = sqrt(|kappa|),

.. math:: n_s(r) = \\frac{N_s}{\\pi}\\Big[1 - \\beta s\\, \\frac{4 (Q + \\omega)}{\\kappa}
          \\Big(1 - \\frac{a\\, I_0(a r)}{2 I_1(a)}\\Big)\\Big]

(J0, J1 for kappa < 0; it diverges at J1(a) = 0, the onset). :func:`radial_fit` compares
measured or simulated radial histograms with a profile.

Units: r in the disk radius R; densities per unit area (R^2); beta in 1/E0; omega in E0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import integrate, special, stats

from thermo.errors import ConfigurationError

_R0 = 0.0          # solve_bvp handles the 1/r term through its singular-term matrix S


@dataclass(frozen=True)
class Profile:
    """Radial vortex densities n+(r), n-(r) and the stream function on a grid.

    Attributes
    ----------
    r : (G,) radii; n_plus, n_minus : (G,) densities (integrating to N+, N- over the disk);
    psi : (G,) stream function; beta, omega, n_plus_count, n_minus_count : the parameters;
    method : "Poisson-Boltzmann (solve_bvp)" or "linearised"; converged : bool.

    Units: r in R; densities in 1/R^2; psi in E0; beta in 1/E0; omega in E0.
    """

    r: np.ndarray
    n_plus: np.ndarray
    n_minus: np.ndarray
    psi: np.ndarray
    beta: float
    omega: float
    n_plus_count: int
    n_minus_count: int
    method: str
    converged: bool = True

    def density(self, sign: int, r) -> np.ndarray:
        """n_s at radii r (linear interpolation). Units: 1/R^2."""
        return np.interp(r, self.r, self.n_plus if sign > 0 else self.n_minus)


def _check(n_plus, n_minus, beta, omega):
    for name, v in (("n_plus", n_plus), ("n_minus", n_minus)):
        if not (isinstance(v, (int, np.integer)) and v >= 0):
            raise ConfigurationError(f"{name} = {v!r}: must be a non-negative integer")
    if n_plus + n_minus < 1:
        raise ConfigurationError("a mean-field profile needs at least one vortex")
    if not (np.isfinite(beta) and np.isfinite(omega)):
        raise ConfigurationError(f"beta = {beta!r}, omega = {omega!r}: must be finite numbers")


def linear_profile(n_plus: int, n_minus: int, beta: float, omega: float,
                   r=None) -> Profile:
    """The linearised mean-field profile in closed form (module docstring).

    Units: r in R; beta in 1/E0; omega in E0.
    """
    _check(n_plus, n_minus, beta, omega)
    r = np.linspace(0.0, 1.0, 401) if r is None else np.asarray(r, float)
    n, q = n_plus + n_minus, n_plus - n_minus
    kappa = 4.0 * beta * n
    a = np.sqrt(abs(kappa))
    if kappa < 0 and a >= special.jn_zeros(1, 1)[0]:
        raise ConfigurationError(
            f"beta N = {beta * n:.4g}: at or beyond the linear onset beta N = -j11^2/4 = "
            f"{-special.jn_zeros(1, 1)[0] ** 2 / 4:.4f} the linearised profile does not "
            "exist; use solve_profile")

    def chi(x):
        if abs(kappa) < 1e-8:          # kappa -> 0: chi = -(Q + omega) (r^2 - 1/2)
            return -(q + omega) * (x * x - 0.5)
        if kappa > 0:
            shape = 1.0 - a * special.i0(a * x) / (2.0 * special.i1(a))
        else:
            shape = 1.0 - a * special.j0(a * x) / (2.0 * special.j1(a))
        return 4.0 * (q + omega) / kappa * shape

    c = chi(r)
    n_p = n_plus / np.pi * (1.0 - beta * c)
    n_m = n_minus / np.pi * (1.0 + beta * c)
    psi = c + omega * r * r - (chi(np.array(1.0)) + omega)      # psi(1) = 0
    return Profile(r=r, n_plus=n_p, n_minus=n_m, psi=psi, beta=float(beta), omega=float(omega),
                   n_plus_count=int(n_plus), n_minus_count=int(n_minus), method="linearised")


def _bvp(counts, beta, omega, guess_r, guess_y, guess_p):
    signs = [s for s, c in zip((1, -1), counts) if c > 0]
    nums = [c for c in counts if c > 0]
    k = len(signs)

    def dens(r, psi, p):
        return [nums[i] * np.exp(-beta * signs[i] * (psi - omega * r * r) - p[i])
                for i in range(k)]

    def rhs(r, y, p):
        ns = dens(r, y[0], p)
        q = sum(signs[i] * ns[i] for i in range(k))
        out = [y[1], -4.0 * np.pi * q]
        out += [2.0 * np.pi * r * ns[i] for i in range(k)]
        return np.vstack(out)

    def bc(ya, yb, p):
        return np.array([ya[1], yb[0]] + [ya[2 + i] for i in range(k)]
                        + [yb[2 + i] - nums[i] for i in range(k)])

    s_mat = np.zeros((2 + k, 2 + k))
    s_mat[1, 1] = -1.0
    sol = integrate.solve_bvp(rhs, bc, guess_r, guess_y, p=guess_p, S=s_mat, tol=1e-6,
                              max_nodes=20000)
    return sol, signs, nums


def solve_profile(n_plus: int, n_minus: int, beta: float, omega: float,
                  steps: int = 8, n_grid: int = 201) -> Profile:
    """Axisymmetric Poisson-Boltzmann densities at (beta, omega), continued from beta = 0.

    Parameters
    ----------
    n_plus, n_minus : vortex numbers (the mean-field normalisations).
    beta, omega : the state. Units: 1/E0 and E0.
    steps : continuation steps in beta from 0 (each solution starts the next).
    n_grid : radial grid points of the result.

    Returns
    -------
    Profile (``converged`` False when solve_bvp did not meet its tolerance at the last step).

    Units: r in R.
    """
    _check(n_plus, n_minus, beta, omega)
    if not (isinstance(steps, (int, np.integer)) and steps >= 1):
        raise ConfigurationError(f"steps = {steps!r}: must be a positive integer")
    counts = (int(n_plus), int(n_minus))
    q = counts[0] - counts[1]
    r = np.linspace(_R0, 1.0, 41)
    k = sum(c > 0 for c in counts)
    # beta = 0: uniform densities, psi = Q (1 - r^2)
    y = [q * (1 - r * r), -2.0 * q * r]
    y += [c * r * r for c in counts if c > 0]
    y, p = np.vstack(y), np.full(k, np.log(np.pi))
    ok = True
    for t in np.linspace(0.0, 1.0, steps + 1)[1:]:
        sol, signs, nums = _bvp(counts, t * beta, omega, r, y, p)
        ok = bool(sol.success)
        r, y, p = sol.x, sol.y, sol.p
    grid = np.linspace(0.0, 1.0, n_grid)
    yy = sol.sol(grid)
    dens = {s: c * np.exp(-beta * s * (yy[0] - omega * grid ** 2) - sol.p[i])
            for i, (s, c) in enumerate(zip(signs, nums))}
    zero = np.zeros_like(grid)
    return Profile(r=grid, n_plus=dens.get(1, zero), n_minus=dens.get(-1, zero), psi=yy[0],
                   beta=float(beta), omega=float(omega), n_plus_count=counts[0],
                   n_minus_count=counts[1], method="Poisson-Boltzmann (solve_bvp)", converged=ok)


@dataclass(frozen=True)
class RadialFit:
    """Radial histograms against a profile.

    Attributes
    ----------
    edges : (B + 1,) radii of the bin edges; observed_plus, observed_minus : (B,) mean number
    of vortices per shot in each bin; expected_plus, expected_minus : (B,) the profile's.
    chi2, dof, pvalue : Pearson's statistic over both signs with the effective number of
    shots (counts within a shot treated as Poisson: an approximation, vortices interact).

    Units: radii in R; counts per shot.
    """

    edges: np.ndarray
    observed_plus: np.ndarray
    observed_minus: np.ndarray
    expected_plus: np.ndarray
    expected_minus: np.ndarray
    chi2: float
    dof: int
    pvalue: float


def radial_fit(configs, profile: Profile, n_bins: int = 8, weights=None) -> RadialFit:
    """Compare radial histograms of shots with a profile (equal-area bins).

    Parameters
    ----------
    configs : sequence of (positions (N, 2), signs (N,)) in the unit disk.
    profile : a Profile; n_bins : equal-area bins; weights : per-shot weights (1/tau_int).

    Units: positions in R.
    """
    if not (isinstance(n_bins, (int, np.integer)) and n_bins >= 2):
        raise ConfigurationError(f"n_bins = {n_bins!r}: must be an integer >= 2")
    configs = list(configs)
    if not configs:
        raise ConfigurationError("no configurations to compare with the profile")
    w = np.ones(len(configs)) if weights is None else np.asarray(weights, float)
    if w.shape != (len(configs),) or np.any(~(w > 0)):
        raise ConfigurationError(f"weights: need {len(configs)} positive numbers, one per shot")
    edges = np.sqrt(np.linspace(0.0, 1.0, n_bins + 1))
    obs = {1: np.zeros(n_bins), -1: np.zeros(n_bins)}
    for (pos, signs), wk in zip(configs, w):
        rr = np.hypot(*np.asarray(pos, float).T)
        s = np.asarray(signs)
        for sg in (1, -1):
            obs[sg] += wk * np.histogram(rr[s == sg], edges)[0]
    w_tot = float(w.sum())
    fine = np.linspace(0.0, 1.0, 2001)
    exp = {}
    for sg in (1, -1):
        cum = integrate.cumulative_trapezoid(2 * np.pi * fine * profile.density(sg, fine), fine,
                                             initial=0.0)
        exp[sg] = np.diff(np.interp(edges, fine, cum))
    chi2, dof = 0.0, 0
    for sg in (1, -1):
        e = exp[sg] * w_tot
        keep = e > 0
        chi2 += float(np.sum((obs[sg][keep] - e[keep]) ** 2 / e[keep]))
        dof += int(keep.sum())
    dof = max(dof - 1, 1)
    return RadialFit(edges=edges, observed_plus=obs[1] / w_tot, observed_minus=obs[-1] / w_tot,
                     expected_plus=exp[1], expected_minus=exp[-1], chi2=chi2, dof=dof,
                     pvalue=float(stats.chi2.sf(chi2, dof)))
