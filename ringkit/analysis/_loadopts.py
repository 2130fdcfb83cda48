"""Validation of the options of :func:`ringkit.analysis.load_traces` (private helper).

Every misuse is a :class:`~ringkit._validation.ParameterError` naming the option, the value
and what is allowed (never an AttributeError/TypeError from deep inside the reader).
"""

from __future__ import annotations

import os

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_range
from ringkit.analysis._columns import parse_unit

__all__ = ["validate_options", "GROUP_AUTO"]

#: ``group_by`` default: group by the file's temperature column if it has exactly one.
GROUP_AUTO = "auto"
_NUMBER_CHARS = set("0123456789.+-eE")


def _column_spec(name: str, value: object, allow_list: bool = False) -> None:
    ok = (str, int, np.integer)
    if value is None:
        return
    if allow_list and isinstance(value, (list, tuple)):
        if not value:
            raise ParameterError(name, value, "must name at least one column")
        for v in value:
            _column_spec(name, v)
        return
    if isinstance(value, bool) or not isinstance(value, ok):
        raise ParameterError(name, value, "must be a column label (str) or a 0-based index (int)")
    if isinstance(value, (int, np.integer)) and value < 0:
        raise ParameterError(name, value, "a column index must be >= 0")
    if isinstance(value, str) and not value.strip():
        raise ParameterError(name, value, "must not be empty")


def validate_options(o: dict) -> dict:
    """Check the keyword options of ``load_traces``; returns them normalised."""
    if not isinstance(o["path"], (str, os.PathLike)):
        raise ParameterError("path", o["path"], "must be a file or folder path (str or Path)")
    _column_spec("field", o["field"])
    _column_spec("signal", o["signal"], allow_list=True)
    if o["group_by"] != GROUP_AUTO:
        _column_spec("group_by", o["group_by"])
    for name in ("field_unit", "signal_unit"):
        unit = o[name]
        if unit is None:
            continue
        if not isinstance(unit, str) or parse_unit(unit) is None:
            raise ParameterError(name, unit, "unknown unit (e.g. T, mT, G, Ohm, kOhm, S, e^2/h)")
        quantity = parse_unit(unit)[0]
        want = ("field",) if name == "field_unit" else ("R", "G")
        if quantity not in want:
            raise ParameterError(
                name, unit, f"is a {quantity} unit; expected a {' or '.join(want)} unit"
            )
    check_range("group_rtol", o["group_rtol"], 0.0, 0.5)
    d = o["delimiter"]
    if d is not None:
        if not isinstance(d, str) or d == "" or "\n" in d or "\r" in d:
            raise ParameterError(
                "delimiter", d, "must be None (detect) or a non-empty string such as ',' or '\\t'"
            )
        if set(d) & _NUMBER_CHARS:
            raise ParameterError("delimiter", d, "must not contain digits, '.', '+', '-' or 'e'")
    c = o["comment"]
    if c is not None and (not isinstance(c, str) or c.strip() != c or set(c) & _NUMBER_CHARS):
        raise ParameterError(
            "comment", c, "must be None or a string such as '#' (no spaces, digits or signs)"
        )
    check_choice(
        "decimal", o["decimal"] if isinstance(o["decimal"], str) else repr(o["decimal"]), (".", ",")
    )
    if d is not None and d == o["decimal"]:
        raise ParameterError("delimiter", d, f"must differ from decimal = {o['decimal']!r}")
    terminals = o["terminals"] if isinstance(o["terminals"], str) else repr(o["terminals"])
    check_choice("terminals", terminals, ("two", "four"))
    check_choice("out_of_order", str(o["out_of_order"]), ("sort", "drop"))
    check_choice("duplicates", str(o["duplicates"]), ("average", "drop"))
    check_range("series_resistance", o["series_resistance"], 0.0, None, "Ohm")
    check_range("reversal_fraction", o["reversal_fraction"], 0.0, 0.5, inclusive=(False, True))
    if o["terminals"] == "four" and o["series_resistance"] > 0:
        raise ParameterError(
            "series_resistance", o["series_resistance"], "applies to two-terminal data only", "Ohm"
        )
    if o["reference_resistance"] is not None:
        check_range(
            "reference_resistance",
            o["reference_resistance"],
            0.0,
            None,
            "Ohm",
            inclusive=(False, True),
        )
    if not isinstance(o["split_sweeps"], (bool, np.bool_)):
        raise ParameterError("split_sweeps", o["split_sweeps"], "must be True or False")
    mp = o["min_points"]
    if isinstance(mp, bool) or not isinstance(mp, (int, np.integer)) or mp < 2:
        raise ParameterError("min_points", mp, "must be an integer >= 2")
    if o["temperature"] is not None:
        check_range("temperature", o["temperature"], 0.0, None, "K", inclusive=(False, True))
    if not isinstance(o["pattern"], str) or not o["pattern"]:
        raise ParameterError("pattern", o["pattern"], "must be a glob pattern such as '*.csv'")
    mb = o["max_bytes"]
    if isinstance(mb, bool) or not isinstance(mb, (int, np.integer)) or mb < 1:
        raise ParameterError("max_bytes", mb, "must be a positive integer (bytes)")
    return o
