"""Outputs of a study: results netCDF, ``summary.json``, figures and a readable report.

Files written into the output directory ``DIR``:

``results.nc``
    xarray Dataset (netCDF4/HDF5 via h5netcdf). ``G[realization, fermi_energy,
    gate_potential, temperature, l_phi, B]`` in e^2/h on SI coordinates (T or Wb,
    J, K, m; ``l_phi = inf`` is the coherent ring), ``G_mean`` (ensemble average),
    the extracted periods, areas and amplitudes, and every study parameter in the attributes
    (``"section.key [unit]"``), plus the study file itself (``study_toml``).
``summary.json``
    Extracted periods, areas and amplitudes per condition (ensemble-averaged trace and
    statistics of the single realizations), JSON numbers in SI units, ``null`` for infinity.
``figures/``
    ``conductance``, ``spectra`` and ``amplitude`` figures (see :mod:`ringkit.study.figures`).
``report.md`` or ``report.html``
    Short report embedding the figures and listing every parameter.

API
---
build_dataset(plan, results, setup) -> xarray.Dataset
write_outputs(plan, results, out_dir, *, setup) -> dict of name -> Path
"""

from __future__ import annotations

import html
import io
import json
import math
import time
import warnings
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from ringkit._version import __version__
from ringkit.study.analyse import analyse_dataset, reference_area
from ringkit.study.checkpoint import UnitResult
from ringkit.study.checkpoint import atomic_write_bytes as _write_file
from ringkit.study.multiterminal import (
    leads_literal,
    resistance_report_blocks,
    resistance_variables,
)
from ringkit.study.plan import StudyPlan
from ringkit.study.quantities import format_quantity
from ringkit.study.schema import SCHEMA
from ringkit.study.setup import StudySetup

__all__ = ["build_dataset", "write_outputs", "RESULTS_NAME", "SUMMARY_NAME"]

_REALISED_COMMENT = (
    "measured on the device: h/e damping exp(-pi r/L_phi) of the probes over 16 energies "
    "around E_F (docs/probes.md 'Realised L_phi'); inf for the coherent ring; NaN = not "
    "measured (a unit computed before the calibration existed)"
)

RESULTS_NAME = "results.nc"
SUMMARY_NAME = "summary.json"

_UNITS = {
    "field": "T",
    "flux": "Wb",
    "energy": "J",
    "temperature": "K",
    "length": "m",
    "density": "m^-2",
    "mobility": "m^2/(V s)",
}


def _param_attrs(plan: StudyPlan) -> dict[str, Any]:
    """Every study parameter as a netCDF attribute ``"section.key [unit]"`` (SI values)."""
    attrs: dict[str, Any] = {}
    field_dim = "flux" if plan.field_name == "flux" else "field"
    for sec, (_doc, keys) in SCHEMA.items():
        for name, key in keys.items():
            value = plan.config[sec][name]
            if value is None:
                continue
            label = f"{sec}.{name}"
            if key.kind in ("quantity", "quantities"):
                dim = field_dim if len(key.dimensions) > 1 else key.dimensions[0]
                label += f" [{_UNITS[dim]}]"
                value = np.asarray(value, dtype=float) if key.kind == "quantities" else value
            elif key.kind in ("leads", "contacts"):
                value = leads_literal(value) if key.kind == "leads" else json.dumps(list(value))
            elif key.kind == "float" and name == "effective_mass":
                label += " [m_e]"
            if isinstance(value, bool):
                value = int(value)
            attrs[label] = value
    return attrs


def build_dataset(plan: StudyPlan, results: Mapping[str, UnitResult], setup: StudySetup):
    """Assemble the unit results into one xarray Dataset (see the module docstring).

    Parameters
    ----------
    plan : StudyPlan
    results : mapping uid -> UnitResult
        One result per unit of the plan.
    setup : StudySetup
        Derived device quantities (sites, lattice spacing, resolved Fermi energy, ...).

    Returns
    -------
    xarray.Dataset
    """
    import xarray as xr

    n_r, n_e, n_g, n_d = plan.shape
    n_t, n_b = len(plan.temperatures), len(plan.field)
    g = np.full((n_r, n_e, n_g, n_t, n_d, n_b), np.nan)
    n_energies = np.zeros((n_r, n_e, n_g, n_t, n_d), dtype=np.int64)
    t_error = np.full((n_r, n_e, n_g, n_t, n_d), np.nan)
    elapsed = np.zeros((n_r, n_e, n_g, n_d))
    realised = np.full((2, n_r, n_e, n_g, n_d), np.nan)  # L_phi realised and its error, m
    for unit in plan.units:
        res = results[unit.uid]
        r, e, gi, d = unit.index
        if math.isinf(unit.l_phi):
            realised[:, r, e, gi, d] = (math.inf, 0.0)
        elif "l_phi_realised_m" in res.info:
            realised[:, r, e, gi, d] = (
                res.info["l_phi_realised_m"],
                res.info["l_phi_realised_err_m"],
            )
        g[r, e, gi, :, d, :] = res.conductance
        n_energies[r, e, gi, :, d] = res.n_energies
        if "thermal_error_e2h" in res.info:
            t_error[r, e, gi, :, d] = res.info["thermal_error_e2h"]
        elapsed[r, e, gi, d] = res.elapsed
    fname = plan.field_name
    energies = [setup.fermi_energy if e is None else e for e in plan.fermi_energies]
    dims = ("realization", "fermi_energy", "gate_potential", "temperature", "l_phi")
    coords = {
        "realization": ("realization", np.arange(n_r), {"long_name": "realization index"}),
        "seed": ("realization", np.asarray(plan.seeds), {"long_name": "disorder seed"}),
        "fermi_energy": (
            "fermi_energy",
            np.asarray(energies, float),
            {"units": "J", "long_name": "Fermi energy"},
        ),
        "gate_potential": (
            "gate_potential",
            np.asarray(plan.gate_potentials, float),
            {
                "units": "J",
                "long_name": "gate potential energy",
                "arm": plan.config["sweep"]["gate_arm"],
            },
        ),
        "temperature": (
            "temperature",
            np.asarray(plan.temperatures, float),
            {"units": "K", "long_name": "temperature"},
        ),
        "l_phi": (
            "l_phi",
            np.asarray(plan.l_phi_values, float),
            {
                "units": "m",
                "long_name": "phase-coherence length L_phi",
                "comment": "inf = fully coherent (no dephasing probes)",
            },
        ),
        fname: (
            fname,
            plan.field,
            {"units": "T", "long_name": "magnetic field B along +z"}
            if fname == "B"
            else {"units": "Wb", "long_name": "Aharonov-Bohm flux through the hole"},
        ),
    }
    ds = xr.Dataset(
        {
            "G": (
                (*dims, fname),
                g,
                {"units": "e^2/h", "long_name": "two-terminal conductance (spin-degenerate)"},
            ),
            "G_mean": (
                (*dims[1:], fname),
                g.mean(axis=0),
                {"units": "e^2/h", "long_name": "ensemble-averaged conductance"},
            ),
            "n_thermal_energies": (
                dims,
                n_energies,
                {"long_name": "energies in the thermal average"},
            ),
            "thermal_error": (
                dims,
                t_error,
                {
                    "units": "e^2/h",
                    "long_name": "estimated error of the thermal average (largest over the "
                    "field points; 0 at T = 0)",
                },
            ),
            "compute_seconds": (
                ("realization", "fermi_energy", "gate_potential", "l_phi"),
                elapsed,
                {"units": "s", "long_name": "wall-clock time per work unit"},
            ),
            "l_phi_realised": (
                ("realization", "fermi_energy", "gate_potential", "l_phi"),
                realised[0],
                {
                    "units": "m",
                    "long_name": "L_phi the dephasing probes realise on this realization",
                    "comment": _REALISED_COMMENT,
                },
            ),
            "l_phi_realised_err": (
                ("realization", "fermi_energy", "gate_potential", "l_phi"),
                realised[1],
                {
                    "units": "m",
                    "long_name": "uncertainty of l_phi_realised (bootstrap over the "
                    "calibration energies)",
                },
            ),
        },
        coords=coords,
    )
    if plan.config["sweep"]["contacts"]:
        ds = ds.merge(resistance_variables(plan, results, dims))
    ds.attrs.update(
        {
            "title": plan.config["study"]["name"],
            "description": plan.config["study"]["description"],
            "ringkit_version": __version__,
            "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
            "study_fingerprint": plan.config.fingerprint,
            "study_toml": plan.config.to_toml(),
            "study_text_as_written": plan.config.text,
            "conventions": "SI units; conductance in e^2/h; B along +z; carriers electrons",
        }
    )
    ds.attrs.update(_param_attrs(plan))
    ds.attrs.update({f"derived.{k}": v for k, v in setup.attrs().items()})
    return ds


def _json_number(v: Any) -> Any:
    if isinstance(v, float | np.floating):
        v = float(v)
        return None if not math.isfinite(v) else v
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, Mapping):
        return {k: _json_number(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_json_number(x) for x in v]
    return v


LAB_CAUTION = (
    "Laboratory caution: cryostats, cryogens and superconducting magnets are hazardous; "
    "follow your local safety rules and work with qualified staff."
)


def _netcdf_bytes(ds) -> bytes:
    """The netCDF4 (HDF5, h5netcdf engine) file of ``ds`` built in memory.

    The HDF5 library then never writes to the disk itself: a full disk surfaces as a plain
    ``OSError`` from the atomic writer, which removes its temporary file (HDF5 crashed the
    process when it wrote the file directly).
    """
    buf = io.BytesIO()
    ds.to_netcdf(buf, engine="h5netcdf")
    return buf.getvalue()


def write_outputs(
    plan: StudyPlan, results: Mapping[str, UnitResult], out_dir: Path, *, setup: StudySetup
) -> dict[str, Path]:
    """Write results.nc, summary.json, figures and the report; return their paths."""
    from ringkit.study import figures

    out_dir = Path(out_dir)
    ds = build_dataset(plan, results, setup)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        analysis, summary = analyse_dataset(plan, ds, setup)
    notes = sorted({f"{w.category.__name__}: {w.message}" for w in caught})
    ds = ds.merge(analysis)
    files: dict[str, Path] = {}
    files["results"] = out_dir / RESULTS_NAME
    _write_file(files["results"], _netcdf_bytes(ds))
    summary = {
        "study": plan.config["study"]["name"],
        "ringkit_version": __version__,
        "study_fingerprint": plan.config.fingerprint,
        "n_work_units": len(plan.units),
        "conventions": "SI units (T, Wb, J, K, m, m^2); conductance in e^2/h; null = infinite",
        "device": setup.summary(),
        "device_notes": list(setup.notes),
        **summary,
        "analysis_warnings": notes,
    }
    files["summary"] = out_dir / SUMMARY_NAME
    _write_file(files["summary"], (json.dumps(_json_number(summary), indent=2) + "\n").encode())
    figure_files: dict[str, Path] = {}
    out_cfg = plan.config["output"]
    if out_cfg["figures"]:
        fig_dir = out_dir / "figures"
        fig_dir.mkdir(exist_ok=True)
        figure_files = figures.write_figures(
            plan, ds, fig_dir, fmt=out_cfg["figure_format"], dpi=out_cfg["dpi"], setup=setup
        )
        files.update({f"figure:{k}": v for k, v in figure_files.items()})
    kind = out_cfg["report"]
    files["report"] = out_dir / ("report.md" if kind == "markdown" else "report.html")
    blocks = _report_blocks(plan, ds, setup, summary, figure_files, out_dir)
    text = _render_markdown(blocks) if kind == "markdown" else _render_html(blocks, plan)
    _write_file(files["report"], text.encode("utf-8"))
    return files


# ----------------------------------------------------------------------------- report text
def _fmt(v: Any, dim: str | None = None, digits: int = 4) -> str:
    if v is None:
        return "inf" if dim == "length" else "-"
    v = float(v)
    if not math.isfinite(v):
        return "inf" if v > 0 else ("-" if math.isnan(v) else "-inf")
    if dim:
        return format_quantity(v, dim, digits)
    return f"{v:.{digits}g}"


def _realised_cell(r: Mapping[str, Any]) -> str:
    """Realised L_phi of a condition: mean ± rms error over the realizations (and the range
    when there are several), "inf" for the coherent ring, "not measured" otherwise."""
    if not r.get("n"):
        return "not measured"
    if r["mean"] is None or math.isinf(r["mean"]):
        return "inf"
    text = f"{_fmt(r['mean'], 'length', 3)} ± {_fmt(r['err'], 'length', 2)}"
    if r["n"] > 1:
        text += f" ({_fmt(r['min'], 'length', 3)}–{_fmt(r['max'], 'length', 3)})"
    return text


def _report_blocks(
    plan: StudyPlan,
    ds,
    setup: StudySetup,
    summary: Mapping[str, Any],
    figure_files: Mapping[str, Path],
    out_dir: Path,
) -> list[tuple]:
    cfg = plan.config
    b: list[tuple] = [("h1", cfg["study"]["name"]), ("em", LAB_CAUTION)]
    if cfg["study"]["description"]:
        b.append(("p", cfg["study"]["description"]))
    b.append(
        (
            "p",
            f"Computed with ringkit {__version__}: {len(plan.units)} work units "
            f"({len(plan.seeds)} disorder realizations x {len(plan.units) // len(plan.seeds)} "
            f"outer combinations), {len(plan.field)} field points, "
            f"{len(plan.temperatures)} temperature(s); compute time "
            f"{float(ds['compute_seconds'].sum()):.0f} s summed over the work units. "
            f"Results: `{RESULTS_NAME}`, `{SUMMARY_NAME}`.",
        )
    )
    b.append(("h2", "Extracted oscillations"))
    b.append(("p", summary.get("explanation", "")))
    head = [
        "E_F",
        "gate",
        "T",
        "L_phi",
        "L_phi realised",
        "<G> (e²/h)",
        "period h/e",
        "area (µm²)",
        "r_eff",
        "h/e rms of <G>",
        "h/2e rms of <G>",
        "h/e rms single",
        "h/2e rms single",
    ]
    flux_mode = plan.field_name == "flux"
    if flux_mode:  # the equivalent field period for the mean radius (issue 16, point 6)
        head.insert(7, "period as field (pi r_m²)")
    a_ref = reference_area(setup)
    rows = []
    for c in summary["conditions"]:
        m, s = c["ensemble_mean"], c["single_realizations"]
        period_dim = "flux" if plan.field_name == "flux" else "field"
        area = m.get("area_m2")
        row = [
            _fmt(c["fermi_energy_J"], "energy"),
            _fmt(c["gate_potential_J"], "energy"),
            _fmt(c["temperature_K"], "temperature"),
            _fmt(c["l_phi_m"], "length"),
            _realised_cell(c.get("l_phi_realised_m") or {}),
            _fmt(c["mean_conductance_e2h"]),
            _fmt(m.get("period_he_Wb" if period_dim == "flux" else "period_he_T"), period_dim),
            "-" if area is None else f"{area * 1e12:.4g}",
            _fmt(m.get("radius_m"), "length"),
            _fmt(m.get("amplitude_he_rms_e2h")),
            _fmt(m.get("amplitude_h2e_rms_e2h")),
            _fmt(s.get("amplitude_he_rms_e2h", {}).get("mean")),
            _fmt(s.get("amplitude_h2e_rms_e2h", {}).get("mean")),
        ]
        if flux_mode:
            p_wb = m.get("period_he_Wb")
            row.insert(7, "-" if p_wb is None else _fmt(p_wb / a_ref, "field"))
        rows.append(row)
    b.append(("table", head, rows))
    b += resistance_report_blocks(plan, ds, setup)
    if summary.get("analysis_warnings"):
        b.append(("p", "Analysis warnings: " + "; ".join(summary["analysis_warnings"])))
    if figure_files:
        b.append(("h2", "Figures"))
        captions = {
            "conductance": "G(B): single disorder realizations (thin) and the ensemble "
            "average (thick) for each condition; bars mark the expected h/e and h/2e periods.",
            "spectra": "Oscillation spectra (background removed) of one realization and of the "
            "ensemble average; shaded: h/e and h/2e bands from r_in and r_out.",
            "amplitude": "h/e and h/2e amplitudes (rms of the band content) versus the swept "
            "parameter: filled circles, mean over the single realizations; open squares, the "
            "ensemble-averaged trace; line styles distinguish the other swept parameters.",
            "resistance": "Four-terminal resistance R_mn,kl(B) of every configuration of "
            "sweep.contacts (mean over the realizations, first value of every other swept "
            "parameter).",
        }
        for name, path in figure_files.items():
            b.append(("img", str(path.relative_to(out_dir)), captions.get(name, name)))
    b.append(("h2", "Device (derived)"))
    b.append(("table", ["quantity", "value"], [[k, v] for k, v in setup.describe()]))
    b.append(("h2", "Parameters"))
    b.append(
        (
            "p",
            "Every key of the study file (values in the units shown; (not set) = "
            "default of the physics layer).",
        )
    )
    b.append(("table", ["parameter", "value", "meaning"], [list(r) for r in cfg.describe()]))
    b.append(("h2", "Study file"))
    b.append(("p", "As written (the values in SI units are in the netCDF attribute study_toml)."))
    b.append(("code", cfg.text or cfg.to_toml()))
    return b


def _md_cell(text: str) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def _render_markdown(blocks: list[tuple]) -> str:
    out: list[str] = []
    for blk in blocks:
        kind = blk[0]
        if kind == "h1":
            out += [f"# {blk[1]}", ""]
        elif kind == "h2":
            out += [f"## {blk[1]}", ""]
        elif kind == "p":
            if blk[1]:
                out += [blk[1], ""]
        elif kind == "em":
            out += [f"*{blk[1]}*", ""]
        elif kind == "table":
            head, rows = blk[1], blk[2]
            out.append("| " + " | ".join(_md_cell(h) for h in head) + " |")
            out.append("|" + "---|" * len(head))
            out += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
            out.append("")
        elif kind == "img":
            out += [f"![{blk[2]}]({blk[1]})", "", f"*{blk[2]}*", ""]
        elif kind == "code":
            out += ["```toml", blk[1].rstrip(), "```", ""]
    return "\n".join(out)


def _render_html(blocks: list[tuple], plan: StudyPlan) -> str:
    e = html.escape
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{e(plan.config['study']['name'])}</title>",
        "<style>body{font-family:sans-serif;max-width:70em;margin:2em auto;padding:0 1em}"
        "table{border-collapse:collapse;font-size:90%}td,th{border:1px solid #ccc;"
        "padding:2px 6px}img{max-width:100%}pre{background:#f4f4f4;padding:1em}</style>",
        "</head><body>",
    ]
    for blk in blocks:
        kind = blk[0]
        if kind in ("h1", "h2"):
            out.append(f"<{kind}>{e(blk[1])}</{kind}>")
        elif kind == "p" and blk[1]:
            out.append(f"<p>{e(blk[1])}</p>")
        elif kind == "em":
            out.append(f"<p><em>{e(blk[1])}</em></p>")
        elif kind == "table":
            out.append("<table><tr>" + "".join(f"<th>{e(str(h))}</th>" for h in blk[1]) + "</tr>")
            out += [
                "<tr>" + "".join(f"<td>{e(str(c))}</td>" for c in row) + "</tr>" for row in blk[2]
            ]
            out.append("</table>")
        elif kind == "img":
            out.append(
                f'<figure><img src="{e(blk[1])}" alt="{e(blk[2])}">'
                f"<figcaption>{e(blk[2])}</figcaption></figure>"
            )
        elif kind == "code":
            out.append(f"<pre>{e(blk[1])}</pre>")
    out.append("</body></html>")
    return "\n".join(out) + "\n"
