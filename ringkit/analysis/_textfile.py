"""Reading delimited text tables with line-accurate errors (private helper of traces).

Comment lines (with ``# key = value`` metadata), a header line or a header in the last
comment line, tab/semicolon/comma/whitespace delimiters, decimal commas, empty and NaN
tokens. Any malformed line raises :class:`TraceFormatError` naming file, line and problem.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError

__all__ = ["TraceFormatError", "read_table", "temperature_from_text"]

_NAN_TOKENS = {"", "nan", "NaN", "NAN", "na", "NA", "n/a", "N/A", "--", "null", "None"}
_TEMP_IN_TEXT = re.compile(r"(?<![A-Za-z0-9.])(\d+(?:\.\d+)?)\s*(mK|K)(?![A-Za-z])")


class TraceFormatError(ValueError):
    """A data file cannot be read; the message names the file, the line and the problem."""


def _float_or_none(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def _split(line: str, delimiter: str | None) -> list[str]:
    parts = line.split() if delimiter is None else line.split(delimiter)
    return [p.strip().strip("'\"").strip() for p in parts]


_LABEL = re.compile(r"[^\s\(\[]+(?:\s*[\(\[][^\)\]]*[\)\]])?|[\(\[][^\)\]]*[\)\]]")


def _split_header(line: str, delimiter: str | None, ncol: int) -> list[str]:
    """Split a header; with whitespace delimiters keep ``B (T)``/``R [kOhm]`` together."""
    parts = _split(line, delimiter)
    if delimiter is not None or len(parts) == ncol:
        return parts
    wide = [p for p in re.split(r"\s{2,}|\t", line.strip()) if p]
    if len(wide) == ncol:
        return [p.strip("'\"") for p in wide]
    return [m.group(0).strip("'\"") for m in _LABEL.finditer(line.strip())]


def _detect_delimiter(line: str) -> str | None:
    for d in ("\t", ";", ","):
        if d in line:
            return d
    return None


def temperature_from_text(text: str) -> float | None:
    m = _TEMP_IN_TEXT.search(text)
    if not m:
        return None
    return float(m[1]) * (1e-3 if m[2] == "mK" else 1.0)


def read_table(path: Path, delimiter: str | None, comment: str, decimal: str):
    """Return (labels or None, data array (rows x cols), line numbers, header metadata)."""
    raw = path.read_bytes()
    if b"\x00" in raw[:4096]:
        raise TraceFormatError(f"{path}: binary file, expected delimited text")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    comments: list[str] = []
    meta: dict[str, str] = {}
    rows: list[tuple[int, str]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if not s:
            continue
        if comment and s.startswith(comment):
            body = s[len(comment) :].strip()
            comments.append(body)
            kv = re.match(r"^([A-Za-z_][\w .\-]*?)\s*[=:]\s*(.+)$", body)
            if kv:
                meta[kv[1].strip()] = kv[2].strip()
            continue
        rows.append((lineno, line))
    if not rows:
        raise TraceFormatError(f"{path}: no data lines found")
    if delimiter is None:
        delimiter = _detect_delimiter(rows[0][1])
        if delimiter == "," and decimal == ",":
            delimiter = None
    if decimal not in (".", ","):
        raise ParameterError("decimal", decimal, "must be '.' or ','")

    def numeric(tokens: list[str]) -> bool:
        return all(
            t in _NAN_TOKENS or _float_or_none(t.replace(decimal, ".")) is not None for t in tokens
        )

    labels = None
    header_line = None
    first = _split(rows[0][1], delimiter)
    if not numeric(first):
        header_line = rows[0]
        rows = rows[1:]
        if not rows:
            raise TraceFormatError(f"{path}: header line but no data lines")
    ncol = len(_split(rows[0][1], delimiter))
    if header_line is not None:
        labels = _split_header(header_line[1], delimiter, ncol)
        if len(labels) != ncol:
            raise TraceFormatError(
                f"{path}, line {header_line[0]}: header has {len(labels)} labels but the data "
                f"have {ncol} columns"
            )
    elif comments:
        cand = _split_header(comments[-1], delimiter, ncol)
        if len(cand) == ncol and not numeric(cand):
            labels = cand
    data = np.empty((len(rows), ncol))
    lines = np.empty(len(rows), dtype=int)
    for i, (lineno, line) in enumerate(rows):
        tokens = _split(line, delimiter)
        if len(tokens) > ncol and not any(tokens[ncol:]):  # trailing delimiters
            tokens = tokens[:ncol]
        if len(tokens) != ncol:
            raise TraceFormatError(
                f"{path}, line {lineno}: expected {ncol} columns, found {len(tokens)}"
            )
        for j, t in enumerate(tokens):
            if t in _NAN_TOKENS:
                data[i, j] = np.nan
                continue
            v = _float_or_none(t.replace(decimal, ".") if decimal == "," else t)
            if v is None:
                col = f"column {labels[j]!r}" if labels else f"column {j}"
                raise TraceFormatError(
                    f"{path}, line {lineno}: cannot read {t!r} as a number ({col})"
                )
            data[i, j] = v
        lines[i] = lineno
    return labels, data, lines, meta
