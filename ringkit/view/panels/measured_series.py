"""Temperature series of the measured-data panel: L_phi(T) from every loaded trace (no widgets).

series_l_phi(traces, options) -> SeriesFit
    Analyses each trace over its whole field range with the panel's analysis options
    (:func:`ringkit.view.panels.measured.analyze_trace`), then averages per temperature and fits
    L_phi(T) with :func:`ringkit.analysis.tseries.l_phi_from_series` (which uses
    :func:`ringkit.analysis.fitting.fit_l_phi_temperature`; errors are the fit's 1-sigma
    errors). The path length follows :mod:`ringkit.conventions` (h/e: ``L = pi r``) with the
    radius given in the options, else the median of the extracted effective radii.
trace_caption(index, trace) -> str
    Label of a trace in the panel's selector, with its temperature.

docs/panels.md, "Measured-data panel".
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ringkit._validation import ParameterError
from ringkit.view.panels.measured import AnalysisOptions, analyze_trace

__all__ = ["SeriesFit", "series_l_phi", "trace_caption"]


def trace_caption(index: int, trace) -> str:
    """``"<i>: <label> (T = ... K, N points)"`` (temperature added when the label lacks it)."""
    extra = []
    t = trace.temperature
    if t is not None and "T=" not in trace.label:
        extra.append(f"T = {t:.4g} K")
    extra.append(f"{len(trace)} points")
    return f"{index}: {trace.label} ({', '.join(extra)})"


@dataclass(frozen=True)
class SeriesFit:
    """L_phi(T) of a temperature series.

    Attributes
    ----------
    temperatures : ndarray
        Distinct temperatures in K (sorted).
    amplitudes, amplitude_errors : ndarray
        h/e cosine amplitude per temperature and its 1-sigma error, in e^2/h.
    l_phi, l_phi_errors : ndarray
        Fitted L_phi at those temperatures and 1-sigma errors, in m.
    radius : float
        Radius of the path length in m.
    fit : dict
        What :func:`ringkit.analysis.tseries.l_phi_from_series` returned.
    skipped : tuple of str
        Traces left out and why.
    """

    temperatures: np.ndarray
    amplitudes: np.ndarray
    amplitude_errors: np.ndarray
    l_phi: np.ndarray
    l_phi_errors: np.ndarray
    radius: float
    fit: dict
    skipped: tuple[str, ...] = ()


def series_l_phi(traces, options: AnalysisOptions | None = None) -> SeriesFit:
    """Fit L_phi(T) to the h/e amplitudes of ``traces`` (module docstring).

    Raises
    ------
    ParameterError
        Fewer than 3 temperatures with an h/e amplitude (message says how to get them).
    """
    from ringkit.analysis.tseries import l_phi_from_series

    opts = replace(options or AnalysisOptions(), field_min=None, field_max=None)
    temps, amps, noise, radii, skipped = [], [], [], [], []
    for tr in traces:
        if tr.temperature is None:
            skipped.append(f"{tr.label}: no temperature")
            continue
        try:
            res = analyze_trace(tr, opts).result
        except ValueError as exc:
            skipped.append(f"{tr.label}: {exc}")
            continue
        temps.append(float(tr.temperature))
        amps.append(float(res.amplitude_he_rms))
        noise.append(float(getattr(res, "noise_he_rms", math.nan)))
        radii.append(float(res.radius))
    if opts.r_in is not None:
        radius = 0.5 * (opts.r_in + opts.r_out)
    elif radii:
        radius = float(np.median(radii))
    else:
        raise ParameterError(
            "temperature series", 0, "no trace with a temperature could be analysed", ""
        )
    out = l_phi_from_series(temps, amps, noise, radius=radius)
    pts = out["points"]
    return SeriesFit(
        temperatures=np.array([q["temperature_K"] for q in pts]),
        amplitudes=np.array([q["amplitude_e2h"] for q in pts]),
        amplitude_errors=np.array([q["amplitude_err_e2h"] for q in pts]),
        l_phi=np.asarray(out["l_phi_at_points_m"], dtype=float),
        l_phi_errors=np.asarray(out["l_phi_err_at_points_m"], dtype=float),
        radius=radius,
        fit=out,
        skipped=tuple(skipped),
    )
