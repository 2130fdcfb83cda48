"""``ringkit demo --out DIR``: run the embedded default study (see docs/studies.md for its cost)."""

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
            "Run ringkit's default study: an invented multi-mode GaAs ring (mean radius "
            "400 nm) in a uniform field, with a disorder ensemble at two temperatures and "
            "dephasing probes (print it with `ringkit example-config`). The cost estimate is "
            "printed but not asked for (--yes is implied). Resumable like `ringkit study`."
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
    args.yes = True  # the demo was asked for by name: print the estimate, do not ask again
    return run_and_report(config, args)
