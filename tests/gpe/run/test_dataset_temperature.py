"""Thermometry results as DataFrames (gpe.run.dataset.temperature_frames, ensemble_frame),
checked against what the command line writes for the same input: the CSV of ``vortherm
temperature`` read with pandas, column by column, and the ensemble of its ``--json``."""

import json
import math
import shutil

import numpy as np
import pandas as pd
import pytest

from gpe.cli.main import main
from gpe.errors import VorthermError
from gpe.run.dataset import ensemble_frame, temperature_frames
from gpe.run.thermometry import temperature_of_runs, temperature_of_table

#: The CSV holds numbers to 6 significant digits (gpe.run.report._cell writes "%.6g"): a value
#: read back differs from the full-precision one by at most half a unit in the 6th digit,
#: i.e. by a relative 5e-6.
CSV_RTOL = 5e-6


def _refuse(name):
    raise ValueError(f"{name} is not JSON")


def _split_header(name: str) -> tuple[str, str]:
    """ "beta [1/E0]" -> ("beta", "1/E0"); "verdict" -> ("verdict", "")."""
    if name.endswith("]") and " [" in name:
        base, unit = name[:-1].split(" [", 1)
        return base, unit
    return name, ""


def assert_frame_equals_csv(frame: pd.DataFrame, csv_path):
    table = pd.read_csv(csv_path, keep_default_na=False, na_values=[""])
    names_units = [_split_header(c) for c in table.columns]
    assert [n for n, _ in names_units] == list(frame.columns)
    assert {n: u for n, u in names_units} == frame.attrs["units"]
    assert len(table) == len(frame)
    for (name, _), csv_name in zip(names_units, table.columns):
        mine, theirs = frame[name], table[csv_name]
        if pd.api.types.is_numeric_dtype(mine) and not pd.api.types.is_bool_dtype(mine):
            np.testing.assert_allclose(mine.to_numpy(float), theirs.to_numpy(float),
                                       rtol=CSV_RTOL, atol=0, equal_nan=True, err_msg=name)
        else:
            assert [str(v) for v in mine] == [("" if isinstance(v, float) and math.isnan(v)
                                               else str(v)) for v in theirs], name


def _none_to_nan(v):
    return math.nan if v is None else v


def assert_row_equals_json(row: pd.Series, ens: dict):
    """The ensemble row against the ensemble of ``--json`` (full precision there: exact)."""
    for key in ("beta", "beta_n", "n_effective", "n_shots", "prob_negative", "dos_error",
                "stderr", "energy_per_vortex"):
        np.testing.assert_equal(row[key], _none_to_nan(ens[key]), err_msg=key)
    for key in ("beta_ci68", "beta_ci95", "beta_n_ci68", "beta_n_ci95"):
        np.testing.assert_equal([row[f"{key}_lo"], row[f"{key}_hi"]],
                                [_none_to_nan(v) for v in ens[key]], err_msg=key)
    assert row["bound"] == (ens["bound"] or "")
    assert row["verdict"] == ens["verdict"] and row["common"] == ens["common"]
    assert row["groups"] == ", ".join(f"{g['n_plus']}+{g['n_minus']} x{g['shots']}"
                                      for g in ens["groups"])
    for source, item in ens.get("systematics", {}).items():
        shift = item if source == "total" else item["shift"]
        np.testing.assert_equal([row[f"sys_{source}_lo"], row[f"sys_{source}_hi"]], shift)


def test_the_frames_of_a_run_equal_the_cli_csv_and_the_ensemble_its_json(
        tiny_run, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    csv = tmp_path / "t.csv"
    assert main(["temperature", str(tiny_run), "--json", "--csv", str(csv)]) == 0
    doc = json.loads(capsys.readouterr().out, parse_constant=_refuse)
    # the arguments `vortherm temperature` passes (gpe/cli/thermo_commands.py), same cache
    result = temperature_of_runs([tiny_run], time_unit="ms")
    frames = temperature_frames(result)
    assert len(frames) == 6 and list(frames.columns[:4]) == ["t", "frame", "n_plus", "n_minus"]
    assert frames.attrs["units"]["beta"] == "1/E0" and frames.attrs["units"]["t"] == "hbar/mu"
    assert frames["beta"].isna().iloc[0]           # the ground state holds no vortex
    assert_frame_equals_csv(frames, csv)
    ens = ensemble_frame(result)
    assert len(ens) == 1
    assert {"sys_core_radius_xi_lo", "sys_total_hi", "window_lo"} <= set(ens.columns)
    assert ens.attrs["units"]["window_lo"] == "hbar/mu" and ens.attrs["units"]["beta_n"] == "1"
    assert_row_equals_json(ens.iloc[0], doc["ensemble"])
    assert [ens["window_lo"].iloc[0], ens["window_hi"].iloc[0]] == doc["ensemble"]["window"]


def test_the_frames_of_several_runs_carry_the_run_column_of_the_csv(
        tiny_run, tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    second = tmp_path / "seed2.h5"
    shutil.copy(tiny_run, second)
    csv = tmp_path / "both.csv"
    assert main(["temperature", str(tiny_run), str(second), "--json", "--csv", str(csv),
                 "--no-systematics"]) == 0
    doc = json.loads(capsys.readouterr().out, parse_constant=_refuse)
    result = temperature_of_runs([tiny_run, second], time_unit="ms", systematics=False)
    frames = temperature_frames(result)
    assert frames.columns[0] == "run" and set(frames["run"]) == {tiny_run.stem, "seed2"}
    assert_frame_equals_csv(frames, csv)
    ens = ensemble_frame(result)
    assert ens["runs"].iloc[0] == 2 and len(ens["tau_frames"].iloc[0].split("; ")) == 2
    assert not any(c.startswith("sys_") for c in ens.columns)     # no budget asked for
    assert_row_equals_json(ens.iloc[0], doc["ensemble"])


def _write_table(path, rng, shots=5, n=6, radius_um=30.0):
    """A measured-format table of uniformly placed neutral shots (test data, drawn at beta = 0)."""
    lines = ["shot,x,y,sign"]
    for shot in range(shots):
        r = radius_um * 0.9 * np.sqrt(rng.random(n))
        phi = 2 * np.pi * rng.random(n)
        for k in range(n):
            sign = "+1" if k < n // 2 else "-1"
            lines.append(f"{shot},{r[k] * np.cos(phi[k]):.3f},{r[k] * np.sin(phi[k]):.3f},{sign}")
    path.write_text("\n".join(lines) + "\n")


def test_the_shots_of_a_measured_table_equal_the_cli_csv(tmp_path, capsys, monkeypatch, rng):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    table = tmp_path / "shots.csv"
    _write_table(table, rng)
    csv = tmp_path / "shots_t.csv"
    assert main(["temperature", str(table), "--disk-radius-um", "30", "--core-um", "0.3",
                 "--json", "--csv", str(csv)]) == 0
    doc = json.loads(capsys.readouterr().out, parse_constant=_refuse)
    result = temperature_of_table(table, shape="disk", radius_um=30.0, core_um=0.3)
    frames = temperature_frames(result)
    assert frames.columns[0] == "shot" and "frame" not in frames.columns
    assert len(frames) == 5
    assert_frame_equals_csv(frames, csv)
    ens = ensemble_frame(result)
    assert "window_lo" not in ens.columns and ens["core_radius"].iloc[0] == doc["ensemble"][
        "core_radius"]
    assert_row_equals_json(ens.iloc[0], doc["ensemble"])


@pytest.mark.parametrize("given, missing", [({}, "records"), ({"records": []}, "time_key"),
                                            ([1, 2], "records"), ({"records": []}, "ensemble")])
def test_anything_but_a_thermometry_result_is_refused_naming_the_key(given, missing):
    call = ensemble_frame if missing == "ensemble" else temperature_frames
    with pytest.raises(VorthermError, match=f"no '{missing}' key.*temperature_of_run"):
        call(given)
