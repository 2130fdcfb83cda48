"""Measured-data panel: per-file options, temperature series, cross-checks (issue 16 pts 2, 5).

References outside the panel: the rms of a sinusoid of amplitude A is A/sqrt(2) (closed form);
the invented series below is built here from A(T) = A0 exp(-pi r/L_phi(T)) with
L_phi = L_ref (T/1 K)^-p (the dephasing model and path-length convention of
docs/conventions.md), so the fit must return the L_ref and p put in. docs/panels.md,
"Measured-data panel".
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit.view.panels import MeasuredDataPanel

PERIOD = 3.0e-3  # T, invented
RADIUS = math.sqrt(constants.h / constants.e / PERIOD / math.pi)  # AB area = pi r^2


def _csv(amp=0.05) -> bytes:
    b = np.linspace(-0.05, 0.05, 2001)
    g = 15.0 + 20.0 * b + amp * np.cos(2 * np.pi * b / PERIOD)
    rows = "\n".join(f"{x * 1e3:.6f},{y:.9f}" for x, y in zip(b, g, strict=True))
    return f"B (mT),G (e^2/h)\n{rows}\n".encode()


def _series(l_ref=2.0e-6, p=0.5, a0=0.5, temps=(0.1, 0.3, 1.0, 3.0)) -> bytes:
    """INVENTED temperature series (one sweep per temperature, a temperature column)."""
    b = np.linspace(-0.05, 0.05, 1601)
    lines = ["B (mT)\tT (K)\tG (e^2/h)"]
    for t in temps:
        amp = a0 * math.exp(-math.pi * RADIUS / (l_ref * t ** (-p)))
        g = 10.0 + amp * np.cos(2 * np.pi * b / PERIOD)
        lines += [f"{x * 1e3:.6f}\t{t:g}\t{y:.10f}" for x, y in zip(b, g, strict=True)]
    return ("\n".join(lines) + "\n").encode()


def test_new_file_resets_per_file_options():
    """Issue 16 pt 2: the demo's 1200 Ohm series resistance must not carry over."""
    panel = MeasuredDataPanel()
    assert panel.load_demo()
    assert panel.load_controls["series_resistance"].value == 1200.0
    panel.controls["r_in"].value = 500.0
    panel.controls["r_out"].value = 800.0
    panel.load_controls["terminals"].value = "four"
    assert panel.load_bytes(_csv(), "mine.csv"), panel.message.value
    for key, default in panel.file_defaults.items():
        w = panel.load_controls.get(key) or panel.controls[key]
        assert w.value == default, key
    assert panel.load_controls["series_resistance"].value == 0.0
    res = panel.analysis.result
    assert res.amplitude_he_rms == pytest.approx(0.05 / math.sqrt(2), rel=0.03)  # A/sqrt(2)
    # an option changed for this file reloads it without resetting the others
    panel.load_controls["series_resistance"].value = 10.0
    assert panel.load_controls["series_resistance"].value == 10.0
    assert panel.load_bytes(_csv(), "mine.csv")  # same file again: the option stays
    assert panel.load_controls["series_resistance"].value == 10.0


def test_temperature_series_labels_and_l_phi_fit():
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_series(), "series.tsv"), panel.message.value
    labels = [lab for lab, _ in panel.trace_select.options]
    assert len(labels) == 4
    for lab, t in zip(labels, ("0.1", "0.3", "1", "3"), strict=True):
        assert f"{t} K" in lab.replace("T=", "T = ")
    assert panel.fit_series(), panel.message.value
    fit = panel.series
    np.testing.assert_allclose(fit.temperatures, [0.1, 0.3, 1.0, 3.0], rtol=1e-9)
    assert fit.fit["l_phi_ref_m"] == pytest.approx(2.0e-6, rel=0.03)
    assert fit.fit["fit"]["values"]["p"] == pytest.approx(0.5, abs=0.03)
    assert "L_phi" in panel.series_summary.value and "±" in panel.series_summary.value
    # too few temperatures: one line in the message area, no exception
    assert panel.load_bytes(_csv(), "single.csv")
    assert not panel.fit_series()
    msg = panel.message.value
    assert "L_phi(T) fit" in msg and "temperature" in msg and "Traceback" not in msg


def test_overlapping_bands_warn_in_panel():
    """Issue 16 pt 5: wide radii in a short window make the h/e and h/2e bands overlap."""
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_csv(), "mine.csv")
    assert "bands" not in panel.message.value
    panel.controls["r_in"].value = 0.45 * RADIUS * 1e9
    panel.controls["r_out"].value = 1.4 * RADIUS * 1e9
    assert "overlapping" in panel.message.value or "apart" in panel.message.value
