"""Is an ensemble in equilibrium? The structure observables against the energy's beta.

In a Gibbs state every observable gives the same beta. The dipole moment D, the
nearest-neighbour correlation C1 and the cluster fraction (thermo.classify) averaged over the
shots are inverted through their canonical curves (thermo.dos); an inverted beta that differs
from the energy's estimate by more than ``z_max`` combined standard errors, or a mean outside
the whole canonical curve, flags the ensemble as not in equilibrium (thermo.estimate).

Units: beta in 1/E0.
"""

from __future__ import annotations

import numpy as np

from thermo.classify import structure_observables

STRUCTURE_OBSERVABLES = ("dipole_moment", "c1", "cluster_fraction")


def structure_check(pos, key, dos, beta_lo, beta_hi, b_hat, se_hat, z_max):
    """Invert the canonical curves of the structure observables at the shots' means.

    Parameters
    ----------
    pos : (S, N, 2) shots of one (N+, N-) group ``key``; dos : its density of states.
    beta_lo, beta_hi : the part of the ladder to search; b_hat, se_hat : the energy estimate
        and its standard error; z_max : the disagreement (combined standard errors) that
        flags "not in equilibrium".

    Returns
    -------
    (means of the observables, name -> (beta, error), flag).

    Units: beta in 1/E0; D in the domain size.
    """
    obs = structure_observables(pos, np.concatenate([np.ones(key[0], int), -np.ones(key[1], int)]))
    means = {k: float(np.mean(v)) for k, v in obs.items()}
    found, flag = {}, False
    n = len(pos)
    if n < 2 or not dos.observables or not np.isfinite(se_hat):
        return means, found, flag
    names = [k for k in STRUCTURE_OBSERVABLES if k in dos.observables]
    for name in names:
        grid, mean, err = dos.canonical_curve(name)
        inside = (grid >= beta_lo) & (grid <= beta_hi)
        coarse, curve, curve_err = grid[inside], mean[inside], err[inside]
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
        err_b = float(np.hypot(se_obs, curve_err[i]) / max(abs(slope), 1e-300))
        found[name] = (float(cands[j]), err_b)
        if abs(cands[j] - b_hat) > z_max * np.hypot(err_b, se_hat):
            flag = True
    return means, found, flag
