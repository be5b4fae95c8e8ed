"""Tests of gpe.setup.units: species table, quasi-2D coupling, healing units, Thomas-Fermi mu."""

import math

import numpy as np
import pytest
import scipy.constants as sc
from scipy import integrate

from gpe.errors import VorthermError
from gpe.setup.units import (
    SPECIES,
    HealingUnits,
    axial_length,
    get_species,
    quasi2d_coupling,
    tf_mu_flat,
    tf_mu_harmonic,
    tf_number_flat,
    axial_swelling,
    tf_number_harmonic,
)

M_U = sc.physical_constants["atomic mass constant"][0]
A0 = sc.physical_constants["Bohr radius"][0]


@pytest.mark.parametrize("name, h_over_m", [("87Rb", 4.59136e-9), ("23Na", 1.73569e-8)])
def test_h_over_m_matches_reference(name, h_over_m):
    # [exact] h/m from the CIAAW/AME2020 masses, check values of reference-values.md
    assert sc.h / SPECIES[name].mass_kg == pytest.approx(h_over_m, rel=2e-6)


def test_species_table_has_required_isotopes_and_tunable_flags():
    for name in ("87Rb", "23Na", "39K", "41K", "7Li", "133Cs"):
        assert name in SPECIES
    for tunable in ("39K", "7Li", "133Cs"):
        assert SPECIES[tunable].scattering_length_a0 is None and SPECIES[tunable].tunable
    assert SPECIES["87Rb"].scattering_length_a0 == pytest.approx(100.40)
    assert get_species("rb87") is SPECIES["87Rb"]
    with pytest.raises(VorthermError, match="87Rb"):
        get_species("Rb85")


def test_quasi2d_coupling_equals_overlap_integral_of_axial_gaussian():
    # [pub] Petrov, Holzmann & Shlyapnikov, PRL 84, 2551 (2000): g2D = g3D * int |phi_0(z)|^4 dz
    # with g3D = 4 pi hbar^2 a/m and phi_0 the axial oscillator ground state. The integral is
    # done here by scipy quadrature, independently of the closed form in gpe.setup.units.
    m = SPECIES["87Rb"].mass_kg
    a_s = 100.4 * A0
    omega_z = 2 * np.pi * 750.0
    lz = math.sqrt(sc.hbar / (m * omega_z))
    phi2 = lambda z: np.exp(-z**2 / lz**2) / (math.sqrt(math.pi) * lz)  # |phi_0|^2
    overlap, _ = integrate.quad(lambda z: phi2(z) ** 2, -20 * lz, 20 * lz, points=[0.0])
    g3d = 4 * math.pi * sc.hbar**2 * a_s / m
    assert quasi2d_coupling(m, a_s, omega_z) == pytest.approx(g3d * overlap, rel=1e-10)
    assert axial_length(m, omega_z) == pytest.approx(lz, rel=1e-14)


def test_quasi2d_coupling_scaling():
    # [exact] g2D is linear in a_s and proportional to sqrt(omega_z / m) / m * m = sqrt(omega_z/m)
    m = SPECIES["23Na"].mass_kg
    g1 = quasi2d_coupling(m, 50 * A0, 1000.0)
    assert quasi2d_coupling(m, 100 * A0, 1000.0) == pytest.approx(2 * g1, rel=1e-14)
    assert quasi2d_coupling(m, 50 * A0, 4000.0) == pytest.approx(2 * g1, rel=1e-14)
    with pytest.raises(VorthermError):
        quasi2d_coupling(m, 50 * A0, -1.0)


def test_tf_mu_flat_and_inverse():
    # [exact] uniform density n = mu/g over area A holds N = mu A / g atoms
    g, area, n = 3.1e-45, 1.3e-8, 2.0e5
    mu = tf_mu_flat(g, n, area)
    assert mu / g * area == pytest.approx(n, rel=1e-14)
    assert tf_number_flat(g, mu, area) == pytest.approx(n, rel=1e-14)


def test_tf_mu_harmonic_integrates_to_atom_number():
    # [pub] Pethick & Smith ch. 6 (isotropic); checked here by integrating the TF profile
    # n = (mu - V)/g over the anisotropic trap with scipy.integrate.dblquad.
    m = SPECIES["87Rb"].mass_kg
    g = quasi2d_coupling(m, 100.4 * A0, 2 * np.pi * 800)
    wx, wy, number = 2 * np.pi * 20.0, 2 * np.pi * 35.0, 1.5e5
    mu = tf_mu_harmonic(g, number, m, wx, wy)
    rx = math.sqrt(2 * mu / (m * wx**2))
    ry = math.sqrt(2 * mu / (m * wy**2))

    def density(y, x):
        return max(mu - 0.5 * m * (wx**2 * x**2 + wy**2 * y**2), 0.0) / g

    total, _ = integrate.dblquad(density, -rx, rx,
                                 lambda x: -ry * math.sqrt(max(1 - (x / rx) ** 2, 0.0)),
                                 lambda x: ry * math.sqrt(max(1 - (x / rx) ** 2, 0.0)),
                                 epsabs=0, epsrel=1e-9)
    assert total == pytest.approx(number, rel=1e-6)
    assert tf_number_harmonic(g, mu, m, wx, wy) == pytest.approx(number, rel=1e-12)


def test_healing_units_definitions_and_round_trips():
    m = SPECIES["87Rb"].mass_kg
    g = quasi2d_coupling(m, 100.4 * A0, 2 * np.pi * 700)
    mu = sc.k * 40e-9
    u = HealingUnits(m, mu, g)
    xi = sc.hbar / math.sqrt(m * mu)
    assert u.length_m == pytest.approx(xi, rel=1e-14)
    assert u.time_s == pytest.approx(sc.hbar / mu, rel=1e-14)
    # [exact] c = sqrt(g n0 / m) with n0 = mu/g equals hbar/(m xi) = xi / (hbar/mu)
    assert u.speed_m_s == pytest.approx(math.sqrt(g * (mu / g) / m), rel=1e-12)
    assert u.speed_m_s == pytest.approx(u.length_m / u.time_s, rel=1e-12)
    # [exact] n0 xi^2 = hbar^2/(m g)
    assert u.density_m2 * xi**2 == pytest.approx(sc.hbar**2 / (m * g), rel=1e-12)
    assert u.atom_number(u.norm_for(1.0e5)) == pytest.approx(1.0e5, rel=1e-14)
    assert u.temperature_K == pytest.approx(40e-9, rel=1e-12)
    for to_sim, to_si, value in (
        (u.length_to_sim, u.length_to_si, 12e-6),
        (u.time_to_sim, u.time_to_si, 3e-3),
        (u.energy_to_sim, u.energy_to_si, 1e-30),
        (u.speed_to_sim, u.speed_to_si, 1.2e-3),
        (u.density_to_sim, u.density_to_si, 5e13),
        (u.rate_to_sim, u.rate_to_si, 2 * np.pi * 30),
    ):
        assert to_si(to_sim(value)) == pytest.approx(value, rel=1e-14)
    assert HealingUnits.from_dict(u.as_dict()) == u
    assert all(isinstance(v, float) for v in u.as_dict().values())
    with pytest.raises(VorthermError, match="mu_J"):
        HealingUnits(m, -1.0, g)


def test_axial_swelling_is_the_gaussian_variational_minimum():
    """[exact, derivation in gpe.setup.units.axial_swelling] minimising
    (s^-2 + s^2)/4 + x/(2 s) over s (energies in hbar omega_z, x = mu/(hbar omega_z)) by
    scipy's bounded scalar minimiser; thin-gas limit s = 1 + x/4 + O(x^2)."""
    from scipy.optimize import minimize_scalar
    for x in (0.05, 0.34, 1.0):
        best = minimize_scalar(lambda s, x=x: (s**-2 + s**2) / 4 + x / (2 * s), bounds=(0.5, 3.0),
                               method="bounded", options={"xatol": 1e-12}).x
        assert axial_swelling(x) == pytest.approx(best, rel=1e-7)
    assert axial_swelling(1e-4) - 1 == pytest.approx(2.5e-5, rel=1e-3)
    assert 0.075 < axial_swelling(0.34) - 1 < 0.085      # the ~8% of a mu/(hbar omega_z) = 0.34 gas
    assert axial_swelling(0.0) == 1.0
