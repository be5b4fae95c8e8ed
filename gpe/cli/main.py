"""The single command-line entry point: ``vortherm SUBCOMMAND ...``.

Everything heavy is imported inside the subcommand that needs it, so ``vortherm --help`` is
instant. Errors raised on purpose by the packages (``VorthermError``, ``ThermoError``) are
printed as one paragraph and give exit code 2; anything else is a bug and shows a traceback.
"""

from __future__ import annotations

import argparse
import os
import sys
import warnings

from gpe import __version__
from gpe.cli import commands
from gpe.errors import VorthermError
from thermo.errors import ThermoError

EXIT_INPUT_ERROR = 2


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    sys.stderr.write(f"warning: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="vortherm",
        description=("Stir a 2D Bose-Einstein condensate on a CPU, find its quantized vortices "
                     "and measure their temperature (both signs of beta)."),
    )
    parser.add_argument("--version", action="version", version=f"vortherm {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for register in commands.REGISTRY:
        register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    # The command line only writes figure files: a headless backend unless the user chose one.
    os.environ.setdefault("MPLBACKEND", "Agg")
    with warnings.catch_warnings():   # one-line warnings for this command only, then restored
        warnings.showwarning = _show_warning
        try:
            return int(args.handler(args) or 0)
        except (VorthermError, ThermoError) as exc:
            sys.stderr.write(f"error: {exc}\n")
            return EXIT_INPUT_ERROR
        except KeyboardInterrupt:
            sys.stderr.write("interrupted: the run file keeps its last checkpoint; "
                             "continue with `vortherm run --resume FILE.h5`\n")
            return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
