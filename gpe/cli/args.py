"""Argument helpers shared by the subcommand modules (no physics, no heavy imports)."""

from __future__ import annotations

import argparse

from gpe.errors import VorthermError


def add_command(sub, name: str, help_text: str, description: str | None = None) -> argparse.ArgumentParser:
    return sub.add_parser(name, help=help_text, description=description or help_text,
                          formatter_class=argparse.RawDescriptionHelpFormatter)


def parse_seeds(text: str) -> list[int]:
    """Parse ``"1-20"`` or ``"1,4,7"`` into a list of seeds."""
    seeds: list[int] = []
    try:
        for part in text.split(","):
            if "-" in part.strip()[1:]:
                lo, hi = part.split("-", 1)
                seeds.extend(range(int(lo), int(hi) + 1))
            else:
                seeds.append(int(part))
    except ValueError:
        raise VorthermError(f"--seeds {text!r}: expected a range like 1-20 or a list like 1,4,7 "
                            "of whole numbers") from None
    if not seeds:
        raise VorthermError(f"--seeds {text!r} names no seed; expected e.g. 1-20")
    return seeds


def parse_frames(text: str | None):
    """``"10:40"``, ``"5,9,-1"`` or None (all) -> a frame selector for the run readers."""
    if text is None:
        return None
    try:
        if ":" in text:
            lo, hi = text.split(":", 1)
            return slice(int(lo) if lo else None, int(hi) if hi else None)
        return [int(v) for v in text.split(",")]
    except ValueError:
        raise VorthermError(f"--frames {text!r}: expected a range like 10:40 or a list like "
                            "5,9,-1 of frame indices") from None


def refuse_to_overwrite(outputs, *, inputs=(), force: bool = False) -> None:
    """Stop before any work when an output file would overwrite something.

    Parameters
    ----------
    outputs : (path, how) pairs: a file the command would write and how to give it another
        name (e.g. ``"choose another file with --csv"``), said in the message.
    inputs : files the command reads; never overwritten, not even with ``--force``.
    force : ``--force`` was given: existing outputs may be replaced.

    Units: none.
    """
    read = {_same_file_key(p) for p in inputs}
    for path, how in outputs:
        if _same_file_key(path) in read:
            raise VorthermError(f"{path} is an input of this command and would be overwritten "
                                f"by its output (even --force does not allow that); {how}")
        if path.is_dir():
            raise VorthermError(f"{path} is a folder, where this command writes a file; {how}")
    if force:
        return
    for path, how in outputs:
        if path.exists():
            raise VorthermError(f"{path} exists already; pass --force to overwrite it, or {how}")


def _same_file_key(path):
    # resolve() follows symlinks, so two names of one file compare equal
    return path.expanduser().resolve()
