"""Controls of the device explorer: widgets in display units <-> :class:`ExplorerParams` (SI).

make_controls(params) -> dict of widgets
params_from_controls(controls, fermi_source) -> ExplorerParams
set_controls(controls, params) -> fermi_source
    Put settings (e.g. read from a study file) into the widgets.
carrier_text(material, *, density=None, fermi_energy=None) -> (density display, E_F display)
    The sheet density (10^11 cm^-2) and E_F (meV) of each other, rounded to 4 digits, with
    ``E_F = pi hbar^2 n/m*`` (spin-degenerate 2DEG, :class:`ringkit.device.Material`).

The carrier density and the Fermi energy are two views of one input: the one the user typed
last (``fermi_source``: ``"density"`` or ``"fermi_energy"``) is passed on, the other is shown
derived. Both are free text fields: an out-of-range value is refused by
:class:`~ringkit.view.panels.explorer.ExplorerParams` (message in the panel, nothing changes)
instead of being clamped silently. Descriptions are short enough for their width (no label is
cut off; checked in tests/test_browser.py).
"""

from __future__ import annotations

import math

import ipywidgets as widgets

from ringkit.units import EV
from ringkit.view.panels.explorer import ExplorerParams

__all__ = [
    "make_controls",
    "params_from_controls",
    "set_controls",
    "carrier_text",
    "preset_carriers",
    "MEV",
    "DENSITY_UNIT",
]

MEV = 1e-3 * EV
DENSITY_UNIT = 1e15  # m^-2 per displayed unit (1e11 cm^-2)
_CM2 = 1e-4  # 1 cm^2/(V s) in m^2/(V s)
_CLEAN_MOBILITY = 10**7.45  # cm^2/(V s): the slider's top end means "no disorder"
_COHERENT_L_PHI = 999.0  # µm: the L_phi slider's top end means "fully coherent"
STYLE = {"description_width": "210px"}
WIDTH = "470px"


def _round(value: float, digits: int = 4) -> float:
    return float(f"{value:.{digits}g}")


def preset_carriers(material: str) -> tuple[str, float, float]:
    """Source ("density" or "fermi_energy"), density (m^-2) and E_F (J) of a preset."""
    from ringkit.device.material import Material

    mat = Material.preset(material)
    source = "density" if mat.density is not None else "fermi_energy"
    return source, mat.sheet_density, mat.fermi_energy_J


def carrier_text(material: str, *, density: float | None = None,
                 fermi_energy: float | None = None) -> tuple[float, float]:  # fmt: skip
    """Displayed density (1e11 cm^-2) and E_F (meV) from one of them (SI), 4 digits."""
    from ringkit.device.material import Material

    kw = {"density": density} if density is not None else {"fermi_energy": fermi_energy}
    mat = Material.preset(material, **kw)
    return _round(mat.sheet_density / DENSITY_UNIT), _round(mat.fermi_energy_J / MEV)


def _preset_mobility(material: str) -> float:
    """Mobility (cm^2/Vs) shown when a preset is chosen."""
    from ringkit.device.material import Material
    from ringkit.units import HBAR, E

    mat = Material.preset(material)
    mob = mat.transport_mobility
    if mob is None:  # metal film preset without disorder: l ~ 30 nm film (common practice)
        mob = E * 30e-9 / (HBAR * mat.fermi_wavevector)
    return mob / _CM2


def make_controls(p: ExplorerParams) -> tuple[dict[str, widgets.Widget], str]:
    """The explorer's input widgets for settings ``p`` and the initial ``fermi_source``."""
    source, n, e_f = preset_carriers(p.material)
    if p.density is not None:
        source, n, e_f = "density", p.density, None
    elif p.fermi_energy is not None:
        source, n, e_f = "fermi_energy", None, p.fermi_energy
    if source == "density":
        n_disp, ef_disp = carrier_text(p.material, density=n)
    else:
        n_disp, ef_disp = carrier_text(p.material, fermi_energy=e_f)
    mob = _preset_mobility(p.material)
    if p.mobility is not None:
        mob = 10**7.5 if math.isinf(p.mobility) else p.mobility / _CM2
    lay = widgets.Layout(width=WIDTH)
    kw = dict(continuous_update=False, style=STYLE, layout=lay)
    l_phi_um = 1e3 if p.l_phi is None else p.l_phi * 1e6
    controls = {
        "material": widgets.Dropdown(
            options=["GaAs", "InAs", "Au"], value=p.material, description="material",
            style=STYLE, layout=lay,
        ),
        "radius": widgets.FloatSlider(
            value=p.radius * 1e9, min=50, max=3000, step=10, description="mean radius (nm)", **kw,
        ),
        "width": widgets.FloatSlider(
            value=p.width * 1e9, min=5, max=1000, step=5, description="upper arm width (nm)",
            **kw,
        ),
        "width_ratio": widgets.FloatSlider(
            value=p.width_ratio, min=0.2, max=3.0, step=0.05, description="width lower/upper",
            **kw,
        ),
        "lead_angle": widgets.FloatSlider(
            value=math.degrees(p.lead_angle), min=95, max=265, step=1,
            description="left lead angle (deg)", **kw,
        ),
        "density": widgets.FloatText(
            value=n_disp, step=0.1, description="density n (10¹¹ cm⁻²)", **kw,
        ),
        "fermi_energy": widgets.FloatText(
            value=ef_disp, step=0.1, description="Fermi energy E_F (meV)", **kw,
        ),
        "mobility": widgets.FloatLogSlider(
            value=mob, base=10, min=0, max=7.5, step=0.05,
            description="mobility (cm²/Vs; max = clean)", readout_format=".3g", **kw,
        ),
        "l_phi": widgets.FloatLogSlider(
            value=l_phi_um, base=10, min=-1.5, max=3, step=0.05,
            description="L_phi (µm; max = ∞)", readout_format=".3g", **kw,
        ),
        "temperature": widgets.FloatSlider(
            value=p.temperature, min=0.0, max=10.0, step=0.01, description="temperature (K)",
            **kw,
        ),
        "field": widgets.FloatRangeSlider(
            value=(p.field_min * 1e3, p.field_max * 1e3), min=-300, max=300, step=0.5,
            description="field window (mT)", **kw,
        ),
        "gate": widgets.FloatSlider(
            value=p.gate_potential / MEV, min=-20, max=20, step=0.05,
            description="arm gate (meV)", **kw,
        ),
        "gate_arm": widgets.Dropdown(
            options=["upper", "lower"], value=p.gate_arm, description="gated arm", style=STYLE,
            layout=lay,
        ),
        "coupling": widgets.FloatSlider(
            value=p.coupling, min=0.02, max=0.5, step=0.01,
            description="junction ε (single-channel)", **kw,
        ),
        "lattice_spacing": widgets.BoundedFloatText(
            value=0.0 if p.lattice_spacing is None else p.lattice_spacing * 1e9,
            min=0.0, max=100.0, step=0.5, description="lattice a (nm, 0 = auto)", **kw,
        ),
        "field_mode": widgets.Dropdown(
            options=[("AB flux tube (fast)", "flux_tube"), ("uniform field", "uniform")],
            value=p.field_mode, description="lattice field model", style=STYLE, layout=lay,
        ),
        "seed": widgets.BoundedIntText(
            value=p.seed, min=0, max=2**31 - 1, description="disorder seed", **kw,
        ),
    }  # fmt: skip
    return controls, source


def params_from_controls(c: dict[str, widgets.Widget], fermi_source: str) -> ExplorerParams:
    """Current control values as :class:`ExplorerParams` (raises ParameterError)."""
    b0, b1 = c["field"].value
    l_phi = c["l_phi"].value
    mob = c["mobility"].value
    carriers = (
        {"density": c["density"].value * DENSITY_UNIT}
        if fermi_source == "density"
        else {"fermi_energy": c["fermi_energy"].value * MEV}
    )
    return ExplorerParams(
        material=c["material"].value,
        radius=c["radius"].value / 1e9,
        width=c["width"].value / 1e9,
        width_ratio=c["width_ratio"].value,
        lead_angle=math.radians(c["lead_angle"].value),
        **carriers,
        mobility=math.inf if mob >= _CLEAN_MOBILITY else mob * _CM2,
        l_phi=None if l_phi >= _COHERENT_L_PHI else l_phi * 1e-6,
        temperature=c["temperature"].value,
        field_min=b0 * 1e-3,
        field_max=b1 * 1e-3,
        gate_potential=c["gate"].value * MEV,
        gate_arm=c["gate_arm"].value,
        coupling=c["coupling"].value,
        lattice_spacing=(c["lattice_spacing"].value / 1e9) or None,
        field_mode=c["field_mode"].value,
        seed=int(c["seed"].value),
    )


def set_controls(c: dict[str, widgets.Widget], p: ExplorerParams) -> str:
    """Put ``p`` into the widgets (caller suspends callbacks); returns the ``fermi_source``.

    Sliders clamp values outside their range; the caller compares
    :func:`params_from_controls` with ``p`` to report what did not fit.
    """
    fresh, source = make_controls(p)
    c["field"].min, c["field"].max = (min(c["field"].min, fresh["field"].value[0]),
                                      max(c["field"].max, fresh["field"].value[1]))  # fmt: skip
    for key, w in fresh.items():
        c[key].value = w.value
    return source
