"""``ringkit analyze``: summary, one JSON object with the contract keys, figures, errors.

Expected numbers come from the generating parameters of the INVENTED data file
(tests/data/make_analysis_data.py): h/e cosine amplitude 0.12 e^2/h -> band rms
0.12/sqrt(2); h/2e 0.03 -> 0.03/sqrt(2); radius 0.63 um; 3 rows with an empty value.
"""

from __future__ import annotations

import importlib.util
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from ringkit.cli import main

DATA = Path(__file__).parent / "data"
UPDOWN = str(DATA / "ring_updown.tsv")
_spec = importlib.util.spec_from_file_location("mk", DATA / "make_analysis_data.py")
_mk = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_mk)
TRUTH = _mk.TRUTH["ring_updown.tsv"]
REQUIRED = (
    "period_he_T",
    "area_m2",
    "radius_m",
    "amplitude_he_e2h",
    "amplitude_h2e_e2h",
    "n_points_used",
    "n_points_dropped",
)


def _json(capsys, *args):
    code = main(["analyze", *args, "--json"])
    out = capsys.readouterr()
    assert code == 0, out.err
    lines = [ln for ln in out.out.splitlines() if ln.strip()]
    assert len(lines) == 1  # exactly one JSON object
    return json.loads(lines[0])


@pytest.mark.parametrize("geometry", [True, False])
def test_json_contract_and_values(capsys, geometry):
    args = [UPDOWN, "--series-resistance", "1200"]
    if geometry:
        args += ["--r-in", "600nm", "--r-out", "0.66um"]
    d = _json(capsys, *args)
    for key in REQUIRED:
        assert key in d, key
    assert abs(d["radius_m"] - TRUTH["r_eff"]) < 3 * d["radius_err_m"]
    assert d["area_m2"] == pytest.approx(np.pi * d["radius_m"] ** 2, rel=1e-12)
    assert d["amplitude_he_e2h"] == pytest.approx(TRUTH["amp_he"] / np.sqrt(2), rel=0.01)
    assert d["amplitude_h2e_e2h"] == pytest.approx(TRUTH["amp_h2e"] / np.sqrt(2), rel=0.03)
    assert d["n_points_dropped"] == TRUTH["nan_lines"]
    assert d["drop_reasons"] == {"NaN, empty or infinite signal value": TRUTH["nan_lines"]}
    assert d["n_points_used"] == d["n_points_trace"]
    assert d["n_traces"] == 2 and [t["direction"] for t in d["traces"]] == ["up", "down"]
    assert d["band_source"] == ("geometry" if geometry else "dominant peak")
    assert d["temperature_K"] == pytest.approx(TRUTH["temperature"])


def test_readable_summary(capsys):
    code = main(
        ["analyze", UPDOWN, "--series-resistance", "1200", "--r-in", "6e-7m", "--r-out", "6.6e-7 m"]
    )
    out = capsys.readouterr().out
    assert code == 0
    for text in ("h/e period", "radius", "h/2e amplitude", "dropped 3", "trace 1"):
        assert text in out
    assert "0.63 um" in out


def test_figures_written(tmp_path, capsys):
    d = _json(capsys, UPDOWN, "--figures", str(tmp_path), "--background", "moving_average")
    assert len(d["figures"]) == 2
    for f in d["figures"]:
        data = Path(f).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10000


def test_undersampled_h2e_is_null_not_a_number(tmp_path, capsys):
    f_out = np.pi * 433e-9**2 / 4.135667696923859e-15  # h/e band top, Webb ring
    b = np.arange(0, 0.5, 0.5 / (1.5 * f_out))
    g = 3 + 0.05 * np.cos(2 * np.pi * 129.26 * b)
    p = tmp_path / "coarse.csv"
    p.write_text("B (T),G (e^2/h)\n" + "".join(f"{x},{y}\n" for x, y in zip(b, g, strict=True)))
    d = _json(capsys, str(p), "--r-in", "392nm", "--r-out", "433nm")
    assert d["amplitude_h2e_e2h"] is None
    assert d["amplitude_he_e2h"] == pytest.approx(0.05 / np.sqrt(2), rel=0.01)
    assert any("Nyquist" in w for w in d["warnings"])


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["missing.csv"], "no such file"),
        ([str(DATA / "malformed.csv")], "line 6"),
        ([str(DATA / "headerless.dat")], "field_unit"),
        ([UPDOWN, "--r-in", "600nm"], "--r-out"),
        ([UPDOWN, "--trace", "5"], "--trace 5"),
        ([UPDOWN, "--r-in", "60um", "--r-out", "66um"], "Nyquist"),
    ],
)
def test_bad_input_one_line_exit_2(capsys, args, needle):
    code = main(["analyze", *args])
    err = capsys.readouterr().err
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ringkit: error:")
    assert needle in lines[0]
    assert "Traceback" not in err


def test_field_range_too_short(tmp_path, capsys):
    b = np.linspace(0, 0.005, 100)  # < one 7.7 mT period
    p = tmp_path / "short.csv"
    p.write_text("B (T),G (e^2/h)\n" + "".join(f"{x},{1 + 0.1 * x}\n" for x in b))
    assert main(["analyze", str(p), "--r-in", "392nm", "--r-out", "433nm"]) == 2
    assert "at least one h/e period" in capsys.readouterr().err


def test_bad_length_option_is_an_argparse_error(capsys):
    with pytest.raises(SystemExit) as info:
        main(["analyze", UPDOWN, "--r-in", "six", "--r-out", "1um"])
    assert info.value.code == 2
    assert "not a length" in capsys.readouterr().err


def test_console_entry_point_and_lazy_imports():
    out = subprocess.run(
        [sys.executable, "-m", "ringkit", "analyze", UPDOWN, "--json"],
        capture_output=True,
        text=True,
        check=True,
    )
    d = json.loads(out.stdout)
    assert set(REQUIRED) <= set(d)
    code = (
        "import sys, ringkit.cli.analyze; "
        "print(','.join(m for m in ('matplotlib', 'kwant') if m in sys.modules))"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert res.stdout.strip() == ""
