"""Building a density of states: effort settings, the tempering run, the pooling.

:func:`build` runs parallel tempering (thermo.sampler) on an adaptive ladder and pools all
replicas with MBAR into a :class:`thermo.dos.model.DensityOfStates`; :mod:`thermo.dos.cache` keeps the
result on disk. Both names are also reachable from :mod:`thermo.dos.model`.

Units: energies in E0 = rho kappa^2 / (4 pi); beta in 1/E0; core radius in the domain's length.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from thermo import sampler
from thermo.dos.model import OBSERVED_PER_REPLICA, DensityOfStates
from thermo.errors import SamplerError

#: (top, overshoot of the like-sign bound) of the ladder at reach 0; see DosSettings.reach
LADDER_ENDS = (1.0, 1.15)
#: rungs added per reach step, and the widest reach estimators ask for
REACH_RUNGS = 8
MAX_REACH = 2
#: rungs of the ladder at reach 0 (thermo.sampler.adaptive_ladder's default)
BASE_RUNGS = 24
#: burn-in sweeps of a build at least (see build)
BURN_IN = 1500
BURN_IN_PER_VORTEX = 150
#: recorded samples per replica when DosSettings.thin is None (thinning chosen to match);
#: MBAR, its bootstrap and the tables work on energy bins, so their cost hardly grows with it
_SAMPLES_PER_REPLICA = 32000
#: progress reports of each tempering run of a build (see build's ``progress``)
PROGRESS_REPORTS = 20


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
    betas : explicit ladder (overrides n_temps and reach) or None.
    reach : how far the ladder reaches past the collapse bounds (0, 1, 2, ...): the ends are
        ``LADDER_ENDS`` x 2**reach (beta~ = 1, 2, 4 at the top; 1.15, 2.3, 4.6 times the
        like-sign bound -2/max(N+, N-) at the bottom), with ``REACH_RUNGS`` more rungs per
        step. Beyond the bounds only the core holds the gas together, so the energies there
        move slowly with beta; estimators ask for a wider reach when a configuration's
        energy lies beyond the ladder (thermo.estimate).

    Units: betas in 1/E0.
    """

    n_temps: int | None = None
    n_sweeps: int = 4000
    burn_in: int | None = None
    thin: int | None = None
    n_boot: int = 40
    betas: tuple[float, ...] | None = None
    reach: int = 0

    def __post_init__(self) -> None:
        if not (isinstance(self.reach, (int, np.integer)) and 0 <= self.reach <= MAX_REACH):
            raise SamplerError(f"DosSettings.reach = {self.reach!r}; accepted: 0..{MAX_REACH}")
        if int(self.n_sweeps) < 10:
            raise SamplerError(f"DosSettings.n_sweeps = {self.n_sweeps}; need >= 10")
        if int(self.n_boot) < 2:
            raise SamplerError(f"DosSettings.n_boot = {self.n_boot}; need >= 2 for errors")


def _run_options(n_plus: int, n_minus: int, settings: DosSettings) -> dict:
    """``burn_in`` and ``thin`` of the tempering run of a build (see :func:`build`)."""
    kw = {k: getattr(settings, k) for k in ("burn_in", "thin") if getattr(settings, k) is not None}
    # successive sweeps are strongly correlated (tau_int of E is ~1-60 sweeps along the
    # ladder), so keeping every sweep adds little over ~_SAMPLES_PER_REPLICA, while the
    # stored positions and the per-sample reweighting grow with the count
    # (and never every sweep: one sweep moves each vortex once, so consecutive sweeps are
    # nearly the same configuration, tau_int >= a few sweeps)
    kw.setdefault("thin", max(2, int(settings.n_sweeps) // _SAMPLES_PER_REPLICA))
    # the replicas start from random configurations; at the clustered end a short burn-in leaves
    # each build with its own bias that no bootstrap of its samples can see (measured: the
    # scatter of independent quick builds was 1.2-1.5x their stated error with 200 sweeps of
    # burn-in, 0.9-1.0x with 1500; larger gases relax more slowly, hence the term in N)
    kw.setdefault("burn_in", max(BURN_IN, BURN_IN_PER_VORTEX * (n_plus + n_minus),
                                 int(settings.n_sweeps) // 5))
    return kw


def _main_sweeps(n_plus: int, n_minus: int, settings: DosSettings) -> int:
    """Sweeps of the tempering run of a build, burn-in included (thermo.sampler.run_tempering)."""
    kw = _run_options(n_plus, n_minus, settings)
    return int(kw["burn_in"]) + (int(settings.n_sweeps) // int(kw["thin"])) * int(kw["thin"])


class _Report:
    """The stages of a build (pilot, tempering) as one count of sweeps for ``progress``."""

    def __init__(self, progress) -> None:
        self.progress, self.sizes = progress, []

    def add(self, sweeps: int) -> None:
        self.sizes.append(int(sweeps))

    def stage(self, index: int):
        if self.progress is None:
            return None
        offset = sum(self.sizes[:index % len(self.sizes)])
        total = sum(self.sizes)

        def tell(done: int, _stage_total: int) -> None:
            if offset + done < total:     # done == total only once MBAR has pooled the runs
                self.progress(offset + int(done), total)
        return tell

    def begin(self) -> None:
        if self.progress is not None:
            self.progress(0, sum(self.sizes))

    def finish(self) -> None:
        if self.progress is not None:
            total = sum(self.sizes)
            self.progress(total, total)


def build(n_plus: int, n_minus: int, domain: Any, core_radius: float,
          settings: DosSettings = DosSettings(), rng: np.random.Generator | None = None,
          progress: Callable[[int, int], Any] | None = None) -> DensityOfStates:
    """Run parallel tempering (thermo.sampler) and pool it with MBAR; no caching.

    Parameters
    ----------
    n_plus, n_minus : vortex numbers; domain : a thermo.domains.base.Domain;
    core_radius : hard-core radius a.
    settings : DosSettings (effort); rng : source of the build (fresh when None).
    progress : callable ``progress(done, total)``, optional. Called with the Monte Carlo
        sweeps done of all (the pilot run that spaces the ladder and the tempering run, burn-in
        included): first with done == 0, then monotonically, at most
        ``2 * PROGRESS_REPORTS + 2`` times in all, the last time with done == total once the
        MBAR pooling has finished. The build is the same with or without it.

    Units: core radius in the domain's length unit; betas in 1/E0.
    """
    rng = np.random.default_rng() if rng is None else rng
    report = _Report(progress)
    if settings.betas is not None:
        betas = np.asarray(settings.betas, float)
        report.add(_main_sweeps(n_plus, n_minus, settings))
        report.begin()
    else:
        # rungs spaced from a short pilot run, denser where E hardly fluctuates (beta > 0),
        # so that the error of beta(E) is even along the ladder (see adaptive_ladder)
        scale = 2.0 ** settings.reach
        kw = {"n_temps": (settings.n_temps or BASE_RUNGS) + REACH_RUNGS * settings.reach,
              "beta_max": LADDER_ENDS[0] * scale, "overshoot": LADDER_ENDS[1] * scale}
        kw["pilot_sweeps"] = int(min(1000, max(100, settings.n_sweeps // 20)))
        report.add(sampler.pilot_burn_in(kw["pilot_sweeps"]) + kw["pilot_sweeps"])
        report.add(_main_sweeps(n_plus, n_minus, settings))
        report.begin()
        betas = np.asarray(sampler.adaptive_ladder(n_plus, n_minus, core_radius, domain, rng,
                                                   progress=report.stage(0), **kw))
    kw = _run_options(n_plus, n_minus, settings)
    # configurations only for the strided subset on which the structure observables are
    # evaluated (the same stride as from_tempering's), so many energies cost little memory
    s_rec = int(settings.n_sweeps) // int(kw["thin"])
    stride = max(1, s_rec // OBSERVED_PER_REPLICA)
    result = sampler.run_tempering(domain, n_plus, n_minus, betas, settings.n_sweeps,
                                   core_radius, rng, position_stride=stride,
                                   progress=report.stage(-1), n_reports=PROGRESS_REPORTS, **kw)
    stored = dict(n_temps=int(betas.size), n_sweeps=int(settings.n_sweeps),
                  burn_in=settings.burn_in, thin=settings.thin, n_boot=int(settings.n_boot),
                  reach=int(settings.reach) if settings.betas is None else 0,
                  betas=[float(b) for b in betas] if settings.betas is not None else None)
    dos = DensityOfStates.from_tempering(result, n_boot=settings.n_boot, rng=rng,
                                         domain_key=repr(tuple(domain.key())),
                                         settings=stored, position_stride=stride)
    report.finish()
    return dos
