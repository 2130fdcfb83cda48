"""Physical-range checks of a study, run at set-up (before any work unit).

Each check names the study-file key and the allowed range. Used by
:func:`ringkit.study.setup.check_setup`.

API
---
transverse_modes(k_fermi, width) -> int, lattice_modes(energy, n_across) -> int
check_mean_free_path(physics, device), check_born_mean_free_path(physics, ring)
check_l_phi_values(plan, device)
"""

from __future__ import annotations

import math
from typing import Any

from ringkit._validation import ParameterError
from ringkit.study.plan import StudyPlan
from ringkit.study.quantities import format_quantity

__all__ = [
    "transverse_modes",
    "lattice_modes",
    "check_mean_free_path",
    "check_born_mean_free_path",
    "check_l_phi_values",
]


def transverse_modes(k_fermi: float, width: float) -> int:
    """Transverse modes of a continuum hard-wall strip: ``floor(kF W / pi)`` (at least 0)."""
    return max(0, math.floor(k_fermi * width / math.pi + 1e-12))


def lattice_modes(energy: float, n_across: int) -> int:
    """Open channels of a clean square-lattice strip ``n_across`` sites wide at ``energy``.

    ``energy`` in units of t above the band bottom. The transverse levels of a hard-wall
    strip of M sites are ``eps_n = 2t (1 - cos(n pi/(M+1)))``, n = 1..M, and the
    longitudinal band adds ``[0, 4t]``: channel n is open when ``eps_n < E < eps_n + 4t``
    (the strip acts like a continuum strip of width ``(M+1) a``).
    """
    m = int(n_across)
    eps = [2.0 * (1.0 - math.cos(n * math.pi / (m + 1))) for n in range(1, m + 1)]
    return sum(1 for e in eps if e < energy < e + 4.0)


def _disorder_key(physics: dict[str, dict[str, Any]]) -> str:
    m = physics["material"]
    for k in ("mean_free_path", "mobility", "disorder_strength"):
        if m[k] is not None:
            return f"material.{k}"
    return "material.preset"


def check_mean_free_path(physics: dict[str, dict[str, Any]], device) -> None:
    """The elastic mean free path (given or from the mobility) must exceed the spacing."""
    l_el = device.material.elastic_mean_free_path
    a = device.spacing
    if l_el is None or l_el >= a:
        return
    key = _disorder_key(physics)
    m = physics["material"]
    value = m[key.split(".")[1]] if key != "material.preset" else m["preset"]
    dim = {"material.mobility": "mobility", "material.mean_free_path": "length"}.get(key)
    shown = format_quantity(value, dim, 4) if dim else value
    raise ParameterError(
        key,
        shown,
        f"gives an elastic mean free path of {format_quantity(l_el, 'length', 3)}, below the "
        f"lattice spacing a = {format_quantity(a, 'length', 3)}: no disorder on this lattice "
        "describes it (G would vanish); it must be at least a",
    )


def check_born_mean_free_path(physics: dict[str, dict[str, Any]], ring) -> None:
    """An Anderson strength W whose Born mean free path is below the spacing is refused."""
    l_born = ring.born_mean_free_path
    if l_born is None or l_born >= ring.lattice_spacing:
        return
    key = _disorder_key(physics)
    raise ParameterError(
        key,
        format_quantity(ring.disorder_strength, "energy", 4),
        f"gives a Born mean free path of {format_quantity(l_born, 'length', 3)}, below the "
        f"lattice spacing a = {format_quantity(ring.lattice_spacing, 'length', 3)}; lower the "
        "disorder",
    )


def check_l_phi_values(plan: StudyPlan, device) -> None:
    """Every finite L_phi must be at least the probe spacing along the arms."""
    geo = device.geometry
    n = plan.config["dephasing"]["probes"]
    spacing = 2 * math.pi * 0.5 * (geo.r_in + geo.r_out) / n
    for i, d in enumerate(plan.config["sweep"]["l_phi"]):
        if math.isfinite(d) and d < spacing:
            raise ParameterError(
                f"sweep.l_phi[{i}]",
                format_quantity(d, "length", 4),
                f"must be >= the spacing of the {n} dephasing probes along the arms, "
                f"2 pi r_m / probes = {format_quantity(spacing, 'length', 3)} (the probe model "
                "cannot resolve a shorter L_phi; raise dephasing.probes for shorter ones)",
            )
