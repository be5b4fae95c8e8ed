"""Tests of thermo.data.measured: reading measured vortex tables, units, and row reporting.

The geometry, the pixel calibration and the geometry TOML are tested in test_geometry.py."""

from __future__ import annotations

import warnings

import h5py
import numpy as np
import pytest

from thermo.data.geometry import PixelCalibration, um_to_pixels
from thermo.data.measured import MeasuredTableError, MeasuredTableWarning, read_measured
from thermo.domains.box import Box
from thermo.domains.disk import Disk

GOOD = """# a comment line
shot, x, y, sign
a, 10.0, 0.0, 1
a, -20.0, 5.0, -1
b, 0.0, 30.0, +1
b, 0.0, -30.0, -
"""


def _write(tmp_path, text, name="table.csv", toml=None):
    p = tmp_path / name
    p.write_text(text)
    if toml is not None:
        p.with_suffix(".toml").write_text(toml)
    return p


def test_reads_um_table_and_scales_by_radius(tmp_path):
    """Scaled positions are r / R exactly (thermo convention, disk radius 1)."""
    p = _write(tmp_path, GOOD, toml='shape = "disk"\nradius_um = 40.0\ncore_um = 0.8\n')
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a clean table gives no warning at all
        ens = read_measured(p)
    assert isinstance(ens.domain, Disk)
    assert ens.shot_ids == ["a", "b"]
    np.testing.assert_array_equal(ens.n_vortices, [2, 2])
    np.testing.assert_allclose(ens.shots[0].positions, [[0.25, 0.0], [-0.5, 0.125]], rtol=0,
                               atol=1e-15)
    np.testing.assert_array_equal(ens.shots[1].signs, [1, -1])
    assert ens.core_radius == pytest.approx(0.02, rel=1e-15)
    assert ens.length_scale_um == 40.0
    assert ens.problems == ()
    np.testing.assert_array_equal(ens.shots[0].rows, [3, 4])  # file line numbers


def test_arguments_override_toml(tmp_path):
    p = _write(tmp_path, GOOD, toml='radius_um = 40.0\ncore_um = 0.8\n')
    ens = read_measured(p, radius_um=80.0)
    np.testing.assert_allclose(ens.shots[0].positions[0], [0.125, 0.0], atol=1e-15)
    assert ens.core_radius == pytest.approx(0.01)


def test_box_geometry_uses_height_as_unit(tmp_path):
    """thermo.domains.box.Box is [-aspect/2, aspect/2] x [-1/2, 1/2]: unit = side along y."""
    text = "shot,x,y,sign\n0, 35.0, -9.0, 1\n0, -10.0, 9.0, -1\n0, 45.0, 0.0, 1\n"
    p = _write(tmp_path, text)
    with pytest.warns(MeasuredTableWarning, match=r"line 4: position \(45, 0\) um is outside"):
        ens = read_measured(p, width_um=80.0, height_um=20.0)
    assert isinstance(ens.domain, Box) and ens.domain.aspect == pytest.approx(4.0)
    np.testing.assert_allclose(ens.shots[0].positions, [[1.75, -0.45], [-0.5, 0.45]])


def test_pixel_table_matches_um_table(tmp_path):
    """The same vortices written in pixels and in um give the same configurations."""
    calib = PixelCalibration(pixel_um=0.5, center_px=(100.0, 80.0))
    um = np.array([[10.0, 0.0], [-20.0, 5.0], [0.0, 30.0], [3.0, -30.0]])
    px = um_to_pixels(um, calib)
    rows = ["shot,x,y,sign"] + [f"{k // 2},{float(x)!r},{float(y)!r},{s}" for k, ((x, y), s) in
                                enumerate(zip(px, [1, -1, 1, -1]))]
    p_px = _write(tmp_path, "\n".join(rows) + "\n", "px.csv",
                  toml="radius_um = 40.0\npixel_um = 0.5\ncenter_px = [100.0, 80.0]\n")
    rows = ["shot,x,y,sign"] + [f"{k // 2},{float(x)!r},{float(y)!r},{s}" for k, ((x, y), s) in
                                enumerate(zip(um, [1, -1, 1, -1]))]
    p_um = _write(tmp_path, "\n".join(rows) + "\n", "um.csv")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        a = read_measured(p_px)
        b = read_measured(p_um, radius_um=40.0)
    np.testing.assert_array_equal(a.n_vortices, [2, 2])
    for sa, sb in zip(a.shots, b.shots):
        np.testing.assert_allclose(sa.positions, sb.positions, atol=1e-12)


BAD = """# demo with bad rows
shot,x,y,sign,t
s1, 1.0, 2.0, 1, 0.5
s1, 3.0, 4.0, q, 0.5
s1, nan, 4.0, -1, 0.5
s1, 5.0, 6.0, , 0.5
s1, 50.0, 0.0, -1, 0.5
s1, 1.0, 2.0, -1, 0.5
s1, abc, 2.0, -1, 0.5
s2, 1.0, 2.0, 0, 0.7
s2, 1.0
s2, -7.0, 2.0, -1.0, 0.7
"""


def test_each_bad_row_kind_is_reported_with_its_line(tmp_path):
    p = _write(tmp_path, BAD)
    with pytest.warns(MeasuredTableWarning) as rec:
        ens = read_measured(p, radius_um=40.0)
    by_row = {pr.row: pr.reason for pr in ens.problems}
    assert set(by_row) == {4, 5, 6, 7, 8, 9, 10, 11}
    assert "unknown sign 'q'" in by_row[4]
    assert "x is nan" in by_row[5].lower()
    assert "missing sign" in by_row[6]
    assert "outside" in by_row[7]
    assert "duplicate position of line 3" in by_row[8]
    assert "not a number" in by_row[9]
    assert "unknown sign '0'" in by_row[10]
    assert "fields" in by_row[11]
    msg = str(rec[0].message)
    for line in (4, 5, 6, 7, 8, 9, 10, 11):
        assert f"line {line}:" in msg
    # nothing dropped silently: usable + reported = data rows
    assert sum(ens.n_vortices) + len(ens.problems) == ens.n_rows == 10
    np.testing.assert_array_equal(ens.shots[1].signs, [-1])
    assert ens.shots[0].t == 0.5 and ens.shots[1].t == pytest.approx(0.7)


def test_strict_raises_naming_file_row_and_accepted(tmp_path):
    p = _write(tmp_path, BAD)
    with pytest.raises(MeasuredTableError, match=r"table.csv, line 4: unknown sign .*Accepted"):
        read_measured(p, radius_um=40.0, strict=True)


def test_missing_columns_error_names_found_and_required(tmp_path):
    p = _write(tmp_path, "shot,x,charge\n1,2,3\n")
    with pytest.raises(MeasuredTableError, match=r"found \['shot', 'x', 'charge'\].*"
                                                 r"missing \['y', 'sign'\]"):
        read_measured(p, radius_um=10.0)


def test_read_measured_needs_a_geometry(tmp_path):
    p = _write(tmp_path, GOOD)
    with pytest.raises(MeasuredTableError, match="no geometry"):
        read_measured(p)


@pytest.mark.parametrize("layout", ["compound", "group"])
def test_hdf5_table_matches_csv(tmp_path, layout):
    csv_ens = read_measured(_write(tmp_path, GOOD), radius_um=40.0)
    path = tmp_path / "t.h5"
    shots = np.array([b"a", b"a", b"b", b"b"])
    x = np.array([10.0, -20.0, 0.0, 0.0])
    y = np.array([0.0, 5.0, 30.0, -30.0])
    s = np.array([1, -1, 1, -1], dtype=np.int8)
    with h5py.File(path, "w") as f:
        if layout == "compound":
            arr = np.zeros(4, dtype=[("shot", "S4"), ("x", "f8"), ("y", "f8"), ("sign", "i1")])
            arr["shot"], arr["x"], arr["y"], arr["sign"] = shots, x, y, s
            f["vortices"] = arr
        else:
            g = f.create_group("vortices")
            g["shot"], g["x"], g["y"], g["sign"] = shots, x, y, s
    h5_ens = read_measured(path, radius_um=40.0)
    assert h5_ens.shot_ids == csv_ens.shot_ids
    for a, b in zip(h5_ens.shots, csv_ens.shots):
        np.testing.assert_array_equal(a.positions, b.positions)
        np.testing.assert_array_equal(a.signs, b.signs)


def test_hdf5_bad_row_reported_by_index(tmp_path):
    path = tmp_path / "t.h5"
    with h5py.File(path, "w") as f:
        g = f.create_group("vortices")
        g["shot"] = np.array([0, 0, 1])
        g["x"] = np.array([0.1, np.nan, 0.3])
        g["y"] = np.array([0.0, 0.0, 0.0])
        g["sign"] = np.array([1, 1, 2])
    with pytest.warns(MeasuredTableWarning, match="index 1: x is nan"):
        ens = read_measured(path, radius_um=1.0)
    assert [(p.row, p.where) for p in ens.problems] == [(1, "index"), (2, "index")]
    assert "unknown sign '2'" in ens.problems[1].reason


def test_demo_table_reports_exactly_its_three_planted_rows():
    """runs/demo_measured.csv (synthetic, see its header) has three planted bad rows."""
    from pathlib import Path
    demo = Path(__file__).resolve().parents[3] / "runs" / "demo_measured.csv"
    with pytest.warns(MeasuredTableWarning):
        ens = read_measured(demo)
    lines = demo.read_text().splitlines()
    reasons = [p.reason for p in ens.problems]
    assert [p.row for p in ens.problems] == [len(lines) - 2, len(lines) - 1, len(lines)]
    assert reasons[0].startswith("unknown sign") and "nan" in reasons[1]
    assert "outside" in reasons[2]
    assert len(ens.shots) == 30 and ens.core_radius == pytest.approx(0.5 / 40)


def test_the_core_rule_leaves_out_both_of_a_close_pair_and_counts_them(tmp_path):
    """With core_um = 1 (minimum separation 2 um): a vortex 0.5 um from the wall is left out,
    and a vortex 1.5 um from another leaves out both of them (the rule of thermo/admission.py,
    the same as for simulated frames); all rows are usable rows, nothing is reported as a row
    problem, and the counts are kept per shot."""
    text = "shot,x,y,sign\n0, 0.0, 0.0, 1\n0, 39.5, 0.0, -1\n0, 1.5, 0.0, -1\n0, 5.0, 0.0, -1\n"
    p = _write(tmp_path, text)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ens = read_measured(p, radius_um=40.0, core_um=1.0)
    assert ens.problems == () and ens.n_vortices[0] == 4
    kept = ens.admitted[0]
    assert (kept.left_out_wall, kept.left_out_pairs) == (1, 1)
    np.testing.assert_allclose(ens.configurations[0][0], [[5.0 / 40.0, 0.0]])
    # without a core in the table the default core (2% of R = 0.8 um) still separates 1.5 um
    # from 0: 1.5 < 2 x 0.8, so the pair is left out there too
    dflt = read_measured(p, radius_um=40.0)
    assert not dflt.core_given and dflt.core_radius == pytest.approx(0.02)
    assert dflt.admitted[0].left_out_pairs == 1


def test_a_utf8_table_with_a_byte_order_mark_reads_like_one_without(tmp_path):
    # spreadsheets' "CSV UTF-8" starts the file with a BOM, which must not stick to 'shot'
    toml = 'shape = "disk"\nradius_um = 40.0\n'
    plain = read_measured(_write(tmp_path, GOOD, toml=toml))
    bom = tmp_path / "bom.csv"
    bom.write_bytes(b"\xef\xbb\xbf" + GOOD.encode("utf-8"))
    bom.with_suffix(".toml").write_text(toml)
    ens = read_measured(bom)
    assert ens.shot_ids == plain.shot_ids == ["a", "b"]
    for a, b in zip(ens.shots, plain.shots):
        np.testing.assert_array_equal(a.positions, b.positions)
        np.testing.assert_array_equal(a.rows, b.rows)           # lines counted the same


def test_other_encodings_are_refused_by_name(tmp_path):
    # a Latin-1 'micro' sign (0xb5) in the second comment line, at byte 12 of the file
    text = "# lab table\n# x, y in \u00b5m\n" + GOOD
    p = tmp_path / "latin.csv"
    p.write_bytes(text.encode("latin-1"))
    with pytest.raises(MeasuredTableError) as info:
        read_measured(p, radius_um=40.0)
    msg = str(info.value)
    assert "latin.csv, line 2" in msg and "byte 22 (0xb5" in msg and "save it as UTF-8" in msg
    p16 = tmp_path / "wide.csv"
    p16.write_bytes(GOOD.encode("utf-16"))                      # with its byte-order mark
    with pytest.raises(MeasuredTableError, match=r"wide\.csv: the file is UTF-16 text.*UTF-8"):
        read_measured(p16, radius_um=40.0)
    p16le = tmp_path / "wide_nobom.csv"
    p16le.write_bytes(GOOD.encode("utf-16-le"))                 # no mark: NUL bytes tell
    with pytest.raises(MeasuredTableError, match=r"wide_nobom\.csv, line 1: byte 1 is a NUL"):
        read_measured(p16le, radius_um=40.0)


def test_an_hdf5_file_with_a_text_name_is_refused_as_such(tmp_path):
    p = tmp_path / "table.csv"
    with h5py.File(p, "w") as f:
        f["vortices"] = np.zeros(2)
    with pytest.raises(MeasuredTableError, match=r"table\.csv: an HDF5 file, not a CSV.*\.h5"):
        read_measured(p, radius_um=40.0)


def test_a_core_comparable_to_the_domain_is_warned_with_its_numbers(tmp_path):
    """core_um = 6 um in a disk of 40 um: a = 15% of R; two hard cores of a shot cover
    2 pi a^2 / (pi R^2) = 4.5% of the disk [exact area ratio]."""
    from thermo.admission import CoreRadiusWarning

    p = _write(tmp_path, GOOD, toml='shape = "disk"\nradius_um = 40.0\ncore_um = 6.0\n')
    with pytest.warns(CoreRadiusWarning, match=r"table.csv: the vortex core radius is 15% "
                                               r"of the domain size.*2 hard cores cover 4.5% "):
        read_measured(p)
