"""How the user wrote a study file: literals per key and the override comment, for reports.

Used by :mod:`ringkit.study.config` (``StudyConfig.written`` and ``StudyConfig.text``).
"""

from __future__ import annotations

import json
import tomllib
from collections.abc import Mapping
from typing import Any

__all__ = ["written_lines", "written_overrides", "override_comment"]


def written_lines(text: str) -> dict[str, str]:
    """``{"section.key": literal as written}`` for the one-line ``key = value`` entries of ``text``.

    Multi-line values (long strings) are left out; a missing entry only means that the report
    shows the value in its own units.
    """
    out: dict[str, str] = {}
    section = ""
    for line in text.splitlines():
        stripped = line.strip()
        if stripped.startswith("[") and stripped.endswith("]") and "=" not in stripped:
            section = stripped.strip("[]").strip()
            continue
        name, sep, value = stripped.partition("=")
        name, value = name.strip(), _strip_comment(value.strip())
        if not sep or not section or not name or name.startswith("#"):
            continue
        try:
            tomllib.loads(f"v = {value}")
        except tomllib.TOMLDecodeError:
            continue
        out[f"{section}.{name}"] = value
    return out


def _strip_comment(value: str) -> str:
    """``'"5 nm"  # note'`` -> ``'"5 nm"'`` (a ``#`` outside quotes starts a comment)."""
    quote = ""
    for i, ch in enumerate(value):
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            return value[:i].rstrip()
    return value


def written_overrides(overrides: Mapping[str, Any]) -> dict[str, str]:
    return {k: _literal(v) for k, v in overrides.items()}


def override_comment(overrides: Mapping[str, Any] | None) -> str:
    if not overrides:
        return ""
    lines = ["", "# overrides given on the command line (--set):"]
    lines += [f"#   {k} = {_literal(v)}" for k, v in overrides.items()]
    return "\n".join(lines) + "\n"


def _literal(value: Any) -> str:
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_literal(v) for v in value) + "]"
    return repr(value)
