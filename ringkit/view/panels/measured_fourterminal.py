"""Measured-data panel, four-terminal part: the contact configuration and R_mn,kl analysis.

No widgets here. With a configuration (the panel's "contacts" field, e.g. ``"I 0→2, V 1–3"``
or ``"0,2,1,3"``, or a ``# contacts: m,n,k,l`` header line in the file) a resistance trace is
analysed by :func:`ringkit.analysis.fourterminal.analyze_four_terminal` in the panel's field
window: mean R and amplitudes in Ω, ΔR/R, h/e and h/2e phases, and the symmetrisation used
(Onsager-Büttiker reciprocity, M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986);
docs/multiterminal.md). Problems become one line for the message area, never a traceback.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass

import numpy as np

from ringkit.analysis.fourterminal import FourTerminalResult
from ringkit.analysis.fourterminal_traces import (
    analyze_trace_four_terminal,
    is_four_terminal,
    trace_contacts,
)

__all__ = ["FourTerminalView", "four_terminal_view", "PANEL_HINT"]

PANEL_HINT = (
    "four-terminal data without a contact configuration: enter the contacts "
    "(e.g. 'I 0→2, V 1–3' = current 0→2, voltage V_1−V_3) or add a '# contacts: m,n,k,l' "
    "header line; showing the two-terminal analysis only"
)


@dataclass(frozen=True)
class FourTerminalView:
    """What the panel shows for the four-terminal analysis.

    Attributes
    ----------
    result : FourTerminalResult or None
    message : str or None
        One line for the message area (bad configuration, missing configuration, data that
        are not a resistance).
    html : str
        Summary table (empty without a result).
    """

    result: FourTerminalResult | None
    message: str | None
    html: str


def _window(trace, field_min: float | None, field_max: float | None):
    """Copy of ``trace`` restricted to the field window (T)."""
    import dataclasses

    b = trace.field
    sel = np.ones(b.size, dtype=bool)
    if field_min is not None:
        sel &= b >= field_min
    if field_max is not None:
        sel &= b <= field_max
    return dataclasses.replace(trace, field=b[sel], conductance=trace.conductance[sel])


def _fmt(x: float, unit: str = "", fmt: str = ".4g") -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:{fmt}}{(' ' + unit) if unit else ''}"


def _table(res: FourTerminalResult) -> str:
    d = res.as_dict()
    rows = [
        ("configuration", f"{d['configuration']} (current {res.contacts.current[0]}→"
                          f"{res.contacts.current[1]}, voltage V_{res.contacts.voltage[0]}"
                          f"−V_{res.contacts.voltage[1]})"),
        ("mean R", _fmt(d["mean_resistance_ohm"], "Ω")),
        ("rms ΔR/R", _fmt(100 * d["relative_change_rms"], "%", ".3g")),
        ("h/e amplitude", _fmt(d["amplitude_he_ohm"], "Ω", ".3g")
         + f" (ΔR/R {_fmt(100 * d['relative_amplitude_he'], '%', '.3g')})"),
        ("h/2e amplitude", _fmt(d["amplitude_h2e_ohm"], "Ω", ".3g")
         + f" (ΔR/R {_fmt(100 * d['relative_amplitude_h2e'], '%', '.3g')})"),
        ("h/e phase", _fmt(d["phase_he_rad"], "rad", ".3f")),
        ("h/2e phase", _fmt(d["phase_h2e_rad"], "rad", ".3f")),
        ("symmetrisation", "; ".join([d["symmetrization"], *res.notes])
         + f"; odd fraction {_fmt(d['odd_fraction'], '', '.3g')}"),
    ]  # fmt: skip
    body = "".join(
        f"<tr><td>{html.escape(k)}</td><td data-key='{html.escape(k)}'>{html.escape(v)}</td></tr>"
        for k, v in rows
    )
    return f"<table class='ringkit-numbers ringkit-fourterminal'>{body}</table>"


def four_terminal_view(
    trace,
    contacts_text: str = "",
    *,
    symmetrize: str = "none",
    field_min: float | None = None,
    field_max: float | None = None,
    r_in: float | None = None,
    r_out: float | None = None,
) -> FourTerminalView:
    """Four-terminal analysis of ``trace`` for the panel (never raises ValueError).

    Parameters
    ----------
    trace : Trace
        Loaded trace (:func:`ringkit.analysis.load_traces`).
    contacts_text : str
        Configuration typed by the user (empty: use the file header, if any).
    symmetrize : {"none", "even", "odd"}
    field_min, field_max : float, optional
        Field window in T.
    r_in, r_out : float, optional
        Ring radii in m (h/e band from the geometry).
    """
    try:
        contacts = trace_contacts(trace, contacts_text.strip() or None)
    except ValueError as exc:
        return FourTerminalView(None, f"contacts: {exc}", "")
    if contacts is None:
        msg = PANEL_HINT if is_four_terminal(trace) else None
        return FourTerminalView(None, msg, "")
    radii = {} if r_in is None or r_out is None else {"r_in": r_in, "r_out": r_out}
    try:
        res = analyze_trace_four_terminal(
            _window(trace, field_min, field_max), contacts, symmetrize=symmetrize, **radii
        )
    except ValueError as exc:
        return FourTerminalView(None, f"four-terminal analysis: {exc}", "")
    return FourTerminalView(res, None, _table(res))
