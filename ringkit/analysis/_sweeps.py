"""Sweep splitting, cleaning and R -> G conversion (private helper of traces)."""

from __future__ import annotations

import numpy as np

from ringkit.units import E2H

__all__ = ["Tally", "segments", "clean_segment", "to_conductance"]


class Tally:
    """Counts of dropped and adjusted points with example locations ("file:line")."""

    def __init__(self) -> None:
        self.files: list[str] = []
        self.n_points = 0
        self.dropped: dict[str, int] = {}
        self.adjusted: dict[str, int] = {}
        self.examples: dict[str, list[str]] = {}
        self.caveats: list[str] = []
        self.headers: list[str] = []

    def add(self, kind: str, reason: str, where: list[str]) -> None:
        if not where:
            return
        target = self.dropped if kind == "drop" else self.adjusted
        target[reason] = target.get(reason, 0) + len(where)
        ex = self.examples.setdefault(reason, [])
        ex.extend(where[: max(0, 5 - len(ex))])

    def counts(self) -> dict:
        """Keyword arguments for :class:`ringkit.analysis.LoadReport`."""
        n_dropped = sum(self.dropped.values())
        return dict(
            files=tuple(self.files),
            n_points=self.n_points,
            n_used=self.n_points - n_dropped,
            n_dropped=n_dropped,
            dropped=dict(self.dropped),
            adjusted=dict(self.adjusted),
            examples={k: tuple(v) for k, v in self.examples.items()},
            caveats=tuple(dict.fromkeys(self.caveats)),
            headers=tuple(self.headers),
        )


def segments(b: np.ndarray, fraction: float) -> list[tuple[int, int]]:
    """Split a field sequence at turning points (hysteresis = fraction of the span)."""
    span = float(np.max(b) - np.min(b))
    h = fraction * span
    turns: list[int] = []
    direction, i_hi, i_lo, ext = 0, 0, 0, 0
    for i in range(1, b.size):
        v = b[i]
        if direction == 0:
            if v > b[i_hi]:
                i_hi = i
            if v < b[i_lo]:
                i_lo = i
            if b[i_hi] - b[i_lo] > h:
                direction = 1 if i_hi > i_lo else -1
                ext = i_hi if direction > 0 else i_lo
        elif direction > 0:
            if v > b[ext]:
                ext = i
            elif b[ext] - v > h:
                turns.append(ext)
                direction, ext = -1, i
        else:
            if v < b[ext]:
                ext = i
            elif v - b[ext] > h:
                turns.append(ext)
                direction, ext = 1, i
    bounds = [0, *(t + 1 for t in turns), b.size]
    return [(bounds[k], bounds[k + 1]) for k in range(len(bounds) - 1)]


def clean_segment(
    b: np.ndarray,
    g: np.ndarray,
    where: np.ndarray,
    tally: Tally,
    out_of_order: str,
    duplicates: str,
    direction: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sort a sweep segment by field (or drop backward rows) and merge duplicates.

    Returns field, signal and the locations of the rows that were kept.
    """
    run = np.maximum.accumulate(b) if direction >= 0 else np.minimum.accumulate(b)
    back = (b < run) if direction >= 0 else (b > run)
    if out_of_order == "drop":
        tally.add("drop", "field out of order within a sweep", list(where[back]))
        b, g, where = b[~back], g[~back], where[~back]
    elif direction == 0:
        tally.add("adjust", "row re-sorted by field (sweeps merged)", list(where[back]))
    else:
        tally.add("adjust", "field out of order within a sweep (re-sorted)", list(where[back]))
    order = np.argsort(b, kind="stable")
    b, g, where = b[order], g[order], where[order]
    uniq, start, counts = np.unique(b, return_index=True, return_counts=True)
    if uniq.size == b.size:
        return b, g, where
    dup_rows = np.ones(b.size, dtype=bool)
    dup_rows[start] = False
    if duplicates == "drop":
        tally.add("drop", "duplicate field value", list(where[dup_rows]))
        return b[~dup_rows], g[~dup_rows], where[~dup_rows]
    tally.add("adjust", "duplicate field value (signal averaged)", list(where[dup_rows]))
    # sum of g/n rather than sum(g)/n: no overflow for values near the float maximum
    means = np.add.reduceat(g / np.repeat(counts, counts), start)
    return uniq, means, where


def to_conductance(
    values: np.ndarray,
    quantity: str,
    factor: float,
    series: float,
    terminals: str,
    reference: float | None,
) -> tuple[np.ndarray, list[tuple[np.ndarray, str]]]:
    """Convert to e^2/h; returns (G, [(bad mask, reason), ...]).

    Rows whose converted conductance is not finite (overflow of ``R * factor`` or of
    ``1/R`` for R near the smallest float) are bad too: no non-finite value reaches a trace.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        si = values * factor
        if quantity == "R":
            if terminals == "four" and reference is not None:
                g_s = 1.0 / reference - (si - reference) / reference**2
                bad, reason = np.zeros(si.size, dtype=bool), ""
            elif terminals == "four":
                bad = ~(si > 0)
                g_s = 1.0 / si
                reason = "four-terminal resistance <= 0 (give reference_resistance)"
            else:
                bad = ~(si - series > 0)
                g_s = 1.0 / (si - series)
                reason = "resistance <= series resistance"
        elif series > 0:
            inv = 1.0 / si - series
            bad = ~(inv > 0)
            g_s = 1.0 / inv
            reason = "1/G <= series resistance"
        else:
            bad, reason = np.zeros(si.size, dtype=bool), ""
            g_s = si
        g = g_s / E2H
    out = [(bad, reason)]
    overflow = ~np.isfinite(g) & ~bad & np.isfinite(values)
    out.append((overflow, "value out of range: conductance not finite after unit conversion"))
    return g, out
