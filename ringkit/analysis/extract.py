"""Extraction of the h/e and h/2e oscillations of one trace: area, radius, amplitudes.

Public API
----------
extract_oscillations(field, signal, *, r_in=None, r_out=None, ...) -> :class:`OscillationResult`
band_filter(field, signal, band, ...) -> (grid, filtered, envelope)

What is measured (conventions)
------------------------------
* Bands: from the ring's inner and outer radius (:func:`~ringkit.analysis.ab_bands`) when
  given; otherwise centred on the dominant spectral peak above ``min_frequency`` with a
  relative half-width ``band_halfwidth`` (default 0.1, a ring with w/r = 0.1), and the
  h/2e band at twice those frequencies. Each band is widened by the window's main-lobe
  half-width (less if the h/e and h/2e bands would overlap).
* Effective area ``A = f_c h/e`` with f_c the power-weighted centroid of the h/e band
  (noise floor subtracted); radius ``sqrt(A/pi)``. When only the h/2e line is clear (an
  ensemble-averaged trace, or ``dominant_order=2``) f_c is half the h/2e centroid
  (``area_order = 2``). Two separate numbers (``docs/physics.md``, "Centroid uncertainty"):

  - ``area_err`` (and ``frequency_he_err``, ``period_he_err``, ``radius_err``): the 1-sigma
    uncertainty of the effective-area *estimate* caused by the noise in the trace,
    propagated exactly from the periodogram statistics (depends on the signal-to-noise
    ratio and the field range; 0 for noise-free data, where the Hann-window centroid of a
    line is exact to < 1e-7 bin);
  - ``area_spread`` (``frequency_he_spread``): the intrinsic rms width of the band content
    (observed rms width with the window's own width removed in quadrature), i.e. the
    spread of the areas enclosed by the interfering paths -- a property of the ring, not
    an error bar.
* ``amplitude_*_rms``: rms of the band content (Parseval; a cosine of amplitude A gives
  A/sqrt(2)); ``amplitude_*_pp``: twice the mean envelope of the band-pass filtered trace
  (:func:`band_filter`) over the central half of the range (2A for a cosine of amplitude A;
  ``docs/physics.md``, "Oscillation amplitudes").
  ``relative_amplitude_*`` = rms / mean conductance.
* ``noise_floor``: mean noise power per bin, ``median / ln 2`` of the bins outside the bands
  (unbiased for Gaussian noise: a periodogram bin is exponentially distributed, chi-square
  with 2 degrees of freedom; ``docs/physics.md``, "Periodogram statistics").
  ``noise_*_rms``: rms that this floor contributes to each band, for judging the amplitudes.

Failure modes (never a wrong number)
------------------------------------
Field range shorter than one h/e period -> :class:`FieldRangeError`; fewer than four
periods -> :class:`ResolutionWarning`. h/e band above the Nyquist frequency of the data step
-> :class:`SamplingError`; h/2e band above it -> :class:`UndersampledWarning` and NaN h/2e
numbers. Fewer than 5 samples per period on an interpolated grid -> UndersampledWarning
(cubic interpolation loses up to 2.5 % at 4 samples per period); a gap in the field data
longer than half an h/e period with ``method="fft"`` -> UndersampledWarning (use
``method="lombscargle"``).
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_range
from ringkit.analysis._bandfilter import band_filter
from ringkit.analysis._common import (
    Described,
    FieldRangeError,
    ResolutionWarning,
    SamplingError,
    UndersampledWarning,
    effective_step,
    validate_trace,
)
from ringkit.analysis._noise import centroid_error, noise_floor
from ringkit.analysis._oscresult import OscillationResult
from ringkit.analysis.background import BackgroundResult, remove_background
from ringkit.analysis.spectrum import (
    OscillationSpectrum,
    _window_on,
    ab_bands,
    oscillation_spectrum,
)
from ringkit.units import PHI0

__all__ = ["OscillationResult", "extract_oscillations", "band_filter"]

#: Peak-to-floor power ratio below which the h/e peak is called unclear (common practice:
#: the largest of ~1000 pure-noise bins is ~10x their median).
MIN_PEAK_SIGNIFICANCE = 20.0


def _pp(field: np.ndarray, signal: np.ndarray, band: tuple[float, float], margin: float) -> float:
    _, _, env = band_filter(field, signal, band, margin=margin)
    return float(2.0 * np.nanmean(env))


def _warn(notes: list[str], message: str, category: type[Warning]) -> None:
    notes.append(message)
    warnings.warn(message, category, stacklevel=3)


def extract_oscillations(
    field: np.ndarray,
    signal: np.ndarray,
    *,
    r_in: float | None = None,
    r_out: float | None = None,
    background: Literal["polynomial", "savgol", "moving_average", "none"] = "polynomial",
    background_options: dict | None = None,
    method: Literal["fft", "lombscargle"] = "fft",
    window: str | tuple = "hann",
    dominant_order: int = 1,
    min_frequency: float | None = None,
    band_halfwidth: float = 0.1,
    mean_conductance: float | None = None,
) -> OscillationResult:
    """Effective area, radius and h/e, h/2e amplitudes of a magnetoconductance trace.

    Parameters
    ----------
    field : array_like
        Field in T, strictly monotonic, uniform or uneven steps.
    signal : array_like
        Conductance in e^2/h (or any signal; amplitudes come out in its units).
    r_in, r_out : float, optional
        Inner and outer radius of the ring in m; give both or neither. Without them the
        bands are located from the dominant peak.
    background : {"polynomial", "savgol", "moving_average", "none"}
        Background removal (:func:`~ringkit.analysis.remove_background`). The expected h/e
        period (1/centre of the h/e band) is passed as ``period``.
    background_options : dict, optional
        Extra keywords for :func:`~ringkit.analysis.remove_background` (``degree``,
        ``window``, ``periods``, ``period``, ...).
    method, window
        Spectrum options (:func:`~ringkit.analysis.oscillation_spectrum`).
    dominant_order : {1, 2}
        Without geometry: whether the dominant peak is the h/e line (1) or h/2e (2).
    min_frequency : float, optional
        Without geometry: lowest frequency searched for the peak in 1/T; default
        ``4/field range`` (at least four periods in the trace).
    band_halfwidth : float
        Without geometry: band half-width relative to the peak frequency.
    mean_conductance : float, optional
        Conductance for the relative amplitudes; default the mean of ``signal``.

    Returns
    -------
    OscillationResult

    Raises
    ------
    FieldRangeError
        The field range is shorter than one h/e period (or than four periods of the lowest
        searchable frequency without geometry).
    SamplingError
        The data step is too coarse for the h/e band (Nyquist).
    ParameterError
        Invalid input arrays or options.
    """
    b, s = validate_trace(field, signal)
    check_choice("background", background, ("polynomial", "savgol", "moving_average", "none"))
    check_range("band_halfwidth", band_halfwidth, 0.0, 0.45, inclusive=(False, True))
    if dominant_order not in (1, 2):
        raise ParameterError("dominant_order", dominant_order, "must be 1 (h/e) or 2 (h/2e)")
    if (r_in is None) != (r_out is None):
        raise ParameterError("r_in/r_out", (r_in, r_out), "give both radii or neither", "m")
    notes: list[str] = []
    frange = float(b[-1] - b[0])
    step = effective_step(b)
    nyq = 0.5 / step
    g_mean = float(np.mean(s)) if mean_conductance is None else float(mean_conductance)
    bg_opts = dict(background_options or {})

    def run(
        period: float | None, fmax: float | None = None
    ) -> tuple[BackgroundResult | None, OscillationSpectrum]:
        if background == "none":
            bgr = None
            bb, rr = b, s
        else:
            opts = dict(bg_opts)
            if period is not None:
                opts.setdefault("period", period)
            bgr = remove_background(b, s, method=background, **opts)
            bb, rr = bgr.field[bgr.valid], bgr.residual[bgr.valid]
        kw = {"fmax": fmax} if method == "lombscargle" else {}
        return bgr, oscillation_spectrum(bb, rr, method=method, window=window, **kw)

    if r_in is not None:
        bands = ab_bands(r_in, r_out, (1, 2))
        source = "geometry"
        f_center = 0.5 * sum(bands[1])
        if frange * f_center < 1.0:
            raise FieldRangeError(
                "field range",
                Described(f"{frange:.4g}"),
                f"must cover at least one h/e period {1 / f_center:.4g} T of a ring with "
                f"r_in = {r_in:g} m, r_out = {r_out:g} m",
                "T",
            )
        if bands[1][1] > nyq:
            raise SamplingError(
                "field step",
                Described(f"{step:.4g}"),
                f"must be below {0.5 / bands[1][1]:.4g} T to resolve the h/e band up to "
                f"{bands[1][1]:.4g} 1/T (Nyquist)",
                "T",
            )
        # Lomb-Scargle costs O(N M): stop a little above the h/2e band
        bgr, sp = run(1.0 / f_center, min(nyq, 1.25 * bands[2][1] + 8.0 / frange))
    else:
        source = "dominant peak"
        fmin = 4.0 / frange if min_frequency is None else float(min_frequency)
        if not fmin < nyq:
            raise FieldRangeError(
                "field range",
                Described(f"{frange:.4g}"),
                f"too short for the data step {step:.3g} T: the lowest searchable frequency "
                f"{fmin:.4g} 1/T (four periods) is above the Nyquist frequency {nyq:.4g} 1/T",
                "T",
            )
        first_bg = "polynomial" if background in ("savgol", "moving_average") else background
        if first_bg != background and "period" not in bg_opts:
            probe = _first_peak(b, s, first_bg, method, window, fmin, nyq)
            period = dominant_order / probe
        else:
            period = bg_opts.get("period")
        bgr, sp = run(period)
        f_peak = _search_peak(sp, fmin, nyq)
        f1 = f_peak / dominant_order
        bands = {n: (n * f1 * (1 - band_halfwidth), n * f1 * (1 + band_halfwidth)) for n in (1, 2)}
        if bands[1][1] > nyq:
            raise SamplingError(
                "field step",
                Described(f"{step:.4g}"),
                f"too coarse for an h/e band at {f1:.4g} 1/T (Nyquist {nyq:.4g} 1/T)",
                "T",
            )

    gap = float(np.max(np.diff(b)))
    if method == "fft" and gap > 0.5 / bands[1][1]:
        _warn(
            notes,
            f"gap of {gap:.3g} T in the field data (more than half an h/e period): the "
            "interpolated FFT loses amplitude across it; method='lombscargle' handles gaps",
            UndersampledWarning,
        )
    n_periods = frange * 0.5 * sum(bands[1])
    if n_periods < 4:
        _warn(
            notes,
            f"field range {frange:.4g} T holds only {n_periods:.1f} h/e periods: the band is "
            "barely separated from the background and its width is resolution-limited",
            ResolutionWarning,
        )
    margin = sp.lobe_halfwidth
    gap = bands[2][0] - bands[1][1]
    if gap <= 0:
        _warn(
            notes,
            "h/e and h/2e bands overlap (r_out > sqrt(2) r_in): their amplitudes mix",
            ResolutionWarning,
        )
        margin = 0.0
    elif 2 * margin > gap:
        margin = 0.5 * gap

    # Noise floor: mean noise power per bin (median / ln 2) between the lowest search
    # frequency and Nyquist, outside the bands.
    f = sp.frequency
    out = (f > max(4.0 / frange, 2 * sp.lobe_halfwidth)) & (f < min(nyq, f[-1]))
    for lo, hi in bands.values():
        out &= ~((f >= lo - 2 * margin) & (f <= hi + 2 * margin))
    floor = noise_floor(sp.power, out)

    def band_stats(n: int) -> tuple[float, float, float]:
        """Centroid, observed rms width (1/T) and peak significance of band n."""
        m = sp.band_mask(bands[n], margin=margin)
        if not np.any(m) or bands[n][1] + margin > nyq:
            return float("nan"), float("nan"), 0.0
        sig = float(np.max(sp.power[m]) / floor) if floor > 0 else float("inf")
        # clear line: unclipped weights (noise bins average to zero weight, no bias);
        # otherwise clipped ones, which keep the centroid inside the band
        p = sp.power[m] - floor
        if sig < MIN_PEAK_SIGNIFICANCE:
            p = np.maximum(p, 0.0)
        if not np.sum(p) > 0:
            p = sp.power[m]
        c = float(np.sum(f[m] * p) / np.sum(p))
        w = float(np.sqrt(max(np.sum((f[m] - c) ** 2 * p) / np.sum(p), 0.0)))
        return c, w, sig

    stats = {n: band_stats(n) for n in (1, 2)}
    order = dominant_order if source == "dominant peak" else 1
    if order == 1 and stats[1][2] < MIN_PEAK_SIGNIFICANCE and stats[2][2] >= MIN_PEAK_SIGNIFICANCE:
        order = 2
    fc_n, width_obs, significance = stats[order]
    fc = fc_n / order
    sigma_w = float(np.sqrt(max(width_obs**2 - sp.lobe_rms_width**2, 0.0))) / order
    bb = b if bgr is None else bgr.field[bgr.valid]
    rr = s - np.mean(s) if bgr is None else bgr.residual[bgr.valid]
    m_o = sp.band_mask(bands[order], margin=margin)
    if np.isfinite(fc) and np.any(m_o):
        sigma_f = (
            centroid_error(bb, rr, _window_on(bb, window), f[m_o], sp.power[m_o], floor) / order
        )
    else:
        sigma_f = float("nan")
    if stats[1][2] < MIN_PEAK_SIGNIFICANCE:
        _warn(
            notes,
            f"no clear h/e peak: largest band power is only {stats[1][2]:.1f}x the noise "
            f"floor (< {MIN_PEAK_SIGNIFICANCE:g})"
            + ("; area taken from the h/2e band" if order == 2 else ""),
            ResolutionWarning,
        )

    amp = {}
    for n in (1, 2):
        lo, hi = bands[n]
        mask = sp.band_mask(bands[n], margin=margin)
        noise = float(np.sqrt(floor * np.count_nonzero(mask)))
        if hi + margin > nyq:
            _warn(
                notes,
                f"h/{n}e band up to {hi:.4g} 1/T is above the Nyquist frequency {nyq:.4g} "
                f"1/T of the field step {step:.3g} T: h/{n}e amplitude not given (NaN)",
                UndersampledWarning,
            )
            amp[n] = (float("nan"), float("nan"), float("nan"))
            continue
        if sp.resampled and hi * step > 0.2:
            _warn(
                notes,
                f"fewer than 5 samples per period in the h/{n}e band (step {step:.3g} T): "
                "interpolated amplitudes may be low (2.5 % at 4 samples per period)",
                UndersampledWarning,
            )
        rms = sp.band_rms(bands[n], margin=margin)
        amp[n] = (rms, _pp(bb, rr, bands[n], margin), noise)

    gains = [float("nan"), float("nan")]
    if bgr is not None:
        for i, n in enumerate((1, 2)):
            if np.isfinite(amp[n][0]):
                gains[i] = float(bgr.residual_gain(n * fc if n == 2 else fc))
                if abs(gains[i] - 1) > 0.02:
                    _warn(
                        notes,
                        f"background removal ({background}) keeps {gains[i]:.3f} of an "
                        f"oscillation at the h/{n}e frequency: amplitudes are not corrected",
                        ResolutionWarning,
                    )

    area = fc * PHI0
    rel = (lambda a: a / g_mean) if g_mean > 0 else (lambda a: float("nan"))
    return OscillationResult(
        period_he=1.0 / fc,
        period_he_err=sigma_f / fc**2,
        frequency_he=fc,
        frequency_he_err=sigma_f,
        area=area,
        frequency_he_spread=sigma_w,
        area_err=sigma_f * PHI0,
        area_spread=sigma_w * PHI0,
        radius=float(np.sqrt(area / np.pi)),
        radius_err=float(np.sqrt(area / np.pi)) * 0.5 * sigma_f / fc,
        amplitude_he_rms=amp[1][0],
        amplitude_he_pp=amp[1][1],
        amplitude_h2e_rms=amp[2][0],
        amplitude_h2e_pp=amp[2][1],
        relative_amplitude_he=rel(amp[1][0]),
        relative_amplitude_h2e=rel(amp[2][0]),
        noise_he_rms=amp[1][2],
        noise_h2e_rms=amp[2][2],
        noise_floor=floor,
        mean_conductance=g_mean,
        bands=bands,
        band_margin=margin,
        band_source=source,
        peak_significance=significance,
        area_order=order,
        background_gain_he=gains[0],
        background_gain_h2e=gains[1],
        n_points=int(bb.size),
        field_range=frange,
        field_step=step,
        spectrum=sp,
        background=bgr,
        notes=tuple(notes),
    )


def _search_peak(sp: OscillationSpectrum, fmin: float, fmax: float) -> float:
    mask = (sp.frequency >= fmin) & (sp.frequency <= fmax)
    if np.count_nonzero(mask) < 3:
        raise FieldRangeError(
            "field range",
            sp.field_range,
            f"leaves fewer than 3 frequency bins between {fmin:.4g} and {fmax:.4g} 1/T",
            "T",
        )
    return sp.peak((float(sp.frequency[mask][0]), float(sp.frequency[mask][-1])))[0]


def _first_peak(
    field: np.ndarray,
    signal: np.ndarray,
    background: str,
    method: str,
    window: str | tuple,
    fmin: float,
    fmax: float,
) -> float:
    """Dominant frequency (1/T) between fmin and fmax after a first background pass."""
    if background == "none":
        bb, rr = field, signal
    else:
        bgr = remove_background(field, signal, method=background)
        bb, rr = bgr.field, bgr.residual
    return _search_peak(oscillation_spectrum(bb, rr, method=method, window=window), fmin, fmax)
