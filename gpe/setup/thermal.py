r"""The finite-temperature settings of a protocol: T, the projector cutoff and gamma.

``[evolution] temperature_nK`` (or ``_mu``) > 0 runs the stochastic projected GPE
(gpe/field/stochastic.py) with the projector energy ``cutoff_mu``; the damping gamma is the
given ``damping`` or, without one, the high-temperature expression :func:`thermal_damping`.

Units: SI in :func:`thermal_damping` and :func:`thermal_de_broglie` (as their names say);
simulation units (mu) in :func:`resolve_thermal`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from gpe.errors import VorthermError
from gpe.field.grid import Grid
from gpe.field.stochastic import largest_cutoff
from gpe.setup.schema import Section
from gpe.setup.units import BOLTZMANN, HBAR, HealingUnits


def thermal_de_broglie(mass_kg: float, temperature_K: float) -> float:
    """lambda_dB = sqrt(2 pi hbar^2 / (m k_B T)). Units: kg, K -> m."""
    return math.sqrt(2.0 * math.pi * HBAR**2 / (mass_kg * BOLTZMANN * temperature_K))


def thermal_damping(temperature_K: float, mu_J: float, cutoff_J: float, mass_kg: float,
                    a_s_m: float) -> float:
    r"""Dimensionless growth rate gamma of the simple-growth SPGPE at temperature T.

    The high-temperature expression for a thermal cloud at (mu, T) above the cutoff
    (Bradley, Gardiner & Davis, PRA 77, 033616 (2008); used by Rooney, Bradley & Blakie,
    PRA 81, 023630 (2010); the formula is written here from memory):

    .. math:: \gamma = \frac{8 a_s^2}{\lambda_{dB}^2} \sum_{j=1}^{\infty}
              \frac{e^{\beta\mu(j+1)}}{e^{2\beta\epsilon_{cut} j}}\,
              \Phi\!\left[e^{\beta(\mu - 2\epsilon_{cut})}, 1, j\right]^2,

    :math:`\Phi(z, 1, j) = \sum_{m \ge 0} z^m/(m + j)` the Lerch transcendent.  With
    :math:`z = e^{\beta(\mu - 2\epsilon_{cut})} < 1` the j-th term is :math:`e^{\beta\mu} z^j
    \Phi(z, 1, j)^2`, so both sums converge geometrically; they are summed until the terms
    fall below 1e-17 of the total.  The expression is that of a 3D thermal reservoir; it is
    used as is for the quasi-2D gas (common practice).

    Raises
    ------
    VorthermError
        Unless T > 0 and cutoff > mu (the reservoir lies above the cutoff).

    Units: temperature in K; mu, cutoff in J; mass in kg; a_s in m; gamma dimensionless.
    """
    if not (temperature_K > 0 and math.isfinite(temperature_K)):
        raise VorthermError(f"thermal_damping needs T > 0, got {temperature_K!r} K")
    if not cutoff_J > mu_J:
        raise VorthermError("thermal_damping needs the cutoff above mu (the thermal reservoir "
                            f"lies above it); got cutoff {cutoff_J!r} J <= mu {mu_J!r} J")
    beta = 1.0 / (BOLTZMANN * temperature_K)
    z = math.exp(beta * (mu_J - 2.0 * cutoff_J))
    n_terms = int(min(1e6, math.ceil(40.0 / -math.log(z)))) + 2
    m = np.arange(n_terms)
    powers = z ** m                                    # z^m, m = 0 .. n-1
    total = 0.0
    for j in range(1, n_terms):
        lerch = float(np.sum(powers / (m + j)))
        term = powers[j] * lerch * lerch
        total += term
        if term < 1e-17 * total:
            break
    total *= math.exp(beta * mu_J)
    return 8.0 * a_s_m**2 / thermal_de_broglie(mass_kg, temperature_K) ** 2 * total



def resolve_thermal(ev: Section, grid: Grid, units: HealingUnits, mass_kg: float,
                     a_s_m: float) -> dict[str, Any]:
    """Temperature, projector cutoff and gamma of [evolution] (the finite-temperature stage).

    gamma is the given damping, or at T > 0 without one the high-temperature expression
    (:func:`gpe.setup.units.thermal_damping`) at the unit mu (the Thomas-Fermi value).
    Units: temperature, cutoff in mu.
    """
    temperature = ev.get("temperature")
    gamma = ev.get("damping")
    if temperature == 0:
        if ev.has("cutoff"):
            ev.fail("cutoff", "is given but the temperature is 0: the projector belongs to the "
                    "finite-temperature stage, and a run at T = 0 is the deterministic one",
                    "a temperature_nK > 0 with it, or no cutoff")
        return {"temperature": 0.0, "cutoff": None, "gamma": gamma, "gamma_source": "given"}
    if not ev.has("cutoff"):
        ev.fail("cutoff", "missing: needed with temperature > 0 (the energy of the projector "
                "onto the classical-field modes)", "cutoff_mu, typically 2 to 3 (common practice)")
    cutoff, limit = ev.get("cutoff"), largest_cutoff(grid)
    if cutoff > limit:
        ev.fail("cutoff", f"{cutoff:.4g} mu is above the grid's k_max^2/2 = {limit:.4g} mu "
                f"(k_max = pi/dx = {math.sqrt(2 * limit):.4g} 1/xi)",
                f"a cutoff <= {limit:.4g} mu, or a finer grid")
    if cutoff <= 1.0:
        ev.fail("cutoff", f"{cutoff:.4g} mu is not above the chemical potential (1 mu): the "
                "projected modes must hold the condensate", "cutoff_mu > 1, typically 2 to 3")
    if ev.has("damping"):
        if gamma == 0:
            ev.fail("damping", "is 0 with temperature > 0: the noise strength 2 gamma k_B T "
                    "would vanish", "damping > 0, or leave damping out to compute gamma from "
                    "T and mu")
        return {"temperature": temperature, "cutoff": cutoff, "gamma": gamma,
                "gamma_source": "given"}
    gamma = float(thermal_damping(temperature * units.temperature_K, units.mu_J,
                                  cutoff * units.mu_J, mass_kg, a_s_m))
    return {"temperature": temperature, "cutoff": cutoff, "gamma": gamma,
            "gamma_source": "computed"}
