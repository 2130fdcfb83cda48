"""``ringkit demo --out DIR``: run the embedded default study (a few minutes on 2 cores)."""

from __future__ import annotations

import argparse

from ringkit.cli import UserError
from ringkit.cli.study import add_run_options, parse_overrides, run_and_report

__all__ = ["register", "run", "DEFAULT_OUT"]

DEFAULT_OUT = "ringkit-demo-output"
"""Default output folder (the README and ``./bootstrap.sh demo`` use the same name)."""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``demo`` subcommand."""
    p = subparsers.add_parser(
        "demo",
        help="run the built-in demonstration study",
        description=(
            "Run ringkit's default study: an invented GaAs ring with a disorder ensemble at "
            "two temperatures and two phase-coherence lengths (print it with "
            "`ringkit example-config`). Resumable like `ringkit study`."
        ),
    )
    add_run_options(p, out_default=DEFAULT_OUT)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Run the default study."""
    from ringkit.study.config import default_study_text, parse_config

    try:
        config = parse_config(
            default_study_text(), source="default study", overrides=parse_overrides(args.overrides)
        )
    except ValueError as err:
        raise UserError(str(err)) from err
    return run_and_report(config, args)
