"""Readable lines of ``ringkit analyze``: lab units, detectability, checks, L_phi(T) series."""

from __future__ import annotations

import math
from typing import Any

__all__ = ["clean_json", "trace_record", "summary_lines", "lab_lines", "series_lines"]


def _num(x: float | None, fmt: str) -> str:
    return "n/a" if x is None or not math.isfinite(x) else format(x, fmt)


def _si(x: float | None, unit: str) -> str:
    """``x`` with an SI prefix (p, n, u, m) and 3 significant digits, e.g. ``912 nV``."""
    if x is None or not math.isfinite(x):
        return "n/a"
    for factor, prefix in ((1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")):
        if abs(x) >= factor:
            return f"{x / factor:.3g} {prefix}{unit}"
    return f"{x / 1e-15:.3g} f{unit}"


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
                f"  {name:<5} at {_si(det['current_A'], 'A')}: {_si(d['signal_rms_V'], 'V')} "
                f"rms {verdict} the noise floor ({_si(d['noise_in_band_V'], 'V')} in band, S/N "
                f"{_num(d['snr_in_band'], '.3g')}; per reading {_num(d['snr_per_reading'], '.2g')})"
            )
    for f in rec.get("checks", ()):
        lines.append(f"  check ({f['level']}): {f['message']}")
    return lines


def series_lines(s: dict[str, Any]) -> list[str]:
    """Table of amplitude and L_phi versus temperature and the fitted parameters."""
    fit = s["fit"]
    kind = "joint h/e + h/2e fit" if fit.get("joint") else "h/e"
    lines = [
        f"L_phi(T) from {len(s['points'])} temperatures ({kind}, h/e path length "
        f"{s['path_length_m'] * 1e6:.4g} um = pi x r, r = {s['radius_m'] * 1e9:.4g} nm; "
        f"thermal factor {s['thermal']}):",
        "  T (K)     A (e^2/h)          L_phi (um)        traces",
    ]
    for q, lp, le in zip(
        s["points"], s["l_phi_at_points_m"], s["l_phi_err_at_points_m"], strict=True
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
        elif unit == "J":  # k_B = 1.380649e-23 J/K and e = 1.602176634e-19 C (SI exact)
            lines.append(
                f"  {name:<15} {value / 1.602176634e-25:.4g} +- {err / 1.602176634e-25:.2g} ueV "
                f"(k_B x {value / 1.380649e-23:.4g} K)"
            )
        else:
            lines.append(f"  {name:<15} {value:.4g} +- {err:.2g} {unit}".rstrip())
    lines.append(f"  reduced chi2    {_num(fit['reduced_chi2'], '.3g')} ({fit['dof']} dof)")
    if fit.get("unconstrained"):
        lines.append(
            f"  unconstrained   {', '.join(fit['unconstrained'])} (the data cannot fix them)"
        )
    lines.append(f"  convention      {s['l_phi_convention']}")
    if s.get("n_traces_left_out"):
        lines.append(
            f"  left out        {s['n_traces_left_out']} trace(s) (no temperature, refused "
            "by a check or not analysed)"
        )
    return lines


def clean_json(value: Any) -> Any:
    """Plain JSON values: numpy scalars to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def trace_record(index: int, trace, res, report, error: str | None) -> dict[str, Any]:
    """JSON record of one trace (the keys of the module docstring of ``analyze``)."""
    rec: dict[str, Any] = {
        "index": index,
        "label": trace.label,
        "direction": trace.direction,
        "temperature_K": trace.temperature,
        "n_points_trace": len(trace),
    }
    if error is not None:
        rec["error"] = error
        return rec
    trimmed = len(trace) - res.n_points
    rec.update(
        period_he_T=res.period_he,
        period_he_err_T=res.period_he_err,
        frequency_he_per_T=res.frequency_he,
        area_m2=res.area,
        area_err_m2=res.area_err,
        radius_m=res.radius,
        radius_err_m=res.radius_err,
        amplitude_he_e2h=res.amplitude_he_rms,
        amplitude_h2e_e2h=res.amplitude_h2e_rms,
        amplitude_he_pp_e2h=res.amplitude_he_pp,
        amplitude_h2e_pp_e2h=res.amplitude_h2e_pp,
        relative_amplitude_he=res.relative_amplitude_he,
        relative_amplitude_h2e=res.relative_amplitude_h2e,
        noise_he_rms_e2h=res.noise_he_rms,
        noise_h2e_rms_e2h=res.noise_h2e_rms,
        mean_conductance_e2h=res.mean_conductance,
        peak_significance=res.peak_significance,
        band_source=res.band_source,
        bands_per_T={"h/e": list(res.bands[1]), "h/2e": list(res.bands[2])},
        background=res.background.method if res.background is not None else "none",
        background_gain_he=res.background_gain_he,
        background_gain_h2e=res.background_gain_h2e,
        n_points_used=res.n_points,
        n_points_trimmed_background=trimmed,
        n_points_dropped=report.n_dropped + trimmed,
        notes=list(res.notes),
    )
    return rec


def summary_lines(rec: dict[str, Any]) -> list[str]:
    """Readable lines of one trace record."""
    head = f"trace {rec['index']}: {rec['label']} ({rec['n_points_trace']} points"
    if rec.get("temperature_K") is not None:
        head += f", T = {rec['temperature_K']:g} K"
    lines = [head + ")"]
    if "error" in rec:
        return [*lines, f"  not analysed: {rec['error']}"]

    def num(x: float | None, fmt: str) -> str:
        return "n/a" if x is None or not math.isfinite(x) else format(x, fmt)

    b1, b2 = rec["bands_per_T"]["h/e"], rec["bands_per_T"]["h/2e"]
    rel = rec["relative_amplitude_he"]
    lines += [
        f"  bands ({rec['band_source']}): h/e {b1[0]:.4g}-{b1[1]:.4g} 1/T, "
        f"h/2e {b2[0]:.4g}-{b2[1]:.4g} 1/T",
        f"  h/e period      {rec['period_he_T'] * 1e3:.5g} mT +- "
        f"{rec['period_he_err_T'] * 1e3:.2g} mT",
        f"  area            {rec['area_m2'] * 1e12:.5g} um^2 +- {rec['area_err_m2'] * 1e12:.2g}",
        f"  radius          {rec['radius_m'] * 1e6:.5g} um +- {rec['radius_err_m'] * 1e6:.2g}",
        f"  h/e amplitude   rms {num(rec['amplitude_he_e2h'], '.4g')} e^2/h, "
        f"pp {num(rec['amplitude_he_pp_e2h'], '.4g')} e^2/h, dG/G = "
        + ("n/a" if rel is None or not math.isfinite(rel) else f"{100 * rel:.3g} %"),
        f"  h/2e amplitude  rms {num(rec['amplitude_h2e_e2h'], '.4g')} e^2/h, "
        f"pp {num(rec['amplitude_h2e_pp_e2h'], '.4g')} e^2/h",
        f"  noise in bands  {num(rec['noise_he_rms_e2h'], '.2g')} / "
        f"{num(rec['noise_h2e_rms_e2h'], '.2g')} e^2/h rms; peak/floor "
        f"{num(rec['peak_significance'], '.3g')}",
        f"  points          {rec['n_points_used']} used, "
        f"{rec['n_points_trimmed_background']} trimmed by the background",
    ]
    return lines + lab_lines(rec)
