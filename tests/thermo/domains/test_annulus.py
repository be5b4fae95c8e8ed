r"""Tests of thermo.domains.annulus against a separation-of-variables series derived here.

The Dirichlet Green's function of the annulus q < r < 1 (-lap G = delta, G = 0 on both circles),
expanded in the angle, G = (1/2 pi) [g_0 + 2 sum_{m>=1} g_m cos m(theta - phi)], has radial
parts that solve -(1/r)(r g')' + m^2 g / r^2 = delta(r - rho)/rho with g(q) = g(1) = 0:

* m = 0: g_0 = ln(r_< / q) ln(r_>) / ln q (continuous at rho, jump of -r g' equal to 1);
* m >= 1: g_m = u_<(r_<) u_>(r_>) / [2m (q^-m - q^m)], with u_<(r) = (r/q)^m - (q/r)^m (zero at
  q), u_>(r) = r^-m - r^m (zero at 1); rho times their Wronskian is 2m (q^-m - q^m).

For the unit disk the same steps give g_0 = -ln r_> and g_m = r_<^m (r_>^-m - r_>^m)/(2m).
[exact: separation of variables, e.g. Duffy, Green's Functions with Applications (2015), from
memory for the reference; the steps above are the derivation.]
"""

import math

import numpy as np
import pytest
from scipy.integrate import cumulative_simpson, quad

from thermo.domains.annulus import Annulus
from thermo.domains.disk import Disk
from thermo.energy import energy, energy_change
from thermo.errors import DomainError


def _g_m(m, r, rho, q):
    lo, hi = min(r, rho), max(r, rho)
    if m == 0:
        return math.log(lo / q) * math.log(hi) / math.log(q)
    # the same ratio multiplied out by q^m, every power below 1 (no overflow)
    return ((lo / hi) ** m - (lo * hi) ** m - (q * q / (lo * hi)) ** m + (q * q * hi / lo) ** m) \
        / (2 * m * (1 - q ** (2 * m)))


def _g_m_disk(m, r, rho):
    lo, hi = min(r, rho), max(r, rho)
    return -math.log(hi) if m == 0 else lo ** m * (hi ** -m - hi ** m) / (2 * m)


def dirichlet_series(z, a, q, m_max=4000):
    """G_D(z, a) of the annulus from the angular series (module docstring)."""
    r, th = abs(z), np.angle(z)
    rho, ph = abs(a), np.angle(a)
    total = _g_m(0, r, rho, q)
    for m in range(1, m_max):
        total += 2 * _g_m(m, r, rho, q) * math.cos(m * (th - ph))
    return total / (2 * math.pi)


def dirichlet_robin_series(a, q, m_max=400):
    """Robin function of G_D: the disk's ln(1 - |a|^2)/(2 pi) plus the regular difference of the
    two series at z = a, whose terms fall off geometrically."""
    rho = abs(a)
    total = _g_m(0, rho, rho, q) - _g_m_disk(0, rho, rho)
    for m in range(1, m_max):
        total += 2 * (_g_m(m, rho, rho, q) - _g_m_disk(m, rho, rho))
    return math.log(1 - rho**2) / (2 * math.pi) + total / (2 * math.pi)


def _as_complex(p):
    return complex(p[0], p[1])


@pytest.mark.parametrize("q", [0.2, 0.5, 0.8])
def test_green_is_the_series_plus_lins_correction(q, rng):
    # G_h = G_D + ln|z| ln|a| / (2 pi ln(1/q)) [pub: Lin, PNAS 27, 575 (1941), the Green's
    # function at fixed circulation around the hole; G_D from the series of the module docstring]
    dom = Annulus(q)
    pts = dom.sample_uniform(rng, 12, margin=0.03)
    z, a = pts[:6], pts[6:]
    for zi, ai in zip(z, a):
        if np.hypot(*(zi - ai)) < 0.05:   # the series converges slowly near the source
            continue
        ref = dirichlet_series(_as_complex(zi), _as_complex(ai), q)
        lin = math.log(np.hypot(*zi)) * math.log(np.hypot(*ai)) / (2 * math.pi * math.log(1 / q))
        assert float(dom.green(zi, ai)) == pytest.approx(ref + lin, abs=2e-4)


@pytest.mark.parametrize("q", [0.2, 0.5, 0.8])
def test_robin_function_matches_the_series(q, rng):
    # R_h = R_D + (ln|a|)^2 / (2 pi ln(1/q)) [Lin's correction on the diagonal], R_D from the
    # regular difference of the annulus and disk series [exact]
    dom = Annulus(q)
    for a in dom.sample_uniform(rng, 6, margin=0.02):
        rho = float(np.hypot(*a))
        ref = dirichlet_robin_series(_as_complex(a), q) + math.log(rho) ** 2 / (2 * math.pi * math.log(1 / q))
        assert float(dom.robin(a)) == pytest.approx(ref, abs=1e-9)


def test_boundary_values_and_symmetry(rng):
    # G_h = 0 on the outer circle and -ln|a| / (2 pi) on the inner one (there G_D = 0) [exact];
    # symmetric in its arguments; harmonic away from the source (five-point Laplacian, O(h^2))
    q = 0.4
    dom = Annulus(q)
    a = dom.sample_uniform(rng, 5, margin=0.05)
    phi = np.linspace(0, 2 * np.pi, 13, endpoint=False)
    outer = np.column_stack((np.cos(phi), np.sin(phi)))
    inner = q * outer
    for ai in a:
        assert np.max(np.abs(dom.green(outer, ai))) < 1e-12
        np.testing.assert_allclose(dom.green(inner, ai), -math.log(np.hypot(*ai)) / (2 * math.pi),
                                   atol=1e-12)
    b = dom.sample_uniform(rng, 5, margin=0.05)
    np.testing.assert_allclose(dom.green(a, b), dom.green(b, a), rtol=1e-12)
    z0, z = np.array([0.0, 0.7]), np.array([0.55, -0.2])
    h = 1e-3
    lap = (dom.green(z + [h, 0], z0) + dom.green(z - [h, 0], z0) + dom.green(z + [0, h], z0)
           + dom.green(z - [0, h], z0) - 4 * dom.green(z, z0)) / h**2
    assert abs(float(lap)) < 1e-4


def _circulation(dom, a, sign, r):
    """Circulation of one vortex's flow on the circle of radius r, from its stream function
    psi = s G_h(., a) by a centred difference in r (v_theta = -d psi / dr), scipy quadrature."""
    h = 1e-5

    def v_theta(th):
        p_out = np.array([(r + h) * math.cos(th), (r + h) * math.sin(th)])
        p_in = np.array([(r - h) * math.cos(th), (r - h) * math.sin(th)])
        return -sign * float(dom.green(p_out, a) - dom.green(p_in, a)) / (2 * h) * r

    return quad(v_theta, 0, 2 * math.pi, limit=200)[0]


def test_no_circulation_is_dragged_onto_the_hole():
    # A vortex's G_h flow has zero circulation on loops around the hole alone and its own
    # quantum s on loops around the hole and the vortex [exact: the defining property of the
    # hydrodynamic Green's function]; so the hole's circulation stays the domain's winding.
    dom = Annulus(0.3)
    a = np.array([0.35, 0.45])           # |a| = 0.57
    for sign in (1, -1):
        assert _circulation(dom, a, sign, 0.4) == pytest.approx(0.0, abs=1e-6)
        assert _circulation(dom, a, sign, 0.8) == pytest.approx(sign, abs=1e-6)


def test_the_hole_term_is_the_energy_in_the_holes_flow(rng):
    # The energy of vortices at fixed hole circulation n: the n = 0 energy plus
    # rho int v_hole . v_vortex dA = -2 n s ln|a| (E0 units) per vortex [exact: v_hole =
    # n kappa/(2 pi r) and the vortex's circulation on circles of radius r is 0 inside |a| and
    # s kappa outside, checked above]; it is odd in the sign, the image energy even.
    q, n = 0.35, 2
    plain, wound = Annulus(q), Annulus(q, hole_winding=n)
    pos = plain.sample_uniform(rng, 5, margin=0.05)
    signs = np.array([1, 1, -1, 1, -1])
    cross = -2 * n * float(np.sum(signs * np.log(np.hypot(pos[:, 0], pos[:, 1]))))
    assert energy(pos, signs, wound) == pytest.approx(energy(pos, signs, plain) + cross, rel=1e-12)
    # the move kernel agrees with the difference of whole energies, the Robin function is the
    # sign-even part whatever the winding
    moved = pos.copy()
    moved[2] = [0.0, -0.6]
    ref = energy(moved, signs, wound) - energy(pos, signs, wound)
    assert energy_change(pos, signs, wound, 2, moved[2]) == pytest.approx(ref, rel=1e-10)
    np.testing.assert_allclose(wound.robin(pos), plain.robin(pos), rtol=1e-12)


def test_small_hole_tends_to_the_disk(rng):
    # q -> 0: the prime function tends to 1 - zeta and G_h to the disk's Green's function
    # [exact limit]; at q = 1e-3 the difference is O(q^2) away from the hole
    dom = Annulus(1e-3)
    pts = Disk().sample_uniform(rng, 20, margin=0.05)
    pts = pts[np.hypot(pts[:, 0], pts[:, 1]) > 0.1]
    a, b = pts[: len(pts) // 2], pts[len(pts) // 2: 2 * (len(pts) // 2)]
    np.testing.assert_allclose(dom.green(a, b), Disk().green(a, b), atol=1e-5)
    np.testing.assert_allclose(dom.robin(a), Disk().robin(a), atol=1e-5)


def test_bad_annuli_are_refused():
    with pytest.raises(DomainError, match="0 < inner radius / outer radius < 1; got 1.2"):
        Annulus(1.2)
    with pytest.raises(DomainError, match="hole_winding must be a whole number"):
        Annulus(0.3, hole_winding=1.5)
    with pytest.raises(DomainError, match="inner_radius < radius; got inner_radius 5 and radius 4"):
        Annulus.from_sizes({"inner_radius": 5.0, "radius": 4.0})
    with pytest.raises(DomainError, match="a margin of 0.4 R leaves no room"):
        Annulus(0.3).sample_uniform(np.random.default_rng(0), 3, margin=0.4)
    dom, unit = Annulus.from_sizes({"inner_radius": 10.0, "radius": 40.0}, hole_winding=-1)
    assert dom == Annulus(0.25, -1) and unit == 40.0 and dom.key() == ("annulus", 0.25, -1)


@pytest.mark.parametrize("beta,sign", [(0.8, 1), (0.8, -1), (-0.6, 1)])
def test_one_vortex_samples_the_exact_radial_density(beta, sign):
    # One vortex of sign s at inverse temperature beta (E0 units) in an annulus with n quanta on
    # its hole has the radial density p(r) ∝ r exp{-beta [2 pi R_h(r) - 2 n s ln r]} [exact:
    # Boltzmann weight of the one-body energy; normalised by scipy's cumulative Simpson rule]; the project's
    # tempering sampler must reproduce it (Kolmogorov-Smirnov against the quadrature CDF).
    from scipy import stats
    from thermo.sampler import run_tempering
    q, n, core = 0.3, 2, 0.02
    dom = Annulus(q, hole_winding=n)
    n_plus, n_minus = (1, 0) if sign > 0 else (0, 1)
    run = run_tempering(dom, n_plus, n_minus, [beta], 30000, core, np.random.default_rng(11),
                        thin=10)
    r = np.hypot(run.positions[0, :, 0, 0], run.positions[0, :, 0, 1])

    lo, hi = q + core, 1 - core
    grid = np.linspace(lo, hi, 4001)
    e = 2 * math.pi * dom.robin(np.column_stack((grid, np.zeros_like(grid)))) \
        - 2 * n * sign * np.log(grid)
    cdf = cumulative_simpson(grid * np.exp(-beta * e), x=grid, initial=0.0)
    ks = stats.kstest(r, lambda x: np.interp(x, grid, cdf / cdf[-1]))
    # 3000 samples thinned by 10 single-vortex sweeps: nearly independent; with the hole term's
    # sign flipped the same samples give p = 0 to double precision (measured at beta = 0.8)
    assert ks.pvalue > 1e-3, ks
