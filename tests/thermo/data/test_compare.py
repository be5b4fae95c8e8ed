"""Tests of thermo.data.compare: simulated vs measured statistics and their tests of difference."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from thermo.data.compare import (
    ROWS,
    CompareError,
    Side,
    compare_ensembles,
    ensemble_beta,
    shot_statistics,
    write_csv,
    write_json,
)
from thermo.data.degrade import ImagingModel, degrade_many
from thermo.domains.disk import Disk


def _cmp(a, b, domain=None, **kw):
    """Two lists of independent shots in one domain."""
    domain = domain or Disk()
    return compare_ensembles(Side.of_shots(a, domain, "simulation"),
                             Side.of_shots(b, domain, "measured"), **kw)


def _uniform_shots(rng, n_shots, n_range=(10, 20)):
    """Neutral-ish gas at beta = 0: uniform positions, N drawn per shot."""
    disk = Disk()
    out = []
    for _ in range(n_shots):
        n = int(rng.integers(*n_range))
        out.append((disk.sample_uniform(rng, n), np.repeat([1, -1], [n // 2, n - n // 2])))
    return out


def test_shot_statistics_beta0_exact_means(rng):
    """At beta = 0 (uniform positions) the ensemble means have exact values:
    <D^2> = 1/(2N) and, neutral, <C1> = -1/(N-1), <E> = -5N/4 [exact, reference-values.md].
    Accept 4 standard errors.
    """
    n = 12
    shots = [(Disk().sample_uniform(rng, n), np.repeat([1, -1], 6)) for _ in range(3000)]
    st = shot_statistics(shots, Disk())
    np.testing.assert_array_equal(st["n_plus"], 6)
    for values, exact in ((st["dipole_moment"] ** 2, 1 / (2 * n)), (st["c1"], -1 / (n - 1)),
                          (st["energy_per_vortex"] * n, -5 * n / 4)):
        se = values.std(ddof=1) / math.sqrt(len(values))
        assert abs(values.mean() - exact) < 4 * se
    # the fractions of the three classes add up to one in every shot [exact]
    np.testing.assert_allclose(st["dipole_fraction"] + st["cluster_fraction"]
                               + st["free_fraction"], 1.0, atol=1e-12)


def test_shot_order_and_vortex_order_do_not_matter(rng):
    shots = _uniform_shots(rng, 12)
    permuted = [(p[o], s[o]) for p, s in shots for o in [rng.permutation(len(s))]]
    a = shot_statistics(shots, Disk())
    b = shot_statistics(permuted, Disk())
    for k in ROWS:
        np.testing.assert_allclose(a[k], b[k], rtol=1e-12, atol=1e-12)


def test_undefined_shots_are_nan_not_errors(rng):
    shots = [(np.zeros((0, 2)), np.zeros(0, dtype=int)), (np.array([[0.1, 0.2]]), np.array([1]))]
    st = shot_statistics(shots, Disk())
    assert math.isnan(st["energy_per_vortex"][0]) and np.isfinite(st["energy_per_vortex"][1])
    assert math.isnan(st["c1"][1])


def test_ensemble_against_itself_shows_no_difference(rng):
    shots = _uniform_shots(rng, 40)
    res = _cmp(shots, shots)
    for row in res.rows:
        assert row.difference == 0.0
        assert row.ci95_low <= 0.0 <= row.ci95_high
        assert row.p_ks > 0.05 and row.p_mean > 0.05
        assert not row.significant


def test_same_beta_independent_draws_mostly_agree(rng):
    """Two independent beta = 0 ensembles: at the 5% level each test rejects with
    probability 0.05, so with 9 quantities x 2 tests a Bonferroni-corrected level
    (0.05 / 18) must not reject [common practice: family-wise error control]."""
    a = _uniform_shots(rng, 60)
    b = _uniform_shots(rng, 40)
    res = _cmp(a, b)
    for row in res.rows:
        assert row.p_ks > 0.05 / 18 and row.p_mean > 0.05 / 18, row


def test_clearly_different_structure_is_detected(rng):
    """Dipole gas (each + with a - at distance 0.03) vs uniform gas: C1 = -1 vs ~-1/(N-1),
    and the energy per vortex differs strongly; both tests must reject at 5%."""
    disk = Disk()
    dipoles = []
    for _ in range(30):
        c = 0.9 * disk.sample_uniform(rng, 7)
        ang = rng.uniform(0, 2 * np.pi, 7)
        partner = c + 0.03 * np.column_stack([np.cos(ang), np.sin(ang)])
        dipoles.append((np.concatenate([c, partner]), np.repeat([1, -1], 7)))
    uniform = [(disk.sample_uniform(rng, 14), np.repeat([1, -1], 7)) for _ in range(30)]
    res = _cmp(dipoles, uniform, disk)
    for q in ("c1", "energy_per_vortex", "dipole_fraction", "mean_nn_distance"):
        row = res.row(q)
        assert row.p_ks < 0.05 and row.p_mean < 0.05 and row.significant
        assert not (row.ci95_low <= 0 <= row.ci95_high)
    # -1 unless two dipoles happen to lie closer than 0.03 to each other
    assert res.row("c1").simulation < -0.95


def test_writers_round_trip(tmp_path, rng):
    shots = _uniform_shots(rng, 20)
    import pandas as pd

    res = _cmp(shots, _uniform_shots(rng, 15))

    def refuse(name):
        raise ValueError(f"{name} in strict JSON")

    # strict JSON (RFC 8259): the p-values of a row without a test are null, never NaN
    data = json.loads(write_json(res, tmp_path / "c.json").read_text(), parse_constant=refuse)
    assert [r["quantity"] for r in data["rows"]] == [r.quantity for r in res.rows]
    assert data["rows"][2]["simulation"] == pytest.approx(res.rows[2].simulation)
    # a plain header line: pandas reads the table as it is
    table = pd.read_csv(write_csv(res, tmp_path / "c.csv"))
    assert list(table.columns[:6]) == ["quantity", "unit", "simulation", "measured",
                                      "difference", "ci95_low"]
    assert list(table["quantity"]) == [r.quantity for r in res.rows]
    assert table["n_measured"].iloc[0] == 15


def test_bad_input_raises(rng):
    shots = _uniform_shots(rng, 5)
    from thermo.domains.box import Box

    with pytest.raises(CompareError, match=r"measured shot 1: signs"):
        _cmp(shots, [shots[0], (shots[1][0], shots[1][1] * 2)])
    with pytest.raises(CompareError, match="no shots"):
        _cmp(shots, [])
    with pytest.raises(CompareError, match="one shape"):
        compare_ensembles(Side.of_shots(shots, Disk()), Side.of_shots(shots, Box(1.5)))


def test_degraded_copy_with_identity_model_compares_equal(rng):
    shots = _uniform_shots(rng, 25)
    same = degrade_many(shots, Disk(), ImagingModel(), rng)
    res = _cmp(shots, same)
    assert all(r.difference == 0.0 for r in res.rows)


def _sampled_shots(seed, beta_n_values, n=12, n_shots=40, core=0.02):
    """Configurations of a neutral gas of n vortices in the unit disk drawn by the thermo
    sampler at beta~ N in ``beta_n_values`` (one tempering ladder through both)."""
    from thermo.sampler import run_tempering
    targets = np.asarray(beta_n_values, dtype=float) / n
    betas = np.sort(np.unique(np.concatenate([targets, np.linspace(targets.min(),
                                                                   targets.max(), 6)])))[::-1]
    res = run_tempering(Disk(), n // 2, n // 2, betas, n_sweeps=n_shots * 20, core_radius=core,
                        rng=np.random.default_rng(seed), burn_in=300, thin=20)
    out = []
    for b in targets:
        k = int(np.argmin(np.abs(np.asarray(res.betas) - b)))
        pos = np.asarray(res.positions[k])[-n_shots:]
        out.append([(p, np.asarray(res.signs)) for p in pos])
    return out


def _beta_options(cache_dir):
    from thermo.dos.build import DosSettings
    # small effort: enough to separate beta~ N = +8 from -3 (common practice: check the
    # swap acceptance of a real build); cache in the test's own directory
    return dict(cache_dir=cache_dir, settings=DosSettings(n_sweeps=600, n_temps=12, n_boot=10))


def test_two_clearly_different_betas_are_told_apart(tmp_path):
    """beta~ N = +8 (bound dipoles) vs -3 (like signs gather) for 12 vortices: the energy
    per vortex, C1 and beta must differ at the 5% level. Direction [exact from the
    Boltzmann weight exp(-beta E)]: <E> decreases with beta, so the positive-beta side has
    the lower energy; opposite-sign neighbours dominate at positive beta, so its C1 is
    lower."""
    hot, cold = _sampled_shots(11, [8.0, -3.0])
    opts = _beta_options(tmp_path)
    a, b = Side.of_shots(hot, Disk()), Side.of_shots(cold, Disk())
    res = compare_ensembles(a, b, beta=(ensemble_beta(a, 0.02, **opts),
                                        ensemble_beta(b, 0.02, **opts)),
                            labels=("beta N = +8", "beta N = -3"))
    for q in ("energy_per_vortex", "c1"):
        row = res.row(q)
        assert row.p_ks < 0.05 and row.p_mean < 0.05
        assert row.ci95_high < 0.0, row
    beta = res.row("beta_n")
    assert beta.p_mean < 0.05 and beta.ci95_low > 0.0, beta
    assert beta.simulation > 0 > beta.measured


def test_sampled_ensemble_against_itself_including_beta(tmp_path):
    (shots,) = _sampled_shots(12, [-3.0], n_shots=30)
    side = Side.of_shots(shots, Disk())
    rec = ensemble_beta(side, 0.02, **_beta_options(tmp_path))
    res = compare_ensembles(side, side, beta=(rec, rec))
    assert res.row("beta_n").difference == 0.0
    for row in res.rows:
        assert row.ci95_low <= 0.0 <= row.ci95_high and not row.significant, row
