"""``ringkit study FILE.toml --out DIR``: run (or resume) a study described in a TOML file.

The options and the run/summary helpers here are shared with ``ringkit demo``.
"""

from __future__ import annotations

import argparse
import sys
import tomllib
from pathlib import Path
from typing import Any

from ringkit.cli import UserError

__all__ = ["register", "run", "add_run_options", "parse_overrides", "run_and_report"]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``study`` subcommand."""
    p = subparsers.add_parser(
        "study",
        help="run a study described in a TOML file (resumable)",
        description=(
            "Run the study described in FILE (see `ringkit example-config`) and write "
            "results.nc, summary.json, figures and a report into DIR. Finished work is kept "
            "in DIR/checkpoint: after Ctrl-C or a crash, the same command resumes."
        ),
    )
    p.add_argument("file", metavar="FILE.toml", help="study file")
    add_run_options(p, out_default=None)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Validate the study file and run it."""
    from ringkit.study.config import load_config

    try:
        config = load_config(args.file, overrides=parse_overrides(args.overrides))
    except ValueError as err:
        msg = str(err)
        if not msg.startswith(str(args.file)):
            msg = f"{args.file}: {msg}"
        raise UserError(msg) from err
    return run_and_report(config, args)


def add_run_options(parser: argparse.ArgumentParser, *, out_default: str | None) -> None:
    """Options common to the commands that run a study."""
    parser.add_argument(
        "--out",
        metavar="DIR",
        required=out_default is None,
        default=out_default,
        help="output directory (results.nc, summary.json, figures/, report, checkpoint/)"
        + ("" if out_default is None else f"; default: {out_default}"),
    )
    parser.add_argument(
        "--set",
        metavar="SECTION.KEY=VALUE",
        action="append",
        default=[],
        dest="overrides",
        help="override one study-file value, e.g. --set ensemble.realizations=2 or --set "
        '"field.stop=50 mT" (repeatable; changing a physics value makes it another study, '
        "which needs a new --out or --restart)",
    )
    parser.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="number of local worker processes (default: executor.workers or all cores; at "
        "most the number of cores unless --oversubscribe)",
    )
    parser.add_argument(
        "--oversubscribe",
        action="store_true",
        help="allow more worker processes than cores (they then compete for the cores)",
    )
    parser.add_argument(
        "--yes",
        action="store_true",
        help="run even when the up-front estimate exceeds --confirm-above",
    )
    parser.add_argument(
        "--confirm-above",
        type=float,
        default=30.0,
        metavar="MINUTES",
        help="estimated wall-clock time above which --yes is required (default: 30)",
    )
    parser.add_argument(
        "--restart",
        action="store_true",
        help="discard an existing checkpoint in DIR instead of resuming from it",
    )
    parser.add_argument("--quiet", action="store_true", help="no progress bar or status lines")


def parse_overrides(items: list[str]) -> dict[str, Any]:
    """``["a.b=1", "c.d=2 mT"]`` -> ``{"a.b": 1, "c.d": "2 mT"}`` (values read as TOML if valid)."""
    out: dict[str, Any] = {}
    for item in items:
        key, sep, text = item.partition("=")
        key, text = key.strip(), text.strip()
        if not sep or "." not in key or not text:
            raise UserError(f"--set {item!r}: expected SECTION.KEY=VALUE, e.g. ensemble.seed=3")
        try:
            value: Any = tomllib.loads(f"v = {text}")["v"]
        except tomllib.TOMLDecodeError:
            value = text  # e.g. 50 mT -> the string "50 mT"
        out[key] = value
    return out


def run_and_report(config: Any, args: argparse.Namespace) -> int:
    """Run ``config`` into ``args.out`` and print where the results are."""
    from ringkit.study.checkpoint import CheckpointMismatch
    from ringkit.study.cost import CostError, check_workers_option
    from ringkit.study.runner import OutputWriteError, UnitFailed, run_study

    check_workers_option(args.workers)
    if not args.confirm_above >= 0:  # also refuses nan
        raise UserError(f"--confirm-above = {args.confirm_above}: must be >= 0 minutes")
    echo = None if args.quiet else (lambda msg: print(f"ringkit: {msg}", file=sys.stderr))
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UserError(f"--out {out}: exists and is not a directory")
    try:
        outcome = run_study(
            config,
            out,
            progress=not args.quiet,
            restart=args.restart,
            workers=args.workers,
            echo=echo,
            yes=args.yes,
            confirm_above=args.confirm_above,
            oversubscribe=args.oversubscribe,
        )
    except (CheckpointMismatch, UnitFailed, CostError, OutputWriteError) as err:
        raise UserError(str(err)) from err
    if not args.quiet:
        print(
            f"ringkit: finished in {outcome.elapsed:.1f} s "
            f"({outcome.n_computed} units computed, {outcome.n_reused} from the checkpoint)",
            file=sys.stderr,
        )
    for name, path in outcome.files.items():
        if not name.startswith("figure:"):
            print(f"{name}: {path}")
    n_fig = sum(1 for k in outcome.files if k.startswith("figure:"))
    if n_fig:
        print(f"figures: {n_fig} in {out / 'figures'}")
    return 0
