"""Adaptive integration of damped point-vortex dynamics, with annihilation and optional noise.

The equations of motion are those of :mod:`thermo.dynamics.velocity`. They are integrated by the
explicit Runge-Kutta pair of Dormand & Prince (J. Comput. Appl. Math. 6, 19 (1980)): fifth-order
solution, embedded fourth-order error estimate, first-same-as-last, step size chosen so that the
estimated local error per step stays below ``atol + rtol |u|`` in the root-mean-square norm
(Hairer, Norsett & Wanner, *Solving Ordinary Differential Equations I*, section II.4). The last
step before an output time is shortened to land on it, so outputs are exact states, not
interpolations.

After every accepted step:

* noise (optional, seeded): each coordinate gets an independent kick ``sqrt(2 D h) N(0, 1)``
  with ``D = alpha / (2 beta~)``. The friction term is the gradient descent
  ``-(alpha/2) grad E`` and the conservative part preserves phase-space volume, so by the
  fluctuation-dissipation (Einstein) relation this diffusion makes ``exp(-beta~ E)`` the
  stationary density (Fokker-Planck equation; [exact]). beta~ > 0 only: a negative-temperature
  state is not the stationary state of a thermal bath.
* annihilation: an opposite-sign pair closer than ``annihilation_distance`` is removed (the
  closest pair first), and a vortex closer than half that distance to the wall leaves with its
  image (which is then closer than the same distance).

Units: positions in the domain's length unit L; time s = t hbar / (m L^2) (see
:mod:`thermo.dynamics.velocity`); energies in E0; beta~ in 1/E0.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from thermo.domains.base import Domain, as_points, kernel_array
from thermo.dynamics.stepper import EVENT, REACHED, TOO_MANY_STEPS, dp_run
from thermo.dynamics.velocity import check_friction
from thermo.errors import ConfigurationError

MAX_STEPS = 10_000_000
#: Largest block of noise kicks drawn at once (kicks x vortices x 2 normal numbers).
NOISE_BLOCK = 4096


@dataclass(frozen=True)
class DynamicsSettings:
    """How the point vortices move (see the module docstring).

    Attributes
    ----------
    alpha, alpha_prime : float
        Mutual friction: 0 <= alpha < 1, |alpha'| < 1. Units: dimensionless.
    rtol, atol : float
        Error tolerances of a step (relative to |u|, absolute). Units: L.
    annihilation_distance : float
        Opposite-sign pairs closer than this are removed; vortices closer than half of it to
        the wall too. 0 keeps every vortex (a vortex is removed only if it leaves the domain).
        Units: L.
    noise_beta : float or None
        beta~ of the noise (> 0), None for none. Needs alpha > 0 and a finite ``max_step``.
        Units: 1/E0.
    max_step : float
        Largest step. With noise it is the step of the noise kicks. Units: m L^2 / hbar.
    """

    alpha: float = 0.0
    alpha_prime: float = 0.0
    rtol: float = 1e-8
    atol: float = 1e-10
    annihilation_distance: float = 0.0
    noise_beta: float | None = None
    max_step: float = math.inf

    def __post_init__(self) -> None:
        check_friction(self.alpha, self.alpha_prime)
        for name in ("rtol", "atol"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and 0.0 < v < 0.1):
                raise ConfigurationError(f"DynamicsSettings.{name} = {v!r}; accepted: a number "
                                         "in (0, 0.1), e.g. 1e-8")
        d = self.annihilation_distance
        if not (isinstance(d, (int, float)) and math.isfinite(d) and 0.0 <= d < 0.5):
            raise ConfigurationError(f"DynamicsSettings.annihilation_distance = {d!r}; accepted: "
                                     "0 <= distance < 0.5 domain units (two core radii)")
        if not (isinstance(self.max_step, (int, float)) and self.max_step > 0):
            raise ConfigurationError(f"DynamicsSettings.max_step = {self.max_step!r}; accepted: "
                                     "a positive scaled time (or inf)")
        if self.noise_beta is not None:
            b = self.noise_beta
            if not (isinstance(b, (int, float)) and math.isfinite(b) and b > 0):
                raise ConfigurationError(
                    f"DynamicsSettings.noise_beta = {b!r}; accepted: beta~ > 0 (1/E0) or None: a "
                    "thermal bath has a positive temperature")
            if self.alpha == 0.0:
                raise ConfigurationError("DynamicsSettings: noise needs mutual friction alpha > 0 "
                                         "(the noise strength is D = alpha / (2 beta~)); got alpha = 0")
            if not math.isfinite(self.max_step):
                raise ConfigurationError("DynamicsSettings: noise needs a finite max_step, the "
                                         "step of its kicks (e.g. 1e-4 of the scaled time)")

    @property
    def diffusion(self) -> float:
        """D = alpha / (2 beta~) of the noise, 0 without. Units: L^2 hbar / (m L^2)."""
        return 0.0 if self.noise_beta is None else self.alpha / (2.0 * self.noise_beta)


@dataclass(frozen=True)
class PointState:
    """Point vortices at scaled time ``t``, with the step size the integrator will try next.

    ``annihilated`` counts the pairs removed so far, ``lost_to_wall`` the vortices that left
    through the wall. Units: positions in L; t and step in m L^2 / hbar.
    """

    pos: np.ndarray
    signs: np.ndarray
    t: float = 0.0
    step: float = 0.0
    annihilated: int = 0
    lost_to_wall: int = 0
    steps_taken: int = 0
    steps_rejected: int = 0

    @property
    def n(self) -> int:
        """Number of vortices."""
        return int(self.signs.shape[0])


def initial_state(pos, signs, domain: Domain, t: float = 0.0) -> PointState:
    """A checked starting state: every vortex inside ``domain``, signs +1/-1.

    Raises
    ------
    ConfigurationError
        Naming the first row outside the domain or with a bad sign.

    Units: positions in L; t in m L^2 / hbar.
    """
    p = kernel_array(as_points(pos, "pos").reshape(-1, 2), np.float64).copy()
    s = kernel_array(np.asarray(signs).reshape(-1), np.int64).copy()
    if s.shape[0] != p.shape[0]:
        raise ConfigurationError(f"{p.shape[0]} positions but {s.shape[0]} signs")
    bad = np.flatnonzero(np.abs(s) != 1)
    if bad.size:
        raise ConfigurationError(f"row {bad[0]}: sign {s[bad[0]]}; accepted: +1 or -1")
    outside = np.flatnonzero(~domain.contains(p))
    if outside.size:
        raise ConfigurationError(f"row {outside[0]}: position {p[outside[0]].tolist()} is not "
                                 f"inside the {domain.kind} (scaled units)")
    return PointState(p, s, float(t))


def angular_impulse(state: PointState) -> float:
    """Signed angular impulse M = sum s_i |u_i|^2 (conserved in the disk). Units: L^2."""
    return float(np.sum(state.signs * np.sum(state.pos ** 2, axis=1)))


def _remove(domain: Domain, pos, signs, settings: DynamicsSettings):
    """Drop vortices at the wall and annihilating pairs: (pos, signs, n_pairs, n_wall)."""
    d = settings.annihilation_distance
    keep = domain.distance_to_wall(pos) > 0.5 * d
    n_wall = int(np.count_nonzero(~keep))
    pairs = 0
    if d > 0 and np.any(signs[keep] > 0) and np.any(signs[keep] < 0):
        plus = np.flatnonzero(keep & (signs > 0))
        minus = np.flatnonzero(keep & (signs < 0))
        dist = np.hypot(*(pos[plus, None, :] - pos[None, minus, :]).transpose(2, 0, 1))
        close = np.argwhere(dist < d)
        for a, b in close[np.argsort(dist[close[:, 0], close[:, 1]])]:
            i, j = plus[a], minus[b]
            if keep[i] and keep[j]:
                keep[i] = keep[j] = False
                pairs += 1
    if n_wall == 0 and pairs == 0:
        return pos, signs, 0, 0
    return (kernel_array(pos[keep], np.float64), kernel_array(signs[keep], np.int64),
            pairs, n_wall)


def advance(state: PointState, t_end: float, domain: Domain, settings: DynamicsSettings,
            rng: np.random.Generator | None = None) -> PointState:
    """Integrate ``state`` up to exactly ``t_end`` (module docstring).

    Parameters
    ----------
    state : PointState
    t_end : float
        Scaled time to stop at (>= state.t). Units: m L^2 / hbar.
    domain : thermo.domains.base.Domain
    settings : DynamicsSettings
    rng : numpy.random.Generator
        The noise's generator (required when ``settings.noise_beta`` is set); advanced in place.

    Returns
    -------
    PointState at ``t_end``; the same (pos, signs, t, step, rng state) give the same result.

    Raises
    ------
    ConfigurationError
        If noise is asked for without a generator, or ``t_end`` lies before ``state.t``.
    """
    if t_end < state.t:
        raise ConfigurationError(f"t_end = {t_end!r} is before the state's time {state.t!r}")
    if settings.noise_beta is not None and rng is None:
        raise ConfigurationError("noise (DynamicsSettings.noise_beta) needs a seeded "
                                 "numpy.random.Generator as rng")
    g = domain.gradient_kernels()
    w = domain.kernels()
    pos, signs = kernel_array(state.pos, np.float64).copy(), kernel_array(state.signs, np.int64)
    kick = math.sqrt(2.0 * settings.diffusion)
    numbers = np.array([settings.alpha, settings.alpha_prime, settings.rtol, settings.atol,
                        settings.max_step, settings.annihilation_distance, kick])
    pairs, wall = state.annihilated, state.lost_to_wall
    no_normals = np.empty((0, 0, 2))

    def slope(p, s):
        out = np.empty_like(p)
        g.velocity(p, s, settings.alpha, settings.alpha_prime, g.self_gradient, g.pair_gradient,
                   g.params, out)
        return out.reshape(-1)

    pos, signs, dp, dw = _remove(domain, pos, signs, settings)
    pairs, wall = pairs + dp, wall + dw
    k1 = slope(pos, signs)
    h = state.step
    if h <= 0.0:
        vmax = float(np.max(np.abs(k1))) if k1.size else 0.0
        h = min(1e-3 / vmax if vmax > 0 else 1e-3, settings.max_step)
    clock = np.array([state.t, float(t_end), h, state.steps_taken, state.steps_rejected, 0.0])
    while True:
        if kick > 0.0:
            # one block of kicks per call: enough for the remaining time at the noise step (the
            # unused rest of a block is discarded, so the draws depend only on the call sequence)
            m = min(NOISE_BLOCK, math.ceil((t_end - clock[0]) / settings.max_step * (1 + 1e-9)) + 1)
            normals = rng.standard_normal((max(m, 1), signs.size, 2))
        else:
            normals = no_normals
        dp_run(pos, signs, clock, numbers, MAX_STEPS, normals, g.velocity, g.self_gradient,
               g.pair_gradient, w.wall_distance, g.params, w.params, k1)
        status = clock[5]
        if status == TOO_MANY_STEPS:
            raise ConfigurationError(
                f"point-vortex integration took more than {MAX_STEPS} steps between s = "
                f"{state.t:.6g} and {t_end:.6g}; loosen rtol/atol or set an annihilation distance")
        if status == EVENT:
            pos, signs, dp, dw = _remove(domain, pos, signs, settings)
            pairs, wall = pairs + dp, wall + dw
            k1 = slope(pos, signs)
        elif status == REACHED:
            break
    t, h, taken, rejected = float(clock[0]), float(clock[2]), int(clock[3]), int(clock[4])
    return PointState(pos, signs, float(t), float(h), pairs, wall, taken, rejected)


def evolve(state: PointState, times: Sequence[float], domain: Domain,
           settings: DynamicsSettings, rng: np.random.Generator | None = None
           ) -> Iterator[PointState]:
    """Yield the state at each of ``times`` (increasing scaled times), advancing in between.

    Units: times in m L^2 / hbar.
    """
    for t in times:
        state = advance(state, float(t), domain, settings, rng)
        yield state

