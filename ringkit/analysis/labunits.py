"""Oscillation amplitudes in laboratory units and their detectability against noise.

Public API
----------
resistance_amplitude(delta_g, conductance, *, reference_resistance=None) -> ohm
lab_amplitudes(result, trace) -> dict        dR in Ohm and dR/R in % for h/e and h/2e
detectability(delta_r_rms, *, current, noise_density, bandwidth, ...) -> dict
parse_quantity(text, kind) -> float         "10nA", "5nV/rtHz", "1Hz", "2K", "0.2meV"

Conversions (docs/measured-data.md, "Units and conversion factors"):

* small-signal inverse: R = 1/G, so ``dR = dG / G^2``; with G in e^2/h and R in Ohm this
  is ``dR = (h/e^2) dG / G^2`` with h/e^2 = 25812.807 Ohm (von Klitzing constant,
  ``scipy.constants``). A series resistance does not change dR (it adds to R only).
  Linearised four-terminal data (``G = 1/R_ref - (R - R_ref)/R_ref^2``): ``dR = dG R_ref^2``.
* ``dR/R`` uses the mean *measured* resistance (ring + series, or the four-terminal R).
* Voltage: ``dV = I dR``. Noise of one reading: ``v_n = e_n sqrt(bandwidth)`` (e_n in
  V/sqrt(Hz), the equivalent noise bandwidth of the lock-in filter). White noise spreads
  over the spectrum up to the Nyquist frequency of the field step, so the share falling in
  a band of width ``w`` (1/T) is ``v_n sqrt(w / f_Nyquist)``. An oscillation *exceeds the
  noise floor* when its rms voltage is at least ``threshold`` (default 3, common practice)
  times that in-band noise; the per-reading ratio is reported too.
"""

from __future__ import annotations

import math
import re

import numpy as np

from ringkit._validation import ParameterError
from ringkit.units import E2H, K_B

__all__ = ["resistance_amplitude", "lab_amplitudes", "detectability", "parse_quantity"]

_PREFIX = {"": 1.0, "f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "m": 1e-3, "k": 1e3}
_KINDS = {
    "current": (r"A", "A", "10nA"),
    "noise": (r"V/(?:rt|sqrt|√)Hz", "V/sqrt(Hz)", "5nV/rtHz"),
    "bandwidth": (r"Hz", "Hz", "1Hz"),
    "voltage": (r"V", "V", "20nV"),
}
_EV = 1.602176634e-19  # J per eV (exact, SI 2019)


def parse_quantity(text: str, kind: str) -> float:
    """SI value of ``text`` such as ``"10nA"`` (current), ``"5nV/rtHz"`` (noise density),
    ``"1Hz"`` (bandwidth) or ``"2K"``/``"0.17meV"`` (kind ``"energy"``: J).

    Raises
    ------
    ParameterError
        Unknown kind, missing or wrong unit, non-finite or non-positive value.
    """
    m = re.fullmatch(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(\S*)\s*", str(text))
    if kind == "energy":
        example, unit_ok = "0.17meV or 2K", None
        if m:
            u = m[2]
            if u in ("K", "mK"):
                unit_ok = K_B * (1e-3 if u == "mK" else 1.0)
            elif u.endswith("eV") and u[:-2] in _PREFIX:
                unit_ok = _EV * _PREFIX[u[:-2]]
    elif kind in _KINDS:
        pattern, unit, example = _KINDS[kind]
        unit_ok = None
        if m:
            um = re.fullmatch(r"(f|p|n|u|µ|m|k)?" + pattern, m[2])
            if um:
                unit_ok = _PREFIX[um[1] or ""]
    else:
        raise ParameterError("kind", kind, f"must be one of {sorted([*_KINDS, 'energy'])}")
    if not m or unit_ok is None:
        raise ParameterError(kind, str(text), f"write a number with its unit, e.g. {example}")
    value = float(m[1]) * unit_ok
    if not (math.isfinite(value) and value > 0):
        raise ParameterError(kind, str(text), "must be finite and > 0")
    return value


def resistance_amplitude(
    delta_g: float | np.ndarray,
    conductance: float,
    *,
    reference_resistance: float | None = None,
) -> float | np.ndarray:
    """Resistance amplitude in Ohm of a conductance amplitude (small signal).

    Parameters
    ----------
    delta_g : float or array
        Conductance amplitude in e^2/h (rms, pp or cosine amplitude: the same kind comes out).
    conductance : float
        Mean ring conductance G in e^2/h (ignored for linearised four-terminal data).
    reference_resistance : float, optional
        R_ref in Ohm of the linearised four-terminal conversion (``dR = dG R_ref^2``).
    """
    dg_s = np.asarray(delta_g, dtype=float) * E2H
    if reference_resistance is not None:
        return dg_s * reference_resistance**2
    g_s = float(conductance) * E2H
    if not g_s > 0:
        raise ParameterError("conductance", conductance, "must be > 0", "e^2/h")
    return dg_s / g_s**2


def lab_amplitudes(result, trace) -> dict:
    """dR (Ohm, rms and pp) and dR/R (%) of the h/e and h/2e amplitudes of one trace.

    ``trace`` is a :class:`~ringkit.analysis.Trace` (its metadata give the series or
    reference resistance); ``result`` its :class:`~ringkit.analysis.OscillationResult`.
    """
    meta = trace.metadata
    ref = meta.get("reference_resistance")
    series = float(meta.get("series_resistance") or 0.0)
    g = np.asarray(trace.conductance, dtype=float)
    with np.errstate(divide="ignore"):
        r_meas = 2 * ref - ref**2 * g * E2H if ref is not None else 1.0 / (g * E2H) + series
    r_mean = float(np.mean(r_meas))
    g_mean = result.mean_conductance
    out = {"mean_resistance_ohm": r_mean, "series_resistance_ohm": series}
    for key in ("he", "h2e"):
        rms = getattr(result, f"amplitude_{key}_rms")
        pp = getattr(result, f"amplitude_{key}_pp")
        if g_mean > 0 or ref is not None:
            dr = float(resistance_amplitude(rms, g_mean, reference_resistance=ref))
            dpp = float(resistance_amplitude(pp, g_mean, reference_resistance=ref))
        else:
            dr = dpp = float("nan")
        out[f"amplitude_{key}_ohm"] = dr
        out[f"amplitude_{key}_pp_ohm"] = dpp
        out[f"relative_{key}_percent"] = 100.0 * dr / r_mean if r_mean > 0 else float("nan")
    return out


def detectability(
    delta_r_rms: dict[str, float],
    *,
    current: float,
    noise_density: float,
    bandwidth: float,
    band_widths: dict[str, float],
    nyquist: float,
    threshold: float = 3.0,
) -> dict:
    """Whether each oscillation exceeds the measurement noise (module docstring).

    Parameters
    ----------
    delta_r_rms : dict
        ``{"he": dR, "h2e": dR}`` rms amplitudes in Ohm.
    current : float
        Measurement current in A.
    noise_density : float
        Voltage noise density in V/sqrt(Hz).
    bandwidth : float
        Equivalent noise bandwidth of one reading in Hz.
    band_widths : dict
        ``{"he": w, "h2e": w}`` band widths in 1/T (including margins).
    nyquist : float
        Nyquist frequency of the field step, 1/T.
    threshold : float
        Required in-band signal-to-noise ratio.
    """
    v_noise = noise_density * math.sqrt(bandwidth)
    out: dict = {
        "current_A": current,
        "noise_density_V_per_rtHz": noise_density,
        "bandwidth_Hz": bandwidth,
        "noise_rms_per_reading_V": v_noise,
        "threshold": threshold,
    }
    for key, dr in delta_r_rms.items():
        v_sig = current * dr
        share = math.sqrt(min(1.0, max(band_widths[key], 0.0) / nyquist)) if nyquist > 0 else 1.0
        v_band = v_noise * share
        snr = v_sig / v_band if v_band > 0 else math.inf
        out[key] = {
            "signal_rms_V": v_sig,
            "noise_in_band_V": v_band,
            "snr_per_reading": v_sig / v_noise if v_noise > 0 else math.inf,
            "snr_in_band": snr,
            "exceeds_noise": bool(math.isfinite(v_sig) and snr >= threshold),
        }
    return out
