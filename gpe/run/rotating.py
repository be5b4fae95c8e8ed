"""Rotation frequency omega beside beta: the rotating ensemble exp[-beta (H - omega M)].

In a disk the point-vortex dynamics conserves the signed angular impulse M = sum_i s_i |u_i|^2
as well as H, so a stirred gas relaxes to exp[-beta (H - omega M)] (thermo.rotation). The
records here are what ``vortherm temperature --rotating`` and a sweep's ``omega`` measure add to
the beta-only records of gpe.run.thermometry: (beta, omega) of every frame or shot
(microcanonical at its (H, M)) and of the ensemble (maximum likelihood over both, with the same
frames, windows and 1/tau_int weights as beta alone), the likelihood-ratio test of omega = 0 and
the mean-field (Poisson-Boltzmann) radial profiles at the fitted state against the ensemble's
radial histograms.

Units: beta in 1/E0, omega in E0 (per unit of M, M in the squared disk radius); omega~ / N and
beta~ N dimensionless; radii in the disk radius.
"""

from __future__ import annotations

import math

import numpy as np

from gpe.errors import VorthermError
from thermo.autocorr import integrated_autocorr_time
from thermo.errors import ThermoError
from thermo.rotation.estimate import estimate_rotating_ensemble, estimate_rotating_single
from thermo.rotation.meanfield import radial_fit, solve_profile
from thermo.rotation.table import RotatingSettings

#: Effort of the (beta, omega) tables by name (thermo.rotation.table.RotatingSettings fields:
#: production sweeps, bootstrap replicates; the state grid is the default 12 x 5), as for the
#: density of states (gpe.run.thermometry.EFFORT)
ROTATING_EFFORT = {"quick": {"n_sweeps": 1500, "n_boot": 6},
                   "standard": {"n_sweeps": 4000, "n_boot": 8},
                   "thorough": {"n_sweeps": 16000, "n_boot": 10}}
#: radial bins of the mean-field comparison (equal areas)
PROFILE_BINS = 8
_NAN2 = [math.nan, math.nan]


def rotating_settings(effort: str) -> RotatingSettings:
    """RotatingSettings for an effort name: quick, standard or thorough."""
    if effort not in ROTATING_EFFORT:
        raise VorthermError(f"effort {effort!r}; accepted: {', '.join(ROTATING_EFFORT)}")
    return RotatingSettings(**ROTATING_EFFORT[effort])


def _undefined(why: str) -> dict:
    return {"omega": math.nan, "omega_ci68": _NAN2, "omega_ci95": _NAN2, "omega_n": math.nan,
            "omega_n_ci95": _NAN2, "beta_rot": math.nan, "beta_rot_ci95": _NAN2,
            "beta_rot_n": math.nan, "beta_rot_n_ci95": _NAN2, "omega_pvalue": math.nan,
            "omega_nonzero": False, "omega_bounds": [], "omega_verdict": why}


def rotation_fields(est) -> dict:
    """The fields of a thermo.rotation.estimate.RotationEstimate that records carry.

    ``beta_rot*`` is beta of the rotating fit (beside the beta-only ``beta`` of the record).
    """
    return {"omega": est.omega, "omega_ci68": list(est.omega_ci68),
            "omega_ci95": list(est.omega_ci95), "omega_n": est.omega_n,
            "omega_n_ci95": list(est.omega_n_ci95), "beta_rot": est.beta,
            "beta_rot_ci95": list(est.beta_ci95), "beta_rot_n": est.beta_n,
            "beta_rot_n_ci95": list(est.beta_n_ci95), "omega_pvalue": est.omega_pvalue,
            "omega_nonzero": bool(est.omega_nonzero), "omega_bounds": list(est.bounds),
            "omega_joint95": [list(x) for x in est.joint95],
            "omega_table_error": list(est.table_error), "omega_verdict": est.verdict}


def _refusal(domain) -> str:
    if not getattr(domain, "conserves_angular_impulse", False):
        return (f"omega undefined: the {domain.kind} domain does not conserve the angular "
                "impulse (only a disk does)")
    return ""


def configuration_rotation(pos, signs, domain, core_radius: float, *, effort: str,
                           cache_dir=None, progress=None) -> dict:
    """(beta, omega) of one configuration (microcanonical at its (H, M)) as record fields."""
    why = _refusal(domain)
    if why or len(signs) < 2:
        return _undefined(why or "omega undefined for fewer than two vortices")
    try:
        est = estimate_rotating_single(pos, signs, domain, core_radius, cache_dir=cache_dir,
                                       settings=rotating_settings(effort), progress=progress)
    except ThermoError as exc:
        return _undefined(f"omega not estimated: {exc}")
    return rotation_fields(est)


def ensemble_rotation(configs, domain, core_radius: float, *, weights=None,
                      common: str = "beta_n", effort: str, cache_dir=None,
                      progress=None) -> dict:
    """(beta, omega) of an ensemble (maximum likelihood over both) as record fields, with
    ``meanfield``: the Poisson-Boltzmann profile of the largest group at the fitted state
    compared with its radial histograms (gpe.figures.thermometry.plot_meanfield draws it).

    Configurations with fewer than two vortices are left out, as for beta alone.
    """
    why = _refusal(domain)
    keep = [i for i, (_, s) in enumerate(configs) if len(s) >= 2]
    if why or not keep:
        return _undefined(why or "omega undefined: no configuration has two or more vortices")
    w = None if weights is None else [float(weights[i]) for i in keep]
    shots = [configs[i] for i in keep]
    est = estimate_rotating_ensemble(shots, domain, core_radius, weights=w, common=common,
                                     cache_dir=cache_dir, settings=rotating_settings(effort),
                                     progress=progress)
    rec = rotation_fields(est)
    rec["meanfield"] = meanfield_comparison(shots, w, est)
    return rec


def meanfield_comparison(configs, weights, est) -> dict:
    """The mean-field profile at the fitted (beta, omega) against the radial histograms of the
    shots of the largest group: bins, observed and expected vortices per shot, chi^2.

    Units: radii in the disk radius; counts per shot.
    """
    key = (est.n_plus, est.n_minus)
    idx = [i for i, (_, s) in enumerate(configs)
           if (int(np.sum(np.asarray(s) > 0)), int(np.sum(np.asarray(s) < 0))) == key]
    if not (math.isfinite(est.beta) and math.isfinite(est.omega)) or not idx:
        return {"note": "no mean-field comparison: the fit gave no finite (beta, omega)"}
    prof = solve_profile(key[0], key[1], est.beta, est.omega)
    w = None if weights is None else [weights[i] for i in idx]
    fit = radial_fit([configs[i] for i in idx], prof, n_bins=PROFILE_BINS, weights=w)
    note = "" if prof.converged else ("the Poisson-Boltzmann solver did not converge (beyond "
                                      "the axisymmetric branch?): the profile is indicative")
    return {"n_plus": key[0], "n_minus": key[1], "beta": est.beta, "omega": est.omega,
            "edges": fit.edges.tolist(), "observed_plus": fit.observed_plus.tolist(),
            "observed_minus": fit.observed_minus.tolist(),
            "expected_plus": fit.expected_plus.tolist(),
            "expected_minus": fit.expected_minus.tolist(), "r": prof.r.tolist(),
            "n_plus_profile": prof.n_plus.tolist(), "n_minus_profile": prof.n_minus.tolist(),
            "chi2": fit.chi2, "dof": fit.dof, "pvalue": fit.pvalue,
            "converged": prof.converged, "note": note}


def impulse_weights(configs, domain, weights) -> list[float]:
    """Frame weights for the rotating fit of one run: min(1/tau_int of E/N, 1/tau_int of M).

    ``weights`` are the run's beta-only weights (thermo.data.units.series_weights, from the
    energy); M can decorrelate more slowly than E (a slowly precessing cluster), and the fit
    uses both statistics, so the slower one counts.

    Units: tau_int in frames.
    """
    if not getattr(domain, "conserves_angular_impulse", False) or len(configs) < 4:
        return list(weights)
    m = np.array([float(domain.angular_impulse(p, s)) for p, s in configs if len(s) >= 2])
    tau = integrated_autocorr_time(m) if m.size >= 4 else math.nan
    tau = max(1.0, tau) if math.isfinite(tau) else 1.0
    return [min(float(w), 1.0 / tau) for w in weights]
