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
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ringkit._validation import ParameterError
from ringkit.contacts import Contacts
from ringkit.device.geometry import MAX_LEADS, LeadSpec
from ringkit.study.quantities import parse_quantity

__all__ = ["parse_angle", "parse_leads", "parse_contacts", "resistance_rows"]

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
