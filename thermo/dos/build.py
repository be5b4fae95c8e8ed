"""Building a density of states: effort settings, the tempering run, the pooling.

:func:`build` runs parallel tempering (thermo.sampler) on an adaptive ladder and pools all
replicas with MBAR into a :class:`thermo.dos.model.DensityOfStates`; :mod:`thermo.dos.cache` keeps the
result on disk. Both names are also reachable from :mod:`thermo.dos.model`.

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0; core radius in the domain's length.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from thermo import sampler
from thermo.classify import structure_observables
from thermo.dos.model import OBSERVED_PER_REPLICA, DensityOfStates
from thermo.errors import SamplerError

#: recorded samples per replica when DosSettings.thin is None (thinning chosen to match);
#: MBAR, its bootstrap and the tables work on energy bins, so their cost hardly grows with it
_SAMPLES_PER_REPLICA = 32000


@dataclass(frozen=True)
class DosSettings:
    """Effort settings for building a density of states.

    Attributes
    ----------
    n_temps : ladder size passed to ``thermo.sampler.default_ladder`` (None: its default).
    n_sweeps : Monte Carlo sweeps per replica after burn-in.
    burn_in, thin : passed to ``run_tempering`` when not None; thin None keeps about
        4000 samples per replica (thin = max(2, n_sweeps // 4000)); the structure observables
        are evaluated on about 1000 of them.
    n_boot : bootstrap replicates for the uncertainties.
    betas : explicit ladder (overrides n_temps) or None.

    Units: betas in 1/E0.
    """

    n_temps: int | None = None
    n_sweeps: int = 4000
    burn_in: int | None = None
    thin: int | None = None
    n_boot: int = 40
    betas: tuple[float, ...] | None = None

    def __post_init__(self) -> None:
        if int(self.n_sweeps) < 10:
            raise SamplerError(f"DosSettings.n_sweeps = {self.n_sweeps}; need >= 10")
        if int(self.n_boot) < 2:
            raise SamplerError(f"DosSettings.n_boot = {self.n_boot}; need >= 2 for errors")


def build(n_plus: int, n_minus: int, domain: Any, core_radius: float,
          settings: DosSettings = DosSettings(), rng: np.random.Generator | None = None
          ) -> DensityOfStates:
    """Run parallel tempering (thermo.sampler) and pool it with MBAR; no caching.

    Units: core radius in the domain's length unit; betas in 1/E0.
    """
    rng = np.random.default_rng() if rng is None else rng
    if settings.betas is not None:
        betas = np.asarray(settings.betas, float)
    else:
        # rungs spaced from a short pilot run, denser where E hardly fluctuates (beta > 0),
        # so that the error of beta(E) is even along the ladder (see adaptive_ladder)
        kw = {} if settings.n_temps is None else {"n_temps": settings.n_temps}
        kw["pilot_sweeps"] = int(min(1000, max(100, settings.n_sweeps // 20)))
        betas = np.asarray(sampler.adaptive_ladder(n_plus, n_minus, core_radius, domain, rng,
                                                   **kw))
    kw = {k: getattr(settings, k) for k in ("burn_in", "thin") if getattr(settings, k) is not None}
    # successive sweeps are strongly correlated (tau_int of E is ~1-60 sweeps along the
    # ladder), so keeping every sweep adds little over ~_SAMPLES_PER_REPLICA, while the
    # stored positions and the per-sample reweighting grow with the count
    # (and never every sweep: one sweep moves each vortex once, so consecutive sweeps are
    # nearly the same configuration, tau_int >= a few sweeps)
    kw.setdefault("thin", max(2, int(settings.n_sweeps) // _SAMPLES_PER_REPLICA))
    # configurations only for the strided subset on which the structure observables are
    # evaluated (the same stride as from_tempering's), so many energies cost little memory
    s_rec = int(settings.n_sweeps) // int(kw["thin"])
    stride = max(1, s_rec // OBSERVED_PER_REPLICA)
    result = sampler.run_tempering(domain, n_plus, n_minus, betas, settings.n_sweeps,
                                   core_radius, rng, position_stride=stride, **kw)
    observables = None
    if result.positions.shape[2] >= 2:
        k = betas.size
        sub = structure_observables(result.positions.reshape(-1, *result.positions.shape[2:]),
                                    result.signs)
        observables = {}
        for name, v in sub.items():
            full = np.full((k, s_rec), np.nan)
            full[:, ::stride] = np.asarray(v).reshape(k, -1)
            observables[name] = full.reshape(-1)
    stored = dict(n_temps=int(betas.size), n_sweeps=int(settings.n_sweeps),
                  burn_in=settings.burn_in, thin=settings.thin, n_boot=int(settings.n_boot),
                  betas=[float(b) for b in betas] if settings.betas is not None else None)
    return DensityOfStates.from_tempering(result, n_boot=settings.n_boot, rng=rng,
                                          domain_key=repr(tuple(domain.key())),
                                          settings=stored, observables=observables)
