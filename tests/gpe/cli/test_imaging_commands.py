"""`vortherm image` and `vortherm find` through the entry point, with wrong inputs."""

import json

import numpy as np
import pytest
from PIL import Image

from gpe.cli.main import main
from gpe.imaging.files import read_images
from imprint_run import simulate_imprint_run
from thermo.data.geometry import read_geometry_file


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return simulate_imprint_run(tmp_path_factory.mktemp("cli_imaging"), n=6, duration=4.0)


def test_image_then_find_with_calibration_writes_the_table_its_geometry_and_the_model(
        run, tmp_path, capsys):
    stack = tmp_path / "s.h5"
    assert main(["image", str(run), "-o", str(stack), "--pixel-um", "0.4", "--psf-um", "0.3",
                 "--counts-per-n0", "400", "--bragg-axis", "x", "--pictures", "png"]) == 0
    assert "3 images written" in capsys.readouterr().out
    images = read_images(stack)
    assert images.density.shape[0] == 3 and images.bragg is not None
    assert (tmp_path / "s_00002.png").exists() and (tmp_path / "s_00002_bragg.png").exists()
    csv = tmp_path / "t.csv"
    assert main(["find", str(stack), "--csv", str(csv), "--calibrate"]) == 0
    out = capsys.readouterr().out
    assert "18 vortices in 3 images" in out and "detection model (18/18" in out
    geometry = read_geometry_file(csv.with_suffix(".toml"))
    assert geometry["pixel_um"] == 0.4 and set(geometry["imaging"]) == {
        "blur_um", "edge_loss_um", "resolution_um", "sign_error"}
    model = json.loads((tmp_path / "t_detection.json").read_text())
    assert model["n_true"] == 18 and model["imaging_um"] == geometry["imaging"]
    rows = [line for line in csv.read_text().splitlines() if line[:1].isdigit()]
    assert len(rows) == 18 and all(r.split(",")[3] in ("+1", "-1") for r in rows)
    # a picture alone: the pixel size and the core width must be given
    assert main(["find", str(tmp_path / "s_00002.png"), "--csv", str(tmp_path / "p.csv"),
                 "--pixel-um", "0.4", "--core-px", str(images.core_px)]) == 0
    assert "6 vortices in 1 images" in capsys.readouterr().out
    # with the optics given, the picture's cores pass the depth test
    assert main(["find", str(tmp_path / "s_00002.png"), "--csv", str(tmp_path / "o.csv"),
                 "--pixel-um", "0.4", "--core-px", str(images.core_px), "--psf-um", "0.3"]) == 0
    assert "6 vortices in 1 images" in capsys.readouterr().out
    # the model measured above, reused for the picture's table
    assert main(["find", str(tmp_path / "s_00002.png"), "--csv", str(tmp_path / "q.csv"),
                 "--pixel-um", "0.4", "--core-px", str(images.core_px),
                 "--model", str(tmp_path / "t_detection.json")]) == 0
    assert read_geometry_file(tmp_path / "q.toml")["imaging"] == geometry["imaging"]


def test_wrong_inputs_exit_with_code_2_naming_what_is_wrong(run, tmp_path, capsys):
    assert main(["image", str(run), "-o", str(tmp_path / "a.h5"), "--pixel-um", "0"]) == 2
    assert "pixel_um" in capsys.readouterr().err
    Image.fromarray(np.zeros((16, 16, 3), np.uint8)).save(tmp_path / "rgb.png")
    assert main(["find", str(tmp_path / "rgb.png"), "--pixel-um", "0.4", "--core-px", "2"]) == 2
    err = capsys.readouterr().err
    assert "rgb.png" in err and "8 or 16 bits" in err
    Image.fromarray(np.zeros((16, 16), np.uint16)).save(tmp_path / "empty.png")
    assert main(["find", str(tmp_path / "empty.png"), "--pixel-um", "0.4", "--core-px", "2"]) == 2
    assert "empty image" in capsys.readouterr().err
    Image.fromarray(np.full((16, 16), 100, np.uint16)).save(tmp_path / "nopix.png")
    assert main(["find", str(tmp_path / "nopix.png"), "--core-px", "2"]) == 2
    assert "no pixel size" in capsys.readouterr().err
    (tmp_path / "bad.json").write_text('{"imaging_um": {"blur_um": -1}}')
    assert main(["find", str(tmp_path / "nopix.png"), "--pixel-um", "0.4", "--core-px", "2",
                 "--model", str(tmp_path / "bad.json")]) == 2
    assert "bad.json" in capsys.readouterr().err
    assert main(["find", str(tmp_path / "nopix.png"), "--pixel-um", "0.4", "--core-px", "2",
                 "--psf-um", "-0.3"]) == 2
    err = capsys.readouterr().err
    assert "nopix.png" in err and "PSF width -0.3 um" in err and "accepted" in err
