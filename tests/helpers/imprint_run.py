"""A small relaxed run with imprinted vortices, for the imaging tests (not a test file).

A disk of radius 20 xi (87Rb, mu = 20 nK, healing units) with ``n`` vortices imprinted in the
ground state at random positions at least ``min_sep`` apart inside ``placement_radius``, half of each
sign; no beams; damped evolution (gamma = 0.03) relaxes the cores while the vortices move. The
run's own phase-winding detection gives the true vortices of every frame.
"""

import numpy as np

from tiny_protocol import healing_header
from vortex_fields import random_configuration


def imprinted_disk_text(positions, signs, *, name: str = "imprint", nx: int = 64,
                        duration: float = 20.0, output_interval: float = 2.0,
                        damping: float = 0.03) -> str:
    """TOML text of a 20 xi disk (48 xi box) with vortices imprinted at ``positions`` (xi)
    with ``signs``, no beams, damped evolution. Units: lengths in xi, times in hbar/mu."""
    imprint = "".join(f"[[ground_state.imprint]]\nx_xi = {x:.4f}\ny_xi = {y:.4f}\nsign = {s:+d}\n"
                      for (x, y), s in zip(positions, signs))
    dt = 0.05 if nx <= 64 else 0.025
    return healing_header(name) + f"""[trap]
shape = "disk"
radius_xi = 20.0
[grid]
nx = {nx}
size_xi = 48.0
[ground_state]
dt_tau = 0.05
{imprint}
[evolution]
duration_tau = {duration}
dt_tau = {dt}
output_interval_tau = {output_interval}
damping = {damping}
seed = 3
"""


def imprint_protocol_text(n: int = 14, seed: int = 5, min_sep: float = 4.0, nx: int = 64,
                          duration: float = 20.0, output_interval: float = 2.0,
                          placement_radius: float = 16.0) -> str:
    """TOML text of the imprint run: ``n`` random vortices. Units: lengths in xi, times in
    hbar/mu."""
    rng = np.random.default_rng(seed)
    pos, signs = random_configuration(rng, n, placement_radius, min_sep,
                                       radius=placement_radius)
    return imprinted_disk_text(pos, signs, nx=nx, duration=duration,
                               output_interval=output_interval)


def simulate_imprint_run(folder, name: str = "imprint", **options):
    """Simulate the imprint protocol into ``folder/<name>.h5`` and return the path."""
    from gpe.run.simulate import simulate
    from gpe.setup.protocol import parse_protocol

    protocol = parse_protocol(imprint_protocol_text(**options), source=str(folder / f"{name}.toml"))
    return simulate(protocol, folder / f"{name}.h5")
