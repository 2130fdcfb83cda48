"""Background removal: exactness of the one-period boxcar and the effect of each method.

References outside the code under test: the boxcar transfer function sin(pi f w)/(pi f w)
(closed form; docs/physics.md §12.3), the transfer of a discrete kernel sum_j k_j cos(2 pi f j d)
computed here, Savitzky-Golay coefficients and polynomial projections built here from dense
numpy least squares.
"""

from __future__ import annotations

import numpy as np
import pytest

from ringkit._validation import ParameterError
from ringkit.analysis import oscillation_spectrum, remove_background

P = 7.7366e-3  # T; h/e period of the Webb et al. ring at its mean radius (docs/physics.md §2.1)


def _osc(b):
    """h/e, h/2e and h/3e content with arbitrary phases."""
    return (
        0.3 * np.cos(2 * np.pi * b / P + 0.4)
        + 0.1 * np.cos(4 * np.pi * b / P + 1.1)
        + 0.05 * np.cos(6 * np.pi * b / P - 0.2)
    )


@pytest.mark.parametrize("samples_per_period", [40, 41])
def test_one_period_boxcar_leaves_he_and_h2e_intact(samples_per_period):
    b = -0.05 + np.arange(1200) * P / samples_per_period
    background = 50.0 + 30.0 * b  # linear: a symmetric kernel reproduces it exactly
    res = remove_background(b, _osc(b) + background, method="moving_average", period=P)
    v = res.valid
    # boxcar transfer sin(pi f w)/(pi f w) vanishes at f = n/w (closed form; docs/physics.md
    # §12.3, where a residual of 7e-17 was computed for this construction)
    assert np.max(np.abs(res.residual[v] - _osc(b)[v])) < 1e-12
    taps = res.parameters["kernel_taps"]
    assert res.n_valid == b.size - taps + 1
    assert np.all(np.isnan(res.residual[~v]))
    # a curved background leaves only a constant (curvature * w^2/24 for a boxcar)
    curved = remove_background(b, _osc(b) - 200.0 * b**2, method="moving_average", period=P)
    diff = curved.residual[v] - _osc(b)[v]
    assert np.ptp(diff) < 1e-9


def test_boxcar_transfer_matches_closed_form():
    b = np.arange(2000) * P / 40
    res = remove_background(b, np.zeros_like(b), method="moving_average", period=P)
    f = np.array([0.5, 0.9, 1.0, 1.1, 1.5, 2.0, 3.0]) / P
    gain = res.residual_gain(f)
    # discrete trapezoid kernel of 41 taps, transfer computed independently
    d = P / 40
    k = np.full(41, 1 / 40)
    k[[0, -1]] = 1 / 80
    j = np.arange(-20, 21)
    h_discrete = np.array([np.sum(k * np.cos(2 * np.pi * fi * j * d)) for fi in f])
    assert gain == pytest.approx(1 - h_discrete, abs=1e-9)
    # continuous boxcar sin(pi f w)/(pi f w): equal to O((f d)^2)
    assert gain == pytest.approx(1 - np.sinc(f * P), abs=3e-3)
    assert gain[[2, 5, 6]] == pytest.approx(1.0, abs=1e-12)  # n/w: exactly untouched


def test_boxcar_on_uneven_and_incommensurate_grids():
    rng = np.random.default_rng(5)
    for b in (np.linspace(0, 12 * P, 437), np.sort(rng.uniform(0, 12 * P, 900))):
        res = remove_background(b, _osc(b) + 20 * b, method="moving_average", period=P)
        v = res.valid
        err = res.residual[v] - _osc(b)[v]
        assert np.max(np.abs(err)) < 2e-3 * 0.3  # cubic-spline resampling error only


def test_savgol_interior_equals_independent_kernel():
    b = np.arange(4000) * P / 40
    rng = np.random.default_rng(2)
    y = _osc(b) + np.cumsum(rng.normal(size=b.size)) * 1e-3
    res = remove_background(b, y, method="savgol", window=5 * P, polyorder=3)
    wl = res.parameters["window_length"]
    assert wl == 201
    half = wl // 2
    # smoothing kernel = centre row of the least-squares cubic fit over the window
    x = np.arange(-half, half + 1)
    vander = np.vander(x, 4, increasing=True)
    kernel = np.linalg.pinv(vander)[0]
    ref = np.convolve(y, kernel[::-1], mode="valid")
    assert np.allclose(res.background[half:-half], ref, atol=1e-12)
    # documented effect: window 5 periods keeps 0.963 at 1/P (interior transfer)
    h1 = np.sum(kernel * np.cos(2 * np.pi * x / 40))
    assert 1 - h1 == pytest.approx(0.963, abs=1e-3)


def test_savgol_default_window_is_ten_periods_and_gains_documented():
    b = np.arange(100 * 40 + 1) * P / 40
    res = remove_background(b, np.zeros_like(b), method="savgol", period=P)
    assert res.parameters["window"] == pytest.approx(10 * P, rel=1e-3)
    g = res.residual_gain(np.array([1.0, 2.0, 0.9, 1.1]) / P)
    # module docstring numbers (100-period trace, polyorder 3, edges included)
    assert g == pytest.approx([1.009, 1.005, 0.987, 0.990], abs=2e-3)


def test_polynomial_removes_cubic_exactly_and_gain_is_projection():
    b = np.linspace(-0.1, 0.1, 2001)
    cubic = 3.0 - 2.0 * b + 40 * b**2 + 900 * b**3
    res = remove_background(b, cubic, method="polynomial", degree=3)
    assert np.max(np.abs(res.residual)) < 1e-10
    # gain of a cosine = 1 - <c, P c>/<c, c>, P the projector on cubics (dense QR here)
    q, _ = np.linalg.qr(np.vander((b - b.mean()) / np.ptp(b), 4))
    for periods in (10, 20, 40):
        f = periods / np.ptp(b)
        gains = []
        for c in (np.cos(2 * np.pi * f * b), np.sin(2 * np.pi * f * b)):
            gains.append(1 - c @ q @ (q.T @ c) / (c @ c))
        assert res.residual_gain(f) == pytest.approx(np.mean(gains), abs=1e-10)
    # documented: 0.990 (10 periods), 0.9975 (20), 0.9994 (40)
    assert res.residual_gain(10 / np.ptp(b)) == pytest.approx(0.990, abs=1e-3)
    assert res.residual_gain(20 / np.ptp(b)) == pytest.approx(0.9975, abs=3e-4)
    assert res.residual_gain(40 / np.ptp(b)) == pytest.approx(0.9994, abs=2e-4)


@pytest.mark.parametrize(
    ("method", "opts"),
    [
        ("polynomial", {"degree": 3}),
        ("polynomial", {"degree": 7}),
        ("savgol", {"period": P}),
        ("moving_average", {"period": P}),
    ],
)
def test_effect_on_amplitude_equals_reported_gain(method, opts):
    """Large smooth background (200x the oscillation); amplitude after removal = gain x A."""
    rng = np.random.default_rng(8)
    b = np.sort(rng.uniform(-0.15, 0.15, 4000))  # ~39 periods
    a, f0 = 0.05, 1.0 / P
    bg = 10.0 + 60.0 * b**2 - 80.0 * b**3 + 2.0 * np.exp(-((b / 0.05) ** 2))
    res = remove_background(b, bg + a * np.cos(2 * np.pi * f0 * b), method=method, **opts)
    v = res.valid
    sp = oscillation_spectrum(b[v], res.residual[v])
    measured = sp.band_rms((0.8 * f0, 1.2 * f0)) * np.sqrt(2)
    gain = res.residual_gain(f0)
    assert measured == pytest.approx(gain * a, rel=0.01)
    assert abs(gain - 1) < 0.02  # all defaults keep the h/e line within 2 % here


def test_errors_name_the_parameter():
    b = np.linspace(0, 0.1, 500)
    y = np.ones_like(b)
    with pytest.raises(ParameterError, match="period"):
        remove_background(b, y, method="moving_average")
    with pytest.raises(ParameterError, match="period"):
        remove_background(b, y, method="moving_average", period=0.2)
    with pytest.raises(ParameterError, match="window"):
        remove_background(b, y, method="savgol")
    with pytest.raises(ParameterError, match="degree"):
        remove_background(b, y, method="polynomial", degree=-1)
    with pytest.raises(ParameterError, match="method"):
        remove_background(b, y, method="spline")
