"""Shared validation helpers, warnings and errors of :mod:`ringkit.analysis` (private).

The analysis layer works on plain arrays (numpy/scipy only; never kwant). Every public
function validates its inputs here, so the messages are the same everywhere.
"""

from __future__ import annotations

import numpy as np

from ringkit._validation import ParameterError

__all__ = [
    "AnalysisWarning",
    "ResolutionWarning",
    "UndersampledWarning",
    "FieldRangeError",
    "SamplingError",
    "validate_trace",
    "effective_step",
    "is_uniform",
    "Described",
]


class AnalysisWarning(UserWarning):
    """Base class of the warnings emitted by :mod:`ringkit.analysis`."""


class ResolutionWarning(AnalysisWarning):
    """The field range covers few periods, bands overlap, or no clear peak was found."""


class UndersampledWarning(AnalysisWarning):
    """The field step is too coarse for a band; the affected numbers are NaN or biased."""


class FieldRangeError(ParameterError):
    """The field range is shorter than one h/e period: no h/e number can be given."""


class SamplingError(ParameterError):
    """The field step is too coarse for the h/e band (above the Nyquist frequency)."""


class Described(str):
    """A string whose ``repr`` is itself (for readable :class:`ParameterError` values)."""

    def __repr__(self) -> str:
        return str(self)


def validate_trace(
    field: object, signal: object, *, min_points: int = 8
) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(field, signal)`` as float arrays sorted by increasing field.

    Raises
    ------
    ParameterError
        If the arrays are not 1-D of equal length >= ``min_points``, contain non-finite
        values, or the field is not strictly monotonic (duplicates or out-of-order values;
        :func:`ringkit.analysis.load_traces` cleans measured files and reports what it did).
    """
    b = np.asarray(field, dtype=float)
    s = np.asarray(signal, dtype=float)
    if b.ndim != 1:
        raise ParameterError("field", Described(f"array of shape {b.shape}"), "must be 1-D", "T")
    if s.shape != b.shape:
        raise ParameterError(
            "signal", Described(f"array of shape {s.shape}"), f"must have the shape {b.shape}"
        )
    if b.size < min_points:
        raise ParameterError(
            "field", Described(f"{b.size} points"), f"need at least {min_points} points", "T"
        )
    for name, arr in (("field", b), ("signal", s)):
        bad = int(np.count_nonzero(~np.isfinite(arr)))
        if bad:
            raise ParameterError(
                name,
                Described(f"array with {bad} non-finite values"),
                "must be finite (load_traces drops and reports NaN rows)",
            )
    d = np.diff(b)
    if np.all(d < 0):
        b, s = b[::-1].copy(), s[::-1].copy()
    elif not np.all(d > 0):
        n_dup = int(np.count_nonzero(d == 0))
        n_back = int(min(np.count_nonzero(d < 0), np.count_nonzero(d > 0)))
        raise ParameterError(
            "field",
            Described(f"array with {n_dup} duplicate and {n_back} out-of-order steps"),
            "must be strictly monotonic (load_traces splits sweeps, sorts and averages "
            "duplicates, and reports it)",
            "T",
        )
    return b, s


def effective_step(field: np.ndarray) -> float:
    """Field step that limits the resolvable frequency: 90th percentile of the steps [T].

    A few isolated large steps (gaps) do not set the limit, but a grid that is coarse over
    more than 10 % of the sweep does. Gaps are checked separately.
    """
    d = np.abs(np.diff(np.asarray(field, dtype=float)))
    return float(np.percentile(d, 90))


def is_uniform(field: np.ndarray, rtol: float = 1e-6) -> bool:
    """True if the field steps are equal to within ``rtol`` of the mean step."""
    d = np.diff(np.asarray(field, dtype=float))
    mean = (field[-1] - field[0]) / (len(field) - 1)
    return bool(np.all(np.abs(d - mean) <= rtol * abs(mean)))
