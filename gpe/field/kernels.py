"""Compiled hot loops of the split-step solver (numba).

All kernels work in place on preallocated ``(ny, nx)`` arrays and allocate nothing.  The beam
potential is never stored as a 2D array: it is rebuilt inside the nonlinear kernel from separable
1D factors, ``V_beam[j, i] = sum_b amp[b] * gx[b, i] * gy[b, j]`` with
``gx[b, i] = exp(-2 (x_i - cx_b)^2 / w_b^2)`` (the rows ``gx``, ``gy`` are filled per step by
:func:`beam_profiles`, which costs ``n_beams * (nx + ny)`` exponentials).  In the real-time
damped step (:func:`nonlinear_damped_boxed`) the beams are evaluated only inside the per-row
column range they reach (:func:`beam_box`); elsewhere the sub-step's static factors are
precomputed once (:func:`damped_static_factors`), so most of the grid costs a few dozen
vectorised multiply-adds per point and no exponentials.

fastmath is chosen deliberately: ``contract`` (fused multiply-add), ``arcp`` (reciprocals),
``nsz`` and ``afn`` (approximate library functions) are allowed, but **not** ``nnan``/``ninf``,
because the solver relies on NaN propagating into the returned sums to detect a blown-up field,
and not ``reassoc``, so that reductions and results do not depend on the vectoriser.
``error_model="numpy"`` lets a division by zero give inf/NaN (caught by the solver's checks)
instead of a Python exception; the exception check would stop the loops from vectorising.
Element-wise updates are independent of the thread partition, so results are bitwise
reproducible for a given build.

Units: simulation units throughout (energies in mu, times in hbar/mu, lengths in xi).
"""

from __future__ import annotations

import math
import os
from contextlib import contextmanager

# Deliberate choice, made before numba's OpenMP runtime can load (it reads the variable once):
# GNU OpenMP workers spin-wait after each parallel region by default.  A split step alternates
# numba kernels with FFTW transforms, whose threads come from a *second* OpenMP runtime (pyFFTW
# bundles its own libgomp), so each side's spinning workers steal the cores from the other side
# for the next region -- measured at 512^2 on 2 cores: 16-19 ms per step spinning, ~7.5 ms
# passive.  setdefault keeps a user's own setting; gpe/field/fft.py does the same for pyFFTW's runtime.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

import numba  # noqa: E402
import numpy as np  # noqa: E402
from numba import njit, prange  # noqa: E402

_FASTMATH = {"contract", "arcp", "nsz", "afn"}


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH)
def beam_profiles(coord, centres, waists, out):
    """Fill ``out[b, i] = exp(-2 (coord[i] - centres[b])^2 / waists[b]^2)``.

    Units: coord, centres, waists in xi; out dimensionless.
    """
    for b in range(centres.shape[0]):
        inv_w2 = 2.0 / (waists[b] * waists[b])
        for i in range(coord.shape[0]):
            d = coord[i] - centres[b]
            out[b, i] = math.exp(-inv_w2 * d * d)


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _beam_potential(amp, gx, gy, j, i):
    v = 0.0
    for b in range(amp.shape[0]):
        v += amp[b] * gx[b, i] * gy[b, j]
    return v


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _local_potential(v_static, amp, gx, gy, j, i, shift):
    return v_static[j, i] - shift + _beam_potential(amp, gx, gy, j, i)


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def exp_ratio(z):
    """Return ``((1 - exp(-z))/z, exp(-z))``; a Taylor series for |z| < 0.01.

    The series (truncation < 1e-19 relative) is exact where ``1 - exp(-z)`` would cancel, and
    cheaper than a library call.  Units: none.
    """
    if abs(z) < 0.01:
        ratio = 1.0 + z * (-1 / 2 + z * (1 / 6 + z * (-1 / 24 + z * (1 / 120 + z * (
            -1 / 720 + z * (1 / 5040 + z * (-1 / 40320)))))))
        return ratio, 1.0 - z * ratio
    decay = math.exp(-z)
    return (1.0 - decay) / z, decay


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def log1p_ratio(q):
    """Return ``log(1 + q)/q``; a Taylor series for |q| < 0.01 (truncation < 1e-19). Units: none."""
    if abs(q) < 0.01:
        return _log1p_ratio_series(q)
    return math.log1p(q) / q


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _log1p_ratio_series(q):
    return 1.0 + q * (-1 / 2 + q * (1 / 3 + q * (-1 / 4 + q * (1 / 5 + q * (
        -1 / 6 + q * (1 / 7 + q * (-1 / 8 + q * (1 / 9))))))))


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def cis(x):
    """Return ``(cos x, sin x)``; Taylor polynomials for |x| < 0.5 (truncation < 1e-17).

    Phases per step are small where the condensate is, so the cheap branch is the usual one.
    Units: x in rad.
    """
    if abs(x) < 0.5:
        return _cis_series(x)
    return math.cos(x), math.sin(x)


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _cis_series(x):
    x2 = x * x
    c = 1.0 + x2 * (-1 / 2 + x2 * (1 / 24 + x2 * (-1 / 720 + x2 * (1 / 40320 + x2 * (
        -1 / 3628800 + x2 * (1 / 479001600 + x2 * (-1 / 87178291200)))))))
    s = x * (1.0 + x2 * (-1 / 6 + x2 * (1 / 120 + x2 * (-1 / 5040 + x2 * (1 / 362880 + x2 * (
        -1 / 39916800 + x2 * (1 / 6227020800 + x2 * (-1 / 1307674368000))))))))
    return c, s


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def nonlinear_conservative(psi, v_static, amp, gx, gy, g, mu, tau):
    r"""Exact potential+nonlinear sub-step without damping, in place.

    .. math:: \psi \leftarrow \psi \exp[-i (V + g|\psi|^2 - \mu)\tau]

    exact because ``|psi|`` is constant along this sub-flow.  Returns ``sum |psi|^2`` of the
    input (NaN/inf if the field is not finite).  Units: V, mu in mu; tau in hbar/mu.
    """
    ny, nx = psi.shape
    total = 0.0
    for j in prange(ny):
        for i in range(nx):
            p = psi[j, i]
            n0 = p.real * p.real + p.imag * p.imag
            c, s = cis(-(_local_potential(v_static, amp, gx, gy, j, i, mu) + g * n0) * tau)
            psi[j, i] = p * complex(c, s)
            total += n0
    return total


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def nonlinear_damped(psi, v_static, amp, gx, gy, g, mu, gamma, tau):
    r"""Exact potential+nonlinear sub-step of the damped GPE, in place.

    Solves :math:`i\psi_t = (1 - i\gamma)(W + g|\psi|^2)\psi`, :math:`W = V - \mu` frozen over
    the sub-step, point by point in closed form.  The density obeys the logistic equation
    :math:`n' = -2\gamma (W + g n) n`, so with :math:`z = 2\gamma W\tau` and
    :math:`s = \tau (1 - e^{-z})/z` (:math:`s = \tau` when :math:`W = 0`)

    .. math:: n(\tau) = \frac{n_0 e^{-z}}{1 + q}, \qquad q = 2\gamma g n_0 s,

    and the phase obeys :math:`\theta' = -(W + g n) = (\ln n)'/(2\gamma)`, i.e.
    :math:`\Delta\theta = -W\tau - \ln(1 + q)/(2\gamma) = -W\tau - g n_0 s\,\ln(1+q)/q`.
    The last form has no division by gamma, so it is accurate for any small gamma and reduces
    to the conservative step at gamma = 0.  Being exact, the sub-step adds no error of its own
    and the Strang product stays second order for gamma > 0 (the only splitting error is the
    commutator term).  Returns ``sum |psi|^2`` of the input.
    Units: V, mu in mu; tau in hbar/mu; gamma none.
    """
    ny, nx = psi.shape
    total = 0.0
    two_gamma = 2.0 * gamma
    for j in prange(ny):
        for i in range(nx):
            p = psi[j, i]
            total += p.real * p.real + p.imag * p.imag
            w = _local_potential(v_static, amp, gx, gy, j, i, mu)
            ratio, decay = exp_ratio(two_gamma * w * tau)
            psi[j, i] = _damped_point(p, g * tau * ratio, decay, w * tau, two_gamma)
    return total


BEAM_CUTOFF = 1e-16
"""Gaussian factor below which a beam row/column is left out of the beam box (relative to the
beam height: the neglected potential is below the rounding of a potential of order mu)."""


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH)
def beam_box(amp, gx, gy, row_lo, row_hi):
    """Per row j, the column range ``[row_lo[j], row_hi[j])`` that some beam reaches.

    A beam reaches point (j, i) when both its factors ``gy[b, j]`` and ``gx[b, i]`` exceed
    :data:`BEAM_CUTOFF`; beams of zero height reach nothing.  Rows that no beam reaches get an
    empty range (``row_lo = row_hi = 0``).  Costs ``n_beams * (nx + ny)``.  Units: none.
    """
    ny, nx = row_lo.shape[0], gx.shape[1]
    for j in range(ny):
        row_lo[j] = nx
        row_hi[j] = 0
    for b in range(amp.shape[0]):
        if amp[b] == 0.0:
            continue
        i0, i1 = nx, 0
        for i in range(nx):
            if gx[b, i] > BEAM_CUTOFF:
                i0 = min(i0, i)
                i1 = i + 1
        if i1 == 0:
            continue
        for j in range(ny):
            if gy[b, j] > BEAM_CUTOFF:
                row_lo[j] = min(row_lo[j], i0)
                row_hi[j] = max(row_hi[j], i1)
    for j in range(ny):
        if row_hi[j] == 0:
            row_lo[j] = 0


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def damped_static_factors(v_static, g, mu, gamma, tau, out):
    r"""Precompute the parts of :func:`nonlinear_damped` that do not depend on psi or beams.

    With :math:`W = V_{static} - \mu` and :math:`z = 2\gamma W\tau`: ``out[0] = g tau
    (1 - e^{-z})/z``, ``out[1] = e^{-z}``, ``out[2] = W tau``; ``out`` has shape (3, ny, nx).
    Units: V, mu in mu; tau in hbar/mu; g in mu/n0.
    """
    ny, nx = v_static.shape
    two_gamma = 2.0 * gamma
    for j in prange(ny):
        for i in range(nx):
            w = v_static[j, i] - mu
            ratio, decay = exp_ratio(two_gamma * w * tau)
            out[0, j, i] = g * tau * ratio
            out[1, j, i] = decay
            out[2, j, i] = w * tau


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _damped_point(p, g_tau_ratio, decay, w_tau, two_gamma):
    n0 = p.real * p.real + p.imag * p.imag
    gns = g_tau_ratio * n0
    q = two_gamma * gns
    modulus = math.sqrt(decay / (1.0 + q))
    c, s = cis(-w_tau - gns * log1p_ratio(q))
    return p * complex(modulus * c, modulus * s)


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH, inline="always")
def _damped_static_run(psi, factors, two_gamma, j, start, stop):
    """Static-potential points ``start <= i < stop`` of row j; returns their sum |psi|^2."""
    # Row views indexed from 0: with a loop start read from an array the compiler cannot prove
    # the index non-negative, keeps numpy's negative-index wraparound and stops vectorising
    # (measured 4x slower).
    p_row = psi[j, start:stop]
    g_tau_ratio, decay, w_tau = factors[0, j, start:stop], factors[1, j, start:stop], \
        factors[2, j, start:stop]
    total = 0.0
    q_max = 0.0
    phase_max = 0.0
    for i in range(p_row.shape[0]):
        p = p_row[i]
        n0 = p.real * p.real + p.imag * p.imag
        total += n0
        gns = abs(g_tau_ratio[i] * n0)
        q_max = max(q_max, gns)
        phase_max = max(phase_max, abs(w_tau[i]) + gns)
    # |q| < 0.01 bounds log(1+q)/q by 1.006, so the phase below is < 1.006 * phase_max: when
    # every point of the run is inside both series ranges, a branch-free loop (which the
    # compiler vectorises) gives the same values as the general one.
    if two_gamma * q_max < 0.01 and 1.01 * phase_max < 0.5:
        for i in range(p_row.shape[0]):
            p = p_row[i]
            n0 = p.real * p.real + p.imag * p.imag
            gns = g_tau_ratio[i] * n0
            q = two_gamma * gns
            modulus = math.sqrt(decay[i] / (1.0 + q))
            c, s = _cis_series(-w_tau[i] - gns * _log1p_ratio_series(q))
            p_row[i] = p * complex(modulus * c, modulus * s)
    else:
        for i in range(p_row.shape[0]):
            p_row[i] = _damped_point(p_row[i], g_tau_ratio[i], decay[i], w_tau[i], two_gamma)
    return total


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def nonlinear_damped_boxed(psi, factors, v_static, amp, gx, gy, row_lo, row_hi, g, mu, gamma,
                           tau):
    """:func:`nonlinear_damped` with the static factors precomputed, beams only in their box.

    ``factors`` comes from :func:`damped_static_factors` with the same ``v_static, g, mu,
    gamma, tau``; ``row_lo, row_hi`` from :func:`beam_box`.  Outside the box the beam potential
    is below :data:`BEAM_CUTOFF` times the beam height and is left out; inside it the closed
    form is evaluated in full.  Returns ``sum |psi|^2`` of the input.
    Units: as :func:`nonlinear_damped`.
    """
    ny, nx = psi.shape
    total = 0.0
    two_gamma = 2.0 * gamma
    for j in prange(ny):
        lo, hi = row_lo[j], row_hi[j]
        row = 0.0
        for i in range(lo, hi):
            p = psi[j, i]
            row += p.real * p.real + p.imag * p.imag
            w = _local_potential(v_static, amp, gx, gy, j, i, mu)
            ratio, decay = exp_ratio(two_gamma * w * tau)
            psi[j, i] = _damped_point(p, g * tau * ratio, decay, w * tau, two_gamma)
        row += _damped_static_run(psi, factors, two_gamma, j, 0, lo)
        row += _damped_static_run(psi, factors, two_gamma, j, hi, nx)
        total += row
    return total


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def nonlinear_imaginary(psi, scale, v_static, amp, gx, gy, g, mu, tau):
    r"""Exact imaginary-time potential+nonlinear sub-step, in place, after rescaling by ``scale``.

    Solves :math:`\psi_\tau = -(W + g|\psi|^2)\psi`, :math:`W = V - \mu`, point by point in
    closed form, starting from :math:`p = c\psi`.  The phase is constant and the density obeys
    the logistic equation :math:`n' = -2(W + g n) n`, so with :math:`z = 2W\tau`

    .. math:: n(\tau) = \frac{n_0 e^{-z}}{1 + 2 g n_0 s}, \qquad
              s = \tau\,\frac{1 - e^{-z}}{z} \quad (s = \tau \text{ at } W = 0).

    The density is the one of the sub-flow at every instant, not the one at its start (an
    explicit :math:`|\psi|^2` makes the sub-step, and hence the ground state, first order in
    dt); being exact, the sub-step keeps the Strang fixed point second order.  The rescaling
    lets the ground-state loop apply the normalisation of the previous step here instead of in
    a separate pass.  Returns ``sum |psi|^2`` of the output.
    Units: V, mu in mu; tau in hbar/mu; g in mu/n0.
    """
    ny, nx = psi.shape
    total = 0.0
    for j in prange(ny):
        for i in range(nx):
            p = psi[j, i] * scale
            n0 = p.real * p.real + p.imag * p.imag
            ratio, decay = exp_ratio(2.0 * _local_potential(v_static, amp, gx, gy, j, i, mu) * tau)
            factor2 = decay / (1.0 + 2.0 * g * n0 * tau * ratio)
            psi[j, i] = p * math.sqrt(factor2)
            total += n0 * factor2
    return total


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def multiply(psi, factor):
    """``psi *= factor`` element-wise (kinetic sub-step in Fourier space). Units: none."""
    ny, nx = psi.shape
    for j in prange(ny):
        for i in range(nx):
            psi[j, i] = psi[j, i] * factor[j, i]


@njit(cache=True, error_model="numpy", fastmath=_FASTMATH)
def add_mode_noise(psi_k, rows, cols, normals, amplitude):
    """``psi_k[rows[m], cols[m]] += amplitude * (normals[0, m] + i normals[1, m])``, in place.

    The thermal noise of the projected modes (gpe.field.stochastic).  Units: those of psi_k.
    """
    for m in range(rows.shape[0]):
        psi_k[rows[m], cols[m]] += amplitude * complex(normals[0, m], normals[1, m])


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def multiply_and_norm(psi_k, factor, half_factor):
    """``psi_k *= factor`` and return ``sum |half_factor * psi_k|^2`` of the input.

    Used by the fused imaginary-time loop: the returned sum is, by Parseval, ``N`` times the
    squared norm the field would have after a closing kinetic half step.  Units: none.
    """
    ny, nx = psi_k.shape
    total = 0.0
    for j in prange(ny):
        for i in range(nx):
            p = psi_k[j, i]
            h = half_factor[j, i]
            total += (p.real * p.real + p.imag * p.imag) * h * h
            psi_k[j, i] = p * factor[j, i]
    return total


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def scale_inplace(psi, scale):
    """``psi *= scale``. Units: none."""
    ny, nx = psi.shape
    for j in prange(ny):
        for i in range(nx):
            psi[j, i] = psi[j, i] * scale


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def pin_phase(psi, phase_factor):
    """Replace the phase of ``psi`` by that of the unit-modulus ``phase_factor`` wherever the
    factor is non-zero; where it is zero (e.g. inside vortex cores) ``psi`` is left alone.
    Units: none."""
    ny, nx = psi.shape
    for j in prange(ny):
        for i in range(nx):
            f = phase_factor[j, i]
            if f.real != 0.0 or f.imag != 0.0:
                psi[j, i] = abs(psi[j, i]) * f


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def density_sums(psi, v_static, amp, gx, gy):
    """Return ``(sum n, sum V_static n, sum V_beam n, sum n^2)`` with ``n = |psi|^2``.

    Multiply by the cell area (and g/2 for the last) to get norm and energies.
    Units: n in n0; V in mu.
    """
    ny, nx = psi.shape
    s_n = 0.0
    s_trap = 0.0
    s_beam = 0.0
    s_n2 = 0.0
    for j in prange(ny):
        for i in range(nx):
            p = psi[j, i]
            n = p.real * p.real + p.imag * p.imag
            vb = _beam_potential(amp, gx, gy, j, i)
            s_n += n
            s_trap += v_static[j, i] * n
            s_beam += vb * n
            s_n2 += n * n
    return s_n, s_trap, s_beam, s_n2


@njit(cache=True, error_model="numpy", parallel=True, fastmath=_FASTMATH)
def kinetic_sum(psi_k, k2):
    """Return ``sum k^2 |psi_k|^2`` (kinetic energy by Parseval). Units: 1/xi^2 times |psi_k|^2."""
    ny, nx = psi_k.shape
    total = 0.0
    for j in prange(ny):
        for i in range(nx):
            p = psi_k[j, i]
            total += k2[j, i] * (p.real * p.real + p.imag * p.imag)
    return total


def empty_beam_rows(n_beams: int, nx: int, ny: int) -> tuple[np.ndarray, ...]:
    """Preallocated ``amp (B,), cx (B,), cy (B,), gx (B, nx), gy (B, ny)`` buffers (zeros)."""
    return (np.zeros(n_beams), np.zeros(n_beams), np.zeros(n_beams),
            np.zeros((n_beams, nx)), np.zeros((n_beams, ny)))


@contextmanager
def kernel_threads(n_threads: int):
    """Run the parallel kernels with ``n_threads`` threads inside the block (thread-local).

    On a small grid or a busy machine one thread is faster: a parallel region has to wait for
    every one of its threads at the end, and a descheduled thread costs a whole time slice.
    """
    previous = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n_threads), numba.config.NUMBA_NUM_THREADS)))
    try:
        yield
    finally:
        numba.set_num_threads(previous)
