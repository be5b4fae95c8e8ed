"""The whole job for one protocol: simulate -> run file -> resume -> analyse.

A tiny protocol in healing units (64^2 grid, disk of radius 20 xi, one beam on a line) keeps
every test to a few seconds.
"""

import json
import warnings

import numpy as np
import pytest
import scipy.constants as sc
from imprint_run import imprinted_disk_text
from tiny_protocol import healing_header, tiny_protocol_text

from gpe.errors import ProtocolWarning, RunFileError, SimulationError
from gpe.figures import standard
from gpe.run import products, reading, thermometry
from gpe.run import simulate as pipeline
from gpe.run.runfile import RunFile
from gpe.setup.protocol import load_protocol, parse_protocol

TINY = tiny_protocol_text()
#: The tiny protocol in a trap drawn in a mask file beside it (81 x 81 pixels of 0.5 xi).
MASK = TINY.replace('shape = "disk"\nradius_xi = 20.0', 'shape = "mask"\nfile = "disk.npy"\npixel_size_xi = 0.5')


def _protocol(tmp_path, overrides=()):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return parse_protocol(TINY, source=str(path), overrides=overrides)


def test_simulate_writes_a_complete_self_describing_run(tmp_path):
    protocol = _protocol(tmp_path)
    with pytest.warns(ProtocolWarning, match="axial width") as caught:
        out = pipeline.simulate(protocol, tmp_path / "tiny.h5")
    assert reading.is_complete(out)
    with RunFile.open(out, "r") as run:
        times = np.asarray(run.frame_times())
        obs = run.read_observables()
        assert run.protocol_text() == TINY
        mu_run = run.attrs_float("mu_run")
        solved = json.loads(run.attrs["protocol_solved_mu_json"])
    # every protocol quantity also in the solved mu: heights / mu_s, speeds / c_s with
    # c_s = sqrt(mu_s) c, lengths * sqrt(mu_s) (xi_s = xi / sqrt(mu_s)) [exact scalings]
    assert solved["beams"][0]["height_mu"] == pytest.approx(2.0 / mu_run, rel=1e-12)
    assert solved["beams"][0]["path"]["speed_c"] == pytest.approx(0.5 / mu_run**0.5, rel=1e-12)
    assert solved["trap"]["radius_xi"] == pytest.approx(20.0 * mu_run**0.5, rel=1e-12)
    assert f"height {2.0 / mu_run:.4g} mu_s" in reading.summary_text(out)
    # mu/(hbar omega_z) = mu_s 20 nK k_B / (h 1 kHz) = 0.42 mu_s; the warning's swelling is the
    # root s > 1 of s^4 - x s - 1 (Gaussian variational estimate, independent numpy.roots)
    x = mu_run * 20e-9 * sc.k / (sc.h * 1000.0)
    roots = np.roots([1.0, 0.0, 0.0, -x, -1.0])
    s = max(r.real for r in roots if abs(r.imag) < 1e-12)
    assert f"{s:.3f} l_z" in str(caught[0].message)
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


def test_a_finite_temperature_run_resumes_bit_for_bit(tmp_path):
    """The thermal noise generator is part of the checkpoint: an interrupted stochastic run
    resumes to the same file (N+M steps == N steps, reopen, M steps)."""
    text = tiny_protocol_text(duration=6.0).replace(
        "damping = 0.01\n", "damping = 0.01\ntemperature_nK = 20.0\ncutoff_mu = 2.5\n")
    protocol = parse_protocol(text, source=str(tmp_path / "warm.toml"))
    whole = pipeline.simulate(protocol, tmp_path / "whole.h5")

    def stop_after_frame_3(progress):
        if progress.steps >= 3 * 20:
            raise _Stop

    part = tmp_path / "part.h5"
    with pytest.raises(_Stop):
        pipeline.simulate(protocol, part, progress=stop_after_frame_3)
    pipeline.simulate_resume(part)
    cold = pipeline.simulate(parse_protocol(tiny_protocol_text(duration=6.0)), tmp_path / "cold.h5")
    with RunFile.open(whole, "r") as a, RunFile.open(part, "r") as b, RunFile.open(cold, "r") as c:
        assert len(a.frame_times()) == 7
        for i in range(len(a.frame_times())):
            np.testing.assert_array_equal(a.psi(i), b.psi(i))
        # the noise did act: the warm run's last frame is not the deterministic one
        assert not np.allclose(a.psi(6), c.psi(6), atol=1e-3)


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
        assert attrs["units_x"] == "xi"
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
    from gpe.errors import ProtocolWarning, SimulationError

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


# -- a run file is self-contained: its stored trap, not the files beside its protocol --------------
def _disk_mask(path, radius_px):
    """An 81 x 81 pixel .npy mask of a disk of ``radius_px`` pixels; returns its allowed pixels."""
    c = np.arange(81) - 40
    inside = np.hypot(*np.meshgrid(c, c)) <= radius_px
    np.save(path, inside.astype(float))
    return inside


def test_a_mask_run_is_read_from_another_folder_after_its_mask_was_deleted(tmp_path, monkeypatch):
    start, elsewhere = tmp_path / "start", tmp_path / "elsewhere"
    start.mkdir()
    elsewhere.mkdir()
    inside = _disk_mask(start / "disk.npy", 38)
    (start / "mask.toml").write_text(MASK)
    monkeypatch.chdir(start)                     # names relative to where the run was started
    pipeline.simulate(load_protocol("mask.toml"), "mask.h5")
    (start / "disk.npy").unlink()
    monkeypatch.chdir(elsewhere)
    run_path = start / "mask.h5"
    # what `plot`, `vortices` and `temperature` do with it
    assert "vortices at the end" in reading.summary_text(run_path)
    with RunFile.open(run_path) as run:
        protocol = reading.protocol_of(run)
        stored = run.static_potential()
        np.testing.assert_array_equal(run.trap_arrays()["mask"], inside)
    np.testing.assert_array_equal(protocol.build_trap(), stored)
    table, _, _ = products.redetect(run_path)
    with RunFile.open(run_path) as run:
        assert len(table) == len(run.read_vortices())
    assert standard.make_figures(run_path, elsewhere / "figures", frames=[-1])
    # the mask's own point-vortex domain (its region shrunk by the wall layer, Green's function
    # solved on a grid) from the stored pixels alone
    result = thermometry.temperature_of_run(run_path, cache_dir=tmp_path / "dos", effort="quick",
                                            systematics=False)
    assert result["domain"] == "grid" and result["approximation"] == ""
    assert len(result["records"]) == result["frames_stored"]
    assert not (elsewhere / "disk.npy").exists()


def test_a_resume_after_the_mask_was_edited_continues_with_the_stored_trap(tmp_path):
    """N+M steps == N steps, edit the mask, M steps (bitwise): the trap is the stored one."""
    _disk_mask(tmp_path / "disk.npy", 38)
    toml = tmp_path / "mask.toml"
    toml.write_text(MASK)
    whole = pipeline.simulate(load_protocol(toml), tmp_path / "whole.h5")

    def stop_after_frame_5(progress):
        if progress.steps >= 5 * 20:
            raise _Stop

    parts = tmp_path / "part.h5", tmp_path / "part_given.h5"
    for part in parts:
        with pytest.raises(_Stop):
            pipeline.simulate(load_protocol(toml), part, progress=stop_after_frame_5)
    _disk_mask(tmp_path / "disk.npy", 30)       # a smaller disk: another trap for the same text

    def same_as_whole(part):
        with RunFile.open(whole) as a, RunFile.open(part) as b:
            assert b.is_complete()
            np.testing.assert_array_equal(a.static_potential(), b.static_potential())
            # the trap energy goes on smoothly through the resume frame, as uninterrupted
            np.testing.assert_array_equal(b.read_observables()["e_trap"], a.read_observables()["e_trap"])
            for i in range(a.n_frames):
                np.testing.assert_array_equal(a.psi(i), b.psi(i))

    pipeline.simulate_resume(parts[0])          # the protocol stored in the run file
    same_as_whole(parts[0])
    with pytest.warns(UserWarning, match="differs from the one stored"):
        pipeline.simulate(load_protocol(toml), parts[1], resume=True)   # the edited one given
    same_as_whole(parts[1])


def test_a_runs_detection_keeps_the_vortices_next_to_the_wall(tmp_path):
    """Three vortices imprinted 1.8-2.3 xi inside the wall of a 20 xi disk and one in the bulk:
    every frame of the run holds all four (the detection's Thomas-Fermi floor,
    gpe.run.simulate.detection_floor; without it the frame's closed density lost one of them at
    the runs' threshold, as tests/gpe/analysis/test_vortices.py shows on relaxed fields)."""
    text = imprinted_disk_text([(18.2, 0.0), (-12.0, -13.0), (0.0, -18.0), (2.0, 3.0)],
                               [1, -1, 1, -1], name="wall", duration=2.0, output_interval=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ProtocolWarning)      # quasi-2D note of these numbers
        out = pipeline.simulate(parse_protocol(text, source=str(tmp_path / "w.toml")),
                                tmp_path / "w.h5")
    with RunFile.open(out) as run:
        table = run.read_vortices()
    assert np.array_equal(np.bincount(table["frame"]), [4, 4, 4])
    assert sorted(table["sign"][table["frame"] == 0]) == [-1, -1, 1, 1]
