"""Reading and validating study files (TOML).

A study file has the sections of :data:`ringkit.study.schema.SCHEMA`. Validation is strict:
unknown sections or keys are errors with the closest valid name suggested, dimensional values
need a unit of the right dimension (``"250 nm"``; a bare number is read in SI units), and every
value is checked against its allowed range. All errors are :class:`ValueError` subclasses whose
one-line message names the offending ``section.key``.

API
---
StudyConfig
    Frozen, validated configuration (values in SI units) with ``fingerprint`` and ``to_toml``.
load_config(path, overrides=None) -> StudyConfig
parse_config(text, *, source="<string>", overrides=None) -> StudyConfig
default_study_text() -> str
    The embedded default study (``default_study.toml``), run by ``ringkit demo``.
ConfigError

The commented example printed by ``ringkit example-config`` is in
:mod:`ringkit.study.example`.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from types import MappingProxyType
from typing import Any

from ringkit._validation import ParameterError, check_range
from ringkit.device.geometry import MAX_LEADS
from ringkit.study._written import override_comment, written_lines, written_overrides
from ringkit.study.multiterminal import (
    leads_display,
    leads_literal,
    parse_contacts,
    parse_leads,
)
from ringkit.study.quantities import DIMENSIONS, format_quantity, parse_quantity
from ringkit.study.schema import PHYSICS_SECTIONS, REQUIRED, SCHEMA, Key

__all__ = [
    "ConfigError",
    "StudyConfig",
    "load_config",
    "parse_config",
    "default_study_text",
]


class ConfigError(ValueError):
    """A study file is not valid TOML, has unknown keys, or inconsistent values."""


def _suggest(word: str, candidates: list[str]) -> str:
    close = difflib.get_close_matches(word, candidates, n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""


def _suggest_section(word: str) -> str:
    close = difflib.get_close_matches(word, list(SCHEMA), n=1, cutoff=0.6)
    return f"; did you mean [{close[0]}]?" if close else ""


@dataclass(frozen=True)
class StudyConfig:
    """A validated study description; values in SI units (see :mod:`ringkit.study.schema`).

    Attributes
    ----------
    sections : Mapping[str, Mapping[str, object]]
        ``{section: {key: value}}`` for every key of the schema (absent optional keys are
        ``None``); lists of quantities are tuples of floats in SI units.
    source : str
        Where the configuration came from (file path or ``"<string>"``).
    written : Mapping[str, str]
        ``{"section.key": TOML literal}`` of every key as the user wrote it (file or
        override), for the echo in reports.
    text : str
        The study file as written (TOML), followed by the command-line overrides as comments.
    """

    sections: Mapping[str, Mapping[str, Any]]
    source: str = "<string>"
    _given: frozenset[str] = field(default=frozenset(), repr=False, compare=False)
    written: Mapping[str, str] = field(default_factory=dict, repr=False, compare=False)
    text: str = field(default="", repr=False, compare=False)

    def __getitem__(self, section: str) -> Mapping[str, Any]:
        return self.sections[section]

    def physics(self) -> dict[str, dict[str, Any]]:
        """Sections that fix the computed numbers, as plain JSON-able dicts."""
        return {s: dict(self.sections[s]) for s in PHYSICS_SECTIONS}

    @property
    def fingerprint(self) -> str:
        """SHA-256 of the physics sections; a checkpoint is reused only if it matches."""
        text = json.dumps(_jsonable(self.physics()), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()

    def flat(self) -> dict[str, Any]:
        """``{"section.key": SI value}`` for every key (None for absent optional keys)."""
        return {f"{s}.{k}": v for s, sec in self.sections.items() for k, v in sec.items()}

    def describe(self) -> list[tuple[str, str, str]]:
        """Rows ``(section.key, value, help)`` of every parameter, for reports.

        The value is what the user wrote (e.g. ``"0.5 um"``), followed by the value in the
        report's units when that reads differently (``"0.5 um" (500 nm)``); keys that were not
        written show ``(default) <value>``, ``(derived) <value>`` (e.g. r_in from radius and
        width) or ``(not set)``.
        """
        rows = []
        for sec, (_doc, keys) in SCHEMA.items():
            for name, key in keys.items():
                dotted = f"{sec}.{name}"
                value = _display(key, self.sections[sec][name], self.sections)
                if dotted in self.written:
                    as_written = self.written[dotted]
                    if value != "(not set)" and _bare(value) != _bare(as_written):
                        as_written = f"{as_written} ({value})"
                    value = as_written
                elif value != "(not set)" and dotted not in self._given:
                    derived = self.sections[sec][name] != key.default  # r_in from radius, ...
                    value = f"({'derived' if derived else 'default'}) {value}"
                rows.append((dotted, value, key.doc))
        return rows

    def to_toml(self) -> str:
        """TOML text of this configuration (explicit units); parses back to an equal config."""
        lines: list[str] = []
        for sec, (_doc, keys) in SCHEMA.items():
            lines.append(f"[{sec}]")
            for name, key in keys.items():
                value = self.sections[sec][name]
                if value is None:
                    continue
                lines.append(f"{name} = {_toml_literal(key, value, self.sections)}")
            lines.append("")
        return "\n".join(lines)

    def with_overrides(self, overrides: Mapping[str, Any]) -> StudyConfig:
        """Return a new validated config with ``{"section.key": value}`` replaced."""
        raw = _raw_from_config(self)
        _apply_overrides(raw, overrides)
        new = _validate(raw, self.source)
        written = {**self.written, **written_overrides(overrides)}
        return dataclasses.replace(
            new,
            _given=self._given | frozenset(overrides),
            written=written,
            text=self.text + override_comment(overrides),
        )


def _bare(text: str) -> str:
    return "".join(ch for ch in text if ch not in '"[] ')


def _jsonable(obj: Any) -> Any:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):  # LeadSpec
        return _jsonable(dataclasses.asdict(obj))
    if isinstance(obj, float):
        return repr(obj)  # exact, and JSON has no inf
    if isinstance(obj, Mapping):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    return obj


def _field_dimension(sections: Mapping[str, Mapping[str, Any]]) -> str:
    return "flux" if sections["field"]["mode"] == "flux_tube" else "field"


def _display(key: Key, value: Any, sections: Mapping[str, Mapping[str, Any]]) -> str:
    if value is None:
        return "(not set)"
    if key.kind == "leads":
        return leads_display(value)
    if key.kind == "contacts":
        return ", ".join(value)
    if key.kind in ("quantity", "quantities"):
        dim = _field_dimension(sections) if len(key.dimensions) > 1 else key.dimensions[0]
        if key.kind == "quantity":
            return format_quantity(value, dim)
        return ", ".join(format_quantity(v, dim) for v in value)
    return str(value)


def _toml_literal(key: Key, value: Any, sections: Mapping[str, Mapping[str, Any]]) -> str:
    if key.kind == "leads":
        return leads_literal(value)
    if key.kind == "contacts":
        return json.dumps(list(value))
    if key.kind in ("quantity", "quantities"):
        dim = _field_dimension(sections) if len(key.dimensions) > 1 else key.dimensions[0]
        if key.kind == "quantity":
            return _quantity_literal(value, dim)
        return "[" + ", ".join(_quantity_literal(v, dim) for v in value) + "]"
    if key.kind == "bool":
        return "true" if value else "false"
    if key.kind in ("int",):
        return str(int(value))
    if key.kind == "float":
        return repr(float(value))
    return json.dumps(value)


def _quantity_literal(value: float, dimension: str) -> str:
    if math.isinf(value):
        return '"inf"' if value > 0 else '"-inf"'
    si = DIMENSIONS[dimension][0]
    return f'"{float(value)!r} {si}"'


def parse_config(
    text: str, *, source: str = "<string>", overrides: Mapping[str, Any] | None = None
) -> StudyConfig:
    """Validate a study given as TOML text.

    Parameters
    ----------
    text : str
        TOML document.
    source : str
        Name used in error messages (usually the file path).
    overrides : mapping, optional
        ``{"section.key": value}`` applied before validation (values as in a TOML file).

    Raises
    ------
    ConfigError
        Invalid TOML, unknown section/key, wrong type or unit, inconsistent keys.
    ringkit.ParameterError
        A value outside its allowed range.
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{source}: invalid TOML: {err}") from None
    written = written_lines(text)
    if overrides:
        _apply_overrides(raw, overrides)
        written.update(written_overrides(overrides))
    cfg = _validate(raw, source)
    return dataclasses.replace(cfg, written=written, text=text + override_comment(overrides))


def load_config(path: str | Path, overrides: Mapping[str, Any] | None = None) -> StudyConfig:
    """Read and validate the study file at ``path`` (see :func:`parse_config`)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{p}: study file not found") from None
    except UnicodeDecodeError:
        raise ConfigError(f"{p}: not a text (UTF-8) file") from None
    return parse_config(text, source=str(p), overrides=overrides)


def _apply_overrides(raw: dict[str, Any], overrides: Mapping[str, Any]) -> None:
    for dotted, value in overrides.items():
        sec, _, key = dotted.partition(".")
        if not key:
            raise ConfigError(f"override {dotted!r}: expected 'section.key'")
        raw.setdefault(sec, {})
        if not isinstance(raw[sec], dict):
            raise ConfigError(f"override {dotted!r}: [{sec}] is not a section")
        raw[sec][key] = value


def _raw_from_config(cfg: StudyConfig) -> dict[str, Any]:
    raw = tomllib.loads(cfg.to_toml())
    return raw


def _validate(raw: Mapping[str, Any], source: str) -> StudyConfig:
    sections: dict[str, dict[str, Any]] = {}
    all_keys = {sec: list(keys) for sec, (_d, keys) in SCHEMA.items()}
    for sec, content in raw.items():
        if sec not in SCHEMA:
            if not isinstance(content, dict):
                owner = [s for s, ks in all_keys.items() if sec in ks]
                where = f"; it belongs in section [{owner[0]}]" if owner else ""
                raise ConfigError(
                    f"{source}: key '{sec}' must be inside a section{where}"
                    + ("" if owner else _suggest_section(sec))
                )
            raise ConfigError(
                f"{source}: unknown section [{sec}]{_suggest_section(sec)} "
                f"(valid sections: {', '.join(SCHEMA)})"
            )
        if not isinstance(content, dict):
            raise ConfigError(f"{source}: '{sec}' must be a section [{sec}], not a value")
        for key in content:
            if f"{sec}.{key}" in _RETIRED:
                raise ConfigError(f"{source}: [{sec}] {key}: {_RETIRED[f'{sec}.{key}']}")
            if key not in SCHEMA[sec][1]:
                hint = _suggest(key, all_keys[sec])
                if not hint:
                    owner = [s for s, ks in all_keys.items() if key in ks]
                    hint = f"; '{key}' belongs in section [{owner[0]}]" if owner else ""
                raise ConfigError(
                    f"{source}: unknown key '{key}' in [{sec}]{hint} "
                    f"(valid keys: {', '.join(all_keys[sec])})"
                )
    field_mode = raw.get("field", {}).get("mode", SCHEMA["field"][1]["mode"].default)
    for sec, (_doc, keys) in SCHEMA.items():
        content = raw.get(sec, {})
        sections[sec] = {}
        for name, key in keys.items():
            dotted = f"{sec}.{name}"
            if name in content:
                value = _convert(key, content[name], dotted, field_mode)
            elif key.default is REQUIRED:
                raise ConfigError(f"{source}: missing required key '{name}' in [{sec}]")
            else:
                value = key.default
            sections[sec][name] = value
    _cross_check(sections, raw)
    frozen = MappingProxyType({s: MappingProxyType(v) for s, v in sections.items()})
    given = frozenset(f"{s}.{k}" for s, c in raw.items() for k in c)
    return StudyConfig(sections=frozen, source=source, _given=given)


#: Keys of earlier versions, with what replaced them.
_RETIRED = {
    "thermal.points_per_correlation": "no longer used: the thermal average is now "
    "error-controlled; give its accuracy as [thermal] tol (e^2/h, default 1e-4)",
    "thermal.tail_tol": "no longer used: the thermal average is now error-controlled; give "
    "its accuracy as [thermal] tol (e^2/h, default 1e-4)",
    "sweep.dephasing_length": "renamed: write [sweep] l_phi (one name for the phase-coherence "
    "length everywhere in ringkit)",
}

_TYPE_WORDS = {"str": "a string", "int": "an integer", "float": "a number", "bool": "true or false"}


def _convert(key: Key, value: Any, dotted: str, field_mode: str) -> Any:
    if key.kind == "str":
        if not isinstance(value, str):
            raise ConfigError(f"{dotted} = {value!r}: expected a string")
        return value
    if key.kind == "choice":
        if not isinstance(value, str):
            raise ConfigError(f"{dotted} = {value!r}: expected one of {list(key.choices)}")
        if value not in key.choices:
            allowed = "must be one of " + ", ".join(repr(c) for c in key.choices)
            raise ParameterError(dotted, value, allowed + _suggest(value, list(key.choices)))
        return value
    if key.kind == "bool":
        if not isinstance(value, bool):
            raise ConfigError(f"{dotted} = {value!r}: expected true or false")
        return value
    if key.kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise ConfigError(f"{dotted} = {value!r}: expected an integer")
        check_range(dotted, value, key.low, key.high, inclusive=key.inclusive)
        return int(value)
    if key.kind == "float":
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ConfigError(f"{dotted} = {value!r}: expected a number")
        return check_range(dotted, value, key.low, key.high, inclusive=key.inclusive)
    if key.kind == "leads":
        return parse_leads(value, dotted)
    if key.kind == "contacts":  # checked against the number of leads in _cross_check
        return tuple(str(c) for c in parse_contacts(value, MAX_LEADS, dotted))
    if key.kind == "quantity":
        return _quantity(key, value, dotted, field_mode)
    if key.kind == "quantities":
        items = value if isinstance(value, list) else [value]
        if not items:
            raise ConfigError(f"{dotted} = []: give at least one value")
        out = tuple(_quantity(key, v, f"{dotted}[{i}]", field_mode) for i, v in enumerate(items))
        if len(set(out)) != len(out):
            raise ConfigError(f"{dotted}: values must be distinct, got {value!r}")
        return out
    raise AssertionError(key.kind)  # pragma: no cover


def _quantity(key: Key, value: Any, dotted: str, field_mode: str) -> float:
    dims = key.dimensions
    if len(dims) > 1:  # field start/stop: dimension set by field.mode
        dim = "flux" if field_mode == "flux_tube" else "field"
    else:
        dim = dims[0]
    v = parse_quantity(value, dim, name=dotted)
    low, high = key.low, key.high
    if dim == "flux":  # +-10^4 flux quanta
        low, high = -1e4 * _PHI0, 1e4 * _PHI0
    if math.isnan(v):
        raise ParameterError(dotted, value, "must be a number")
    lo_ok = low is None or (v >= low if key.inclusive[0] else v > low)
    hi_ok = high is None or (v <= high if key.inclusive[1] else v < high)
    if not (lo_ok and hi_ok):
        lb = "(-inf" if low is None else ("[" if key.inclusive[0] else "(") + _fmt(low, dim)
        hb = "inf)" if high is None else _fmt(high, dim) + ("]" if key.inclusive[1] else ")")
        raise ParameterError(dotted, value, f"must lie in {lb}, {hb}")
    floor = _PHYSICAL_FLOOR[dim]
    if v != 0 and abs(v) < floor:
        raise ParameterError(
            dotted,
            value,
            f"is below any physical scale of a ring: a nonzero value must be at least "
            f"{format_quantity(floor, dim)} in magnitude (typo in the exponent or the unit?)",
        )
    return v


#: Smallest magnitude of a nonzero value per dimension (smaller ones are typos, e.g. "1e-30 nm"
#: or 5e-324): 0.1 nm is below an atomic spacing, 1 neV below any resolvable energy scale,
#: 1 uK below any cryostat, 1 nT below the remanence of any magnet (common practice).
_PHYSICAL_FLOOR = {
    "length": 1e-10,
    "energy": 1e-9 * DIMENSIONS["energy"][1]["eV"],
    "temperature": 1e-6,
    "field": 1e-9,
    "flux": 1e-9 * DIMENSIONS["flux"][1]["h/e"],
    "density": 1e8,  # 1e4 cm^-2
    "mobility": 1e-8,  # 1e-4 cm^2/Vs
}


_PHI0 = DIMENSIONS["flux"][1]["h/e"]


def _fmt(v: float, dim: str) -> str:
    if v == 0 or math.isinf(v):
        return "0" if v == 0 else ("inf" if v > 0 else "-inf")
    return format_quantity(v, dim)


def _cross_check(s: dict[str, dict[str, Any]], raw: Mapping[str, Any]) -> None:
    m = s["material"]
    given_e = [k for k in ("fermi_energy", "density") if m[k] is not None]
    if len(given_e) > 1:
        raise ConfigError("[material] give only one of fermi_energy and density")
    given_d = [k for k in ("mobility", "mean_free_path", "disorder_strength") if m[k] is not None]
    if len(given_d) > 1:
        raise ConfigError(
            "[material] give only one of mobility, mean_free_path and disorder_strength "
            f"(got {', '.join(given_d)})"
        )
    g = s["geometry"]
    annulus = g["r_in"] is not None or g["r_out"] is not None
    mean_w = g["radius"] is not None or g["width"] is not None
    if annulus and mean_w:
        raise ConfigError("[geometry] give either r_in and r_out, or radius and width, not both")
    if mean_w:
        if g["radius"] is None or g["width"] is None:
            raise ConfigError("[geometry] radius and width must be given together")
        if not g["width"] < 2 * g["radius"]:
            raise ParameterError(
                "geometry.width",
                _L(g["width"]),
                f"must be < 2 * geometry.radius = {_L(2 * g['radius'])}",
            )
        g["r_in"] = g["radius"] - g["width"] / 2
        g["r_out"] = g["radius"] + g["width"] / 2
        g["radius"] = g["width"] = None
    elif not annulus:
        raise ConfigError("[geometry] missing required keys r_in and r_out (or radius and width)")
    elif g["r_in"] is None or g["r_out"] is None:
        raise ConfigError("[geometry] r_in and r_out must be given together")
    if not g["r_out"] > g["r_in"]:
        raise ParameterError(
            "geometry.r_out", _L(g["r_out"]), f"must be > geometry.r_in = {_L(g['r_in'])}"
        )
    if g["lead_width"] is not None and g["lead_width"] > 2 * g["r_out"]:
        raise ParameterError(
            "geometry.lead_width",
            _L(g["lead_width"]),
            f"must be < 2 * r_out = {_L(2 * g['r_out'])}",
        )
    contacts = s["sweep"]["contacts"]
    if contacts is not None:
        n_leads = 2 if g["leads"] is None else len(g["leads"])
        parse_contacts(list(contacts), n_leads, "sweep.contacts")
    a = s["lattice"]["spacing"]
    if a is not None and a > (g["r_out"] - g["r_in"]) / 2:
        half = (g["r_out"] - g["r_in"]) / 2
        raise ParameterError(
            "lattice.spacing",
            _L(a),
            f"must be below half the arm width, (r_out - r_in)/2 = {_L(half)}",
        )
    f = s["field"]
    if not f["stop"] > f["start"]:
        dim = "flux" if f["mode"] == "flux_tube" else "field"
        raise ParameterError(
            "field.stop",
            format_quantity(f["stop"], dim),
            f"must be > field.start = {format_quantity(f['start'], dim)}",
        )


def _L(value: float) -> str:
    return format_quantity(value, "length")


def default_study_text() -> str:
    """Text of the embedded default study (``ringkit/study/default_study.toml``)."""
    return resources.files("ringkit.study").joinpath("default_study.toml").read_text("utf-8")
