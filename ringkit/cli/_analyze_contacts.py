"""Four-terminal part of ``ringkit analyze``: ``--contacts``, ``--reverse``, ``--symmetrize``.

With a contact configuration (``--contacts m,n,k,l`` or a ``# contacts: m,n,k,l`` header
line) the reported resistance trace is analysed as R_mn,kl(B) by
:func:`ringkit.analysis.fourterminal.analyze_four_terminal` (Onsager-Büttiker
symmetrisation with ``--reverse FILE2``, the reciprocal configuration R_kl,mn; M. Büttiker,
Phys. Rev. Lett. 57, 1761 (1986)). The JSON output keeps every existing key, adds the keys
of ``FourTerminalResult.as_dict()`` that are new, and the full dict under ``four_terminal``.
A four-terminal file (``--four-terminal`` or a ``# terminals: four`` header) without a
configuration ends with one line saying what to add (exit status 2). docs/multiterminal.md.
"""

from __future__ import annotations

import argparse
import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

from ringkit.cli import UserError

__all__ = ["add_arguments", "four_terminal_record", "four_terminal_lines", "merge_record"]


def add_arguments(group: argparse._ArgumentGroup) -> None:
    """Add ``--contacts``, ``--reverse`` and ``--symmetrize`` to ``group``."""
    group.add_argument(
        "--contacts",
        metavar="m,n,k,l",
        help="four-terminal configuration: current m->n, voltage V_k-V_l (e.g. 0,2,1,3); "
        "also read from a '# contacts: ...' header line",
    )
    group.add_argument(
        "--reverse",
        metavar="FILE2",
        help="the reciprocal configuration R_kl,mn(B) (same options): the Onsager-Büttiker "
        "combination is analysed",
    )
    group.add_argument(
        "--symmetrize",
        default="none",
        choices=("none", "even", "odd"),
        help="single configuration: analyse the trace as measured (default) or its even/odd "
        "part in B",
    )


def four_terminal_record(
    args: argparse.Namespace, loaded, load: Callable[[Path], Any]
) -> dict[str, Any] | None:
    """``FourTerminalResult.as_dict()`` of the reported trace, or None (no configuration).

    ``load(path)`` loads the ``--reverse`` file with the same options. Raises
    :class:`UserError` (one line) for a four-terminal file without a configuration, a bad
    configuration, or a reverse file without a usable trace.
    """
    from ringkit.analysis.fourterminal_traces import (
        CONTACTS_HINT,
        analyze_trace_four_terminal,
        is_four_terminal,
        trace_contacts,
    )

    trace = loaded.traces[args.trace]
    given = getattr(args, "contacts", None)
    try:
        contacts = trace_contacts(trace, given)
    except ValueError as err:
        raise UserError(f"--contacts: {err}") from err
    if contacts is None:
        if is_four_terminal(trace) or getattr(args, "reverse", None):
            raise UserError(f"{trace.label}: {CONTACTS_HINT}")
        return None
    reverse = None
    if getattr(args, "reverse", None):
        rev_loaded = load(Path(args.reverse))
        if not 0 <= args.trace < len(rev_loaded.traces):
            raise UserError(f"--reverse {args.reverse}: no trace {args.trace} in the file")
        reverse = rev_loaded.traces[args.trace]
    geometry = {} if args.r_in is None else {"r_in": args.r_in, "r_out": args.r_out}
    try:
        res = analyze_trace_four_terminal(
            trace, contacts, reverse, symmetrize=args.symmetrize, **geometry
        )
    except ValueError as err:
        raise UserError(f"{trace.label}: four-terminal analysis: {err}") from err
    return res.as_dict()


def merge_record(top: dict[str, Any], four: dict[str, Any] | None) -> None:
    """Add the new four-terminal keys to ``top`` (existing keys keep their meaning)."""
    if four is None:
        return
    for key, value in four.items():
        top.setdefault(key, value)
    top["four_terminal"] = four


def four_terminal_lines(four: dict[str, Any] | None) -> list[str]:
    """Readable summary lines."""
    if four is None:
        return []

    def num(x: Any, fmt: str = ".4g") -> str:
        return "n/a" if x is None or not math.isfinite(x) else format(x, fmt)

    lines = [
        f"four-terminal {four['configuration']} (contacts {four['contacts']}), "
        f"symmetrisation: {four['symmetrization']}",
        f"  mean R = {num(four['mean_resistance_ohm'])} Ohm, rms dR/R = "
        f"{num(four['relative_change_rms'])}, odd fraction = {num(four['odd_fraction'], '.3g')}",
        f"  h/e: {num(four['amplitude_he_ohm'])} Ohm at phase {num(four['phase_he_rad'], '.3f')} "
        f"rad; h/2e: {num(four['amplitude_h2e_ohm'])} Ohm at phase "
        f"{num(four['phase_h2e_rad'], '.3f')} rad",
    ]
    if four.get("reciprocity_residual_ohm") is not None:
        lines.append(f"  reciprocity residual (rms) = {num(four['reciprocity_residual_ohm'])} Ohm")
    lines.extend(f"  note: {n}" for n in four.get("notes", []))
    return lines
