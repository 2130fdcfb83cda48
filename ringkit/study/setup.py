"""Study set-up: the devices of a study, checked before any work starts.

:func:`check_setup` builds every distinct :class:`ringkit.device.RingDevice` of the plan and the
first realization's lattice, so that a bad parameter (Fermi energy outside the lattice band,
leads without an open channel, too many sites or probes) fails at once with the study-file key
in the message. It returns the derived numbers shared by every work unit and the reports.

API
---
StudySetup
    Derived device quantities (lattice spacing, sites, bands, correlation energy, ...).
check_setup(plan) -> StudySetup
make_device(physics, fermi_energy, gate_potential) -> RingDevice
correlation_energy(device) -> float
thermal_grid(device, temperature, thermal) -> ThermalGrid
thermal_average(ring, temperature, thermal, g_at) -> EnergyAverage
"""

from __future__ import annotations

import contextlib
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ringkit._validation import ParameterError
from ringkit.study.checks import (
    check_born_mean_free_path,
    check_l_phi_values,
    check_mean_free_path,
    lattice_modes,
    transverse_modes,
)
from ringkit.study.plan import StudyPlan
from ringkit.study.quantities import format_quantity
from ringkit.units import ab_period

__all__ = [
    "StudySetup",
    "check_setup",
    "make_device",
    "correlation_energy",
    "thermal_grid",
    "thermal_average",
]


@dataclass(frozen=True)
class StudySetup:
    """Quantities derived from the device before any computation (same for every unit).

    Attributes
    ----------
    n_sites : int
        Number of lattice sites of the first realization's scattering region.
    lattice_spacing, hopping : float
        Resolved lattice spacing a in m and hopping t in J.
    fermi_energy : float
        Fermi energy in J of the material (used when the study sweeps none).
    r_in, r_out : float
        Ring radii in m (bands of the analysis).
    expected_period_he : float
        h/e period ``h/(e pi r_m^2)`` in T of the mean radius.
    details : dict
        Further device numbers for reports (kF, lambda_F, mean free path, ...).
    notes : tuple of str
        Warnings raised while checking the devices (reported, not fatal).
    device_attrs : dict
        netCDF attributes of the first realization's ring (``ringkit.transport.ring_attrs``,
        prefixed ``reference_device.``).
    """

    n_sites: int
    lattice_spacing: float
    hopping: float
    fermi_energy: float
    r_in: float
    r_out: float
    expected_period_he: float
    details: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    device_attrs: dict[str, Any] = field(default_factory=dict)

    def attrs(self) -> dict[str, Any]:
        """Flat numeric attributes for the netCDF file (SI)."""
        out = {
            "n_sites": self.n_sites,
            "lattice_spacing [m]": self.lattice_spacing,
            "hopping [J]": self.hopping,
            "material_fermi_energy [J]": self.fermi_energy,
            "expected_period_he [T]": self.expected_period_he,
        }
        out.update({k: v for k, v in self.details.items() if isinstance(v, int | float | str)})
        out.update(self.device_attrs)
        return out

    def summary(self) -> dict[str, Any]:
        """JSON-able device summary for ``summary.json``."""
        return {
            "n_sites": self.n_sites,
            "lattice_spacing_m": self.lattice_spacing,
            "hopping_J": self.hopping,
            "material_fermi_energy_J": self.fermi_energy,
            "r_in_m": self.r_in,
            "r_out_m": self.r_out,
            "expected_period_he_T": self.expected_period_he,
            **{
                k.replace(" [", "_").replace("]", "").replace("^", ""): v
                for k, v in self.details.items()
            },
        }

    def describe(self) -> list[tuple[str, str]]:
        """Rows ``(quantity, value)`` for the report, in lab units with 4 significant digits."""
        r_m = 0.5 * (self.r_in + self.r_out)
        area = math.pi * r_m**2
        rows = [
            ("lattice sites (realization 0)", f"{self.n_sites:,}"),
            ("lattice spacing a", format_quantity(self.lattice_spacing, "length", 4)),
            ("hopping t = hbar^2/(2 m* a^2)", format_quantity(self.hopping, "energy", 4)),
            ("Fermi energy of the material", format_quantity(self.fermi_energy, "energy", 4)),
            ("r_in, r_out", f"{_len(self.r_in)}, {_len(self.r_out)}"),
            (
                f"h/e period as a field (mean radius r_m = {_len(r_m)}, area pi r_m^2 = "
                f"{area * 1e12:.4g} µm²)",
                format_quantity(self.expected_period_he, "field", 4),
            ),
            ("h/2e period as a field", format_quantity(self.expected_period_he / 2, "field", 4)),
        ]
        for key, value in self.details.items():
            label, text = _lab_row(key, value)
            rows.append((label, text))
        return rows


def _len(v: float) -> str:
    return format_quantity(v, "length", 4)


#: details key -> (label, formatter) of the report rows (lab units; factors are definitions:
#: 1 nm^-1 = 1e9 m^-1, 1 cm^-2 = 1e4 m^-2, 1 cm^2/Vs = 1e-4 m^2/Vs, 1 µm^2 = 1e-12 m^2)
_LAB = {
    "kF [1/m]": ("Fermi wavevector kF", lambda v: f"{v * 1e-9:.4g} nm^-1"),
    "fermi_wavelength [m]": ("Fermi wavelength", _len),
    "fermi_velocity [m/s]": ("Fermi velocity", lambda v: f"{v / 1e5:.4g} x 10^5 m/s"),
    "sheet_density [m^-2]": ("sheet density", lambda v: f"{v * 1e-4:.4g} cm^-2"),
    "kF a": ("kF a", lambda v: f"{v:.3g}"),
    "dispersion_error": ("lattice dispersion error at E_F", lambda v: f"{100 * v:.2g} %"),
    "effective_mass [m_e]": ("effective mass", lambda v: f"{v:.4g} m_e"),
    "transverse_modes_per_arm": (
        "transverse modes per arm (lattice strip of the narrowest arm's width, at E_F)",
        str,
    ),
    "transverse_modes_per_arm_continuum": (
        "transverse modes per arm, continuum hard-wall estimate floor(kF W/pi)",
        str,
    ),
    "open_channels_per_lead": ("open channels per lead on the lattice at E_F", str),
    "lead_sites_across": ("lead width in sites", str),
    "disorder_strength_W [J]": (
        "Anderson disorder strength W",
        lambda v: format_quantity(v, "energy", 4),
    ),
    "correlation_energy [J]": (
        "correlation energy E_c of the arms",
        lambda v: format_quantity(v, "energy", 4),
    ),
    "thermal_energies_per_temperature": ("energies of the thermal average per temperature", str),
    "mean_area [m^2]": ("mean area pi r_m^2", lambda v: f"{v * 1e12:.4g} µm²"),
    "mobility [m^2/Vs]": ("mobility", lambda v: f"{v * 1e4:.4g} cm²/Vs"),
    "elastic_mean_free_path [m]": ("elastic mean free path (material)", _len),
    "born_mean_free_path [m]": ("Born mean free path of the lattice disorder", _len),
}


def _lab_row(key: str, value: Any) -> tuple[str, str]:
    if key in _LAB:
        label, fmt = _LAB[key]
        return label, fmt(value)
    return key, f"{value:.4g}" if isinstance(value, float) else str(value)


def make_device(
    physics: dict[str, dict[str, Any]], fermi_energy: float | None, gate_potential: float
):
    """The :class:`ringkit.device.RingDevice` of one unit (SI inputs from the study file)."""
    from ringkit.device import ArmGate, Material, RingDevice, RingGeometry

    m = physics["material"]
    overrides = {
        k: m[k]
        for k in (
            "effective_mass",
            "fermi_energy",
            "density",
            "mobility",
            "mean_free_path",
            "disorder_strength",
        )
        if m[k] is not None
    }
    if fermi_energy is not None:
        overrides.pop("density", None)
        overrides["fermi_energy"] = fermi_energy
    material = Material.preset(m["preset"], **overrides)
    g = physics["geometry"]
    extra: dict[str, Any] = {"lead_width": g["lead_width"]} if g["lead_width"] else {}
    if g.get("leads"):
        extra["leads"] = list(g["leads"])
    geometry = RingGeometry.circular(g["r_in"], g["r_out"], **extra)
    sw = physics["sweep"]
    gate = ArmGate(arm=sw["gate_arm"], potential=gate_potential) if gate_potential else None
    lat = physics["lattice"]
    kwargs: dict[str, Any] = {"field_mode": physics["field"]["mode"]}
    if lat["spacing"] is not None:
        kwargs["lattice_spacing"] = lat["spacing"]
    if lat["max_sites"] is not None:
        kwargs["max_sites"] = lat["max_sites"]
    return RingDevice(material, geometry, gate=gate, **kwargs)


# device-layer parameter names -> study-file keys (for error messages)
_STUDY_KEYS = {
    "effective_mass": ("material.effective_mass", "m_e"),
    "fermi_energy": ("material.fermi_energy (or sweep.fermi_energy)", "J"),
    "density": ("material.density", "m^-2"),
    "mobility": ("material.mobility", "m^2/Vs"),
    "mean_free_path": ("material.mean_free_path", "m"),
    "disorder_strength": ("material.disorder_strength", "J"),
    "r_in": ("geometry.r_in", "m"),
    "r_out": ("geometry.r_out", "m"),
    "lead_width": ("geometry.lead_width", "m"),
    "lattice_spacing": ("lattice.spacing", "m"),
    "n_sites": ("number of lattice sites (see lattice.max_sites)", ""),
    "potential": ("sweep.gate_potential", "J"),
}


@contextlib.contextmanager
def study_names():
    """Re-raise device-layer ParameterErrors under the study-file key they come from."""
    try:
        yield
    except ParameterError as err:
        if str(err.name).startswith("leads"):  # leads, leads[2].angle: the lead layout
            raise ParameterError(f"geometry.{err.name}", err.value, err.allowed) from err
        if err.name not in _STUDY_KEYS:
            raise
        key, unit = _STUDY_KEYS[err.name]
        raise ParameterError(key, err.value, err.allowed, unit) from err


def check_setup(plan: StudyPlan) -> StudySetup:
    """Check every value and every distinct device of the plan, and build the first ring.

    Everything a unit could refuse is checked here, before any work starts: every device
    (size, Fermi energy inside the lattice band), the thermal window of every temperature
    at every Fermi energy (inside the band, open lead channels), the elastic mean free path
    against the lattice spacing (a shorter one is not a physical disorder strength on this
    lattice), and every finite dephasing length against the spacing of the probes along the
    arms (the probe model cannot resolve a shorter one). The first unit's ring is built here
    (one lattice build) to report its real size, disorder strength, Born mean free path and
    number of open lead channels. Warnings (e.g. a coarse lattice) become ``notes``.

    Raises
    ------
    ringkit.ParameterError
        A value is out of its physical range, named by its study-file key.
    """
    import warnings

    from ringkit.tightbinding import build_ring
    from ringkit.transport.dataset import ring_attrs

    physics = plan.config.physics()
    with warnings.catch_warnings(record=True) as caught, study_names():
        warnings.simplefilter("always")
        for e in plan.fermi_energies:
            for gpot in plan.gate_potentials:
                device = make_device(physics, e, gpot)
                device.check_size()
                check_mean_free_path(physics, device)
        first = plan.units[0]
        ring = build_ring(make_device(physics, first.fermi_energy, 0.0), seed=first.seed)
        ring.check_field(float(np.max(np.abs(plan.field))) if plan.field_name == "B" else 0.0)
    check_born_mean_free_path(physics, ring)
    notes = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
    n_thermal: list[int] = []
    for e in plan.fermi_energies:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # already reported above
            device = make_device(physics, e, 0.0)
        for temp in plan.temperatures:
            grid = thermal_grid(device, temp, physics["thermal"])
            _check_window(ring, grid, temp)
            if e == plan.fermi_energies[0]:
                n_thermal.append(grid.n_energies)
    if any(math.isfinite(d) for d in plan.l_phi_values):
        from ringkit.transport.probes import ring_probe_sites

        ring_probe_sites(ring.fsyst, physics["dephasing"]["probes"])
        check_l_phi_values(plan, ring.device)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        base = make_device(physics, None, 0.0)
    mat = base.material
    geo = base.geometry
    r_m = 0.5 * (geo.r_in + geo.r_out)
    prop, _ = ring.fsyst.leads[0].modes(energy=ring.fermi_energy_lattice, params=ring.params())
    details: dict[str, Any] = {
        "kF [1/m]": mat.fermi_wavevector,
        "fermi_wavelength [m]": mat.fermi_wavelength,
        "fermi_velocity [m/s]": mat.fermi_velocity,
        "sheet_density [m^-2]": mat.sheet_density,
        "kF a": base.kfa,
        "dispersion_error": base.dispersion_error,
        "effective_mass [m_e]": mat.effective_mass,
        "transverse_modes_per_arm": lattice_modes(
            ring.fermi_energy_lattice, round(geo.min_arm_width / base.spacing)
        ),
        "transverse_modes_per_arm_continuum": transverse_modes(
            mat.fermi_wavevector, geo.min_arm_width
        ),
        "open_channels_per_lead": len(prop.velocities) // 2,
        "lead_sites_across": int(ring.lead_sites),
        "disorder_strength_W [J]": float(ring.disorder_strength),
        "correlation_energy [J]": correlation_energy(ring.device),
        "thermal_energies_per_temperature": ", ".join(str(n) for n in n_thermal),
        "mean_area [m^2]": math.pi * r_m**2,
    }
    if mat.transport_mobility is not None:
        details["mobility [m^2/Vs]"] = float(mat.transport_mobility)
    if mat.elastic_mean_free_path is not None:
        details["elastic_mean_free_path [m]"] = float(mat.elastic_mean_free_path)
    if ring.born_mean_free_path is not None:
        details["born_mean_free_path [m]"] = float(ring.born_mean_free_path)
    device_attrs = {f"reference_device.{k}": v for k, v in ring_attrs(ring).items()}
    return StudySetup(
        n_sites=int(ring.n_sites),
        lattice_spacing=base.spacing,
        hopping=base.hopping,
        fermi_energy=mat.fermi_energy_J,
        r_in=geo.r_in,
        r_out=geo.r_out,
        expected_period_he=ab_period(math.pi * r_m**2),
        details=details,
        notes=notes,
        device_attrs=device_attrs,
    )


def _check_window(ring, grid, temperature: float) -> None:
    """The thermal window must lie inside the band, and the leads must conduct at E_F.

    Energies of the window where a lead has no open channel contribute G = 0 (the engine's
    convention); no open channel at the Fermi energy itself would make G vanish altogether.
    """
    lo, hi = float(grid.energies.min()), float(grid.energies.max())
    context = f"sweep.temperature = {format_quantity(temperature, 'temperature')}"
    if not (lo > 0 and hi < ring.band_top):
        raise ParameterError(
            "sweep.temperature",
            format_quantity(temperature, "temperature"),
            f"the thermal window {format_quantity(lo, 'energy', 4)} .. "
            f"{format_quantity(hi, 'energy', 4)} must stay inside the band (0, "
            f"{format_quantity(ring.band_top, 'energy', 4)}): lower the temperature or "
            "raise the Fermi energy",
        )
    _check_open_channels(ring, float(grid.mu), context)


def _check_open_channels(ring, energy: float, context: str) -> None:
    """Raise if a lead has no propagating channel at ``energy`` (J)."""
    params = ring.params()
    for i, lead in enumerate(ring.fsyst.leads):
        prop, _ = lead.modes(energy=ring.to_lattice_energy(energy), params=params)
        if len(prop.velocities) == 0:
            raise ParameterError(
                "geometry.lead_width",
                format_quantity(ring.lead_sites * ring.lattice_spacing, "length", 4),
                f"lead {i} has no open channel at E = {format_quantity(energy, 'energy', 4)} "
                f"({context}): widen the leads or raise the Fermi energy",
            )


def correlation_energy(device) -> float:
    """Energy scale (J) on which G(E) of the ring varies: ``hbar v_F / L`` with the arm length
    ``L = pi r_m`` (ballistic), or the Thouless energy ``hbar D / L^2`` with ``D = v_F l / 2``
    when the elastic mean free path ``l`` is shorter than ``L`` (diffusive arms)."""
    from ringkit.transport.thermal import thouless_energy

    geo, mat = device.geometry, device.material
    length = math.pi * 0.5 * (geo.r_in + geo.r_out)
    l_el = mat.elastic_mean_free_path
    if l_el is not None and l_el < length:
        return thouless_energy(length, diffusion_constant=mat.fermi_velocity * l_el / 2.0)
    return thouless_energy(length, fermi_velocity=mat.fermi_velocity)


def thermal_grid(device, temperature: float, thermal: dict[str, Any]):
    """Window of the thermal policy around the device's E_F (J), with a cost estimate.

    :class:`ringkit.transport.thermal.ThermalGrid` of equally spaced energies spanning the
    widest window ``|E - E_F| <= k_B T ln(20 * 64 / tol)`` that
    :func:`ringkit.thermal_policy.energy_average` can use (a bound of 32 lead modes; checked
    against the band and the lead thresholds), as many as the adaptive rule's first pass
    evaluates (15 per interval of 2 k_B T): a lower bound of its cost. The thermal averages
    themselves come from :func:`thermal_average`.

    Parameters
    ----------
    device : RingDevice
        Sets the Fermi energy.
    temperature : float
        Temperature in K (0: the single energy E_F).
    thermal : dict
        The ``[thermal]`` section (``tol`` in e^2/h, default 1e-4).
    """
    from ringkit.thermal_policy import DEFAULT_TOL, budget_grid, thermal_window
    from ringkit.transport.thermal import ThermalGrid
    from ringkit.units import K_B

    mu = device.material.fermi_energy_J
    kt = K_B * temperature
    tol = thermal.get("tol", DEFAULT_TOL)
    n = 1 if kt == 0 else 15 * max(1, round(thermal_window(kt, tol, 64.0) / kt)) + 1
    energies, weights = budget_grid(mu, kt, n, tol=tol, bound=64.0)
    step = float(energies[1] - energies[0]) if energies.size > 1 else 0.0
    return ThermalGrid(energies, weights, mu, temperature, kt, step)


def thermal_average(
    ring, temperature: float, thermal: dict[str, Any], g_at, *, batched: bool = False
):
    """G(T) = integral G(E)(-df/dE) dE by the thermal policy (:mod:`ringkit.thermal_policy`).

    Parameters
    ----------
    ring : TightBindingRing
        The unit's lattice (Fermi energy, lead modes for the bound of G).
    temperature : float
        K.
    thermal : dict
        The ``[thermal]`` section: ``tol`` (e^2/h, default 1e-4), ``method`` ("adaptive").
    g_at : callable
        ``g_at(E)`` -> spin-degenerate G (e^2/h) over the field at energy E (J); with
        ``batched``, ``g_at(energies)`` -> one row per energy.

    Returns
    -------
    EnergyAverage
        ``value``, ``error``, ``n_energies``, ``energies`` (J).
    """
    from ringkit.thermal_policy import DEFAULT_TOL, energy_average
    from ringkit.units import K_B

    tol = thermal.get("tol", DEFAULT_TOL)
    return energy_average(
        g_at,
        ring.fermi_energy,
        K_B * temperature,
        tol=tol,
        method=thermal.get("method", "adaptive"),
        bound=thermal_bound(ring, temperature, tol),
        batched=batched,
    )


def thermal_bound(ring, temperature: float, tol: float) -> float:
    """Bound of the spin-degenerate G (e^2/h) over the thermal window of ``temperature`` (K),
    as :func:`thermal_average` passes it to the policy (at least 1)."""
    from ringkit.transport.sweep import transmission_bound

    if temperature == 0:
        return 1.0
    tb = transmission_bound(ring, ring.fermi_energy_lattice, temperature, tol, ring.params())
    return max(2.0 * tb, 1.0)
