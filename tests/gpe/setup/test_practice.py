"""Common-practice warnings of gpe/setup/practice.py: a beam that never enters the fluid, a beam
faster than the sound speed; each with its numbers, and silent for the protocols we ship."""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import pytest
from tiny_protocol import TINY, tiny_protocol_text

from gpe.errors import ProtocolWarning
from gpe.setup.protocol import load_protocol, parse_protocol

RUNS = Path(__file__).resolve().parents[3] / "runs"


def _messages(text: str) -> list[str]:
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        parse_protocol(text, source="p.toml")
    return [str(w.message) for w in record if issubclass(w.category, ProtocolWarning)]


def _moved(y: float, speed: float = 0.5, size: float = 72.0, nx: int = 96) -> str:
    """The tiny protocol (disk of radius 20 xi) with its beam line at height y, run for long
    enough (50 hbar/mu) that the beam crosses the whole line (24 xi)."""
    return (tiny_protocol_text(speed=speed, duration=50.0)
            .replace("size_xi = 48.0", f"size_xi = {size}").replace("nx = 64", f"nx = {nx}")
            .replace("start_xi = [-12.0, 1.0]", f"start_xi = [-12.0, {y}]")
            .replace("end_xi = [12.0, 1.0]", f"end_xi = [12.0, {y}]"))


def test_a_beam_outside_the_fluid_is_named_with_its_distance():
    import numpy as np

    from gpe.field.grid import Grid

    text = _moved(28.0)
    (msg,) = [m for m in _messages(text) if "never enters" in m]
    # [exact] the line y = 28 passes a disk of fluid of radius r_f at distance 28 - r_f (at
    # x = 0); r_f is where the smooth wall reaches mu, found here on a fine line of points
    trap = parse_protocol(text, source="p.toml").trap
    line = Grid(8, 8192, 8.0, 72.0)
    v = trap.potential(line)[:, 4]
    r_fluid = float(np.max(np.abs(line.y[v < 1.0])))
    assert 17.0 < r_fluid < 20.0
    gap = float(re.search(r"stays about ([\d.]+) xi", msg).group(1))
    assert gap == pytest.approx(28.0 - r_fluid, abs=72.0 / 96)   # within a grid cell
    assert "[beams.0]" in msg and "waist 3 xi" in msg and " um " in msg and " ms" in msg
    x = float(re.search(r"at \(x, y\) = \(([-\d.]+), 28\) xi", msg).group(1))
    # the closest point is at x = 0 up to the grid cell: sqrt(x^2 + 28^2) <= 28 + 0.75 xi
    assert abs(x) < 6.5


@pytest.mark.parametrize("y", [1.0, 21.5])
def test_a_beam_through_or_grazing_the_fluid_is_not_warned_about(y):
    # y = 21.5: the centre is 1.5 xi outside the disk, within its waist (3 xi): it stirs the edge
    assert not [m for m in _messages(_moved(y)) if "never enters" in m]


def test_a_beam_switched_off_before_it_reaches_the_fluid_is_warned_about():
    # a line from far outside and a ramp that switches the beam off after 5 hbar/mu, when it
    # has moved 2.5 xi of the ~14 it needs to reach the fluid
    text = _moved(1.0).replace("start_xi = [-12.0, 1.0]", "start_xi = [-32.0, 1.0]") \
        .replace("end_xi = [12.0, 1.0]", "end_xi = [32.0, 1.0]")
    text = text.replace("height_mu = 2.0\n", "height_mu = 2.0\nswitch_off_time_tau = 5.0\n")
    assert [m for m in _messages(text) if "never enters" in m]
    assert not [m for m in _messages(text.replace("off_time_tau = 5.0", "off_time_tau = 30.0"))
                if "never enters" in m]


def test_a_supersonic_beam_is_named_with_both_speeds():
    (msg,) = [m for m in _messages(_moved(1.0, speed=1.3)) if "sound speed" in m]
    assert "1.3 c" in msg and "[beams.0]" in msg and "sqrt(g n0 / m)" in msg
    # [exact] c = sqrt(mu/m) for mu = 20 nK in 87Rb; 1.3 c in mm/s is 1.3 times it
    c = float(re.search(r"= 1 c = ([\d.]+) mm/s", msg).group(1))
    fast = float(re.search(r"1.3 c = ([\d.]+) mm/s", msg).group(1))
    assert fast == pytest.approx(1.3 * c, rel=5e-3)
    from scipy import constants

    m_rb87 = 86.909180527 * constants.atomic_mass   # from memory: 87Rb mass in u
    assert c == pytest.approx(1e3 * (20e-9 * constants.k / m_rb87) ** 0.5, rel=5e-3)
    assert not [m for m in _messages(_moved(1.0, speed=0.9)) if "sound speed" in m]


def test_the_shipped_protocols_raise_neither_warning():
    from gpe.setup.protocol import example_protocol_text

    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        load_protocol(RUNS / "demo.toml")
        parse_protocol(example_protocol_text(), source="example.toml")
    bad = [str(w.message) for w in record if "never enters" in str(w.message)
           or "sound speed" in str(w.message)]
    assert bad == []


def test_the_tiny_test_protocol_raises_neither_warning():
    assert _messages(TINY) == []
