"""Cross-checks of an oscillation analysis: warn or refuse instead of a confident wrong answer.

Public API
----------
Finding(level, code, message, value)            one check outcome ("warn" or "refuse")
check_result(result, *, radii=None, terminals="two", quantity="G", series_resistance=0)
check_spectrum_peak, check_noise_floor, check_amplitude, check_conductance, check_bands
refusals(findings) -> list of the refusing findings

Each message names the value and the fix. The checks are plain functions of an
:class:`~ringkit.analysis.OscillationResult` so that ``ringkit analyze`` and the
measured-data panel give the same verdicts (docs/measured-data.md, "Cross-checks").

Thresholds (common practice, stated in the messages):

* a spectral line is *significant* when its power is at least
  :data:`ringkit.analysis.extract.MIN_PEAK_SIGNIFICANCE` times the noise floor;
* a line outside the given radii's bands that is :data:`OUTSIDE_FACTOR` times stronger than
  anything inside them means the radii are wrong;
* the cosine amplitude (sqrt(2) x band rms) cannot exceed the mean conductance (G >= 0);
* a series resistance above :data:`SERIES_FRACTION` of the measured R is warned, and rows
  with R <= R_s refuse (a value carried over from another device);
* two-terminal ring conductances outside ``PLAUSIBLE_G`` (e^2/h) are refused and outside
  ``TYPICAL_G`` warned (semiconductor rings carry a few e^2/h; metal rings with R of 10 to
  100 Ohm reach ~2600 e^2/h);
* the h/e and h/2e bands must be separated by two main-lobe half-widths of the window, or
  the h/e line leaks into the h/2e amplitude.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ringkit.units import E2H, PHI0

try:  # STATS owns extract.py; fall back to the documented value if the name moves
    from ringkit.analysis.extract import MIN_PEAK_SIGNIFICANCE
except ImportError:  # pragma: no cover
    MIN_PEAK_SIGNIFICANCE = 20.0

__all__ = [
    "Finding",
    "check_result",
    "check_spectrum_peak",
    "check_noise_floor",
    "check_amplitude",
    "check_conductance",
    "check_bands",
    "check_series_resistance",
    "refusals",
    "OUTSIDE_FACTOR",
    "PLAUSIBLE_G",
    "TYPICAL_G",
]

OUTSIDE_FACTOR = 4.0
PLAUSIBLE_G = (1e-6, 1e5)  # e^2/h: R from 26 GOhm down to 0.26 Ohm
TYPICAL_G = (1e-3, 100.0)  # e^2/h: R from 26 MOhm down to 258 Ohm
SERIES_FRACTION = 0.8  # series resistance above this fraction of the measured R is warned


@dataclass(frozen=True)
class Finding:
    """Outcome of one check: ``level`` "warn" or "refuse", a ``code`` and a message."""

    level: Literal["warn", "refuse"]
    code: str
    message: str
    value: float | None = None

    def as_dict(self) -> dict:
        return {"level": self.level, "code": self.code, "message": self.message}


def refusals(findings: list[Finding]) -> list[Finding]:
    """The findings that refuse the result."""
    return [f for f in findings if f.level == "refuse"]


def _radius_of(frequency: float) -> float:
    """Radius in m of a circle whose h/e line is at ``frequency`` (1/T)."""
    return math.sqrt(max(frequency, 0.0) * PHI0 / math.pi)


def check_spectrum_peak(result, radii: tuple[float, float] | None) -> list[Finding]:
    """With given radii: is the strongest line of the spectrum inside their bands?"""
    if radii is None or result.band_source != "geometry":
        return []
    sp = result.spectrum
    f, p = sp.frequency, sp.power
    nyq = 0.5 / result.field_step
    lo_f = max(4.0 / result.field_range, 2.0 * sp.lobe_halfwidth)
    search = (f > lo_f) & (f < nyq)
    if np.count_nonzero(search) < 3:
        return []
    m = result.band_margin + sp.lobe_halfwidth
    inside = np.zeros(f.size, dtype=bool)
    for lo, hi in result.bands.values():
        inside |= (f >= lo - m) & (f <= hi + m)
    out = search & ~inside
    if not np.any(out):
        return []
    k = int(np.argmax(np.where(out, p, -np.inf)))

    def band_max(n: int, margin: float) -> float:
        lo, hi = result.bands[n]
        sel = (f >= lo - margin) & (f <= hi + margin)
        return float(np.max(p[sel])) if np.any(sel) else 0.0

    p_he = band_max(1, result.band_margin)
    p_in = max(p_he, band_max(2, 0.0))
    sig = result.peak_significance if result.area_order == 1 else math.inf
    floor = p_he / sig if 0 < sig < math.inf else 0.0
    if not (p[k] > OUTSIDE_FACTOR * p_in and p[k] >= MIN_PEAK_SIGNIFICANCE * floor):
        return []
    fk = float(f[k])
    r_in, r_out = radii
    b1 = result.bands[1]
    return [
        Finding(
            "refuse",
            "peak-outside-band",
            f"the strongest line is at {fk:.4g} 1/T (h/e period {1e3 / fk:.4g} mT, radius "
            f"{_radius_of(fk) * 1e9:.4g} nm; or {_radius_of(fk / 2) * 1e9:.4g} nm if it is h/2e), "
            f"{p[k] / max(p_in, 1e-300):.3g}x stronger than anything in the h/e band "
            f"{b1[0]:.4g}-{b1[1]:.4g} 1/T of r_in = {r_in * 1e9:.4g} nm, r_out = "
            f"{r_out * 1e9:.4g} nm: check --r-in/--r-out (or omit them to use the dominant peak)",
            fk,
        )
    ]


def check_noise_floor(result) -> list[Finding]:
    """Is there a line above the noise floor in the band the area was taken from?"""
    sig = result.peak_significance
    if sig >= MIN_PEAK_SIGNIFICANCE:
        return []
    band = result.bands[result.area_order]
    name = "h/e" if result.area_order == 1 else "h/2e"
    fix = (
        "check --r-in/--r-out, the field window and the signal column"
        if result.band_source == "geometry"
        else "the trace may hold no Aharonov-Bohm oscillation (check the column and window)"
    )
    return [
        Finding(
            "refuse",
            "no-peak-above-noise",
            f"no line above the noise floor in the {name} band {band[0]:.4g}-{band[1]:.4g} "
            f"1/T: largest power is {sig:.3g}x the floor (< {MIN_PEAK_SIGNIFICANCE:g}, "
            f"common practice), so period {result.period_he * 1e3:.4g} mT and radius "
            f"{result.radius * 1e9:.4g} nm are not measured; {fix}",
            float(sig),
        )
    ]


def check_amplitude(result, series_resistance: float = 0.0) -> list[Finding]:
    """The cosine amplitude sqrt(2) x rms must not exceed the mean conductance."""
    g = result.mean_conductance
    hint = (
        f"series resistance {series_resistance:g} Ohm too large (it must be below the measured R)? "
        if series_resistance > 0
        else ""
    )
    if not g > 0:
        return [
            Finding(
                "refuse",
                "mean-conductance",
                f"mean conductance {g:.4g} e^2/h is not positive: {hint}check the signal "
                "column, its unit and the terminal configuration",
                float(g),
            )
        ]
    out = []
    for n in (1, 2):
        rms = result.amplitude_he_rms if n == 1 else result.amplitude_h2e_rms
        if math.isfinite(rms) and math.sqrt(2) * rms > g:
            out.append(
                Finding(
                    "refuse",
                    "amplitude-above-mean",
                    f"{'h/e' if n == 1 else 'h/2e'} amplitude sqrt(2) x {rms:.4g} = "
                    f"{math.sqrt(2) * rms:.4g} e^2/h "
                    f"exceeds the mean conductance {g:.4g} e^2/h (a conductance cannot "
                    f"oscillate below zero): {hint}check --series-resistance and --signal-unit",
                    float(rms),
                )
            )
    return out


def check_conductance(result, terminals: str = "two") -> list[Finding]:
    """Mean two-terminal G inside a plausible range for a ring (e^2/h)."""
    g = result.mean_conductance
    if terminals != "two" or not g > 0:
        return []
    r_ohm = 1.0 / (g * E2H)  # Ohm
    text = f"mean conductance {g:.4g} e^2/h (ring resistance {r_ohm:.4g} Ohm)"
    fix = "check --signal-unit (kOhm read as Ohm gives 1000x G) and --series-resistance"
    if not PLAUSIBLE_G[0] <= g <= PLAUSIBLE_G[1]:
        return [
            Finding(
                "refuse",
                "conductance-implausible",
                f"{text} is outside {PLAUSIBLE_G[0]:g}-{PLAUSIBLE_G[1]:g} e^2/h, implausible "
                f"for a two-terminal ring: {fix}",
                float(g),
            )
        ]
    if not TYPICAL_G[0] <= g <= TYPICAL_G[1]:
        return [
            Finding(
                "warn",
                "conductance-unusual",
                f"{text} is outside {TYPICAL_G[0]:g}-{TYPICAL_G[1]:g} e^2/h: semiconductor "
                "rings carry a few e^2/h and only metal rings (R of 10 to 100 Ohm) reach "
                f"hundreds; {fix}",
                float(g),
            )
        ]
    return []


def check_series_resistance(
    result, series_resistance: float, n_below: int = 0, n_points: int = 0
) -> list[Finding]:
    """A series resistance close to the measured R (or above some of it) is suspect.

    With ``G = 1/(R - R_s)`` the ring conductance changes by ``R_s/(R - R_s)`` percent per
    percent of R_s: above :data:`SERIES_FRACTION` of R the numbers mostly measure R_s (e.g.
    a value carried over from another device). Rows with ``R <= R_s`` (``n_below`` of
    ``n_points``, dropped by the loader) refuse the result.
    """
    if not series_resistance > 0 or not result.mean_conductance > 0:
        return []
    r_ring = 1.0 / (result.mean_conductance * E2H)
    frac = series_resistance / (r_ring + series_resistance)
    fix = "check that --series-resistance belongs to this device and cooldown"
    if n_below > 0:
        return [
            Finding(
                "refuse",
                "series-above-resistance",
                f"{n_below} of {n_points} rows have R <= series resistance "
                f"{series_resistance:g} Ohm: {fix}",
                float(series_resistance),
            )
        ]
    if frac > SERIES_FRACTION:
        return [
            Finding(
                "warn",
                "series-dominates",
                f"series resistance {series_resistance:g} Ohm is {100 * frac:.3g} % of the "
                f"measured R: G and the amplitudes change by {frac / (1 - frac):.3g} % per 1 % "
                f"of it; {fix}",
                float(frac),
            )
        ]
    return []


def check_bands(result) -> list[Finding]:
    """Warn when the h/e and h/2e bands are closer than the spectral resolution."""
    (lo1, hi1), (lo2, _) = result.bands[1], result.bands[2]
    lobe = result.spectrum.lobe_halfwidth
    gap = lo2 - hi1
    if gap >= 2 * lobe:
        return []
    need = result.field_range * 2 * lobe / gap if gap > 0 else math.inf
    fix = (
        f"a field window of at least {need * 1e3:.3g} mT (now {result.field_range * 1e3:.3g} mT)"
        if math.isfinite(need)
        else "narrower radii (r_out < sqrt(2) r_in) or the h/e amplitude alone"
    )
    return [
        Finding(
            "warn",
            "bands-overlap",
            f"h/e band {lo1:.4g}-{hi1:.4g} 1/T and h/2e band from {lo2:.4g} 1/T are "
            f"{'overlapping' if gap <= 0 else f'only {gap:.3g} 1/T apart'} (window main lobe "
            f"{lobe:.3g} 1/T): the h/2e amplitude includes leakage of the h/e line; use {fix}",
            float(gap),
        )
    ]


def check_result(
    result,
    *,
    radii: tuple[float, float] | None = None,
    terminals: str = "two",
    series_resistance: float = 0.0,
    n_below_series: int = 0,
    n_points: int = 0,
) -> list[Finding]:
    """All cross-checks of one analysed trace (see the module docstring).

    ``n_below_series``/``n_points``: rows of the file the loader dropped because R was not
    above the series resistance, and all rows.
    """
    return [
        *check_spectrum_peak(result, radii),
        *check_noise_floor(result),
        *check_amplitude(result, series_resistance),
        *check_series_resistance(result, series_resistance, n_below_series, n_points),
        *check_conductance(result, terminals),
        *check_bands(result),
    ]
