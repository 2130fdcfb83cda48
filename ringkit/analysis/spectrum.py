"""Oscillation spectra of magnetoconductance traces versus field (numpy/scipy only).

Public API
----------
oscillation_spectrum(field, signal, *, method="fft"|"lombscargle", window="hann", ...)
    -> :class:`OscillationSpectrum` (frequency in 1/T, cosine amplitude, power per bin).
ab_bands(r_in, r_out, orders=(1, 2)) -> {order: (f_low, f_high)} in 1/T.

Amplitude convention (pinned by tests)
--------------------------------------
A pure cosine ``A cos(2 pi f0 B + phi)`` produces

* ``amplitude`` = A at the bin nearest f0 (exactly A on a bin; off a bin lower by the
  window's scalloping loss, at most 15 % for Hann, 36 % for a rectangular window — use
  ``pad`` to interpolate the spectrum),
* ``phase`` = phi (referred to B = 0),
* ``band_rms(band)`` = A/sqrt(2) for any band that contains f0 (Parseval: the variance in the
  band, corrected for the window's power gain mean(w^2), docs/physics.md §12.4-12.5), on a
  uniform grid and on an uneven one (interpolated, or Lomb-Scargle).

``power`` holds the variance of the signal per frequency bin (signal units squared); with a
rectangular window and no padding, ``power[1:].sum()`` equals the variance of the signal.
The frequency axis is in 1/T (Fourier conjugate of the field); :attr:`~OscillationSpectrum.area`
and :attr:`~OscillationSpectrum.radius` convert it to the enclosed area ``f*h/e`` and the
radius ``sqrt(area/pi)`` of the h/e line.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import signal as _sig
from scipy.interpolate import CubicSpline

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import (
    UndersampledWarning,
    effective_step,
    is_uniform,
    validate_trace,
)
from ringkit.units import PHI0

__all__ = ["OscillationSpectrum", "oscillation_spectrum", "ab_bands", "window_properties"]


@functools.lru_cache(maxsize=32)
def _window_properties(window: str | tuple) -> tuple[float, float]:
    n, zp = 512, 64
    try:
        w = _sig.get_window(window, n, fftbins=False)
    except (ValueError, TypeError) as err:
        raise ParameterError("window", window, f"must be a scipy.signal window ({err})") from None
    spec = np.abs(np.fft.rfft(w, n * zp))
    rising = np.nonzero(np.diff(spec) > 0)[0]
    i_null = int(rising[0]) if rising.size else spec.size - 1
    g = np.arange(i_null + 1) / zp
    p = spec[: i_null + 1] ** 2
    rms = float(np.sqrt(np.sum(g**2 * p) / np.sum(p)))  # one-sided = two-sided (symmetric)
    return i_null / zp, rms


def window_properties(window: str | tuple = "hann") -> dict[str, float]:
    """Shape numbers of a scipy window, measured numerically (N = 512, symmetric).

    Returns
    -------
    dict
        ``lobe_halfwidth_bins`` (first null of the transform: 1 rectangular, 2 Hann),
        ``rms_width_bins`` (power-weighted rms width of the main lobe),
        ``coherent_gain`` (mean w) and ``power_gain`` (mean w^2).
    """
    lobe, rms = _window_properties(window)
    w = _sig.get_window(window, 512, fftbins=False)
    return {
        "lobe_halfwidth_bins": lobe,
        "rms_width_bins": rms,
        "coherent_gain": float(np.mean(w)),
        "power_gain": float(np.mean(w**2)),
    }


@dataclass(frozen=True)
class OscillationSpectrum:
    """One-sided spectrum of a trace versus field.

    Attributes
    ----------
    frequency : ndarray
        Frequency in 1/T (Fourier conjugate of B); the h/e line of area A is at A/(h/e).
    amplitude : ndarray
        Cosine amplitude in signal units (e^2/h for conductance), window-gain corrected.
    power : ndarray
        Variance per frequency bin in signal units squared (sum over a band = band rms^2).
    phase : ndarray
        Phase phi in rad of ``A cos(2 pi f B + phi)``, referred to B = 0.
    method, window : str
        ``"fft"`` or ``"lombscargle"``; window name.
    field_range : float
        Field span of the analysed data in T.
    field_step : float
        Uniform step of the FFT grid, or the effective (90th percentile) step of the data
        for Lomb-Scargle, in T.
    data_step : float
        Effective (90th percentile) step of the input data in T; sets :attr:`nyquist`.
    n_points : int
        Number of input samples.
    bin_width : float
        Natural frequency resolution 1/(N step) in 1/T.
    enbw : float
        Equivalent noise bandwidth of the window in 1/T.
    lobe_halfwidth : float
        Half-width of the window's main lobe in 1/T; bands are widened by this margin.
    lobe_rms_width : float
        rms width of the main lobe in 1/T (instrumental width of a single line).
    resampled : bool
        True if the data were interpolated onto a uniform grid.
    interpolation : str
        ``"cubic"``, ``"linear"`` or ``"none"``.
    window_power : tuple of ndarray or None
        Lomb-Scargle only: offsets g (1/T) and |W(g)|^2 of the spectral window of the
        actual samples (normalised to 1 at g = 0); None for the FFT (uniform grid).
    """

    frequency: np.ndarray
    amplitude: np.ndarray
    power: np.ndarray
    phase: np.ndarray
    method: str
    window: str
    field_range: float
    field_step: float
    data_step: float
    n_points: int
    bin_width: float
    enbw: float
    lobe_halfwidth: float
    lobe_rms_width: float
    resampled: bool
    interpolation: str
    window_power: tuple[np.ndarray, np.ndarray] | None = None

    @property
    def resolution(self) -> float:
        """Frequency resolution 1/(field range) in 1/T."""
        return 1.0 / self.field_range

    @property
    def nyquist(self) -> float:
        """Highest frequency the data sampling resolves, 1/(2 data_step), in 1/T."""
        return 0.5 / self.data_step

    @property
    def area(self) -> np.ndarray:
        """Enclosed area ``f*h/e`` in m^2 of an h/e line at each frequency."""
        return self.frequency * PHI0

    @property
    def radius(self) -> np.ndarray:
        """Effective radius ``sqrt(f*h/e/pi)`` in m of an h/e line at each frequency."""
        return np.sqrt(self.area / np.pi)

    def band_mask(self, band: tuple[float, float], *, margin: float | None = None) -> np.ndarray:
        """Boolean mask of the bins in ``[low - margin, high + margin]`` (1/T).

        ``margin`` defaults to :attr:`lobe_halfwidth`, so a line at a band edge is counted
        with its whole main lobe.
        """
        lo, hi = _check_band(band)
        m = self.lobe_halfwidth if margin is None else float(margin)
        return (self.frequency >= lo - m) & (self.frequency <= hi + m) & (self.frequency > 0)

    def band_rms(self, band: tuple[float, float], *, margin: float | None = None) -> float:
        """rms of the signal content in a band (signal units), via Parseval.

        A cosine of amplitude A inside the band gives A/sqrt(2) (Lomb-Scargle: exactly for a
        line at the band centre; the spectral window of uneven or gappy samples is
        integrated over the band width, ``window_power``). Returns NaN (with an
        :class:`UndersampledWarning`) when the band reaches above the Nyquist frequency of
        the data or above the last computed frequency.
        """
        lo, hi = _check_band(band)
        m = self.lobe_halfwidth if margin is None else float(margin)
        top = min(self.nyquist, float(self.frequency[-1]))
        if hi + m > top:
            warnings.warn(
                f"band {lo:.4g}-{hi:.4g} 1/T (+{m:.3g} margin) reaches above the highest "
                f"resolved frequency {top:.4g} 1/T (field step {self.data_step:.3g} T): "
                "no amplitude given",
                UndersampledWarning,
                stacklevel=2,
            )
            return float("nan")
        mask = self.band_mask(band, margin=m)
        if self.window_power is None:
            return float(np.sqrt(np.sum(self.power[mask])))
        # Uneven samples: normalise by the spectral window integrated over the band width,
        # so that a line at the band centre is recovered with its fringes and side lobes.
        g, win = self.window_power
        hw = min(0.5 * (hi - lo) + m, float(g[-1]))
        inside = g <= hw
        norm = 2.0 * float(np.trapezoid(win[inside], g[inside]))
        df = float(self.frequency[1] - self.frequency[0])
        return float(np.sqrt(np.sum(self.amplitude[mask] ** 2) / 2.0 * df / norm))

    def peak(self, band: tuple[float, float] | None = None) -> tuple[float, float]:
        """Frequency (1/T) and amplitude of the largest bin in ``band`` (whole axis if None).

        The frequency is refined by a parabola through the log-amplitudes of the three
        bins around the maximum (exact for a Gaussian line; within ~0.05 bin for Hann).
        """
        mask = self.frequency > 0 if band is None else self.band_mask(band, margin=0.0)
        idx = np.nonzero(mask)[0]
        if idx.size == 0:
            raise ParameterError("band", band, "contains no frequency bin of the spectrum", "1/T")
        k = int(idx[np.argmax(self.amplitude[idx])])
        f = float(self.frequency[k])
        if 0 < k < self.frequency.size - 1:
            a = np.log(np.maximum(self.amplitude[k - 1 : k + 2], 1e-300))
            den = a[0] - 2 * a[1] + a[2]
            if den < 0:
                f += 0.5 * (a[0] - a[2]) / den * (self.frequency[1] - self.frequency[0])
        return f, float(self.amplitude[k])

    def centroid(
        self, band: tuple[float, float], *, margin: float | None = None
    ) -> tuple[float, float]:
        """Power-weighted mean frequency and rms width (both 1/T) of the content in a band."""
        mask = self.band_mask(band, margin=margin)
        p, f = self.power[mask], self.frequency[mask]
        total = float(np.sum(p))
        if not total > 0:
            return float("nan"), float("nan")
        fc = float(np.sum(f * p) / total)
        return fc, float(np.sqrt(np.sum((f - fc) ** 2 * p) / total))


def _check_band(band: tuple[float, float]) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in band)
    except (TypeError, ValueError):
        raise ParameterError("band", band, "must be a pair (f_low, f_high)", "1/T") from None
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 <= lo <= hi):
        raise ParameterError("band", band, "must satisfy 0 <= f_low <= f_high", "1/T")
    return lo, hi


def ab_bands(
    r_in: float, r_out: float, orders: tuple[int, ...] = (1, 2)
) -> dict[int, tuple[float, float]]:
    """Frequency bands (1/T) of the h/(n e) oscillations of a ring of finite width.

    Paths enclose areas between ``pi r_in^2`` and ``pi r_out^2``, so the n-th band is
    ``[n pi r_in^2/(h/e), n pi r_out^2/(h/e)]`` (docs/physics.md §1.3). Order 1 is h/e, order
    2 is h/2e (AAS and second h/e harmonic).

    Parameters
    ----------
    r_in, r_out : float
        Inner and outer radius in m, ``0 < r_in <= r_out`` (equal for a thin ring).
    orders : tuple of int
        Harmonic orders n >= 1.
    """
    r_in = check_positive("r_in", r_in, "m")
    r_out = check_positive("r_out", r_out, "m")
    if r_out < r_in:
        raise ParameterError("r_out", r_out, f"must be >= r_in = {r_in:g} m", "m")
    out = {}
    for n in orders:
        if int(n) != n or n < 1:
            raise ParameterError("orders", orders, "must be integers >= 1")
        out[int(n)] = (n * np.pi * r_in**2 / PHI0, n * np.pi * r_out**2 / PHI0)
    return out


def _resample(
    field: np.ndarray, signal: np.ndarray, n: int, interpolation: str
) -> tuple[np.ndarray, np.ndarray]:
    grid = np.linspace(field[0], field[-1], n)
    if interpolation == "cubic":
        return grid, CubicSpline(field, signal)(grid)
    return grid, np.interp(grid, field, signal)


def _window_on(field: np.ndarray, window: str | tuple) -> np.ndarray:
    """Window evaluated at (possibly uneven) field positions."""
    ref = _sig.get_window(window, 2049, fftbins=False)
    u = (field - field[0]) / (field[-1] - field[0])
    return np.interp(u, np.linspace(0.0, 1.0, ref.size), ref)


def oscillation_spectrum(
    field: np.ndarray,
    signal: np.ndarray,
    *,
    method: Literal["fft", "lombscargle"] = "fft",
    window: str | tuple = "hann",
    interpolation: Literal["cubic", "linear"] = "cubic",
    n_resample: int | None = None,
    pad: int = 1,
    fmax: float | None = None,
    oversample: int = 4,
) -> OscillationSpectrum:
    """Amplitude spectrum of ``signal(field)`` with the convention of the module docstring.

    Parameters
    ----------
    field : array_like
        Field in T, strictly monotonic (uniform or uneven steps).
    signal : array_like
        Signal, e.g. conductance in e^2/h (background removed or not; the mean is removed).
    method : {"fft", "lombscargle"}
        ``"fft"``: uneven grids are interpolated onto a uniform grid first (fast; default).
        ``"lombscargle"``: generalised Lomb-Scargle least-squares fit per frequency with the
        window as sample weights (:func:`scipy.signal.lombscargle`, floating mean); better
        for data with gaps, O(N x M) cost.
    window : str or tuple
        Any :func:`scipy.signal.get_window` name; ``"boxcar"`` for none.
    interpolation : {"cubic", "linear"}
        Interpolant for uneven grids (fft only). Cubic keeps a cosine with >= 5 samples per
        period within 1 %; linear loses ``1 - sinc^2(f step)`` (3 % at 10 samples/period).
    n_resample : int, optional
        Points of the uniform grid (fft, uneven input); default ``len(field)``.
    pad : int
        Zero-padding factor (fft) to interpolate the spectrum; does not change band rms.
    fmax : float, optional
        Highest frequency in 1/T (lombscargle); default the Nyquist frequency of the data.
    oversample : int
        Frequency points per natural bin 1/(field range) (lombscargle).

    Returns
    -------
    OscillationSpectrum

    Raises
    ------
    ParameterError
        Invalid arrays (non-finite, not strictly monotonic, fewer than 8 points) or options.

    References
    ----------
    N. R. Lomb, Astrophys. Space Sci. 39, 447 (1976), doi:10.1007/bf00648343;
    M. Zechmeister, M. Kürster, Astron. Astrophys. 496, 577 (2009) (generalised LS; from
    memory). Window gains: F. J. Harris, Proc. IEEE 66, 51 (1978) (from memory).
    """
    b, s = validate_trace(field, signal)
    check_choice("method", method, ("fft", "lombscargle"))
    check_choice("interpolation", interpolation, ("cubic", "linear"))
    if int(pad) != pad or pad < 1:
        raise ParameterError("pad", pad, "must be an integer >= 1")
    lobe_bins, rms_bins = _window_properties(window)
    data_step = effective_step(b)
    frange = float(b[-1] - b[0])
    wname = window if isinstance(window, str) else repr(window)
    if method == "fft":
        uniform = is_uniform(b)
        if uniform:
            grid, y = b, s
        else:
            n = len(b) if n_resample is None else int(n_resample)
            if n < 8:
                raise ParameterError("n_resample", n_resample, "must be >= 8")
            grid, y = _resample(b, s, n, interpolation)
        n = grid.size
        step = float((grid[-1] - grid[0]) / (n - 1))
        w = _sig.get_window(window, n, fftbins=False)
        x = y - np.sum(w * y) / np.sum(w)
        spec = np.fft.rfft(w * x, n * int(pad))
        freq = np.fft.rfftfreq(n * int(pad), step)
        one_sided = np.full(freq.size, 2.0)
        one_sided[0] = 1.0
        if (n * pad) % 2 == 0:
            one_sided[-1] = 1.0
        amp = one_sided * np.abs(spec) / np.sum(w)
        power = one_sided * np.abs(spec) ** 2 / (n * np.sum(w**2) * pad)
        phase = np.angle(spec) - 2 * np.pi * freq * grid[0]
        bin_width = 1.0 / (n * step)
        enbw = bin_width * np.mean(w**2) / np.mean(w) ** 2
        return OscillationSpectrum(
            frequency=freq,
            amplitude=amp,
            power=power,
            phase=np.angle(np.exp(1j * phase)),
            method=method,
            window=wname,
            field_range=frange,
            field_step=step,
            data_step=data_step,
            n_points=len(b),
            bin_width=bin_width,
            enbw=float(enbw),
            lobe_halfwidth=lobe_bins * bin_width,
            lobe_rms_width=rms_bins * bin_width,
            resampled=not uniform,
            interpolation="none" if uniform else interpolation,
        )

    # Lomb-Scargle: weighted least-squares cosine fit per frequency (scipy, amplitude mode).
    if int(oversample) != oversample or oversample < 1:
        raise ParameterError("oversample", oversample, "must be an integer >= 1")
    bin_width = 1.0 / frange
    top = 0.5 / data_step if fmax is None else check_positive("fmax", fmax, "1/T")
    df = bin_width / int(oversample)
    freq = np.arange(1, int(np.floor(top / df)) + 1) * df
    if freq.size < 2:
        raise ParameterError("fmax", fmax, "must exceed two frequency steps", "1/T")
    w = _window_on(b, window)
    if np.count_nonzero(w > 0) < 3:
        raise ParameterError("window", window, "leaves fewer than 3 samples with weight > 0")
    keep = w > 0
    ls = _sig.lombscargle(
        b[keep],
        s[keep],
        2 * np.pi * freq,
        normalize="amplitude",
        weights=w[keep],
        floating_mean=True,
    )
    amp = np.abs(ls)
    # Spectral window |W(g)|^2 = |sum w e^{-2 pi i g B}|^2/(sum w)^2 of the actual samples
    # (gaps make fringes and side lobes). Its integral over +-2 main lobes is the nominal
    # equivalent noise bandwidth for `power`; band_rms integrates it over the band width.
    g_max = min(max(40.0 * lobe_bins * bin_width, 0.5 * freq[-1]), float(freq[-1]))
    g = np.arange(0.0, g_max + 0.25 * df, 0.5 * df)[:8001]
    bc = b - 0.5 * (b[0] + b[-1])
    win = np.empty(g.size)
    for i in range(0, g.size, 500):
        ph = np.exp(-2j * np.pi * np.outer(g[i : i + 500], bc))
        win[i : i + 500] = np.abs(ph @ w) ** 2 / np.sum(w) ** 2
    nominal = g <= 2.0 * lobe_bins * bin_width
    enbw = float(2.0 * np.trapezoid(win[nominal], g[nominal]))
    power = amp**2 / 2.0 * df / enbw
    return OscillationSpectrum(
        frequency=freq,
        amplitude=amp,
        power=power,
        phase=-np.angle(ls),
        method=method,
        window=wname,
        field_range=frange,
        field_step=data_step,
        data_step=data_step,
        n_points=len(b),
        bin_width=bin_width,
        enbw=enbw,
        lobe_halfwidth=lobe_bins * bin_width,
        lobe_rms_width=rms_bins * bin_width,
        resampled=False,
        interpolation="none",
        window_power=(g, win),
    )
