"""Figures are for people: every axis labelled with its unit, colour bars present, titles say
what and when; the animation writer produces a readable file."""

import numpy as np
import pytest

from gpe.analysis.vortices import VORTEX_DTYPE
from gpe.errors import VorthermError
from gpe.figures import run as plots


@pytest.fixture
def frames():
    x = np.linspace(-10, 10, 40, endpoint=False)
    y = x.copy()
    X, Y = np.meshgrid(x, y)
    psi = []
    for shift in (0.0, 1.0, 2.0):
        z = (X - shift) + 1j * Y
        psi.append(np.tanh(np.abs(z)) * np.exp(1j * np.angle(z)))
    table = np.zeros(3, dtype=VORTEX_DTYPE)
    table["frame"] = [0, 1, 2]
    table["x"] = [0.0, 1.0, 2.0]
    table["sign"] = 1
    return np.array(psi), x, y, np.array([0.0, 1.0, 2.0]), table


def _labelled(ax):
    return ax.get_xlabel() and ax.get_ylabel()


def test_density_phase_panels_are_labelled_in_micrometres(frames):
    psi, x, y, t, table = frames
    fig = plots.density_phase_panels(psi, x, y, t, table, frames=[0, -1], length_um=0.7,
                                     time_ms=0.6)
    image_axes = [ax for ax in fig.axes if ax.images]
    assert len(image_axes) == 4
    assert all(_labelled(ax) and "µm" in ax.get_xlabel() for ax in image_axes)
    assert all("ms" in ax.get_title() for ax in image_axes)
    colorbars = [ax for ax in fig.axes if not ax.images and ax.get_ylabel()]
    assert len(colorbars) >= 4
    with pytest.raises(VorthermError, match="out of range"):
        plots.density_phase_panels(psi, x, y, t, table, frames=[5])


def test_counts_and_energies_have_units(frames):
    psi, x, y, t, table = frames
    fig = plots.vortex_counts(table, t, time_ms=0.6)
    assert _labelled(fig.axes[0]) and "ms" in fig.axes[0].get_xlabel()
    obs = {"e_kin": np.ones(3), "e_int": np.ones(3), "e_trap": np.zeros(3), "energy": 2 * np.ones(3)}
    fig = plots.energies(t, obs, time_ms=0.6)
    assert all(_labelled(ax) for ax in fig.axes if ax.lines)


def test_animation_is_written(frames, tmp_path):
    psi, x, y, t, table = frames
    path = plots.write_animation(psi, x, y, t, tmp_path / "movie.mp4", table)
    assert path.exists() and path.stat().st_size > 1000
    assert path.suffix in (".gif", ".mp4")
