"""Tests of thermo.data.geometry: pixel calibration and the geometry of a measured table."""

from __future__ import annotations

import numpy as np
import pytest

from thermo.errors import MeasuredTableError
from thermo.data.geometry import PixelCalibration, pixels_to_um, resolve_geometry, um_to_pixels


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
