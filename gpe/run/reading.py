"""Reading a run file back: what a file is, its stored protocol, whether it is complete, a
summary, frame choice.

Every reader goes through here, so that what a run file means is decided in one place.

Units: simulation units (xi, hbar/mu, mu); SI only in the summary text.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import h5py
import numpy as np

from gpe.errors import ProtocolWarning, RunFileError, VorthermError
from gpe.run.runfile import FORMAT_NAME, RunFile
from gpe.setup.protocol import parse_protocol

# ------------------------------------------------------------------------------------------
# what a file is: a run file is recognised by its content, never by a failed read
# ------------------------------------------------------------------------------------------
#: The eight bytes every HDF5 file starts with (at offset 0, or 512, 1024, ... after a user block).
HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def has_hdf5_signature(path) -> bool:
    """True when the file carries the HDF5 signature at the start or after a user block.

    Units: none (offsets in bytes: 0, 512, 1024, 2048, ...).
    """
    path = Path(path)
    size = path.stat().st_size
    with path.open("rb") as fh:
        offset = 0
        while offset + len(HDF5_SIGNATURE) <= size:
            fh.seek(offset)
            if fh.read(len(HDF5_SIGNATURE)) == HDF5_SIGNATURE:
                return True
            offset = 512 if offset == 0 else 2 * offset
    return False


def is_run_file(path) -> bool:
    """Whether ``path`` is a vortherm run file, decided by its content.

    A file without the HDF5 signature is not a run file (a text table, say). A file with it is
    opened and is a run file when its root attribute ``format`` names the run-file format;
    other HDF5 files (a measured vortex table, say) are not.

    Raises
    ------
    RunFileError
        The file has the HDF5 signature but cannot be opened: it is truncated (copied or
        written only in part) or locked by another process that has it open for writing (a
        run still going). The message names the file and says which, when HDF5 tells.

    Units: none.
    """
    path = Path(path)
    if not path.is_file():
        raise RunFileError(f"{path}: no such file; expected a run file (.h5 from `vortherm run`)")
    if not has_hdf5_signature(path):
        return False
    try:
        with h5py.File(path, "r") as f:
            return f.attrs.get("format") == FORMAT_NAME
    except OSError as exc:
        raise RunFileError(_unopenable_message(path, exc)) from None


def _unopenable_message(path: Path, exc: OSError) -> str:
    said = str(exc)
    if "lock" in said.lower():
        why = ("it is locked by another process that has it open for writing (a run still "
               "going?): wait until that process has finished, then try again")
    elif "truncated" in said.lower():
        why = ("it is truncated (shorter than its own header says: a copy or download cut "
               "short, or a write that never finished): copy it again, or continue the run "
               "from a whole file")
    else:
        why = ("it is truncated or damaged, or locked by another process that has it open "
               "for writing (a run still going?): wait for that process, or copy it again")
    return (f"{path}: an HDF5 file that cannot be opened; {why}. HDF5 said: {said}")


# ------------------------------------------------------------------------------------------
# reading a run back: stored protocol, completeness, summary, frames
# ------------------------------------------------------------------------------------------
def protocol_of(run) -> object:
    """Rebuild the :class:`~gpe.setup.protocol.Protocol` stored verbatim in an open run file.

    The run file alone is enough: what its trap read from files (a mask image) is taken from
    the file (``RunFile.trap_arrays``), not from beside the original protocol, so the protocol
    is the same from any working directory, after the mask was edited or deleted. Only files
    written before the arrays were kept fall back on reading the mask relative to the protocol.

    Units: the Protocol's (simulation units).
    """
    with warnings.catch_warnings():  # its warnings were shown when the run was started
        warnings.simplefilter("ignore", ProtocolWarning)
        return parse_protocol(run.protocol_text(), source=run.protocol_source(),
                              overrides=run.protocol_overrides(),
                              base_dir=Path(run.protocol_source()).parent,
                              stored_arrays=run.trap_arrays())


def is_complete(run_path) -> bool:
    """True when ``run_path`` is a readable run file whose run reached its final time."""
    path = Path(run_path)
    if not path.exists():
        return False
    try:
        with RunFile.open(path, "r") as run:
            return bool(run.is_complete())
    except (RunFileError, OSError):
        return False


def summary_text(run_path) -> str:
    """Closing summary of a run: atoms, mu, healing length, sound speed, final vortex count."""
    with RunFile.open(run_path, "r") as run:
        protocol = protocol_of(run)
        times = run.timeline()
        n_points = run.n_point_frames
        table = run.read_vortices()
        obs = run.read_observables()
        run_mu = run.attrs.get("mu_run")
    u = protocol.units
    last = table[table["frame"] == len(times) - 1] if len(times) else table[:0]
    n_plus = int(np.count_nonzero(last["sign"] > 0))
    n_minus = int(np.count_nonzero(last["sign"] < 0))
    mu_solved = (float(run_mu) if run_mu is not None else
                 float(obs["mu"][0]) if "mu" in obs and len(obs["mu"]) else math.nan)
    lines = [
        f"run file: {run_path}",
        f"  atoms N = {protocol.atoms.number:.4g}; species {protocol.atoms.species}",
        f"  chemical potential mu = {u.energy_J / 1.380649e-23 * 1e9:.4g} nK "
        f"(= 1 mu; solved ground state {mu_solved:.5g} mu)",
        f"  healing length xi = {u.length_m * 1e6:.4g} um (= 1 xi); time unit hbar/mu = "
        f"{u.time_to_ms(1.0):.4g} ms",
        f"  sound speed c = {u.speed_m_s * 1e3:.4g} mm/s (= 1 c)",
        f"  simulated {u.time_to_ms(times[-1]) if len(times) else 0:.4g} ms = "
        f"{times[-1] if len(times) else 0:.4g} hbar/mu in {len(times)} frames",
        f"  vortices at the end: N+ = {n_plus}, N- = {n_minus}",
    ]
    if n_points:
        t_gpe = times[len(times) - n_points - 1]
        lines.insert(-1, f"  of which point-vortex dynamics after t = {u.time_to_ms(t_gpe):.4g} ms "
                         f"(GPE part): {n_points} frames")
    return "\n".join(lines + _solved_mu_lines(protocol, mu_solved))


def _solved_mu_lines(protocol, mu_solved: float) -> list[str]:
    """The protocol's stirring and thermal quantities in the solved mu's units (mu_s, c_s)."""
    if not (math.isfinite(mu_solved) and mu_solved > 0):
        return []
    c_s = math.sqrt(mu_solved)            # c ~ sqrt(mu): the sound speed of the solved mu
    lines = [(f"  in the solved mu_s = {mu_solved:.5g} mu (c_s = {c_s:.5g} c, xi_s = "
              f"{1 / c_s:.5g} xi; the run file's protocol_solved_mu_json holds every quantity):")]
    for i, beam in enumerate(protocol.beams):
        lines.append(f"    beam {i}: height {beam.height / mu_solved:.4g} mu_s, top speed "
                     f"{beam.path.max_speed / c_s:.4g} c_s, waist {beam.waist * c_s:.4g} xi_s")
    ev = protocol.evolution
    if ev.temperature > 0:
        lines.append(f"    k_B T = {ev.temperature / mu_solved:.4g} mu_s, cutoff "
                     f"{ev.cutoff / mu_solved:.4g} mu_s, gamma = {ev.gamma:.4g} ({ev.gamma_source})")
    return lines


def select_frames(run_path, frames, n_frames: int, default: str = "all") -> list[int]:
    """Frame indices chosen by ``frames`` (None, a slice or a list; negative count from the end).

    ``default`` says what None means: "all" frames or the "last" one. Raises a clear error for
    an empty run file or an index out of range.
    """
    if n_frames == 0:
        raise RunFileError(f"{run_path}: the run file holds no snapshots (no frames to use)")
    if frames is None:
        chosen = list(range(n_frames)) if default == "all" else [n_frames - 1]
    elif isinstance(frames, slice):
        chosen = list(range(n_frames))[frames]
    else:
        chosen = list(frames)
    for f in chosen:
        if not -n_frames <= f < n_frames:
            raise VorthermError(f"{run_path}: frame {f} out of range; the run has frames "
                                f"0..{n_frames - 1} (negative numbers count from the end)")
    return sorted({f % n_frames for f in chosen})
