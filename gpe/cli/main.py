"""The single command-line entry point: ``vortherm SUBCOMMAND ...``.

Everything heavy is imported inside the subcommand that needs it, so ``vortherm --help`` is
instant. Errors raised on purpose by the packages (``VorthermError``, ``ThermoError``) are
printed as one paragraph and give exit code 2; anything else is a bug and shows a traceback.
"""

from __future__ import annotations

import argparse
import sys
import warnings

from gpe.errors import VorthermError

EXIT_INPUT_ERROR = 2


def _thermo_error_types() -> tuple[type[BaseException], ...]:
    try:
        from thermo.errors import ThermoError
    except ImportError:  # thermo not importable: only our own errors count
        return (VorthermError,)
    return (VorthermError, ThermoError)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    sys.stderr.write(f"warning: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    from gpe.cli import commands

    parser = argparse.ArgumentParser(
        prog="vortherm",
        description=("Stir a 2D Bose-Einstein condensate on a CPU, find its quantized vortices "
                     "and measure their temperature (both signs of beta)."),
    )
    parser.add_argument("--version", action="version", version="vortherm 0.1.0")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for register in commands.REGISTRY:
        register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    warnings.showwarning = _show_warning
    try:
        return int(args.handler(args) or 0)
    except _thermo_error_types() as exc:
        sys.stderr.write(f"error: {exc}\n")
        return EXIT_INPUT_ERROR
    except KeyboardInterrupt:
        sys.stderr.write("interrupted: the run file keeps its last checkpoint; "
                         "continue with `vortherm run --resume FILE.h5`\n")
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
