"""Derived quantities of the explorer settings, in lab units with sensible digits (no widgets).

derived_quantities(params) -> list of Derived
    Fermi energy, Fermi wave vector and wavelength, sheet density, transverse modes per arm,
    elastic mean free path, transport regime, thermal length L_T and Thouless energy.

Relations (spin-degenerate 2DEG; closed forms, e.g. J. H. Davies, *The Physics of
Low-Dimensional Semiconductors* (1998), ch. 1 and 6):

* ``E_F = pi hbar^2 n / m*``, ``k_F = sqrt(2 pi n)``, ``lambda_F = 2 pi / k_F``
  (:class:`ringkit.device.Material`);
* transverse modes of a hard-wall arm of width W: ``N = floor(k_F W / pi)``;
* elastic mean free path ``l = hbar k_F mu / e``, diffusion constant ``D = v_F l / 2``;
* the ring is ballistic when ``l >= L`` with ``L = pi r`` (one arm, the h/e path), diffusive
  otherwise; Thouless energy ``E_Th = hbar v_F / L`` (ballistic) or ``hbar D / L^2``
  (diffusive) (:func:`ringkit.transport.thermal.thouless_energy`); thermal length
  ``L_T = hbar v_F / (k_B T)`` (ballistic) or ``sqrt(hbar D / (k_B T))`` (diffusive).

docs/panels.md, "Device explorer".
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ringkit.units import EV, HBAR, K_B
from ringkit.view.panels.explorer import ExplorerParams

__all__ = ["Derived", "derived_quantities", "transverse_modes", "format_value"]


@dataclass(frozen=True)
class Derived:
    """One derived quantity: ``key``, display ``label``, SI ``value`` and display ``text``."""

    key: str
    label: str
    value: float
    text: str


def transverse_modes(k_fermi: float, width: float) -> int:
    """Open transverse modes of a hard-wall strip of width ``width`` (m): floor(kF W/pi)."""
    return max(0, math.floor(k_fermi * width / math.pi + 1e-12))


def format_value(value: float, unit: str, digits: int = 3) -> str:
    """``value`` with ``digits`` significant digits and its unit ("n/a" when not finite)."""
    if value is None or not math.isfinite(value):
        return "∞" if value == math.inf else "n/a"
    return f"{value:.{digits}g} {unit}".strip()


def derived_quantities(params: ExplorerParams) -> list[Derived]:
    """Derived quantities of ``params`` (module docstring); raises ParameterError on bad input."""
    from ringkit.transport.thermal import thouless_energy

    mat = params.material_obj()
    geo = params.geometry()
    e_f = mat.fermi_energy_J
    k_f = mat.fermi_wavevector
    v_f = mat.fermi_velocity
    n = mat.sheet_density
    length = math.pi * geo.mean_radius
    l_el = mat.elastic_mean_free_path
    w_up = params.width
    w_lo = params.width * params.width_ratio
    modes = (transverse_modes(k_f, w_up), transverse_modes(k_f, w_lo))
    ballistic = l_el is None or l_el >= length
    if ballistic:
        e_th = thouless_energy(length, fermi_velocity=v_f)
    else:
        e_th = thouless_energy(length, diffusion_constant=v_f * l_el / 2)
    kt = K_B * params.temperature
    if kt == 0:
        l_t = math.inf
    elif ballistic:
        l_t = HBAR * v_f / kt
    else:
        l_t = math.sqrt(HBAR * (v_f * l_el / 2) / kt)
    mev = 1e-3 * EV
    mode_text = f"{modes[0]}" if modes[0] == modes[1] else f"{modes[0]} upper / {modes[1]} lower"
    regime = "ballistic (l ≥ πr)" if ballistic else "diffusive (l < πr)"
    return [
        Derived("fermi_energy", "Fermi energy E_F", e_f, format_value(e_f / mev, "meV", 4)),
        Derived("density", "sheet density n", n, format_value(n * 1e-15, "× 10¹¹ cm⁻²", 4)),
        Derived("k_fermi", "Fermi wave vector k_F", k_f, format_value(k_f * 1e-9, "nm⁻¹", 4)),
        Derived(
            "wavelength",
            "Fermi wavelength λ_F",
            2 * math.pi / k_f,
            format_value(2 * math.pi / k_f * 1e9, "nm", 3),
        ),  # fmt: skip
        Derived("modes", "transverse modes per arm", float(min(modes)), mode_text),
        Derived(
            "mean_free_path",
            "mean free path l",
            math.inf if l_el is None else l_el,
            "∞ (clean)" if l_el is None else format_value(l_el * 1e6, "µm", 3),
        ),  # fmt: skip
        Derived("regime", "regime (arm length πr)", float(ballistic), regime),
        Derived(
            "thermal_length",
            "thermal length L_T",
            l_t,
            "∞ (T = 0)" if math.isinf(l_t) else format_value(l_t * 1e6, "µm", 3),
        ),  # fmt: skip
        Derived(
            "thouless_energy", "Thouless energy E_Th", e_th, format_value(e_th / EV * 1e6, "µeV", 3)
        ),  # fmt: skip
    ]
