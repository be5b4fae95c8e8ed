"""Tests of thermo.sampler: Metropolis moves, parallel tempering."""

import numpy as np
import pytest
from scipy import integrate

from thermo.autocorr import integrated_autocorr_time
from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.energy import energy_batch
from thermo.errors import SamplerError
from thermo.sampler import (
    adaptive_ladder,
    default_ladder,
    run_tempering,
    swap_probability,
)


def _mean_and_se(x):
    """Mean and its standard error sqrt(tau_int Var / n) for a correlated series."""
    tau = integrated_autocorr_time(x)
    return x.mean(), np.sqrt(max(tau, 1.0) * x.var(ddof=1) / len(x))


def test_swap_probability_is_the_tempering_rule():
    # min{1, exp[(beta_i - beta_j)(E_i - E_j)]} [pub: Hukushima & Nemoto, JPSJ 65, 1604 (1996)]
    assert swap_probability(1.0, 0.5, -3.0, -1.0) == pytest.approx(np.exp(0.5 * -2.0))
    assert swap_probability(1.0, 0.5, -1.0, -3.0) == 1.0
    assert swap_probability(-0.2, -0.1, 40.0, 10.0) == pytest.approx(np.exp(-0.1 * 30.0))
    # detailed balance of the swap in the product ensemble pi_i(E_a) pi_j(E_b) [exact]
    rng = np.random.default_rng(3)
    for bi, bj, ea, eb in rng.normal(size=(50, 4)) * [1, 1, 5, 5]:
        fwd = np.exp(-bi * ea - bj * eb) * swap_probability(bi, bj, ea, eb)
        bwd = np.exp(-bi * eb - bj * ea) * swap_probability(bi, bj, eb, ea)
        assert fwd == pytest.approx(bwd, rel=1e-12)


def _one_vortex_mean_energy(beta, core):
    """<E> of one vortex in the disk with the wall core, by scipy quadrature.

    Density of x = 1 - |u|^2 is uniform on [0, 1] at beta = 0 and weighted by x^(-beta); the
    core restricts x >= eps = 1 - (1 - a)^2. As a -> 0 this gives <E> = -1/(1 - beta) [exact,
    reference-values.md].
    """
    eps = 1 - (1 - core) ** 2
    z = integrate.quad(lambda x: x ** (-beta), eps, 1, epsabs=1e-13)[0]
    m = integrate.quad(lambda x: np.log(x) * x ** (-beta), eps, 1, epsabs=1e-13)[0]
    return m / z


def test_one_vortex_canonical_energy(rng):
    betas = [0.5, 0.0, -1.0, -3.0]
    core = 0.005
    res = run_tempering(Disk(), 1, 0, betas, 20000, core, rng)
    for k, beta in enumerate(betas):
        ref = _one_vortex_mean_energy(beta, core)
        # the quadrature reference reduces to -1/(1 - beta) for a vanishing core
        assert _one_vortex_mean_energy(beta, 1e-12) == pytest.approx(-1 / (1 - beta), rel=1e-4)
        mean, se = _mean_and_se(res.energies[k])
        assert abs(mean - ref) < 4 * se, (beta, mean, ref, se)
        np.testing.assert_allclose(res.energy_standard_error()[k], se, rtol=1e-12)
    assert np.all((res.acceptance > 0.2) & (res.acceptance < 0.7))
    assert res.positions.shape == (4, 20000, 1, 2) and res.signs.tolist() == [1]


def test_beta_zero_dipole_moment_and_angular_impulse(rng):
    # beta = 0, uniform positions: <D^2> = 1/(2N) with D = |sum s_i u_i|/N; the signed angular
    # impulse M = sum s_i |u_i|^2 has mean 0 and variance N/12 for a neutral gas [exact,
    # reference-values.md: |u|^2 is uniform on [0, 1]]. The core (a = 1e-3) excludes a fraction
    # ~N^2 a^2 ~ 4e-5 of configuration space; the wall core shrinks the disk to rho = 1 - a,
    # so the exact values become rho^2/(2N) and rho^4 N/12 (|u|^2 uniform on [0, rho^2]).
    n_half = 3
    n = 2 * n_half
    res = run_tempering(Disk(), n_half, n_half, [0.0], 30000, 1e-3, rng, burn_in=500)
    u = res.positions[0]
    s = res.signs
    d2 = ((u * s[None, :, None]).sum(1) ** 2).sum(-1) / n**2
    m = (s[None, :] * (u**2).sum(-1)).sum(1)
    rho = 1 - 1e-3
    mean, se = _mean_and_se(d2)
    assert abs(mean - rho**2 / (2 * n)) < 4 * se
    mean, se = _mean_and_se(m)
    assert abs(mean) < 4 * se
    mean, se = _mean_and_se(m**2)
    assert abs(mean - rho**4 * n / 12) < 4 * se
    # and the recorded energies are those of the recorded positions
    np.testing.assert_allclose(res.energies[0, ::997], energy_batch(u[::997], s, Disk()), rtol=1e-9)


def _pair_reference(beta, core, n_phi=64):
    """<E> of a +- pair in the unit disk with hard core, by quadrature (stated error < 1e-5).

    By rotation symmetry u1 = (r1, 0), u2 = r2 e^{i phi}; the core demands r1, r2 <= 1 - a and
    |u1 - u2| >= 2a, i.e. cos(phi) <= (r1^2 + r2^2 - 4 a^2) / (2 r1 r2), so phi runs over
    [phi_min, pi] (times 2 by reflection). phi: Gauss-Legendre (the integrand is smooth there);
    r2 and r1: scipy.integrate.quad with the kinks r2 = r1 +- 2a as break points.
    """
    x, w = np.polynomial.legendre.leggauss(n_phi)
    rmax = 1 - core

    def phi_integrals(r1, r2):
        c = (r1 * r1 + r2 * r2 - 4 * core * core) / (2 * r1 * r2) if r1 * r2 > 0 else 2.0
        phi_min = np.arccos(np.clip(c, -1.0, 1.0))
        if c <= -1.0:
            return 0.0, 0.0
        phi = phi_min + (np.pi - phi_min) * 0.5 * (x + 1)
        cphi = np.cos(phi)
        e = (np.log(1 - r1 * r1) + np.log(1 - r2 * r2)
             - np.log((1 - 2 * r1 * r2 * cphi + (r1 * r2) ** 2) / (r1 * r1 + r2 * r2 - 2 * r1 * r2 * cphi)))
        wt = np.exp(-beta * e) * 0.5 * (np.pi - phi_min) * w
        return wt.sum(), (wt * e).sum()

    def inner(r1, which):
        pts = [p for p in (r1 - 2 * core, r1 + 2 * core) if 0 < p < rmax]
        return integrate.quad(lambda r2: r2 * phi_integrals(r1, r2)[which], 0, rmax,
                              points=pts, epsrel=1e-9, limit=200)[0]

    z = integrate.quad(lambda r1: r1 * inner(r1, 0), 0, rmax, epsrel=1e-8, limit=200)[0]
    m = integrate.quad(lambda r1: r1 * inner(r1, 1), 0, rmax, epsrel=1e-8, limit=200)[0]
    return m / z


def _pair_reference_gauss(beta, core, n=40, n_phi=48):
    """Same integral by split Gauss-Legendre product rules (fast; used by the default test).

    r1 is split where r1 +- 2a meet the ends of [0, 1 - a]; for each r1, r2 is split into
    [0, r1 - 2a], the band |r2 - r1| < 2a and [r1 + 2a, 1 - a]. In the band phi_min has square
    root ends, removed by r2 = r1 + 2a sin(pi t / 2). Stated error: the change from doubling
    all node counts (checked < 1e-5 in the test; the slow test compares with nested scipy quad).
    """
    x, w = np.polynomial.legendre.leggauss(n)
    xp, wp = np.polynomial.legendre.leggauss(n_phi)
    rmax, a2 = 1 - core, 2 * core

    def nodes(lo, hi):
        return lo + (hi - lo) * 0.5 * (x + 1), (hi - lo) * 0.5 * w

    brk = sorted({0.0, a2, rmax - a2, rmax})
    pieces = [nodes(lo, hi) for lo, hi in zip(brk[:-1], brk[1:])]
    z = m = 0.0
    for r1, w1 in zip(np.concatenate([p[0] for p in pieces]), np.concatenate([p[1] for p in pieces])):
        lo_b, hi_b = max(r1 - a2, 0.0), min(r1 + a2, rmax)
        parts = []
        if lo_b > 0:
            parts.append(nodes(0.0, lo_b))
        if hi_b < rmax:
            parts.append(nodes(hi_b, rmax))
        if lo_b == r1 - a2 and hi_b == r1 + a2:
            parts.append((r1 + a2 * np.sin(0.5 * np.pi * x), w * a2 * 0.5 * np.pi * np.cos(0.5 * np.pi * x)))
        else:  # band clipped by 0 or 1 - a: only one square-root end, plain Gauss suffices here
            parts.append(nodes(lo_b, hi_b))
        r2 = np.concatenate([p[0] for p in parts])[:, None]
        w2 = np.concatenate([p[1] for p in parts])[:, None]
        phi_min = np.arccos(np.clip((r1 * r1 + r2 * r2 - a2 * a2) / (2 * r1 * r2), -1, 1))
        phi = phi_min + (np.pi - phi_min) * 0.5 * (xp + 1)
        cphi = np.cos(phi)
        e = (np.log(1 - r1 * r1) + np.log(1 - r2 * r2)
             - np.log((1 - 2 * r1 * r2 * cphi + (r1 * r2) ** 2) / (r1 * r1 + r2 * r2 - 2 * r1 * r2 * cphi)))
        wt = np.exp(-beta * e) * 0.5 * (np.pi - phi_min) * wp * w2 * r2 * w1 * r1
        z += wt.sum()
        m += (wt * e).sum()
    return m / z


def test_pair_energy_against_quadrature(rng):
    # Detailed-balance sanity: the sampler's <E> for a +- pair at two betas, one on each side,
    # against a direct numerical integral over the 4D configuration space (reduced to 3D by
    # rotation symmetry); quadrature error < 1e-5, far below the Monte Carlo error.
    core = 0.05
    betas = [0.6, 0.0, -1.5]
    res = run_tempering(Disk(), 1, 1, betas, 60000, core, rng)
    for k in (0, 2):
        ref = _pair_reference_gauss(betas[k], core)
        assert abs(_pair_reference_gauss(betas[k], core, n=80, n_phi=96) - ref) < 1e-5
        mean, se = _mean_and_se(res.energies[k])
        assert abs(mean - ref) < 4 * se, (betas[k], mean, ref, se)
    assert np.all(res.swap_acceptance > 0.1)


@pytest.mark.slow
@pytest.mark.parametrize("beta", [0.6, -1.5])
def test_pair_quadrature_rules_agree(beta):
    # The fast split Gauss rule against nested adaptive scipy quadrature (epsrel 1e-8).
    assert _pair_reference_gauss(beta, 0.05) == pytest.approx(_pair_reference(beta, 0.05), abs=1e-5)


def test_reproducible_and_validated(rng):
    a = run_tempering(Box(1.5), 2, 1, [0.5, -0.5], 300, 0.01, np.random.default_rng(5), thin=3)
    b = run_tempering(Box(1.5), 2, 1, [0.5, -0.5], 300, 0.01, np.random.default_rng(5), thin=3)
    np.testing.assert_array_equal(a.energies, b.energies)
    assert a.energies.shape == (2, 100) and a.positions.shape == (2, 100, 3, 2)
    assert Box(1.5).contains(a.positions.reshape(-1, 2), margin=0.01).all()
    with pytest.raises(SamplerError, match="strictly"):
        run_tempering(Disk(), 1, 1, [0.0, 0.5, 0.2], 10, 0.01, rng)
    with pytest.raises(SamplerError, match="core_radius"):
        run_tempering(Disk(), 1, 1, [0.0], 10, 0.0, rng)
    with pytest.raises(SamplerError, match="n_minus"):
        run_tempering(Disk(), 1, -1, [0.0], 10, 0.01, rng)
    with pytest.raises(SamplerError, match="too much"):
        run_tempering(Disk(), 30, 30, [0.0], 10, 0.2, rng)


def test_default_ladder():
    # negative end just beyond the like-sign collapse: -4/N neutral, -2/N single species
    # [exact power counting, reference-values.md]
    b = default_ladder(20, 20, 0.01, Disk(), n_temps=24)
    assert b.shape == (24,) and np.all(np.diff(b) < 0) and 0.0 in b
    assert -4 / 40 * 1.3 < b[-1] < -4 / 40
    s = default_ladder(10, 0, 0.01, Disk(), n_temps=12)
    assert -2 / 10 * 1.3 < s[-1] < -2 / 10
    # top at the pair-collapse bound beta~ = 1 (a +- pair weighs r^(1 - 2 beta) dr, integrable
    # only for beta~ < 1) [exact, reference-values.md]: beyond it only the core holds the gas
    # up, so the default ladder stops there (it ran to 2 before; changed deliberately)
    assert b[0] == 1.0 and s[0] == 1.0


def test_adaptive_ladder_keeps_the_ends_and_crowds_where_energy_is_narrow():
    # Same ends as default_ladder: +1 (pair collapse) and 1.15 x (-4/N) for a neutral gas
    # [exact power counting, reference-values.md]; in between the rungs follow the pilot's
    # sigma_E, so the positive side (bound pairs, narrow E) gets more rungs than the default.
    b = adaptive_ladder(4, 4, 0.01, Disk(), np.random.default_rng(4), n_temps=12, pilot_sweeps=300)
    d = default_ladder(4, 4, 0.01, Disk(), n_temps=12)
    assert b.shape == (12,) and np.all(np.diff(b) < 0)
    assert b[0] == d[0] == 1.0 and b[-1] == d[-1] == pytest.approx(-1.15 * 4 / 8) and 0.0 in b
    assert np.sum(b > 0) > np.sum(d > 0)
    with pytest.raises(SamplerError, match="pilot_sweeps"):
        adaptive_ladder(4, 4, 0.01, Disk(), np.random.default_rng(4), pilot_sweeps=10)


def test_position_stride_keeps_the_matching_configurations(rng):
    # the stored configurations are those of recorded samples 0, m, 2m, ...: their energies
    # recomputed from scratch must equal the recorded ones [exact]
    res = run_tempering(Disk(), 3, 2, [0.5, -0.3], 700, 0.01, rng, thin=2, position_stride=50)
    assert res.energies.shape == (2, 350) and res.positions.shape == (2, 7, 5, 2)
    for k in range(2):
        np.testing.assert_allclose(energy_batch(res.positions[k], res.signs, Disk()),
                                   res.energies[k, ::50], rtol=1e-9, atol=1e-9)
    with pytest.raises(SamplerError, match="position_stride"):
        run_tempering(Disk(), 1, 1, [0.0], 10, 0.01, rng, position_stride=0)


@pytest.mark.slow
@pytest.mark.parametrize("domain,n_plus,n_minus", [(Disk(), 5, 5), (Disk(), 4, 1), (Box(2.0), 3, 3)],
                         ids=["disk-neutral", "disk-charged", "box-neutral"])
def test_beta_zero_energy_matches_uniform_average(domain, n_plus, n_minus, rng):
    # At beta = 0 the sampler must reproduce the uniform ensemble of the cores' free space.
    # Disk: uniform in |u| < rho = 1 - a, so x = 1 - |u|^2 is uniform on [eps, 1], eps = 1 - rho^2,
    # <ln x> = (-1 - eps ln eps + eps)/(1 - eps); <ln|u1 - u2|> = ln rho - 1/4 and
    # <ln|1 - u1 conj u2|> = 0 (harmonic in u1, mean = value at the centre), hence
    # <E> = N <ln x> + (Q^2 - N)/2 (1/2 - 2 ln rho) [exact; reduces to -N + (Q^2 - N)/4 of
    # reference-values.md as a -> 0]. The excluded pair overlaps (fraction ~ N^2 a^2 ~ 1e-4)
    # are neglected. Box: average over independent uniform samples with the same cores.
    # Within a tempering run, so swaps with beta != 0 are exercised.
    n = n_plus + n_minus
    core = 1e-3
    res = run_tempering(domain, n_plus, n_minus, [0.3, 0.0, -0.1], 40000, core, rng, thin=2)
    mean, se = _mean_and_se(res.energies[1])
    if isinstance(domain, Disk):
        q = n_plus - n_minus
        rho = 1 - core
        eps = 1 - rho**2
        ref = n * (-1 - eps * np.log(eps) + eps) / (1 - eps) + (q * q - n) / 2 * (0.5 - 2 * np.log(rho))
        ref_se = 0.0
    else:
        conf = domain.sample_uniform(rng, 100000 * n, margin=core).reshape(100000, n, 2)
        d2 = ((conf[:, :, None, :] - conf[:, None, :, :]) ** 2).sum(-1) + np.eye(n) * 9
        conf = conf[d2.min(axis=(1, 2)) >= (2 * core) ** 2]
        uni = energy_batch(conf, res.signs, domain)
        ref, ref_se = uni.mean(), uni.std() / np.sqrt(len(uni))
    assert abs(mean - ref) < 4 * np.hypot(se, ref_se)


@pytest.mark.slow
def test_tempering_agrees_with_plain_metropolis(rng):
    # Swaps must not bias the ensemble: <E> at beta = -0.3 for 3+3 vortices from a tempered
    # ladder and from an isolated chain (K = 1) agree within their errors [exact: both sample
    # the same canonical distribution].
    pt = run_tempering(Disk(), 3, 3, [0.4, 0.0, -0.3, -0.6], 40000, 0.02, rng)
    single = run_tempering(Disk(), 3, 3, [-0.3], 80000, 0.02, rng)
    m1, s1 = _mean_and_se(pt.energies[2])
    m2, s2 = _mean_and_se(single.energies[0])
    assert abs(m1 - m2) < 4 * np.hypot(s1, s2)


def test_read_only_ladder_and_start_are_accepted(rng):
    # a read-only ladder and starting configuration run the same chain as writeable copies
    betas = np.array([0.4, -0.2])
    start = Disk().sample_uniform(rng, 3, margin=0.05)
    ref = run_tempering(Disk(), 2, 1, betas, 50, 0.01, np.random.default_rng(3), initial=start)
    betas.flags.writeable = False
    start.flags.writeable = False
    got = run_tempering(Disk(), 2, 1, betas, 50, 0.01, np.random.default_rng(3), initial=start)
    np.testing.assert_array_equal(got.energies, ref.energies)


def _small_grid(uniform: bool, cache_dir):
    """A 40-node disk of uniform density or a Thomas-Fermi profile nu = 1 - r^2 cut at 0.05."""
    from thermo.domains.grid import GridDomain
    h = 2.2 / 40
    x = (np.arange(40) - 19.5) * h
    nu = 1.0 - x[None, :] ** 2 - x[:, None] ** 2
    mask = nu > (0.0 if uniform else 0.05)
    density = np.ones(mask.shape) if uniform else np.where(mask, nu, 0.0)
    return GridDomain(mask, density, h, (x[0], x[0]), stride=4, cache_dir=cache_dir,
                      log_length_over_core=np.log(30.0))


@pytest.mark.parametrize("kind", ["disk", "box", "annulus", "grid-uniform", "grid-harmonic"])
def test_tracked_energies_are_those_of_the_configurations(kind, rng, tmp_path):
    # the sampler adds up the move kernels' changes, which read the old position's pair terms
    # from a ledger kept beside each configuration (and exchanged with it): over 40 sweeps, so
    # before the first exact recomputation (every 64), and with exchanges between three
    # states, every recorded energy must be the energy of its configuration recomputed from
    # scratch [exact, up to round-off]
    from thermo.domains.annulus import Annulus
    domain = {"disk": lambda: Disk(), "box": lambda: Box(1.5),
              "annulus": lambda: Annulus(0.3, hole_winding=1),
              "grid-uniform": lambda: _small_grid(True, tmp_path),
              "grid-harmonic": lambda: _small_grid(False, tmp_path)}[kind]()
    res = run_tempering(domain, 4, 3, [0.4, 0.0, -0.4], 40, 0.02, rng, burn_in=0, thin=1)
    assert res.swap_acceptance.max() > 0.0 and res.acceptance.min() > 0.1
    for k in range(3):
        np.testing.assert_allclose(energy_batch(res.positions[k], res.signs, domain),
                                   res.energies[k], rtol=0, atol=1e-8)
