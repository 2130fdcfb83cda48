"""Reading one measured-data file into trace records (private helper of :mod:`traces`).

Column choice (with duplicate labels disambiguated), unit options checked against the
header, the file temperature (option, ``# T = ...`` header, file name), the temperature
group column, the drop accounting of every row and the split into sweeps. Rules:
docs/measured-data.md. Returns plain dicts; :mod:`traces` wraps them in ``Trace``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis._columns import ColumnInfo, parse_label, parse_unit
from ringkit.analysis._loadopts import GROUP_AUTO
from ringkit.analysis._sweeps import Tally, clean_segment, segments, to_conductance
from ringkit.analysis._textfile import (
    TraceFormatError,
    header_temperature,
    read_table,
    temperature_from_text,
)

__all__ = ["load_file"]

_CAVEAT_4T = (
    "four-terminal resistance: G = 1/R is not the conductance of the ring (R_mn,kl may be "
    "negative and is not even in B; Buttiker, Phys. Rev. Lett. 57, 1761 (1986); "
    "docs/measured-data.md, 'Four-terminal data'); amplitudes are indicative only"
)
_TEMP_KEYS = ("temp", "temperature", "t_mc", "t_sample")


def _pick(spec: str | int, infos: list[ColumnInfo], path: Path, what: str) -> int:
    if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool):
        if not 0 <= spec < len(infos):
            raise TraceFormatError(
                f"{path}: {what} column index {spec} out of range (file has {len(infos)} columns)"
            )
        return int(spec)
    key = str(spec).strip().lower()
    names = ", ".join(repr(c.label) for c in infos)
    for attr in ("label", "name"):
        hits = [i for i, c in enumerate(infos) if getattr(c, attr).lower() == key]
        if len(hits) == 1:
            return hits[0]
        if len(hits) > 1:
            choices = ", ".join(f"{infos[i].label!r} (index {i})" for i in hits)
            raise ParameterError(
                what, spec, f"matches {len(hits)} columns of {path.name}: give one of {choices}"
            )
    raise TraceFormatError(f"{path}: no {what} column named {spec!r} (columns: {names})")


def _clusters(values: np.ndarray, rtol: float) -> np.ndarray:
    """Cluster index of each value: sorted values within ``rtol`` of a cluster's first one."""
    uniq = np.unique(values)
    cluster = np.zeros(uniq.size, dtype=int)
    start = uniq[0] if uniq.size else 0.0
    for k in range(1, uniq.size):
        new = abs(uniq[k] - start) > rtol * max(abs(start), 1e-300)
        cluster[k] = cluster[k - 1] + int(new)
        if new:
            start = uniq[k]
    return cluster[np.searchsorted(uniq, values)]


def _column_infos(labels: list[str] | None, ncol: int) -> list[ColumnInfo]:
    """Parsed labels; repeated labels get ``#<index>`` appended (e.g. ``R (Ohm)#2``)."""
    if labels is None:
        return [ColumnInfo(f"column {j}", f"column {j}", None, None, None) for j in range(ncol)]
    infos = [parse_label(x) for x in labels]
    seen = [c.label for c in infos]
    return [
        ColumnInfo(f"{c.label}#{j}", c.name, c.unit, c.quantity, c.factor)
        if seen.count(c.label) > 1
        else c
        for j, c in enumerate(infos)
    ]


def _file_temperature(
    path: Path, table, option: float | None
) -> tuple[float | None, str, str | None]:
    """Temperature in K of a whole file: option, else ``# T = ...`` header, else file name.

    Returns (kelvin or None, source, caveat or None). A negative header temperature refuses
    the file; a value without a unit is ignored with a caveat.
    """
    if option is not None:
        return float(option), "option", None
    caveat = None
    for key, value in table.meta.items():
        if key in ("T", "T_mc", "T_sample") or key.lower() in _TEMP_KEYS:
            kelvin, problem = header_temperature(value)
            where = f"{path}, line {table.meta_lines[key]}"
            if problem is not None and "not positive" in problem:
                raise TraceFormatError(
                    f"{where}: header {key} = {value!r}: {problem}; "
                    "fix the header or give the temperature option (--temperature)"
                )
            if problem is not None:
                caveat = f"{where}: header {key} = {value!r} not used as temperature: {problem}"
                continue
            return kelvin, f"header line {table.meta_lines[key]}", None
    t = temperature_from_text(path.stem)
    return t, ("file name" if t is not None else ""), caveat


def _unit_conflict(info: ColumnInfo, option: str | None, what: str) -> str | None:
    """Message when a unit option contradicts the unit written in the column label."""
    if option is None or info.unit is None or info.factor is None:
        return None
    quantity, factor = parse_unit(option)
    if quantity == info.quantity and np.isclose(factor, info.factor, rtol=1e-12, atol=0):
        return None
    if quantity == info.quantity:
        return (
            f"contradicts the header label {info.label!r} (unit {info.unit!r}): values would "
            f"be scaled by {factor / info.factor:.6g} relative to the header; drop the "
            f"{what} unit option (the header unit is used) or fix the header"
        )
    return (
        f"is a {quantity} unit but the header label {info.label!r} is a {info.quantity} "
        f"column: drop the {what} unit option or pick another column"
    )


def load_file(path: Path, tally: Tally, o: dict) -> list[dict]:
    """Trace records (keyword arguments of ``Trace``) of one file; counts go to ``tally``."""
    table = read_table(path, o["delimiter"], o["comment"], o["decimal"], o["max_bytes"])
    data = table.data
    ncol = data.shape[1]
    infos = _column_infos(table.labels, ncol)
    tally.files.append(str(path))
    where = (
        f"header line {table.header_line}"
        if table.header_line is not None
        else ("comment line before the data" if table.labels else "no header: units from options")
    )
    tally.headers.append(f"{path.name}: {', '.join(repr(c.label) for c in infos)} ({where})")
    conflicts: list[tuple[str, str, str]] = []
    # field column
    if o["field"] is not None:
        jf = _pick(o["field"], infos, path, "field")
    else:
        cands = [j for j, c in enumerate(infos) if c.quantity == "field"]
        if len(cands) > 1:
            choices = ", ".join(repr(infos[j].label) for j in cands)
            raise ParameterError(
                "field", None, f"{path.name} has field columns {choices}: pick one"
            )
        jf = cands[0] if cands else 0
    msg = _unit_conflict(infos[jf], o["field_unit"], "field")
    if msg:
        conflicts.append(("field_unit", o["field_unit"], msg))
    f_factor = parse_unit(o["field_unit"])[1] if o["field_unit"] else infos[jf].factor
    if f_factor is None or (o["field_unit"] is None and infos[jf].quantity != "field"):
        raise TraceFormatError(
            f"{path}: unit of field column {infos[jf].label!r} unknown; give field_unit "
            "(T, mT, G, ...) or a header like 'B (T)'"
        )
    auto_caveat = None
    if o["group_by"] == GROUP_AUTO:
        temps = [j for j, c in enumerate(infos) if c.quantity == "temperature" and j != jf]
        jg = temps[0] if len(temps) == 1 else None
        if jg is not None:
            tv = data[:, jg][np.isfinite(data[:, jg])]
            counts = np.bincount(_clusters(tv, o["group_rtol"])) if tv.size else np.zeros(0)
            if counts.size > 1 and counts.min() < o["min_points"]:  # a drifting log, not steps
                auto_caveat = (
                    f"{path.name}: temperature column {infos[jg].label!r} drifts "
                    f"({np.min(tv):g} to {np.max(tv):g}) rather than stepping: not grouped; "
                    "give group_by= to split it anyway"
                )
                jg = None
    elif o["group_by"] is not None:
        jg = _pick(o["group_by"], infos, path, "group_by")
    else:
        jg = None
    # signal columns
    if o["signal"] is None:
        js = [j for j, c in enumerate(infos) if c.quantity in ("R", "G") and j not in (jf, jg)]
        if not js:
            rest = [j for j in range(ncol) if j not in (jf, jg)]
            if len(rest) != 1:
                raise TraceFormatError(
                    f"{path}: cannot tell which column is the signal; give signal= "
                    f"(columns: {', '.join(repr(c.label) for c in infos)})"
                )
            js = rest
    else:
        specs = o["signal"] if isinstance(o["signal"], (list, tuple)) else [o["signal"]]
        js = [_pick(sp, infos, path, "signal") for sp in specs]
    for name, col in (("group_by", jg), *(("signal", j) for j in js)):
        if col is not None and (col == jf or (name == "signal" and col == jg)):
            raise ParameterError(
                name,
                infos[col].label,
                f"is also the {'field' if col == jf else 'group_by'} column of {path.name}",
            )
    file_temp, temp_source, temp_caveat = _file_temperature(path, table, o["temperature"])
    for caveat in (temp_caveat, auto_caveat):
        if caveat:
            tally.caveats.append(caveat)
    out: list[dict] = []
    for j in js:
        info = infos[j]
        msg = _unit_conflict(info, o["signal_unit"], "signal")
        if msg:
            conflicts.append(("signal_unit", o["signal_unit"], msg))
        if o["signal_unit"]:
            quantity, s_factor = parse_unit(o["signal_unit"])
        else:
            quantity, s_factor = info.quantity, info.factor
        if quantity not in ("R", "G") or s_factor is None:
            raise TraceFormatError(
                f"{path}: unit of signal column {info.label!r} unknown; give signal_unit "
                "(Ohm, kOhm, S, e^2/h, ...) or a header like 'R (Ohm)'"
            )
        if conflicts and not o["override_units"]:
            name, value, msg = conflicts[0]
            raise ParameterError(
                name, value, f"{msg} ({path.name}; override_units=True or --force to keep it)"
            )
        ctx = dict(
            path=path,
            table=table,
            jf=jf,
            j=j,
            jg=jg,
            infos=infos,
            quantity=quantity,
            f_factor=f_factor,
            s_factor=s_factor,
            file_temp=file_temp,
            temp_source=temp_source,
            conflicts=conflicts,
        )
        out.extend(_column_traces(ctx, tally, o))
    return out


def _column_traces(ctx: dict, tally: Tally, o: dict) -> list[dict]:
    path, table, jf, j, jg = ctx["path"], ctx["table"], ctx["jf"], ctx["j"], ctx["jg"]
    infos, quantity, file_temp = ctx["infos"], ctx["quantity"], ctx["file_temp"]
    data, header = table.data, table.meta
    where_all = np.array([f"{path.name}:{n}" for n in table.lines])
    tally.n_points += data.shape[0]
    empty = np.array([r is not None for r in table.row_reason], dtype=bool)
    tally.add("drop", "empty row (no values)", list(where_all[empty]))
    with np.errstate(over="ignore", invalid="ignore"):
        b_all = data[:, jf] * ctx["f_factor"]
    v_all = data[:, j]
    nan_b = ~np.isfinite(b_all) & ~empty
    nan_v = ~np.isfinite(v_all) & ~nan_b & ~empty
    tally.add("drop", "NaN, empty or infinite field value", list(where_all[nan_b]))
    tally.add("drop", "NaN, empty or infinite signal value", list(where_all[nan_v]))
    ok = ~(nan_b | nan_v | empty)
    ginfo = infos[jg] if jg is not None else None
    if jg is not None:
        gv = data[:, jg]
        nan_g = ~np.isfinite(gv) & ok
        tally.add("drop", "NaN or empty group value", list(where_all[nan_g]))
        ok &= ~nan_g
        if ginfo.quantity == "temperature":
            neg = ok & (gv < 0)
            tally.add("drop", "negative temperature in the group column", list(where_all[neg]))
            ok &= ~neg
    g_all, bad_list = to_conductance(
        v_all, quantity, ctx["s_factor"], o["series"], o["terminals"], o["reference"]
    )
    for bad, reason in bad_list:
        bad = bad & ok
        tally.add("drop", reason, list(where_all[bad]))
        ok &= ~bad
    caveats = []
    if quantity == "R" and o["terminals"] == "four":
        caveats.append(_CAVEAT_4T)
        if o["reference"] is not None:
            caveats.append(
                f"four-terminal R linearised with reference_resistance = {o['reference']:g} "
                "Ohm: G = 1/R_ref - (R - R_ref)/R_ref^2"
            )
    elif o["terminals"] == "four":
        caveats.append("four-terminal conductance: not the conductance of the ring alone")
    if o["group_by"] == GROUP_AUTO and jg is not None:
        caveats.append(
            f"{path.name}: traces grouped by the temperature column {ginfo.label!r} "
            "(group_by='auto'; give group_by=None to keep the rows together)"
        )
    caveats.extend(
        f"{path.name}: {name} = {value!r} {msg} (kept: override_units=True)"
        for name, value, msg in ctx["conflicts"]
    )
    tally.caveats.extend(caveats)
    groups: list[tuple[float | None, np.ndarray]] = []
    if jg is not None:
        gvals = data[:, jg]
        row_cluster = np.full(gvals.size, -1)
        row_cluster[ok] = _clusters(gvals[ok], o["group_rtol"])
        for c in range(int(row_cluster.max()) + 1):
            sel = row_cluster == c
            groups.append((float(np.median(gvals[sel])), sel))
    else:
        groups.append((None, ok))
    out: list[dict] = []
    for gval, sel in groups:
        idx = np.nonzero(sel)[0]
        b, g, where = b_all[idx], g_all[idx], where_all[idx]
        temp, temp_source = file_temp, ctx["temp_source"]
        gl = ""
        if gval is not None:
            gl = f" {ginfo.name}={gval:g}" + (f" {ginfo.unit}" if ginfo.unit else "")
            if ginfo.quantity == "temperature" and ginfo.factor is not None:
                temp, temp_source = gval * ginfo.factor, f"column {ginfo.label!r}"
        elif temp is not None:
            gl = f" T={temp:g} K"
        if b.size == 0:
            continue
        if np.ptp(b) == 0:
            tally.add("drop", "field does not vary in this trace", list(where))
            continue
        segs = segments(b, o["reversal_fraction"])
        if not o["split_sweeps"]:
            if len(segs) > 1:
                msg = (
                    f"{path.name}: {len(segs)} sweeps merged into one trace (hysteresis "
                    "and drift between them are averaged)"
                )
                caveats.append(msg)
                tally.caveats.append(msg)
            segs = [(0, b.size)]
        for lo, hi in segs:
            sb, sg, sw = b[lo:hi], g[lo:hi], where[lo:hi]
            direction = 1 if sb[-1] >= sb[0] else -1
            if not o["split_sweeps"]:
                direction = 0
            if sb.size < o["min_points"]:
                tally.add("drop", f"sweep segment shorter than {o['min_points']} points", list(sw))
                continue
            cb, cg, kept = clean_segment(
                sb, sg, sw, tally, o["out_of_order"], o["duplicates"], direction
            )
            if cb.size < o["min_points"]:
                tally.add(
                    "drop", f"sweep segment shorter than {o['min_points']} points", list(kept)
                )
                continue
            dname = {1: "up", -1: "down", 0: "merged"}[direction]
            label = f"{path.stem}:{infos[j].label}{gl}" + (f" {dname}" if direction else "")
            meta = {
                "source": str(path),
                "column": infos[j].label,
                "field_column": infos[jf].label,
                "quantity": quantity,
                "units": {"field": "T", "conductance": "e^2/h"},
                "terminals": o["terminals"],
                "series_resistance": o["series"],
                "reference_resistance": o["reference"],
                "direction": dname,
                "temperature": temp,
                "temperature_source": temp_source,
                "group": gval,
                "header_line": table.header_line,
                "lines": (str(sw[0]), str(sw[-1])),
                "caveats": tuple(caveats),
                "header": dict(header),
            }
            out.append({"field": cb, "conductance": cg, "label": label, "metadata": meta})
    return out
