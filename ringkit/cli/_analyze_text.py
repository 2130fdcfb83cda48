"""Readable lines of ``ringkit analyze``: lab units, detectability, checks, L_phi(T) series."""

from __future__ import annotations

import math
from typing import Any

__all__ = ["lab_lines", "series_lines"]


def _num(x: float | None, fmt: str) -> str:
    return "n/a" if x is None or not math.isfinite(x) else format(x, fmt)


def lab_lines(rec: dict[str, Any]) -> list[str]:
    """dR/R lines, detectability verdicts and cross-check findings of one trace record."""
    lines: list[str] = []
    if "amplitude_he_ohm" in rec:
        lines.append(
            f"  in ohms         h/e dR rms {_num(rec['amplitude_he_ohm'], '.4g')} Ohm "
            f"({_num(rec['relative_he_percent'], '.3g')} % of R = "
            f"{_num(rec['mean_resistance_ohm'], '.5g')} Ohm), h/2e dR rms "
            f"{_num(rec['amplitude_h2e_ohm'], '.4g')} Ohm "
            f"({_num(rec['relative_h2e_percent'], '.3g')} %)"
        )
    det = rec.get("detectability")
    if det:
        for key, name in (("he", "h/e"), ("h2e", "h/2e")):
            d = det[key]
            verdict = "exceeds" if d["exceeds_noise"] else "does NOT exceed"
            lines.append(
                f"  {name:<5} at {det['current_A'] * 1e9:.3g} nA: "
                f"{_num(d['signal_rms_V'] * 1e9, '.3g')} nV rms {verdict} the noise floor "
                f"({_num(d['noise_in_band_V'] * 1e9, '.2g')} nV in band, S/N "
                f"{_num(d['snr_in_band'], '.3g')}; per reading "
                f"{_num(d['snr_per_reading'], '.2g')})"
            )
    for f in rec.get("checks", ()):
        lines.append(f"  check ({f['level']}): {f['message']}")
    return lines


def series_lines(s: dict[str, Any]) -> list[str]:
    """Table of amplitude and L_phi versus temperature and the fitted parameters."""
    fit = s["fit"]
    lines = [
        f"L_phi(T) from {len(s['points'])} temperatures (h/e, path length "
        f"{s['path_length_m'] * 1e6:.4g} um = pi x r, r = {s['radius_m'] * 1e9:.4g} nm; "
        f"thermal factor {s['thermal']}):",
        "  T (K)     A (e^2/h)          L_phi (um)        traces",
    ]
    for q, lp, le in zip(
        s["points"], s["lphi_at_points_m"], s["lphi_err_at_points_m"], strict=True
    ):
        lines.append(
            f"  {q['temperature_K']:<9.4g} {q['amplitude_e2h']:.4g} +- "
            f"{q['amplitude_err_e2h']:<8.2g} {lp * 1e6:.4g} +- {le * 1e6:<8.2g} {q['n_traces']}"
        )
    for name, value in fit["values"].items():
        err = fit["errors"].get(name, float("nan"))
        unit = fit["units"].get(name, "")
        if unit == "m":
            lines.append(f"  {name:<15} {value * 1e6:.4g} +- {err * 1e6:.2g} um")
        else:
            lines.append(f"  {name:<15} {value:.4g} +- {err:.2g} {unit}".rstrip())
    lines.append(f"  reduced chi2    {_num(fit['reduced_chi2'], '.3g')} ({fit['dof']} dof)")
    lines.append(f"  convention      {s['lphi_convention']}")
    if s.get("n_traces_left_out"):
        lines.append(
            f"  left out        {s['n_traces_left_out']} trace(s) (no temperature, refused "
            "by a check or not analysed)"
        )
    return lines
