"""Oscillation analysis of simulated and measured magnetoconductance (numpy/scipy only).

This layer never imports kwant (nor matplotlib), so it also serves users who only analyse
measured data. Pipeline: :func:`load_traces` (measured files) -> :func:`remove_background`
-> :func:`oscillation_spectrum` -> :func:`extract_oscillations` (area, radius, h/e and h/2e
amplitudes) -> :func:`fit_l_phi_temperature` / :func:`fit_l_phi_size` (phase-coherence
length) -> :func:`predict_amplitudes` (amplitude versus ring size, beside simulations).

Public API
----------
Trace, LoadReport, LoadResult, TraceFormatError, load_traces          (:mod:`.traces`)
BackgroundResult, remove_background                                    (:mod:`.background`)
OscillationSpectrum, oscillation_spectrum, ab_bands, window_properties (:mod:`.spectrum`)
OscillationResult, extract_oscillations, band_filter                   (:mod:`.extract`)
FitResult, thermal_factor, fit_l_phi_temperature, fit_l_phi_size, l_phi_at (:mod:`.fitting`)
fit_l_phi_joint (h/e + h/2e temperature fit), UnconstrainedWarning       (:mod:`.fit_joint`)
predict_amplitudes                                                     (:mod:`.scaling`)
AnalysisWarning, ResolutionWarning, UndersampledWarning, FieldRangeError, SamplingError

Conventions: SI in and out (T, m, K, J); conductance in e^2/h; frequencies in 1/T (the h/e
line of an area A is at ``A/(h/e)``); amplitudes of a cosine ``A cos(2 pi f B + phi)`` are
quoted as A (spectrum), A/sqrt(2) (band rms) and 2A (peak-to-peak).
"""

from __future__ import annotations

from ringkit.analysis._common import (
    AnalysisWarning,
    FieldRangeError,
    ResolutionWarning,
    SamplingError,
    UndersampledWarning,
)
from ringkit.analysis.background import BackgroundResult, remove_background
from ringkit.analysis.extract import OscillationResult, band_filter, extract_oscillations
from ringkit.analysis.fit_joint import fit_l_phi_joint
from ringkit.analysis.fitting import (
    FitResult,
    UnconstrainedWarning,
    fit_l_phi_size,
    fit_l_phi_temperature,
    l_phi_at,
    thermal_factor,
)
from ringkit.analysis.scaling import predict_amplitudes
from ringkit.analysis.spectrum import (
    OscillationSpectrum,
    ab_bands,
    oscillation_spectrum,
    window_properties,
)
from ringkit.analysis.traces import LoadReport, LoadResult, Trace, TraceFormatError, load_traces

__all__ = [
    "AnalysisWarning",
    "ResolutionWarning",
    "UndersampledWarning",
    "FieldRangeError",
    "SamplingError",
    "Trace",
    "LoadReport",
    "LoadResult",
    "TraceFormatError",
    "load_traces",
    "BackgroundResult",
    "remove_background",
    "OscillationSpectrum",
    "oscillation_spectrum",
    "ab_bands",
    "window_properties",
    "OscillationResult",
    "extract_oscillations",
    "band_filter",
    "FitResult",
    "thermal_factor",
    "fit_l_phi_temperature",
    "fit_l_phi_size",
    "l_phi_at",
    "fit_l_phi_joint",
    "UnconstrainedWarning",
    "predict_amplitudes",
]
