"""Physical constants and the unit conventions of ringkit (the one place they live).

Conventions
-----------
* SI at every public boundary: metres, tesla, kelvin, joules; energies may also be given in
  electronvolts where a parameter name ends in ``_eV``.
* Flux quantum: ``PHI0 = h/e`` (the normal-metal flux quantum, period of h/e oscillations).
  ``h`` and ``e`` come from :mod:`scipy.constants` (exact in the 2019 SI).
* Peierls phase of a link: ``2*pi*Phi_link/(h/e)`` with ``Phi_link = integral of A.dl``
  (see :mod:`ringkit.tightbinding.fields`). The field ``B`` is along +z; the carriers are
  electrons (charge -e).
* Conductance is stored in units of e^2/h; :func:`conductance_to_siemens` converts.
  Two-terminal G includes the spin degeneracy factor 2 unless ``spin_resolved`` is asked for.
* Lattice hopping: ``t = hbar^2 / (2 m* a^2)``.
"""

from __future__ import annotations

import numpy as np
from scipy import constants as _c

from ringkit._validation import ParameterError, check_positive

__all__ = [
    "H",
    "E",
    "HBAR",
    "K_B",
    "M_E",
    "EV",
    "PHI0",
    "PHI0_AAS",
    "E2H",
    "G0",
    "flux_quantum",
    "ab_period",
    "ab_frequency",
    "area_from_frequency",
    "radius_from_period",
    "hopping_energy",
    "conductance_to_siemens",
    "siemens_to_conductance",
    "magnetic_length",
]

H: float = _c.h
E: float = _c.e
HBAR: float = _c.hbar
K_B: float = _c.k
M_E: float = _c.m_e
EV: float = _c.electron_volt
PHI0: float = _c.h / _c.e
"""Flux quantum h/e in Wb (period of the Aharonov-Bohm h/e oscillation)."""
PHI0_AAS: float = _c.h / (2 * _c.e)
"""h/2e in Wb (Altshuler-Aronov-Spivak period)."""
E2H: float = _c.e**2 / _c.h
"""Conductance quantum per spin e^2/h in siemens."""
G0: float = 2 * _c.e**2 / _c.h
"""Spin-degenerate conductance quantum 2e^2/h in siemens."""


def flux_quantum(order: int = 1) -> float:
    """Flux period of the ``order``-th harmonic, ``h/(order*e)`` in Wb."""
    if int(order) != order or order < 1:
        raise ParameterError("order", order, "must be an integer >= 1")
    return PHI0 / order


def ab_period(area: float, order: int = 1) -> float:
    """Field period ``h/(order*e*area)`` in T of oscillations enclosing ``area`` (m^2)."""
    area = check_positive("area", area, "m^2")
    return flux_quantum(order) / area


def ab_frequency(area: float, order: int = 1) -> float:
    """Frequency in 1/T (Fourier conjugate of B) of the h/(order*e) line: ``order*area/(h/e)``."""
    return 1.0 / ab_period(area, order)


def area_from_frequency(frequency: float | np.ndarray, order: int = 1) -> float | np.ndarray:
    """Enclosed area in m^2 from a Fourier frequency in 1/T of the h/(order*e) line."""
    return np.asarray(frequency) * PHI0 / order


def radius_from_period(period: float, order: int = 1) -> float:
    """Effective radius ``sqrt(h/(order*e*pi*period))`` in m from a field period in T."""
    period = check_positive("period", period, "T")
    flux_quantum(order)
    return float(np.sqrt(PHI0 / (order * np.pi * period)))


def hopping_energy(effective_mass: float, lattice_spacing: float) -> float:
    """Tight-binding hopping ``t = hbar^2/(2 m* a^2)`` in J.

    Parameters
    ----------
    effective_mass : float
        Effective mass in units of the free electron mass m_e.
    lattice_spacing : float
        Lattice spacing a in m.
    """
    check_positive("effective_mass", effective_mass, "m_e")
    check_positive("lattice_spacing", lattice_spacing, "m")
    return HBAR**2 / (2 * effective_mass * M_E * lattice_spacing**2)


def conductance_to_siemens(g_e2h: float | np.ndarray) -> float | np.ndarray:
    """Convert conductance in units of e^2/h to siemens."""
    return np.asarray(g_e2h) * E2H


def siemens_to_conductance(g_siemens: float | np.ndarray) -> float | np.ndarray:
    """Convert conductance in siemens to units of e^2/h."""
    return np.asarray(g_siemens) / E2H


def magnetic_length(field: float) -> float:
    """Magnetic length ``sqrt(hbar/(e|B|))`` in m; ``inf`` at zero field."""
    b = abs(float(field))
    return float("inf") if b == 0 else float(np.sqrt(HBAR / (E * b)))
