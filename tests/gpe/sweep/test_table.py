"""Tests of the sweep summary tables (gpe/sweep/table.py): columns, units, aggregation, readers."""

from __future__ import annotations

import concurrent.futures as cf

import numpy as np
import pytest
from sweep_stand_in import run_stand_in, write_sweep_file

from gpe.sweep.table import read_summary, read_table


@pytest.fixture
def sweep_file(tmp_path):
    return write_sweep_file(tmp_path)


def test_summary_columns_units_and_aggregation(sweep_file, tmp_path):
    import h5py
    from scipy import stats

    result = run_stand_in(sweep_file, tmp_path / "out", executor=cf.ThreadPoolExecutor(2))
    runs, units = read_table(result.files["runs_csv"])
    header = (tmp_path / "out" / "summary_runs.csv").read_text().splitlines()[0].split(",")
    assert header == ["point_id", "grid_id", "seed", "beams.0.path.speed_c [c]",
                      "beams.0.waist_um [um]", "status", "error", "beta [1/E0]",
                      "n_plus [1]", "dipole_fraction [1]"]  # units from thermo.quantities
    assert [r["point_id"] for r in runs] == sorted(r["point_id"] for r in runs)
    points, punits = read_table(result.files["points_csv"])
    assert punits["beta_mean"] == "1/E0" and punits["frac_beta_negative"] == "1"
    # p001: speed 0.3, waist 4 -> beta = 0.6 + 0.01 seed for seeds 0, 1
    p = next(r for r in points if r["grid_id"] == "p001")
    x = np.array([0.6, 0.61])
    # reference interval from scipy's own t-interval routine
    lo, hi = stats.t.interval(0.95, df=1, loc=x.mean(), scale=stats.sem(x))
    assert p["beta_mean"] == pytest.approx(x.mean()) and p["n_ok"] == 2
    assert (p["beta_lo95"], p["beta_hi95"]) == pytest.approx((lo, hi))
    assert [r["frac_beta_negative"] for r in points] == [0.0, 0.0, 1.0, 1.0]
    with h5py.File(result.files["hdf5"]) as h5:
        assert h5["runs/beta"].attrs["units"] == "1/E0"
        assert h5["points/beams.0.waist_um"].attrs["units"] == "um"
        assert "base.toml" in h5.attrs["sweep_text"]
    again = read_summary(tmp_path / "out")  # reopened from summary.h5
    assert again.points == result.points and again.axes == result.axes
