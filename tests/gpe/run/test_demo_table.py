"""The shipped demo table (runs/demo_measured.csv): drawn by runs/make_demo_measured.py at
beta~N = -3 (neutral gases of 12..20 vortices, a known truth because we drew it), then degraded
by 0.5 um blur and 2% wrong signs. Its geometry file states that imaging model."""

import warnings
from pathlib import Path

import pytest

from gpe.run.thermometry import temperature_of_table

DEMO = Path(__file__).resolve().parents[3] / "runs" / "demo_measured.csv"
TRUTH_BETA_N = -3.0     # runs/make_demo_measured.py: BETA_N


@pytest.fixture(scope="module")
def cache(tmp_path_factory):
    return tmp_path_factory.mktemp("dos_demo")


@pytest.mark.slow   # standard-effort tables for ten vortex numbers (36 s); `pytest` runs it
def test_the_demo_table_recovers_its_truth_inside_the_95_interval(cache):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")      # the three planted bad rows
        result = temperature_of_table(DEMO, systematics=False, cache_dir=cache)
    ens = result["ensemble"]
    assert ens["method"] == "ensemble, imaging model" and ens["bound"] is None
    assert ens["imaging_um"] == {"blur_um": 0.5, "sign_error": 0.02}
    lo, hi = ens["beta_n_ci95"]
    assert lo <= TRUTH_BETA_N <= hi, ens["verdict"]
    assert ens["common"] == "beta_n" and len(ens["groups"]) >= 3
    # the density of states' error is small against the statistical one at the effort an
    # imaging model uses (standard; measured: 0.019 against a statistical sigma of 0.155)
    assert ens["effort"] == "standard"
    assert ens["dos_error"] < 0.5 * (hi - lo) / 3.92


def test_without_the_imaging_model_the_report_says_what_beta_describes(cache):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        result = temperature_of_table(DEMO, systematics=False, cache_dir=cache,
                                      imaging_um={"blur_um": 0.0, "sign_error": 0.0})
    ens = result["ensemble"]
    assert ens["method"] == "ensemble maximum likelihood"
    assert "configurations as imaged" in ens["imaging_note"]
