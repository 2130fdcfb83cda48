"""Explorer state <-> study TOML (a design found in the panel becomes a batch study; no widgets).

study_toml(params, *, name=..., realizations=1) -> str
    A study file (:mod:`ringkit.study.schema`) computing what the explorer's lattice view
    shows: same material (preset, density or E_F, mobility), ring, lattice spacing, field mode,
    gate, temperature, dephasing length (the explorer's ``N_PROBES`` probes) and disorder seed.
    In flux-tube mode the sweep is the live view's commensurate flux grid written in h/e
    (``k/M h/e`` for ``k = k0..k1``), so the study's G equals the panel's lattice line point by
    point. The text is validated with :func:`ringkit.study.parse_config` before it is returned.
params_from_study(text, *, source=...) -> (ExplorerParams, notes)
    The explorer settings of a study file (validated by :func:`ringkit.study.parse_config`);
    ``notes`` say what the panel cannot show (only the first value of a list is used, ...).

The study geometry has equal arm widths and leads at 180 deg and 0 deg; a design with unequal
widths or a moved lead cannot be exported (ParameterError naming the control). The explorer's
single-channel preview coupling has no study key. docs/panels.md, "Panel to batch".
"""

from __future__ import annotations

import math
from fractions import Fraction

from ringkit._validation import ParameterError
from ringkit.view.panels.explorer import MATERIALS, N_PROBES, ExplorerParams

__all__ = ["study_toml", "params_from_study", "flux_window"]


def _q(value: float, unit: str, scale: float) -> str:
    return f'"{value / scale:.17g} {unit}"'


def flux_window(flux) -> tuple[float, float, int]:
    """(start, stop) in units of h/e and the number of points of a uniform flux grid (Wb)."""
    from ringkit.units import PHI0

    k = [Fraction(float(x) / PHI0).limit_denominator(1 << 20) for x in (flux[0], flux[-1])]
    return float(k[0]), float(k[1]), len(flux)


def study_toml(
    params: ExplorerParams,
    *,
    name: str = "design from the device explorer",
    realizations: int = 1,
    flux=None,
) -> str:
    """Study TOML of the explorer settings (module docstring).

    Parameters
    ----------
    params : ExplorerParams
    name : str
        Study name.
    realizations : int
        Disorder realizations (seeds ``params.seed``, ``params.seed + 1``, ...).
    flux : array, optional
        Flux grid in Wb of the live lattice view (:attr:`LiveResult.flux`); flux-tube studies
        then sweep exactly these points. Default: the live view's grid for ``params``.

    Raises
    ------
    ParameterError
        Settings a study file cannot express (unequal arm widths, moved lead).
    """
    if params.width_ratio != 1.0:
        raise ParameterError("width_ratio", params.width_ratio,
                             "must be 1 to export: study files have equal arm widths")  # fmt: skip
    if not math.isclose(params.lead_angle, math.pi, rel_tol=0, abs_tol=1e-12):
        raise ParameterError("lead_angle", math.degrees(params.lead_angle),
                             "must be 180 deg to export: study leads sit at 180 and 0 deg",
                             "deg")  # fmt: skip
    mat = [f'preset = "{params.material}"']
    if params.density is not None:
        mat.append(f"density = {_q(params.density, 'cm^-2', 1e4)}")
    elif params.fermi_energy is not None:
        mat.append(f"fermi_energy = {_q(params.fermi_energy, 'meV', 1.602176634e-22)}")
    if params.mobility is not None:
        if math.isinf(params.mobility):
            mat.append("disorder_strength = 0.0")
        else:
            mat.append(f"mobility = {_q(params.mobility, 'cm^2/Vs', 1e-4)}")
    geo = params.geometry()
    lines = [
        "# Written by the ringkit device explorer (panel -> batch study).",
        "[study]",
        f'name = "{name}"',
        "",
        "[material]",
        *mat,
        "",
        "[geometry]",
        'shape = "circular"',
        f"r_in = {_q(geo.r_in, 'nm', 1e-9)}",
        f"r_out = {_q(geo.r_out, 'nm', 1e-9)}",
        f"lead_width = {_q(geo.lead_width, 'nm', 1e-9)}",
        "",
    ]
    if params.lattice_spacing is not None:
        lines += ["[lattice]", f"spacing = {_q(params.lattice_spacing, 'nm', 1e-9)}", ""]
    if params.field_mode == "flux_tube":
        if flux is None:
            from ringkit.view.panels.explorer_live import live_flux_of

            flux = live_flux_of(params)
        start, stop, n = flux_window(flux)
        field = ["[field]", 'mode = "flux_tube"', f'start = "{start:.17g} h/e"',
                 f'stop = "{stop:.17g} h/e"', f"points = {n}"]  # fmt: skip
    else:
        n = params.n_field or 401
        field = ["[field]", 'mode = "uniform"', f"start = {_q(params.field_min, 'mT', 1e-3)}",
                 f"stop = {_q(params.field_max, 'mT', 1e-3)}", f"points = {n}"]  # fmt: skip
    l_phi = params.l_phi
    l_phi_text = '"inf"' if l_phi is None else _q(l_phi, "nm", 1e-9)
    lines += [
        *field,
        "",
        "[sweep]",
        f'gate_arm = "{params.gate_arm}"',
        f"gate_potential = [{_q(params.gate_potential, 'meV', 1.602176634e-22)}]",
        f"temperature = [{_q(params.temperature, 'K', 1.0)}]",
        f"l_phi = [{l_phi_text}]",
        "",
        "[dephasing]",
        f"probes = {N_PROBES}",
        "",
        "[ensemble]",
        f"realizations = {int(realizations)}",
        f"seed = {int(params.seed)}",
        "",
    ]
    text = "\n".join(lines)
    from ringkit.study import parse_config

    parse_config(text, source="exported explorer state")  # raises on anything invalid
    return text


def params_from_study(text: str, *, source: str = "<study>") -> tuple[ExplorerParams, list[str]]:
    """Explorer settings of a study file (module docstring).

    Raises
    ------
    ConfigError, ParameterError
        Unreadable TOML or an invalid study (messages name the key and the allowed range).
    """
    from ringkit.study import parse_config

    cfg = parse_config(text, source=source)
    m, g, lat, f, sw = (cfg[s] for s in ("material", "geometry", "lattice", "field", "sweep"))
    notes = []
    if m["preset"] not in MATERIALS:
        raise ParameterError("material.preset", m["preset"], f"must be one of {MATERIALS}")
    for key in ("effective_mass",):
        if m.get(key) is not None:
            notes.append(f"material.{key} is not a control of the explorer: preset value used")
    mobility = m.get("mobility")
    if m.get("disorder_strength") == 0.0:
        mobility = math.inf
    elif m.get("mean_free_path") is not None or m.get("disorder_strength"):
        notes.append("material: only a mobility (or no disorder) maps to the explorer's control")

    def first(key: str):
        values = sw[key]
        if values is None:
            return None
        values = tuple(values) if isinstance(values, (list, tuple)) else (values,)
        if len(values) > 1:
            notes.append(f"sweep.{key}: {len(values)} values, the panel shows the first")
        return values[0]

    r_in, r_out = g["r_in"], g["r_out"]
    width = r_out - r_in
    l_phi = first("l_phi")
    temperature = first("temperature")
    gate = first("gate_potential")
    e_f = first("fermi_energy") if "fermi_energy" in sw else None
    mode = f["mode"]
    if mode == "flux_tube":
        from ringkit.units import PHI0

        area = math.pi * (0.5 * (r_in + r_out)) ** 2
        field_min, field_max = f["start"] / area, f["stop"] / area  # equivalent field
        if f["start"] / PHI0 < -100 or f["stop"] / PHI0 > 100:
            notes.append("field: flux window clipped by the panel's field range")
    else:
        field_min, field_max = f["start"], f["stop"]
    params = ExplorerParams(
        material=m["preset"],
        radius=0.5 * (r_in + r_out),
        width=width,
        fermi_energy=e_f if e_f is not None else m.get("fermi_energy"),
        density=None if (e_f is not None or m.get("fermi_energy") is not None)
        else m.get("density"),
        mobility=mobility,
        l_phi=None if l_phi is None or math.isinf(l_phi) else l_phi,
        temperature=0.0 if temperature is None else float(temperature),
        field_min=field_min,
        field_max=field_max,
        gate_potential=0.0 if gate is None else float(gate),
        gate_arm=sw["gate_arm"],
        lattice_spacing=lat.get("spacing"),
        field_mode=mode,
        seed=int(cfg["ensemble"]["seed"]),
    )  # fmt: skip
    return params, notes
