"""Distinct flux points of a flux-tube sweep of a two-terminal conductance (exact symmetries).

A flux-tube sweep often visits the same physical point several times: 201 points over
-3..3 h/e hit every phase twice or three times, and a symmetric window holds every +Phi and
-Phi. Two exact identities make those points equal:

* **Gauge periodicity.** The flux enters the Hamiltonian only through the cut entries
  ``values * exp(i rate Phi)`` (:class:`ringkit.transport.lowrank.FluxCut`); when every
  ``rate * flux_period`` is a multiple of 2 pi, ``H(Phi + flux_period) = H(Phi)`` entry by entry,
  so every quantity is periodic (docs/physics.md §4.5: h/e periodicity of a pure AB flux).
* **Onsager-Büttiker reciprocity.** If the zero-flux Hamiltonian and the lead Hamiltonians are
  real (no spin-orbit or other time-reversal-breaking term; dephasing probes ``-i eta/2`` are
  allowed), ``H(-Phi) = H(Phi)^*`` and the lead self-energies are symmetric, so
  ``G(-Phi) = G(Phi)^T`` and ``T_ij(-Phi) = T_ji(Phi)``: the conductance matrix is transposed,
  and the two-terminal conductance with every other terminal floating (Kron reduction; its
  2 x 2 reduced matrix has zero row and column sums, hence is symmetric) is even in Phi
  (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986); docs/physics.md §5.3).

:func:`flux_classes` maps a flux grid onto one representative per class (``Phi mod period``,
folded onto ``[0, period/2]`` when the system is reciprocal). Representatives are the folded
values themselves, so the result at a representative is the value at each member up to the
rounding of the phase ``rate * Phi`` (~1e-16 rad per unit of ``rate * Phi``); grid values closer
than ``1e-13`` periods are one class. Only for quantities that are even and periodic: the
two-terminal G (coherent or with floating probes), not ``T_ij`` of a multi-terminal device.

Public API
----------
flux_classes(model, fluxes) -> (representatives, inverse)
fold_fluxes(fluxes, period, periodic, reciprocal) -> (representatives, inverse)
is_reciprocal(model) -> bool
"""

from __future__ import annotations

import numpy as np

__all__ = ["flux_classes", "fold_fluxes", "is_reciprocal", "is_periodic"]

_MERGE = 1e-13  # grid values closer than this (in periods) are one class


def is_periodic(model) -> bool:
    """Whether every cut rate times ``model.flux_period`` is a multiple of 2 pi (to 1e-9)."""
    w = np.asarray(model.cut.rates, float) * model.flux_period / (2.0 * np.pi)
    return bool(w.size) and bool(np.all(np.abs(w - np.round(w)) <= 1e-9))


def is_reciprocal(model) -> bool:
    """Whether the model's Hamiltonian at zero flux and its leads are real (time-reversal
    symmetric apart from the flux), so that ``T_ij(-Phi) = T_ji(Phi)`` (module docstring)."""
    if np.any(np.asarray(model.h0.data).imag) or np.any(np.asarray(model.cut.values).imag):
        return False
    for lead in model.fsyst.leads:
        try:
            h = np.asarray(lead.cell_hamiltonian(params=model.params))
            v = np.asarray(lead.inter_cell_hopping(params=model.params))
        except (AttributeError, TypeError, ValueError):  # not a plain kwant lead: no claim
            return False
        if np.any(h.imag) or np.any(v.imag):
            return False
    return True


def flux_classes(model, fluxes) -> tuple[np.ndarray, np.ndarray]:
    """Representative fluxes and the index of each grid point's representative.

    Parameters
    ----------
    model : ringkit.transport.lowrank.FluxTubeModel
        The flux-tube model (cut rates, period, Hamiltonian).
    fluxes : array_like
        Flux grid (the model's flux unit, Wb for ringkit rings).

    Returns
    -------
    representatives : ndarray
        Distinct fluxes to compute (in ``[0, period)``, or ``[0, period/2]`` if reciprocal).
    inverse : ndarray of int
        ``value[inverse]`` expands values at the representatives back onto ``fluxes``.
        A model that is not periodic returns the grid itself.
    """
    if not is_periodic(model):
        return fold_fluxes(fluxes, 1.0, False, False)
    return fold_fluxes(fluxes, float(model.flux_period), True, is_reciprocal(model))


def fold_fluxes(
    fluxes, period: float, periodic: bool, reciprocal: bool
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`flux_classes` from the facts themselves: the ``period`` of the Hamiltonian in the
    flux (same unit as ``fluxes``), whether it is exactly periodic, and whether the system is
    reciprocal (``G(-Phi) = G(Phi)``). Same return values."""
    f = np.asarray(fluxes, dtype=float).ravel()
    if not periodic:
        return f.copy(), np.arange(f.size)
    r = np.mod(f / period, 1.0)
    if reciprocal:
        r = np.minimum(r, 1.0 - r)
    r[r > 1.0 - _MERGE] = 0.0  # 0.999...9 is the period itself
    key = np.round(r / _MERGE).astype(np.int64)
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    return r[first] * period, inverse.ravel()
