"""Cross-checks, lab units and the temperature-series fit (docs/measured-data.md).

Traces here are INVENTED (seeded cosines plus Gaussian noise, made in this file). Check
values: unit factors are SI definitions and CODATA via scipy.constants (h/e^2 = R_K, the
von Klitzing constant); the small-signal rule dR = dG/G^2 and the 3-sigma detection
threshold are common practice.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis import AnalysisWarning, extract_oscillations
from ringkit.analysis.checks import (
    MIN_PEAK_SIGNIFICANCE,
    check_amplitude,
    check_bands,
    check_conductance,
    check_noise_floor,
    check_result,
    check_spectrum_peak,
    refusals,
)
from ringkit.analysis.labunits import detectability, parse_quantity, resistance_amplitude
from ringkit.analysis.tseries import group_by_temperature, l_phi_from_series

PHI0 = constants.h / constants.e
R_K = constants.physical_constants["von Klitzing constant"][0]  # h/e^2 in Ohm (CODATA)


def ring_trace(radius, *, amp=0.05, g0=2.0, noise=0.002, span=0.2, n=2001, seed=1):
    """INVENTED trace: g0 + amp cos(2 pi f B) + amp/5 cos(4 pi f B) + noise, f = pi r^2/(h/e)."""
    rng = np.random.default_rng(seed)
    b = np.linspace(-span / 2, span / 2, n)
    f = np.pi * radius**2 / PHI0
    g = g0 + amp * np.cos(2 * np.pi * f * b) + amp / 5 * np.cos(4 * np.pi * f * b)
    return b, g + rng.normal(0.0, noise, b.size)


def analyse(b, g, **kw):
    """extract_oscillations with its own warnings silenced (the checks are under test)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AnalysisWarning)
        return extract_oscillations(b, g, **kw)


def codes(findings):
    return {f.code for f in findings}


def test_wrong_radii_refused_right_radii_pass():
    b, g = ring_trace(500e-9)
    wrong = analyse(b, g, r_in=270e-9, r_out=330e-9)
    found = check_result(wrong, radii=(270e-9, 330e-9))
    assert {"peak-outside-band", "no-peak-above-noise"} <= codes(refusals(found))
    msg = next(f.message for f in found if f.code == "peak-outside-band")
    assert "500 nm" in msg and "--r-in" in msg  # names the value and the fix
    right = analyse(b, g, r_in=480e-9, r_out=520e-9)
    assert check_result(right, radii=(480e-9, 520e-9)) == []
    free = analyse(b, g)  # dominant peak
    assert check_spectrum_peak(free, None) == [] and check_noise_floor(free) == []


def test_noise_only_trace_refused():
    rng = np.random.default_rng(7)
    b = np.linspace(0, 0.2, 2001)
    g = 2.0 + rng.normal(0, 0.01, b.size)
    res = analyse(b, g, r_in=480e-9, r_out=520e-9, background="none")
    (f,) = check_noise_floor(res)
    assert f.level == "refuse" and f.value < MIN_PEAK_SIGNIFICANCE
    assert "noise floor" in f.message


def test_amplitude_above_mean_and_non_positive_mean():
    b, g = ring_trace(500e-9, amp=0.5, g0=0.3, noise=0.0)  # cosine 0.5 on a mean of 0.3
    res = analyse(b, g, r_in=480e-9, r_out=520e-9)
    (f,) = check_amplitude(res, series_resistance=1200.0)
    assert f.code == "amplitude-above-mean" and "1200" in f.message
    b, g = ring_trace(500e-9, g0=-1.0)
    res = analyse(b, g, r_in=480e-9, r_out=520e-9)
    assert codes(check_amplitude(res)) == {"mean-conductance"}


@pytest.mark.parametrize(
    ("g0", "expected"),
    [(2.0, set()), (500.0, {"conductance-unusual"}), (2e5, {"conductance-implausible"})],
)
def test_conductance_range_two_terminal(g0, expected):
    b, g = ring_trace(500e-9, g0=g0)
    res = analyse(b, g, r_in=480e-9, r_out=520e-9)
    found = check_conductance(res, "two")
    assert codes(found) == expected
    if found:  # R = (h/e^2)/G is quoted: 25812.807/500 = 51.63 Ohm
        assert f"{R_K / g0:.4g} Ohm" in found[0].message
    assert check_conductance(res, "four") == []


def test_band_overlap_in_short_field_window():
    """Bands 145 1/T apart need >= 2 Hann lobes (2 x 2/range): a 25 mT window is too short."""
    b, g = ring_trace(500e-9, span=0.025, n=801, noise=0.0005)
    res = analyse(b, g, r_in=480e-9, r_out=520e-9)
    (f,) = check_bands(res)
    assert f.level == "warn" and "mT" in f.message
    need = float(f.message.split("at least ")[1].split(" mT")[0])
    gap = res.bands[2][0] - res.bands[1][1]
    assert need == pytest.approx(4 / gap * 1e3, rel=0.01)  # 2 lobes of 2/range: range = 4/gap
    b, g = ring_trace(500e-9)
    assert check_bands(analyse(b, g, r_in=480e-9, r_out=520e-9)) == []


def test_resistance_amplitude_hand_computed():
    # G = 2 e^2/h, dG = 0.01 e^2/h: dR = 0.01/4 x 25812.807 Ohm = 64.532 Ohm (hand-computed)
    assert resistance_amplitude(0.01, 2.0) == pytest.approx(0.01 / 4 * R_K, rel=1e-12)
    assert resistance_amplitude(0.01, 2.0) == pytest.approx(64.532, rel=1e-4)
    # linearised four-terminal: dR = dG R_ref^2, dG in S = 0.01/R_K
    assert resistance_amplitude(0.01, 0.0, reference_resistance=1000.0) == pytest.approx(
        0.01 / R_K * 1e6, rel=1e-12
    )
    with pytest.raises(ParameterError, match="conductance"):
        resistance_amplitude(0.01, 0.0)


@pytest.mark.parametrize(
    ("text", "kind", "si"),
    [
        ("10nA", "current", 1e-8),
        ("1.5 uA", "current", 1.5e-6),
        ("5nV/rtHz", "noise", 5e-9),
        ("5 nV/sqrtHz", "noise", 5e-9),
        ("1Hz", "bandwidth", 1.0),
        ("300mHz", "bandwidth", 0.3),
        ("2K", "energy", 2 * constants.k),
        ("0.17meV", "energy", 0.17e-3 * constants.e),
    ],
)
def test_parse_quantity(text, kind, si):
    assert parse_quantity(text, kind) == pytest.approx(si, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "kind"), [("10", "current"), ("5nV", "noise"), ("-1Hz", "bandwidth")]
)
def test_parse_quantity_refuses(text, kind):
    with pytest.raises(ParameterError, match=kind):
        parse_quantity(text, kind)


def test_detectability_hand_computed():
    # I = 10 nA, e_n = 5 nV/sqrt(Hz), 1 Hz: v_n = 5 nV per reading. dR = 64.53 Ohm -> 645 nV.
    # Band 40 1/T of a 1000 1/T Nyquist range: in-band noise 5 nV x sqrt(0.04) = 1 nV.
    d = detectability(
        {"he": 64.532, "h2e": 0.002},
        current=10e-9,
        noise_density=5e-9,
        bandwidth=1.0,
        band_widths={"he": 40.0, "h2e": 40.0},
        nyquist=1000.0,
    )
    assert d["noise_rms_per_reading_V"] == pytest.approx(5e-9, rel=1e-12)
    assert d["he"]["signal_rms_V"] == pytest.approx(645.32e-9, rel=1e-12)
    assert d["he"]["noise_in_band_V"] == pytest.approx(1e-9, rel=1e-12)
    assert d["he"]["snr_in_band"] == pytest.approx(645.32, rel=1e-12)
    assert d["he"]["exceeds_noise"] and not d["h2e"]["exceeds_noise"]  # 20 pV < 3 nV


def test_group_by_temperature_and_l_phi_series():
    assert group_by_temperature([0.5, None, 0.2, 0.5000001, 1.0]) == [[2], [0, 3], [4]]
    # A(T) = 0.4 exp(-L/L_phi), L_phi = 2 um (T/1K)^-1, L = pi r (r = 0.5 um): invented
    temps = [0.3, 0.3, 0.6, 1.0, 1.5, 2.0, None]
    length = math.pi * 0.5e-6
    rms = [0.4 * math.exp(-length * t / 2e-6) / math.sqrt(2) if t else 0.1 for t in temps]
    out = l_phi_from_series(temps, rms, [1e-4] * len(temps), radius=0.5e-6)
    assert [q["n_traces"] for q in out["points"]] == [2, 1, 1, 1, 1]
    assert out["n_traces_without_temperature"] == 1
    fit = out["fit"]
    scale = out["path_length_m"] / length  # whatever path-length convention fitting uses
    assert out["l_phi_ref_m"] == pytest.approx(2e-6 * scale, rel=1e-3)
    assert fit["values"]["p"] == pytest.approx(1.0, rel=1e-3)
    assert 0 < out["l_phi_ref_err_m"] < 0.01 * out["l_phi_ref_m"]
    assert "l_phi_convention" in out
    with pytest.raises(ParameterError, match="3 temperatures"):
        l_phi_from_series([0.3, 0.5], [0.1, 0.1], [1e-3, 1e-3], radius=0.5e-6)
