"""Multi-terminal pieces of a study: lead layout and contact configurations from the study file,
and the R(B) table of the report (docs/multiterminal.md).

Study-file forms (issue 12 pt 1, 4, 5)::

    [geometry]
    leads = [{angle = "135 deg", width = "60 nm"}, {angle = "45 deg"},
             {angle = "225 deg", width = "40 nm"}, {angle = "-45 deg", width = "40 nm"}]

    [sweep]
    contacts = ["0,2,1,3", "1,3,0,2"]

API
---
parse_angle(value, name) -> float
    ``"135 deg"``, ``"135°"``, ``"2.356 rad"`` -> rad (a bare number is refused: deg or rad?).
parse_leads(value, name="geometry.leads") -> tuple of LeadSpec
    Maps the list of tables to :class:`ringkit.device.LeadSpec` (2 to 4 leads).
parse_contacts(value, n_leads, name="sweep.contacts") -> tuple of Contacts
    Configurations checked against the number of leads (distinct voltage and current
    contacts).
leads_literal(leads) -> str, leads_display(leads) -> str
    TOML literal (exact, rad and m) and readable form (deg, nm) of a lead layout.
resistance_variables(plan, results, dims) -> xarray.Dataset
    ``R_ohm[..., config, field]`` and ``R_thermal_error`` of a study's unit results.
first_condition(ds) -> xarray.Dataset
    ``R_ohm(field, config)`` averaged over the realizations, first value of the other axes.
resistance_report_blocks(plan, ds, setup) -> list
    The report section "Four-terminal resistance" (table of :func:`resistance_rows`).
resistance_rows(ds, r_in=None, r_out=None) -> list of dict
    Report table of a :func:`ringkit.transport.multiterminal.resistance_field_sweep` result:
    per configuration mean R, min/max R (ohm), and the h/e amplitude and phase from
    :func:`ringkit.analysis.fourterminal.analyze_four_terminal` (NaN when the sweep holds
    fewer than the periods the extraction needs, with the reason).

Errors are :class:`ringkit._validation.ParameterError` naming the key (``geometry.leads[2].angle``)
and the allowed values.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ringkit._validation import ParameterError
from ringkit.contacts import Contacts
from ringkit.device.geometry import MAX_LEADS, LeadSpec
from ringkit.study.quantities import parse_quantity

__all__ = [
    "parse_angle",
    "parse_leads",
    "parse_contacts",
    "leads_literal",
    "leads_display",
    "resistance_rows",
    "resistance_variables",
    "first_condition",
    "resistance_report_blocks",
]

_ANGLE_UNITS = {"deg": math.pi / 180.0, "°": math.pi / 180.0, "degree": math.pi / 180.0,
                "degrees": math.pi / 180.0, "rad": 1.0}  # fmt: skip
_ANGLE_RE = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(\S*)\s*$")


def parse_angle(value: object, name: str) -> float:
    """Angle in rad from ``"135 deg"``, ``"135°"`` or ``"2.356 rad"``."""
    m = _ANGLE_RE.match(value) if isinstance(value, str) else None
    if m is None or m[2].lower() not in _ANGLE_UNITS:
        raise ParameterError(
            name, value, 'must be an angle with its unit, e.g. "135 deg" or "2.356 rad"'
        )
    return float(m[1]) * _ANGLE_UNITS[m[2].lower()]


def parse_leads(value: Any, name: str = "geometry.leads") -> tuple[LeadSpec, ...]:
    """Lead specs from a study-file list of tables ``{angle = "...", width = "..."}``."""
    if not isinstance(value, Sequence) or isinstance(value, str):
        raise ParameterError(
            name, value, 'must be a list of tables such as [{angle = "135 deg", width = "60 nm"}]'
        )
    if not 2 <= len(value) <= MAX_LEADS:
        raise ParameterError(name, len(value), f"must list 2 to {MAX_LEADS} leads")
    specs = []
    for i, item in enumerate(value):
        where = f"{name}[{i}]"
        if not isinstance(item, Mapping) or "angle" not in item:
            raise ParameterError(
                where, item, 'must be a table with an angle, e.g. {angle = "45 deg"}'
            )
        unknown = sorted(set(item) - {"angle", "width"})
        if unknown:
            raise ParameterError(f"{where}.{unknown[0]}", item[unknown[0]],
                                 "is not a lead key (allowed: angle, width)")  # fmt: skip
        width = item.get("width")
        if width is not None:
            width = parse_quantity(width, "length", name=f"{where}.width")
            if not width > 0:
                raise ParameterError(f"{where}.width", item["width"], "must be > 0")
        specs.append(LeadSpec(parse_angle(item["angle"], f"{where}.angle"), width))
    return tuple(specs)


def parse_contacts(value: Any, n_leads: int, name: str = "sweep.contacts") -> tuple[Contacts, ...]:
    """Configurations ``["m,n,k,l", ...]`` checked against ``n_leads`` contacts."""
    items = [value] if isinstance(value, str) else value
    if not isinstance(items, Sequence) or not items:
        raise ParameterError(name, value, 'must be a list of configurations such as ["0,2,1,3"]')
    out = []
    for i, text in enumerate(items):
        try:
            c = Contacts.parse(text)
            c.check(n_leads)
        except ParameterError as err:
            raise ParameterError(f"{name}[{i}]", text, f"{err.name}: {err.allowed}") from None
        out.append(c)
    return tuple(out)


def leads_literal(leads: Sequence[LeadSpec]) -> str:
    """TOML literal of a lead layout that parses back exactly (angles in rad, widths in m)."""
    items = []
    for spec in leads:
        width = "" if spec.width is None else f', width = "{float(spec.width)!r} m"'
        items.append(f'{{angle = "{float(spec.angle)!r} rad"{width}}}')
    return "[" + ", ".join(items) + "]"


def leads_display(leads: Sequence[LeadSpec]) -> str:
    """Readable lead layout: ``"0: 135 deg, 1: 45 deg (40 nm), ..."``."""
    out = []
    for i, spec in enumerate(leads):
        width = "" if spec.width is None else f" ({spec.width * 1e9:.4g} nm)"
        out.append(f"{i}: {math.degrees(spec.angle):.4g} deg{width}")
    return ", ".join(out)


def resistance_variables(plan, results, dims: tuple[str, ...]):
    """``R_ohm`` (ohm) on ``(*dims, config, field)`` and its thermal error from unit results."""
    import xarray as xr

    contacts = list(plan.config["sweep"]["contacts"])
    n_r, n_e, n_g, n_d = plan.shape
    n_t, n_b = len(plan.temperatures), len(plan.field)
    r = np.full((n_r, n_e, n_g, n_t, n_d, len(contacts), n_b), np.nan)
    err = np.full((n_r, n_e, n_g, n_t, n_d), np.nan)
    for unit in plan.units:
        res = results[unit.uid]
        i, e, g, d = unit.index
        r[i, e, g, :, d] = res.resistance
        err[i, e, g, :, d] = res.info["resistance_thermal_error_e2h"]
    long = "four-terminal resistance R_mn,kl = (V_k - V_l)/I, current m -> n"
    return xr.Dataset(
        {
            "R_ohm": ((*dims, "config", plan.field_name), r, {"units": "ohm", "long_name": long}),
            "R_thermal_error": (
                dims,
                err,
                {
                    "units": "e^2/h",
                    "long_name": "estimated error "
                    "of the thermally averaged conductance matrix elements",
                },
            ),
        },  # fmt: skip
        coords={"config": ("config", contacts, {"long_name": "contacts m,n,k,l"})},
    )


def first_condition(ds):
    """``R_ohm(field, config)``: mean over the realizations, first value of the other axes."""
    r = ds["R_ohm"].mean("realization")
    r = r.isel({d: 0 for d in r.dims if d not in ("config", "B", "flux")})
    return r.to_dataset(name="R_ohm")


def resistance_report_blocks(plan, ds, setup) -> list[tuple]:
    """Report blocks: R(B) table per configuration and condition (mean over realizations)."""
    if "R_ohm" not in ds:
        return []
    from ringkit.study.quantities import format_quantity

    mean = ds["R_ohm"].mean("realization")
    other = [d for d in mean.dims if d not in ("config", "B", "flux")]
    head = ["E_F", "gate", "T", "L_phi", "configuration", "mean R (Ω)", "min R (Ω)",
            "max R (Ω)", "h/e amplitude (Ω)", "h/e phase (rad)", "note"]  # fmt: skip
    units = ["energy", "energy", "temperature", "length"]
    rows = []
    for idx in np.ndindex(*(mean.sizes[d] for d in other)):
        sub = mean.isel(dict(zip(other, idx, strict=True)))
        cond = [format_quantity(float(sub[d]), u, 4) if np.isfinite(float(sub[d])) else "inf"
                for d, u in zip(other, units, strict=True)]  # fmt: skip
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            table = resistance_rows(sub.to_dataset(name="R_ohm"), r_in=setup.r_in,
                                    r_out=setup.r_out)  # fmt: skip
        notes = sorted({str(w.message).split(":")[0] for w in caught})
        for row in table:
            rows.append([*cond, row["configuration"],
                         *(f"{row[k]:.5g}" for k in ("mean_ohm", "min_ohm", "max_ohm",
                                                     "amplitude_he_ohm", "phase_he_rad")),
                         "; ".join(filter(None, [row["note"], *notes]))])  # fmt: skip
    text = (
        f"R_mn,kl(B) of the configurations {', '.join(plan.config['sweep']['contacts'])} "
        "(current m -> n, voltage V_k - V_l; mean over the realizations), from the "
        "conductance matrix of the ring (Büttiker, Phys. Rev. Lett. 57, 1761 (1986); "
        "docs/multiterminal.md). h/e amplitude and phase: cosine projection at the h/e "
        "frequency, phase referred to B = 0 (nan: see the note)."
    )
    return [("h2", "Four-terminal resistance"), ("p", text), ("table", head, rows)]


def resistance_rows(ds, *, r_in: float | None = None, r_out: float | None = None) -> list[dict]:
    """One row per configuration of a ``resistance_field_sweep`` dataset (ohm, rad)."""
    from ringkit.analysis.fourterminal import analyze_four_terminal

    field_name = "B" if "B" in ds.coords else "flux"
    x = np.asarray(ds[field_name].values, dtype=float)
    rows = []
    for cfg in ds["config"].values:
        r = np.asarray(ds["R_ohm"].sel(config=cfg).values, dtype=float)
        row = {
            "configuration": Contacts.parse(str(cfg)).label,
            "contacts": str(cfg),
            "mean_ohm": float(np.mean(r)),
            "min_ohm": float(np.min(r)),
            "max_ohm": float(np.max(r)),
            "amplitude_he_ohm": math.nan,
            "phase_he_rad": math.nan,
            "note": "",
        }
        if field_name == "B":
            try:
                res = analyze_four_terminal(x, r, contacts=str(cfg), r_in=r_in, r_out=r_out)
                row["amplitude_he_ohm"] = res.amplitude_he_ohm
                row["phase_he_rad"] = res.phase_he
            except ValueError as err:
                row["note"] = f"no h/e analysis: {err}"
        else:
            row["note"] = "flux sweep: h/e analysis needs a field sweep"
        rows.append(row)
    return rows
