"""Simulated versus measured vortex statistics, side by side, with tests of difference.

Each side is a :class:`Side`: its shots (``(positions (N, 2), signs (N,))`` in the thermo
convention, positions scaled by *that side's* domain size), its domain, and the independent
series the shots belong to. The frames of one simulated run are one series (correlated in
time); every measured shot is a series of its own; different runs (seeds) are independent.

For every per-shot quantity the table gives the two ensemble means, their difference with a 95%
interval and two p-values, all computed on independent units (:mod:`thermo.data.units`: the
variance of each side's mean and a Kolmogorov–Smirnov test from the effective sizes of its series);
each row says how many shots entered and how many effectively independent values they are worth,
and when a side has too few for a test the row has no interval and a note says why. Shots where a
quantity is undefined (energy per vortex of an empty shot, structure observables of a shot with
fewer than two vortices) are left out of that quantity only.

beta is not a per-shot quantity: each side's beta~ N comes from its own ensemble estimate (its own
domain, core radius and imaging model; :func:`ensemble_beta`, or gpe.run.thermometry's records),
and the beta_n row combines their two intervals.

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
from thermo.data.units import SeriesSample, difference_of_means, series_weights
from thermo.energy import validate_configuration
from thermo.errors import ConfigurationError, ThermoError
from thermo.estimate import estimate_ensemble
from thermo.jsontext import strict_json
from thermo.quantities import QUANTITIES


class CompareError(ThermoError, ValueError):
    """The two ensembles cannot be compared as given."""


Configuration = tuple[np.ndarray, np.ndarray]

#: The per-shot quantities compared, in the order of the table rows (units and meanings in
#: thermo.quantities.QUANTITIES); beta~ N follows them as an ensemble estimate.
ROWS = ("n_plus", "n_minus", "energy_per_vortex", "dipole_moment", "c1", "dipole_fraction",
        "cluster_fraction", "free_fraction", "mean_nn_distance")
BETA_N_UNIT = QUANTITIES["beta_n"].unit
_STRUCTURE_KEYS = ("dipole_moment", "c1", "dipole_fraction", "cluster_fraction",
                   "free_fraction", "mean_nn_distance")


@dataclass(frozen=True)
class CompareRow:
    """One line of the comparison table.

    Attributes
    ----------
    quantity, unit : name (see ``ROWS``, or "beta_n") and unit.
    simulation, measured : ensemble means (beta_n: ensemble estimates).
    difference : simulation - measured.
    ci95_low, ci95_high : 95% interval of the difference (NaN when no test could be made).
    p_ks : Kolmogorov–Smirnov p-value with effective sizes (NaN for beta_n).
    p_mean : p-value of the difference of means (thermo.data.units; beta_n: normal
        approximation from the two intervals).
    n_simulation, n_measured : shots that entered.
    n_eff_simulation, n_eff_measured : how many independent shots they are worth.
    """

    quantity: str
    unit: str
    simulation: float
    measured: float
    difference: float
    ci95_low: float
    ci95_high: float
    p_ks: float
    p_mean: float
    n_simulation: int
    n_measured: int
    n_eff_simulation: float
    n_eff_measured: float

    @property
    def significant(self) -> bool:
        """True if the 95% interval excludes 0 or a p-value is below 0.05."""
        ps = [p for p in (self.p_ks, self.p_mean) if np.isfinite(p)]
        outside = np.isfinite(self.ci95_low) and (self.ci95_low > 0 or self.ci95_high < 0)
        return bool(outside or any(p < 0.05 for p in ps))


@dataclass(frozen=True)
class Side:
    """One side of a comparison: shots in their own domain and their independent series.

    Attributes
    ----------
    configurations : tuple of ``(positions (N, 2), signs (N,))``, positions in units of
        ``domain``'s size.
    domain : thermo domain (thermo.domains.Disk / Box) the shots live in.
    series : (S,) ids; shots with one id form one series in time order (the frames of a run).

    Units: positions in units of the domain size.
    """

    configurations: tuple[Configuration, ...]
    domain: Any
    series: np.ndarray

    @classmethod
    def of_shots(cls, configurations: Sequence[Any], domain: Any, label: str = "measured"
                 ) -> "Side":
        """Independent shots (a measured table)."""
        configs = _check_configs(configurations, label)
        return cls(tuple(configs), domain, np.arange(len(configs)))

    @classmethod
    def of_runs(cls, runs: Sequence[Sequence[Any]], domain: Any, label: str = "simulation"
                ) -> "Side":
        """The frames of several runs, each run's frames in time order; runs independent."""
        configs, series = [], []
        for k, frames in enumerate(runs):
            configs.extend(frames)
            series.extend([k] * len(frames))
        return cls(tuple(_check_configs(configs, label)), domain, np.asarray(series))


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_ensembles`.

    Attributes
    ----------
    rows : the table, one :class:`CompareRow` per quantity.
    per_shot : ``{quantity: (simulation values, measured values)}`` per-shot arrays
        (NaN where undefined).
    simulation, measured : the two :class:`Side` compared (kept for the figure).
    labels : names of the two sides (for the figure and the writers).
    notes : remarks (tests not made, bounds, correlated series).
    beta : the two ensemble records of beta~ N, or None.

    Units: as in thermo.quantities; positions in units of each side's domain size.
    """

    rows: tuple[CompareRow, ...]
    per_shot: dict[str, tuple[np.ndarray, np.ndarray]]
    simulation: Side
    measured: Side
    labels: tuple[str, str] = ("simulation", "measured")
    notes: tuple[str, ...] = field(default=())
    beta: tuple[dict, dict] | None = None

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


def _quantity_row(name: str, a: np.ndarray, b: np.ndarray, sim: "Side", meas: "Side",
                  labels: tuple[str, str]) -> tuple[CompareRow, str]:
    """One per-shot quantity: the difference tested on independent units (thermo.data.units)."""
    d = difference_of_means(SeriesSample.of(a, sim.series), SeriesSample.of(b, meas.series),
                            labels)
    row = CompareRow(name, QUANTITIES[name].unit, d.mean_a, d.mean_b, d.difference, *d.ci95,
                     d.p_ks, d.p_mean, d.n_a, d.n_b, d.n_eff_a, d.n_eff_b)
    return row, (f"{name}: {d.note}" if d.note else "")


def _half_widths(rec: dict) -> tuple[float, float]:
    lo, hi = rec["beta_n_ci95"]
    return float(rec["beta_n"]) - float(lo), float(hi) - float(rec["beta_n"])


def _beta_row(sim: dict, meas: dict, labels: tuple[str, str]) -> tuple[CompareRow, list[str]]:
    """beta~ N of the two sides, each estimated on its own (its domain, core and weights).

    The records hold ``beta_n``, ``beta_n_ci95``, ``bound`` and ``n_effective`` (as
    gpe.run.thermometry's ensemble records or :func:`ensemble_beta`). The difference's interval
    combines the two sides' asymmetric 95% half-widths in quadrature, the lower end from the
    first side's lower and the second's upper half-width [common practice for asymmetric
    errors]; its p-value is the normal one of the half-width on the side of zero. A bound on
    either side leaves the difference without an interval (a note says so).
    """
    nan = math.nan
    vals = [float(r.get("beta_n", nan)) if r.get("beta_n") is not None else nan
            for r in (sim, meas)]
    n_eff = [float(r.get("n_effective", nan) or nan) for r in (sim, meas)]
    counts = [int(r.get("frames", r.get("n_configs", 0)) or 0) for r in (sim, meas)]
    notes = []
    for label, rec in zip(labels, (sim, meas)):
        if rec.get("bound"):
            sign = "<" if rec["bound"] == "upper" else ">"
            notes.append(f"beta_n ({label}): a bound, beta~N {sign} {float(rec['beta_n']):.3g} "
                         f"(the energies lie beyond the sampled ladder); no difference interval")
        elif rec.get("verdict") and not math.isfinite(float(rec.get("beta_n", nan) or nan)):
            notes.append(f"beta_n ({label}): {rec['verdict']}")
    diff = vals[0] - vals[1]
    if notes or not math.isfinite(diff):
        return CompareRow("beta_n", BETA_N_UNIT, vals[0], vals[1], diff, nan, nan, nan, nan,
                          *counts, *n_eff), notes
    (lo_a, hi_a), (lo_b, hi_b) = _half_widths(sim), _half_widths(meas)
    down, up = math.hypot(lo_a, hi_b), math.hypot(hi_a, lo_b)
    z = float(stats.norm.ppf(0.975))
    sigma = (down if diff > 0 else up) / z
    p = float(2 * stats.norm.sf(abs(diff) / sigma)) if sigma > 0 else nan
    return CompareRow("beta_n", BETA_N_UNIT, vals[0], vals[1], diff, diff - down, diff + up,
                      nan, p, *counts, *n_eff), notes


def ensemble_beta(side: "Side", core_radius: float, **options: Any) -> dict:
    """beta~ N of one side on its own: thermo.estimate.estimate_ensemble with every series
    weighted by 1/tau_int of its energy per vortex (so correlated frames count as the
    independent shots they are worth) and shots of fewer than two vortices, or outside the
    hard-core model, left out (counted in ``left_out``).

    Returns a record with ``beta_n``, ``beta_n_ci95``, ``bound``, ``n_effective``, ``frames``,
    ``left_out``. Units: beta~ N dimensionless.
    """
    keep, series = [], []
    for (pos, s), sid in zip(side.configurations, side.series):
        if len(s) < 2:
            continue
        try:
            validate_configuration(pos, s, side.domain, core_radius)
        except ConfigurationError:
            continue
        keep.append((pos, s))
        series.append(sid)
    if not keep:
        return {"beta_n": math.nan, "beta_n_ci95": [math.nan, math.nan], "bound": None,
                "n_effective": 0.0, "frames": 0, "left_out": len(side.configurations),
                "verdict": "no shot with two vortices inside the hard-core model"}
    series = np.asarray(series)
    weights = np.empty(len(keep))
    for sid in dict.fromkeys(series.tolist()):   # the weights of gpe.run.thermometry
        idx = np.flatnonzero(series == sid)
        weights[idx] = series_weights([keep[i] for i in idx], side.domain)[0]
    est = estimate_ensemble(keep, side.domain, core_radius, weights=weights, **options)
    return {"beta_n": float(est.beta_n), "beta_n_ci95": [float(v) for v in est.beta_n_ci95],
            "bound": est.bound, "n_effective": float(est.n_effective), "frames": len(keep),
            "left_out": len(side.configurations) - len(keep),
            "verdict": est.verdict}


def compare_ensembles(simulation: "Side", measured: "Side", *,
                      beta: tuple[dict, dict] | None = None,
                      labels: tuple[str, str] = ("simulation", "measured")) -> Comparison:
    """Compare two ensembles of vortex configurations of the same domain shape.

    Parameters
    ----------
    simulation, measured : :class:`Side` -- shots in their own domain (positions scaled by
        that domain's size), grouped in independent series (the frames of one run form one
        series; every measured shot is its own).
    beta : the two sides' ensemble records of beta~ N (:func:`ensemble_beta`, or
        gpe.run.thermometry's), each estimated with its own domain and core; None leaves the
        beta_n row out.
    labels : names of the two sides.

    Returns
    -------
    Comparison

    Units: positions in units of each side's domain size; see ``ROWS`` for the rows.
    """
    if simulation.domain.kind != measured.domain.kind:
        raise CompareError(f"the {labels[1]} domain is a {measured.domain.kind}, the "
                           f"{labels[0]}'s a {simulation.domain.kind}; compare needs one shape")
    sizes = list(zip(measured.domain.key()[1:], simulation.domain.key()[1:]))
    if any(abs(m - s) > 0.02 * abs(s) for m, s in sizes):
        raise CompareError(f"the {labels[1]} {comparison_domain_text(measured.domain)} differs "
                           f"from the {labels[0]}'s {comparison_domain_text(simulation.domain)} "
                           f"by more than 2%; compare needs the same proportions")
    a = shot_statistics(simulation.configurations, simulation.domain)
    b = shot_statistics(measured.configurations, measured.domain)
    rows, notes = [], []
    for name in ROWS:
        row, note = _quantity_row(name, a[name], b[name], simulation, measured, labels)
        rows.append(row)
        if note:
            notes.append(note)
    if beta is not None:
        beta_row, beta_notes = _beta_row(beta[0], beta[1], labels)
        rows.insert(3, beta_row)
        notes.extend(beta_notes)
    for label, side in zip(labels, (simulation, measured)):
        n_series = len(set(side.series.tolist()))
        if n_series < len(side.configurations):
            notes.append(f"{label}: {len(side.configurations)} frames in {n_series} independent "
                         f"series (runs); tested as correlated series (effective sizes from "
                         f"each run's autocorrelation time)")
    return Comparison(rows=tuple(rows), per_shot={k: (a[k], b[k]) for k in ROWS},
                      simulation=simulation, measured=measured, labels=tuple(labels),
                      notes=tuple(notes), beta=beta)


# ---------------------------------------------------------------- writers

_COLUMNS = ("quantity", "unit", "simulation", "measured", "difference", "ci95_low",
            "ci95_high", "p_ks", "p_mean", "n_simulation", "n_measured",
            "n_eff_simulation", "n_eff_measured", "significant")


def write_csv(comparison: Comparison, path: str | Path) -> Path:
    """Write the table as CSV: one plain header line, one row per quantity (its unit in the
    ``unit`` column); the notes and the two beta records are in the JSON twin
    (:func:`write_json`)."""
    path = Path(path)
    with path.open("w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(_COLUMNS)
        for r in comparison.rows:
            d = asdict(r) | {"significant": r.significant}
            writer.writerow([f"{d[c]:.6g}" if isinstance(d[c], float) else d[c]
                             for c in _COLUMNS])
    return path


def comparison_to_dict(comparison: Comparison) -> dict[str, Any]:
    """The table as strict-JSON-ready data (NaN and infinities -> None)."""
    sides = {label: {"shots": len(side.configurations),
                     "series": len(set(side.series.tolist())),
                     "domain": comparison_domain_text(side.domain)}
             for label, side in zip(comparison.labels, (comparison.simulation,
                                                        comparison.measured))}
    return strict_json({
        "labels": list(comparison.labels),
        "difference": f"{comparison.labels[0]} - {comparison.labels[1]}",
        "sides": sides,
        "notes": list(comparison.notes),
        "rows": [asdict(r) | {"significant": r.significant} for r in comparison.rows],
        "beta_n": (None if comparison.beta is None else
                   dict(zip(comparison.labels, comparison.beta))),
    })


def comparison_domain_text(domain: Any) -> str:
    """A short text of a domain's shape and proportions, e.g. "disk" or "box (1.5, 1)"."""
    sizes = tuple(domain.key()[1:])
    return domain.kind + (f" {sizes}" if sizes else "")


def write_json(comparison: Comparison, path: str | Path) -> Path:
    """Write :func:`comparison_to_dict` as strict JSON."""
    path = Path(path)
    path.write_text(json.dumps(comparison_to_dict(comparison), indent=1, allow_nan=False)
                    + "\n", encoding="utf-8")
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
