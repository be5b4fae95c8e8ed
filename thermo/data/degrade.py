"""Degrade simulated vortex configurations the way imaging does, before comparing.

An experiment does not see the point-vortex configuration itself: the positions carry
a centroid error, two cores closer than the optical resolution are not told apart,
cores near the edge of the cloud sit in the low-density rim and are missed, and the
sign (from the local phase or the motion) is sometimes wrong. :func:`degrade` applies
the same effects to simulated configurations, in this order:

1. **Edge loss**: vortices closer than ``edge_loss`` to the wall are removed
   (``domain.contains(pos, margin=edge_loss)`` is False).
2. **Resolution loss** (on the true positions, since the optics blur the true cores):
   pairs closer than ``resolution`` are resolved greedily from the closest pair up, each
   vortex taking part in at most one such event per pass, repeated until no pair is
   closer than ``resolution``:

   * an opposite-sign pair is **lost, both vortices**: the two cores overlap into one
     shallow density dip whose phase winding cancels, so neither is counted;
   * a like-sign pair is **merged** into one vortex at the midpoint with the common
     sign: one deeper core is seen and the table can only hold sign +-1.
3. **Position blur**: independent Gaussian errors of standard deviation ``blur`` on x
   and y. A blurred position that falls outside the domain is redrawn (a measured
   table never lists a vortex outside the cloud; the reader rejects such rows); with a
   ``core_radius`` a > 0, so is one closer than a to the wall or closer than 2a to
   another vortex, so the result stays a valid hard-core configuration for thermo.
4. **Sign errors**: each sign flips with probability ``sign_flip``.

With all four parameters zero the result equals the input exactly (copies of the
arrays, no random numbers drawn).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from thermo.errors import ThermoError


class DegradeError(ThermoError, ValueError):
    """Invalid imaging model or configuration for :func:`degrade`."""


# Redraws of a blurred position that left the domain; with blur << domain size the
# chance of needing more than a handful is negligible, so hitting this means the blur
# is comparable with the domain and the model makes no sense.
_MAX_REDRAWS = 200


@dataclass(frozen=True)
class ImagingModel:
    """How imaging degrades a vortex configuration.

    Attributes
    ----------
    blur : standard deviation of the Gaussian position error, per coordinate.
    resolution : pairs closer than this are lost (opposite signs) or merged (like signs).
    edge_loss : vortices closer than this to the wall are lost.
    sign_flip : probability that a sign is recorded wrongly.

    Units: lengths scaled by the domain size (disk radius 1); sign_flip is a probability.
    """

    blur: float = 0.0
    resolution: float = 0.0
    edge_loss: float = 0.0
    sign_flip: float = 0.0

    def __post_init__(self) -> None:
        for name in ("blur", "resolution", "edge_loss"):
            v = getattr(self, name)
            if not np.isfinite(v) or v < 0:
                raise DegradeError(f"ImagingModel.{name} must be a finite number >= 0; got {v}")
        if not (0.0 <= self.sign_flip <= 1.0):
            raise DegradeError(
                f"ImagingModel.sign_flip is a probability in [0, 1]; got {self.sign_flip}")

    @classmethod
    def from_um(cls, length_scale_um: float, *, blur_um: float = 0.0,
                resolution_um: float = 0.0, edge_loss_um: float = 0.0,
                sign_flip: float = 0.0) -> "ImagingModel":
        """Build from micrometres, with ``length_scale_um`` micrometres per scaled unit."""
        if not length_scale_um > 0:
            raise DegradeError(f"length_scale_um must be > 0; got {length_scale_um}")
        return cls(blur=blur_um / length_scale_um, resolution=resolution_um / length_scale_um,
                   edge_loss=edge_loss_um / length_scale_um, sign_flip=sign_flip)

    @property
    def is_identity(self) -> bool:
        return (self.blur == 0 and self.resolution == 0 and self.edge_loss == 0
                and self.sign_flip == 0)


def _resolve_close_pairs(pos: np.ndarray, signs: np.ndarray, resolution: float
                         ) -> tuple[np.ndarray, np.ndarray, int, int]:
    """Apply the resolution rule until no pair is closer than ``resolution``.

    Returns new positions, signs, and the numbers of lost and merged pairs.
    """
    lost = merged = 0
    while len(signs) >= 2:
        diff = pos[:, None, :] - pos[None, :, :]
        d = np.sqrt(np.einsum("ijk,ijk->ij", diff, diff))
        iu, ju = np.triu_indices(len(signs), k=1)
        close = d[iu, ju] < resolution
        if not close.any():
            break
        order = np.argsort(d[iu, ju][close], kind="stable")
        ci, cj = iu[close][order], ju[close][order]
        used = np.zeros(len(signs), dtype=bool)
        keep = np.ones(len(signs), dtype=bool)
        new_pos, new_sign = [], []
        for i, j in zip(ci, cj):
            if used[i] or used[j]:
                continue
            used[i] = used[j] = True
            keep[i] = keep[j] = False
            if signs[i] == signs[j]:
                new_pos.append(0.5 * (pos[i] + pos[j]))
                new_sign.append(signs[i])
                merged += 1
            else:
                lost += 1
        pos = np.concatenate([pos[keep], np.array(new_pos, dtype=np.float64).reshape(-1, 2)])
        signs = np.concatenate([signs[keep], np.array(new_sign, dtype=signs.dtype)])
    return pos, signs, lost, merged


def _hard_core_violations(pos: np.ndarray, domain: Any, core_radius: float) -> np.ndarray:
    """True for vortices outside, within a of the wall, or within 2a of another vortex."""
    bad = ~np.asarray(domain.contains(pos, margin=core_radius), dtype=bool)
    if core_radius > 0 and len(pos) >= 2:
        diff = pos[:, None, :] - pos[None, :, :]
        d2 = np.einsum("ijk,ijk->ij", diff, diff)
        np.fill_diagonal(d2, np.inf)
        bad |= (d2 < (2.0 * core_radius) ** 2).any(axis=1)
    return bad


def degrade(positions: Any, signs: Any, domain: Any, model: ImagingModel,
            rng: np.random.Generator, core_radius: float = 0.0
            ) -> tuple[np.ndarray, np.ndarray]:
    """One configuration as an imaging system would record it.

    Parameters
    ----------
    positions : (N, 2) scaled positions; signs : (N,) +1 / -1.
    domain : thermo domain (needs ``contains(pos, margin=...)``).
    model : the :class:`ImagingModel`.
    rng : seeded generator (no numbers are drawn when the model is the identity).
    core_radius : hard-core radius a; blurred positions violating it are redrawn.

    Returns
    -------
    (positions (M, 2) float64, signs (M,) of the input sign dtype), M <= N.

    Units: positions in units of the domain size.
    """
    pos = np.array(positions, dtype=np.float64).reshape(-1, 2)
    s = np.array(signs)
    if s.shape != (pos.shape[0],):
        raise DegradeError(f"signs must have shape ({pos.shape[0]},); got {s.shape}")
    if not np.all(np.isin(s, (-1, 1))):
        raise DegradeError("signs must be +1 or -1")
    if model.is_identity:
        return pos, s
    if model.edge_loss > 0 and len(s):
        inside = np.asarray(domain.contains(pos, margin=model.edge_loss), dtype=bool)
        pos, s = pos[inside], s[inside]
    if model.resolution > 0:
        pos, s, _, _ = _resolve_close_pairs(pos, s, model.resolution)
    if model.blur > 0 and len(s):
        blurred = pos + rng.normal(0.0, model.blur, size=pos.shape)
        for _ in range(_MAX_REDRAWS):
            out = _hard_core_violations(blurred, domain, core_radius)
            if not out.any():
                break
            blurred[out] = pos[out] + rng.normal(0.0, model.blur, size=(int(out.sum()), 2))
        else:
            raise DegradeError(
                f"blur {model.blur:g} (domain units) keeps pushing vortices outside the "
                f"domain or into each other's core (a = {core_radius:g}); the blur or the "
                f"core is too large for an imaging model of this configuration")
        pos = blurred
    if model.sign_flip > 0 and len(s):
        flip = rng.random(len(s)) < model.sign_flip
        s = np.where(flip, -s, s).astype(s.dtype)
    return pos, s


def degrade_many(configurations: Sequence[tuple[Any, Any]], domain: Any,
                 model: ImagingModel, rng: np.random.Generator, core_radius: float = 0.0
                 ) -> list[tuple[np.ndarray, np.ndarray]]:
    """:func:`degrade` applied to each ``(positions, signs)`` of a list, one generator.

    Units: positions in units of the domain size.
    """
    return [degrade(p, s, domain, model, rng, core_radius) for p, s in configurations]
