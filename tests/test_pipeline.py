"""The whole job for one protocol: simulate -> run file -> resume -> analyse.

A tiny protocol in healing units (64^2 grid, disk of radius 20 xi, one beam on a line) keeps
every test to a few seconds.
"""

import numpy as np
import pytest

from gpe.errors import RunFileError, SimulationError
from gpe.run import reading, thermometry
from gpe.run import simulate as pipeline
from gpe.run.runfile import RunFile
from gpe.setup.protocol import ProtocolWarning, parse_protocol
from tiny_protocol import healing_header, tiny_protocol_text

TINY = tiny_protocol_text()


def _protocol(tmp_path, overrides=()):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return parse_protocol(TINY, source=str(path), overrides=overrides)


def test_simulate_writes_a_complete_self_describing_run(tmp_path):
    protocol = _protocol(tmp_path)
    out = pipeline.simulate(protocol, tmp_path / "tiny.h5")
    assert reading.is_complete(out)
    with RunFile.open(out, "r") as run:
        times = np.asarray(run.frame_times())
        obs = run.read_observables()
        assert run.protocol_text() == TINY
    np.testing.assert_allclose(times, np.arange(13) * 1.0, atol=1e-12)
    assert len(obs["energy"]) == 13
    # with damping the energy relative to mu N can only go down (dissipation), up to the
    # work done by the moving beam; the atom number changes by well under a percent here
    assert abs(obs["norm"][-1] / obs["norm"][0] - 1) < 0.05
    assert "vortices at the end" in reading.summary_text(out)


class _Stop(Exception):
    pass


def test_interrupted_run_resumes_to_the_same_file(tmp_path):
    """N+M steps == N steps, close, reopen, M steps (bitwise), as the design asks."""
    protocol = _protocol(tmp_path)
    whole = pipeline.simulate(protocol, tmp_path / "whole.h5")

    def stop_after_frame_7(progress):
        if progress.steps >= 7 * 20:
            raise _Stop

    part = tmp_path / "part.h5"
    with pytest.raises(_Stop):
        pipeline.simulate(protocol, part, progress=stop_after_frame_7)
    assert part.exists() and not reading.is_complete(part)
    pipeline.simulate_resume(part)
    assert reading.is_complete(part)
    with RunFile.open(whole, "r") as a, RunFile.open(part, "r") as b:
        np.testing.assert_array_equal(a.frame_times(), b.frame_times())
        for i in range(len(a.frame_times())):
            np.testing.assert_array_equal(a.psi(i), b.psi(i))
        np.testing.assert_array_equal(a.read_vortices(), b.read_vortices())


def test_resuming_with_another_protocol_is_refused(tmp_path):
    """A run file keeps the protocol it was started with; continuing it with an edited one would
    join two runs in one file (frame k old, frame k+1 new)."""
    part = tmp_path / "part.h5"

    def stop_after_frame_3(progress):
        if progress.steps >= 3 * 20:
            raise _Stop

    with pytest.raises(_Stop):
        pipeline.simulate(_protocol(tmp_path), part, progress=stop_after_frame_3)
    edited = _protocol(tmp_path, ["evolution.damping=0.03"])
    with pytest.raises(RunFileError, match="another protocol"):
        pipeline.simulate(edited, part, resume=True)
    assert not reading.is_complete(part)   # left as it was: resumable with its own protocol
    pipeline.simulate_resume(part)
    assert reading.is_complete(part)


def test_seeds_change_the_noise_and_nothing_else(tmp_path):
    a = pipeline.simulate(_protocol(tmp_path, ["evolution.seed=1"]), tmp_path / "a.h5")
    b = pipeline.simulate(_protocol(tmp_path, ["evolution.seed=2"]), tmp_path / "b.h5")
    with RunFile.open(a, "r") as ra, RunFile.open(b, "r") as rb:
        assert not np.array_equal(ra.psi(0), rb.psi(0))
        assert ra.frame_times() == pytest.approx(rb.frame_times())


def test_analyse_reports_beta_fields_for_a_window(tmp_path):
    out = pipeline.simulate(_protocol(tmp_path), tmp_path / "tiny.h5")
    rec = thermometry.analyse(out, window=(6.0, 12.0), cache_dir=tmp_path / "dos")
    for key in ("beta", "beta_ci68", "beta_ci95", "n_plus", "n_minus", "verdict", "frames"):
        assert key in rec
    assert rec["frames"] == 7


def test_vortex_table_carries_its_si_factors(tmp_path):
    import h5py

    protocol = _protocol(tmp_path)
    out = pipeline.simulate(protocol, tmp_path / "tiny.h5")
    with h5py.File(out) as f:
        attrs = f["vortices"].attrs
        assert attrs["unit_x"] == "xi"
        # xi = hbar / sqrt(m mu) [definition]; recomputed from scipy.constants
        from scipy.constants import hbar
        u = protocol.units
        assert attrs["xi_in_m"] == pytest.approx(hbar / np.sqrt(u.mass_kg * u.mu_J), rel=1e-12)
        assert attrs["hbar_over_mu_in_s"] == pytest.approx(hbar / u.mu_J, rel=1e-12)


def _imprinted(tmp_path, name, vortices):
    imprint = ", ".join(f"{{ x_xi = {x}, y_xi = {y}, sign = {s} }}" for x, y, s in vortices)
    text = healing_header(name) + f"""[trap]
shape = "disk"
radius_xi = 26.0
[grid]
nx = 64
size_xi = 60.0
[ground_state]
dt_tau = 0.05
max_steps = 400
imprint = [{imprint}]
[evolution]
duration_tau = 4.0
dt_tau = 0.05
output_interval_tau = 1.0
damping = 0.01
"""
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return parse_protocol(text, source=str(path))


def test_imprinted_clusters_read_negative_and_pairs_positive(tmp_path):
    """End to end through the GP solver, the detector and the thermometry: two like-sign
    clusters (large positive point-vortex energy, the clustered branch) must come out at
    negative beta, four tight vortex-antivortex pairs (very negative energy) at positive beta.
    [exact: the Kirchhoff-Routh energy of reference-values.md orders these configurations;
    the sign of beta follows from E against the beta = 0 mean -N + (Q^2 - N)/4]"""
    ring = [(3.2 * np.cos(a), 3.2 * np.sin(a)) for a in np.linspace(0, 2 * np.pi, 4, endpoint=False)]
    clusters = [(9 + x, y, 1) for x, y in ring] + [(-9 + x, y, -1) for x, y in ring]
    pairs = []
    for cx, cy in ((8, 8), (-8, 8), (-8, -8), (8, -8)):
        pairs += [(cx - 1.6, cy, 1), (cx + 1.6, cy, -1)]
    results = {}
    for name, vortices in (("clusters", clusters), ("pairs", pairs)):
        out = pipeline.simulate(_imprinted(tmp_path, name, vortices), tmp_path / f"{name}.h5")
        with RunFile.open(out) as run:
            last = run.read_vortices()
            last = last[last["frame"] == run.n_frames - 1]
        assert (last["sign"] > 0).sum() == 4 and (last["sign"] < 0).sum() == 4
        results[name] = thermometry.analyse(out, window=(0.0, 4.0), cache_dir=tmp_path / "dos")
    assert results["clusters"]["beta_ci95"][1] < 0
    assert results["pairs"]["beta_ci95"][0] > 0


def test_time_step_too_large_for_the_beam_fails_before_any_file(tmp_path):
    from gpe.errors import SimulationError

    from gpe.setup.protocol import ProtocolWarning

    with pytest.warns(ProtocolWarning, match="rad per step"):   # the file check warns first
        protocol = _protocol(tmp_path, ["beams.0.height_mu=200.0", "evolution.dt_tau=0.1",
                                        "evolution.output_interval_tau=1.0"])
    with pytest.raises(SimulationError, match="too large"):
        pipeline.simulate(protocol, tmp_path / "steep.h5")
    assert not list(tmp_path.glob("steep.h5*"))


def test_attractive_beam_too_deep_for_the_time_step_fails_before_any_file(tmp_path):
    """A well of 1e6 mu turns the phase by 5e4 rad per step at dt = 0.05: refused like a barrier
    (it used to pass every check and the atom number grew by four orders of magnitude)."""
    with pytest.warns(ProtocolWarning) as record:
        protocol = _protocol(tmp_path, ["beams.0.height_mu=-1e6"])
    texts = [str(w.message) for w in record]
    assert any("rad per step" in t for t in texts) and any("attractive well" in t for t in texts)
    with pytest.raises(SimulationError, match="too large"):
        pipeline.simulate(protocol, tmp_path / "well.h5")
    assert not list(tmp_path.glob("well.h5*"))

