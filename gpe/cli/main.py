"""The single command-line entry point: ``vortherm [-q|-v|-vv] [--log-file FILE] SUBCOMMAND ...``.

Everything heavy is imported inside the subcommand that needs it, so ``vortherm --help`` is
instant. Errors raised on purpose by the packages (``VorthermError``, ``ThermoError``) are
printed as one paragraph and give exit code 2; anything else is a bug and shows a traceback.

Messages go through :mod:`logging` (module loggers ``gpe.*`` and ``thermo.*``), warnings too
(``logging.captureWarnings``): standard error shows warnings and errors (``-v`` adds what the
run is doing, ``-vv`` the details, ``-q`` only errors), ``--log-file`` receives everything from
INFO on with times. Progress is a bar on a terminal; when standard error is not a terminal,
and always in the log file, it is a line every tenth of the work (gpe/cli/progress.py).
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
import warnings
from pathlib import Path

from tqdm import std as tqdm_std

from gpe import __version__
from gpe.cli import commands, progress
from gpe.errors import VorthermError
from thermo.errors import ThermoError

EXIT_INPUT_ERROR = 2

_PREFIX = {logging.DEBUG: "debug: ", logging.INFO: "", logging.WARNING: "warning: ",
           logging.ERROR: "error: ", logging.CRITICAL: "error: "}


def _add_global_options(parser: argparse.ArgumentParser, default) -> None:
    """-q/-v/--log-file, accepted before and after the subcommand name."""
    group = parser.add_argument_group("messages")
    group.add_argument("-v", "--verbose", action="count", default=default(0),
                       help="say what is done (-v) and the details (-vv) on standard error")
    group.add_argument("-q", "--quiet", action="store_true", default=default(False),
                       help="only errors on standard error, no progress bar")
    group.add_argument("--log-file", type=Path, metavar="FILE", default=default(None),
                       help="append messages from INFO on (with -vv: DEBUG), with times, and "
                            "progress lines to FILE")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="vortherm",
        description=("Stir a 2D Bose-Einstein condensate on a CPU, find its quantized vortices "
                     "and measure their temperature (both signs of beta)."),
    )
    parser.add_argument("--version", action="version", version=f"vortherm {__version__}")
    _add_global_options(parser, lambda value: value)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for register in commands.REGISTRY:
        register(sub)
    for subparser in sub.choices.values():
        # SUPPRESS: given after the subcommand they count, otherwise the values above stay
        _add_global_options(subparser, lambda value: argparse.SUPPRESS)
    return parser


class _Console(logging.Handler):
    """Standard error of the moment; written through tqdm so that a bar is redrawn below."""

    def __init__(self, level: int, quiet: bool) -> None:
        super().__init__(logging.DEBUG)
        self.console_level, self.quiet = level, quiet

    def filter(self, record: logging.LogRecord) -> bool:
        if record.name == progress.logger.name:
            # progress lines stand in for a bar nobody sees (standard error redirected)
            return not self.quiet and not progress.bars_enabled()
        return record.levelno >= self.console_level

    def emit(self, record: logging.LogRecord) -> None:
        try:
            text = _PREFIX.get(record.levelno, "") + record.getMessage()
            if record.exc_info and self.console_level <= logging.DEBUG:
                text += "\n" + logging.Formatter().formatException(record.exc_info)
            tqdm_std.tqdm.write(text, file=sys.stderr)
        except Exception:  # noqa: BLE001 -- logging must never break the command
            self.handleError(record)


def _one_line_warning(message, category, filename, lineno, line=None) -> str:
    return f"{message}"


class _Logging:
    """Handlers on the root logger for one command; removed again afterwards (tests call
    :func:`main` many times in one process)."""

    def __init__(self, verbose: int, quiet: bool, log_file: Path | None) -> None:
        level = logging.ERROR if quiet else (logging.WARNING, logging.INFO)[min(verbose, 1)]
        if verbose >= 2 and not quiet:
            level = logging.DEBUG
        self.handlers: list[logging.Handler] = [_Console(level, quiet)]
        file_level = logging.DEBUG if verbose >= 2 else logging.INFO
        if log_file is not None:
            try:
                handler = logging.FileHandler(log_file, mode="a", encoding="utf-8")
            except OSError as exc:
                raise VorthermError(f"--log-file {log_file}: cannot write it ({exc.strerror}); "
                                    "give a file in a folder that exists and is writable") from None
            handler.setLevel(file_level)
            handler.setFormatter(logging.Formatter(
                "%(asctime)s %(levelname)s %(processName)s %(name)s: %(message)s"))
            self.handlers.append(handler)
        self.level = min(level, file_level if log_file is not None else level,
                         logging.INFO)  # progress lines are INFO
        self.bars = False if quiet else None

    def __enter__(self) -> "_Logging":
        root = logging.getLogger()
        self._old_level, self._old_bars = root.level, progress.SETTINGS["bars"]
        self._old_format = warnings.formatwarning
        root.setLevel(self.level)
        for h in self.handlers:
            root.addHandler(h)
        progress.SETTINGS["bars"] = self.bars
        warnings.formatwarning = _one_line_warning
        logging.captureWarnings(True)
        return self

    def __exit__(self, *exc) -> None:
        logging.captureWarnings(False)
        warnings.formatwarning = self._old_format
        progress.SETTINGS["bars"] = self._old_bars
        root = logging.getLogger()
        for h in self.handlers:
            root.removeHandler(h)
            h.close()
        root.setLevel(self._old_level)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the process exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    # The command line only writes figure files: a headless backend unless the user chose one.
    os.environ.setdefault("MPLBACKEND", "Agg")
    with warnings.catch_warnings():   # warnings of this command only, then restored
        try:
            with _Logging(args.verbose, args.quiet, args.log_file):
                try:
                    return int(args.handler(args) or 0)
                except (VorthermError, ThermoError) as exc:
                    logging.getLogger(__name__).error("%s", exc)
                    return EXIT_INPUT_ERROR
                except KeyboardInterrupt:
                    logging.getLogger(__name__).error(
                        "interrupted: the run file keeps its last checkpoint; continue with "
                        "`vortherm run --resume FILE.h5`")
                    return 130
        except VorthermError as exc:   # the log file itself
            sys.stderr.write(f"error: {exc}\n")
            return EXIT_INPUT_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
