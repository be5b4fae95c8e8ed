"""Synthetic vortex fields shared by test_vortices.py and test_tracking.py (not a test file).

Synthetic wavefunctions are products of vortex cores f(r) exp(i s theta) with the Pade-type
profile f(r) = r / sqrt(r^2 + 1) (r in xi = hbar/sqrt(m mu); common practice as a core ansatz,
it has the exact zero and the 1 - 1/(2 r^2) far field of the core ODE in these units). The
product vanishes exactly at every imprinted centre, so the true positions are known exactly.
"""

import numpy as np


def axis(n, length):
    return (np.arange(n) - n / 2) * (length / n)


def imprint(X, Y, positions, signs):
    psi = np.ones(X.shape, dtype=np.complex128)
    for (x0, y0), s in zip(positions, signs):
        dx, dy = X - x0, Y - y0
        r2 = dx * dx + dy * dy
        psi *= np.sqrt(r2 / (r2 + 1.0)) * np.exp(1j * s * np.arctan2(dy, dx))
    return psi


def random_configuration(rng, n, half_width, min_sep, radius=None):
    """n points >= min_sep apart, in |x|,|y| < half_width (or r < radius)."""
    pts = []
    while len(pts) < n:
        p = rng.uniform(-half_width, half_width, 2)
        if radius is not None and np.hypot(*p) > radius:
            continue
        if all(np.hypot(*(p - q)) >= min_sep for q in pts):
            pts.append(p)
    signs = np.where(rng.permutation(n) % 2 == 0, 1, -1)
    return np.array(pts), signs
