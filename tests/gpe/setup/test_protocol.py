"""Tests of gpe.setup.protocol: schema, units, overrides, validation messages and warnings."""

import json
import math
import re
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc

from gpe.errors import ProtocolError, ProtocolWarning
from gpe.setup.protocol import example_protocol_text, load_protocol, parse_protocol

ROOT = Path(__file__).resolve().parents[3]
A0 = sc.physical_constants["Bohr radius"][0]
M_RB87 = 86.90918053 * sc.physical_constants["atomic mass constant"][0]   # CIAAW / AME2020

BASE = """
units = "SI"
[atoms]
species = "87Rb"
number = 1.0e5
axial_frequency_hz = 800.0
[trap]
shape = "disk"
radius_um = 30.0
wall_height_mu = 5.0
[grid]
nx = 128
padding_um = 4.0
[evolution]
duration_ms = 40.0
dt_ms = 0.02
output_interval_ms = 2.0
damping = 0.01
[[beams]]
waist_um = 2.0
height_mu = 2.0
[beams.path]
kind = "line"
start_um = [-15.0, 0.0]
end_um = [15.0, 0.0]
speed_um_per_ms = 0.5
"""


def parse(text=BASE, overrides=(), name="stir.toml"):
    with warnings.catch_warnings():
        warnings.simplefilter("error", ProtocolWarning)   # a valid protocol here warns about nothing
        return parse_protocol(text, name, overrides)


def error_of(text=BASE, overrides=()):
    with pytest.raises(ProtocolError) as info:
        parse_protocol(text, "stir.toml", overrides)
    return str(info.value)


# -- resolution against outside formulas --------------------------------------------------------
def test_units_resolved_from_atom_number_match_independent_formulas():
    p = parse()
    # [pub] Petrov, Holzmann & Shlyapnikov (2000): g2D = sqrt(8 pi) hbar^2 a / (m l_z); a = 100.40 a0
    # (van Kempen et al. 2002, from memory); flat trap TF: mu = g2D N / (pi R^2); xi = hbar/sqrt(m mu)
    lz = math.sqrt(sc.hbar / (M_RB87 * 2 * math.pi * 800.0))
    g2d = math.sqrt(8 * math.pi) * sc.hbar**2 * 100.40 * A0 / (M_RB87 * lz)
    mu = g2d * 1.0e5 / (math.pi * (30e-6) ** 2)
    xi = sc.hbar / math.sqrt(M_RB87 * mu)
    assert p.units.mu_J == pytest.approx(mu, rel=1e-9)
    assert p.trap.radius == pytest.approx(30e-6 / xi, rel=1e-9)
    assert p.evolution.dt == pytest.approx(0.02e-3 * mu / sc.hbar, rel=1e-9)
    assert p.beams[0].path.speed == pytest.approx(0.5e-3 / (sc.hbar / (M_RB87 * xi)), rel=1e-9)
    # [exact] N = n0 xi^2 * integral |psi|^2 and n0 xi^2 = hbar^2 / (m g2D)
    assert p.atoms.norm * sc.hbar**2 / (M_RB87 * g2d) == pytest.approx(1.0e5, rel=1e-9)
    assert p.grid.length_x == pytest.approx(2 * p.trap.radius + 2 * 4e-6 / xi, rel=1e-9)
    assert p.evolution.steps_per_output == 100 and p.evolution.n_outputs == 20


def test_harmonic_trap_mu_from_number():
    text = BASE.replace('shape = "disk"\nradius_um = 30.0\nwall_height_mu = 5.0',
                        'shape = "harmonic"\nfrequency_x_hz = 10.0\nfrequency_y_hz = 15.0')
    p = parse(text, overrides=["grid.nx=256", "evolution.dt_ms=0.005"])
    # [pub] 2D TF in an anisotropic harmonic trap: mu = sqrt(g2D N m wx wy / pi) (Pethick & Smith ch. 6)
    g2d = p.atoms.g2d_Jm2
    mu = math.sqrt(g2d * 1e5 * M_RB87 * (2 * math.pi) ** 2 * 150.0 / math.pi)
    assert p.units.mu_J == pytest.approx(mu, rel=1e-9)
    # [exact] omega in units of mu/hbar
    assert p.trap.omega_x == pytest.approx(2 * math.pi * 10.0 * sc.hbar / mu, rel=1e-9)
    assert p.trap.wall_height is None


def test_si_and_healing_forms_resolve_to_the_same_simulation():
    p = parse()
    u = p.units
    xi_um, tau_ms = u.length_m * 1e6, u.time_s * 1e3
    healing = f"""
units = "healing"
[atoms]
species = "87Rb"
chemical_potential_nK = {u.temperature_K * 1e9!r}
axial_frequency_hz = 800.0
[trap]
shape = "disk"
radius_xi = {30.0 / xi_um!r}
wall_height_mu = 5.0
edge_width_xi = 1.0
[grid]
nx = 128
padding_xi = {4.0 / xi_um!r}
[evolution]
duration_tau = {40.0 / tau_ms!r}
dt_tau = {0.02 / tau_ms!r}
output_interval_tau = {2.0 / tau_ms!r}
damping = 0.01
[[beams]]
waist_xi = {2.0 / xi_um!r}
height_mu = 2.0
[beams.path]
kind = "line"
start_xi = [{-15.0 / xi_um!r}, 0.0]
end_xi = [{15.0 / xi_um!r}, 0.0]
speed_c = {0.5 / (u.speed_m_s * 1e3)!r}
"""
    q = parse(healing, name="stir_healing.toml")
    assert q.unit_system == "healing"
    assert q.units.mu_J == pytest.approx(u.mu_J, rel=1e-12)
    assert q.atoms.number == pytest.approx(1.0e5, rel=1e-9)      # derived from the disk area
    assert (q.grid.nx, q.grid.ny) == (p.grid.nx, p.grid.ny)
    assert q.grid.length_x == pytest.approx(p.grid.length_x, rel=1e-9)
    assert q.trap.radius == pytest.approx(p.trap.radius, rel=1e-9)
    for name in ("dt", "duration", "output_interval"):
        assert getattr(q.evolution, name) == pytest.approx(getattr(p.evolution, name), rel=1e-9)
    assert q.beams[0].waist == pytest.approx(p.beams[0].waist, rel=1e-9)
    assert q.beams[0].path.speed == pytest.approx(p.beams[0].path.speed, rel=1e-9)
    assert np.allclose(q.build_beams().positions(55.0), p.build_beams().positions(55.0), rtol=1e-9)


def test_to_json_has_simulation_and_si_values():
    p = parse()
    d = json.loads(p.to_json())
    assert d["trap"]["radius_um"] == pytest.approx(30.0, rel=1e-12)
    assert d["trap"]["radius_xi"] == pytest.approx(p.trap.radius)
    assert d["evolution"]["dt_ms"] == pytest.approx(0.02, rel=1e-12)
    assert d["beams"][0]["path"]["speed_um_per_ms"] == pytest.approx(0.5, rel=1e-12)
    assert d["beams"][0]["path"]["type"] == "LinePath"
    assert d["units"]["length_m"] == p.units.length_m and d["grid"]["nx"] == 128


# -- shipped files ------------------------------------------------------------------------------
def test_example_template_and_demo_parse_without_warnings():
    parse(example_protocol_text(), name="example.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("error", ProtocolWarning)
        demo = load_protocol(ROOT / "runs" / "demo.toml")
    assert 40 <= demo.trap.radius <= 60 and demo.grid.nx in (128, 192)
    assert 0.7 <= demo.grid.dx <= 1.0
    assert 0.3 <= demo.beams[0].path.max_speed <= 0.6
    assert demo.evolution.duration > 100


# -- validation errors: file, key and what is accepted ----------------------------------------------
def test_unknown_key_names_nearest_valid_key():
    msg = error_of(BASE.replace("radius_um = 30.0", "raduis_um = 30.0"))
    assert "stir.toml" in msg and "raduis_um" in msg and "did you mean 'radius_um'" in msg


def test_unknown_section_and_key_not_used_by_shape():
    msg = error_of(BASE + "\n[evolutoin]\ndt_ms = 1.0\n")
    assert "evolutoin" in msg and "evolution" in msg
    msg = error_of(BASE.replace("radius_um = 30.0", "radius_um = 30.0\nsize_x_um = 4.0"))
    assert "size_x_um" in msg and 'shape = "disk"' in msg and "radius_um" in msg


def test_wrong_unit_suffix_lists_accepted_spellings():
    msg = error_of(BASE.replace("radius_um", "radius_mm"))
    assert "stir.toml" in msg and "radius_mm" in msg and "radius_um, radius_xi" in msg
    msg = error_of(BASE.replace("radius_um", "radius"))
    assert "needs a unit suffix" in msg and "radius_um" in msg


def test_si_suffix_refused_in_healing_units():
    text = BASE.replace('units = "SI"', 'units = "healing"').replace("number = 1.0e5", "chemical_potential_nK = 20.0")
    msg = error_of(text)
    assert "radius_um" in msg and "radius_xi" in msg and 'units = "healing"' in msg


def test_missing_required_value():
    msg = error_of(BASE.replace("radius_um = 30.0\n", ""))
    assert "[trap] radius_um" in msg and "missing" in msg and "radius_xi" in msg
    msg = error_of(BASE.replace("number = 1.0e5\n", ""))
    assert "number" in msg and "chemical_potential" in msg
    msg = error_of(BASE.replace('species = "87Rb"', 'species = "39K"'))
    assert "scattering_length_a0" in msg and "39K" in msg


@pytest.mark.parametrize("old, new, key", [
    ("radius_um = 30.0", "radius_um = 0.0", "radius_um"),
    ("waist_um = 2.0", "waist_um = -2.0", "waist_um"),
    ("dt_ms = 0.02", "dt_ms = 0", "dt_ms"),
    ("nx = 128", "nx = 127", "nx"),
])
def test_zero_negative_or_odd_sizes(old, new, key):
    msg = error_of(BASE.replace(old, new))
    assert key in msg and "stir.toml" in msg and "Accepted" in msg


def test_healing_units_refuse_atom_number():
    text = """
units = "healing"
[atoms]
species = "87Rb"
number = 1e5
axial_frequency_hz = 800.0
[trap]
shape = "disk"
radius_xi = 40.0
[grid]
nx = 128
[evolution]
duration_tau = 10.0
dt_tau = 0.02
output_interval_tau = 1.0
"""
    msg = error_of(text)
    assert "[atoms] number" in msg and "chemical_potential_nK" in msg


def test_atom_number_needs_si_trap_size():
    msg = error_of(BASE.replace("radius_um = 30.0", "radius_xi = 40.0"))
    assert "radius_xi" in msg and "radius_um" in msg and "atoms.number" in msg


def test_output_interval_must_be_whole_number_of_steps():
    msg = error_of(BASE.replace("output_interval_ms = 2.0", "output_interval_ms = 2.01"))
    assert "output_interval_ms" in msg and "100" in msg and "101" in msg


def test_beam_leaving_grid_reports_time_and_position():
    # the grid is the disk (R = 30 um) plus 4 um padding; the beam (waist 2 um) may go to |x| = 32 um,
    # reached at t = (32 + 15) / 2 = 23.5 ms
    msg = error_of(BASE.replace("end_um = [15.0, 0.0]", "end_um = [60.0, 0.0]")
                   .replace("speed_um_per_ms = 0.5", "speed_um_per_ms = 2.0"))
    assert "at t = " in msg and "= 23.5 ms" in msg and "= (32, 0) um" in msg
    assert "beams.0.path" in msg and "t =" in msg and "ms" in msg and "(x, y)" in msg and "um" in msg


def test_unreadable_mask_is_an_error_naming_the_file(tmp_path):
    bad = tmp_path / "trap.png"
    bad.write_text("no image here")
    text = BASE.replace('shape = "disk"\nradius_um = 30.0', 'shape = "mask"\nfile = "trap.png"\npixel_size_um = 0.5')
    path = tmp_path / "stir.toml"
    path.write_text(text)
    with pytest.raises(ProtocolError) as info:
        load_protocol(path)
    msg = str(info.value)
    assert "trap.png" in msg and "[trap] file" in msg and ".npy" in msg and str(path) in msg


def test_mask_protocol_resolves_relative_to_file(tmp_path):
    from PIL import Image

    n = 80
    c = np.arange(n) - (n - 1) / 2
    Image.fromarray(np.where(np.hypot(*np.meshgrid(c, c)) < 30, 255, 0).astype(np.uint8)).save(tmp_path / "d.png")
    text = BASE.replace('shape = "disk"\nradius_um = 30.0', 'shape = "mask"\nfile = "d.png"\npixel_size_um = 1.0')
    (tmp_path / "m.toml").write_text(text)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ProtocolWarning)
        p = load_protocol(tmp_path / "m.toml", ["grid.nx=160", "evolution.dt_ms=0.01"])
    pixels = int(np.sum(np.hypot(*np.meshgrid(c, c)) < 30))
    # [exact] flat-trap TF: mu = g2D N / A with A = pixels * (1 um)^2
    assert p.units.mu_J == pytest.approx(p.atoms.g2d_Jm2 * 1e5 / (pixels * 1e-12), rel=1e-12)
    V = p.build_trap()
    assert V[p.grid.ny // 2, p.grid.nx // 2] < 1e-3 and V.max() > 4.9


def test_a_mask_kept_by_a_run_file_is_used_instead_of_the_file(tmp_path):
    c = np.arange(80) - 39.5
    pixels = np.hypot(*np.meshgrid(c, c)) < 30
    text = BASE.replace('shape = "disk"\nradius_um = 30.0', 'shape = "mask"\nfile = "gone.png"\npixel_size_um = 1.0')
    with warnings.catch_warnings():
        warnings.simplefilter("error", ProtocolWarning)
        p = parse_protocol(text, "m.toml", ["grid.nx=160", "evolution.dt_ms=0.01"], base_dir=tmp_path,
                           stored_arrays={"mask": pixels})
    # [exact] flat-trap TF: mu = g2D N / A with A = kept pixels * (1 um)^2
    assert p.units.mu_J == pytest.approx(p.atoms.g2d_Jm2 * 1e5 / (int(pixels.sum()) * 1e-12), rel=1e-12)
    np.testing.assert_array_equal(p.trap.allowed, pixels)
    with pytest.raises(ProtocolError) as info:
        parse_protocol(text, "m.toml", stored_arrays={"mask": np.ones((3, 3), bool)})
    msg = str(info.value)
    assert "[trap] file" in msg and "no wall pixel" in msg and "potential/mask" in msg


# -- warnings of common practice -------------------------------------------------------------------
def test_coarse_grid_warns_with_dx_over_xi():
    with pytest.warns(ProtocolWarning) as record:
        parse_protocol(BASE.replace("nx = 128", "nx = 64"), "stir.toml")
    texts = [str(w.message) for w in record]
    assert any(re.search(r"dx = 1\.\d+ xi.*dx <= xi", t) for t in texts)
    assert any("waist" in t and "grid spacings" in t for t in texts)  # the beam too


def test_large_dt_warns_with_phase_per_step():
    with pytest.warns(ProtocolWarning) as record:
        parse_protocol(BASE.replace("dt_ms = 0.02", "dt_ms = 0.2"), "stir.toml")
    texts = [str(w.message) for w in record]
    assert any(re.search(r"dt \* k_max\^2 / 2 = .* rad per step", t) for t in texts)
    assert any(re.search(r"dt \* max\(V \+ g\|psi\|\^2\)", t) for t in texts)
    with pytest.warns(ProtocolWarning, match=r"dt \* max\(V \+ g\|psi\|\^2\)"):
        parse_protocol(BASE.replace("wall_height_mu = 5.0", "wall_height_mu = 80.0"), "stir.toml")


def test_attractive_beam_warns_with_its_depth_and_the_thomas_fermi_density():
    with pytest.warns(ProtocolWarning) as record:
        p = parse_protocol(BASE.replace("height_mu = 2.0", "height_mu = -2.0"), "stir.toml")
    texts = [str(w.message) for w in record]
    assert len(texts) == 1                       # allowed, and nothing else against practice
    # [exact] Thomas-Fermi: n = (mu - V) / g, so n/n0 = 1 + |V0|/mu at the bottom of a well in the bulk
    assert "[beams.0] height_mu" in texts[0] and "attractive well 2 mu" in texts[0]
    assert f"{2 * p.units.temperature_K * 1e9:.4g} nK deep" in texts[0]
    assert "n/n0 ~ 1 + |V0|/mu = 3 " in texts[0] and "an estimate" in texts[0]
    with pytest.warns(ProtocolWarning) as record:
        parse_protocol(BASE.replace("height_mu = 2.0", "height_mu = -1e6"), "stir.toml")
    texts = [str(w.message) for w in record]
    assert any("n/n0 ~ 1 + |V0|/mu = 1e+06" in t for t in texts)
    # the time-step check sees the depth |V0|: dt * (5 + 1e6 + 1) mu per step
    assert any(re.search(r"dt \* max\(V \+ g\|psi\|\^2\) = .* \* 1e\+06 ", t) for t in texts)


def test_reading_a_large_grid_allocates_nothing_of_its_size():
    # the time-step warning samples the trap on a coarser grid; the run's arrays are counted and
    # checked against the free memory before they are allocated (gpe.run.memory)
    tracemalloc.start()
    try:
        with pytest.warns(ProtocolWarning, match="k_max"):   # dx = 0.02 xi asks for a tiny dt
            p = parse_protocol(BASE.replace("nx = 128", "nx = 4096"), "stir.toml")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    float_array = 8 * p.grid.nx * p.grid.ny       # 134 MB
    assert peak < float_array / 4


# -- overrides -------------------------------------------------------------------------------------
def test_overrides_set_values_by_section_and_index():
    p = parse(overrides=["evolution.damping=0.02", "beams.0.path.speed_c=0.4", "grid.nx=144",
                         "trap.shape=disk", "beams.0.array.columns=2", "beams.0.array.spacing_um=5"])
    assert p.evolution.gamma == 0.02 and p.grid.nx == 144
    assert p.beams[0].path.speed == pytest.approx(0.4)            # speed_c replaced speed_um_per_ms
    assert len(p.beams[0].offsets) == 2
    assert p.overrides[0] == "evolution.damping=0.02"
    assert parse(overrides=["units=si"]).unit_system == "SI"


def test_override_errors_have_the_same_quality():
    msg = error_of(overrides=["beams.3.height_mu=1"])
    assert "beams.3" in msg and "0 to 0" in msg
    msg = error_of(overrides=["trap.radius_mm=3"])
    assert "radius_mm" in msg and "radius_um, radius_xi" in msg and "--set trap.radius_mm=3" in msg
    msg = error_of(overrides=["evolution.dampnig=0.1"])
    assert "did you mean 'damping'" in msg
    msg = error_of(overrides=["evolution.damping"])
    assert "section.key=value" in msg


def test_circle_polyline_and_static_paths_resolve():
    p = parse(overrides=['beams.0.path={kind = "circle", radius_um = 10.0, angular_speed_hz = 5.0, sense = "clockwise"}'])
    path = p.beams[0].path
    assert path.sense == -1
    assert path.angular_speed == pytest.approx(2 * math.pi * 5.0 * p.units.time_s, rel=1e-12)
    p = parse(overrides=['beams.0.path={kind = "polyline", points_um = [[0, 0], [10, 0], [10, 10]], '
                         'speeds_c = [0.2, 0.3], mode = "back_and_forth"}'])
    assert p.beams[0].path.speeds == (0.2, 0.3)
    msg = error_of(overrides=['beams.0.path={kind = "polyline", points_um = [[0, 0], [10, 0]], speeds_c = [0.2, 0.3]}'])
    assert "speeds_c" in msg and "1 speeds" in msg
    msg = error_of(overrides=['beams.0.path={kind = "circle", radius_um = 10.0}'])
    assert "angular_speed_hz" in msg and "speed_c" in msg


def test_a_protocol_from_a_dict_equals_the_one_from_its_file():
    import tomllib

    from tiny_protocol import TINY

    from gpe.setup.protocol import protocol_from_dict

    data = tomllib.loads(TINY)
    data["trap"]["radius_xi"] = np.float64(data["trap"]["radius_xi"])     # numpy numbers pass
    from_dict, from_text = protocol_from_dict(data, "tiny"), parse_protocol(TINY, "tiny")
    assert from_dict.to_dict() == from_text.to_dict()
    # the stored text parses back to the same tables (what a run file keeps)
    assert tomllib.loads(from_dict.source_text) == tomllib.loads(TINY)


def test_a_dict_value_toml_cannot_hold_is_named_by_its_key():
    import tomllib

    from tiny_protocol import TINY

    from gpe.setup.protocol import protocol_from_dict

    data = tomllib.loads(TINY)
    data["beams"][0]["waist_xi"] = None
    with pytest.raises(ProtocolError, match=r"beams\.0\.waist_xi = None.*accepted: numbers"):
        protocol_from_dict(data, source="mine")


# -- finite temperature ([evolution] temperature_*, cutoff_*) ---------------------------------------
def test_temperature_and_cutoff_are_read_in_si_and_gamma_is_computed_when_not_given():
    p = parse(BASE, overrides=["evolution.temperature_nK=60.0", "evolution.cutoff_mu=2.5"])
    u = p.units
    # [exact] nK -> k_B T / mu with mu the unit of the protocol
    assert p.evolution.temperature == pytest.approx(60e-9 * sc.k / u.mu_J, rel=1e-12)
    assert p.evolution.cutoff == 2.5
    # the given damping is kept...
    assert p.evolution.gamma == 0.01 and p.evolution.gamma_source == "given"
    # ...and without it gamma comes from T and mu (gpe.setup.units.thermal_damping)
    free = BASE.replace("damping = 0.01\n", "")
    q = parse(free, overrides=["evolution.temperature_nK=60.0", "evolution.cutoff_mu=2.5"])
    assert q.evolution.gamma_source == "computed"
    assert 1e-6 < q.evolution.gamma < 1e-1
    assert q.to_dict()["evolution"]["temperature_nK"] == pytest.approx(60.0)
    # a hand-off to point vortices takes its mutual friction from the run's gamma, computed here
    ends = parse(free, overrides=["evolution.temperature_nK=60.0", "evolution.cutoff_mu=2.5",
                                  f"evolution.points_until_tau={10 * q.evolution.duration}"])
    assert ends.evolution.points_friction == q.evolution.gamma


@pytest.mark.parametrize("overrides, key, words", [
    (["evolution.temperature_nK=-5.0"], "temperature_nK", ">= 0"),
    (["evolution.temperature_nK=50.0"], "cutoff_mu", "missing"),
    (["evolution.temperature_nK=50.0", "evolution.cutoff_mu=500.0"], "cutoff_mu", "k_max"),
    (["evolution.temperature_nK=50.0", "evolution.cutoff_mu=0.8"], "cutoff_mu", "above the chemical"),
    (["evolution.temperature_nK=50.0", "evolution.cutoff_mu=2.5", "evolution.damping=0.0"],
     "damping", "noise strength"),
    (["evolution.cutoff_mu=2.5"], "cutoff_mu", "temperature is 0"),
])
def test_finite_temperature_errors_name_the_key(overrides, key, words):
    message = error_of(BASE, overrides)
    assert f"[evolution] {key}" in message and words in message and "Accepted" in message
