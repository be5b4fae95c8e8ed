"""What is made from a finished run: re-detected vortex tables in SI and the figures."""

import csv

import h5py
import numpy as np
import pandas as pd
import pytest

from gpe.errors import VorthermError
from gpe.figures import standard
from gpe.run import products
from gpe.run.jsontext import loads_strict
from gpe.run.runfile import RunFile


def test_redetect_exports_si_and_changes_the_run_only_when_stored(tiny_run, tmp_path):
    with RunFile.open(tiny_run) as run:
        stored = run.read_vortices()
        length_m = run.units()["length_m"]
        time_s = run.units()["time_s"]
    table, _, path = products.redetect(tiny_run, threshold=0.2, csv_path=tmp_path / "v.csv")
    rows = list(csv.DictReader(line for line in path.open() if not line.startswith("#")))
    assert len(rows) == table.size
    if table.size:
        # micrometres and milliseconds from the stored SI factors [definition of the units]
        assert float(rows[0]["x_um"]) == pytest.approx(table["x"][0] * length_m * 1e6, rel=1e-5)
        assert float(rows[0]["t_ms"]) == pytest.approx(table["t"][0] * time_s * 1e3, rel=1e-5)
    with h5py.File(tiny_run) as f:
        np.testing.assert_array_equal(f["vortices"][...], stored)
    # a stricter threshold, stored: the table is replaced as a whole
    strict, _, _ = products.redetect(tiny_run, threshold=0.9, store=True,
                                     csv_path=tmp_path / "v2.csv")
    with RunFile.open(tiny_run) as run:
        assert run.read_vortices().size == strict.size <= table.size


def test_store_needs_every_frame(tiny_run, tmp_path):
    with pytest.raises(VorthermError, match="every"):
        products.redetect(tiny_run, frames=[0], store=True, csv_path=tmp_path / "v.csv")


def test_figures_are_written_for_the_chosen_frames(tiny_run, tmp_path):
    written = standard.make_figures(tiny_run, tmp_path / "fig", frames=[0, -1])
    names = {p.name for p in written}
    assert {"tiny_density_phase.png", "tiny_vortex_counts.png", "tiny_energies.png",
            "tiny_spectra_frame0.png", "tiny_spectra_frame5.png"} <= names
    assert all(p.stat().st_size > 5000 for p in written)


def test_an_existing_csv_is_refused_before_anything_is_read_or_stored(tiny_run, tmp_path):
    csv_path = tmp_path / "v.csv"
    csv_path.write_text("kept\n")
    with RunFile.open(tiny_run) as run:
        stored = run.read_vortices()
    with pytest.raises(VorthermError, match=r"v\.csv exists already.*--force"):
        products.redetect(tiny_run, threshold=0.9, store=True, csv_path=csv_path)
    assert csv_path.read_text() == "kept\n"
    with RunFile.open(tiny_run) as run:                 # the stored table is untouched too
        np.testing.assert_array_equal(run.read_vortices(), stored)
    table, _, _ = products.redetect(tiny_run, csv_path=csv_path, overwrite=True)
    assert csv_path.read_text().count("\n") == table.size + 1   # header, rows
    # the run file itself is never the CSV, with or without overwrite
    with pytest.raises(VorthermError, match="the run file itself"):
        products.redetect(tiny_run, csv_path=tiny_run, overwrite=True)
    with RunFile.open(tiny_run) as run:
        np.testing.assert_array_equal(run.read_vortices(), stored)


def test_the_vortex_csv_reads_in_pandas_as_is_with_its_metadata_beside_it(tiny_run, tmp_path):
    table, _, path = products.redetect(tiny_run, csv_path=tmp_path / "v.csv")
    frame = pd.read_csv(path)                      # no comment= or skiprows= needed
    assert list(frame.columns) == ["frame", "t_ms", "x_um", "y_um", "sign", "track"]
    assert len(frame) == table.size > 0
    assert frame["sign"].isin([-1, 1]).all() and frame["frame"].dtype.kind == "i"
    with RunFile.open(tiny_run) as run:
        length_m, time_s = run.units()["length_m"], run.units()["time_s"]
    # [definition of the units] um and ms from the SI factors the run file stores, to the last bit
    np.testing.assert_allclose(frame["x_um"], table["x"] * length_m * 1e6, rtol=1e-15)
    np.testing.assert_allclose(frame["t_ms"], table["t"] * time_s * 1e3, rtol=1e-15)
    meta = loads_strict((tmp_path / "v.json").read_text(encoding="utf-8"))
    assert [c["name"] for c in meta["columns"]] == list(frame.columns)
    assert {c["name"]: c["units"] for c in meta["columns"]}["x_um"] == "um"
    assert meta["rows"] == len(frame) and meta["run_file"] == str(tiny_run)
    assert meta["xi_in_m"] == pytest.approx(length_m, rel=1e-15)


def test_an_existing_sidecar_is_refused_like_the_csv(tiny_run, tmp_path):
    (tmp_path / "v.json").write_text("mine\n")
    with pytest.raises(VorthermError, match=r"v\.json exists already.*--force"):
        products.redetect(tiny_run, csv_path=tmp_path / "v.csv")
    assert (tmp_path / "v.json").read_text() == "mine\n" and not (tmp_path / "v.csv").exists()
