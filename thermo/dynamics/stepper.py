"""The compiled Dormand-Prince 5(4) loop of :mod:`thermo.dynamics.integrate`.

One call advances the vortices until the requested time, or until an accepted step leaves an
opposite-sign pair closer than the annihilation distance or a vortex closer than half of it to
the wall (the caller removes them and calls again), or when the block of standard normal numbers
for the noise kicks is used up (the caller draws the next block). Everything between those
events runs here, without Python in the loop (a call from Python costs ~0.5 ms of argument
typing, so one call per step would dominate). Tableau and step-size rule: see :mod:`thermo.dynamics.integrate`.

Units: positions in L; time in m L^2 / hbar.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, types

from thermo.domains.base import (PARAMS, POINTS, SIGNS, PairGradientKernel, SelfGradientKernel,
                                 VelocityKernel, WallKernel)

#: Status codes written to clock[5].
REACHED, EVENT, NOISE_USED_UP, TOO_MANY_STEPS = 0.0, 1.0, 2.0, 3.0

_SIGNATURE = types.void(POINTS, SIGNS, types.float64[::1], types.float64[::1], types.int64,
                        types.float64[:, :, ::1], VelocityKernel, SelfGradientKernel,
                        PairGradientKernel, WallKernel, PARAMS, PARAMS, types.float64[::1])

# Dormand & Prince (1980) coefficients
A21 = 1 / 5
A31, A32 = 3 / 40, 9 / 40
A41, A42, A43 = 44 / 45, -56 / 15, 32 / 9
A51, A52, A53, A54 = 19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729
A61, A62, A63, A64, A65 = 9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656
A71, A73, A74, A75, A76 = 35 / 384, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84
E1, E3, E4, E5, E6, E7 = (71 / 57600, -71 / 16695, 71 / 1920, -17253 / 339200, 22 / 525,
                          -1 / 40)


@njit(cache=True, error_model="numpy")
def _has_event(pos, signs, d, wall_fn, wall_params):
    n = pos.shape[0]
    for i in range(n):
        if wall_fn(pos[i, 0], pos[i, 1], wall_params) <= 0.5 * d:
            return True
    if d <= 0.0:
        return False
    d2 = d * d
    for i in range(n):
        for j in range(i + 1, n):
            if signs[i] != signs[j]:
                dx = pos[i, 0] - pos[j, 0]
                dy = pos[i, 1] - pos[j, 1]
                if dx * dx + dy * dy < d2:
                    return True
    return False


@njit(_SIGNATURE, cache=True, error_model="numpy")
def dp_run(pos, signs, clock, settings, max_steps, normals, velocity_fn, self_g, pair_g,
           wall_fn, params, wall_params, k1):
    """Advance ``pos`` in place (module docstring).

    clock : [t, t_end, h, taken, rejected, status] (read and written; status as the constants)
    settings : [alpha, alpha_prime, rtol, atol, max_step, annihilation_distance, kick], kick =
        sqrt(2 D) of the noise (0: none)
    normals : (M, N, 2) standard normal numbers, one (N, 2) block per accepted step's kick
        ``kick sqrt(h) normals[m]`` (unused without noise: M may be 0)
    k1 : (2N,) the slope at the current ``pos`` on entry, at the final ``pos`` on return.
    """
    n = pos.shape[0]
    alpha, alpha_p, rtol, atol, max_step, d = (settings[0], settings[1], settings[2],
                                               settings[3], settings[4], settings[5])
    kick = settings[6]
    used = 0
    t, t_end, h = clock[0], clock[1], clock[2]
    y = pos.reshape(2 * n)
    ks = np.empty((7, 2 * n))
    ks[0, :] = k1
    yi = np.empty((n, 2))
    yf = yi.reshape(2 * n)
    y_new = np.empty(2 * n)
    out = np.empty((n, 2))
    of = out.reshape(2 * n)
    status = TOO_MANY_STEPS
    for _ in range(max_steps):
        if t >= t_end or n == 0:
            t = t_end
            status = REACHED
            break
        remaining = t_end - t
        h_try = min(h, max_step, remaining)
        last = h_try >= remaining * (1.0 - 1e-12)
        for stage in range(1, 7):
            for m in range(2 * n):
                if stage == 1:
                    v = A21 * ks[0, m]
                elif stage == 2:
                    v = A31 * ks[0, m] + A32 * ks[1, m]
                elif stage == 3:
                    v = A41 * ks[0, m] + A42 * ks[1, m] + A43 * ks[2, m]
                elif stage == 4:
                    v = A51 * ks[0, m] + A52 * ks[1, m] + A53 * ks[2, m] + A54 * ks[3, m]
                elif stage == 5:
                    v = (A61 * ks[0, m] + A62 * ks[1, m] + A63 * ks[2, m] + A64 * ks[3, m]
                         + A65 * ks[4, m])
                else:
                    v = (A71 * ks[0, m] + A73 * ks[2, m] + A74 * ks[3, m] + A75 * ks[4, m]
                         + A76 * ks[5, m])
                yf[m] = y[m] + h_try * v
            if stage == 6:
                y_new[:] = yf
            velocity_fn(yi, signs, alpha, alpha_p, self_g, pair_g, params, out)
            ks[stage, :] = of
        acc = 0.0
        for m in range(2 * n):
            e = h_try * (E1 * ks[0, m] + E3 * ks[2, m] + E4 * ks[3, m] + E5 * ks[4, m]
                         + E6 * ks[5, m] + E7 * ks[6, m])
            sc = atol + rtol * max(abs(y[m]), abs(y_new[m]))
            acc += (e / sc) ** 2
        r = math.sqrt(acc / (2 * n))
        if not math.isfinite(r):
            r = math.inf
        if r > 1.0:
            clock[4] += 1.0
            h = h_try * max(0.2, 0.9 * r ** -0.2) if math.isfinite(r) else 0.2 * h_try
            continue
        clock[3] += 1.0
        t = t_end if last else t + h_try
        factor = 5.0 if r == 0.0 else min(5.0, 0.9 * r ** -0.2)
        # a step shortened to land on t_end keeps the larger proposal it was cut from
        h = max(h, h_try * factor) if last and h_try < h else h_try * factor
        y[:] = y_new
        ks[0, :] = ks[6, :]
        if kick > 0.0:
            amp = kick * math.sqrt(h_try)
            for i in range(n):
                pos[i, 0] += amp * normals[used, i, 0]
                pos[i, 1] += amp * normals[used, i, 1]
            used += 1
            velocity_fn(pos, signs, alpha, alpha_p, self_g, pair_g, params, out)
            ks[0, :] = of
        if _has_event(pos, signs, d, wall_fn, wall_params):
            status = EVENT
            break
        if kick > 0.0 and used == normals.shape[0]:
            status = NOISE_USED_UP if t < t_end else REACHED
            break
    k1[:] = ks[0, :]
    clock[0], clock[2], clock[5] = t, h, status
