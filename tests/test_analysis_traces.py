"""Reading measured traces: units, R -> G, sweeps, defects reported, malformed files.

The files in tests/data are INVENTED (tests/data/make_analysis_data.py, README.md there);
expected conductances are recomputed here from the generating parameters with
scipy.constants. Unit factors are SI definitions (1 G = 1e-4 T exactly).
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis import TraceFormatError, extract_oscillations, load_traces
from ringkit.analysis._columns import parse_label

DATA = Path(__file__).parent / "data"
E2H = constants.e**2 / constants.h
PHI0 = constants.h / constants.e


def _make_module():
    spec = importlib.util.spec_from_file_location(
        "make_analysis_data", DATA / "make_analysis_data.py"
    )
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


MAKE = _make_module()
TRUTH = MAKE.TRUTH


def test_committed_files_are_reproduced_by_the_script(tmp_path):
    for path in MAKE.write_all(tmp_path):
        assert path.read_bytes() == (DATA / path.name).read_bytes(), path.name


@pytest.mark.parametrize(
    ("label", "quantity", "factor"),
    [
        ("B (T)", "field", 1.0),
        ("B [mT]", "field", 1e-3),
        ("Field (G)", "field", 1e-4),  # gauss, 1 G = 1e-4 T (SI definition)
        ("B / T", "field", 1.0),
        ("R (Ohm)", "R", 1.0),
        ("R [kOhm]", "R", 1e3),
        ("R [MOhm]", "R", 1e6),
        ("R [mOhm]", "R", 1e-3),
        ("R (\u03a9)", "R", 1.0),
        ("G (S)", "G", 1.0),
        ("G [uS]", "G", 1e-6),
        ("G (e^2/h)", "G", constants.e**2 / constants.h),
        ("G [2e^2/h]", "G", constants.physical_constants["conductance quantum"][0]),
        ("T (K)", "temperature", 1.0),
        ("T [mK]", "temperature", 1e-3),
    ],
)
def test_units_from_headers(label, quantity, factor):
    info = parse_label(label)
    assert info.quantity == quantity
    assert info.factor == pytest.approx(factor, rel=1e-12)


def test_unit_less_and_unknown_labels():
    assert parse_label("Rxx").quantity == "R" and parse_label("Rxx").factor is None
    assert parse_label("Gate (V)").quantity is None  # not mistaken for a conductance
    assert parse_label("field").quantity == "field"


def _truth_updown(b):
    t = TRUTH["ring_updown.tsv"]
    f1 = np.pi * t["r_eff"] ** 2 / PHI0
    return (
        t["g_mean"]
        - 8.0 * b**2
        + 0.05 * b
        + t["amp_he"] * np.cos(2 * np.pi * f1 * b + t["phase_he"])
        + t["amp_h2e"] * np.cos(4 * np.pi * f1 * b)
    )


def test_updown_file_roundtrip_and_report():
    t = TRUTH["ring_updown.tsv"]
    res = load_traces(DATA / "ring_updown.tsv", series_resistance=t["series_resistance"])
    up, down = res.traces
    assert (up.direction, down.direction) == ("up", "down")
    for tr in res:
        assert np.all(np.diff(tr.field) > 0)
        assert tr.field[0] == pytest.approx(t["field_range"][0], abs=1e-9)
        assert tr.field[-1] == pytest.approx(t["field_range"][1], abs=1e-9)
        # noise 2 Ohm on R: dG = dR G^2 e^2/h in units of e^2/h (small signal, closed form
        # dG = -dR/R^2; docs/measured-data.md "Units and conversion factors")
        sigma = t["noise_ohm"] * (_truth_updown(tr.field) ** 2) * E2H
        assert np.max(np.abs(tr.conductance - _truth_updown(tr.field)) / sigma) < 5
        assert tr.temperature == pytest.approx(t["temperature"])  # from "# T = 0.3 K"
        assert tr.metadata["quantity"] == "R"
        assert tr.metadata["series_resistance"] == t["series_resistance"]
    rep = res.report
    assert rep.n_points == 2 * t["n_per_sweep"] + t["duplicates"]
    assert rep.n_used + rep.n_dropped == rep.n_points
    assert rep.dropped == {"NaN, empty or infinite signal value": t["nan_lines"]}
    assert rep.examples["NaN, empty or infinite signal value"] == (
        "ring_updown.tsv:106",
        "ring_updown.tsv:1606",
        "ring_updown.tsv:2506",
    )
    assert rep.adjusted["field out of order within a sweep (re-sorted)"] == t["out_of_order"]
    assert rep.adjusted["duplicate field value (signal averaged)"] == t["duplicates"]
    assert "dropped 3" in rep.summary()
    assert len(up) + len(down) == rep.n_used - t["duplicates"]


def test_resistance_to_conductance_with_series_resistance(tmp_path):
    r = np.array([2000.0, 3000.0, 5000.0, 900.0, 1200.0, 8000.0, 7000.0, 6000.0, 4000.0, 2500.0])
    b = np.arange(r.size) * 0.01
    p = tmp_path / "r.csv"
    p.write_text("B (T),R (Ohm)\n" + "".join(f"{x},{y}\n" for x, y in zip(b, r, strict=True)))
    res = load_traces(p, series_resistance=1000.0, min_points=4)
    (tr,) = res.traces
    keep = r > 1000.0
    assert tr.conductance == pytest.approx(1 / ((r[keep] - 1000.0) * E2H), rel=1e-12)
    assert res.report.dropped == {"resistance <= series resistance": 1}
    assert res.report.examples["resistance <= series resistance"] == ("r.csv:5",)
    # conductance columns: G in siemens and e^2/h; series resistance on a G column
    p2 = tmp_path / "g.csv"
    g_s = 1 / r
    p2.write_text(
        "B (T)\tG (S)\tG2 (e^2/h)\n"
        + "".join(f"{x}\t{float(y)!r}\t{float(y / E2H)!r}\n" for x, y in zip(b, g_s, strict=True))
    )
    t1, t2 = load_traces(p2, min_points=4).traces
    assert t1.conductance == pytest.approx(g_s / E2H, rel=1e-12)
    assert t2.conductance == pytest.approx(t1.conductance, rel=1e-12)
    t3 = load_traces(p2, signal="G (S)", series_resistance=500.0, min_points=4).traces[0]
    assert t3.conductance == pytest.approx(1 / ((r - 500.0) * E2H), rel=1e-12)


def test_four_terminal_flag_and_linearised_conversion(tmp_path):
    b = np.linspace(0, 0.1, 50)
    r4 = 1000.0 + np.cos(2 * np.pi * 100 * b)  # 1 Ohm oscillation on 1 kOhm
    r4[10] = -3.0  # four-terminal R can be negative
    p = tmp_path / "fourt.txt"
    p.write_text("B (T) R (Ohm)\n" + "".join(f"{x} {y}\n" for x, y in zip(b, r4, strict=True)))
    res = load_traces(p, terminals="four")
    assert res.report.dropped == {"four-terminal resistance <= 0 (give reference_resistance)": 1}
    (tr,) = res.traces
    assert any("four-terminal" in c for c in tr.metadata["caveats"])
    assert any("four-terminal" in c for c in res.report.caveats)
    lin = load_traces(p, terminals="four", reference_resistance=1000.0).traces[0]
    # linearised four-terminal (docs/measured-data.md "Four-terminal data"):
    # R = 1 kOhm, dR = 1 Ohm -> dG = -dR/R^2 = -0.0258 e^2/h
    g_ref = 1 / (1000.0 * E2H)
    dg = lin.conductance - g_ref
    assert dg[0] == pytest.approx(-1.0 * constants.h / constants.e**2 / 1000.0**2, rel=1e-9)
    assert dg[0] == pytest.approx(-0.0258, rel=2e-3)
    with pytest.raises(ParameterError, match="series_resistance"):
        load_traces(p, terminals="four", series_resistance=10.0)


def test_headerless_file_needs_units():
    with pytest.raises(TraceFormatError, match="field_unit"):
        load_traces(DATA / "headerless.dat")
    with pytest.raises(TraceFormatError, match="signal_unit"):
        load_traces(DATA / "headerless.dat", field_unit="mT")
    loaded = load_traces(DATA / "headerless.dat", field_unit="mT", signal_unit="Ohm")
    (tr,) = loaded.traces
    assert tr.metadata["column"] == "column 1"  # the comment "# no header" is not a header
    assert loaded.report.headers == (
        "headerless.dat: 'column 0', 'column 1' (no header: units from options)",
    )
    assert tr.field == pytest.approx(np.linspace(-0.02, 0.02, 401), abs=1e-12)
    res = extract_oscillations(tr.field, tr.conductance)
    assert res.period_he == pytest.approx(4e-3, rel=0.01)  # generated with a 4 mT period
    assert res.amplitude_he_rms == pytest.approx(0.1 / np.sqrt(2), rel=0.02)


def test_malformed_file_one_line_error_with_file_and_line():
    with pytest.raises(TraceFormatError) as info:
        load_traces(DATA / "malformed.csv")
    msg = str(info.value)
    assert "malformed.csv" in msg and "line 6" in msg and "'12O4'" in msg
    assert "\n" not in msg


def test_first_bad_line_is_named_whatever_its_column(tmp_path):
    p = tmp_path / "two.csv"
    p.write_text("B (T),R (Ohm)\n0.0,1000\n0.1,x1\ny2,1002\n0.3,1003\n")
    with pytest.raises(TraceFormatError, match=r"two.csv, line 3: cannot read 'x1'"):
        load_traces(p, min_points=2)


def test_malformed_variants(tmp_path):
    p = tmp_path / "cols.csv"
    p.write_text("B (T),R (Ohm)\n0,1\n0.1,2\n0.2,3,4\n")
    with pytest.raises(TraceFormatError, match=r"cols.csv, line 4: expected 2 columns, found 3"):
        load_traces(p)
    p = tmp_path / "empty.txt"
    p.write_text("# only comments\n\n")
    with pytest.raises(TraceFormatError, match="no data lines"):
        load_traces(p)
    p = tmp_path / "bin.dat"
    p.write_bytes(b"\x00\x01\x02binary")
    with pytest.raises(TraceFormatError, match="binary"):
        load_traces(p)
    p = tmp_path / "v.csv"
    p.write_text("B (T),U (V)\n" + "".join(f"{i},{i}\n" for i in range(10)))
    with pytest.raises(TraceFormatError, match="signal"):
        load_traces(p)
    with pytest.raises(TraceFormatError, match="no signal column named 'X'"):
        load_traces(p, signal="X")
    with pytest.raises(ParameterError, match="signal_unit"):
        load_traces(p, signal_unit="volt")
    with pytest.raises(FileNotFoundError):
        load_traces(tmp_path / "missing.csv")


def _write_variants(tmp_path, b, r):
    rows = list(zip(b, r, strict=True))
    files = {
        "comma.csv": "B [mT],R [Ohm]\n" + "".join(f"{x},{y}\n" for x, y in rows),
        "tab.tsv": "# B [mT]\tR [Ohm]\n" + "".join(f"{x}\t{y}\n" for x, y in rows),
        "space.dat": "# comment\nB [mT]   R [Ohm]\n" + "".join(f"  {x}   {y}\n" for x, y in rows),
        "semi.txt": "B [mT];R [Ohm]\n"
        + "".join(f"{str(x).replace('.', ',')};{str(y).replace('.', ',')}\n" for x, y in rows),
    }
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    return list(files)


def test_delimiters_comment_header_and_decimal_comma(tmp_path):
    b = np.round(np.linspace(-5, 5, 41), 6)
    r = np.round(10000 + 10 * np.cos(b), 4)
    names = _write_variants(tmp_path, b, r)
    ref = None
    for name in names:
        decimal = "," if name == "semi.txt" else "."
        (tr,) = load_traces(tmp_path / name, decimal=decimal).traces
        assert tr.field == pytest.approx(b * 1e-3, rel=1e-12)
        if ref is None:
            ref = tr.conductance
        assert tr.conductance == pytest.approx(ref, rel=1e-12)
    assert ref == pytest.approx(1 / (r * E2H), rel=1e-12)


def test_group_by_temperature_column():
    t = TRUTH["ring_temperatures.csv"]
    res = load_traces(DATA / "ring_temperatures.csv", group_by="T")
    assert [tr.temperature for tr in res] == pytest.approx(list(t["temperatures"]))
    for tr in res:
        assert len(tr) == t["n_per_trace"]
        assert tr.field[0] == pytest.approx(t["field_range"][0], abs=1e-9)  # from gauss
        assert tr.field[-1] == pytest.approx(t["field_range"][1], abs=1e-9)
        assert "T=" in tr.label
    assert res.report.n_dropped == 0


def test_folder_files_and_temperature_from_names(tmp_path):
    b = np.linspace(0, 0.01, 30)
    for name, temp in (("ring_300mK.csv", 0.3), ("ring_1.5K.csv", 1.5)):
        g = 2 + 0.1 * np.cos(2 * np.pi * 500 * b) + temp
        (tmp_path / name).write_text(
            "B (T),G (e^2/h)\n" + "".join(f"{x},{y}\n" for x, y in zip(b, g, strict=True))
        )
    (tmp_path / "notes.md").write_text("not data")
    res = load_traces(tmp_path)
    assert len(res.report.files) == 2
    temps = sorted(tr.temperature for tr in res)
    assert temps == pytest.approx([0.3, 1.5])
    for tr in res:
        assert tr.conductance.mean() == pytest.approx(2 + tr.temperature, abs=0.01)
    with pytest.raises(TraceFormatError, match="no data files"):
        load_traces(tmp_path, pattern="*.xyz")


def test_out_of_order_duplicates_modes_and_short_segments(tmp_path):
    b = [0.0, 0.1, 0.2, 0.18, 0.3, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0, 0.5, 0.4]
    g = [1.0, 2.0, 3.0, 4.0, 5.0, 7.0, 8.0, 9.0, 10.0, 11.0, 12.0, 13.0, 14.0, 15.0, 16.0]
    p = tmp_path / "d.csv"
    p.write_text("B (T),G (S)\n" + "".join(f"{x},{y}\n" for x, y in zip(b, g, strict=True)))
    res = load_traces(p, signal_unit="e^2/h", override_units=True)
    (tr,) = res.traces  # the short down segment (2 rows) is dropped and reported
    assert res.report.dropped == {"sweep segment shorter than 8 points": 2}
    assert res.report.adjusted == {
        "field out of order within a sweep (re-sorted)": 1,
        "duplicate field value (signal averaged)": 1,
    }
    assert tr.field[:4] == pytest.approx([0.0, 0.1, 0.18, 0.2])
    assert tr.conductance[4] == pytest.approx(6.0)  # mean of 5 and 7 at B = 0.3
    res2 = load_traces(
        p, signal_unit="e^2/h", out_of_order="drop", duplicates="drop", override_units=True
    )
    assert res2.report.dropped == {
        "field out of order within a sweep": 1,
        "duplicate field value": 1,
        "sweep segment shorter than 8 points": 2,
    }
    assert res2.report.n_used + res2.report.n_dropped == res2.report.n_points == 15
    res3 = load_traces(p, signal_unit="e^2/h", split_sweeps=False, override_units=True)
    assert len(res3.traces) == 1 and res3.traces[0].direction == "merged"
    assert any("merged" in c for c in res3.report.caveats)


def test_several_signal_columns_and_index_selection(tmp_path):
    b = np.linspace(0, 1, 20)
    p = tmp_path / "multi.csv"
    p.write_text("B (T),R1 (Ohm),R2 (kOhm)\n" + "".join(f"{x},{1000 + x},{2 + x}\n" for x in b))
    res = load_traces(p)
    assert [tr.metadata["column"] for tr in res] == ["R1 (Ohm)", "R2 (kOhm)"]
    assert res.traces[1].conductance == pytest.approx(1 / ((2 + b) * 1e3 * E2H), rel=1e-12)
    (only,) = load_traces(p, field=0, signal=2).traces
    assert only.metadata["column"] == "R2 (kOhm)"
    assert res.report.n_points == 40


def test_no_kwant_import_anywhere_in_analysis_sources():
    root = Path(__file__).parents[1] / "ringkit" / "analysis"
    for src in root.glob("*.py"):
        text = src.read_text()
        assert "import kwant" not in text and "from kwant" not in text, src.name
    code = "import sys, ringkit.analysis.traces; print('kwant' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


# --- issue 16: no silent wrong answers on the loader (docs/measured-data.md) -------------


def _rows(b, v, fmt="{},{}\n"):
    return "".join(fmt.format(x, y) for x, y in zip(b, v, strict=True))


B10 = [round(0.01 * i, 2) for i in range(10)]
R10 = [1000.0 + i for i in range(10)]


@pytest.mark.parametrize(
    ("text", "kelvin"),
    [
        ("0,3 K", 0.3),  # decimal comma (read as 3 K before)
        ("3.00e-01 K", 0.3),  # scientific notation (1 K before)
        ("1.50e+00 K", 1.5),  # (0 K before)
        ("1e-3 K", 0.001),  # (3 K before)
        ("300 mK", 0.3),
        ("0.3 K (mixing chamber)", 0.3),
    ],
)
def test_header_temperatures_read_exactly(tmp_path, text, kelvin):
    p = tmp_path / "run.csv"
    p.write_text(f"# T = {text}\nB (T),R (Ohm)\n" + _rows(B10, R10))
    (tr,) = load_traces(p).traces
    assert tr.temperature == kelvin  # exact: float of the written digits
    assert f"T={kelvin:g} K" in tr.label


def test_negative_header_temperature_refused(tmp_path):
    p = tmp_path / "run.csv"
    p.write_text("# T = -5 K\nB (T),R (Ohm)\n" + _rows(B10, R10))
    with pytest.raises(TraceFormatError, match=r"run.csv, line 1: .*-5 K.*not positive"):
        load_traces(p)
    (tr,) = load_traces(p, temperature=0.05).traces  # the option overrides the header
    assert tr.temperature == 0.05


def test_temperature_in_file_name_with_decimal_comma(tmp_path):
    p = tmp_path / "ring_0,3K.csv"
    p.write_text("B (T),R (Ohm)\n" + _rows(B10, R10))
    assert load_traces(p).traces[0].temperature == 0.3  # was 3 K


def test_malformed_first_row_of_headerless_file_is_not_a_header(tmp_path):
    p = tmp_path / "nohead.csv"
    p.write_text("0.001,abc\n" + _rows(B10, R10))
    with pytest.raises(TraceFormatError, match=r"nohead.csv, line 1: cannot read 'abc'"):
        load_traces(p, field_unit="T", signal_unit="Ohm")


@pytest.mark.parametrize("empty", ["\t", "\t\t", ",", " , "])
def test_empty_rows_counted_whatever_the_delimiter(tmp_path, empty):
    d = "\t" if "\t" in empty else ","
    p = tmp_path / "gap.txt"
    body = _rows(B10[:5], R10[:5], "{}" + d + "{}\n") + empty + "\n"
    body += _rows(B10[5:], R10[5:], "{}" + d + "{}\n")
    p.write_text(f"B (T){d}R (Ohm)\n" + body)
    res = load_traces(p)
    assert res.report.dropped == {"empty row (no values)": 1}
    assert res.report.examples["empty row (no values)"] == ("gap.txt:7",)
    assert res.report.n_points == 11 and res.report.n_used == 10


def test_no_non_finite_value_reaches_a_trace(tmp_path):
    p = tmp_path / "huge.csv"
    g = ["1e-3"] * 10
    g[3] = "1e305"  # S: 1e305 / (e^2/h) overflows to inf in e^2/h
    p.write_text("B (T),G (S)\n" + _rows(B10, g))
    res = load_traces(p)
    reason = "value out of range: conductance not finite after unit conversion"
    assert res.report.dropped == {reason: 1}
    assert res.report.examples[reason] == ("huge.csv:5",)
    p2 = tmp_path / "tiny.csv"
    r = ["1000"] * 10
    r[2], r[6] = "1e-309", "5e-324"  # 1/R overflows
    p2.write_text("B (T),R (Ohm)\n" + _rows(B10, r))
    res2 = load_traces(p2)
    assert res2.report.n_dropped == 2
    for tr in (*res.traces, *res2.traces):
        assert np.all(np.isfinite(tr.conductance)) and np.all(np.isfinite(tr.field))


def test_signal_or_group_column_equal_to_the_field_column_refused(tmp_path):
    p = tmp_path / "same.csv"
    p.write_text("B (T),R (Ohm)\n" + _rows(B10, R10))
    with pytest.raises(ParameterError, match="signal = 'B \\(T\\)'.*also the field column"):
        load_traces(p, signal=0)
    with pytest.raises(ParameterError, match="group_by"):
        load_traces(p, group_by="B")


def test_units_line_under_the_header(tmp_path):
    p = tmp_path / "units.csv"
    p.write_text(
        "B,R,I\nmT,kOhm,\n"
        + "".join(f"{b},{r / 1000},1e-8\n" for b, r in zip(B10, R10, strict=True))
    )
    res = load_traces(p)
    (tr,) = res.traces
    assert tr.metadata["column"] == "R (kOhm)" and res.report.n_points == 10
    assert tr.field == pytest.approx(np.array(B10) * 1e-3, rel=1e-12)
    assert tr.conductance == pytest.approx(1 / (np.array(R10) * E2H), rel=1e-12)


def test_duplicate_column_labels_disambiguated(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text("B (T),R (Ohm),R (Ohm)\n" + "".join(f"{b},{1000 + b},{2000 + b}\n" for b in B10))
    res = load_traces(p)
    labels = [tr.label for tr in res]
    assert len(set(labels)) == 2, labels
    assert res.traces[1].conductance[0] == pytest.approx(1 / (2000 * E2H), rel=1e-12)
    with pytest.raises(ParameterError, match=r"matches 2 columns.*'R \(Ohm\)#1'.*'R \(Ohm\)#2'"):
        load_traces(p, signal="R")
    (only,) = load_traces(p, signal="R (Ohm)#2").traces
    assert only.conductance[0] == pytest.approx(1 / (2000 * E2H), rel=1e-12)


@pytest.mark.parametrize(
    "options",
    [
        {"field_unit": 0},
        {"delimiter": ""},
        {"comment": 5},
        {"min_points": "x"},
        {"min_points": True},
        {"signal_unit": ["Ohm"]},
        {"field_unit": "Ohm"},  # a resistance unit for the field
        {"group_rtol": "a"},
        {"split_sweeps": "no"},
        {"decimal": 1},
        {"terminals": ["two"]},
        {"temperature": -1.0},
        {"max_bytes": 0},
        {"field": 1.5},
        {"delimiter": "."},
    ],
)
def test_every_option_error_is_a_parameter_error(tmp_path, options):
    p = tmp_path / "ok.csv"
    p.write_text("B (T),R (Ohm)\n" + _rows(B10, R10))
    with pytest.raises(ParameterError) as info:
        load_traces(p, **options)
    assert next(iter(options)) in str(info.value)
    with pytest.raises(ParameterError, match="path"):
        load_traces(12345)


def test_special_files_refused_without_reading(tmp_path):
    import os
    import threading

    with pytest.raises(TraceFormatError, match="device"):
        load_traces("/dev/zero")
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    outcome = []

    def target():
        try:
            load_traces(fifo)
        except Exception as err:  # the outcome is asserted below
            outcome.append(err)

    th = threading.Thread(target=target, daemon=True)
    th.start()
    th.join(5.0)
    if th.is_alive():  # unblock the reader of the old code before failing
        fd = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
        os.close(fd)
        th.join(5.0)
    assert outcome and isinstance(outcome[0], TraceFormatError), outcome
    assert "FIFO" in str(outcome[0])
    big = tmp_path / "big.csv"
    big.write_text("B (T),R (Ohm)\n" + _rows(B10, R10))
    with pytest.raises(TraceFormatError, match="max_bytes"):
        load_traces(big, max_bytes=100)


def test_trailing_delimiters_and_comment_after_data(tmp_path):
    p = tmp_path / "trail.csv"
    p.write_text("B (T),R (Ohm)\n" + _rows(B10, R10, "{},{},\n") + "# end of sweep\n")
    (tr,) = load_traces(p).traces
    assert tr.field == pytest.approx(B10, abs=0)
    assert tr.conductance == pytest.approx(1 / (np.array(R10) * E2H), rel=1e-12)
    # header in a comment line before the data; a comment after the data must not replace it
    p2 = tmp_path / "trail2.txt"
    p2.write_text("# B (T)\tR (Ohm)\n" + _rows(B10, R10, "{}\t{}\t\n") + "# stopped\n")
    (tr2,) = load_traces(p2).traces
    assert tr2.metadata["column"] == "R (Ohm)"
    assert tr2.conductance == pytest.approx(tr.conductance, rel=1e-12)


def test_temperature_series_grouped_automatically():
    """A series in one file becomes one trace per temperature, each with its temperature."""
    t = TRUTH["ring_temperatures.csv"]
    res = load_traces(DATA / "ring_temperatures.csv")  # no group_by given
    assert [tr.temperature for tr in res] == pytest.approx(list(t["temperatures"]))
    assert len({tr.label for tr in res}) == len(res.traces)
    assert any("grouped by the temperature column" in c for c in res.report.caveats)
    flat = load_traces(DATA / "ring_temperatures.csv", group_by=None)
    assert all(tr.temperature is None for tr in flat)  # explicit opt-out keeps the old split


def test_drifting_temperature_log_is_not_split(tmp_path):
    p = tmp_path / "drift.csv"
    temps = np.linspace(0.25, 0.30, 40)  # logged continuously: every row differs by > 1e-3
    b = np.linspace(0, 0.1, 40)
    p.write_text(
        "T (K),B (T),G (e^2/h)\n" + "".join(f"{t},{x},2\n" for t, x in zip(temps, b, strict=True))
    )
    res = load_traces(p)
    assert len(res.traces) == 1 and res.report.n_dropped == 0
    assert any("drifts" in c for c in res.report.caveats)


def test_unit_option_contradicting_the_header(tmp_path):
    p = tmp_path / "mt.csv"
    p.write_text("B [mT],R [Ohm]\n" + _rows([10 * b for b in B10], R10))
    with pytest.raises(ParameterError, match=r"field_unit = 'T'.*'B \[mT\]'.*1000"):
        load_traces(p, field_unit="T")
    with pytest.raises(ParameterError, match=r"signal_unit = 'kOhm'.*'R \[Ohm\]'"):
        load_traces(p, signal_unit="kOhm")
    with pytest.raises(ParameterError, match="signal_unit"):
        load_traces(p, signal_unit="S")  # a conductance unit over a resistance column
    res = load_traces(p, field_unit="mT")  # agreeing with the header is fine
    assert res.traces[0].field[1] == pytest.approx(1e-4, rel=1e-12)
    forced = load_traces(p, signal_unit="kOhm", override_units=True)
    assert any("kOhm" in c for c in forced.report.caveats)


def test_four_terminal_caveat_cites_a_document_in_the_repository(tmp_path):
    import re

    p = tmp_path / "fourt.csv"
    p.write_text("B (T),R (Ohm)\n" + _rows(B10, R10))
    caveat = load_traces(p, terminals="four").report.caveats[0]
    assert "1761" in caveat and "Phys. Rev. Lett. 57" in caveat  # Buttiker 1986
    cited = re.findall(r"docs/[\w.-]+\.md", caveat)
    assert cited
    root = Path(__file__).parents[1]
    for doc in cited:
        text = (root / doc).read_text()
        assert "Four-terminal data" in text and "1761" in text
