"""The commented example study file printed by ``ringkit example-config``.

Generated from the schema (:mod:`ringkit.study.schema`), so every section and key is listed
with its help text, units and allowed values; the active values are those of the default study
(``ringkit demo``), written as it writes them. Keys it does not set appear commented out with
the value the active ones imply for the same device (radius/width for r_in/r_out, the density
for the Fermi energy, the mobility and Anderson strength for the mean free path, the automatic
lattice spacing, ...), or with an example where nothing is implied. The text is itself a valid
study file, and uncommenting an alternative (instead of its active partner) gives the same
device (tested).

API
---
example_config_text() -> str
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from ringkit.study.config import (
    _field_dimension,
    _toml_literal,
    default_study_text,
    parse_config,
)
from ringkit.study.quantities import format_quantity, preferred_units
from ringkit.study.schema import SCHEMA, Key

__all__ = ["example_config_text"]


def example_config_text() -> str:
    """A commented TOML document listing every key; its active values are the default study.

    Keys that the default study does not set and that have no default appear commented out
    with an example value. The text validates with :func:`parse_config` (tested).
    """
    cfg = parse_config(default_study_text(), source="default_study.toml")
    derived = _alternatives(cfg)
    out = [
        "# ringkit study file -- start from this and run:  ringkit study FILE.toml --out DIR",
        '# Dimensional values: "<number> <unit>" (e.g. "250 nm", "-20 mT", "1.5 K", "10 meV");',
        "# a number without a unit is refused (only 0 and inf need none). Lists may hold one",
        "# value or several; every combination of the [sweep] lists and every disorder",
        "# realization is computed. Commented-out keys are alternatives; their values are",
        "# those that the active values imply for this device.",
        "",
    ]
    for sec, (doc, keys) in SCHEMA.items():
        out.extend(f"# {line}" for line in _wrap(doc))
        out.append(f"[{sec}]")
        for name, key in keys.items():
            out.append(f"# {key.doc}{_range_text(key)}")
            dotted = f"{sec}.{name}"
            value = cfg.sections[sec][name]
            if dotted in cfg.written:  # as the default study writes it
                out.append(f"{name} = {_as_written(key, cfg, dotted)}")
            elif value is not None and key.default is not None and dotted not in derived:
                out.append(f"{name} = {_pretty_literal(key, value, cfg.sections)}")
            else:
                out.append(f"# {name} = {derived.get(dotted, key.example)}")
        out.append("")
    return "\n".join(out)


def _as_written(key: Key, cfg, dotted: str) -> str:
    text = cfg.written[dotted]
    if key.kind == "str" and len(text) > 70:
        sec, name = dotted.split(".")
        return _multiline_string(cfg.sections[sec][name])
    return text


def _alternatives(cfg) -> dict[str, str]:
    """Commented-out alternatives that agree with the active values of ``cfg``.

    r_in/r_out <-> radius/width, the lead width (default: the arm width), the automatic
    lattice spacing, fermi_energy <-> density, mean_free_path <-> mobility, and the Anderson
    strength W whose Born mean free path on the lattice is the active one.
    """
    import warnings

    from ringkit.study.setup import make_device

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        device = make_device(cfg.physics(), None, 0.0)
    mat, geo = device.material, device.geometry
    q = _quoted
    out = {
        "geometry.r_in": q(geo.r_in, "length"),
        "geometry.r_out": q(geo.r_out, "length"),
        "geometry.radius": q(0.5 * (geo.r_in + geo.r_out), "length"),
        "geometry.width": q(geo.r_out - geo.r_in, "length"),
        "geometry.lead_width": q(float(geo.lead_width), "length"),
        "lattice.spacing": q(device.spacing, "length"),
        "lattice.max_sites": str(device.max_sites),
        "material.effective_mass": f"{mat.effective_mass:.4g}",
        "material.fermi_energy": q(mat.fermi_energy_J, "energy"),
        "material.density": q(mat.sheet_density, "density"),
        "sweep.fermi_energy": "[" + q(mat.fermi_energy_J, "energy") + "]",
    }
    if mat.elastic_mean_free_path is not None:
        from ringkit.tightbinding.disorder import strength_for_mean_free_path

        l_el = mat.elastic_mean_free_path
        out["material.mean_free_path"] = q(l_el, "length")
        out["material.mobility"] = q(float(mat.transport_mobility), "mobility")
        w = strength_for_mean_free_path(l_el / device.spacing, mat.fermi_energy_J / device.hopping)
        out["material.disorder_strength"] = q(w * device.hopping, "energy")
    return out


def _quoted(value: float, dim: str) -> str:
    return json.dumps(format_quantity(value, dim, 4))


def _wrap(text: str, width: int = 94) -> list[str]:
    words, lines, cur = text.split(), [], ""
    for w in words:
        if cur and len(cur) + 1 + len(w) > width:
            lines.append(cur)
            cur = w
        else:
            cur = f"{cur} {w}".strip()
    return [*lines, cur] if cur else lines


def _range_text(key: Key) -> str:
    if key.kind == "choice":
        return " One of: " + ", ".join(f'"{c}"' for c in key.choices) + "."
    if key.kind in ("quantity", "quantities"):
        parts = [f"{d}: {', '.join(preferred_units(d))}" for d in key.dimensions]
        return " [" + " | ".join(parts) + "]"
    if key.kind == "int" and key.low is not None and key.high is not None:
        return f" Range {int(key.low)}..{int(key.high)}."
    if key.kind == "float" and key.low is not None and key.high is not None:
        lo = "(" if not key.inclusive[0] else "["
        hi = ")" if not key.inclusive[1] else "]"
        return f" Range {lo}{key.low:g}, {key.high:g}{hi}."
    return ""


def _pretty_literal(key: Key, value: Any, sections: Mapping[str, Mapping[str, Any]]) -> str:
    if key.kind in ("quantity", "quantities"):
        dim = _field_dimension(sections) if len(key.dimensions) > 1 else key.dimensions[0]
        if key.kind == "quantity":
            return json.dumps(format_quantity(value, dim))
        return "[" + ", ".join(json.dumps(format_quantity(v, dim)) for v in value) + "]"
    if key.kind == "str" and len(value) > 70:
        return _multiline_string(value)
    return _toml_literal(key, value, sections)


def _multiline_string(text: str) -> str:
    """TOML multi-line basic string whose line-ending backslashes reproduce ``text``.

    The newline right after the opening quotes is dropped by TOML, and a backslash at a line
    end removes the newline and the leading whitespace of the next line.
    """
    body = json.dumps(text)[1:-1].replace('"""', '\\"""')
    return '"""\n' + "\\\n".join(_wrap_keep_spaces(body, 92)) + '"""'


def _wrap_keep_spaces(text: str, width: int) -> list[str]:
    # break after a space, so that the trailing space survives the line-ending backslash
    lines, start = [], 0
    while len(text) - start > width:
        cut = text.rfind(" ", start, start + width)
        if cut <= start:
            break
        lines.append(text[start : cut + 1])
        start = cut + 1
    lines.append(text[start:])
    return lines
