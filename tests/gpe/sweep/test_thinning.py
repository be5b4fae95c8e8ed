"""Snapshot thinning (gpe/sweep/thinning.py): which frames are kept, that the thinned file is a
complete run file of exactly those frames, and that thermometry of a kept frame is unchanged."""

from __future__ import annotations

import json
import logging
import shutil

import numpy as np
import pytest
from tiny_protocol import tiny_protocol_text

from gpe.errors import RunFileError
from gpe.run.runfile import RunFile
from gpe.sweep.thinning import KEPT_ATTR, kept_frames, thin_snapshots


@pytest.mark.parametrize("n, keep, expected", [
    (13, "all", list(range(13))), (13, 1, list(range(13))), (13, "last", [12]),
    (13, 5, [0, 5, 10, 12]), (13, 4, [0, 4, 8, 12]), (13, 20, [0, 12]), (1, 3, [0]), (0, 3, []),
])
def test_kept_frames(n, keep, expected):
    assert kept_frames(n, keep) == expected


@pytest.fixture(scope="module")
def full_run(tmp_path_factory):
    """The tiny protocol, 13 frames (outputs every 1 hbar/mu up to 12)."""
    from gpe.run.simulate import simulate
    from gpe.setup.protocol import parse_protocol

    folder = tmp_path_factory.mktemp("thin")
    protocol = parse_protocol(tiny_protocol_text(duration=12.0, output_interval=1.0, rows=3),
                              source=str(folder / "tiny.toml"))
    return simulate(protocol, folder / "full.h5")


def _contents(path):
    with RunFile.open(path, "r") as run:
        return dict(t=run.frame_times(), obs=run.read_observables(), table=run.read_vortices(),
                    psi=[run.psi(i) for i in range(run.n_frames)], ck=run.read_checkpoint(),
                    complete=run.is_complete(), text=run.protocol_text(),
                    mu_run=run.attrs_float("mu_run"), trap=run.static_potential())


def test_every_kth_frame_is_kept_with_its_observables_and_vortices(full_run, tmp_path):
    path = tmp_path / "p.h5"
    shutil.copy(full_run, path)
    assert thin_snapshots(path, 5) == [0, 5, 10, 12]
    full, thin = _contents(full_run), _contents(path)
    keep = [0, 5, 10, 12]
    np.testing.assert_array_equal(thin["t"], full["t"][keep])
    for name, values in full["obs"].items():
        np.testing.assert_array_equal(thin["obs"][name], values[keep])
    for new, old in enumerate(keep):
        np.testing.assert_array_equal(thin["psi"][new], full["psi"][old])
        a = full["table"][full["table"]["frame"] == old]
        b = thin["table"][thin["table"]["frame"] == new]
        for col in ("t", "x", "y", "sign", "track"):
            np.testing.assert_array_equal(b[col], a[col])
    assert thin["table"].size == sum(np.count_nonzero(full["table"]["frame"] == f) for f in keep)
    assert full["table"].size > thin["table"].size > 0        # the tiny run sheds vortices
    assert thin["complete"] and thin["text"] == full["text"] and thin["mu_run"] == full["mu_run"]
    np.testing.assert_array_equal(thin["trap"], full["trap"])
    np.testing.assert_array_equal(thin["ck"].psi, full["ck"].psi)
    assert (thin["ck"].t, thin["ck"].step, thin["ck"].frame) == (full["ck"].t, full["ck"].step, 4)
    with RunFile.open(path, "r") as run:
        marked = json.loads(str(run.attrs[KEPT_ATTR]))
    assert marked == {"keep": 5, "of_frames": 13, "frames": keep}
    assert path.stat().st_size < 0.6 * full_run.stat().st_size
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.h5"]   # no .thin left


def test_thinning_twice_changes_nothing_and_other_settings_warn(full_run, tmp_path, caplog):
    path = tmp_path / "p.h5"
    shutil.copy(full_run, path)
    thin_snapshots(path, "last")
    before = path.read_bytes()
    assert thin_snapshots(path, "last") == [12]
    with caplog.at_level(logging.WARNING, logger="gpe.sweep.thinning"):
        assert thin_snapshots(path, 3) == [12]
    assert "keep_snapshots = 'last' before, not 3" in caplog.text
    assert path.read_bytes() == before


def test_an_incomplete_run_is_refused_and_left_alone(full_run, tmp_path):
    path = tmp_path / "p.h5"
    shutil.copy(full_run, path)
    with RunFile.open(path, "r+") as run:
        run.truncate_to_frame(7)
    before = path.read_bytes()
    with pytest.raises(RunFileError, match="not complete"):
        thin_snapshots(path, 2)
    assert path.read_bytes() == before


def test_thermometry_and_readers_work_on_the_kept_frames(full_run, tmp_path):
    from gpe.run import reading, thermometry
    from gpe.run.dataset import open_run

    path = tmp_path / "p.h5"
    shutil.copy(full_run, path)
    thin_snapshots(path, 4)                                   # frames 0, 4, 8, 12
    assert reading.is_complete(path)
    ds = open_run(path)
    np.testing.assert_array_equal(ds["t"].values, [0.0, 4.0, 8.0, 12.0])
    # the same frame measured in the full and in the thinned file gives the same record
    for t in (8.0, 12.0):
        a = thermometry.analyse(full_run, time=t)
        b = thermometry.analyse(path, time=t)
        assert (a["n_plus"], a["n_minus"]) == (b["n_plus"], b["n_minus"])
        np.testing.assert_array_equal(a["beta"], b["beta"])
    window = thermometry.analyse(path, window=(4.0, 12.0))     # three kept frames pooled
    table = _contents(full_run)["table"]
    n_plus = [np.count_nonzero((table["frame"] == f) & (table["sign"] > 0)) for f in (4, 8, 12)]
    assert window["n_plus"] == pytest.approx(np.mean(n_plus))
