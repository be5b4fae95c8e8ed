"""The finite-temperature settings: gamma from T and mu against an independent evaluation."""

import math

import pytest
import scipy.constants as sc
from scipy import integrate

from gpe.errors import VorthermError
from gpe.setup.thermal import thermal_damping

M_U = sc.physical_constants["atomic mass constant"][0]
A0 = sc.physical_constants["Bohr radius"][0]


def test_thermal_damping_matches_the_integral_form_of_the_lerch_transcendent():
    """[pub] Bradley, Gardiner & Davis, PRA 77, 033616 (2008) (formula from memory):
    gamma = 8 a^2/lambda^2 sum_j e^{beta mu (j+1)} e^{-2 beta eps_c j} Phi(z, 1, j)^2,
    z = e^{beta(mu - 2 eps_c)}.  Independent reference: Phi(z, 1, j) from its integral
    representation int_0^inf e^{-j t}/(1 - z e^{-t}) dt (DLMF 25.14.5) by scipy quad."""
    mass, a_s = 86.90918053 * M_U, 100.4 * A0
    mu = sc.k * 20e-9
    for temperature, cutoff in ((100e-9, 2.5 * mu), (40e-9, 3.0 * mu)):
        beta = 1 / (sc.k * temperature)
        z = math.exp(beta * (mu - 2 * cutoff))
        lerch = [integrate.quad(lambda t, j=j, z=z: math.exp(-j * t) / (1 - z * math.exp(-t)),
                                0, math.inf, epsabs=0, epsrel=1e-12)[0] for j in range(1, 80)]
        total = sum(math.exp(beta * mu * (j + 1) - 2 * beta * cutoff * j) * phi**2
                    for j, phi in enumerate(lerch, start=1))
        lam2 = 2 * math.pi * sc.hbar**2 / (mass * sc.k * temperature)   # [exact] lambda_dB^2
        reference = 8 * a_s**2 / lam2 * total
        assert thermal_damping(temperature, mu, cutoff, mass, a_s) == pytest.approx(
            reference, rel=1e-9)
    # gamma grows with T at fixed mu and cutoff (more thermal atoms to collide with)
    values = [thermal_damping(t, mu, 2.5 * mu, mass, a_s) for t in (20e-9, 50e-9, 100e-9)]
    assert values[0] < values[1] < values[2]
    with pytest.raises(VorthermError, match="cutoff above mu"):
        thermal_damping(50e-9, mu, 0.5 * mu, mass, a_s)
    with pytest.raises(VorthermError, match="T > 0"):
        thermal_damping(0.0, mu, 2.5 * mu, mass, a_s)
