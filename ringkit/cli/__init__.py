"""Command line of ringkit: ``ringkit <command> ...``.

Each subcommand lives in its own module of this package and exposes
``register(subparsers) -> None``; the parser it adds sets ``func=run`` where
``run(args) -> int`` returns the exit status. Modules listed in :data:`COMMANDS` that do not
exist (yet) are skipped, so commands can be added without editing this file's logic.

Errors that a user can fix (bad parameters, unreadable files, invalid configuration) are
printed as one ``ringkit: error: ...`` line with exit status 2; ``--debug`` shows the
traceback instead.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

from ringkit._version import __version__

__all__ = ["main", "UserError", "COMMANDS"]

COMMANDS: tuple[str, ...] = ("demo", "study", "example_config", "analyze", "fit")


class UserError(Exception):
    """An error caused by user input; reported without a traceback."""


def _build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ringkit",
        description="Design, simulate and analyse Aharonov-Bohm oscillations of quantum rings.",
    )
    parser.add_argument("--version", action="version", version=f"ringkit {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"ringkit.cli.{name}")
        except ModuleNotFoundError as err:
            if err.name == f"ringkit.cli.{name}":
                continue
            raise
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit status."""
    parser = _build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print("ringkit: interrupted (completed work is kept in the checkpoint)", file=sys.stderr)
        return 130
    except (UserError, ValueError, OSError, KeyError) as err:
        if args.debug:
            raise
        msg = str(err) if not isinstance(err, KeyError) else f"missing key {err}"
        print(f"ringkit: error: {msg}", file=sys.stderr)
        return 2
