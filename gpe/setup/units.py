"""Species, the quasi-2D coupling and the conversion between SI and healing units.

Healing units (the simulation's own): length xi = hbar/sqrt(m mu), time hbar/mu, energy mu,
areal density n0 = mu/g2D, speed c = hbar/(m xi) (the Bogoliubov sound speed, c = 1).

Units: SI everywhere in this module unless a name says otherwise (``_u`` atomic mass units,
``_a0`` Bohr radii, ``_hz`` cycles per second).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import scipy.constants as const

from gpe.errors import VorthermError

HBAR = const.hbar
ATOMIC_MASS_KG = const.physical_constants["atomic mass constant"][0]
BOHR_RADIUS_M = const.physical_constants["Bohr radius"][0]
BOLTZMANN = const.k


@dataclass(frozen=True)
class Species:
    """An atomic isotope as used in cold-atom experiments.

    Parameters
    ----------
    name : str
        Isotope label, e.g. ``"87Rb"``.
    mass_u : float
        Atomic mass (CIAAW / AME2020).
    scattering_length_a0 : float or None
        Default s-wave scattering length of the usual trapped state; ``None`` for species whose
        scattering length is normally tuned with a Feshbach resonance (the protocol must give it).
    note : str
        Where the default scattering length comes from and for which state.

    Units
    -----
    mass in u, scattering length in Bohr radii.
    """

    name: str
    mass_u: float
    scattering_length_a0: float | None
    note: str = ""

    @property
    def mass_kg(self) -> float:
        """Mass. Units: kg."""
        return self.mass_u * ATOMIC_MASS_KG

    @property
    def tunable(self) -> bool:
        """True when there is no default scattering length (Feshbach-tuned species)."""
        return self.scattering_length_a0 is None


# Masses: CIAAW / AME2020 atomic masses. Scattering lengths: see the note of each entry.
SPECIES: dict[str, Species] = {
    s.name: s
    for s in (
        Species("87Rb", 86.90918053, 100.40,
                "|F=1,mF=-1>, van Kempen et al., PRL 88, 093201 (2002) (digits from memory)"),
        Species("23Na", 22.98976928, 54.5,
                "|F=1,mF=-1>, Knoop et al., PRA 83, 042704 (2011) (digits from memory)"),
        Species("39K", 38.96370649, None, "Feshbach-tuned: give atoms.scattering_length_a0"),
        Species("41K", 40.96182526, 60.0, "approximate background value (from memory)"),
        Species("7Li", 7.0160034, None, "Feshbach-tuned: give atoms.scattering_length_a0"),
        Species("133Cs", 132.90545196, None, "Feshbach-tuned: give atoms.scattering_length_a0"),
    )
}


def get_species(name: str) -> Species:
    """Look up a species by name (``"87Rb"``; ``"Rb87"`` and ``"rb87"`` are accepted too).

    Raises
    ------
    VorthermError
        If the name is not in :data:`SPECIES`; the message lists the known names.
    """
    key = name.strip()
    if key in SPECIES:
        return SPECIES[key]
    norm = key.lower().replace("-", "")
    for species in SPECIES.values():
        digits = "".join(ch for ch in species.name if ch.isdigit())
        letters = species.name[len(digits):]
        if norm in (species.name.lower(), (letters + digits).lower()):
            return species
    raise VorthermError(
        f"unknown species {name!r}; known species: {', '.join(SPECIES)}"
    )


def axial_length(mass_kg: float, omega_z: float) -> float:
    """Harmonic oscillator length of the tight axis, ``l_z = sqrt(hbar / (m omega_z))``.

    Units: mass in kg, omega_z in rad/s; returns metres.
    """
    return math.sqrt(HBAR / (mass_kg * omega_z))


def quasi2d_coupling(mass_kg: float, a_s_m: float, omega_z: float) -> float:
    """Effective 2D contact coupling of a condensate frozen in the axial ground state.

    .. math:: g_{2D} = \\sqrt{8\\pi}\\,\\frac{\\hbar^2 a_s}{m\\,l_z},
              \\qquad l_z = \\sqrt{\\hbar/(m\\omega_z)}

    (Petrov, Holzmann & Shlyapnikov, PRL 84, 2551 (2000); valid for a_s << l_z and
    mu, k_B T << hbar omega_z.)

    Parameters
    ----------
    mass_kg : float
        Atomic mass.
    a_s_m : float
        s-wave scattering length.
    omega_z : float
        Axial trap angular frequency.

    Units
    -----
    kg, m, rad/s in; J m^2 out.
    """
    if mass_kg <= 0 or omega_z <= 0:
        raise VorthermError("quasi2d_coupling needs a positive mass and axial frequency")
    return math.sqrt(8.0 * math.pi) * HBAR**2 * a_s_m / (mass_kg * axial_length(mass_kg, omega_z))


def dimensionless_coupling(mass_kg: float, g2d_Jm2: float) -> float:
    """The 2D coupling in units of hbar^2/m, ``g~ = m g2D / hbar^2`` (= 1/(n0 xi^2)).

    Units: dimensionless.
    """
    return mass_kg * g2d_Jm2 / HBAR**2


def tf_mu_flat(g2d_Jm2: float, number: float, area_m2: float) -> float:
    """Thomas-Fermi chemical potential of a flat-bottomed trap, ``mu = g2D N / A``.

    Units: J m^2, atoms, m^2 in; J out.
    """
    return g2d_Jm2 * number / area_m2


def tf_number_flat(g2d_Jm2: float, mu_J: float, area_m2: float) -> float:
    """Inverse of :func:`tf_mu_flat`: ``N = mu A / g2D``. Units: J m^2, J, m^2 in; atoms out."""
    return mu_J * area_m2 / g2d_Jm2


def tf_mu_harmonic(g2d_Jm2: float, number: float, mass_kg: float,
                   omega_x: float, omega_y: float) -> float:
    """Peak Thomas-Fermi chemical potential of a 2D anisotropic harmonic trap.

    .. math:: \\mu = \\sqrt{g_{2D} N m \\omega_x \\omega_y / \\pi}

    (integrate n = (mu - V)/g over the elliptic TF disk; Pethick & Smith ch. 6 for the
    isotropic case.)

    Units: J m^2, atoms, kg, rad/s in; J out.
    """
    return math.sqrt(g2d_Jm2 * number * mass_kg * omega_x * omega_y / math.pi)


def tf_number_harmonic(g2d_Jm2: float, mu_J: float, mass_kg: float,
                       omega_x: float, omega_y: float) -> float:
    """Inverse of :func:`tf_mu_harmonic`: ``N = pi mu^2 / (g2D m wx wy)``. Units: as there."""
    return math.pi * mu_J**2 / (g2d_Jm2 * mass_kg * omega_x * omega_y)


def axial_swelling(mu_over_hbar_omega_z: float) -> float:
    r"""Gaussian variational estimate of the axial width of a quasi-2D gas, in units of l_z.

    With a Gaussian axial profile of width :math:`s\,l_z` the energy per atom is
    :math:`\tfrac{\hbar\omega_z}{4}(s^{-2} + s^2) + \mu/(2s)`, :math:`\mu = g_{2D} n` the 2D
    chemical potential at s = 1 (the 2D coupling scales as 1/s).  Its minimum solves
    :math:`s^4 - 1 = (\mu/\hbar\omega_z)\,s` (Gaussian variational ansatz as in Perez-Garcia,
    Michinel, Cirac, Lewenstein & Zoller, PRA 56, 1424 (1997), for the method; derivation
    here), so :math:`s \approx 1 + \mu/(4\hbar\omega_z)` for a thin gas; the quasi-2D coupling
    of :func:`quasi2d_coupling` is then too large by the factor s.

    Units: mu / (hbar omega_z) dimensionless; returns s dimensionless (>= 1).
    """
    x = float(mu_over_hbar_omega_z)
    if not (math.isfinite(x) and x >= 0):
        raise VorthermError(f"axial_swelling needs mu/(hbar omega_z) >= 0, got {x!r}")
    s = 1.0 + x / 4.0
    for _ in range(50):                       # Newton on s^4 - x s - 1, convex for s >= 1
        step = (s**4 - x * s - 1.0) / (4.0 * s**3 - x)
        s -= step
        if abs(step) < 1e-15 * s:
            break
    return s


@dataclass(frozen=True)
class HealingUnits:
    """Conversion factors between SI and the simulation's healing units.

    Parameters
    ----------
    mass_kg : float
        Atomic mass.
    mu_J : float
        The chemical potential that defines the units (energy unit).
    g2d_Jm2 : float
        Quasi-2D coupling constant (fixes the density unit n0 = mu/g2D).

    Units
    -----
    Inputs in SI; each ``*_m``, ``*_s``, ``*_J`` ... property is one simulation unit in SI.
    """

    mass_kg: float
    mu_J: float
    g2d_Jm2: float

    def __post_init__(self) -> None:
        for name in ("mass_kg", "mu_J", "g2d_Jm2"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise VorthermError(f"HealingUnits.{name} must be positive and finite (got {value!r})")

    @property
    def healing_length_m(self) -> float:
        """xi = hbar / sqrt(m mu). Units: m."""
        return HBAR / math.sqrt(self.mass_kg * self.mu_J)

    @property
    def length_m(self) -> float:
        """One simulation length unit (= xi). Units: m."""
        return self.healing_length_m

    @property
    def time_s(self) -> float:
        """One simulation time unit, hbar / mu. Units: s."""
        return HBAR / self.mu_J

    @property
    def energy_J(self) -> float:
        """One simulation energy unit, mu. Units: J."""
        return self.mu_J

    @property
    def density_m2(self) -> float:
        """Areal density unit n0 = mu / g2D (|psi|^2 = 1). Units: 1/m^2."""
        return self.mu_J / self.g2d_Jm2

    @property
    def speed_m_s(self) -> float:
        """Speed unit c = hbar / (m xi) = sqrt(mu/m), the sound speed. Units: m/s."""
        return HBAR / (self.mass_kg * self.healing_length_m)

    @property
    def temperature_K(self) -> float:
        """mu / k_B. Units: K."""
        return self.mu_J / BOLTZMANN

    @property
    def coupling(self) -> float:
        """g~ = m g2D / hbar^2 = 1/(n0 xi^2): atoms per unit norm. Units: dimensionless."""
        return dimensionless_coupling(self.mass_kg, self.g2d_Jm2)

    # -- conversions ---------------------------------------------------------------------------
    def length_to_sim(self, metres: float) -> float:
        """Length in m -> xi."""
        return metres / self.length_m

    def length_to_si(self, xi: float) -> float:
        """Length in xi -> m."""
        return xi * self.length_m

    def time_to_sim(self, seconds: float) -> float:
        """Time in s -> hbar/mu."""
        return seconds / self.time_s

    def time_to_si(self, tau: float) -> float:
        """Time in hbar/mu -> s."""
        return tau * self.time_s

    def time_to_ms(self, tau):
        """Time in hbar/mu -> ms (scalars or arrays): the one conversion every report uses."""
        return tau * (self.time_s * 1e3)

    def ms_to_time(self, ms):
        """Time in ms -> hbar/mu (scalars or arrays)."""
        return ms / (self.time_s * 1e3)

    def energy_to_sim(self, joules: float) -> float:
        """Energy in J -> mu."""
        return joules / self.energy_J

    def energy_to_si(self, mu: float) -> float:
        """Energy in mu -> J."""
        return mu * self.energy_J

    def speed_to_sim(self, m_per_s: float) -> float:
        """Speed in m/s -> c."""
        return m_per_s / self.speed_m_s

    def speed_to_si(self, c: float) -> float:
        """Speed in c -> m/s."""
        return c * self.speed_m_s

    def density_to_sim(self, per_m2: float) -> float:
        """Areal density in 1/m^2 -> n0."""
        return per_m2 / self.density_m2

    def density_to_si(self, n0: float) -> float:
        """Areal density in n0 -> 1/m^2."""
        return n0 * self.density_m2

    def rate_to_sim(self, rad_per_s: float) -> float:
        """Angular frequency in rad/s -> rad per (hbar/mu)."""
        return rad_per_s * self.time_s

    def rate_to_si(self, rad_per_tau: float) -> float:
        """Angular frequency in rad per (hbar/mu) -> rad/s."""
        return rad_per_tau / self.time_s

    def atom_number(self, norm: float) -> float:
        """Atoms for a given ``integral |psi|^2 dx dy`` (xi^2 units): ``N = norm / g~``."""
        return norm / self.coupling

    def norm_for(self, number: float) -> float:
        """``integral |psi|^2 dx dy`` (xi^2 units) that holds ``number`` atoms: ``N g~``."""
        return number * self.coupling

    def as_dict(self) -> dict[str, float]:
        """All factors as plain floats, e.g. for HDF5 attributes. Keys carry their SI unit."""
        return {
            "mass_kg": self.mass_kg,
            "chemical_potential_J": self.mu_J,
            "g2d_J_m2": self.g2d_Jm2,
            "length_m": self.length_m,
            "time_s": self.time_s,
            "energy_J": self.energy_J,
            "density_per_m2": self.density_m2,
            "speed_m_per_s": self.speed_m_s,
            "temperature_K": self.temperature_K,
            "dimensionless_coupling": self.coupling,
        }

    @classmethod
    def from_dict(cls, values: dict) -> "HealingUnits":
        """Rebuild from :meth:`as_dict` output (only the three defining numbers are read)."""
        return cls(float(values["mass_kg"]), float(values["chemical_potential_J"]),
                   float(values["g2d_J_m2"]))
