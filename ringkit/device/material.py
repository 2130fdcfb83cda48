"""Materials in SI units: effective mass, Fermi sea, disorder and coherence (frozen, validated).

API
---
Material
    Frozen dataclass; ``Material.preset(name, **overrides)`` for "GaAs", "InAs" and "Au".
PRESET_NAMES
    Names accepted by :meth:`Material.preset`.

Conventions
-----------
* Energies in J, measured from the conduction-band bottom; lengths in m; mobility in m^2/(V s).
* Parabolic band: ``kF = sqrt(2 m* E_F)/hbar``, ``v_F = hbar kF/m*`` (any dimension).
* Sheet density (2D, spin-degenerate): ``n = kF^2/(2 pi)``, i.e. ``E_F = pi hbar^2 n/m*``.
* Disorder is given by exactly one of ``mobility``, ``mean_free_path`` (elastic, m) or
  ``disorder_strength`` (Anderson box width W in J). Mobility and mean free path are related by
  ``l = hbar kF mu / e`` (``mu = e tau/m*``, ``l = v_F tau``); the conversion to W happens in
  :mod:`ringkit.tightbinding.disorder` (Born approximation), because it needs the lattice.
* Zeeman energy of spin ``sigma = +-1`` (along +z): ``-sigma g mu_B B/2`` with the CODATA sign
  convention (free electron g = -2.0023), so for g < 0 spin up lies higher.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import KW_ONLY, dataclass
from typing import Any

from scipy import constants as _c

from ringkit._validation import ParameterError, check_positive
from ringkit.units import EV, HBAR, M_E, E

__all__ = ["Material", "PRESET_NAMES"]

PRESET_NAMES: tuple[str, ...] = ("GaAs", "InAs", "Au")

_DISORDER_KEYS = ("mobility", "mean_free_path", "disorder_strength")
_FERMI_KEYS = ("fermi_energy", "density")


@dataclass(frozen=True)
class Material:
    """Electronic material of the ring (a 2DEG or a metal film), in SI units.

    Parameters
    ----------
    effective_mass : float
        Effective mass m* in units of the free-electron mass m_e (> 0).
    fermi_energy : float, optional
        Fermi energy E_F in J above the band bottom. Give this or ``density``.
    density : float, optional
        2D sheet density n in m^-2 (spin-degenerate 2DEG). Give this or ``fermi_energy``;
        if both are given they must agree (``E_F = pi hbar^2 n/m*``) to 1e-6.
    mobility : float, optional
        Transport mobility mu in m^2/(V s) (1 m^2/(V s) = 1e4 cm^2/(V s)).
    mean_free_path : float, optional
        Elastic mean free path l in m.
    disorder_strength : float, optional
        Anderson on-site box width W in J (values uniform in [-W/2, W/2]).
        At most one of ``mobility``, ``mean_free_path``, ``disorder_strength``; none = clean.
    temperature : float
        Temperature in K (>= 0), carried for thermal averaging by the transport layer.
    l_phi : float, optional
        Phase-coherence length L_phi in m, carried for dephasing models.
    g_factor : float
        Effective Lande g factor (CODATA sign convention, free electron -2.0023); 0 switches
        the Zeeman splitting off.
    name : str
        Label.

    Raises
    ------
    ParameterError
        Non-positive mass, density, energy, mobility or lengths; negative temperature or
        disorder; neither or inconsistent Fermi data; several disorder specifications.
    """

    effective_mass: float
    _: KW_ONLY
    fermi_energy: float | None = None
    density: float | None = None
    mobility: float | None = None
    mean_free_path: float | None = None
    disorder_strength: float | None = None
    temperature: float = 0.0
    l_phi: float | None = None
    g_factor: float = 0.0
    name: str = ""

    def __post_init__(self) -> None:
        set_ = lambda k, v: object.__setattr__(self, k, v)  # noqa: E731 (frozen dataclass)
        set_("effective_mass", check_positive("effective_mass", self.effective_mass, "m_e"))
        for key, unit in (
            ("fermi_energy", "J"),
            ("density", "m^-2"),
            ("mobility", "m^2/(V s)"),
            ("mean_free_path", "m"),
            ("l_phi", "m"),
        ):
            value = getattr(self, key)
            if value is not None:
                set_(key, check_positive(key, value, unit))
        if self.disorder_strength is not None:
            set_(
                "disorder_strength",
                check_positive("disorder_strength", self.disorder_strength, "J", allow_zero=True),
            )
        set_("temperature", check_positive("temperature", self.temperature, "K", allow_zero=True))
        try:
            g = float(self.g_factor)
        except (TypeError, ValueError):
            raise ParameterError("g_factor", self.g_factor, "must be a real number") from None
        if not math.isfinite(g):
            raise ParameterError("g_factor", self.g_factor, "must be finite")
        set_("g_factor", g)
        set_("name", str(self.name))

        if self.fermi_energy is None and self.density is None:
            raise ParameterError(
                "fermi_energy", None, "give fermi_energy [J] or density [m^-2] (one is required)"
            )
        if self.fermi_energy is not None and self.density is not None:
            from_n = math.pi * HBAR**2 * self.density / (self.effective_mass * M_E)
            if abs(from_n - self.fermi_energy) > 1e-6 * from_n:
                raise ParameterError(
                    "fermi_energy",
                    self.fermi_energy,
                    f"must equal pi hbar^2 n/m* = {from_n:.6g} J for density = {self.density:g}"
                    " m^-2 (or give only one of them)",
                    "J",
                )
        given = [k for k in _DISORDER_KEYS if getattr(self, k) is not None]
        if len(given) > 1:
            raise ParameterError(
                given[1],
                getattr(self, given[1]),
                f"only one of mobility, mean_free_path, disorder_strength may be given "
                f"(also got {given[0]} = {getattr(self, given[0])!r})",
            )

    # ----------------------------------------------------------------------------- Fermi sea
    @property
    def fermi_energy_J(self) -> float:
        """Fermi energy E_F in J above the band bottom."""
        if self.fermi_energy is not None:
            return float(self.fermi_energy)
        return math.pi * HBAR**2 * float(self.density) / (self.effective_mass * M_E)

    @property
    def mass_kg(self) -> float:
        """Effective mass in kg."""
        return self.effective_mass * M_E

    @property
    def fermi_wavevector(self) -> float:
        """Fermi wavevector ``kF = sqrt(2 m* E_F)/hbar`` in 1/m."""
        return math.sqrt(2.0 * self.mass_kg * self.fermi_energy_J) / HBAR

    @property
    def fermi_wavelength(self) -> float:
        """Fermi wavelength ``2 pi/kF`` in m."""
        return 2.0 * math.pi / self.fermi_wavevector

    @property
    def fermi_velocity(self) -> float:
        """Fermi velocity ``hbar kF/m*`` in m/s."""
        return HBAR * self.fermi_wavevector / self.mass_kg

    @property
    def sheet_density(self) -> float:
        """2D spin-degenerate density ``kF^2/(2 pi)`` in m^-2 of a 2DEG with this E_F."""
        return self.fermi_wavevector**2 / (2.0 * math.pi)

    # ---------------------------------------------------------------------------- disorder
    @property
    def elastic_mean_free_path(self) -> float | None:
        """Elastic mean free path l in m (from ``mean_free_path`` or ``hbar kF mu/e``).

        ``None`` for a clean material or when only the lattice strength W is given (then the
        Born value depends on the lattice; see :mod:`ringkit.tightbinding.disorder`).
        """
        if self.mean_free_path is not None:
            return float(self.mean_free_path)
        if self.mobility is not None:
            return HBAR * self.fermi_wavevector * self.mobility / E
        return None

    @property
    def transport_mobility(self) -> float | None:
        """Mobility in m^2/(V s) (given, or ``e l/(hbar kF)`` from the mean free path)."""
        if self.mobility is not None:
            return float(self.mobility)
        if self.mean_free_path is not None:
            return E * self.mean_free_path / (HBAR * self.fermi_wavevector)
        return None

    @property
    def scattering_time(self) -> float | None:
        """Elastic scattering time ``tau = l/v_F`` in s (``None`` if l is unknown)."""
        l_el = self.elastic_mean_free_path
        return None if l_el is None else l_el / self.fermi_velocity

    @property
    def diffusion_constant(self) -> float | None:
        """2D diffusion constant ``D = v_F l/2`` in m^2/s (``None`` if l is unknown)."""
        l_el = self.elastic_mean_free_path
        return None if l_el is None else self.fermi_velocity * l_el / 2.0

    @property
    def sheet_conductance(self) -> float | None:
        """Drude sheet conductance ``n e mu`` in units of e^2/h (equals kF l for a 2DEG)."""
        mu = self.transport_mobility
        if mu is None:
            return None
        return self.sheet_density * E * mu / (E**2 / _c.h)

    def zeeman_energy(self, field: float, spin: int) -> float:
        """Zeeman energy ``-spin g mu_B B/2`` in J of spin ``+1``/``-1`` along +z in field B [T]."""
        if spin not in (1, -1):
            raise ParameterError("spin", spin, "must be +1 or -1")
        mu_b = _c.physical_constants["Bohr magneton"][0]
        return -spin * self.g_factor * mu_b * float(field) / 2.0

    # ---------------------------------------------------------------------------- presets
    @classmethod
    def preset(cls, name: str, **overrides: Any) -> Material:
        """Material preset with published parameters; keyword overrides replace fields.

        Presets (m* in m_e; sources; "[M]" = from memory, not re-checked):

        ``"GaAs"`` -- GaAs/AlGaAs 2DEG.
            * ``effective_mass = 0.067``: P. Y. Yu, M. Cardona, *Fundamentals of
              Semiconductors* (Springer 2001), effective-mass table.
            * ``density = 3e15 m^-2`` (3e11 cm^-2): typical HEMT value, range 1e11-5e11 cm^-2
              [M].
            * ``mobility = 4.0 m^2/(V s)`` (40 000 cm^2/(V s) at 4 K) and
              ``l_phi = 0.4 um``: etched GaAs ring of A. M. Chang, G. Timp
              et al., Surf. Sci. 196, 46 (1988) (abstract).
            * ``g_factor = -0.44``: bulk GaAs conduction band [M].
        ``"InAs"`` -- InAs quantum-well 2DEG.
            * ``effective_mass = 0.026``: Yu & Cardona (as above); 0.023 is also often quoted
              [M] -- override if needed.
            * ``density = 5e15 m^-2`` (5e11 cm^-2) and ``mobility = 5.0 m^2/(V s)``
              (5e4 cm^2/(V s)): typical quantum-well values [M].
            * ``g_factor = -14.9``: bulk InAs [M].
        ``"Au"`` -- free-electron metal film (Au).
            * ``effective_mass = 1.0``: free-electron model.
            * ``fermi_energy = 5.53 eV``: N. W. Ashcroft, N. D. Mermin, *Solid State Physics*
              (Saunders 1976), free-electron table (value as transcribed with attribution;
              table number [M]); implies v_F = 1.39e6 m/s (A&M: 1.40e6 m/s).
            * ``g_factor``: free-electron value from scipy.constants (CODATA).
            * No mean free path or L_phi: they depend on the film; give them as overrides.

        Raises
        ------
        ParameterError
            Unknown preset name.
        """
        key = str(name).strip().lower()
        table = {
            "gaas": dict(
                effective_mass=0.067,
                density=3e15,
                mobility=4.0,
                l_phi=0.4e-6,
                g_factor=-0.44,
                name="GaAs/AlGaAs 2DEG",
            ),
            "inas": dict(
                effective_mass=0.026,
                density=5e15,
                mobility=5.0,
                g_factor=-14.9,
                name="InAs 2DEG",
            ),
            "au": dict(
                effective_mass=1.0,
                fermi_energy=5.53 * EV,
                g_factor=_c.physical_constants["electron g factor"][0],
                name="Au film (free electrons)",
            ),
        }
        if key not in table:
            raise ParameterError(
                "name", name, "must be one of " + ", ".join(repr(n) for n in PRESET_NAMES)
            )
        values = dict(table[key])
        if any(k in overrides for k in _FERMI_KEYS):
            for k in _FERMI_KEYS:
                values.pop(k, None)
        if any(k in overrides for k in _DISORDER_KEYS):
            for k in _DISORDER_KEYS:
                values.pop(k, None)
        values.update(overrides)
        return cls(**values)

    # ---------------------------------------------------------------------------- I/O
    def to_dict(self) -> dict[str, Any]:
        """Plain dict of the fields (JSON-serialisable)."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Material:
        """Inverse of :meth:`to_dict`."""
        return cls(**data)
