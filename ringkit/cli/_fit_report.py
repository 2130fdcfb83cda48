"""Outputs of ``ringkit fit``: ``fit.json``, ``report.md`` and ``figures/`` from a fit result.

:func:`fit_document` turns the fit result (``InverseFitResult.to_dict()`` of
:mod:`ringkit.analysis.inverse_fit`, or that dict itself), the measured records and the
device into the one ``fit.json`` document (format :data:`FIT_FORMAT`, keys in
docs/outlook-and-fit-usage.md, "fit.json"); :func:`write_outputs` writes it, the report and
the figures atomically. No parameter is written without its 68 % and 95 % intervals: a result
lacking them is refused (issue 13, "No fit is reported without its uncertainty").
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from ringkit._validation import ParameterError

__all__ = ["FIT_FORMAT", "fit_document", "write_outputs", "render_report"]

FIT_FORMAT = "ringkit-fit/1"
_UNITS = {"1": (1.0, ""), "m": (1e6, "µm"), "K": (1.0, "K"), "m^2": (1e12, "µm²"), "": (1.0, "")}


def _clean(v: Any) -> Any:
    """JSON-safe copy: numpy scalars/arrays to Python, NaN/inf to None."""
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if hasattr(v, "tolist"):
        return _clean(v.tolist())
    if isinstance(v, float) and not math.isfinite(v):
        return None if math.isnan(v) else ("inf" if v > 0 else "-inf")
    return v


def _interval(par: dict, name: str, key: str) -> list:
    iv = par.get(key)
    if not isinstance(iv, (list, tuple)) or len(iv) != 2 or any(x is None for x in iv):
        raise ParameterError(f"fit result parameter {name}", key, "needs a [low, high] interval")
    return list(iv)


def fit_document(result, traces, device, emulator=None, *, notes=(), grids=None) -> dict:
    """The ``fit.json`` document.

    Parameters
    ----------
    result : InverseFitResult or its ``to_dict()``
        ``parameters`` (``{name: {value, unit, ci68, ci95, constrained, ...}}``),
        ``unconstrained``, ``goodness``, ``overlay``, ``profiles``, ``l_phi_at_temperatures``
        (docs/inverse-fit.md, "API summary"). A constrained parameter without its 68 % and
        95 % intervals is refused.
    traces : list of dict
        Per-trace records of :func:`ringkit.cli.fit.measured_records`.
    device : RingDevice
    emulator : AmplitudeEmulator, optional
        Its ``describe()`` goes into the document.
    notes : sequence of str
        Warnings met on the way.
    grids : dict, optional
        Emulator grid (temperatures, L_phi values, mean free paths).
    """
    from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY
    from ringkit.view.panels.outlook import overlay_rows

    res = result.to_dict() if hasattr(result, "to_dict") else dict(result)
    params = res.get("parameters")
    if not isinstance(params, dict) or not params:
        raise ParameterError("fit result", "parameters", "must name at least one parameter")
    for name, par in params.items():
        if par.get("constrained", True):
            _interval(par, name, "ci68"), _interval(par, name, "ci95")
    measured, bands = overlay_rows(res.get("overlay") or {})
    doc = {
        "format": FIT_FORMAT,
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
        "conventions": {
            "amplitudes": "rms of the h/e and h/2e band content, e^2/h",
            "conductance": "two-terminal, e^2/h, spin degenerate",
            "intervals": "68 % and 95 % profile-likelihood intervals [low, high]; 'inf' or "
            "an emulator-range edge marks an open side",
            "model_bands": "16/50/84 % quantiles over disorder at the maximum likelihood",
        },
        "device": device.to_dict(),
        "traces": list(traces),
        "measured": measured,
        "parameters": params,
        "t_ref_K": res.get("t_ref_K"),
        "l_phi_at_temperatures": res.get("l_phi_at_temperatures", []),
        "unconstrained": list(res.get("unconstrained", [])),
        "goodness_of_fit": res.get("goodness", {}),
        "model_bands": bands,
        "profiles": res.get("profiles", {}),
        "notes": list(dict.fromkeys([*notes, *res.get("warnings", [])])),
        "emulator_grid": grids or {},
        "fit_info": res.get("info", {}),
    }
    if emulator is not None and hasattr(emulator, "describe"):
        doc["emulator"] = emulator.describe()
    return _clean(doc)


def _fmt(value: Any, unit: str) -> str:
    if value is None:
        return "n/a"
    if isinstance(value, str):  # "inf": an open side
        return value
    scale, shown = _UNITS.get(unit, (1.0, unit))
    return f"{value * scale:.4g}" + (f" {shown}" if shown else "")


def render_report(doc: dict, figures: list[str]) -> str:
    """Markdown report of a ``fit.json`` document."""
    from ringkit.study.report import LAB_CAUTION

    lines = ["# ringkit fit", "", f"*{LAB_CAUTION}*", ""]
    geo = doc["device"]["geometry"]
    r_in, r_out = geo.get("r_in"), geo.get("r_out")
    if r_in is not None and r_out is not None:
        name = doc["device"]["material"].get("name", "")
        lines += [f"Device: ring of inner radius {1e9 * r_in:.4g} nm and outer radius "
                  f"{1e9 * r_out:.4g} nm, {name}.", ""]  # fmt: skip
    lines += ["## Measured traces", "", "| file | trace | T (K) | source | points |",
              "|---|---|---|---|---|"]  # fmt: skip
    for r in doc["traces"]:
        lines.append(f"| {Path(r['file']).name} | {r['label']} | {r['temperature_K']:.4g} | "
                     f"{r['temperature_source']} | {r['n_points']} |")  # fmt: skip
    lines += ["", "## Measured amplitudes and the model at the fit (16/50/84 %)", "",
              "| T (K) | h/e rms (e²/h) | model h/e | h/2e rms (e²/h) | model h/2e | "
              "mean G (e²/h) | model G |", "|---|---|---|---|---|---|---|"]  # fmt: skip
    for m, b in zip(doc["measured"], doc["model_bands"], strict=True):
        cells = [f"{m['temperature_K']:.4g}"]
        for short, key in (("he", "amplitude_he"), ("h2e", "amplitude_h2e"),
                           ("g", "mean_conductance")):  # fmt: skip
            cells.append(f"{_num(m[f'{key}_e2h'])} ± {_num(m[f'{key}_err_e2h'], digits=2)}")
            cells.append("/".join(_num(b[f"{short}_{q}"], digits=3) for q in ("q16", "q50", "q84")))
        lines.append("| " + " | ".join(cells) + " |")
    lines += ["", "## Parameters", "", "An open side (≤ low, high (open)) is the edge of the "
              "emulator's range, not a measured bound.", "",
              "| parameter | value | 68 % interval | 95 % interval |",
              "|---|---|---|---|"]  # fmt: skip
    for name, p in doc["parameters"].items():
        u = p.get("unit", "")
        lo68, hi68 = p.get("ci68") or (None, None)
        lo95, hi95 = p.get("ci95") or (None, None)
        lo, hi = ("≤ " if p.get("open_low") else ""), (" (open)" if p.get("open_high") else "")
        lines.append(f"| {name} | {_fmt(p['value'], u)} | {_fmt(lo68, u)} – {_fmt(hi68, u)} | "
                     f"{lo}{_fmt(lo95, u)} – {_fmt(hi95, u)}{hi} |")  # fmt: skip
    un = doc.get("unconstrained") or []
    if doc.get("t_ref_K") is not None:
        lines += ["", f"l_phi_ref is L_phi at T_ref = {doc['t_ref_K']:.4g} K; L_phi ∝ T^-p."]
    per_t = doc.get("l_phi_at_temperatures") or []
    if per_t:
        lines += ["", "| T (K) | L_phi | 68 % interval | 95 % interval |", "|---|---|---|---|"]
        for e in per_t:
            lo68, hi68 = e.get("ci68") or (None, None)
            lo95, hi95 = e.get("ci95") or (None, None)
            lines.append(f"| {e['temperature_K']:.4g} | {_fmt(e.get('value'), 'm')} | "
                         f"{_fmt(lo68, 'm')} – {_fmt(hi68, 'm')} | "
                         f"{_fmt(lo95, 'm')} – {_fmt(hi95, 'm')} |")  # fmt: skip
    lines += ["", "Not constrained by these data: " + (", ".join(un) if un else "none") + "."]
    gof = doc.get("goodness_of_fit") or {}
    if gof:
        lines += ["", "## Goodness of fit", ""]
        lines += [f"- {k}: {v:.4g}" if isinstance(v, float) else f"- {k}: {v}"
                  for k, v in gof.items()]  # fmt: skip
        lines += ["- contact coupling: " + str((doc.get("fit_info") or {}).get(
            "contact_coupling", "not fitted"))]  # fmt: skip
    if doc.get("notes"):
        lines += ["", "## Notes", ""] + [f"- {n}" for n in doc["notes"]]
    if figures:
        lines += ["", "## Figures", ""] + [f"![{Path(f).stem}](figures/{Path(f).name})"
                                          for f in figures]  # fmt: skip
    lines += ["", f"L_phi convention: {doc.get('l_phi_convention', '')}", ""]
    return "\n".join(lines)


def _num(v: float | None, scale: float = 1.0, digits: int = 4) -> str:
    return "n/a" if v is None else f"{v * scale:.{digits}g}"


def write_figures(directory: Path, doc: dict) -> list[Path]:
    """``amplitudes_vs_T.png`` (measured vs model bands) and ``profiles.png``."""
    from ringkit.study.checkpoint import atomic_write_bytes
    from ringkit.view.fit_plots import plot_fit_overlay, plot_profiles, usable_profiles
    from ringkit.view.panels.outlook import measured_overlay
    from ringkit.view.style import figure_to_png

    directory.mkdir(parents=True, exist_ok=True)
    ax = plot_fit_overlay(measured_overlay(doc))
    paths = [directory / "amplitudes_vs_T.png"]
    atomic_write_bytes(paths[0], figure_to_png(ax.figure))
    prof = usable_profiles(doc.get("profiles") or {})
    if prof:
        axes = plot_profiles(prof)
        paths.append(directory / "profiles.png")
        atomic_write_bytes(paths[1], figure_to_png(axes[0].figure))
    return paths


def write_outputs(out: Path, doc: dict) -> dict[str, Path]:
    """Write ``fit.json``, ``figures/*.png`` and ``report.md`` into ``out``."""
    from ringkit.study.checkpoint import atomic_write_bytes

    out.mkdir(parents=True, exist_ok=True)
    figs = write_figures(out / "figures", doc)
    text = json.dumps(doc, indent=1, allow_nan=False) + "\n"
    atomic_write_bytes(out / "fit.json", text.encode())
    atomic_write_bytes(out / "report.md", render_report(doc, [str(f) for f in figs]).encode())
    files = {"fit.json": out / "fit.json", "report.md": out / "report.md"}
    files.update({f"figure: {f.name}": f for f in figs})
    return files
