"""The shared figure style: the ± palette stays apart for colour-blind viewers, figures are
saved in the asked format without replacing files, and nothing touches the backend."""

import ast
from pathlib import Path

import matplotlib
import numpy as np
import pytest

from gpe.errors import VorthermError
from gpe.figures import style

# [pub] Machado, Oliveira & Fernandes, IEEE TVCG 15, 1291 (2009): dichromat simulation at
# severity 1.0, applied to linear RGB.
MACHADO = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}


def _linear(hex_colour: str) -> np.ndarray:
    # [exact] IEC 61966-2-1 (sRGB) transfer function
    c = np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _lab(linear_rgb: np.ndarray) -> np.ndarray:
    # [exact] sRGB (D65) -> XYZ -> CIELAB (CIE 15:2004)
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ np.clip(linear_rgb, 0, 1) / np.array([0.95047, 1.0, 1.08883])
    f = np.where(xyz > (6 / 29) ** 3, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def _distance(a: str, b: str, vision: str | None) -> float:
    la, lb = _linear(a), _linear(b)
    if vision is not None:
        la, lb = MACHADO[vision] @ la, MACHADO[vision] @ lb
    return float(np.linalg.norm(_lab(la) - _lab(lb)))


def test_the_lab_conversion_is_right_on_known_colours():
    # [exact] white is L* = 100, a* = b* = 0; black L* = 0; sRGB red is L* = 53.24 (CIE 15)
    assert _lab(_linear("#FFFFFF")) == pytest.approx([100, 0, 0], abs=0.05)
    assert _lab(_linear("#000000")) == pytest.approx([0, 0, 0], abs=1e-9)
    assert _lab(_linear("#FF0000"))[0] == pytest.approx(53.24, abs=0.05)
    # the simulation must be able to fail: red and green merge for a deuteranope
    assert _distance("#FF0000", "#00A000", None) > 80
    assert _distance("#D62728", "#2CA02C", "deuteranopia") < 25


@pytest.mark.parametrize("vision", [None, "protanopia", "deuteranopia", "tritanopia"])
def test_plus_and_minus_stay_apart_for_every_viewer(vision):
    # CIE76 distance; ~2.3 is just noticeable, > 40 is far apart (common practice)
    assert _distance(style.PLUS_COLOUR, style.MINUS_COLOUR, vision) > 40


@pytest.mark.parametrize("vision", [None, "protanopia", "deuteranopia"])
def test_the_signed_colours_stand_out_from_the_drive_band_and_the_lines(vision):
    for c in (style.PLUS_COLOUR, style.MINUS_COLOUR):
        assert _distance(c, style.DRIVE_COLOUR, vision) > 30
        assert _distance(c, style.OKABE_ITO["black"], vision) > 30


def test_the_palette_is_okabe_ito():
    # [pub] Okabe & Ito, "Color Universal Design" (2008): vermillion (213, 94, 0), blue (0, 114, 178)
    assert style.PLUS_COLOUR.lower() == "#d55e00" and style.MINUS_COLOUR.lower() == "#0072b2"
    assert set(style.CYCLE) <= set(style.OKABE_ITO.values())


def _figure():
    fig = style.new_figure(3, 2)
    ax = fig.subplots()
    ax.plot([0, 1], [0, 1], label="a line")
    return fig


@pytest.mark.parametrize("fmt, magic", [("png", b"\x89PNG"), ("pdf", b"%PDF"), ("svg", b"<?xml")])
def test_save_writes_the_format_and_refuses_to_replace(tmp_path, fmt, magic):
    fig = _figure()
    path = style.save(fig, tmp_path / "sub" / "f", fmt)
    assert path == tmp_path / "sub" / f"f.{fmt}" and path.read_bytes().startswith(magic)
    with pytest.raises(VorthermError, match="exists already"):
        style.save(fig, tmp_path / "sub" / "f", fmt)
    assert style.save(fig, path, overwrite=True) == path     # the suffix names the format
    assert [p.name for p in (tmp_path / "sub").iterdir()] == [f"f.{fmt}"]  # no partial file


def test_vector_output_is_reproducible(tmp_path):
    a = style.save(_figure(), tmp_path / "a.pdf")
    b = style.save(_figure(), tmp_path / "b.pdf")
    assert a.read_bytes() == b.read_bytes()


def test_unknown_formats_are_refused_with_the_accepted_ones(tmp_path):
    with pytest.raises(VorthermError, match="png, pdf, svg"):
        style.save(_figure(), tmp_path / "f", "eps")
    assert list(tmp_path.iterdir()) == []


def test_legends_sit_outside_the_axes():
    fig = _figure()
    legend = style.legend_outside(fig)
    fig.draw_without_rendering()   # the layout, without a canvas of pyplot
    box, axes_box = legend.get_window_extent(), fig.axes[0].get_window_extent()
    assert box.y1 <= axes_box.y0 + 1e-6 or box.y0 >= axes_box.y1 - 1e-6


def test_no_module_of_the_package_selects_a_backend():
    root = Path(__file__).resolve().parents[3]
    calls = []
    for path in list((root / "gpe").rglob("*.py")) + list((root / "thermo").rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                    and node.func.attr in ("use", "switch_backend")
                    and isinstance(node.func.value, ast.Name)
                    and node.func.value.id in ("matplotlib", "mpl", "plt")):
                calls.append(f"{path.relative_to(root)}:{node.lineno}")
    assert calls == []
    assert matplotlib.get_backend()   # the walk ran with matplotlib importable
