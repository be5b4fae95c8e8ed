"""gpe.figures.thermometry: the beta(t) figure is written, labelled, and marks the known thresholds."""

import math

import matplotlib

matplotlib.use("Agg")

from gpe.figures.thermometry import plot_temperature_series  # noqa: E402
from thermo.estimate import thresholds  # noqa: E402


def _record(t, beta):
    return {"t": t, "n_plus": 5, "n_minus": 5, "beta": beta, "beta_ci95": [beta - 0.1, beta + 0.1],
            "energy_per_vortex": 0.5, "dipole_fraction": 0.2, "cluster_fraction": 0.6,
            "free_fraction": 0.2, "c1": 0.3, "thresholds": thresholds(5, 5)}


def test_temperature_figure_is_labelled_and_marks_thresholds(tmp_path):
    import matplotlib.pyplot as plt

    result = {"records": [_record(t, -0.3 + 0.01 * t) for t in range(10)] +
              [_record(10.0, math.nan)], "time_key": "t", "time_unit": "ms",
              "source": "run.h5"}
    seen = {}
    original = plt.Figure.savefig

    def keep(fig, *args, **kwargs):
        seen["fig"] = fig
        return original(fig, *args, **kwargs)

    plt.Figure.savefig = keep
    try:
        path = plot_temperature_series(result, tmp_path / "beta.png")
    finally:
        plt.Figure.savefig = original
    assert path.exists() and path.stat().st_size > 10_000
    axes = seen["fig"].axes
    assert axes[-1].get_xlabel() == "time [ms]"
    assert all(ax.get_ylabel() for ax in axes)
    labels = [text.get_text().strip() for text in axes[0].texts]
    # clustering onset -j_{1,1}^2/4 and like-sign collapse -4 in beta~N (reference values)
    assert "clustering onset" in labels and "like sign collapse" in labels
    levels = sorted(line.get_ydata()[0] for line in axes[0].lines if line.get_linestyle() == "--")
    assert levels[0] == -4.0 and abs(levels[1] + 3.6705) < 1e-3


def test_comparison_figure_draws_every_panel(tmp_path, rng):
    import numpy as np

    from gpe.figures.thermometry import plot_comparison
    from thermo.data.compare import compare_ensembles
    from thermo.domains.disk import Disk

    def shots(n_shots):
        out = []
        for _ in range(n_shots):
            n = int(rng.integers(10, 20))
            out.append((Disk().sample_uniform(rng, n), np.repeat([1, -1], [n // 2, n - n // 2])))
        return out

    res = compare_ensembles(shots(10), shots(8), Disk(), 0.02, include_beta=False, n_boot=200,
                            n_permutations=200)
    fig = plot_comparison(res, tmp_path / "c.png", length_scale_um=40.0)
    assert (tmp_path / "c.png").stat().st_size > 10_000
    # nine per-shot histograms, g_like, g_opposite, two example configurations, the table
    assert len(fig.axes) == 15
    assert all(ax.get_xlabel() for ax in fig.axes[:9])
