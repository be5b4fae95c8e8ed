"""Figures are for people: every axis labelled with its unit, colour bars present, titles say
what and when, legends off the data, N+ and N- both visible, beams and the drive window shown,
energies per atom in mu and nK; the animation writer produces a readable file; no plot call
touches the backend or pyplot's figure list."""

import sys

import matplotlib
import numpy as np
import pytest

from gpe.analysis.vortices import VORTEX_DTYPE
from gpe.errors import VorthermError
from gpe.figures import run as plots
from gpe.figures import standard, style


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
    obs = {"e_kin": np.ones(3), "e_int": np.ones(3), "e_trap": np.zeros(3), "energy": 2 * np.ones(3),
           "norm": np.ones(3)}
    fig = plots.energies(t, obs, time_ms=0.6)
    assert all(_labelled(ax) for ax in fig.axes if ax.lines)


def test_animation_is_written(frames, tmp_path):
    psi, x, y, t, table = frames
    path = plots.write_animation(psi, x, y, t, tmp_path / "movie.mp4", table)
    assert path.exists() and path.stat().st_size > 1000
    assert path.suffix in (".gif", ".mp4")


def _backend_state():
    raw = dict.__getitem__(matplotlib.rcParams, "backend")   # without resolving it
    plt = sys.modules.get("matplotlib.pyplot")
    return raw, None if plt is None else tuple(plt.get_fignums())


def _observables(n=3):
    return {"norm": np.full(n, 4.0), "e_kin": np.full(n, 2.0), "e_int": np.full(n, 1.0),
            "energy": np.full(n, 6.0), "mu": np.full(n, 1.2)}


def test_no_plot_call_changes_the_backend_or_opens_a_pyplot_figure(frames, tmp_path):
    from gpe.analysis.spectra import kinetic_energy_spectra
    from gpe.field.grid import Grid

    psi, x, y, t, table = frames
    calls = [lambda: plots.density_phase_panels(psi, x, y, t, table, beam_paths=[np.zeros((2, 2))]),
             lambda: plots.vortex_counts(table, t, drive=(0.0, 1.0)),
             lambda: plots.energies(t, _observables(), mu_nK=20.0, drive=(0.0, 1.0)),
             lambda: plots.spectra(kinetic_energy_spectra(psi[0], Grid(40, 40, 20.0, 20.0))),
             lambda: plots.write_animation(psi, x, y, t, tmp_path / "m.gif", table)]
    for call in calls:
        before = _backend_state()
        out = call()
        assert _backend_state() == before
        assert out is not None


def test_legends_are_figure_legends_off_the_data(frames):
    psi, x, y, t, table = frames
    figs = [plots.density_phase_panels(psi, x, y, t, table), plots.vortex_counts(table, t),
            plots.energies(t, _observables())]
    for fig in figs:
        assert fig.legends and all(ax.get_legend() is None for ax in fig.axes)


def test_both_signs_stay_visible_where_their_numbers_are_equal(frames):
    _, _, _, t, table = frames
    table = np.concatenate([table, table])
    table["sign"][3:] = -1                        # N+ = N- = 1 in every frame
    fig = plots.vortex_counts(table, t, time_ms=0.5)
    plus, minus = fig.axes[0].lines[:2]
    np.testing.assert_array_equal(plus.get_ydata(), [1, 1, 1])
    np.testing.assert_array_equal(minus.get_ydata(), [1, 1, 1])
    # on top of each other they differ in width, dash, marker and colour, the thin one on top
    assert plus.get_linewidth() > 1.5 * minus.get_linewidth()
    assert plus.get_linestyle() == "-" and minus.get_linestyle() == "--"
    assert plus.get_marker() != minus.get_marker() and minus.get_zorder() > plus.get_zorder()
    assert matplotlib.colors.same_color(plus.get_color(), style.PLUS_COLOUR)
    assert matplotlib.colors.same_color(minus.get_color(), style.MINUS_COLOUR)


def test_the_drive_window_is_marked(frames):
    _, _, _, t, table = frames
    for fig in (plots.vortex_counts(table, t, time_ms=0.5, drive=(0.2, 1.4)),
                plots.energies(t, _observables(), time_ms=0.5, drive=(0.2, 1.4))):
        bands = [p for p in fig.axes[0].patches if p.get_label() == "beams on (drive)"]
        assert len(bands) == 1
        band = bands[0]   # a Rectangle or a Polygon, depending on the matplotlib version
        xs = band.get_patch_transform().transform(band.get_path().vertices)[:, 0]
        assert (xs.min(), xs.max()) == pytest.approx((0.1, 0.7))    # in ms


def test_energies_are_per_atom_beside_mu_with_a_nanokelvin_axis(frames):
    _, _, _, t, _ = frames
    fig = plots.energies(t, _observables(), mu_nK=20.0)
    lines = {ln.get_label(): ln.get_ydata() for ln in fig.axes[0].lines}
    np.testing.assert_allclose(lines["kinetic E/N"], 0.5)      # 2 / 4
    np.testing.assert_allclose(lines["total E/N"], 1.5)        # 6 / 4
    np.testing.assert_allclose(lines["chemical potential µ"], 1.2)
    assert "(µ)" in fig.axes[0].get_ylabel()
    right = [ax for ax in fig.axes[0].child_axes if "nK" in ax.get_ylabel()]
    assert len(right) == 1
    with pytest.raises(VorthermError, match="norm"):
        plots.energies(t, {"e_kin": np.ones(3)})


def test_beam_paths_and_centres_are_drawn_over_the_density(frames):
    psi, x, y, t, table = frames
    path = np.array([[-5.0, 1.0], [0.0, 1.0], [np.nan, np.nan], [5.0, 1.0]])
    fig = plots.density_phase_panels(psi, x, y, t, table, frames=[1], length_um=0.5,
                                     beam_paths=[path], beam_positions={1: np.array([[0.0, 1.0]])})
    density = fig.axes[0]
    drawn = [ln for ln in density.lines if ln.get_label() == "beam path"]
    assert len(drawn) == 1
    np.testing.assert_array_equal(drawn[0].get_xdata(), path[:, 0] * 0.5)
    rings = [c for c in density.collections if c.get_label() == "beam centre"]
    assert len(rings) == 1 and rings[0].get_offsets().tolist() == [[0.0, 0.5]]
    assert "N₊ = 1, N₋ = 0" in density.get_title()


def test_beam_paths_of_a_protocol_break_where_the_beam_is_off():
    from gpe.field.beams import Beam, BeamSet, LinePath, Ramp

    beams = BeamSet([Beam(waist=2.0, height=1.0, ramp=Ramp(off_time=5.0),
                          path=LinePath(start=(-4.0, 0.0), end=(4.0, 0.0), speed=1.0))])
    (path,) = standard.beam_paths(beams, 10.0, samples=11)   # t = 0, 1, ..., 10
    # [exact] x(t) = -4 + t while on (t < 5); off afterwards
    np.testing.assert_allclose(path[:5, 0], [-4.0, -3.0, -2.0, -1.0, 0.0])
    assert np.isnan(path[6:]).all()


def test_make_figures_refuses_existing_files_before_drawing(tiny_run, tmp_path):
    out = tmp_path / "figs"
    written = standard.make_figures(tiny_run, out, frames=[0], format="svg")
    assert sorted(p.name for p in written) == sorted(f"{n}.svg" for n in standard.figure_names(
        "tiny", [0]))
    stamp = {p: p.stat().st_mtime_ns for p in written}
    with pytest.raises(VorthermError, match="--force"):
        standard.make_figures(tiny_run, out, frames=[0], format="svg")
    assert {p: p.stat().st_mtime_ns for p in written} == stamp
