"""Measured-data panel in lab units: dR (Ohm), dR/R (%) and detectability (issue 16 pt 4).

References outside the panel:

* ``dR = (h/e^2) dG / G^2`` (small-signal inverse of R = 1/G, common practice; the factor
  h/e^2 = 25 812.807 Ohm, the von Klitzing constant, is taken from ``scipy.constants``);
* the rms of a cosine of amplitude A is A/sqrt(2) (closed form);
* detectability as in docs/measured-data.md, "Units and conversion factors": in-band noise
  ``e_n sqrt(df) sqrt(w / f_Nyquist)``, verdict at S/N >= 3 (common practice).

The trace is INVENTED: G = 15 e^2/h + 0.05 e^2/h cos(2 pi B / 3 mT), written as R in Ohm.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import constants

from ringkit.analysis.labunits import detectability, lab_amplitudes
from ringkit.cli import main
from ringkit.view.panels import MeasuredDataPanel

H_E2 = constants.h / constants.e**2  # von Klitzing constant, Ohm (CODATA via scipy)
PERIOD = 3.0e-3  # T, invented
G0, AMP = 15.0, 0.05  # e^2/h, invented


def _r_file(g0=G0, amp=AMP) -> bytes:
    b = np.linspace(-0.05, 0.05, 2001)
    g = g0 + amp * np.cos(2 * np.pi * b / PERIOD)
    r = H_E2 / g  # Ohm: G in e^2/h -> R = (h/e^2) / G
    rows = "\n".join(f"{x * 1e3:.6f},{y:.9f}" for x, y in zip(b, r, strict=True))
    return f"B (mT),R (Ohm)\n{rows}\n".encode()


def _set(panel, current="10", noise="5", bandwidth="1"):
    c = panel.controls
    c["current"].value, c["noise"].value, c["bandwidth"].value = current, noise, bandwidth
    assert panel.last_error is None or "check failed" not in panel.message.value
    return panel


@pytest.fixture(scope="module")
def loaded():
    """One panel with the invented R file loaded (tests set the lab controls themselves)."""
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_r_file(), "ring.csv"), panel.message.value
    return panel


def test_panel_equals_labunits_cli_and_hand_conversion(loaded, tmp_path, capsys):
    content = _r_file()
    panel = _set(loaded)
    lab, res = panel.lab, panel.analysis.result
    trace = panel.traces[0]
    assert trace.metadata.get("quantity") == "R"
    # 1) the library called directly
    direct = lab_amplitudes(res, trace)
    widths = {
        k: res.bands[n][1] - res.bands[n][0] + 2 * res.band_margin
        for n, k in ((1, "he"), (2, "h2e"))
    }
    det = detectability(
        {"he": direct["amplitude_he_ohm"], "h2e": direct["amplitude_h2e_ohm"]},
        current=10e-9, noise_density=5e-9, bandwidth=1.0, band_widths=widths,
        nyquist=0.5 / res.field_step,
    )  # fmt: skip
    for key in ("he", "h2e"):
        for name in (f"amplitude_{key}_ohm", f"relative_{key}_percent"):
            assert lab[name] == pytest.approx(direct[name], rel=1e-9), name
        assert lab["detectability"][key]["snr_in_band"] == pytest.approx(
            det[key]["snr_in_band"], rel=1e-9
        )
    # 2) the CLI's JSON for the same file and the same current/noise/bandwidth
    path = tmp_path / "ring.csv"
    path.write_bytes(content)
    code = main(["analyze", str(path), "--json", "--current", "10nA", "--noise", "5nV/rtHz",
                 "--bandwidth", "1Hz"])  # fmt: skip
    assert code == 0
    cli = json.loads(capsys.readouterr().out)
    for key in ("he", "h2e"):
        for name in (f"amplitude_{key}_ohm", f"relative_{key}_percent"):
            assert lab[name] == pytest.approx(cli[name], rel=1e-9), name
        for name in ("signal_rms_V", "noise_in_band_V", "snr_in_band"):
            assert lab["detectability"][key][name] == pytest.approx(
                cli["detectability"][key][name], rel=1e-9
            )
        assert (
            lab["detectability"][key]["exceeds_noise"] == cli["detectability"][key]["exceeds_noise"]
        )
    # 3) by hand: dR = (h/e^2) dG / G^2 with h/e^2 = 25812.807 Ohm (scipy.constants)
    assert H_E2 == pytest.approx(25812.807, rel=1e-7)  # exact since SI 2019, 25812.80745...
    dr = H_E2 * res.amplitude_he_rms / res.mean_conductance**2
    assert lab["amplitude_he_ohm"] == pytest.approx(dr, rel=1e-9)
    # ... and against the cosine put in: rms = A/sqrt(2) on G = 15 e^2/h (small signal)
    assert lab["amplitude_he_ohm"] == pytest.approx(H_E2 * AMP / math.sqrt(2) / G0**2, rel=0.03)
    r_mean = H_E2 / G0
    assert lab["relative_he_percent"] == pytest.approx(100 * dr / r_mean, rel=1e-3)
    # shown in the numbers table, units included
    assert "ΔR rms" in panel.summary.value and "Ω" in panel.summary.value
    assert "noise floor" in panel.summary.value


def test_verdict_flips_when_noise_exceeds_oscillation(loaded):
    panel = _set(loaded)
    res, lab = panel.analysis.result, panel.lab
    share = math.sqrt(
        (res.bands[1][1] - res.bands[1][0] + 2 * res.band_margin) * 2 * res.field_step
    )  # sqrt(w / f_Nyquist), f_Nyquist = 1/(2 dB)
    v_sig = 10e-9 * lab["amplitude_he_ohm"]  # V = I dR
    e_crit = v_sig / (3.0 * share * 1.0)  # V/sqrt(Hz) at S/N = 3 with df = 1 Hz
    panel.controls["noise"].value = f"{0.5 * e_crit * 1e9:.6g}"
    assert panel.lab["detectability"]["he"]["exceeds_noise"] is True
    assert panel.lab["detectability"]["he"]["snr_in_band"] == pytest.approx(6.0, rel=1e-5)
    assert "above noise floor" in panel.summary.value
    panel.controls["noise"].value = f"{2.0 * e_crit * 1e9:.6g}"
    assert panel.lab["detectability"]["he"]["exceeds_noise"] is False
    assert panel.lab["detectability"]["he"]["snr_in_band"] == pytest.approx(1.5, rel=1e-5)
    assert "BELOW noise floor" in panel.summary.value
    # units may be written out: 2 uA with the same noise is far above
    panel.controls["current"].value = "2uA"
    assert panel.lab["detectability"]["he"]["exceeds_noise"] is True


def test_lab_controls_reset_on_new_file():
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_r_file(), "first.csv"), panel.message.value
    _set(panel)
    assert "detectability" in panel.lab
    assert panel.load_bytes(_r_file(g0=12.0), "second.csv"), panel.message.value
    for key in ("current", "noise", "bandwidth"):
        assert panel.controls[key].value == panel.file_defaults[key] == "", key
    assert "detectability" not in panel.lab and "amplitude_he_ohm" in panel.lab
    assert panel.lab["amplitude_he_ohm"] == pytest.approx(
        H_E2 * AMP / math.sqrt(2) / 12.0**2, rel=0.03
    )
    # the same file again keeps what the user typed
    panel.controls["current"].value = "10"
    panel.controls["noise"].value = "5"
    panel.controls["bandwidth"].value = "1"
    assert panel.load_bytes(_r_file(g0=12.0), "second.csv")
    assert panel.controls["current"].value == "10" and "detectability" in panel.lab


@pytest.mark.parametrize(
    ("key", "bad", "word"), [("current", "-5", "current"), ("noise", "abc", "noise")]
)
def test_bad_lab_input_one_line_nothing_changes(loaded, key, bad, word):
    panel = _set(loaded)
    before_lab, before_summary = panel.lab, panel.summary.value
    panel.controls[key].value = bad
    msg = panel.message.value
    assert panel.last_error is not None and word in panel.last_error
    assert "\n" not in panel.last_error and "Traceback" not in msg
    assert panel.lab is before_lab and panel.summary.value == before_summary
    panel.controls[key].value = "20"  # valid again: recomputed, message cleared
    assert panel.last_error is None
    assert panel.lab is not before_lab and "detectability" in panel.lab
