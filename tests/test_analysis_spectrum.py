"""Spectrum conventions of ringkit.analysis.spectrum against closed forms and Parseval.

Check values: a cosine A cos(2 pi f B + phi) must give amplitude A, phase phi and band rms
A/sqrt(2) (definition of the convention, docs/physics.md §12.4-12.5); window gains of Hann are
closed forms (mean w = 1/2, mean w^2 = 3/8 for N -> inf; ENBW 1.5 bins); band edges of the
Webb et al. ring are arithmetic from its (recalled) geometry.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis import (
    UndersampledWarning,
    ab_bands,
    oscillation_spectrum,
    window_properties,
)

PHI0 = constants.h / constants.e  # independent of ringkit.units on purpose


def _cos(b, a, f, phi=0.0):
    return a * np.cos(2 * np.pi * f * b + phi)


@pytest.mark.parametrize("window", ["hann", "boxcar", "hamming", "blackman"])
def test_on_bin_cosine_amplitude_phase_and_band_rms(window):
    n, step = 2000, 2.5e-4  # 0.5 T span
    b = -0.2 + step * np.arange(n)
    f0 = 260 / (n * step)  # exactly on bin 260 (130 1/T)
    a, phi = 0.37, 0.9
    sp = oscillation_spectrum(b, _cos(b, a, f0, phi) + 3.0, window=window)
    k = int(np.argmin(np.abs(sp.frequency - f0)))
    assert sp.frequency[k] == pytest.approx(f0, rel=1e-12)
    assert sp.amplitude[k] == pytest.approx(a, rel=1e-9)  # convention: cosine amplitude A
    # referred to B = 0; the negative-frequency image leaks ~1e-9 rad through the window
    assert sp.phase[k] == pytest.approx(phi, abs=1e-7)
    band = (f0 - 10 * sp.bin_width, f0 + 10 * sp.bin_width)
    tol = 1e-9 if window == "boxcar" else 1e-6  # Hann etc. leak ~1e-7 of power beyond 10 bins
    assert sp.band_rms(band) == pytest.approx(a / np.sqrt(2), rel=tol)
    assert not sp.resampled


def test_off_bin_cosine_band_rms_and_scalloping_bound():
    b = np.linspace(0.0, 0.6, 3001)
    a, f0 = 0.2, 129.26  # Webb mean-radius h/e frequency (docs/physics.md §2.1), off-bin
    sp = oscillation_spectrum(b, _cos(b, a, f0, 0.3))
    assert sp.band_rms((120.0, 140.0)) == pytest.approx(a / np.sqrt(2), rel=1e-4)
    f_peak, a_peak = sp.peak((110.0, 150.0))
    # Hann worst-case scalloping loss 1.42 dB = factor 0.849 (Harris, Proc. IEEE 66, 51
    # (1978), from memory)
    assert 0.849 * a <= a_peak <= a
    assert f_peak == pytest.approx(f0, abs=0.1 * sp.bin_width)
    padded = oscillation_spectrum(b, _cos(b, a, f0, 0.3), pad=8)
    assert padded.peak((110.0, 150.0))[1] == pytest.approx(a, rel=3e-3)
    assert padded.band_rms((120.0, 140.0)) == pytest.approx(a / np.sqrt(2), rel=1e-4)


@pytest.mark.parametrize("grid", ["jittered", "random"])
@pytest.mark.parametrize("method", ["fft", "lombscargle"])
def test_uneven_grid_cosine_band_rms(grid, method):
    rng = np.random.default_rng(7)
    n = 1500
    if grid == "jittered":
        b = np.linspace(-0.2, 0.2, n) + rng.uniform(-0.4, 0.4, n) * 0.4 / n
    else:
        b = np.sort(rng.uniform(-0.2, 0.2, n))
    a, f0 = 0.05, 80.0
    sp = oscillation_spectrum(b, _cos(b, a, f0, 1.0) + 2.0, method=method, fmax=200.0)
    tol = 2e-3 if grid == "jittered" else 1.5e-2  # random sampling adds an alias floor
    assert sp.band_rms((70.0, 90.0)) == pytest.approx(a / np.sqrt(2), rel=tol)
    assert sp.resampled == (method == "fft")


def test_lombscargle_exact_amplitude_and_phase_on_its_grid():
    rng = np.random.default_rng(11)
    b = np.sort(rng.uniform(0.0, 0.5, 900))
    span = b[-1] - b[0]
    sp0 = oscillation_spectrum(
        b, np.zeros_like(b) + 1e-3 * rng.normal(size=b.size), method="lombscargle", fmax=150.0
    )
    f0 = sp0.frequency[200]  # on the Lomb-Scargle frequency grid
    assert sp0.bin_width == pytest.approx(1 / span)
    a, phi = 0.12, -0.7
    sp = oscillation_spectrum(b, _cos(b, a, f0, phi) + 5.0, method="lombscargle", fmax=150.0)
    # a least-squares fit of a cosine at its own frequency is exact on any grid
    assert sp.amplitude[200] == pytest.approx(a, rel=1e-9)
    assert sp.phase[200] == pytest.approx(phi, abs=1e-9)


def test_lombscargle_with_gap_finds_line():
    """A 0.2 T hole in the sweep; Lomb-Scargle keeps the right peak (Lomb, Astrophys. Space
    Sci. 39, 447 (1976); docs/physics.md §12.4)."""
    rng = np.random.default_rng(3)
    b = np.sort(rng.uniform(-0.5, 0.5, 2000))
    b = b[(b < -0.1) | (b > 0.1)]
    y = _cos(b, 0.05, 80.0) + 0.02 * rng.normal(size=b.size)
    sp = oscillation_spectrum(b, y, method="lombscargle", fmax=200.0)
    f_peak, _ = sp.peak((5.0, 200.0))
    assert f_peak == pytest.approx(80.0, abs=0.5)


def test_parseval_rectangular_window():
    rng = np.random.default_rng(0)
    b = np.linspace(0, 1, 1001)
    y = rng.normal(size=b.size) + 0.3 * np.sin(2 * np.pi * 37 * b)
    for pad in (1, 4):
        sp = oscillation_spectrum(b, y, window="boxcar", pad=pad)
        assert np.sum(sp.power[1:]) == pytest.approx(np.var(y), rel=1e-12)
        assert sp.power[0] == pytest.approx(0.0, abs=1e-20)
    # Hann: statistically equal for white noise (many bins), within a few per cent
    sp = oscillation_spectrum(b, y, window="hann")
    assert np.sum(sp.power) == pytest.approx(np.var(y), rel=0.1)


def test_hann_window_numbers():
    # closed forms for N -> inf: mean w = 1/2, mean w^2 = 3/8, ENBW = 1.5 bins, first null
    # of the transform at 2 bins (docs/physics.md §12.4: 0.49988 and 1.5004 at N = 4096)
    wp = window_properties("hann")
    assert wp["coherent_gain"] == pytest.approx(0.5, rel=3e-3)
    assert wp["power_gain"] == pytest.approx(0.375, rel=3e-3)
    assert wp["lobe_halfwidth_bins"] == pytest.approx(2.0, abs=0.02)
    assert window_properties("boxcar")["lobe_halfwidth_bins"] == pytest.approx(1.0, abs=0.02)
    b = np.linspace(0, 1, 4096)
    sp = oscillation_spectrum(b, np.cos(2 * np.pi * 100 * b))
    assert sp.enbw / sp.bin_width == pytest.approx(1.5, rel=1e-3)


def test_frequency_axis_area_and_radius():
    # 1 um^2 <-> f = 241.7989 1/T (computed from h/e of scipy.constants; docs/physics.md §1.2)
    area = 1e-12
    f0 = area / PHI0
    assert f0 == pytest.approx(241.7989, rel=1e-6)
    b = np.linspace(0, 0.4, 4001)
    sp = oscillation_spectrum(b, np.cos(2 * np.pi * f0 * b), pad=16)
    k = int(np.argmax(sp.amplitude))
    assert sp.area[k] == pytest.approx(area, rel=sp.bin_width / 16 / f0 + 1e-12)
    assert sp.radius[k] == pytest.approx(np.sqrt(area / np.pi), rel=sp.bin_width / 16 / f0)
    assert np.allclose(sp.area, sp.frequency * PHI0, rtol=1e-15)


def test_ab_bands_webb_ring():
    # Webb et al., PRL 54, 2696 (1985): inner diameter 784 nm, width 41 nm (geometry from
    # memory); band edges are arithmetic from it (docs/physics.md §12.4): h/e 116.7-142.4,
    # h/2e 233.5-284.9 1/T
    bands = ab_bands(392e-9, 433e-9)
    assert bands[1] == pytest.approx((116.73, 142.42), rel=1e-3)
    assert bands[2] == pytest.approx((233.46, 284.84), rel=1e-3)
    assert bands[1][0] == pytest.approx(np.pi * 392e-9**2 / PHI0, rel=1e-14)
    assert ab_bands(1e-6, 1e-6, (3,))[3][0] == pytest.approx(3 * np.pi * 1e-12 / PHI0, rel=1e-14)
    with pytest.raises(ParameterError, match="r_out"):
        ab_bands(433e-9, 392e-9)
    with pytest.raises(ParameterError, match="r_in"):
        ab_bands(-1e-7, 392e-9)
    with pytest.raises(ParameterError, match="orders"):
        ab_bands(1e-7, 2e-7, (0,))


def test_band_above_nyquist_gives_nan_with_warning():
    b = np.linspace(0, 0.5, 251)  # step 2 mT: Nyquist 250 1/T
    sp = oscillation_spectrum(b, np.cos(2 * np.pi * 100 * b))
    with pytest.warns(UndersampledWarning, match="Nyquist|highest resolved"):
        assert np.isnan(sp.band_rms((240.0, 280.0)))
    assert sp.nyquist == pytest.approx(250.0)


def test_two_lines_separated():
    b = np.linspace(-0.3, 0.3, 6001)
    y = _cos(b, 0.1, 129.26) + _cos(b, 0.03, 258.52, 0.5)
    sp = oscillation_spectrum(b, y)
    bands = ab_bands(392e-9, 433e-9)
    assert sp.band_rms(bands[1]) == pytest.approx(0.1 / np.sqrt(2), rel=1e-4)
    assert sp.band_rms(bands[2]) == pytest.approx(0.03 / np.sqrt(2), rel=1e-4)


def test_invalid_input_messages():
    b = np.linspace(0, 1, 100)
    with pytest.raises(ParameterError, match="signal"):
        oscillation_spectrum(b, np.r_[np.nan, np.ones(99)])
    with pytest.raises(ParameterError, match="duplicate"):
        oscillation_spectrum(np.r_[b[:50], b[49:98]], np.ones(99))
    with pytest.raises(ParameterError, match="method"):
        oscillation_spectrum(b, np.ones(100), method="welch")
    with pytest.raises(ParameterError, match="window"):
        oscillation_spectrum(b, np.ones(100), window="no-such-window")
    # decreasing field is accepted (reversed), giving the same spectrum
    y = np.cos(2 * np.pi * 10 * b)
    s1, s2 = oscillation_spectrum(b, y), oscillation_spectrum(b[::-1], y[::-1])
    assert np.allclose(s1.amplitude, s2.amplitude)
