"""Four-terminal analysis of loaded traces: contact configuration and R in ohm (no kwant).

Glue between :func:`ringkit.analysis.load_traces` (which stores every trace as a conductance
in e^2/h) and :func:`ringkit.analysis.fourterminal.analyze_four_terminal` (which works on
R_mn,kl in ohm), shared by ``ringkit analyze``, the measured-data panel and the notebooks.
docs/multiterminal.md, "Analysis of measured four-terminal data".

API
---
CONTACTS_HINT
    The one line telling the user what to add when a four-terminal file has no configuration.
trace_contacts(trace, given=None) -> Contacts or None
    The configuration from ``given`` (option) or the file's ``# contacts: m,n,k,l`` header.
is_four_terminal(trace) -> bool
    Marked four-terminal by the loader option or a ``# terminals: four`` header.
trace_resistance_ohm(trace) -> ndarray
    R in ohm, the exact inverse of the loader's conversion to e^2/h.
analyze_trace_four_terminal(trace, contacts, reverse=None, **options) -> FourTerminalResult
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis.fourterminal import FourTerminalResult, analyze_four_terminal
from ringkit.contacts import Contacts
from ringkit.units import E2H

__all__ = [
    "CONTACTS_HINT",
    "trace_contacts",
    "is_four_terminal",
    "trace_resistance_ohm",
    "analyze_trace_four_terminal",
]

CONTACTS_HINT = (
    "four-terminal data without a contact configuration: add --contacts m,n,k,l "
    "(current m->n, voltage V_k-V_l, e.g. 0,2,1,3) or a '# contacts: m,n,k,l' header line"
)


def _header(trace) -> dict[str, str]:
    return {str(k).strip().lower(): str(v) for k, v in trace.metadata.get("header", {}).items()}


def trace_contacts(trace, given: str | Contacts | None = None) -> Contacts | None:
    """Contact configuration: ``given`` if set, else the ``# contacts: ...`` header, else None.

    Raises
    ------
    ParameterError
        ``contacts`` is not four contact indices (message names the allowed forms).
    """
    text = given if given not in (None, "") else _header(trace).get("contacts")
    if text in (None, ""):
        return None
    contacts = Contacts.parse(text)
    contacts.check(max(contacts.current + contacts.voltage) + 1)
    return contacts


def is_four_terminal(trace) -> bool:
    """True when the loader was told ``terminals="four"`` or the header says so."""
    if trace.metadata.get("terminals") == "four":
        return True
    return _header(trace).get("terminals", "").strip().lower() in ("four", "4", "four-terminal")


def trace_resistance_ohm(trace) -> np.ndarray:
    """R in ohm of a trace loaded from resistance data (inverse of the loader conversion).

    Two-terminal: ``R = 1/G + R_series``; four-terminal: ``R = 1/G``, or with the
    linearisation ``G = 1/R_ref - (R - R_ref)/R_ref^2``: ``R = 2 R_ref - R_ref^2 G``.
    """
    meta = trace.metadata
    if meta.get("quantity") != "R":
        raise ParameterError(
            "signal", meta.get("quantity"), "must be a resistance column for a four-terminal "
            "analysis (R in Ohm, kOhm, ...)",
        )  # fmt: skip
    g_si = np.asarray(trace.conductance, dtype=float) * E2H
    ref = meta.get("reference_resistance")
    if meta.get("terminals") == "four":
        if ref is not None:
            return 2.0 * ref - ref**2 * g_si
        return 1.0 / g_si
    return 1.0 / g_si + float(meta.get("series_resistance") or 0.0)


def analyze_trace_four_terminal(
    trace, contacts: Contacts | str, reverse: Any = None, **options
) -> FourTerminalResult:
    """:func:`analyze_four_terminal` of a loaded resistance trace.

    ``reverse`` is the trace of the reciprocal configuration R_kl,mn (or None);
    ``options`` pass through (``symmetrize``, ``r_in``, ``r_out``, extraction options).
    """
    rev = None
    if reverse is not None:
        rev = (reverse.field, trace_resistance_ohm(reverse))
    return analyze_four_terminal(
        trace.field, trace_resistance_ohm(trace), contacts=contacts, reverse=rev, **options
    )
