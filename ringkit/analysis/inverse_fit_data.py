"""Measured amplitudes per temperature for the inverse fit, and their derivation from traces.

:class:`MeasuredAmplitudes` holds, at one temperature, the h/e rms, h/2e rms and mean G of one
ring (e^2/h) with their 1-sigma measurement errors and the noise-floor contributions of the
bands. :func:`measured_amplitudes_from_traces` derives them with the existing analysis
(:func:`ringkit.analysis.extract.extract_oscillations`: band rms with the unbiased noise floor,
mean G, effective area), grouping traces of equal temperature
(:func:`ringkit.analysis.tseries.group_by_temperature`).

Measurement error of a band rms ``r`` (docs/inverse-fit.md, "Measurement noise"): with noise
rms ``n`` in the band (``noise_*_rms``) spread over ``K`` independent spectral bins, the band
power is ``r^2 = a^2 + n^2 + 2 a n x + noise fluctuation``; ``var(r^2) = (2 a^2 n^2 + n^4)/K``
(Gaussian noise, chi-square bins) and ``var(r) = var(r^2)/(4 r^2)``. The model adds ``n^2`` to
its amplitudes in power (the bias), the fit adds ``var(r)`` (the fluctuation).
The error of the mean G is ``sqrt(floor/2)`` (white noise: variance = floor x N/2 bins).

Public API
----------
MeasuredAmplitudes, measured_amplitudes_from_traces
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError
from ringkit.units import PHI0

__all__ = ["MeasuredAmplitudes", "measured_amplitudes_from_traces"]

#: Fewest h/e periods in a trace (extract_oscillations warns below four periods).
MIN_PERIODS = 4.0


def _finite(name: str, value, *, allow_zero: bool = True) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(name, value, "must be a real number") from None
    if not math.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        raise ParameterError(name, value, "must be finite and >= 0", "e^2/h")
    return v


@dataclass(frozen=True)
class MeasuredAmplitudes:
    """Amplitudes of one ring at one temperature (e^2/h; errors are 1-sigma).

    Attributes
    ----------
    temperature : float
        K (> 0). Missing (None/NaN) is refused with a ParameterError naming it.
    he_rms, h2e_rms, mean_g : float
        h/e band rms, h/2e band rms (as measured, noise floor included), mean conductance.
    he_rms_err, h2e_rms_err, mean_g_err : float
        Measurement errors (noise fluctuation; see the module docstring).
    he_noise_rms, h2e_noise_rms : float
        Noise-floor contribution to each band rms (added to the model in power).
    area, area_err : float
        Effective area and its error in m^2 (NaN when not from traces).
    n_traces : int
    notes : tuple of str
    """

    temperature: float
    he_rms: float
    h2e_rms: float
    mean_g: float
    he_rms_err: float = 0.0
    h2e_rms_err: float = 0.0
    mean_g_err: float = 0.0
    he_noise_rms: float = 0.0
    h2e_noise_rms: float = 0.0
    area: float = math.nan
    area_err: float = math.nan
    n_traces: int = 1
    notes: tuple = ()

    def __post_init__(self) -> None:
        t = self.temperature
        if t is None or not isinstance(t, (int, float, np.floating)) or not math.isfinite(t):
            raise ParameterError("temperature", t, "missing: every amplitude set needs T in K")
        if t <= 0:
            raise ParameterError("temperature", t, "must be > 0", "K")
        for k in (
            "he_rms",
            "h2e_rms",
            "mean_g",
            "he_rms_err",
            "h2e_rms_err",
            "mean_g_err",
            "he_noise_rms",
            "h2e_noise_rms",
        ):
            object.__setattr__(self, k, _finite(k, getattr(self, k)))
        object.__setattr__(self, "temperature", float(t))

    def to_dict(self) -> dict:
        out = {k: getattr(self, k) for k in self.__dataclass_fields__}
        out["notes"] = list(self.notes)
        return {k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in out.items()}


def _band_bins(res, order: int) -> float:
    lo, hi = res.bands[order]
    return max(1.0, (hi - lo + 2.0 * res.band_margin) * res.field_range)


def _rms_err(r: float, n: float, k: float) -> float:
    a2 = max(r * r - n * n, 0.0)
    var_p = (2.0 * a2 * n * n + n**4) / k
    return math.sqrt(var_p / (4.0 * max(r * r, n * n, 1e-300)))


def _one_trace(i, field, g, r_in, r_out, background, min_periods, bands):
    from ringkit.analysis._common import validate_trace
    from ringkit.analysis.extract import extract_oscillations

    b, s = validate_trace(field, g)
    f_lo, f_hi = math.pi * r_in**2 / PHI0, math.pi * r_out**2 / PHI0
    n_per = float(b[-1] - b[0]) * 0.5 * (f_lo + f_hi)
    if n_per < min_periods:
        raise ParameterError(
            f"traces[{i}]",
            f"{n_per:.3g} h/e periods",
            f"need >= {min_periods:g} h/e periods of this ring (field range >= "
            f"{min_periods / (0.5 * (f_lo + f_hi)):.4g} T)",
        )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # only the period of the dominant line is used here
        free = extract_oscillations(b, s, background=background)
    f_meas = 1.0 / free.period_he
    ok = any(f_lo * 0.98 <= f <= f_hi * 1.02 for f in (f_meas, 0.5 * f_meas))
    if not ok:
        raise ParameterError(
            "period",
            f"{free.period_he:.4g} T (trace {i})",
            f"must lie in the device's bracket [{1 / f_hi:.4g}, {1 / f_lo:.4g}] T "
            f"(r_in = {r_in:.4g} m, r_out = {r_out:.4g} m); wrong device or wrong field unit?",
            "T",
        )
    res = extract_oscillations(b, s, r_in=bands[0], r_out=bands[1], background=background)
    k1, k2 = _band_bins(res, 1), _band_bins(res, 2)
    h2e = res.amplitude_h2e_rms if math.isfinite(res.amplitude_h2e_rms) else math.nan
    return {
        "he": res.amplitude_he_rms,
        "h2e": h2e,
        "g": res.mean_conductance,
        "he_err": _rms_err(res.amplitude_he_rms, res.noise_he_rms, k1),
        "h2e_err": _rms_err(h2e, res.noise_h2e_rms, k2) if math.isfinite(h2e) else math.nan,
        "g_err": math.sqrt(max(res.noise_floor, 0.0) / 2.0),
        "he_noise": res.noise_he_rms,
        "h2e_noise": res.noise_h2e_rms,
        "area": res.area,
        "area_err": res.area_err,
        "notes": res.notes,
    }


def measured_amplitudes_from_traces(
    traces: Sequence[tuple[np.ndarray, np.ndarray]],
    temperatures: Sequence[float | None],
    *,
    device=None,
    r_in: float | None = None,
    r_out: float | None = None,
    background: str = "polynomial",
    min_periods: float = MIN_PERIODS,
    band_radii: tuple[float, float] | None = None,
) -> list[MeasuredAmplitudes]:
    """Per-temperature amplitudes of one ring from its G(B) traces.

    Parameters
    ----------
    traces : sequence of (field, conductance)
        Field in T, conductance in e^2/h (one ring; several traces per temperature are
        averaged: up/down sweeps).
    temperatures : sequence of float
        K, one per trace; a missing one (None/NaN) is a ParameterError naming it.
    device : RingDevice, optional
        Gives ``r_in``/``r_out`` (m) unless they are passed.
    background : str
        Background removal of :func:`extract_oscillations` (``"none"`` for flux-tube traces).
    min_periods : float
        Fewest h/e periods per trace (ParameterError naming the trace below it).
    band_radii : (float, float), optional
        Radii (m) of the h/e and h/2e extraction bands; default ``(r_in, r_out)``. Flux-tube
        traces (one line at the mean area) use narrow bands, e.g. ``(0.95 r, 1.05 r)``, as
        :func:`ringkit.transport.amplitude_stats.amplitude_statistics` does. The period check
        always uses ``r_in``/``r_out``.

    Returns
    -------
    list of MeasuredAmplitudes
        Sorted by temperature.

    Raises
    ------
    ParameterError
        Missing temperature; too few periods; a measured period outside the bracket of the
        inner/outer radius; mismatched lengths.
    """
    from ringkit.analysis.tseries import group_by_temperature

    if device is not None:
        r_in = device.geometry.r_in if r_in is None else r_in
        r_out = device.geometry.r_out if r_out is None else r_out
    if r_in is None or r_out is None:
        raise ParameterError("device", None, "give a device or r_in and r_out (m)")
    traces, temps = list(traces), list(temperatures)
    if len(traces) != len(temps) or not traces:
        raise ParameterError(
            "temperatures", f"{len(temps)} values", f"need one per trace ({len(traces)})"
        )
    for i, t in enumerate(temps):
        if t is None or not math.isfinite(float(t)) or float(t) <= 0:
            raise ParameterError(f"temperatures[{i}]", t, "missing: every trace needs T > 0 in K")
    bands = (float(r_in), float(r_out)) if band_radii is None else tuple(map(float, band_radii))
    per = [
        _one_trace(i, b, g, float(r_in), float(r_out), background, float(min_periods), bands)
        for i, (b, g) in enumerate(traces)
    ]
    out = []
    for idx in group_by_temperature([float(t) for t in temps]):
        rows = [per[i] for i in idx]
        n = len(rows)

        def avg(key, err_key=None, rows=rows, n=n):
            v = np.array([r[key] for r in rows], dtype=float)
            if err_key is None:
                return float(np.mean(v))
            e = np.array([r[err_key] for r in rows], dtype=float)
            var = float(np.mean(e**2)) / n + (float(np.var(v, ddof=1)) / n if n > 1 else 0.0)
            return math.sqrt(var)

        notes = tuple(x for r in rows for x in r["notes"])
        out.append(
            MeasuredAmplitudes(
                temperature=float(np.mean([float(temps[i]) for i in idx])),
                he_rms=avg("he"),
                h2e_rms=avg("h2e"),
                mean_g=avg("g"),
                he_rms_err=avg("he", "he_err"),
                h2e_rms_err=avg("h2e", "h2e_err"),
                mean_g_err=avg("g", "g_err"),
                he_noise_rms=avg("he_noise"),
                h2e_noise_rms=avg("h2e_noise"),
                area=avg("area"),
                area_err=avg("area", "area_err"),
                n_traces=n,
                notes=notes,
            )
        )
    return out
