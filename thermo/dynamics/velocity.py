"""Kirchhoff-Routh velocities of point vortices in a bounded domain, with mutual friction.

With the energy :math:`E` of :mod:`thermo.energy` (units :math:`E_0 = \\rho\\kappa^2/(4\\pi)`,
positions :math:`u = r/L` scaled by the domain's length unit :math:`L`) and the scaled time
:math:`s = t\\,\\hbar/(m L^2)`, Kirchhoff's equations :math:`\\kappa_i \\dot x_i = \\partial
H/\\partial y_i`, :math:`\\kappa_i \\dot y_i = -\\partial H/\\partial x_i` (per unit density)
read

.. math::

    \\frac{du_i}{ds} = (1 - \\alpha')\\,\\frac{s_i}{2}\\,\\hat z\\times(-\\nabla_i E)
                      \\;-\\; \\frac{\\alpha}{2}\\,\\nabla_i E,

where the first term is the conservative velocity :math:`v_i` (other vortices and images:
``u_x' = (s_i/2) dE/du_y``, ``u_y' = -(s_i/2) dE/du_x``) and the second the mutual friction
:math:`-\\alpha s_i \\hat z\\times v_i` of the damped point-vortex model (the form used by
Reeves et al., Phys. Rev. X 12, 011031 (2022)). Because :math:`s_i^2 = 1` the friction is a
gradient descent, :math:`dE/ds = -(\\alpha/2)\\sum_i|\\nabla_i E|^2 \\le 0`: the energy falls
monotonically, a vortex drifts towards its image, a dipole shrinks. :math:`\\alpha'` only
rescales the conservative part.

Check values: a dipole of separation d in the plane moves at :math:`\\hbar/(m d)`; one vortex at
radius :math:`r_0` in a disk of radius R precesses at :math:`\\hbar/[m(R^2 - r_0^2)]` (Saffman,
*Vortex Dynamics* (1992)). In healing units :math:`\\hbar/m = 1`, so ``s = t / L**2`` with t in
hbar/mu and L in xi.

The compiled loops are the domain's (:class:`thermo.domains.base.GradientKernels`): the
generic :func:`thermo.domains.base.pair_sum_velocity` or a domain's own faster one.

Units: positions in the domain's length unit; time s in m L^2 / hbar; velocities in
hbar / (m L); alpha, alpha' dimensionless.
"""

from __future__ import annotations

import numpy as np

from thermo.domains.base import Domain, as_points, kernel_array
from thermo.errors import ConfigurationError

def check_friction(alpha: float, alpha_prime: float) -> tuple[float, float]:
    """The mutual-friction coefficients as floats; raise unless 0 <= alpha < 1 and |alpha'| < 1.

    Units: dimensionless.
    """
    for name, value, ok, accepted in (
            ("alpha", alpha, lambda v: 0.0 <= v < 1.0, "0 <= alpha < 1"),
            ("alpha_prime", alpha_prime, lambda v: -1.0 < v < 1.0, "-1 < alpha_prime < 1")):
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
                or not np.isfinite(value) or not ok(float(value)):
            raise ConfigurationError(f"mutual friction {name} = {value!r}; accepted: {accepted} "
                                     "(a dimensionless coefficient, typically 1e-3 to 0.1)")
    return float(alpha), float(alpha_prime)


def velocities(pos, signs, domain: Domain, alpha: float = 0.0,
               alpha_prime: float = 0.0) -> np.ndarray:
    """Velocities du/ds of point vortices in ``domain`` (module docstring), shape (N, 2).

    Parameters
    ----------
    pos : array_like, shape (N, 2)
        Scaled positions inside the domain. Units: the domain's length unit L.
    signs : array_like of int, shape (N,)
        +1 / -1.
    domain : thermo.domains.base.Domain
        Any domain with :meth:`~thermo.domains.base.Domain.gradient_kernels`.
    alpha, alpha_prime : float
        Mutual-friction coefficients. Units: dimensionless.

    Returns
    -------
    numpy.ndarray, shape (N, 2)

    Units
    -----
    Velocities in hbar / (m L), i.e. per scaled time s = t hbar / (m L^2).
    """
    p = kernel_array(as_points(pos, "pos").reshape(-1, 2), np.float64)
    s = kernel_array(np.asarray(signs).reshape(-1), np.int64)
    if s.shape[0] != p.shape[0] or not np.all(np.abs(s) == 1):
        raise ConfigurationError(f"signs must be {p.shape[0]} values of +1 or -1; got "
                                 f"{np.asarray(signs).tolist()!r}")
    alpha, alpha_prime = check_friction(alpha, alpha_prime)
    k = domain.gradient_kernels()
    out = np.empty_like(p)
    k.velocity(p, s, alpha, alpha_prime, k.self_gradient, k.pair_gradient, k.params, out)
    return out
