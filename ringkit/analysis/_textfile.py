"""Reading delimited text tables with line-accurate errors (private helper of traces).

Comment lines (with ``# key = value`` metadata), a header line or a header in the last
comment line before the data, tab/semicolon/comma/whitespace delimiters, decimal commas,
empty and NaN tokens. Rules (docs/measured-data.md, "Loader rules"):

* only regular files are opened (devices, FIFOs and sockets are refused without reading),
  and at most ``max_bytes`` are read;
* the first non-comment line is a header only if none of its tokens is a number; a mixed
  line such as ``0.001,abc`` is a data row, and an unreadable token refuses the file; a
  line of units under the header (``mT,kOhm``) is joined to the labels (``B (mT)``);
* numbers follow one strict grammar (``[+-]digits[.digits][e[+-]digits]``, or the decimal
  comma); ``inf``/``nan``/empty tokens are kept as NaN and dropped later with a reason;
* a row without any value (blank, or delimiters only) after the header or first data row
  is an *empty row*: counted and dropped with a reason, whatever the delimiter;
* trailing delimiters beyond the column count are ignored; any other column-count mismatch
  refuses the file naming the line.
"""

from __future__ import annotations

import os
import re
import stat
from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = ["TraceFormatError", "Table", "read_table", "temperature_from_text", "header_temperature"]

_NAN_TOKENS = {"", "nan", "na", "n/a", "--", "null", "none"}
_INF_TOKENS = {"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity"}
_NUMBER = {
    ".": re.compile(r"^[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?$"),
    ",": re.compile(r"^[+-]?(?:[0-9]+(?:,[0-9]*)?|,[0-9]+)(?:[eE][+-]?[0-9]+)?$"),
}
_COLUMN = {  # a whole column of numbers, joined with newlines (fast path of read_table)
    d: re.compile(rf"(?:{p.pattern[1:-1]}\n)*{p.pattern[1:-1]}") for d, p in _NUMBER.items()
}
_NUM_TEXT = r"[0-9]+(?:[.,][0-9]+)?(?:[eE][-+]?[0-9]+)?"
_TEMP_IN_NAME = re.compile(r"(?<![A-Za-z0-9.,])(" + _NUM_TEXT + r")\s*(mK|K)(?![A-Za-z])")
_TEMP_VALUE = re.compile(
    r"^\s*(?P<num>[-+]?(?:[0-9]+(?:[.,][0-9]*)?|[.,][0-9]+)(?:[eE][-+]?[0-9]+)?)\s*(?P<unit>mK|K)?"
    r"(?:\s|$|[(\[;,])"
)
EMPTY_ROW = "empty row (no values)"


class TraceFormatError(ValueError):
    """A data file cannot be read; the message names the file, the line and the problem."""


def _to_float(token: str) -> float:
    return float(token.replace(",", "."))


def temperature_from_text(text: str) -> float | None:
    """Temperature in K written in a file name (``ring_300mK``, ``ring_1.5K``, ``0,3K``).

    A minus sign before the number is read as a separator (``ring-5K`` is 5 K).
    """
    m = _TEMP_IN_NAME.search(text)
    if not m:
        return None
    return _to_float(m[1]) * (1e-3 if m[2] == "mK" else 1.0)


def header_temperature(value: str) -> tuple[float | None, str | None]:
    """Read a ``# T = <value>`` header value.

    Returns ``(kelvin, None)``, ``(None, reason)`` when the value is unusable (no unit,
    negative, not a number) or ``(None, None)`` when it is not a temperature at all.
    Decimal commas (``0,3 K``) and scientific notation (``3.00e-01 K``, ``1e-3 K``) are read.
    """
    m = _TEMP_VALUE.match(value + " ")
    if not m:
        return None, f"cannot read {value!r} as a temperature (e.g. 0.3 K, 300 mK)"
    v = _to_float(m["num"])
    if m["unit"] is None:
        return None, f"temperature {value!r} has no unit (write K or mK)"
    if not np.isfinite(v):
        return None, f"cannot read {value!r} as a temperature (not finite)"
    if v <= 0:
        return None, f"temperature {value!r} is not positive (absolute temperatures are > 0 K)"
    return v * (1e-3 if m["unit"] == "mK" else 1.0), None


def _split(line: str, delimiter: str | None) -> list[str]:
    parts = line.split() if delimiter is None else line.split(delimiter)
    if '"' in line or "'" in line:
        return [p.strip().strip("'\"").strip() for p in parts]
    return [p.strip() for p in parts]


_LABEL = re.compile(r"[^\s\(\[]+(?:\s*[\(\[][^\)\]]*[\)\]])?|[\(\[][^\)\]]*[\)\]]")


def _split_header(line: str, delimiter: str | None, ncol: int) -> list[str]:
    """Split a header; with whitespace delimiters keep ``B (T)``/``R [kOhm]`` together."""
    parts = _strip_trailing(_split(line, delimiter), ncol)
    if delimiter is not None or len(parts) == ncol:
        return parts
    wide = [p for p in re.split(r"\s{2,}|\t", line.strip()) if p]
    if len(wide) == ncol:
        return [p.strip("'\"") for p in wide]
    return [m.group(0).strip("'\"") for m in _LABEL.finditer(line.strip())]


def _strip_trailing(tokens: list[str], ncol: int) -> list[str]:
    """Drop empty tokens made by trailing delimiters, keeping at least ``ncol`` tokens."""
    n = len(tokens)
    while n > ncol and tokens[n - 1] == "":
        n -= 1
    return tokens[:n]


def _detect_delimiter(line: str) -> str | None:
    for d in ("\t", ";", ","):
        if d in line:
            return d
    return None


def _read_text(path: Path, max_bytes: int) -> str:
    st = os.stat(path)
    if not stat.S_ISREG(st.st_mode):
        kind = (
            "a FIFO"
            if stat.S_ISFIFO(st.st_mode)
            else "a device"
            if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode)
            else "a socket"
            if stat.S_ISSOCK(st.st_mode)
            else "not a regular file"
        )
        raise TraceFormatError(
            f"{path}: {kind}, not a data file; save the data to a regular text file first"
        )
    if st.st_size > max_bytes:
        raise TraceFormatError(
            f"{path}: {st.st_size / 2**20:.1f} MiB is larger than max_bytes = "
            f"{max_bytes / 2**20:.1f} MiB; split the file or raise max_bytes"
        )
    with open(path, "rb") as fh:
        raw = fh.read(max_bytes + 1)
    if len(raw) > max_bytes:  # grew while we read it
        raise TraceFormatError(f"{path}: larger than max_bytes = {max_bytes} bytes")
    if b"\x00" in raw[:4096]:
        raise TraceFormatError(f"{path}: binary file, expected delimited text")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        return raw.decode("latin-1")


@dataclass
class Table:
    """A parsed table (see :func:`read_table`)."""

    labels: list[str] | None
    data: np.ndarray
    lines: np.ndarray
    meta: dict[str, str]
    meta_lines: dict[str, int]
    row_reason: list[str | None]
    header_line: int | None


def _unit_row(tokens: list[str]) -> list[str] | None:
    """Units of a line such as ``mT, Ohm`` or ``[T] (kOhm)`` under a header, else None."""
    from ringkit.analysis._columns import parse_unit

    units = [t.strip("()[] ") for t in _strip_trailing(tokens, 0)]
    if not any(units) or not all(u == "" or parse_unit(u) is not None for u in units):
        return None
    return units


def _names_columns(labels: list[str]) -> bool:
    """True if some label names a field/R/G/temperature column (``B (T)``, ``R``, ``Rxx``).

    A comment such as ``# no header`` has one word per column by chance; it is not a header.
    """
    from ringkit.analysis._columns import parse_label

    return any(parse_label(x).quantity is not None for x in labels)


def _is_header(tokens: list[str], number: re.Pattern) -> bool:
    tokens = _strip_trailing(tokens, 0)
    return bool(tokens) and all(
        t and t.lower() not in _NAN_TOKENS and t.lower() not in _INF_TOKENS and not number.match(t)
        for t in tokens
    )


def read_table(
    path: Path, delimiter: str | None, comment: str, decimal: str, max_bytes: int = 2**26
) -> Table:
    """Read a delimited table (rules in the module docstring); returns a :class:`Table`.

    ``data`` holds NaN for empty/NaN tokens and inf for ``inf`` tokens; ``row_reason`` gives
    a reason for rows dropped as a whole (empty rows); ``meta`` holds the ``# key = value``
    comment lines (first occurrence) and ``meta_lines`` their line numbers.
    """
    text = _read_text(path, max_bytes)
    comments: list[tuple[int, str]] = []
    meta: dict[str, str] = {}
    meta_lines: dict[str, int] = {}
    rows: list[tuple[int, str]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if comment and s.startswith(comment):
            body = s[len(comment) :].strip()
            comments.append((lineno, body))
            kv = re.match(r"^([A-Za-z_][\w .\-]*?)\s*[=:]\s*(.+)$", body)
            if kv and kv[1].strip() not in meta:
                meta[kv[1].strip()] = kv[2].strip()
                meta_lines[kv[1].strip()] = lineno
            continue
        rows.append((lineno, line))
    if delimiter is None:
        first = next((ln for _, ln in rows if ln.strip()), "")
        delimiter = _detect_delimiter(first)
        if delimiter == "," and decimal == ",":
            delimiter = None
    number = _NUMBER[decimal]
    split_rows = [(n, _split(ln, delimiter)) for n, ln in rows]
    # rows without any value before the first line with values, and at the end, are not rows
    while split_rows and not any(split_rows[0][1]):
        split_rows.pop(0)
    while split_rows and not any(split_rows[-1][1]):
        split_rows.pop()
    if not split_rows:
        raise TraceFormatError(f"{path}: no data lines found")
    labels = None
    header_line = None
    if _is_header(split_rows[0][1], number):
        header_line = split_rows[0][0]
        header_text = rows[[n for n, _ in rows].index(header_line)][1]
        split_rows = split_rows[1:]
        unit_row = _unit_row(split_rows[0][1]) if split_rows else None
        unit_line = split_rows[0][0] if split_rows else None
        if unit_row is not None:  # "B,R" then "mT,Ohm": a units line under the header
            split_rows = split_rows[1:]
        while split_rows and not any(split_rows[-1][1]):
            split_rows.pop()
        if not split_rows:
            raise TraceFormatError(f"{path}: header line but no data lines")
    counts = [len(_strip_trailing(t, 0)) for _, t in split_rows if any(t)]
    ncol = max(set(counts), key=lambda c: (counts.count(c), c))  # most common row length
    if header_line is not None:
        labels = _strip_trailing(_split_header(header_text, delimiter, ncol), 0)
        if unit_row is not None and len(unit_row) > len(labels):
            raise TraceFormatError(
                f"{path}, line {unit_line}: {len(unit_row)} units for {len(labels)} labels"
            )
        if unit_row is not None:
            units = unit_row + [""] * (len(labels) - len(unit_row))
            labels = [f"{x} ({u})" if u else x for x, u in zip(labels, units, strict=True)]
        if len(labels) != ncol:
            raise TraceFormatError(
                f"{path}, line {header_line}: header has {len(labels)} labels but the data "
                f"have {ncol} columns"
            )
    else:
        first_data = split_rows[0][0]
        before = [body for n, body in comments if n < first_data]
        if before:
            cand = _split_header(before[-1], delimiter, ncol)
            if len(cand) == ncol and _is_header(cand, number) and _names_columns(cand):
                labels = cand
    data = np.full((len(split_rows), ncol), np.nan)
    lines = np.empty(len(split_rows), dtype=int)
    row_reason: list[str | None] = [None] * len(split_rows)
    cols: list[list[str]] = [[] for _ in range(ncol)]
    for i, (lineno, tokens) in enumerate(split_rows):
        lines[i] = lineno
        if not any(tokens):
            row_reason[i] = EMPTY_ROW
            tokens = [""] * ncol
        tokens = _strip_trailing(tokens, ncol)
        if len(tokens) != ncol:
            raise TraceFormatError(
                f"{path}, line {lineno}: expected {ncol} columns, found {len(tokens)}"
            )
        for j in range(ncol):
            cols[j].append(tokens[j])
    errors: list[tuple[int, str]] = []
    for j, col in enumerate(cols):
        if _COLUMN[decimal].fullmatch("\n".join(col)):  # fast path: numbers only
            data[:, j] = np.array([_to_float(t) for t in col] if decimal == "," else col, float)
            continue
        for i, t in enumerate(col):
            low = t.lower()
            if low in _NAN_TOKENS:
                continue
            if low in _INF_TOKENS:
                data[i, j] = np.inf
                continue
            if not number.match(t):
                name = f"column {labels[j]!r}" if labels else f"column {j}"
                hint = " (decimal comma? give decimal=',')" if "," in t and decimal == "." else ""
                errors.append(
                    (
                        int(lines[i]),
                        f"{path}, line {lines[i]}: cannot read {t!r} as a number ({name}){hint}",
                    )
                )
                break
            data[i, j] = _to_float(t)
    if errors:
        raise TraceFormatError(min(errors)[1])  # the first bad line of the file
    return Table(labels, data, lines, meta, meta_lines, row_reason, header_line)
