"""Input validation shared by every layer: errors that name the parameter, value and range."""

from __future__ import annotations

import math

__all__ = ["ParameterError", "check_positive", "check_range", "check_choice"]


class ParameterError(ValueError):
    """A user-facing parameter is out of its allowed range.

    The message always names the parameter, the offending value and the allowed range, e.g.
    ``"r_in = 5e-07 m is not allowed: must be < r_out = 4e-07 m"``.
    """

    def __init__(self, name: str, value: object, allowed: str, unit: str = "") -> None:
        self.name = name
        self.value = value
        self.allowed = allowed
        u = f" {unit}" if unit else ""
        super().__init__(f"{name} = {value!r}{u} is not allowed: {allowed}")


def check_positive(name: str, value: float, unit: str = "", *, allow_zero: bool = False) -> float:
    """Return ``float(value)`` or raise :class:`ParameterError` unless it is > 0 (or >= 0)."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(name, value, "must be a real number", unit) from None
    ok = v >= 0 if allow_zero else v > 0
    if not (math.isfinite(v) and ok):
        raise ParameterError(name, value, "must be >= 0" if allow_zero else "must be > 0", unit)
    return v


def check_range(
    name: str,
    value: float,
    low: float | None = None,
    high: float | None = None,
    unit: str = "",
    *,
    inclusive: tuple[bool, bool] = (True, True),
) -> float:
    """Return ``float(value)`` or raise :class:`ParameterError` if outside ``[low, high]``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(name, value, "must be a real number", unit) from None
    lo_ok = low is None or (v >= low if inclusive[0] else v > low)
    hi_ok = high is None or (v <= high if inclusive[1] else v < high)
    if not (math.isfinite(v) and lo_ok and hi_ok):
        lb = "(-inf" if low is None else ("[" if inclusive[0] else "(") + f"{low:g}"
        hb = "inf)" if high is None else f"{high:g}" + ("]" if inclusive[1] else ")")
        raise ParameterError(name, value, f"must lie in {lb}, {hb}", unit)
    return v


def check_choice(name: str, value: str, choices: tuple[str, ...] | list[str]) -> str:
    """Return ``value`` or raise :class:`ParameterError` listing the allowed choices."""
    if value not in choices:
        allowed = ", ".join(repr(c) for c in choices)
        raise ParameterError(name, value, f"must be one of {allowed}")
    return value
