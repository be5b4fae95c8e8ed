"""Tests of the sweep summary tables (gpe/sweep/table.py): columns, units, per-point intervals
that stay inside their ranges, beta~ N pooled over seeds, strict JSON, readers."""

from __future__ import annotations

import concurrent.futures as cf
import itertools
import json
import math

import numpy as np
import pytest
from sweep_stand_in import run_stand_in, write_sweep_file

from gpe.sweep.table import (
    Z95,
    bootstrap_interval,
    read_summary,
    read_table,
    wilson_interval,
)


@pytest.fixture
def sweep_file(tmp_path):
    return write_sweep_file(tmp_path)


def _refuse(name):
    raise ValueError(f"non-strict JSON constant {name}")


# -- the intervals ------------------------------------------------------------------------------
@pytest.mark.parametrize("n", [2, 3, 5, 20])
def test_wilson_interval_at_the_ends_is_the_closed_form(n):
    # Wilson (1927), JASA 22, 209, eq. for the score interval evaluated at p = 0 and p = 1:
    # centre +- half reduce to [0, z^2/(n + z^2)] and [n/(n + z^2), 1] (algebra done by hand:
    # at p = 0 the centre and the half-width are both (z^2/2n)/(1 + z^2/n)).
    z2 = 1.959963984540054 ** 2                     # Phi^-1(0.975)^2, handbook value
    assert wilson_interval(0, n) == pytest.approx((0.0, z2 / (n + z2)), abs=1e-15)
    assert wilson_interval(n, n) == pytest.approx((n / (n + z2), 1.0), abs=1e-15)
    assert Z95 == pytest.approx(1.959963984540054, rel=1e-14)


def test_wilson_interval_agrees_with_scipy_and_stays_in_0_1():
    from scipy.stats import binomtest

    for n in range(2, 16):
        for k in range(n + 1):
            # reference: scipy's general-purpose implementation (no continuity correction)
            ref = binomtest(k, n).proportion_ci(0.95, method="wilson")
            lo, hi = wilson_interval(k, n)
            assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-12)
            assert 0.0 <= lo <= k / n <= hi <= 1.0
    assert all(math.isnan(v) for v in wilson_interval(1, 1))   # one seed: no interval
    with pytest.raises(ValueError, match="outside 0..trials"):
        wilson_interval(3, 2)


def test_bootstrap_interval_of_two_seeds_is_their_range():
    # Exact bootstrap distribution of the mean of 2 values (all 2^2 resamples enumerated):
    # x1 w.p. 1/4, the midpoint w.p. 1/2, x2 w.p. 1/4, so its 2.5 % and 97.5 % points are x1, x2.
    for x in ([3.0, 4.0], [0.0, 1.0], [-2.5, 7.0], [5.0, 5.0]):
        lo, hi = bootstrap_interval(x)
        assert (lo, hi) == (min(x), max(x))
    assert all(math.isnan(v) for v in bootstrap_interval([2.0]))          # one seed: none
    assert all(math.isnan(v) for v in bootstrap_interval([2.0, math.nan]))


def test_bootstrap_interval_matches_the_exhaustive_bootstrap():
    # Reference: the exact bootstrap distribution of the mean of 5 values, from all 5^5
    # ordered resamples (Efron 1979, the "ideal" bootstrap); its 2.5 and 97.5 % points.
    x = np.array([0.0, 1.0, 1.0, 3.0, 10.0])
    means = np.array([np.mean(c) for c in itertools.product(x, repeat=5)])
    ref = np.quantile(means, [0.025, 0.975])
    lo, hi = bootstrap_interval(x)
    # 4000 Monte Carlo replicates: the percentile points move by ~1 grid step of 0.2 here
    assert lo == pytest.approx(ref[0], abs=0.25) and hi == pytest.approx(ref[1], abs=0.45)
    assert x.min() <= lo < hi <= x.max()


# -- the tables of a sweep ----------------------------------------------------------------------
def test_summary_columns_units_and_intervals(sweep_file, tmp_path):
    import h5py
    import pandas as pd

    result = run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    out = tmp_path / "out"
    header = (out / "summary_runs.csv").read_text().splitlines()[0].split(",")
    assert header == ["point_id", "grid_id", "seed", "beams.0.path.speed_c [c]",
                      "beams.0.waist_um [um]", "status", "error", "beta [1/E0]",
                      "n_plus [1]", "dipole_fraction [1]", "beta_n [1]", "beta_n_lo95 [1]",
                      "beta_n_hi95 [1]", "bound", "n_effective [1]"]  # units: thermo.quantities
    runs = pd.read_csv(out / "summary_runs.csv")
    assert list(runs.columns) == header and len(runs) == 8
    points = pd.read_csv(out / "summary_points.csv", keep_default_na=False,
                         na_values=["nan"])
    for col in ("beta_n [1]", "beta_n_lo95 [1]", "beta_n_hi95 [1]", "bound", "n_effective [1]",
                "beta_n_reason", "beta_mean [1/E0]", "beta_lo95 [1/E0]", "n_plus_lo95 [1]",
                "frac_beta_negative [1]", "frac_beta_negative_lo95 [1]",
                "frac_beta_negative_hi95 [1]", "n_beta_defined [1]"):
        assert col in points.columns, col
    # every column but labels and ids names its unit ("1" for pure numbers)
    labels = {"grid_id", "bound", "beta_n_reason"}
    assert all(c in labels or c.endswith("]") for c in points.columns)

    rows, units = read_table(result.files["points_csv"])
    assert units["beta_mean"] == "1/E0" and units["frac_beta_negative_hi95"] == "1"
    assert units["beta_n"] == "1" and units["bound"] == ""
    # p001: speed 0.3, waist 4 -> beta = 0.6 + 0.01 seed, n_plus = 3 + seed for seeds 0, 1
    p = next(r for r in rows if r["grid_id"] == "p001")
    assert p["beta_mean"] == pytest.approx(0.605) and p["n_ok"] == 2
    # two seeds: the percentile bootstrap interval is exactly their range (see above)
    seeds = [r for r in result.runs if r["grid_id"] == "p001"]
    assert (p["beta_lo95"], p["beta_hi95"]) == (seeds[0]["beta"], seeds[1]["beta"])
    assert (p["n_plus_lo95"], p["n_plus_hi95"]) == (3.0, 4.0)      # never a negative count
    z2 = 1.959963984540054 ** 2
    for r, k in zip(rows, [0, 0, 2, 2]):   # beta < 0 at speed 0.6 only; Wilson closed form
        assert r["frac_beta_negative"] == k / 2 and r["n_beta_defined"] == 2
        ref = (0.0, z2 / (2 + z2)) if k == 0 else (2 / (2 + z2), 1.0)
        assert (r["frac_beta_negative_lo95"], r["frac_beta_negative_hi95"]) == \
            pytest.approx(ref, abs=1e-15)
    # the stand-in's base is no protocol: beta~ N cannot be pooled, the row says why
    assert all(math.isnan(r["beta_n"]) and "ProtocolError" in r["beta_n_reason"] for r in rows)
    with h5py.File(result.files["hdf5"]) as h5:
        assert h5["runs/beta"].attrs["units"] == "1/E0"
        assert h5["points/beta_n"].attrs["units"] == "1"
        assert h5["points/beams.0.waist_um"].attrs["units"] == "um"
        assert "base.toml" in h5.attrs["sweep_text"]
    again = read_summary(out)  # reopened from summary.h5
    assert again.axes == result.axes
    assert json.dumps(again.points) == json.dumps(result.points)


def test_every_json_the_sweep_writes_is_strict(sweep_file, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "invalid_p002_s0").touch()   # a failed point: NaN values, NaN-free records
    run_stand_in(sweep_file, out, executor=cf.ThreadPoolExecutor(2))
    files = sorted(out.rglob("*.json"))
    assert {f.name for f in files} >= {"manifest.json", "state.json", "p002_s0.json"}
    for f in files:
        json.loads(f.read_text(), parse_constant=_refuse)
    failed = json.loads((out / "points" / "p002_s0.json").read_text())
    assert failed["status"] == "failed" and failed["values"] == {}


def test_a_single_seed_gives_no_interval(tmp_path):
    src = write_sweep_file(tmp_path)
    src.write_text(src.read_text().replace("seeds = 2", "seeds = [0]"))
    result = run_stand_in(src, tmp_path / "out", executor=cf.ThreadPoolExecutor(1))
    for r in result.points:
        assert r["n_ok"] == 1 and math.isfinite(r["beta_mean"])
        assert all(math.isnan(r[k]) for k in ("beta_lo95", "beta_hi95", "beta_std",
                                              "frac_beta_negative_lo95",
                                              "frac_beta_negative_hi95"))


def test_beta_n_of_a_real_sweep_is_pooled_over_the_seeds_run_files(tmp_path, monkeypatch):
    """2 points x 2 seeds of the tiny protocol through the real pipeline (in this process):
    each point's beta~ N columns are gpe.run.thermometry.pooled_ensemble of its seeds' run
    files; each run's, the analysis of that run; a point without two vortices says why."""
    import pandas as pd
    from tiny_protocol import tiny_protocol_text

    from gpe.run import thermometry
    from gpe.sweep.execute import run_sweep
    from gpe.sweep.file import load_sweep

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    (tmp_path / "tiny.toml").write_text(tiny_protocol_text(duration=8.0, output_interval=2.0,
                                                           rows=3, speed=0.6))
    src = tmp_path / "s.toml"
    src.write_text('base = "tiny.toml"\nseeds = 2\n[[axes]]\nkey = "beams.0.path.speed_c"\n'
                   'values = [0.1, 0.7]\n[measure]\nwindow_tau = [4.0, 8.0]\n'
                   'quantities = ["beta", "n_plus", "n_minus"]\n')
    result = run_sweep(load_sweep(src), tmp_path / "out", executor=cf.ThreadPoolExecutor(1))
    assert result.complete, result.failed
    out = tmp_path / "out"
    points = pd.read_csv(out / "summary_points.csv", keep_default_na=False, na_values=["nan"])
    runs = pd.read_csv(out / "summary_runs.csv", keep_default_na=False, na_values=["nan"])
    for _, row in points.iterrows():
        paths = [out / "runs" / f"{row['grid_id']}_s{s}.h5" for s in (0, 1)]
        ref = thermometry.pooled_ensemble(paths, window=(4.0, 8.0))
        got = [row["beta_n [1]"], row["beta_n_lo95 [1]"], row["beta_n_hi95 [1]"],
               row["n_effective [1]"]]
        np.testing.assert_allclose(got, [ref["beta_n"], *ref["beta_n_ci95"],
                                         ref["n_effective"]], rtol=1e-12)
        assert row["bound"] == (ref["bound"] or "")
        # vortex numbers: the mean over both seeds' frames with the interval that counts each
        # seed's frames as one correlated series (thermo.data.units), never below 0
        for q in ("n_plus", "n_minus"):
            fm = ref["frame_means"][q]
            np.testing.assert_allclose([row[f"{q}_mean [1]"], row[f"{q}_lo95 [1]"],
                                        row[f"{q}_hi95 [1]"]],
                                       [fm["mean"], fm["lo95"], fm["hi95"]], rtol=1e-12)
            assert 0.0 <= row[f"{q}_lo95 [1]"] <= row[f"{q}_mean [1]"] <= row[f"{q}_hi95 [1]"]
    slow, fast = points.iloc[0], points.iloc[1]
    # speed 0.1 c sheds no vortex: NaN with the estimator's reason, and the sweep went on
    assert math.isnan(slow["beta_n [1]"]) and "two or more vortices" in slow["beta_n_reason"]
    assert math.isfinite(fast["beta_n [1]"]) and fast["beta_n_reason"] == ""
    assert fast["beta_n_lo95 [1]"] < fast["beta_n [1]"] < fast["beta_n_hi95 [1]"]
    for _, row in runs.iterrows():
        ref = thermometry.analyse(out / "runs" / f"{row['point_id']}.h5", window=(4.0, 8.0))
        np.testing.assert_allclose([row["beta_n [1]"], row["beta_n_lo95 [1]"],
                                    row["beta_n_hi95 [1]"]],
                                   [ref["beta_n"], *ref["beta_n_ci95"]], rtol=1e-12)
        assert row["bound"] == (ref["bound"] or "")
    for f in sorted(out.rglob("*.json")):
        json.loads(f.read_text(), parse_constant=_refuse)
