"""Tests of thermo.energy: Kirchhoff-Routh energy, batched evaluation, move differences."""

import numpy as np
import pytest
from scipy import integrate

from thermo.domains.box import Box
from thermo.domains.disk import Disk
from thermo.energy import energy, energy_batch, energy_change, validate_configuration
from thermo.errors import ConfigurationError


def disk_energy_numpy(pos, signs):
    """Straightforward numpy rendering of the disk formula [pub: Lin, PNAS 27, 570 (1941);
    form and normalization as in reference-values.md]."""
    u = pos[:, 0] + 1j * pos[:, 1]
    e = np.log(1 - abs(u) ** 2).sum()
    iu, ju = np.triu_indices(len(u), 1)
    e += (signs[iu] * signs[ju] * np.log(abs(1 - u[iu] * np.conj(u[ju])) ** 2
                                         / abs(u[iu] - u[ju]) ** 2)).sum()
    return e


def box_energy_images(box, pos, signs):
    """Energy from the row-summed image lattice (independent of the theta functions)."""
    e = (2 * np.pi * box.robin_images(pos)).sum()
    iu, ju = np.triu_indices(len(pos), 1)
    e += (signs[iu] * signs[ju] * 4 * np.pi * box.green_images(pos[iu], pos[ju])).sum()
    return e


def test_disk_energy_matches_numpy_formula(rng):
    d = Disk()
    signs = np.array([1, 1, -1, 1, -1, -1, -1, 1, 1])
    pos = d.sample_uniform(rng, 9)
    assert energy(pos, signs, d) == pytest.approx(disk_energy_numpy(pos, signs), rel=1e-12)
    batch = np.stack([d.sample_uniform(rng, 9) for _ in range(30)])
    ref = np.array([disk_energy_numpy(p, signs) for p in batch])
    np.testing.assert_allclose(energy_batch(batch, signs, d), ref, rtol=1e-12)
    # per-sample signs
    sgn = rng.choice([-1, 1], size=(30, 9))
    ref = np.array([disk_energy_numpy(p, s) for p, s in zip(batch, sgn)])
    np.testing.assert_allclose(energy_batch(batch, sgn, d), ref, rtol=1e-12)


def test_disk_energy_matches_explicit_image_vortices(rng):
    # Brute force with explicit images: the stream function of vortex j at u_i is
    # -(1/2pi)[ln|u_i - u_j| - ln|u_i - u_j*| - ln|u_j|], u_j* = u_j/|u_j|^2; the self energy is
    # the image's stream function at the vortex itself [pub: Saffman (1992) ch. 7].
    d = Disk()
    pos = d.sample_uniform(rng, 7)
    signs = np.array([1, -1, 1, -1, 1, -1, 1])
    u = pos[:, 0] + 1j * pos[:, 1]
    star = u / abs(u) ** 2
    e = 0.0
    for i in range(7):
        e += np.log(abs(u[i]) * abs(u[i] - star[i]))          # 2 pi h(u_i, u_i)
        for j in range(i + 1, 7):
            g = -(np.log(abs(u[i] - u[j])) - np.log(abs(u[i] - star[j])) - np.log(abs(u[j])))
            e += signs[i] * signs[j] * 2 * g                    # 4 pi G
    assert energy(pos, signs, d) == pytest.approx(e, rel=1e-11)


@pytest.mark.parametrize("aspect", [0.5, 1.0, 2.0])
def test_box_energy_matches_image_lattice(aspect, rng):
    b = Box(aspect)
    pos = b.sample_uniform(rng, 8)
    signs = np.array([1, -1, 1, -1, 1, 1, -1, -1])
    assert energy(pos, signs, b) == pytest.approx(box_energy_images(b, pos, signs), rel=1e-10)


@pytest.mark.parametrize("domain", [Disk(), Box(1.0)], ids=["disk", "box"])
def test_close_pair_limit(domain):
    # A pair at distance d has 4 pi G = -2 ln d + 4 pi h = -2 ln d + 2 ln r_c + O(d) [exact:
    # G = -(1/2pi) ln|z - z0| + h with h smooth, 2 pi h(z, z) = ln r_c]. With the two self
    # energies ln r_c: a +- pair has E = 2 ln d (the wall drops out), a ++ pair 4 ln r_c - 2 ln d.
    d = 1e-4
    pos = np.array([[0.05, 0.0], [0.05 + d, 0.0]])
    r_c = float(domain.conformal_radius([0.05 + d / 2, 0.0]))
    assert energy(pos, [1, -1], domain) == pytest.approx(2 * np.log(d), abs=1e-3)
    assert energy(pos, [1, 1], domain) == pytest.approx(4 * np.log(r_c) - 2 * np.log(d), abs=1e-3)


def test_mean_log_wall_term_by_quadrature():
    # <ln(1 - |u|^2)> = int_0^1 ln(1 - r^2) 2 r dr = -1 [exact; reference-values.md], with scipy.
    val, err = integrate.quad(lambda r: np.log(1 - r * r) * 2 * r, 0, 1)
    assert val == pytest.approx(-1.0, abs=1e-8)
    # and the compiled energy of one vortex, averaged over a fine radial Gauss-Legendre rule
    x, w = np.polynomial.legendre.leggauss(200)
    r = 0.5 * (x + 1) * 0.999999
    e = np.array([energy([[ri, 0.0]], [1], Disk()) for ri in r])
    assert np.sum(0.5 * w * e * 2 * r) * 0.999999 == pytest.approx(-1.0, abs=2e-3)


@pytest.mark.parametrize("n_plus,n_minus", [(3, 3), (4, 1), (3, 0)])
def test_beta_zero_mean_energy(n_plus, n_minus, rng):
    # beta = 0 (uniform positions): <ln(1-|u|^2)> = -1, <ln|u1-u2|> = -1/4,
    # <ln|1 - u1 conj u2|> = 0, so <E> = -N + (Q^2 - N)/4 [exact; reference-values.md].
    # Tolerance: 4 standard errors of the sample mean.
    n = n_plus + n_minus
    q = n_plus - n_minus
    signs = np.array([1] * n_plus + [-1] * n_minus)
    d = Disk()
    samples = d.sample_uniform(rng, 40000 * n).reshape(40000, n, 2)
    e = energy_batch(samples, signs, d)
    expected = -n + (q * q - n) / 4
    se = e.std(ddof=1) / np.sqrt(len(e))
    assert abs(e.mean() - expected) < 4 * se


def test_energy_change_matches_difference(rng):
    for dom in (Disk(), Box(1.8)):
        pos = dom.sample_uniform(rng, 10)
        signs = np.array([1, -1] * 5)
        new = dom.sample_uniform(rng, 1)[0]
        moved = pos.copy()
        moved[3] = new
        ref = energy(moved, signs, dom) - energy(pos, signs, dom)
        assert energy_change(pos, signs, dom, 3, new) == pytest.approx(ref, rel=1e-10, abs=1e-12)


def test_validation_messages():
    d = Disk()
    good = np.array([[0.1, 0.2], [-0.3, 0.1], [0.0, -0.5]])
    with pytest.raises(ConfigurationError, match="index \\(1,\\).*non-finite"):
        energy(np.array([[0.1, 0.2], [np.nan, 0.0], [0.0, 0.1]]), [1, 1, 1], d)
    with pytest.raises(ConfigurationError, match="index \\(2,\\).*not inside"):
        energy(np.array([[0.1, 0.2], [0.0, 0.0], [0.0, 1.2]]), [1, 1, 1], d)
    with pytest.raises(ConfigurationError, match="only \\+1 and -1"):
        energy(good, [1, 2, -1], d)
    with pytest.raises(ConfigurationError, match="signs must have shape"):
        energy(good, [1, -1], d)
    with pytest.raises(ConfigurationError, match="shape \\(N, 2\\)"):
        energy(good.ravel(), [1, -1, 1], d)
    with pytest.raises(ConfigurationError, match="vortices 0 and 1 coincide"):
        energy(np.array([[0.1, 0.2], [0.1, 0.2]]), [1, -1], d)
    with pytest.raises(ConfigurationError, match="sample 1: .*coincide"):
        energy_batch(np.array([good[:2], [[0.3, 0.3], [0.3, 0.3]]]), [1, -1], d)
    with pytest.raises(ConfigurationError, match="closer than twice the core"):
        validate_configuration(np.array([[0.1, 0.2], [0.1, 0.25]]), [1, -1], d, core_radius=0.05)
    with pytest.raises(ConfigurationError, match="core radius 0.1 from the wall"):
        validate_configuration(np.array([[0.95, 0.0]]), [1], d, core_radius=0.1)
    with pytest.raises(ConfigurationError, match="out of range"):
        energy_change(good, [1, 1, 1], d, 5, [0.0, 0.0])


def test_read_only_and_strided_inputs_are_accepted(rng):
    # Read-only arrays (broadcast views, arrays from files) and non-contiguous ones give the
    # same energies as fresh writeable ones [exact: same numbers, only the memory differs].
    for dom in (Disk(), Box(1.3)):
        pos = dom.sample_uniform(rng, 6, margin=0.01)
        signs = np.array([1, -1, 1, -1, 1, 1])
        ref = energy(pos, signs, dom)
        frozen_pos, frozen_signs = pos.copy(), signs.copy()
        frozen_pos.flags.writeable = False
        frozen_signs.flags.writeable = False
        assert energy(frozen_pos, frozen_signs, dom) == ref
        # one sample with shared signs: the broadcast signs are a read-only view
        assert energy_batch(frozen_pos[None], frozen_signs, dom)[0] == ref
        fortran = np.asfortranarray(np.stack([pos, pos]))
        assert np.all(energy_batch(fortran, np.stack([signs, signs], axis=1).T, dom) == ref)
        assert energy_change(frozen_pos, frozen_signs, dom, 2, frozen_pos[2]) == 0.0
        g = dom.green(frozen_pos[:3], np.broadcast_to(frozen_pos[3], (3, 2)))
        np.testing.assert_array_equal(g, dom.green(pos[:3], pos[3]))
