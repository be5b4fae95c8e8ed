"""Simulated versus measured vortex statistics, side by side, with tests of difference.

Both sides are lists of shots, each shot a configuration ``(positions (N, 2), signs
(N,))`` in the thermo convention (positions scaled by the domain size). For every
per-shot quantity the table gives the two ensemble means, their difference with a 95%
bootstrap interval (shots resampled with replacement on each side independently,
percentile interval), the two-sample Kolmogorov–Smirnov p-value of the per-shot
distributions and a permutation-test p-value for the difference of the means. Shots
where a quantity is undefined (energy per vortex of an empty shot, structure
observables of a shot with fewer than two vortices) are left out of that quantity
only; ``n_simulation`` / ``n_measured`` in each row say how many shots were used.

beta is not a per-shot quantity: each side gets one ensemble estimate from
:mod:`thermo.estimate`; its difference, interval and p-value come from the two stated
standard errors (normal approximation), and the KS column is empty for it.

The figure of a comparison is drawn on the field side (``gpe.figures.thermometry``): numerics
here never import a figure module.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np
from scipy import stats

from thermo import classify
from thermo import energy as energy_mod
from thermo.energy import validate_configuration
from thermo.errors import ConfigurationError, ThermoError
from thermo.estimate import estimate_ensemble
from thermo.quantities import QUANTITIES


class CompareError(ThermoError, ValueError):
    """The two ensembles cannot be compared as given."""


Configuration = tuple[np.ndarray, np.ndarray]

#: The per-shot quantities compared, in the order of the table rows (units and meanings in
#: thermo.quantities.QUANTITIES); beta follows them as an ensemble estimate.
ROWS = ("n_plus", "n_minus", "energy_per_vortex", "dipole_moment", "c1", "dipole_fraction",
        "cluster_fraction", "free_fraction", "mean_nn_distance")
BETA_UNIT = QUANTITIES["beta"].unit
_STRUCTURE_KEYS = ("dipole_moment", "c1", "dipole_fraction", "cluster_fraction",
                   "free_fraction", "mean_nn_distance")


@dataclass(frozen=True)
class CompareRow:
    """One line of the comparison table.

    Attributes
    ----------
    quantity, unit : name (see ``ROWS``) and unit.
    simulation, measured : ensemble means (beta: ensemble estimates).
    difference : simulation - measured.
    ci95_low, ci95_high : 95% interval of the difference.
    p_ks : two-sample Kolmogorov–Smirnov p-value (NaN for beta).
    p_permutation : permutation-test p-value of the difference of means (beta: normal
        approximation from the standard errors).
    n_simulation, n_measured : shots that entered.
    """

    quantity: str
    unit: str
    simulation: float
    measured: float
    difference: float
    ci95_low: float
    ci95_high: float
    p_ks: float
    p_permutation: float
    n_simulation: int
    n_measured: int

    @property
    def significant(self) -> bool:
        """True if the 95% interval excludes 0 or a p-value is below 0.05."""
        ps = [p for p in (self.p_ks, self.p_permutation) if np.isfinite(p)]
        outside = np.isfinite(self.ci95_low) and (self.ci95_low > 0 or self.ci95_high < 0)
        return bool(outside or any(p < 0.05 for p in ps))


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_ensembles`.

    Attributes
    ----------
    rows : the table, one :class:`CompareRow` per quantity.
    per_shot : ``{quantity: (simulation values, measured values)}`` per-shot arrays
        (NaN where undefined).
    simulation, measured : the configurations compared (kept for the figure).
    domain, core_radius : as given.
    labels : names of the two sides (for the figure and the writers).
    notes : remarks (e.g. why beta is missing).

    Units: as in thermo.quantities; positions in units of the domain size.
    """

    rows: tuple[CompareRow, ...]
    per_shot: dict[str, tuple[np.ndarray, np.ndarray]]
    simulation: tuple[Configuration, ...]
    measured: tuple[Configuration, ...]
    domain: Any
    core_radius: float
    labels: tuple[str, str] = ("simulation", "measured")
    notes: tuple[str, ...] = field(default=())

    def row(self, quantity: str) -> CompareRow:
        for r in self.rows:
            if r.quantity == quantity:
                return r
        raise KeyError(f"no row {quantity!r}; rows: {[r.quantity for r in self.rows]}")


def _check_configs(configs: Sequence[Any], side: str) -> list[Configuration]:
    out = []
    for k, item in enumerate(configs):
        try:
            pos, s = item
        except (TypeError, ValueError) as exc:
            raise CompareError(f"{side} shot {k}: expected (positions, signs)") from exc
        pos = np.asarray(pos, dtype=np.float64).reshape(-1, 2)
        s = np.asarray(s).reshape(-1)
        if len(s) != len(pos) or not np.all(np.isin(s, (-1, 1))):
            raise CompareError(
                f"{side} shot {k}: signs must be {len(pos)} values of +1/-1; got {s!r}")
        if not np.all(np.isfinite(pos)):
            raise CompareError(f"{side} shot {k}: positions contain NaN or infinity")
        out.append((pos, s.astype(np.int8)))
    if not out:
        raise CompareError(f"the {side} side has no shots")
    return out


def _groups(configs: Sequence[Configuration]) -> dict[tuple[int, ...], list[int]]:
    """Shots grouped by their sign vector after sorting vortices + first (for batching)."""
    groups: dict[tuple[int, ...], list[int]] = {}
    for k, (_, s) in enumerate(configs):
        groups.setdefault(tuple(sorted(s.tolist(), reverse=True)), []).append(k)
    return groups


def shot_statistics(configurations: Sequence[Configuration], domain: Any
                    ) -> dict[str, np.ndarray]:
    """Per-shot quantities of ``ROWS`` for a list of configurations.

    Returns
    -------
    dict name -> (S,) float array; NaN where a quantity is undefined for a shot.

    Units: as in thermo.quantities.
    """
    configs = _check_configs(configurations, "input")
    n_shots = len(configs)
    out = {k: np.full(n_shots, np.nan) for k in ROWS}
    for key, idx in _groups(configs).items():
        signs = np.array(key, dtype=np.int64)
        n = len(signs)
        # sort each shot's vortices + first so that the group shares one sign vector
        pos = np.empty((len(idx), n, 2))
        for j, k in enumerate(idx):
            order = np.argsort(-configs[k][1], kind="stable")
            pos[j] = configs[k][0][order]
        out["n_plus"][idx] = np.count_nonzero(signs > 0)
        out["n_minus"][idx] = np.count_nonzero(signs < 0)
        if n >= 1:
            e = np.asarray(energy_mod.energy_batch(pos, signs, domain), dtype=np.float64)
            out["energy_per_vortex"][idx] = e / n
        if n >= 2:
            obs = classify.structure_observables(pos, signs)
            for name in _STRUCTURE_KEYS:
                out[name][idx] = obs[name]
    return out


def _bootstrap_diff(a: np.ndarray, b: np.ndarray, n_boot: int, rng: np.random.Generator
                    ) -> tuple[float, float]:
    """Percentile 95% interval of mean(a) - mean(b), shots resampled on each side."""
    ia = rng.integers(0, len(a), size=(n_boot, len(a)))
    ib = rng.integers(0, len(b), size=(n_boot, len(b)))
    d = a[ia].mean(axis=1) - b[ib].mean(axis=1)
    lo, hi = np.quantile(d, [0.025, 0.975])
    return float(lo), float(hi)


def _mean_diff(x: np.ndarray, y: np.ndarray, axis: int = -1) -> np.ndarray:
    return np.mean(x, axis=axis) - np.mean(y, axis=axis)


def _quantity_row(name: str, a: np.ndarray, b: np.ndarray, n_boot: int,
                  n_permutations: int, rng: np.random.Generator) -> CompareRow:
    a = a[np.isfinite(a)]
    b = b[np.isfinite(b)]
    unit = QUANTITIES[name].unit
    if len(a) < 2 or len(b) < 2:
        nan = math.nan
        return CompareRow(name, unit, float(np.mean(a)) if len(a) else nan,
                          float(np.mean(b)) if len(b) else nan, nan, nan, nan, nan, nan,
                          len(a), len(b))
    lo, hi = _bootstrap_diff(a, b, n_boot, rng)
    if np.ptp(np.concatenate([a, b])) == 0:
        # both sides constant and equal: no test can tell them apart
        p_ks = p_perm = 1.0
    else:
        p_ks = float(stats.ks_2samp(a, b).pvalue)
        p_perm = float(stats.permutation_test(
            (a, b), _mean_diff, permutation_type="independent", vectorized=True,
            n_resamples=n_permutations, alternative="two-sided", rng=rng).pvalue)
    return CompareRow(name, unit, float(a.mean()), float(b.mean()),
                      float(a.mean() - b.mean()), lo, hi, p_ks, p_perm, len(a), len(b))


def _beta_row(sim: Sequence[Configuration], meas: Sequence[Configuration], domain: Any,
              core_radius: float, beta_options: dict[str, Any]
              ) -> tuple[CompareRow | None, list[str]]:
    """beta of each side from thermo.estimate.estimate_ensemble.

    Shots with fewer than two vortices carry no temperature, and shots that break the
    hard-core model (a vortex within a of the wall, two within 2a) have no weight in it;
    both are left out of this row only, counted in a note. Returns (row or None, notes).
    """
    notes = []
    results = []
    def fits_hard_core(c: Configuration) -> bool:
        try:
            validate_configuration(c[0], c[1], domain, core_radius)
        except ConfigurationError:
            return False
        return True

    for side, configs in (("simulation", sim), ("measured", meas)):
        usable = [c for c in configs if len(c[1]) >= 2]
        if len(usable) < len(configs):
            notes.append(f"beta ({side}): {len(configs) - len(usable)} shot(s) with fewer "
                         f"than two vortices left out")
        n_before = len(usable)
        usable = [c for c in usable if fits_hard_core(c)]
        if len(usable) < n_before:
            notes.append(f"beta ({side}): {n_before - len(usable)} shot(s) left out: a vortex "
                         f"within the core radius {core_radius:g} of the wall or two within "
                         f"2 core radii (hard-core model); thermo.data.degrade with core_radius "
                         f"and thermo.data.measured with core_um avoid this")
        if not usable:
            return None, notes + [f"beta left out: no {side} shot has two vortices"]
        results.append((len(usable), estimate_ensemble(usable, domain, core_radius,
                                                            **beta_options)))
    (n_a, res_a), (n_b, res_b) = results
    ba, bb = float(res_a.beta), float(res_b.beta)
    se = math.hypot(float(res_a.stderr), float(res_b.stderr))
    diff = ba - bb
    z = float(stats.norm.ppf(0.975))
    if not (np.isfinite(diff) and np.isfinite(se) and se > 0):
        nan = math.nan
        return CompareRow("beta", BETA_UNIT, ba, bb, diff, nan, nan, nan, nan, n_a, n_b), \
            notes + ["beta difference has no interval: an estimate is undefined"]
    p = float(2 * stats.norm.sf(abs(diff) / se))
    for side, res in (("simulation", res_a), ("measured", res_b)):
        if getattr(res, "verdict", ""):
            notes.append(f"beta ({side}): {res.verdict}")
    return CompareRow("beta", BETA_UNIT, ba, bb, diff, diff - z * se, diff + z * se,
                      math.nan, p, n_a, n_b), notes


def compare_ensembles(simulation: Sequence[Configuration], measured: Sequence[Configuration],
                      domain: Any, core_radius: float, *, n_boot: int = 2000,
                      n_permutations: int = 2000, seed: int | np.random.Generator = 0,
                      include_beta: bool = True, beta_options: dict[str, Any] | None = None,
                      labels: tuple[str, str] = ("simulation", "measured")) -> Comparison:
    """Compare two ensembles of vortex configurations in the same domain.

    Parameters
    ----------
    simulation, measured : lists of ``(positions (N, 2), signs (N,))``, one per shot
        (e.g. frames of several seeded runs in a time window; measured shots).
    domain : thermo domain (thermo.domains.Disk / Box) both sides live in.
    core_radius : vortex core radius, scaled units (used by the beta estimate).
    n_boot : bootstrap resamples for the 95% intervals.
    n_permutations : resamples of the permutation test.
    seed : seed or generator; the whole table is reproducible from it.
    include_beta : add the beta row (thermo.estimate.estimate_ensemble; builds or
        loads a density of states for every (N+, N-) present, which can take minutes).
    beta_options : keywords for that estimate (e.g. ``cache_dir``, ``settings``, ``seed``).
    labels : names of the two sides.

    Returns
    -------
    Comparison

    Units: positions in units of the domain size; see ``ROWS`` for the rows.
    """
    if not (np.isfinite(core_radius) and core_radius > 0):
        raise CompareError(f"core_radius must be a positive number (domain units); "
                           f"got {core_radius}")
    if n_boot < 100 or n_permutations < 100:
        raise CompareError(f"n_boot and n_permutations must be >= 100 for a 95% interval; "
                           f"got {n_boot}, {n_permutations}")
    sim = _check_configs(simulation, labels[0])
    meas = _check_configs(measured, labels[1])
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    a = shot_statistics(sim, domain)
    b = shot_statistics(meas, domain)
    rows = [_quantity_row(name, a[name], b[name], n_boot, n_permutations, rng)
            for name in ROWS]
    notes = []
    if include_beta:
        beta_row, beta_notes = _beta_row(sim, meas, domain, core_radius, beta_options or {})
        if beta_row is not None:
            rows.insert(3, beta_row)
        notes.extend(beta_notes)
    return Comparison(rows=tuple(rows), per_shot={k: (a[k], b[k]) for k in ROWS},
                      simulation=tuple(sim), measured=tuple(meas), domain=domain,
                      core_radius=float(core_radius), labels=tuple(labels), notes=tuple(notes))


# ---------------------------------------------------------------- writers

_COLUMNS = ("quantity", "unit", "simulation", "measured", "difference", "ci95_low",
            "ci95_high", "p_ks", "p_permutation", "n_simulation", "n_measured")


def write_csv(comparison: Comparison, path: str | Path) -> Path:
    """Write the table as CSV (one row per quantity; notes as leading # lines)."""
    path = Path(path)
    with path.open("w", encoding="utf-8", newline="") as fh:
        fh.write(f"# {comparison.labels[0]} vs {comparison.labels[1]}; difference = "
                 f"{comparison.labels[0]} - {comparison.labels[1]}\n")
        for note in comparison.notes:
            fh.write(f"# {note}\n")
        writer = csv.writer(fh)
        writer.writerow(_COLUMNS)
        for r in comparison.rows:
            d = asdict(r)
            writer.writerow([d[c] if not isinstance(d[c], float) else f"{d[c]:.6g}"
                             for c in _COLUMNS])
    return path


def _json_safe(v: Any) -> Any:
    if isinstance(v, float) and not math.isfinite(v):
        return None
    return v


def comparison_to_dict(comparison: Comparison) -> dict[str, Any]:
    """The table as plain JSON-ready data (NaN -> None)."""
    return {
        "labels": list(comparison.labels),
        "difference": f"{comparison.labels[0]} - {comparison.labels[1]}",
        "core_radius": comparison.core_radius,
        "notes": list(comparison.notes),
        "rows": [{k: _json_safe(v) for k, v in asdict(r).items()} | {"significant": r.significant}
                 for r in comparison.rows],
    }


def write_json(comparison: Comparison, path: str | Path) -> Path:
    """Write :func:`comparison_to_dict` as JSON."""
    path = Path(path)
    path.write_text(json.dumps(comparison_to_dict(comparison), indent=2) + "\n",
                    encoding="utf-8")
    return path


# ---------------------------------------------------------------- figure

def pooled_pair_correlation(configurations: Sequence[Configuration], domain: Any,
                            r_max: float, bins: int = 25, n_reference: int = 100_000,
                            reference_seed: int = 1) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """g_like(r), g_opposite(r) of shots with different vortex numbers, pooled.

    thermo.classify.pair_correlation needs one sign vector per call, so shots are grouped
    by their (sorted) signs; every call gets the same reference sample (same seed, same
    ``r_max``), so each group's g is counts / expected with a common reference and the
    pooled g is the pair-count-weighted mean of the group g's.

    Returns (r centres, g_like, g_opposite). Units: r in units of the domain size.
    """
    num_l = np.zeros(bins)
    den_l = np.zeros(bins)
    num_o = np.zeros(bins)
    den_o = np.zeros(bins)
    r = np.full(bins, np.nan)
    for key, idx in _groups(configurations).items():
        signs = np.array(key, dtype=np.int64)
        n_p, n_m = int(np.sum(signs > 0)), int(np.sum(signs < 0))
        if n_p + n_m < 2:
            continue
        pos = np.stack([configurations[k][0][np.argsort(-configurations[k][1], kind="stable")]
                        for k in idx])
        pc = classify.pair_correlation(pos, signs, domain, bins=bins, r_max=r_max,
                                       rng=np.random.default_rng(reference_seed),
                                       n_reference=n_reference)
        r = pc.r
        w_l = len(idx) * (n_p * (n_p - 1) + n_m * (n_m - 1)) / 2
        w_o = len(idx) * n_p * n_m
        for g, w, num, den in ((pc.g_like, w_l, num_l, den_l), (pc.g_opposite, w_o, num_o, den_o)):
            ok = np.isfinite(g) & (w > 0)
            num[ok] += w * g[ok]
            den[ok] += w
    with np.errstate(invalid="ignore", divide="ignore"):
        return r, np.where(den_l > 0, num_l / den_l, np.nan), np.where(den_o > 0, num_o / den_o, np.nan)
