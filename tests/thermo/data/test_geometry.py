"""Tests of thermo.data.geometry: pixel calibration and the geometry of a measured table."""

from __future__ import annotations

import numpy as np
import pytest

from thermo.data.geometry import (
    PixelCalibration,
    pixels_to_um,
    resolve_geometry,
    um_to_pixels,
)
from thermo.domains.box import Box
from thermo.errors import MeasuredTableError


def test_pixel_conversion_round_trips(rng):
    calib = PixelCalibration(pixel_um=0.73, center_px=(255.5, 240.25))
    xy_px = rng.uniform(0, 512, size=(50, 2))
    np.testing.assert_allclose(um_to_pixels(pixels_to_um(xy_px, calib), calib), xy_px,
                               rtol=0, atol=1e-10)
    # the centre maps to the origin, one pixel to pixel_um
    np.testing.assert_allclose(pixels_to_um([[255.5, 240.25], [256.5, 240.25]], calib),
                               [[0, 0], [0.73, 0]], atol=1e-12)


def test_geometry_errors(tmp_path):
    p = tmp_path / "table.csv"  # the table itself is never read here
    p.write_text("shot,x,y,sign\n")
    with pytest.raises(MeasuredTableError, match="no geometry"):
        resolve_geometry(p)
    p.with_suffix(".toml").write_text("radius_um = 40\ncolour = 'red'\n")
    with pytest.raises(MeasuredTableError, match="unknown key"):
        resolve_geometry(p)
    p.with_suffix(".toml").unlink()
    with pytest.raises(MeasuredTableError, match="positive"):
        resolve_geometry(p, radius_um=-3.0)
    with pytest.raises(MeasuredTableError, match="both pixel_um and center_px"):
        resolve_geometry(p, radius_um=40.0, pixel_um=0.5)


def test_unknown_shape_in_a_geometry_file_is_refused_by_name(tmp_path):
    # the shapes are the kind names of the thermo domain classes, and the message lists them
    p = tmp_path / "table.csv"
    p.write_text("shot,x,y,sign\n")
    p.with_suffix(".toml").write_text('shape = "hexagon"\nradius_um = 40.0\n')
    with pytest.raises(MeasuredTableError,
                       match=r"geometry shape 'hexagon' is not known; accepted: 'annulus', 'box', 'disk'$"):
        resolve_geometry(p)
    # a numerical (mask and density) domain cannot come from a radius in a geometry file: the
    # table would silently get the interface checks' stand-in disk
    p.with_suffix(".toml").write_text('shape = "grid"\nradius_um = 40.0\n')
    with pytest.raises(MeasuredTableError, match=r"shape = 'grid' is a cloud image: give "
                                                 r"mask_file or density_file"):
        resolve_geometry(p)
    # a known shape builds the domain of that kind, with its size as the length unit
    p.with_suffix(".toml").write_text('shape = "box"\nwidth_um = 80.0\nheight_um = 50.0\n')
    geometry, _ = resolve_geometry(p)
    assert geometry.domain() == Box(aspect=1.6) and geometry.length_scale_um == 50.0
    assert geometry.domain().kind == geometry.shape == "box"
    with pytest.raises(MeasuredTableError, match="a box needs a positive number height_um"):
        resolve_geometry(p, height_um=-1.0)


def test_geometry_files_are_utf8_with_or_without_a_byte_order_mark(tmp_path):
    p = tmp_path / "table.csv"
    p.write_text("shot,x,y,sign\n")
    toml = '# cloud of 3 May\nshape = "disk"\nradius_um = 40.0\n'
    p.with_suffix(".toml").write_bytes(b"\xef\xbb\xbf" + toml.encode("utf-8"))
    geometry, _ = resolve_geometry(p)
    assert geometry.shape == "disk" and geometry.radius_um == 40.0
    # the same file written in Latin-1 with a 'micro' sign: refused by line and byte
    p.with_suffix(".toml").write_bytes(('# sizes in \u00b5m\n' + toml).encode("latin-1"))
    with pytest.raises(MeasuredTableError,
                       match=r"table\.toml, line 1: byte 11 \(0xb5.*save it as UTF-8"):
        resolve_geometry(p)
