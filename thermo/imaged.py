"""Thermometry through an imaging model: reference ensembles pushed through the same model.

A measured table records configurations *as imaged* (thermo.data.degrade): positions blurred,
close pairs lost or merged, vortices near the wall missed, some signs wrong. Fitting them with
the Boltzmann weights of the clean gas gives the temperature of the imaged configurations, not
of the gas. Here the reference ensembles are imaged too: the configurations kept by a density
of states (``DensityOfStates.sample_positions``, about 1000 per rung) go through the model and
the admission rule (thermo.admission), their energies as imaged are reweighted to every beta of
the ladder (MBAR weights, every bootstrap replicate), and thermo.estimate matches the shots'
imaged energies to these curves. In the limit of no imaging this is the ordinary maximum
likelihood (the score equation in the energy).

Which gas stands behind an imaged shot (:func:`reference_groups`): sign errors keep the vortex
number N and losses lower it. The reference gas of a shot has N_true vortices, the number whose
expected count after imaging (measured on uniform configurations, beta = 0) is the shot's N; and
one net charge Q for the whole table, the table's mean imbalance corrected for sign errors
(<n+ - n-> = (1 - 2 p) Q) and rounded. This is an assumption (one charge per table, losses
independent of beta) and reports say that the estimate allowed for an imaging model.

Units: positions and lengths scaled by the domain size; energies in E0.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from thermo.admission import admit
from thermo.curves import Curves
from thermo.data.degrade import ImagingModel, degrade
from thermo.dos.model import DensityOfStates
from thermo.energy import energy_batch
from thermo.errors import ConfigurationError
from thermo.sampler import run_tempering

#: configurations per rung imaged for the reference curves (of the ~1000 kept)
PER_RUNG = 500
#: uniform configurations used to measure the expected loss of vortices
_LOSS_DRAWS = 200
_CURVES: dict[tuple, Curves] = {}


def check_model(model: Any) -> ImagingModel:
    """An ImagingModel, or a clear error naming what is wrong."""
    if not isinstance(model, ImagingModel):
        raise ConfigurationError(f"imaging = {model!r}: expected a "
                                 "thermo.data.degrade.ImagingModel")
    return model


def imaged_energies(configs, domain, core_radius: float, model: ImagingModel,
                    rng: np.random.Generator) -> np.ndarray:
    """Energies of configurations as the imaging model and the admission rule record them.

    ``configs`` is a sequence of (positions, signs); the imaged configurations are grouped by
    their vortex number so the energies are computed in batches (thermo.energy.energy_batch).
    Units: E0.
    """
    kept = []
    for pos, signs in configs:
        p, sg = degrade(pos, signs, domain, model, rng, core_radius=0.0)
        kept.append(admit(p, sg, domain, core_radius))
    out = np.zeros(len(kept))
    by_n: dict[int, list[int]] = {}
    for i, k in enumerate(kept):
        by_n.setdefault(len(k.signs), []).append(i)
    for n, idx in by_n.items():
        if n == 0:
            continue
        out[idx] = energy_batch(np.stack([kept[i].positions for i in idx]),
                                np.stack([kept[i].signs for i in idx]), domain)
    return out


def _expected_count(n: int, domain, core_radius: float, model: ImagingModel,
                    rng: np.random.Generator) -> float:
    """Mean number of vortices left of n uniform ones after imaging and admission."""
    if model.edge_loss == 0 and model.resolution == 0:
        return float(n)
    run = run_tempering(domain, n - n // 2, n // 2, [0.0], 4 * _LOSS_DRAWS, core_radius, rng,
                        burn_in=50, thin=4)
    kept = []
    for p in run.positions[0][:_LOSS_DRAWS]:
        q, s = degrade(p, run.signs, domain, model, rng, core_radius=0.0)
        kept.append(len(admit(q, s, domain, core_radius).signs))
    return float(np.mean(kept))


def reference_groups(grouped: dict, model: ImagingModel, domain, core_radius: float
                     ) -> dict[tuple[int, int], tuple[int, int]]:
    """Observed (n+, n-) -> (N+, N-) of the reference gas (see the module docstring)."""
    check_model(model)
    p = model.sign_flip
    if p >= 0.5:
        raise ConfigurationError(f"imaging model: sign_flip = {p:g}; with half the signs or "
                                 "more recorded wrongly the charge cannot be recovered "
                                 "(accepted: 0 <= sign_flip < 0.5)")
    shots = sum(len(v[1]) for v in grouped.values())
    imbalance = sum((k[0] - k[1]) * len(v[1]) for k, v in grouped.items()) / shots
    q = int(round(imbalance / (1.0 - 2.0 * p)))
    rng = np.random.default_rng(12345)
    out = {}
    for key in grouped:
        n_obs = sum(key)
        n_true = n_obs
        if model.edge_loss > 0 or model.resolution > 0:
            for _ in range(4):          # N_true whose expected imaged count is n_obs
                got = _expected_count(max(n_true, 2), domain, core_radius, model, rng)
                n_next = int(round(n_obs * max(n_true, 2) / max(got, 1e-9)))
                if n_next == n_true:
                    break
                n_true = n_next
        qq = q if (n_true + q) % 2 == 0 else q + (1 if key[0] - key[1] > q else -1)
        qq = int(np.clip(qq, -n_true, n_true))
        out[key] = ((n_true + qq) // 2, (n_true - qq) // 2)
    return out


def imaged_curves(dos: DensityOfStates, domain, core_radius: float, model: ImagingModel,
                  seed: int = 0) -> Curves:
    """Canonical mean and variance of the imaged energy along the ladder of ``dos``.

    Memoised per (density of states, model, seed, core) within the process.
    """
    check_model(model)
    memo = (id(dos), dos.betas.tobytes(), model, int(seed), float(core_radius))
    if memo in _CURVES:
        return _CURVES[memo]
    if dos.sample_positions.shape[0] == 0:
        raise ConfigurationError("this density of states kept no configurations; rebuild it "
                                 "(cache format 5 or later) to use an imaging model")
    k = dos.betas.size
    per = dos.sample_index.size // k
    step = max(1, per // PER_RUNG)
    pick = np.arange(0, dos.sample_index.size, step)
    rng = np.random.default_rng([int(seed), dos.n_plus, dos.n_minus])
    signs = np.concatenate([np.ones(dos.n_plus, int), -np.ones(dos.n_minus, int)])
    t = imaged_energies([(dos.sample_positions[i].astype(float), signs) for i in pick], domain,
                        core_radius, model, rng)
    grid = dos.tables["beta"]
    central, reps = dos.subset_averages(dos.sample_index[pick], np.stack([t, t * t]), grid)
    curves = Curves(beta=grid, mean=central[:, 0],
                    var=np.maximum(central[:, 1] - central[:, 0] ** 2, 1e-300),
                    mean_reps=reps[:, :, 0])
    _CURVES[memo] = curves
    return curves
