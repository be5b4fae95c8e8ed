"""Image files: 16-bit PNG/TIFF and the HDF5 stack, written and read back; bad files refused."""

import h5py
import numpy as np
import pytest
from PIL import Image

from gpe.imaging.files import read_images, write_image, write_stack
from gpe.imaging.render import ImagingError


@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_16_bit_pictures_round_trip_exactly(tmp_path, suffix, rng):
    """[exact] 16-bit grey PNG and TIFF are lossless: every count from 0 to 65535 comes back."""
    counts = rng.integers(0, 65536, size=(40, 56))
    counts[0, 0], counts[0, 1] = 0, 65535
    path = write_image(tmp_path / f"a{suffix}", counts)
    if suffix == ".png":       # [exact] PNG specification: IHDR bit depth, byte 24 of the file
        assert path.read_bytes()[24] == 16
    else:                      # TIFF tag 258, BitsPerSample
        with Image.open(path) as im:
            assert im.tag_v2[258] in (16, (16,))
    stack = read_images(path, pixel_um=0.5)
    np.testing.assert_array_equal(stack.density[0], counts)
    assert stack.pixel_um == 0.5 and stack.core_px is None


def test_the_stack_keeps_images_attributes_and_truth(tmp_path, rng):
    dens = [rng.integers(0, 1000, size=(16, 20)) for _ in range(3)]
    truth = np.array([(0, 1.5, 2.5, 1), (2, 3.0, 4.0, -1)],
                     dtype=[("image", "<i8"), ("x_px", "<f8"), ("y_px", "<f8"), ("sign", "i1")])
    path = write_stack(tmp_path / "s.h5", dens, bragg=dens, frame=[4, 5, 6], t=[1.0, 2.0, 3.0],
                       truth=truth, attrs={"pixel_um": 0.4, "core_px": 1.5, "bragg_axis": "x"})
    stack = read_images(path)
    np.testing.assert_array_equal(stack.density, np.stack(dens))
    np.testing.assert_array_equal(stack.bragg, np.stack(dens))
    assert (stack.pixel_um, stack.core_px, stack.attrs["bragg_axis"]) == (0.4, 1.5, "x")
    np.testing.assert_array_equal(stack.frame, [4, 5, 6])
    np.testing.assert_array_equal(stack.truth, truth)
    assert read_images(path, pixel_um=0.8).pixel_um == 0.8     # the option wins
    assert not (tmp_path / "s.h5.part").exists()


def test_counts_that_do_not_fit_16_bits_are_refused_not_clipped(tmp_path):
    with pytest.raises(ImagingError, match="16 bits"):
        write_image(tmp_path / "a.png", np.full((8, 8), 70000.0))
    assert not (tmp_path / "a.png").exists()


def test_8_bit_pictures_are_read(tmp_path):
    Image.fromarray(np.full((12, 12), 200, np.uint8)).save(tmp_path / "b.png")
    assert read_images(tmp_path / "b.png").density.max() == 200


@pytest.mark.parametrize("mode, words", [("RGB", "colour or floating point"),
                                         ("F", "colour or floating point")])
def test_colour_and_float_pictures_are_refused_naming_the_file(tmp_path, mode, words):
    path = tmp_path / ("c.tif" if mode == "F" else "c.png")
    arr = np.zeros((12, 12, 3), np.uint8) if mode == "RGB" else np.zeros((12, 12), np.float32)
    Image.fromarray(arr).save(path)
    with pytest.raises(ImagingError, match=words) as info:
        read_images(path)
    assert str(path) in str(info.value) and "8 or 16 bits" in str(info.value)


def test_stacks_of_the_wrong_shape_and_other_bad_files_are_refused(tmp_path):
    with h5py.File(tmp_path / "flat.h5", "w") as f:
        f["density"] = np.zeros((16, 16), np.uint16)
    with pytest.raises(ImagingError, match=r"flat.h5.*\(images, rows, columns\)"):
        read_images(tmp_path / "flat.h5")
    with h5py.File(tmp_path / "none.h5", "w") as f:
        f["other"] = 1
    with pytest.raises(ImagingError, match="no 'density' dataset"):
        read_images(tmp_path / "none.h5")
    (tmp_path / "x.jpg").write_bytes(b"")
    with pytest.raises(ImagingError, match="accepted images"):
        read_images(tmp_path / "x.jpg")
    (tmp_path / "junk.png").write_bytes(b"not a picture")
    with pytest.raises(ImagingError, match="junk.png: not a PNG or TIFF"):
        read_images(tmp_path / "junk.png")
    with pytest.raises(ImagingError, match="does not exist"):
        read_images(tmp_path / "missing.h5")


def test_a_pixel_size_of_zero_is_refused_naming_the_file(tmp_path):
    write_image(tmp_path / "a.png", np.ones((16, 16)))
    with pytest.raises(ImagingError, match=r"a.png: pixel size 0.0 .*accepted a pixel side > 0"):
        read_images(tmp_path / "a.png", pixel_um=0.0)
    write_stack(tmp_path / "z.h5", [np.ones((16, 16))], attrs={"pixel_um": 0.0})
    with pytest.raises(ImagingError, match=r"z.h5: pixel size 0.0 \(attribute pixel_um\)"):
        read_images(tmp_path / "z.h5")
