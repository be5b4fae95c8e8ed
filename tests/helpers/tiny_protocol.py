"""A tiny stirring protocol in healing units for end-to-end tests (64^2 grid, a few seconds).

A disk of radius 20 xi stirred by a row of beams moving along x; the numbers are chosen only to
be quick and to shed a few vortices, not to model an experiment.
"""


def healing_header(name: str = "tiny") -> str:
    """The top of a healing-unit protocol: 87Rb at mu = 20 nK, f_z = 1 kHz (quasi-2D)."""
    return f"""
units = "healing"
name = "{name}"
[atoms]
species = "87Rb"
chemical_potential_nK = 20.0
axial_frequency_hz = 1000.0
"""


def tiny_protocol_text(duration: float = 12.0, output_interval: float = 1.0, rows: int = 1,
                       speed: float = 0.5, seed: int = 3) -> str:
    """TOML text of the tiny protocol. Units: durations in hbar/mu, speed in c."""
    array = ("" if rows == 1 else
             f"[beams.array]\ncolumns = 1\nrows = {rows}\nspacing_xi = 3.0\n")
    return healing_header() + f"""[trap]
shape = "disk"
radius_xi = 20.0
[grid]
nx = 64
size_xi = 48.0
[ground_state]
dt_tau = 0.05
noise_amplitude = 0.01
[evolution]
duration_tau = {duration}
dt_tau = 0.05
output_interval_tau = {output_interval}
damping = 0.01
seed = {seed}
checkpoint_every_outputs = 2
[[beams]]
waist_xi = 3.0
height_mu = 2.0
[beams.path]
kind = "line"
start_xi = [-12.0, 1.0]
end_xi = [12.0, 1.0]
speed_c = {speed}
{array}"""


#: The tiny protocol of the command-line tests: a row of three beams crossing a 20 xi disk.
TINY = tiny_protocol_text(duration=10.0, output_interval=2.0, rows=3, speed=0.6)
