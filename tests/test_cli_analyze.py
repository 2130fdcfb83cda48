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


# --- issue 16: cross-checks, lab units, temperature series (docs/measured-data.md) -------
# Files below are INVENTED: cosines of known radius/amplitude plus seeded Gaussian noise.

E2H = 1 / 25812.80745  # S; h/e^2 = R_K = 25812.80745 Ohm (CODATA, checked in test_units.py)
OLD_KEYS = (
    "index label direction temperature_K n_points_trace period_he_T period_he_err_T "
    "frequency_he_per_T area_m2 area_err_m2 radius_m radius_err_m amplitude_he_e2h "
    "amplitude_h2e_e2h amplitude_he_pp_e2h amplitude_h2e_pp_e2h relative_amplitude_he "
    "relative_amplitude_h2e noise_he_rms_e2h noise_h2e_rms_e2h mean_conductance_e2h "
    "peak_significance band_source bands_per_T background background_gain_he "
    "background_gain_h2e n_points_used n_points_trimmed_background n_points_dropped notes "
    "file n_traces n_points_file n_points_dropped_loader drop_reasons adjusted caveats "
    "warnings figures traces"
).split()


def _ring_file(
    tmp_path,
    name="ring.csv",
    *,
    radius=500e-9,
    amp=0.05,
    g0=2.0,
    noise=0.002,
    span=0.2,
    n=2001,
    series=0.0,
    header="B [mT],R [Ohm]",
    seed=3,
):
    """INVENTED two-terminal trace: R = 1/G + series, G = g0 + amp cos + amp/5 cos(2x)."""
    rng = np.random.default_rng(seed)
    b = np.linspace(-span / 2, span / 2, n)
    f = np.pi * radius**2 / 4.135667696923859e-15
    g = g0 + amp * np.cos(2 * np.pi * f * b) + amp / 5 * np.cos(4 * np.pi * f * b)
    g = g + rng.normal(0, noise, b.size) if noise else g
    r = 1 / (g * E2H) + series
    p = tmp_path / name
    p.write_text(
        header
        + "\n"
        + "".join(f"{float(x) * 1e3!r},{float(y)!r}\n" for x, y in zip(b, r, strict=True))
    )
    return str(p)


def _fail(capsys, *args):
    code = main(["analyze", *args])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("ringkit: error:"), err
    return lines[0]


def test_wrong_radii_refused_and_forced(tmp_path, capsys):
    p = _ring_file(tmp_path)
    msg = _fail(capsys, p, "--r-in", "270nm", "--r-out", "330nm")
    assert "500 nm" in msg and "--r-in" in msg and "--force" in msg
    d = _json(capsys, p, "--r-in", "270nm", "--r-out", "330nm", "--force")
    assert {c["code"] for c in d["checks"]} >= {"peak-outside-band", "no-peak-above-noise"}
    assert any("forced past refusal" in w for w in d["warnings"])
    d = _json(capsys, p, "--r-in", "480nm", "--r-out", "520nm")
    assert d["checks"] == [] and d["radius_m"] == pytest.approx(500e-9, rel=1e-3)


def test_no_peak_above_noise_refused(tmp_path, capsys):
    p = _ring_file(tmp_path, amp=0.0, noise=0.01)
    assert "noise floor" in _fail(capsys, p, "--r-in", "480nm", "--r-out", "520nm")


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--field-unit", "T"], "'B [mT]'"),  # would give r = 16 nm
        (["--signal-unit", "kOhm"], "'R [Ohm]'"),  # amplitudes 1000x too small
    ],
)
def test_unit_options_contradicting_the_header_refused(tmp_path, capsys, args, needle):
    p = _ring_file(tmp_path)
    msg = _fail(capsys, p, *args)
    assert needle in msg and "--force" in msg and "1000" in msg
    d = _json(capsys, p, *args, "--force")
    assert any("override_units" in c for c in d["caveats"])


def test_series_resistance_carried_over_refused(tmp_path, capsys):
    # R = 12906 +- 320 Ohm plus 1200 Ohm: a value kept from another device is refused or
    # warned, the right one passes
    p = _ring_file(tmp_path, series=1200.0)
    msg = _fail(capsys, p, "--series-resistance", "13900")  # above part of R
    assert "13900" in msg and "--series-resistance" in msg
    d = _json(capsys, p, "--series-resistance", "13900", "--force")
    assert {"series-above-resistance", "amplitude-above-mean"} <= {c["code"] for c in d["checks"]}
    d = _json(capsys, p, "--series-resistance", "12600")  # below every R, 97 % of it
    assert "series-dominates" in {c["code"] for c in d["checks"]}
    d = _json(capsys, p, "--series-resistance", "1200")
    assert d["checks"] == []
    assert d["amplitude_he_e2h"] == pytest.approx(0.05 / np.sqrt(2), rel=0.03)


def test_implausible_conductance_warned_and_refused(tmp_path, capsys):
    p = _ring_file(tmp_path, g0=500.0, amp=5.0, noise=0.0)  # R = 51.6 Ohm: metal-like
    d = _json(capsys, p)
    assert [c["code"] for c in d["checks"]] == ["conductance-unusual"]
    assert any("500 e^2/h" in w and "--signal-unit" in w for w in d["warnings"])
    p = _ring_file(tmp_path, "tiny.csv", g0=2e5, amp=1e3, noise=0.0)
    assert "implausible" in _fail(capsys, p)


def test_radii_without_unit_name_the_unit(capsys):
    with pytest.raises(SystemExit) as info:
        main(["analyze", UPDOWN, "--r-in", "600", "--r-out", "660"])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert "no unit" in err and "600nm" in err and "Nyquist" not in err


def test_overlapping_bands_warned_in_short_window(tmp_path, capsys):
    p = _ring_file(tmp_path, span=0.025, n=801, noise=0.0005)
    d = _json(capsys, p, "--r-in", "480nm", "--r-out", "520nm")
    assert [c["code"] for c in d["checks"]] == ["bands-overlap"]
    assert any("h/2e amplitude includes leakage" in w for w in d["warnings"])


def test_lab_units_and_detectability(tmp_path, capsys):
    # G = 2 + 0.02 cos: rms dG = 0.02/sqrt(2) e^2/h -> dR = (h/e^2) dG/G^2 = 91.26 Ohm
    # (hand-computed: 25812.807 x 0.014142 / 4); R = 12906.4 + 1000 Ohm series -> 0.656 %
    p = _ring_file(tmp_path, amp=0.02, noise=0.0, series=1000.0)
    args = [p, "--series-resistance", "1000", "--r-in", "480nm", "--r-out", "520nm"]
    d = _json(capsys, *args, "--current", "10nA", "--noise", "5nV/rtHz", "--bandwidth", "1Hz")
    dr = 25812.80745 * 0.02 / np.sqrt(2) / 4
    assert dr == pytest.approx(91.26, rel=1e-3)
    assert d["amplitude_he_ohm"] == pytest.approx(dr, rel=0.02)
    assert d["mean_resistance_ohm"] == pytest.approx(25812.80745 / 2 + 1000, rel=1e-3)
    assert d["relative_he_percent"] == pytest.approx(100 * dr / 13906.4, rel=0.02)
    det = d["detectability"]
    assert det["noise_rms_per_reading_V"] == pytest.approx(5e-9, rel=1e-12)
    assert det["he"]["signal_rms_V"] == pytest.approx(10e-9 * d["amplitude_he_ohm"], rel=1e-12)
    assert det["he"]["exceeds_noise"] and det["h2e"]["exceeds_noise"]
    # 1 uV/rtHz: step 0.1 mT -> Nyquist 5000 1/T; h/e band ~50 1/T wide -> in-band noise
    # ~0.1 uV vs 0.91 uV (S/N ~9); h/2e line 5x smaller in a ~80 1/T band (S/N ~1.4 < 3)
    d = _json(capsys, *args, "--current", "10nA", "--noise", "1uV/rtHz", "--bandwidth", "1Hz")
    assert d["detectability"]["he"]["exceeds_noise"]
    assert not d["detectability"]["h2e"]["exceeds_noise"]
    assert (
        main(["analyze", *args, "--current", "10nA", "--noise", "1uV/rtHz", "--bandwidth", "1Hz"])
        == 0
    )
    out = capsys.readouterr().out
    assert "Ohm" in out and "does NOT exceed" in out
    assert "--bandwidth" in _fail(capsys, *args, "--current", "10nA")


def test_json_keeps_old_keys_and_adds_new(capsys):
    d = _json(capsys, UPDOWN, "--series-resistance", "1200", "--r-in", "600nm", "--r-out", "660nm")
    assert set(OLD_KEYS) <= set(d), set(OLD_KEYS) - set(d)
    for key in ("checks", "amplitude_he_ohm", "relative_he_percent", "mean_resistance_ohm"):
        assert key in d
    assert d["temperature_K"] == pytest.approx(0.3)


def test_temperature_series_l_phi_fit(capsys):
    t = _mk.TRUTH["ring_temperatures.csv"]
    temps_file = str(DATA / "ring_temperatures.csv")
    d = _json(capsys, temps_file, "--r-in", "610nm", "--r-out", "650nm")  # no --group-by
    assert [tr["temperature_K"] for tr in d["traces"]] == pytest.approx(list(t["temperatures"]))
    assert len({tr["label"] for tr in d["traces"]}) == 6
    series = [temps_file, "--group-by", "temperature", "--r-in", "610nm", "--r-out", "650nm"]
    d = _json(capsys, *series, "--thermal", "ballistic", "--thermal-energy", "2K")
    s = d["l_phi_series"]
    assert [q["temperature_K"] for q in s["points"]] == pytest.approx(list(t["temperatures"]))
    scale = s["path_length_m"] / t["path_length"]  # path-length convention of the fit
    truth = t["l_phi_1K"] * scale
    assert abs(s["l_phi_ref_m"] - truth) < 3 * s["l_phi_ref_err_m"] + 0.03 * truth
    assert s["fit"]["values"]["p"] == pytest.approx(t["p"], rel=0.05)
    assert "l_phi_convention" in s
    assert main(["analyze", *series]) == 0
    assert "L_phi(T) from 6 temperatures" in capsys.readouterr().out
    assert "3 temperatures" in _fail(capsys, UPDOWN, "--group-by", "temperature")
    d = _json(capsys, temps_file, "--group-by", "T (K)", "--r-in", "610nm", "--r-out", "650nm")
    assert len(d["l_phi_series"]["points"]) == 6  # a temperature column named by the user


def test_non_finite_rows_reported_not_contradicted(tmp_path, capsys):
    p = tmp_path / "huge.csv"
    b = np.linspace(0, 0.2, 801)
    g = 2 + 0.05 * np.cos(2 * np.pi * 190 * b)
    rows = [f"{float(x)!r},{float(y) * E2H!r}" for x, y in zip(b, g, strict=True)]
    rows[5] = f"{float(b[5])!r},1e305"
    p.write_text("B (T),G (S)\n" + "\n".join(rows) + "\n")
    d = _json(capsys, str(p))
    assert d["drop_reasons"] == {
        "value out of range: conductance not finite after unit conversion": 1
    }
    assert d["n_points_dropped_loader"] == 1 and d["n_points_file"] == 801


def test_special_file_refused_in_one_line(capsys):
    assert "device" in _fail(capsys, "/dev/zero")


def test_temperature_series_from_a_folder_of_files(tmp_path, capsys):
    """INVENTED files ring_<T>K.csv (temperature in the name or the header): A(T) = 0.4
    exp(-L/L_phi), L_phi = 2 um (T/1 K)^-1, L = pi x 500 nm; the fit must return 2 um."""
    b = np.linspace(-0.1, 0.1, 1001)
    f = np.pi * (500e-9) ** 2 / 4.135667696923859e-15
    for k, temp in enumerate((0.3, 0.6, 1.0, 1.5)):
        amp = 0.4 * np.exp(-np.pi * 500e-9 * temp / 2e-6)
        g = 2 + amp * np.cos(2 * np.pi * f * b)
        name, head = (f"ring_{temp}K.csv", "") if k % 2 else (f"ring{k}.csv", f"# T = {temp} K\n")
        (tmp_path / name).write_text(
            head
            + "B (T),G (e^2/h)\n"
            + "".join(f"{x!r},{y!r}\n" for x, y in zip(b.tolist(), g.tolist(), strict=True))
        )
    d = _json(
        capsys, str(tmp_path), "--group-by", "temperature", "--r-in", "480nm", "--r-out", "520nm"
    )
    s = d["l_phi_series"]
    assert [q["temperature_K"] for q in s["points"]] == [0.3, 0.6, 1.0, 1.5]
    scale = s["path_length_m"] / (np.pi * 500e-9)
    assert s["l_phi_ref_m"] == pytest.approx(2e-6 * scale, rel=0.01)


def test_joint_fit_separates_thermal_averaging(tmp_path, capsys):
    """INVENTED series: h/e = 0.4 x/sinh(x) exp(-pi r/L_phi), h/2e = 0.1 exp(-2 pi r/L_phi)
    (thermal averaging acts on h/e only: Hansen et al., Phys. Rev. B 64, 045327 (2001)),
    x = pi k_B T/E_c with E_c = k_B x 1 K, L_phi = 2 um (T/1 K)^-1, r = 500 nm."""
    b = np.linspace(-0.1, 0.1, 1601)
    r = 500e-9
    f = np.pi * r**2 / 4.135667696923859e-15
    for temp in (0.2, 0.4, 0.7, 1.0, 1.5):
        l_phi, x = 2e-6 / temp, np.pi * temp
        a1 = 0.4 * x / np.sinh(x) * np.exp(-np.pi * r / l_phi)
        a2 = 0.1 * np.exp(-2 * np.pi * r / l_phi)
        g = 2 + a1 * np.cos(2 * np.pi * f * b) + a2 * np.cos(4 * np.pi * f * b + 0.3)
        (tmp_path / f"ring_{temp}K.csv").write_text(
            "B (T),G (e^2/h)\n"
            + "".join(f"{u!r},{v!r}\n" for u, v in zip(b.tolist(), g.tolist(), strict=True))
        )
    args = [str(tmp_path), "--group-by", "temperature", "--r-in", "480nm", "--r-out", "520nm"]
    d = _json(capsys, *args, "--fit", "joint", "--thermal", "ballistic")
    s = d["l_phi_series"]
    assert s["fit"]["joint"] and len(s["points_h2e"]) == 5
    scale = s["path_length_m"] / (np.pi * r)  # path-length convention of the fit
    assert s["l_phi_ref_m"] == pytest.approx(2e-6 * scale, rel=0.03)
    ec = s["fit"]["values"]["thermal_energy"]
    assert ec == pytest.approx(1.380649e-23, rel=0.1)  # k_B x 1 K (SI exact)
