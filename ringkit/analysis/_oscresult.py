"""Result type of :func:`ringkit.analysis.extract.extract_oscillations` (re-exported there)."""

from __future__ import annotations

from dataclasses import dataclass

from ringkit.analysis.background import BackgroundResult
from ringkit.analysis.spectrum import OscillationSpectrum

__all__ = ["OscillationResult"]


@dataclass(frozen=True)
class OscillationResult:
    """Oscillation content of one trace (all SI; amplitudes in signal units, e.g. e^2/h).

    Attributes
    ----------
    period_he, period_he_err : float
        h/e period and its uncertainty in T.
    frequency_he, frequency_he_err : float
        Centroid of the h/e band and its 1-sigma noise uncertainty in 1/T.
    frequency_he_spread : float
        Intrinsic rms width of the h/e band content in 1/T (spread, not an error).
    area, area_err : float
        Effective enclosed area ``frequency_he * h/e`` and its 1-sigma uncertainty (from the
        noise) in m^2.
    area_spread : float
        rms spread of the enclosed areas ``frequency_he_spread * h/e`` in m^2.
    radius, radius_err : float
        Effective radius ``sqrt(area/pi)`` and uncertainty in m.
    amplitude_he_rms, amplitude_he_pp, amplitude_h2e_rms, amplitude_h2e_pp : float
        Band rms and mean peak-to-peak amplitude of the h/e and h/2e content.
    relative_amplitude_he, relative_amplitude_h2e : float
        rms amplitude / mean conductance (NaN if the mean is not positive).
    noise_floor : float
        Mean noise power per spectral bin (signal units squared), ``median / ln 2``.
    noise_he_rms, noise_h2e_rms : float
        Expected noise-floor contribution to each band rms.
    mean_conductance : float
        Mean of the input signal (or the value passed in).
    bands : dict
        ``{1: (f_low, f_high), 2: (...)}`` in 1/T, before the main-lobe margin.
    band_margin : float
        Margin added on both sides of each band in 1/T.
    band_source : str
        ``"geometry"`` or ``"dominant peak"``.
    peak_significance : float
        Largest power over the noise floor in the band used for the area (>= 20 for a
        clear peak).
    area_order : int
        Band the area was taken from: 1 (h/e) or 2 (h/2e centroid / 2; used for
        ``dominant_order=2`` or when only the h/2e line is clear, e.g. ensemble averages).
    background_gain_he, background_gain_h2e : float
        Fraction of an oscillation at the band centroid kept by the background removal.
    n_points : int
        Points analysed (after background edges).
    field_range, field_step : float
        Analysed field span and effective data step in T.
    spectrum : OscillationSpectrum
    background : BackgroundResult
    notes : tuple of str
        Human-readable caveats (same text as the warnings emitted).
    """

    period_he: float
    period_he_err: float
    frequency_he: float
    frequency_he_err: float
    frequency_he_spread: float
    area: float
    area_err: float
    area_spread: float
    radius: float
    radius_err: float
    amplitude_he_rms: float
    amplitude_he_pp: float
    amplitude_h2e_rms: float
    amplitude_h2e_pp: float
    relative_amplitude_he: float
    relative_amplitude_h2e: float
    noise_he_rms: float
    noise_h2e_rms: float
    noise_floor: float
    mean_conductance: float
    bands: dict
    band_margin: float
    band_source: str
    peak_significance: float
    area_order: int
    background_gain_he: float
    background_gain_h2e: float
    n_points: int
    field_range: float
    field_step: float
    spectrum: OscillationSpectrum
    background: BackgroundResult
    notes: tuple[str, ...]

    @property
    def relative_amplitude(self) -> float:
        """h/e rms amplitude over the mean conductance (dimensionless)."""
        return self.relative_amplitude_he

    def as_dict(self) -> dict[str, object]:
        """Scalar results as a plain dict (floats, ints, strings, lists)."""
        skip = {"spectrum", "background", "bands", "notes"}
        out: dict[str, object] = {
            k: v for k, v in self.__dict__.items() if k not in skip and not k.startswith("_")
        }
        out["bands"] = {str(k): [float(x) for x in v] for k, v in self.bands.items()}
        out["notes"] = list(self.notes)
        return out
