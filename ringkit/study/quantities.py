"""Physical quantities written as text in study files: ``"250 nm"``, ``"-20 mT"``, ``"1.5 K"``.

A study file gives every dimensional value as a string ``"<number> <unit>"``.
:func:`parse_quantity` turns it into a float in SI units and rejects a unit of the wrong
dimension with a message that lists the units that are allowed. A bare number (``radius =
300``) is an error that says which unit to write (``'radius = 300 has no unit; write "300
nm"'``): reading it in SI units would make a 300 nm ring 300 m wide. Only ``0`` and ``"inf"``
may be written without a unit (they mean the same in every unit).

API
---
DIMENSIONS
    Mapping dimension name -> (SI unit, {unit spelling: factor to SI}).
parse_quantity(value, dimension, *, name) -> float
    Value in SI units; raises :class:`QuantityError`.
preferred_units(dimension) -> tuple of str
    The usual spellings (the parser accepts a few more, e.g. "µm", "1/cm^2").
format_quantity(value_si, dimension, digits=10) -> str
    Readable text with a convenient unit (used by reports and the example configuration).
"""

from __future__ import annotations

import difflib
import math
import re

from ringkit import units as _u

__all__ = [
    "DIMENSIONS",
    "SUGGESTED_UNIT",
    "QuantityError",
    "parse_quantity",
    "format_quantity",
    "preferred_units",
]


class QuantityError(ValueError):
    """A value in a study file has no unit, the wrong unit, or is not a number."""


_MICRO = ("u", "µ", "μ")


def _with_micro(base: dict[str, float], prefix_unit: str, factor: float) -> dict[str, float]:
    out = dict(base)
    for m in _MICRO:
        out[m + prefix_unit] = factor
    return out


#: dimension -> (SI unit, accepted spellings -> factor to the SI unit)
DIMENSIONS: dict[str, tuple[str, dict[str, float]]] = {
    "length": (
        "m",
        _with_micro({"m": 1.0, "cm": 1e-2, "mm": 1e-3, "nm": 1e-9, "pm": 1e-12}, "m", 1e-6),
    ),
    "field": (
        "T",
        _with_micro({"T": 1.0, "mT": 1e-3, "G": 1e-4, "kG": 0.1, "nT": 1e-9}, "T", 1e-6),
    ),
    "flux": ("Wb", {"Wb": 1.0, "h/e": _u.PHI0, "Phi0": _u.PHI0, "h/2e": _u.PHI0_AAS}),
    "temperature": ("K", _with_micro({"K": 1.0, "mK": 1e-3, "nK": 1e-9}, "K", 1e-6)),
    "energy": (
        "J",
        _with_micro(
            {"J": 1.0, "eV": _u.EV, "meV": 1e-3 * _u.EV, "neV": 1e-9 * _u.EV}, "eV", 1e-6 * _u.EV
        ),
    ),
    "density": (
        "m^-2",
        {"m^-2": 1.0, "1/m^2": 1.0, "/m^2": 1.0, "cm^-2": 1e4, "1/cm^2": 1e4, "/cm^2": 1e4},
    ),
    "mobility": (
        "m^2/Vs",
        {
            "m^2/Vs": 1.0,
            "m^2/(V s)": 1.0,
            "m^2/V/s": 1.0,
            "cm^2/Vs": 1e-4,
            "cm^2/(V s)": 1e-4,
            "cm^2/V/s": 1e-4,
        },
    ),
}

_DIMENSION_WORDS = {
    "length": "a length",
    "field": "a magnetic field",
    "flux": "a magnetic flux",
    "temperature": "a temperature",
    "energy": "an energy",
    "density": "a sheet density",
    "mobility": "a mobility",
}

_NUMBER = r"[+-]?(?:\d+\.?\d*(?:[eE][+-]?\d+)?|\.\d+(?:[eE][+-]?\d+)?|infinity|inf)"
_QUANTITY_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>.*?)\s*$", re.IGNORECASE)


def _unit_owner(unit: str) -> str | None:
    for dim, (_si, table) in DIMENSIONS.items():
        if unit in table:
            return dim
    return None


def parse_quantity(value: object, dimension: str, *, name: str) -> float:
    """Return ``value`` in the SI unit of ``dimension``.

    Parameters
    ----------
    value : str, or the numbers 0 and inf
        ``"<number> <unit>"``, e.g. ``"250 nm"``, ``"1e11 cm^-2"``, ``"-5 h/e"``, ``"inf"``.
        Other bare numbers are refused (:data:`SUGGESTED_UNIT` names the unit to write).
    dimension : str
        One of :data:`DIMENSIONS`.
    name : str
        Dotted name of the parameter, used in error messages.

    Returns
    -------
    float
        Value in SI units (m, T, Wb, K, J, m^-2, m^2/Vs).

    Raises
    ------
    QuantityError
        If the text is not a number with a unit, or the unit belongs to another dimension.
    """
    table = DIMENSIONS[dimension][1]
    if isinstance(value, bool):
        raise QuantityError(f"{name} = {value!r}: expected {_DIMENSION_WORDS[dimension]}")
    if isinstance(value, int | float):
        number = float(value)
        if number == 0 or math.isinf(number):
            return number
        if math.isnan(number):
            raise QuantityError(f"{name} = nan: not a number; write a value with a unit")
        raise QuantityError(_no_unit_message(name, value, dimension))
    if not isinstance(value, str):
        raise QuantityError(
            f"{name} = {value!r}: expected {_DIMENSION_WORDS[dimension]} as a string like "
            f'"1.5 {_example_unit(dimension)}"'
        )
    m = _QUANTITY_RE.match(value)
    if not m:
        raise QuantityError(
            f"{name} = {value!r}: not a number with a unit "
            f'(write e.g. "1.5 {_example_unit(dimension)}")'
        )
    number = float(m.group("num"))
    unit = m.group("unit")
    if unit == "":
        if math.isinf(number) or number == 0:
            return number
        raise QuantityError(_no_unit_message(name, value, dimension))
    if unit in table:
        return number * table[unit]
    owner = _unit_owner(unit)
    if owner is not None:
        raise QuantityError(
            f"{name} = {value!r}: wrong unit, '{unit}' is {_DIMENSION_WORDS[owner]} but "
            f"{name} is {_DIMENSION_WORDS[dimension]} (allowed units: {_unit_list(dimension)})"
        )
    close = difflib.get_close_matches(unit, list(table), n=1, cutoff=0.5)
    hint = f"; did you mean '{close[0]}'?" if close else ""
    raise QuantityError(
        f"{name} = {value!r}: unknown unit '{unit}' for {_DIMENSION_WORDS[dimension]} "
        f"(allowed units: {_unit_list(dimension)}){hint}"
    )


#: Unit suggested for a bare number, per dimension (the usual unit of a mesoscopic ring study).
SUGGESTED_UNIT = {
    "length": "nm",
    "field": "mT",
    "flux": "h/e",
    "temperature": "K",
    "energy": "meV",
    "density": "cm^-2",
    "mobility": "cm^2/Vs",
}


def _no_unit_message(name: str, value: object, dimension: str) -> str:
    text = value.strip() if isinstance(value, str) else repr(value)
    unit = SUGGESTED_UNIT[dimension]
    return (
        f'{name} = {text} has no unit; write "{text} {unit}" '
        f"(units of {_DIMENSION_WORDS[dimension]}: {_unit_list(dimension)})"
    )


def _example_unit(dimension: str) -> str:
    return SUGGESTED_UNIT[dimension]


_PREFERRED = {
    "length": ("m", "um", "nm"),
    "field": ("T", "mT", "G"),
    "flux": ("Wb", "h/e"),
    "temperature": ("K", "mK"),
    "energy": ("J", "eV", "meV", "ueV"),
    "density": ("m^-2", "cm^-2"),
    "mobility": ("m^2/Vs", "cm^2/Vs"),
}


def preferred_units(dimension: str) -> tuple[str, ...]:
    """The usual unit spellings of ``dimension`` (the parser accepts a few more)."""
    return _PREFERRED[dimension]


def _unit_list(dimension: str) -> str:
    table = DIMENSIONS[dimension][1]
    shown = [u for u in table if not u.startswith(("µ", "μ"))]
    return ", ".join(shown)


_DISPLAY = {
    "length": [("um", 1e-6), ("nm", 1e-9)],
    "field": [("T", 1.0), ("mT", 1e-3)],
    "flux": [("h/e", _u.PHI0)],
    "temperature": [("K", 1.0), ("mK", 1e-3)],
    "energy": [("meV", 1e-3 * _u.EV), ("ueV", 1e-6 * _u.EV)],
    "density": [("cm^-2", 1e4)],
    "mobility": [("cm^2/Vs", 1e-4)],
}


def format_quantity(value_si: float, dimension: str, digits: int = 10) -> str:
    """Readable ``"<number> <unit>"`` for a value in SI units (round-trips through the parser).

    Examples
    --------
    >>> format_quantity(2.5e-7, "length")
    '250 nm'
    >>> format_quantity(float("inf"), "length")
    'inf'
    """
    v = float(value_si)
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    choices = _DISPLAY[dimension]
    unit, factor = choices[-1]
    for u, f in choices:
        if v == 0 or abs(v) >= f * 0.999999:
            unit, factor = u, f
            break
    return f"{v / factor:.{digits}g} {unit}"
