"""Seeded fuzz of the measured-data loader: 0 silent drops and 0 wrong values.

A generator (this file) writes a few hundred INVENTED trace files with random formats
(delimiters, decimal commas, header line / comment header / none, CRLF, BOM, quotes,
trailing delimiters, extra columns, header temperatures) and random defects (blank and
delimiter-only rows, comment lines inside and after the data, NaN/empty/inf tokens,
overflowing values, R <= 0, malformed tokens, malformed first rows, negative temperatures).
It records what every data row must become. For every file, either

* the loader refuses it (TraceFormatError) and the generator injected a refusable defect, or
* every kept row equals the generator's value exactly (the same IEEE operations as the
  documented conversion: value x factor, then 1/R or G/(e^2/h)), every other row is counted
  as dropped, and every example line of the report is one of those rows.

Rules: docs/measured-data.md ("Loader rules", "Row accounting").
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from ringkit.analysis import TraceFormatError, load_traces

E2H = constants.e**2 / constants.h
N_FILES = 300
FIELD_UNITS = {"T": 1.0, "mT": 1e-3, "G": 1e-4}
SIGNAL_UNITS = {"Ohm": ("R", 1.0), "kOhm": ("R", 1e3), "S": ("G", 1.0), "e^2/h": ("G", E2H)}
TEMPS = [("0,3 K", 0.3), ("3.00e-01 K", 0.3), ("1.50e+00 K", 1.5), ("1e-3 K", 0.001)]
TEMPS += [("250 mK", 0.25), ("-5 K", None)]
MALFORMED = ["12O4", "1_000", "1.2.3", "\u0663", "0x10", "1e", "--5"]


def _case(rng: np.random.Generator, idx: int):
    """Text of one file, loader options and the expectation."""
    decimal = "," if rng.random() < 0.25 else "."
    delims = [";", "\t", " "] if decimal == "," else [",", ";", "\t", " "]
    d = delims[rng.integers(len(delims))]
    sep = "  " if d == " " else d
    fu = list(FIELD_UNITS)[rng.integers(3)]
    su = list(SIGNAL_UNITS)[rng.integers(4)]
    quantity, sfac = SIGNAL_UNITS[su]
    extra = rng.random() < 0.3
    header_mode = ["line", "comment", "none"][rng.integers(3)]
    refuse = False
    lines: list[str] = []
    if rng.random() < 0.5:
        text, kelvin = TEMPS[rng.integers(len(TEMPS))]
        lines.append(f"# T = {text}")
        refuse |= kelvin is None
    else:
        kelvin = None
    labels = [f"B ({fu})", f"{'R' if quantity == 'R' else 'G'} ({su})"] + (
        ["I (A)"] if extra else []
    )
    if header_mode == "line":
        lines.append(sep.join(labels) + (d if d != " " and rng.random() < 0.2 else ""))
    elif header_mode == "comment":
        lines.append("# " + sep.join(labels))
    trail = d != " " and rng.random() < 0.25
    n = int(rng.integers(12, 40))
    k = np.cumsum(rng.integers(1, 50, n)) - int(rng.integers(0, 500))
    expect_good: list[tuple[float, float]] = []
    drop_lines: list[int] = []

    def num(x: float) -> str:
        t = repr(float(x))
        return t.replace(".", ",") if decimal == "," else t

    def row(tokens: list[str]) -> str:
        quoted = [f'"{t}"' if rng.random() < 0.05 and t else t for t in tokens]
        return sep.join(quoted) + (d if trail else "")

    started = False
    scale = 10.0 ** -int(rng.integers(0, 4))
    for i in range(n):
        b_tok = num(k[i] * scale)
        v = float(rng.uniform(0.5, 20.0)) * (1e3 if quantity == "R" and su == "Ohm" else 1.0)
        v_tok = num(v if quantity == "R" else v * (1e-5 if su == "S" else 1.0))
        tokens = [b_tok, v_tok] + (["1e-8"] if extra else [])
        defect = rng.random()
        good = True
        if started and defect < 0.04:  # blank or delimiter-only row before this row
            lines.append("" if rng.random() < 0.5 or d == " " else d * len(tokens))
            drop_lines.append(len(lines))
        if started and 0.04 <= defect < 0.07:
            lines.append("# a comment between rows")
        if 0.07 <= defect < 0.10:
            pick = ["nan", "NA", "inf", "-inf"][rng.integers(4)]
            tokens[1] = pick if d == " " or rng.random() < 0.5 else ""
            good = False
        elif 0.10 <= defect < 0.12:
            tokens[0] = "nan" if d == " " else ["", "nan", "N/A"][rng.integers(3)]
            good = False
        elif 0.12 <= defect < 0.14:  # overflow on conversion, or R <= 0
            tokens[1] = {"S": "1e305", "e^2/h": "1e309", "Ohm": "1e-309", "kOhm": "-1"}[su]
            good = False
        elif 0.14 <= defect < 0.15:
            tokens[int(rng.integers(2))] = MALFORMED[rng.integers(len(MALFORMED))]
            refuse = True
        elif i == 0 and header_mode == "none" and defect < 0.2:  # malformed first row
            tokens[1] = "abc"
            refuse = True
        lines.append(row(tokens))
        started = True
        if good:
            b = float(b_tok.replace(",", ".")) * FIELD_UNITS[fu]
            vv = float(v_tok.replace(",", ".")) * sfac
            g = (1.0 / vv) / E2H if quantity == "R" else vv / E2H
            expect_good.append((b, g))
        else:
            drop_lines.append(len(lines))
    if rng.random() < 0.3:
        lines.append("# comment after the data")
    if rng.random() < 0.2:
        lines.append("")
    nl = "\r\n" if rng.random() < 0.2 else "\n"
    text = nl.join(lines) + nl
    if rng.random() < 0.1:
        text = "\ufeff" + text
    opts = {"decimal": decimal, "min_points": 2}
    if header_mode == "none":
        opts.update(field_unit=fu, signal_unit=su)
        if extra:
            opts["signal"] = 1
    if len(expect_good) < 2:
        refuse = True
    return (
        text,
        opts,
        dict(
            refuse=refuse,
            good=expect_good,
            drop_lines=drop_lines,
            n_rows=len(expect_good) + len(drop_lines),
            temperature=kelvin,
        ),
    )


def test_fuzz_no_silent_drop_no_wrong_value(tmp_path):
    rng = np.random.default_rng(20261204)
    tally = {"refused": 0, "read": 0, "rows_dropped": 0}
    for idx in range(N_FILES):
        text, opts, exp = _case(rng, idx)
        p = tmp_path / f"f{idx}.txt"
        p.write_bytes(text.encode("utf-8"))
        try:
            res = load_traces(p, **opts)
        except TraceFormatError as err:
            assert exp["refuse"], f"file {idx} refused without an injected defect: {err}\n{text}"
            tally["refused"] += 1
            continue
        assert not exp["refuse"], f"file {idx} read although it holds a refusable defect\n{text}"
        tally["read"] += 1
        rep = res.report
        (tr,) = res.traces
        b = np.array([x for x, _ in exp["good"]])
        g = np.array([y for _, y in exp["good"]])
        assert np.array_equal(tr.field, b), f"file {idx}: field values differ\n{text}"
        assert np.array_equal(tr.conductance, g), f"file {idx}: conductances differ\n{text}"
        assert rep.n_points == exp["n_rows"], f"file {idx}: {rep.summary()}\n{text}"
        assert rep.n_dropped == len(exp["drop_lines"]), f"file {idx}: {rep.summary()}\n{text}"
        assert rep.n_used == len(exp["good"])
        shown = {int(e.rsplit(":", 1)[1]) for ex in rep.examples.values() for e in ex}
        assert shown <= set(exp["drop_lines"]), f"file {idx}: {rep.summary()}"
        assert tr.temperature == exp["temperature"]
        tally["rows_dropped"] += rep.n_dropped
    # the generator exercised both outcomes
    print(tally)
    assert tally["refused"] > 20 and tally["read"] > 150 and tally["rows_dropped"] > 100, tally


@pytest.mark.parametrize("bad", MALFORMED)
def test_malformed_tokens_refused_not_misread(tmp_path, bad):
    p = tmp_path / "m.csv"
    p.write_text("B (T),R (Ohm)\n0.1,1000\n0.2," + bad + "\n0.3,1000\n")
    with pytest.raises(TraceFormatError, match="line 3"):
        load_traces(p, min_points=2)
