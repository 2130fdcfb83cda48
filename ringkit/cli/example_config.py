"""``ringkit example-config``: print a commented study file to start from."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from ringkit.cli import UserError

__all__ = ["register", "run"]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``example-config`` subcommand."""
    p = subparsers.add_parser(
        "example-config",
        help="print a commented study file (the default study) to start from",
        description=(
            "Print a study file that lists every section and key with its unit and allowed "
            "values. Its active values are those of `ringkit demo`."
        ),
    )
    p.add_argument("-o", "--output", metavar="FILE", help="write to FILE instead of stdout")
    p.add_argument("--force", action="store_true", help="overwrite FILE if it exists")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Print or write the example configuration."""
    from ringkit.study.example import example_config_text

    text = example_config_text()
    if args.output is None:
        sys.stdout.write(text)
        return 0
    path = Path(args.output)
    if path.exists() and not args.force:
        raise UserError(f"{path} exists; pass --force to overwrite it")
    path.write_text(text, encoding="utf-8")
    print(f"wrote {path}", file=sys.stderr)
    return 0
