"""THE Peierls-phase module of ringkit: every magnetic phase on a bond is computed here.

API
---
peierls_phase(link_flux)
    Phase ``2 pi Phi_link/(h/e)`` of a link integral ``Phi_link = int A.dl`` [Wb].
landau_coefficient(pos_i, pos_j, lattice_spacing)
    Phase per tesla of the hop j -> i in the Landau gauge A = (-B y, 0) (vectorised).
cut_crossing(pos_i, pos_j, cut_angle)
    +1 / -1 / 0: the hop j -> i crosses the branch cut counter-clockwise / clockwise / not.
flux_tube_coefficient(crossing)
    Phase per weber of a hop with the given crossing number.
uniform_hopping(t, lattice_spacing), flux_tube_hopping(t, cut_angle)
    kwant value functions ``f(site_i, site_j, B)`` / ``f(site_i, site_j, flux)``.
flux_per_plaquette(B, lattice_spacing)
    ``phi = B a^2/(h/e)``.
check_field_regime(B, lattice_spacing, fermi_wavevector, arm_width)
    Warn (:class:`FieldRegimeWarning`) about lattice artefacts or cyclotron orbits.

Convention (docs/physics.md §4.1)
-----------------------------------------------
``H_ij`` is the amplitude to hop from site j to site i; carriers are electrons (charge -e);
B is along +z. The Peierls factor of ``H_ij = -t exp(i theta_ij)`` is

    theta_ij = -(2 pi/Phi0) int_{r_j}^{r_i} A.dl,   Phi0 = h/e  (ringkit.units.PHI0).

Hence the product of hopping factors around any loop traversed counter-clockwise is
``exp(-2 pi i Phi/Phi0)``, Phi the enclosed flux; around one plaquette ``exp(-2 pi i B a^2/Phi0)``.
(Codes that use charge +e have the opposite sign, i.e. B -> -B.)

* Uniform field: Landau gauge ``A = (-B y, 0)``; for a straight bond the midpoint rule is exact:
  ``theta_ij = +(2 pi B/Phi0) * ybar * (x_i - x_j)``. A is invariant along x, so the same gauge
  serves leads along +-x; ringkit keeps the leads field-free (hoppings -t). Switching A_x off
  at the system/lead boundary creates no spurious field because A_y = 0 (docs/engine.md §1.2):
  the field is B on every plaquette of the scattering region and 0 from the lead interface out.
* Flux tube: B = 0 on every bond, flux Phi through the hole only. A ray from the ring centre at
  angle ``cut_angle`` is the branch cut; a hop j -> i crossing it counter-clockwise carries
  ``theta_ij = -2 pi Phi/Phi0`` (clockwise: +). Moving the cut is a gauge transformation.
"""

from __future__ import annotations

import cmath
import math
import warnings

import numpy as np

from ringkit.units import HBAR, PHI0, E

__all__ = [
    "peierls_phase",
    "landau_coefficient",
    "cut_crossing",
    "flux_tube_coefficient",
    "uniform_hopping",
    "flux_tube_hopping",
    "flux_per_plaquette",
    "check_field_regime",
    "FieldRegimeWarning",
    "MAX_FLUX_PER_PLAQUETTE",
]

MAX_FLUX_PER_PLAQUETTE = 0.01
"""Warn above this flux per plaquette (l_B < 4a; docs/physics.md §4.3, common practice)."""

_TWO_PI = 2.0 * math.pi


class FieldRegimeWarning(UserWarning):
    """The field is outside the regime the lattice ring model describes well."""


def peierls_phase(link_flux: float | np.ndarray) -> float | np.ndarray:
    """Peierls phase ``2 pi Phi_link/(h/e)`` [rad] of a link integral ``int A.dl`` [Wb].

    The hopping factor of an electron hop j -> i is ``exp(-i peierls_phase(int_j^i A.dl))``.
    """
    return _TWO_PI * np.asarray(link_flux) / PHI0


def landau_coefficient(
    pos_i: np.ndarray, pos_j: np.ndarray, lattice_spacing: float
) -> float | np.ndarray:
    """Phase per tesla [rad/T] of the hop j -> i in the Landau gauge ``A = (-B y, 0)``.

    Parameters
    ----------
    pos_i, pos_j : array_like, shape (..., 2)
        Site positions in units of the lattice spacing.
    lattice_spacing : float
        a in m.

    Returns
    -------
    ``theta_ij / B = 2 pi a^2 ybar (x_i - x_j)/Phi0`` (ybar, x in lattice units).
    """
    pi_, pj = np.asarray(pos_i, float), np.asarray(pos_j, float)
    ybar = 0.5 * (pi_[..., 1] + pj[..., 1])
    dx = pi_[..., 0] - pj[..., 0]
    # int_j^i A.dl = -B ybar dx a^2  ->  theta = -peierls_phase(...) = +2 pi B a^2 ybar dx/Phi0
    return -peierls_phase(-(lattice_spacing**2) * ybar * dx)


def cut_crossing(pos_i: np.ndarray, pos_j: np.ndarray, cut_angle: float) -> int | np.ndarray:
    """Crossing number of the hop j -> i with the branch cut (ray from the origin).

    Returns +1 if the hop crosses the ray at polar angle ``cut_angle`` counter-clockwise, -1 if
    clockwise, 0 otherwise. The ray itself belongs to the sector just counter-clockwise of it
    (half-open convention), so sites exactly on the cut are handled consistently. Valid for
    bonds that subtend less than pi as seen from the origin (any ring bond). Vectorised over
    leading axes of ``pos_i``/``pos_j`` (shape (..., 2)).
    """
    pi_, pj = np.asarray(pos_i, float), np.asarray(pos_j, float)
    bi = np.mod(np.arctan2(pi_[..., 1], pi_[..., 0]) - cut_angle, _TWO_PI)
    bj = np.mod(np.arctan2(pj[..., 1], pj[..., 0]) - cut_angle, _TWO_PI)
    diff = bi - bj
    out = np.where(diff < -math.pi, 1, np.where(diff > math.pi, -1, 0))
    return int(out) if out.ndim == 0 else out


def _crossing_scalar(xi: float, yi: float, xj: float, yj: float, cut_angle: float) -> int:
    """Scalar twin of :func:`cut_crossing` (same convention; used inside value functions)."""
    bi = (math.atan2(yi, xi) - cut_angle) % _TWO_PI
    bj = (math.atan2(yj, xj) - cut_angle) % _TWO_PI
    diff = bi - bj
    return 1 if diff < -math.pi else (-1 if diff > math.pi else 0)


def flux_tube_coefficient(crossing: int | np.ndarray) -> float | np.ndarray:
    """Phase per weber [rad/Wb] of a hop with crossing number ``crossing`` (see module doc)."""
    return -_TWO_PI * np.asarray(crossing, float) / PHI0


def uniform_hopping(t: float, lattice_spacing: float):
    """kwant value function ``hop(site_i, site_j, B)`` for a uniform field B [T].

    ``t`` is the hopping in the energy unit of the kwant system (1 when energies are in t);
    positions are in lattice units.
    """
    k = 2.0 * math.pi * lattice_spacing**2 / PHI0  # rad per tesla per (lattice unit)^2

    def hop(site_i, site_j, B):
        ri, rj = site_i.pos, site_j.pos
        return -t * cmath.exp(1j * k * B * 0.5 * (ri[1] + rj[1]) * (ri[0] - rj[0]))

    return hop


def flux_tube_hopping(t: float, cut_angle: float):
    """kwant value function ``hop(site_i, site_j, flux)`` for bonds crossing the branch cut.

    ``flux`` is the flux through the hole in Wb. Assign it only to bonds with a non-zero
    :func:`cut_crossing`; all other bonds are plain ``-t``.
    """
    coeff = -_TWO_PI / PHI0

    def hop(site_i, site_j, flux):
        ri, rj = site_i.pos, site_j.pos
        sign = _crossing_scalar(ri[0], ri[1], rj[0], rj[1], cut_angle)
        return -t * cmath.exp(1j * coeff * sign * flux)

    return hop


def flux_per_plaquette(B: float, lattice_spacing: float) -> float:
    """Flux per lattice plaquette ``B a^2/(h/e)`` (dimensionless)."""
    return float(B) * lattice_spacing**2 / PHI0


def check_field_regime(
    B: float,
    lattice_spacing: float,
    fermi_wavevector: float,
    arm_width: float,
    *,
    stacklevel: int = 2,
) -> list[str]:
    """Warn when the field leaves the regime of the lattice ring model; return the messages.

    * Lattice artefacts: flux per plaquette above :data:`MAX_FLUX_PER_PLAQUETTE`, i.e. the
      magnetic length ``l_B = sqrt(hbar/(e|B|))`` below ~4 lattice spacings (docs/physics.md §4.3).
    * Cyclotron radius ``r_c = hbar kF/(e|B|)`` smaller than the widest arm: skipping/edge
      orbits, the AB contrast is suppressed (Timp et al., Surf. Sci. 196, 68 (1988)).
    """
    b = abs(float(B))
    msgs: list[str] = []
    if b == 0:
        return msgs
    phi = flux_per_plaquette(b, lattice_spacing)
    l_b = math.sqrt(HBAR / (E * b))
    if phi > MAX_FLUX_PER_PLAQUETTE:
        msgs.append(
            f"|B| = {b:.4g} T: magnetic length {l_b:.3g} m is only {l_b / lattice_spacing:.2g} "
            f"lattice spacings (flux per plaquette {phi:.3g} > {MAX_FLUX_PER_PLAQUETTE}); "
            "expect lattice (Hofstadter) artefacts"
        )
    r_c = HBAR * fermi_wavevector / (E * b)
    if arm_width > 0 and r_c < arm_width:
        msgs.append(
            f"|B| = {b:.4g} T: cyclotron radius {r_c:.3g} m is smaller than the arm width "
            f"{arm_width:.3g} m; transport runs along edges, AB contrast is suppressed"
        )
    for m in msgs:
        warnings.warn(m, FieldRegimeWarning, stacklevel=stacklevel + 1)
    return msgs
