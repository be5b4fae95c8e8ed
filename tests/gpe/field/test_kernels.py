"""Compiled kernels against closed forms, numpy and scipy's ODE integrator."""

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from gpe.field import kernels


def _rows(n_beams, nx, ny, rng):
    amp = rng.uniform(0.5, 3.0, n_beams)
    cx, cy = rng.uniform(-2, 2, n_beams), rng.uniform(-2, 2, n_beams)
    waists = rng.uniform(0.8, 2.0, n_beams)
    x, y = np.linspace(-5, 5, nx), np.linspace(-4, 4, ny)
    gx, gy = np.zeros((n_beams, nx)), np.zeros((n_beams, ny))
    kernels.beam_profiles(x, cx, waists, gx)
    kernels.beam_profiles(y, cy, waists, gy)
    return amp, cx, cy, waists, x, y, gx, gy


def test_beam_rows_rebuild_the_sum_of_gaussian_beams(rng):
    # [exact] exp(-2 r^2/w^2) = exp(-2 dx^2/w^2) exp(-2 dy^2/w^2): separable Gaussian beams.
    amp, cx, cy, waists, x, y, gx, gy = _rows(3, 20, 12, rng)
    X, Y = np.meshgrid(x, y)
    expected = sum(a * np.exp(-2 * ((X - x0) ** 2 + (Y - y0) ** 2) / w**2)
                   for a, x0, y0, w in zip(amp, cx, cy, waists))
    psi = np.ones((12, 20), np.complex128)
    v_static = np.zeros((12, 20))
    _, _, s_beam, _ = kernels.density_sums(psi, v_static, amp, gx, gy)
    assert s_beam == pytest.approx(expected.sum(), rel=1e-12)


def _reference_nonlinear(psi0, w, g, gamma, tau):
    """scipy.integrate.solve_ivp of i psi_t = (1 - i gamma)(w + g |psi|^2) psi, one point."""
    def rhs(_, y):
        p = y[0] + 1j * y[1]
        d = -1j * (1 - 1j * gamma) * (w + g * abs(p) ** 2) * p
        return [d.real, d.imag]
    sol = solve_ivp(rhs, (0, tau), [psi0.real, psi0.imag], rtol=1e-12, atol=1e-14,
                    method="DOP853")
    return sol.y[0, -1] + 1j * sol.y[1, -1]


@pytest.mark.parametrize("gamma", [0.0, 1e-3, 0.05])
def test_nonlinear_substep_is_the_exact_local_solution(gamma, rng):
    # Reference: scipy's DOP853 integrator of the local ODE (no splitting involved).
    ny, nx = 2, 3
    psi = (rng.uniform(0.2, 1.5, (ny, nx)) * np.exp(1j * rng.uniform(0, 6, (ny, nx))))
    v_static = np.array([[0.0, 1.0, -0.5], [25.0, 0.3, 1.0]])  # includes W = V - mu = 0
    amp, _, _, _, _, _, gx, gy = _rows(1, nx, ny, rng)
    mu, g, tau = 1.0, 1.3, 0.4
    v_beam = amp[0] * gy[0][:, None] * gx[0][None, :]
    expected = np.array([[_reference_nonlinear(psi[j, i], v_static[j, i] + v_beam[j, i] - mu,
                                               g, gamma, tau) for i in range(nx)]
                         for j in range(ny)])
    work = psi.copy()
    if gamma == 0.0:
        total = kernels.nonlinear_conservative(work, v_static, amp, gx, gy, g, mu, tau)
    else:
        total = kernels.nonlinear_damped(work, v_static, amp, gx, gy, g, mu, gamma, tau)
    np.testing.assert_allclose(work, expected, rtol=1e-9, atol=1e-12)
    assert total == pytest.approx(np.sum(np.abs(psi) ** 2), rel=1e-13)


def test_damped_step_tends_to_the_conservative_one_and_handles_w_zero(rng):
    psi = rng.uniform(0.5, 1.0, (4, 4)) + 0j
    v_static = np.full((4, 4), 1.0)  # W = V - mu = 0 exactly: the z == 0 branch
    v_static[0, 0] = 3.0
    amp, gx, gy = np.zeros(0), np.zeros((0, 4)), np.zeros((0, 4))
    a, b = psi.copy(), psi.copy()
    kernels.nonlinear_damped(a, v_static, amp, gx, gy, 1.0, 1.0, 1e-12, 0.1)
    kernels.nonlinear_conservative(b, v_static, amp, gx, gy, 1.0, 1.0, 0.1)
    np.testing.assert_allclose(a, b, rtol=1e-10)


def test_imaginary_substep_and_normalisation_sum(rng):
    psi = rng.standard_normal((3, 5)) + 1j * rng.standard_normal((3, 5))
    v = rng.uniform(0, 2, (3, 5))
    v[0, 0] = 0.5                                   # W = V - mu = 0: the series branch
    amp, gx, gy = np.zeros(0), np.zeros((0, 5)), np.zeros((0, 3))
    work = psi.copy()
    total = kernels.nonlinear_imaginary(work, 0.7, v, amp, gx, gy, 2.0, 0.5, 0.1)
    # Independent reference: scipy's RK45 on the local ODE psi' = -(V + g|psi|^2 - mu) psi,
    # integrated to a tight tolerance, point by point.
    p = (0.7 * psi).ravel()

    def rhs(_, y):
        z = y[: p.size] + 1j * y[p.size:]
        dz = -(v.ravel() + 2.0 * np.abs(z) ** 2 - 0.5) * z
        return np.concatenate([dz.real, dz.imag])

    sol = solve_ivp(rhs, (0.0, 0.1), np.concatenate([p.real, p.imag]), rtol=1e-12, atol=1e-14)
    expected = (sol.y[: p.size, -1] + 1j * sol.y[p.size:, -1]).reshape(psi.shape)
    np.testing.assert_allclose(work, expected, rtol=1e-9)
    # the phase is untouched [exact: the sub-flow has a real rate]
    np.testing.assert_allclose(np.angle(work), np.angle(psi), atol=1e-12)
    assert total == pytest.approx(np.sum(np.abs(expected) ** 2), rel=1e-9)


def test_k_space_helpers(rng):
    psi_k = rng.standard_normal((4, 6)) + 1j * rng.standard_normal((4, 6))
    full, half = rng.uniform(0, 1, (4, 6)) + 0j, rng.uniform(0, 1, (4, 6))
    work = psi_k.copy()
    s = kernels.multiply_and_norm(work, full, half)
    assert s == pytest.approx(np.sum(np.abs(half * psi_k) ** 2), rel=1e-13)
    np.testing.assert_allclose(work, psi_k * full, rtol=1e-15)
    k2 = rng.uniform(0, 5, (4, 6))
    assert kernels.kinetic_sum(psi_k, k2) == pytest.approx(np.sum(k2 * np.abs(psi_k) ** 2))
    phase = np.exp(1j * rng.uniform(0, 6, (4, 6)))
    phase[1, 2] = 0.0                               # a point left alone (inside a core)
    work = psi_k.copy()
    kernels.pin_phase(work, phase)
    expected = np.where(phase != 0, np.abs(psi_k) * phase, psi_k)
    np.testing.assert_allclose(work, expected, rtol=1e-14)
    work = psi_k.copy()
    kernels.scale_inplace(work, 2.5)
    np.testing.assert_allclose(work, 2.5 * psi_k, rtol=1e-15)


def test_complex64_fields_are_updated_in_place(rng):
    psi = (rng.standard_normal((4, 4)) + 1j).astype(np.complex64)
    v = np.zeros((4, 4))
    amp, gx, gy = np.zeros(0), np.zeros((0, 4)), np.zeros((0, 4))
    ref = psi.astype(np.complex128)
    kernels.nonlinear_damped(psi, v, amp, gx, gy, 1.0, 1.0, 0.01, 0.05)
    kernels.nonlinear_damped(ref, v, amp, gx, gy, 1.0, 1.0, 0.01, 0.05)
    assert psi.dtype == np.complex64
    np.testing.assert_allclose(psi, ref, rtol=1e-6)


def test_kernel_threads_restores_the_setting():
    import numba
    before = numba.get_num_threads()
    with kernels.kernel_threads(1):
        assert numba.get_num_threads() == 1
    assert numba.get_num_threads() == before


@pytest.mark.parametrize("x", [0.0, 1e-9, -3e-4, 0.0099, -0.0101, 0.3, -0.499, 0.501, 2.0, -7.5])
def test_series_helpers_match_the_library_functions(x):
    # Reference: math.expm1, math.log1p, math.cos, math.sin (correctly rounded to ~1 ulp).
    import math
    if x != 0.0:
        ratio, decay = kernels.exp_ratio(x)
        assert ratio == pytest.approx(-math.expm1(-x) / x, rel=2e-16)
        assert decay == pytest.approx(math.exp(-x), rel=2e-16)
        if x > -1:
            assert kernels.log1p_ratio(x) == pytest.approx(math.log1p(x) / x, rel=2e-16)
    c, s = kernels.cis(x)
    assert c == pytest.approx(math.cos(x), rel=2e-16, abs=1e-300)
    assert s == pytest.approx(math.sin(x), rel=2e-16, abs=1e-300)


@pytest.mark.parametrize("preset", [None, "ACTIVE"])
def test_openmp_wait_policy_defaults_to_passive_but_keeps_a_user_setting(preset):
    # Checked in a fresh interpreter: the runtime reads the variable once, when it loads.
    import os
    import subprocess
    import sys
    env = {k: v for k, v in os.environ.items() if k != "OMP_WAIT_POLICY"}
    if preset:
        env["OMP_WAIT_POLICY"] = preset
    code = "import os, gpe.field.kernels; print(os.environ['OMP_WAIT_POLICY'])"
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True,
                         check=True, cwd=str(Path(__file__).resolve().parents[3]))
    assert out.stdout.strip() == (preset or "PASSIVE")


def test_boxed_damped_step_matches_the_full_closed_form(rng):
    # Reference: nonlinear_damped (checked against scipy's DOP853 above) evaluated everywhere.
    ny, nx = 24, 40
    x, y = np.linspace(-10, 10, nx), np.linspace(-6, 6, ny)
    amp = np.array([2.0, 0.0, 1.5])  # a beam switched off reaches nothing
    cx, cy, waists = np.array([-5.0, 0.0, 6.0]), np.array([-3.0, 0.0, 2.0]), np.full(3, 0.7)
    gx, gy = np.zeros((3, nx)), np.zeros((3, ny))
    kernels.beam_profiles(x, cx, waists, gx)
    kernels.beam_profiles(y, cy, waists, gy)
    row_lo, row_hi = np.zeros(ny, np.int64), np.zeros(ny, np.int64)
    kernels.beam_box(amp, gx, gy, row_lo, row_hi)
    v_beam = np.einsum("b,bj,bi->ji", amp, gy, gx)
    inside = np.zeros((ny, nx), bool)
    for j in range(ny):
        inside[j, row_lo[j]:row_hi[j]] = True
    assert 0 < inside.sum() < inside.size / 2  # the box is a small part of this grid
    assert np.all(v_beam[~inside] <= kernels.BEAM_CUTOFF * amp.max())
    assert np.all(v_beam[inside] > 0)
    v_static = rng.uniform(0.0, 2.0, (ny, nx))
    v_static[5] = 60.0  # phase beyond the series range on one row: the general branch
    psi = rng.uniform(0.3, 1.4, (ny, nx)) * np.exp(1j * rng.uniform(0, 6, (ny, nx)))
    g, mu, gamma, tau = 1.2, 1.0, 0.02, 0.05
    factors = np.empty((3, ny, nx))
    kernels.damped_static_factors(v_static, g, mu, gamma, tau, factors)
    a, b = psi.copy(), psi.copy()
    s_a = kernels.nonlinear_damped_boxed(a, factors, v_static, amp, gx, gy, row_lo, row_hi,
                                         g, mu, gamma, tau)
    s_b = kernels.nonlinear_damped(b, v_static, amp, gx, gy, g, mu, gamma, tau)
    np.testing.assert_allclose(a, b, rtol=1e-14, atol=0)
    assert s_a == pytest.approx(s_b, rel=1e-14)
