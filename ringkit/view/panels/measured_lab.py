"""Measured-data panel, lab units: h/e and h/2e amplitudes as dR (Ohm) and dR/R (%), and
whether they exceed the noise floor of a given current and voltage noise (no widgets here).

The numbers come from :mod:`ringkit.analysis.labunits` (``lab_amplitudes`` and
``detectability``) called as ``ringkit analyze`` calls them, so the panel and the CLI agree
(docs/measured-data.md, "Units and conversion factors"; docs/panels.md, "Measured-data panel").

Public API
----------
parse_lab_inputs(current, noise, bandwidth) -> (I, e_n, df) in SI, or None when all empty
lab_record(trace, result, current=None, noise_density=None, bandwidth=None) -> dict
lab_rows(record) -> list of (label, text)   rows for the panel's numbers table
"""

from __future__ import annotations

import re
from typing import Any

from ringkit._validation import ParameterError

__all__ = ["LAB_UNITS", "parse_lab_inputs", "lab_record", "lab_rows"]

#: Unit assumed for a bare number in each lab control.
LAB_UNITS = {"current": "nA", "noise": "nV/rtHz", "bandwidth": "Hz"}

_BARE = re.compile(r"\s*[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*")


def _quantity(text: str, kind: str) -> float:
    """SI value of a control's text: a bare number is in ``LAB_UNITS[kind]``, else the unit
    written (``"10nA"``, ``"5nV/rtHz"``, ``"1Hz"``); :func:`labunits.parse_quantity`."""
    from ringkit.analysis.labunits import parse_quantity

    text = str(text).strip()
    if _BARE.fullmatch(text):
        text += LAB_UNITS[kind]
    return parse_quantity(text, kind)


def parse_lab_inputs(current: str, noise: str, bandwidth: str) -> tuple[float, float, float] | None:
    """(current in A, noise density in V/sqrt(Hz), bandwidth in Hz) from the controls' text.

    All three empty means "no detectability" (None).

    Raises
    ------
    ParameterError
        Only some of the three given, a value that is not a positive number (with its unit
        or in the default unit of :data:`LAB_UNITS`).
    """
    texts = {"current": current, "noise": noise, "bandwidth": bandwidth}
    given = {k: str(v).strip() for k, v in texts.items() if str(v).strip()}
    if not given:
        return None
    missing = [k for k in texts if k not in given]
    if missing:
        raise ParameterError(
            missing[0], "(empty)", "give current, noise and bandwidth together (e.g. 10, 5, 1)"
        )
    return tuple(_quantity(given[k], k) for k in texts)  # type: ignore[return-value]


def lab_record(
    trace,
    result,
    current: float | None = None,
    noise_density: float | None = None,
    bandwidth: float | None = None,
) -> dict[str, Any]:
    """dR (Ohm), dR/R (%) and, with a current, the detectability of h/e and h/2e.

    Same rules as ``ringkit analyze``: empty for a conductance input without a current, or
    when the mean G is not positive. Band widths include the band margins; the Nyquist
    frequency is that of the field step (``0.5 / result.field_step``, 1/T).
    """
    from ringkit.analysis.labunits import detectability, lab_amplitudes

    if result.mean_conductance <= 0 or (trace.metadata.get("quantity") != "R" and current is None):
        return {}
    rec: dict[str, Any] = dict(lab_amplitudes(result, trace))
    if current is not None:
        widths = {
            key: result.bands[n][1] - result.bands[n][0] + 2 * result.band_margin
            for n, key in ((1, "he"), (2, "h2e"))
        }
        rec["detectability"] = detectability(
            {"he": rec["amplitude_he_ohm"], "h2e": rec["amplitude_h2e_ohm"]},
            current=current,
            noise_density=noise_density,
            bandwidth=bandwidth,
            band_widths=widths,
            nyquist=0.5 / result.field_step,
        )
    return rec


def lab_rows(record: dict[str, Any]) -> list[tuple[str, str]]:
    """Rows of the numbers table: dR rms (Ohm) and dR/R (%), then the noise verdicts."""
    rows = []
    for key, name in (("he", "h/e"), ("h2e", "h/2e")):
        if f"amplitude_{key}_ohm" in record:
            rows.append(
                (
                    f"{name} ΔR rms, ΔR/R",
                    f"{record[f'amplitude_{key}_ohm']:.3g} Ω, "
                    f"{record[f'relative_{key}_percent']:.3g} %",
                )
            )
    det = record.get("detectability")
    if det:
        rows.append(("noise per reading", f"{1e9 * det['noise_rms_per_reading_V']:.3g} nV rms"))
        for key, name in (("he", "h/e"), ("h2e", "h/2e")):
            d = det[key]
            verdict = "above" if d["exceeds_noise"] else "BELOW"
            rows.append(
                (
                    f"{name} vs noise",
                    f"{verdict} noise floor: {1e9 * d['signal_rms_V']:.3g} nV rms, "
                    f"S/N {d['snr_in_band']:.3g} in band (need {det['threshold']:g})",
                )
            )
    return rows
