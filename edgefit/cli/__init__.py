"""Command line: ``edgefit <command> ...``.

Each command lives in its own module in this package and exposes
``add_parser(subparsers)`` (which registers the sub-command and sets
``func``) .  Any :class:`~edgefit.errors.EdgefitError` (and OS-level file
errors) becomes one line on stderr and exit status 2; a traceback is shown
only with ``--debug``.
"""
from __future__ import annotations

import argparse
import importlib
import sys
from typing import Sequence

from ..errors import EdgefitError

#: Modules of edgefit.cli that define sub-commands, in help order.
COMMAND_MODULES = ["inspect", "fit", "demo", "dust_tables", "batch", "simulate", "plan",
                   "regress", "grains", "population", "sizes"]


def build_parser() -> argparse.ArgumentParser:
    from .. import __version__

    parser = argparse.ArgumentParser(
        prog="edgefit",
        description="Gas and dust absorption edges in X-ray grating spectra.")
    parser.add_argument("--version", action="version", version=f"edgefit {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        try:
            mod = importlib.import_module(f"{__name__}.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"{__name__}.{name}":
                continue  # command not written yet
            raise
        mod.add_parser(sub)
    return parser


def error_line(command: str, exc: BaseException) -> str:
    """The one stderr line that reports ``exc`` for sub-command ``command``:
    the first line of its message (or its class name when it has none)."""
    msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return f"edgefit {command}: error: {msg}"


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 1
    try:
        return int(args.func(args) or 0)
    except (EdgefitError, OSError) as exc:
        if args.debug:
            raise
        print(error_line(args.command, exc), file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("edgefit: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
