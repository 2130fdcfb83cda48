"""Measured magnetoresistance traces: reading text files into clean conductance traces.

Public API
----------
Trace(field [T], conductance [e^2/h], label, metadata)
LoadReport, LoadResult(traces, report)
load_traces(path, **options) -> LoadResult       (a file or a folder of files)
TraceFormatError                                  (malformed file: names file, line, problem)

What the loader does (and reports)
----------------------------------
* Text with comma, tab, semicolon or whitespace delimiters (detected, or ``delimiter=``),
  comment lines (``#`` by default; ``# key = value`` lines are kept as metadata), a header
  line or none (the last comment line is used as header if it names the columns).
* Columns by name (``"B"`` or the full label ``"B [mT]"``) or 0-based index. Units from the
  labels (``B (T)``, ``B [mT]``, ``Field (G)``, ``R (Ohm)``, ``R [kOhm]``, ``G (S)``,
  ``G (e^2/h)``, ...) or from ``field_unit=``/``signal_unit=``; an unknown unit is an error,
  never a guess.
* Resistance -> conductance ``G = 1/(R - R_series)`` (two-terminal). Four-terminal data are
  flagged: ``R_mn,kl`` is not the inverse of a ring conductance, may be negative and is not
  even in B (Büttiker 1986; docs/measured-data.md); ``G = 1/R`` is then only indicative, or, with
  ``reference_resistance=R_2t``, linearised as ``G = 1/R_2t - (R - R_2t)/R_2t^2``
  (``dG = -dR/R_2t^2``). The caveat is stored in ``Trace.metadata["caveats"]``.
* Several traces: one per signal column, per value of a ``group_by`` column (e.g.
  temperature), per sweep direction (up/down split at turning points where the field
  reverses by more than ``reversal_fraction`` of its span), per file of a folder.
* Rows with NaN/empty values, empty rows, values that overflow on conversion,
  out-of-order fields within a sweep (re-sorted or dropped) and duplicate fields (averaged
  or dropped) are handled and counted in the :class:`LoadReport` with reasons and example
  line numbers. Nothing is dropped silently and no non-finite value reaches a trace.
* A file with one temperature column is split per temperature by default
  (``group_by="auto"``); header temperatures (``# T = 0,3 K``, ``3.00e-01 K``) are read
  exactly and a negative one refuses the file.
* Only regular files up to ``max_bytes`` are read; option misuse is a ParameterError;
  a unit option contradicting the header is a ParameterError unless ``override_units``.

Rules in full: docs/measured-data.md (helpers ``_textfile``, ``_loadfile``, ``_loadopts``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ringkit.analysis._loadfile import load_file
from ringkit.analysis._loadopts import GROUP_AUTO, validate_options
from ringkit.analysis._sweeps import Tally
from ringkit.analysis._textfile import TraceFormatError

__all__ = ["Trace", "LoadReport", "LoadResult", "TraceFormatError", "load_traces"]

_SUFFIXES = (".txt", ".dat", ".csv", ".tsv")


@dataclass(frozen=True)
class Trace:
    """One magnetoconductance sweep, field increasing.

    Attributes
    ----------
    field : ndarray
        Field in T, strictly increasing.
    conductance : ndarray
        Conductance in e^2/h.
    label : str
        ``"<file stem>:<column>[ T=<value> K][ up|down]"``.
    metadata : dict
        ``source``, ``column``, ``quantity`` (``"R"``/``"G"``), ``units``, ``terminals``,
        ``series_resistance`` [Ohm], ``direction``, ``temperature`` [K] (if known),
        ``lines`` (first and last line number), ``caveats``, ``header``.
    """

    field: np.ndarray
    conductance: np.ndarray
    label: str = ""
    metadata: dict = field(default_factory=dict)

    @property
    def temperature(self) -> float | None:
        """Temperature in K if known (group column, header, file name or option)."""
        return self.metadata.get("temperature")

    @property
    def direction(self) -> str:
        """Sweep direction ``"up"``, ``"down"`` or ``"merged"``."""
        return self.metadata.get("direction", "merged")

    def __len__(self) -> int:
        return int(self.field.size)


@dataclass(frozen=True)
class LoadReport:
    """What happened to every data point (a point = one row of one signal column).

    ``n_points == n_used + n_dropped``; ``dropped`` maps each reason to a count,
    ``adjusted`` counts points kept but changed (re-sorted, averaged), ``examples`` gives
    up to five ``"file:line"`` per reason, ``headers`` where each file's column labels came
    from (so a data line mistaken for a header would be visible).
    """

    files: tuple[str, ...]
    n_points: int
    n_used: int
    n_dropped: int
    dropped: dict
    adjusted: dict
    examples: dict
    caveats: tuple[str, ...]
    headers: tuple[str, ...] = ()

    def summary(self) -> str:
        """Readable multi-line summary."""
        lines = [
            f"read {len(self.files)} file(s): {self.n_points} points, {self.n_used} used, "
            f"{self.n_dropped} dropped"
        ]
        for reason, n in self.dropped.items():
            ex = ", ".join(self.examples.get(reason, ()))
            lines.append(f"  dropped {n}: {reason}" + (f" (e.g. {ex})" if ex else ""))
        for reason, n in self.adjusted.items():
            ex = ", ".join(self.examples.get(reason, ()))
            lines.append(f"  kept {n}: {reason}" + (f" (e.g. {ex})" if ex else ""))
        lines.extend(f"  columns: {h}" for h in self.headers)
        lines.extend(f"  caveat: {c}" for c in self.caveats)
        return "\n".join(lines)


@dataclass(frozen=True)
class LoadResult:
    """Traces read from a file or folder and the :class:`LoadReport`."""

    traces: tuple[Trace, ...]
    report: LoadReport

    def __iter__(self):
        return iter(self.traces)

    def __len__(self) -> int:
        return len(self.traces)


def load_traces(
    path: str | Path,
    *,
    field: str | int | None = None,
    signal: str | int | list | None = None,
    field_unit: str | None = None,
    signal_unit: str | None = None,
    group_by: str | int | None = GROUP_AUTO,
    group_rtol: float = 1e-3,
    delimiter: str | None = None,
    comment: str = "#",
    decimal: str = ".",
    series_resistance: float = 0.0,
    terminals: str = "two",
    reference_resistance: float | None = None,
    split_sweeps: bool = True,
    reversal_fraction: float = 0.05,
    out_of_order: str = "sort",
    duplicates: str = "average",
    min_points: int = 8,
    temperature: float | None = None,
    pattern: str = "*",
    max_bytes: int = 2**26,
    override_units: bool = False,
) -> LoadResult:
    """Read measured magnetoresistance/conductance traces from a text file or folder.

    Parameters
    ----------
    path : str or Path
        A file, or a folder whose files matching ``pattern`` with suffix .txt, .dat, .csv
        or .tsv are read in sorted order.
    field, signal : str or int, optional
        Field column and signal column(s) by label/name or 0-based index. Defaults: the
        column whose unit/name says field (else column 0); every resistance/conductance
        column (else column 1).
    field_unit, signal_unit : str, optional
        Units overriding the header (needed when the header has none), e.g. ``"mT"``,
        ``"kOhm"``, ``"e^2/h"``. The signal unit also says whether it is R or G.
    group_by : str or int, "auto" or None
        Column (e.g. temperature) whose distinct values (within ``group_rtol``) give
        separate traces; a column with unit K/mK sets ``metadata["temperature"]``.
        ``"auto"`` (default) groups by the file's temperature column if it has exactly one
        (a caveat says so); None never groups.
    delimiter, comment, decimal : str
        Text format; ``delimiter=None`` detects tab, semicolon, comma or whitespace.
    series_resistance : float
        Ohm subtracted before inversion (two-terminal: leads, contacts, filters).
    terminals : {"two", "four"}
        Measurement configuration; "four" adds the caveat of the module docstring.
    reference_resistance : float, optional
        Two-terminal R in Ohm for the linearised four-terminal conversion.
    split_sweeps : bool
        Split at field reversals into up and down sweeps (else merge and sort).
    reversal_fraction : float
        Reversal (fraction of the field span) that counts as a turning point; smaller
        backward steps are out-of-order rows.
    out_of_order : {"sort", "drop"}
        Re-sort rows whose field goes backwards within a sweep, or drop them.
    duplicates : {"average", "drop"}
        Average the signal of rows with the same field, or keep the first.
    min_points : int
        Sweep segments with fewer points are dropped (reported).
    temperature : float, optional
        Temperature in K for every trace (overrides header and file name).
    pattern : str
        Glob pattern for folders.
    max_bytes : int
        Largest file read (default 64 MiB); only regular files are read (devices, FIFOs
        and sockets are refused without opening them).
    override_units : bool
        A ``field_unit``/``signal_unit`` that contradicts the unit in the column label is a
        ParameterError unless this is True (the option then wins; a caveat records it).

    Returns
    -------
    LoadResult

    Raises
    ------
    TraceFormatError
        Malformed file: one line naming the file, the line and the problem.
    ParameterError
        Invalid options. ``OSError`` if the path cannot be read.
    """
    o = validate_options(dict(locals()))
    p = Path(path)
    if p.is_dir():
        files = sorted(f for f in p.glob(pattern) if f.is_file() and f.suffix.lower() in _SUFFIXES)
        if not files:
            raise TraceFormatError(
                f"{p}: no data files ({', '.join(_SUFFIXES)}) matching {pattern!r}"
            )
    else:
        files = [p]
    o["series"] = float(series_resistance)
    o["reference"] = reference_resistance
    o["min_points"] = int(min_points)
    tally = Tally()
    traces: list[Trace] = []
    for f in files:
        traces.extend(Trace(**rec) for rec in load_file(f, tally, o))
    if not traces:
        raise TraceFormatError(f"{p}: no trace with at least {min_points} valid points")
    return LoadResult(traces=tuple(traces), report=LoadReport(**tally.counts()))
