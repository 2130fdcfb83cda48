"""Column labels and units of measured-data files (private helper of :mod:`traces`).

A label such as ``"B (T)"``, ``"B [mT]"``, ``"Field (G)"``, ``"R (Ohm)"``, ``"R [kOhm]"``,
``"G (S)"``, ``"G (e^2/h)"``, ``"T (K)"`` or ``"B / T"`` is split into a name and a unit; the
unit decides the quantity (``"field"``, ``"R"``, ``"G"``, ``"temperature"``) and the factor to
SI (T, Ohm, S, K). Without a unit the name decides the quantity; the factor then has to be
given by the user.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ringkit.units import E2H

__all__ = ["ColumnInfo", "parse_label", "parse_unit", "classify_name"]

_PREFIX = {"": 1.0, "n": 1e-9, "u": 1e-6, "m": 1e-3, "k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9}

_FIELD = {
    "T": 1.0,
    "mT": 1e-3,
    "uT": 1e-6,
    "nT": 1e-9,
    "tesla": 1.0,
    "Tesla": 1.0,
    "G": 1e-4,
    "Gs": 1e-4,
    "gauss": 1e-4,
    "Gauss": 1e-4,
    "kG": 0.1,
    "kGs": 0.1,
    "mG": 1e-7,
    "Oe": 1e-4,
    "kOe": 0.1,
}
_QUANTUM = {
    "e^2/h": E2H,
    "e2/h": E2H,
    "e²/h": E2H,
    "2e^2/h": 2 * E2H,
    "2e2/h": 2 * E2H,
    "2e²/h": 2 * E2H,
    "G0": 2 * E2H,
}


@dataclass(frozen=True)
class ColumnInfo:
    """A parsed column label: display label, bare name, unit text, quantity and SI factor."""

    label: str
    name: str
    unit: str | None
    quantity: str | None
    factor: float | None


def _norm(unit: str) -> str:
    u = unit.strip().replace("\u00b5", "u").replace("\u03bc", "u")
    u = u.replace("\u03a9", "Ohm").replace("\u2126", "Ohm")
    return u.replace(" ", "")


def parse_unit(unit: str) -> tuple[str, float] | None:
    """Quantity and factor to SI of a unit string, or None if unknown.

    Field units go to T (``T, mT, uT, G, kG, Oe`` — oersted read as gauss, i.e. B in
    vacuum), resistance to Ohm (``Ohm, mOhm, kOhm, MOhm``), conductance to S (``S, mS, uS,
    nS, e^2/h, 2e^2/h, G0``), temperature to K (``K, mK``). Prefixes are case sensitive
    (``mOhm`` is milli-, ``MOhm`` mega-ohm).
    """
    u = _norm(unit)
    if not u:
        return None
    if u in _QUANTUM:
        return "G", _QUANTUM[u]
    if u in _FIELD:
        return "field", _FIELD[u]
    for suffix in ("Ohms", "Ohm", "ohms", "ohm"):
        if u.endswith(suffix):
            p = u[: -len(suffix)]
            if p in _PREFIX:
                return "R", _PREFIX[p]
    for suffix in ("Siemens", "siemens", "S"):
        if u.endswith(suffix):
            p = u[: -len(suffix)]
            if p in ("", "n", "u", "m"):
                return "G", _PREFIX[p]
    if u in ("K", "mK"):
        return "temperature", 1.0 if u == "K" else 1e-3
    return None


_BRACKET = re.compile(r"^\s*(?P<name>.*?)\s*[\(\[](?P<unit>[^\)\]]*)[\)\]]\s*$")
_SLASH = re.compile(r"^\s*(?P<name>[^/]+?)\s*/\s*(?P<unit>.+?)\s*$")

_NAME_PATTERNS = (
    ("field", re.compile(r"^(b|bz|b_?z|h|field|b[ _-]?field|magnetic[ _-]?field|bfield)$", re.I)),
    ("temperature", re.compile(r"^(t|temp|temperature|t_?mc|t_?sample)$", re.I)),
    ("R", re.compile(r"^(r|r[_ ]?(xx|xy|2t|4t|2p|4p|ring|\d+)|resistance.*)$", re.I)),
    ("G", re.compile(r"^(g|g[_ ]?(xx|2t|4t|2p|ring|\d+)|conductance.*|cond)$", re.I)),
)


def classify_name(name: str) -> str | None:
    """Quantity guessed from a bare column name (``B``, ``Field``, ``R_xx``, ``G``, ``T``)."""
    n = name.strip()
    for quantity, pattern in _NAME_PATTERNS:
        if pattern.match(n):
            return quantity
    return None


def parse_label(label: str) -> ColumnInfo:
    """Split a header label into name and unit and classify it (see module docstring)."""
    text = label.strip().strip("'\"").strip()
    m = _BRACKET.match(text)
    name, unit = (m["name"], m["unit"].strip()) if m else (text, None)
    if unit is None:
        s = _SLASH.match(text)
        if s and parse_unit(s["unit"]) is not None:
            name, unit = s["name"], s["unit"]
    parsed = parse_unit(unit) if unit else None
    if parsed is not None:
        quantity, factor = parsed
    elif unit:  # a unit we do not read (e.g. V, A): not a field/R/G column by itself
        quantity, factor = None, None
    else:
        quantity, factor = classify_name(name), None
    return ColumnInfo(label=text, name=name.strip(), unit=unit, quantity=quantity, factor=factor)
