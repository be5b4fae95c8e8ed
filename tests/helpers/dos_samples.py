"""Samples and densities of states shared by test_dos, test_dos_tables and test_dos_cache
(not itself a test file)."""

from __future__ import annotations

import functools
from types import SimpleNamespace

import numpy as np

from thermo.dos.build import DosSettings, build
from thermo.dos.model import DensityOfStates

#: the 2+2 neutral gas in the unit disk with core 0.01 at modest effort
SMALL_GAS = dict(n_plus=2, n_minus=2, core_radius=0.01)
SMALL_GAS_SETTINGS = DosSettings(n_temps=12, n_sweeps=2000, n_boot=20)


def one_vortex_result(rng: np.random.Generator, betas, n_samples: int) -> SimpleNamespace:
    """Exact canonical samples of one vortex in the unit disk (no core).

    [exact] E = ln(1 - |u|^2) = ln x with x = 1 - |u|^2 uniform at beta = 0 (area
    measure), so p_beta(x) = (1 - beta) x^(-beta): x = U^(1/(1 - beta)). Hence
    <E> = -1/(1 - beta), Var E = 1/(1 - beta)^2, g(E) = e^E and beta_micro(E) = 1.
    """
    betas = np.asarray(betas, float)
    x = rng.random((len(betas), n_samples)) ** (1.0 / (1.0 - betas[:, None]))
    return SimpleNamespace(betas=betas, energies=np.log(x), n_plus=1, n_minus=0,
                           core_radius=0.0, domain=None)


def one_vortex_dos(seed: int = 11, n_boot: int = 30) -> DensityOfStates:
    """MBAR pooling of exact one-vortex samples on a 10-rung ladder from -3 to 0.7."""
    rng = np.random.default_rng(seed)
    res = one_vortex_result(rng, np.linspace(-3.0, 0.7, 10), 1200)
    return DensityOfStates.from_tempering(res, n_boot=n_boot, rng=rng)


@functools.lru_cache(maxsize=1)
def small_gas_dos() -> DensityOfStates:
    """The 2+2 gas built once per test process with the real sampler (no disk cache).

    The same as ``load_or_build(..., seed=3, settings=SMALL_GAS_SETTINGS)`` would build.
    """
    from thermo.domains.disk import Disk

    return build(SMALL_GAS["n_plus"], SMALL_GAS["n_minus"], Disk(), SMALL_GAS["core_radius"],
                 SMALL_GAS_SETTINGS, np.random.default_rng(3))
