"""gpe.figures.thermometry: the beta(t) figure is written, labelled, and marks the known thresholds."""

import math

from gpe.figures.thermometry import plot_meanfield, plot_temperature_series
from thermo.estimate import thresholds


def _record(t, beta_n, bound=None):
    return {"t": t, "n_plus": 5, "n_minus": 5, "beta": beta_n / 10, "beta_n": beta_n,
            "beta_n_ci95": [beta_n - 1.0, beta_n + 1.0] if bound is None else
            ([-math.inf, beta_n] if bound == "upper" else [beta_n, math.inf]),
            "bound": bound, "energy_per_vortex": 0.5, "dipole_fraction": 0.2,
            "cluster_fraction": 0.6, "free_fraction": 0.2, "c1": 0.3,
            "thresholds": thresholds(5, 5)}


def _result():
    recs = [_record(t, -3.0 + 0.1 * t) for t in range(10)] + [_record(10.0, math.nan)]
    recs[2] = _record(2.0, -4.6, bound="upper")       # beyond the ladder: a bound
    ensemble = {"beta_n": -2.5, "beta_n_ci95": [-2.9, -2.1], "bound": None, "window": [6.0, 9.0]}
    return {"records": recs, "time_key": "t", "time_unit": "ms", "source": "run.h5",
            "drive_end": 4.0, "ensemble": ensemble}


def test_temperature_figure_is_labelled_and_marks_thresholds(tmp_path):
    from gpe.figures.style import save

    fig = plot_temperature_series(_result())
    path = save(fig, tmp_path / "beta.png")
    assert path.exists() and path.stat().st_size > 10_000
    axes = fig.axes
    assert axes[-1].get_xlabel() == "time [ms]"
    assert all(ax.get_ylabel() for ax in axes)
    labels = [text.get_text().strip() for text in axes[0].texts]
    # clustering onset -j_{1,1}^2/4 and like-sign collapse -4 in beta~N (reference values)
    assert "clustering onset" in labels and "like sign collapse" in labels
    levels = sorted(line.get_ydata()[0] for line in axes[0].lines if line.get_linestyle() == "--")
    assert levels[0] == -4.0 and abs(levels[1] + 3.6705) < 1e-3


def test_a_bound_is_an_open_caret_never_a_plain_point_and_the_window_is_drawn():
    fig = plot_temperature_series(_result())
    ax = fig.axes[0]
    by_label = {line.get_label(): line for line in ax.lines}
    points = by_label[r"$\tilde\beta N$ per frame"]
    assert 2.0 not in list(points.get_xdata())               # the bound frame is not a point
    assert len(points.get_xdata()) == 9                      # 11 frames - one bound - one NaN
    caret = by_label["bound: below"]
    assert list(caret.get_xdata()) == [2.0] and list(caret.get_ydata()) == [-4.6]
    assert caret.get_marker() == 7 and caret.get_markerfacecolor() == "none"
    ensemble = next(line for line in ax.lines if line.get_label().startswith("ensemble"))
    assert list(ensemble.get_xdata()) == [6.0, 9.0] and "-2.5" in ensemble.get_label()
    # the beams-on interval 0..4 ms is shaded on every panel
    spans = [p for p in ax.patches if p.get_label() == "beams on"]
    assert len(spans) == 1
    # (a Polygon before matplotlib 3.9, a Rectangle since: read the corners in data x)
    xs = spans[0].get_patch_transform().transform(spans[0].get_path().vertices)[:, 0]
    assert xs.min() == 0.0 and xs.max() == 4.0


def test_no_figure_function_touches_pyplot_state():
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    plot_temperature_series(_result())
    assert plt.get_fignums() == before                   # a Figure, not a pyplot window


def test_comparison_figure_draws_every_panel(tmp_path, rng):
    import numpy as np

    from gpe.figures.thermometry import plot_comparison
    from thermo.data.compare import Side, compare_ensembles
    from thermo.domains.disk import Disk

    def shots(n_shots):
        out = []
        for _ in range(n_shots):
            n = int(rng.integers(10, 20))
            out.append((Disk().sample_uniform(rng, n), np.repeat([1, -1], [n // 2, n - n // 2])))
        return out

    from gpe.figures.style import save

    res = compare_ensembles(Side.of_runs([shots(10)], Disk()), Side.of_shots(shots(12), Disk()))
    fig = plot_comparison(res, length_scale_um=(40.0, 20.0))
    assert save(fig, tmp_path / "c.png").stat().st_size > 10_000
    # nine per-shot histograms, g_like, g_opposite, two example configurations, the table
    assert len(fig.axes) == 15
    assert all(ax.get_xlabel() for ax in fig.axes[:9])


def test_meanfield_figure_draws_both_signs_against_their_histograms(rng):
    """The mean-field figure of `temperature --rotating --plot`: one axes, a histogram and a
    profile per sign present, the goodness of fit in the title; a record without a comparison
    is refused with the reason."""
    import numpy as np
    import pytest

    from thermo.rotation.meanfield import radial_fit, solve_profile

    prof = solve_profile(4, 4, -0.2, 3.0)
    shots = [(np.column_stack([0.9 * np.sqrt(rng.random(8)) * np.cos(phi),
                               0.9 * np.sqrt(rng.random(8)) * np.sin(phi)]),
              np.array([1] * 4 + [-1] * 4)) for phi in rng.random((20, 8)) * 2 * np.pi]
    fit = radial_fit(shots, prof)
    ens = {"beta_rot_n": -1.6, "omega_n": 0.375, "meanfield": {
        "n_plus": 4, "n_minus": 4, "edges": fit.edges.tolist(),
        "observed_plus": fit.observed_plus.tolist(), "observed_minus": fit.observed_minus.tolist(),
        "r": prof.r.tolist(), "n_plus_profile": prof.n_plus.tolist(),
        "n_minus_profile": prof.n_minus.tolist(), "chi2": fit.chi2, "dof": fit.dof,
        "pvalue": fit.pvalue}}
    fig = plot_meanfield(ens)
    (ax,) = fig.axes
    assert len(ax.lines) == 2 and len(ax.patches) == 2          # profiles and histograms
    assert "chi^2" in ax.get_title() and f"/ {fit.dof} bins" in ax.get_title()
    assert ax.get_xlabel() == "r / R"
    with pytest.raises(ValueError, match="no mean-field comparison"):
        plot_meanfield({"meanfield": {"note": "disk only"}})
