"""Private: clean leads in their transverse-mode basis, for the spectral energy engine.

A clean lead whose hopping between unit cells is a scalar times the identity, ``V = v 1``
(every ringkit lead: ``v = -t``), separates into independent 1D chains, one per transverse
mode ``chi_n`` of the cell Hamiltonian ``h_cell`` (eigenvalue ``eps_n``). Its self-energy at the
interface is then diagonal in that basis,

    Sigma(E) = sum_n chi_n sigma_n(E) chi_n^dagger,
    sigma_n(E) = (x - i sqrt(4 v^2 - x^2)) / 2          |x| <= 2|v|   (propagating, retarded)
    sigma_n(E) = (x - sign(x) sqrt(x^2 - 4 v^2)) / 2     |x| >  2|v|   (evanescent, real)

with ``x = E - eps_n`` (surface Green's function of a semi-infinite chain; e.g. S. Datta,
*Electronic Transport in Mesoscopic Systems*, CUP 1995, ch. 3). The closed form is checked
against kwant's own ``lead.selfenergy`` before use (:func:`mode_lead`), and in the tests.

An evanescent mode decays by ``exp(-kappa_n)`` per cell, ``cosh kappa_n = |x| / (2|v|)``. After
``L`` clean cells of lead added to the scattering region, a change ``d sigma_n`` of a mode's
self-energy at the far end reaches the ring attenuated by ``exp(-2 kappa_n L)``. The spectral
engine therefore keeps only the *active* modes (propagating, or evanescent with
``kappa_n < KAPPA_ACTIVE`` somewhere in the energy window) as energy-dependent terminals, and
freezes the others at their value at the window centre, after ``chunk_cells`` cells: the
neglected change is below ``exp(-DECAY)`` times ``|d sigma_n| <= 2|v|`` (docs/engine.md §9).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError

__all__ = ["KAPPA_ACTIVE", "DECAY", "ModeLead", "mode_lead", "chain_sigma"]

KAPPA_ACTIVE = 0.5
"""Evanescent modes with a decay constant (per cell) below this anywhere in the window are kept
as energy-dependent terminals."""
DECAY = 36.0
"""Attenuation exponent of the frozen modes: exp(-36) = 2.3e-16 (double precision)."""


def chain_sigma(energy, eps, hop: float) -> np.ndarray:
    """Retarded self-energy of semi-infinite chains (onsite ``eps``, hopping ``hop``).

    Parameters
    ----------
    energy : float or array
        Energies (units of the Hamiltonian); broadcast against ``eps``.
    eps : array
        Onsite energies of the chains (transverse-mode energies).
    hop : float
        Hopping between cells (real, nonzero).

    Returns
    -------
    ndarray of complex
        ``sigma_n(E)``; imaginary part <= 0, zero for evanescent modes.
    """
    x = np.asarray(energy, dtype=float) - np.asarray(eps, dtype=float)
    b = 2.0 * abs(hop)
    inside = np.abs(x) <= b
    root_in = np.sqrt(np.maximum(b * b - x * x, 0.0))
    root_out = np.sqrt(np.maximum(x * x - b * b, 0.0))
    return np.where(inside, 0.5 * (x - 1j * root_in), 0.5 * (x - np.sign(x) * root_out))


def _kappa(distance: np.ndarray, hop: float) -> np.ndarray:
    """Decay constant per cell at an energy ``distance`` away from the mode's onsite energy."""
    r = np.asarray(distance, dtype=float) / (2.0 * abs(hop))
    return np.where(r > 1.0, np.arccosh(np.maximum(r, 1.0)), 0.0)


@dataclass(frozen=True)
class ModeLead:
    """One clean lead in its transverse-mode basis, split for an energy window.

    Attributes
    ----------
    cell : ndarray
        Cell Hamiltonian (w x w), orbitals in the order of the lead's interface.
    hop : float
        Scalar inter-cell hopping ``v``.
    eps : ndarray
        Transverse-mode energies (ascending).
    modes : ndarray
        Transverse modes as columns (w x w, unitary).
    active : ndarray of bool
        Modes kept as energy-dependent terminals.
    frozen_sigma : ndarray
        Self-energy of the frozen modes at the window centre, a w x w Hermitian matrix in the
        orbital basis (added to the last chunk cell).
    chunk_cells : int
        Clean cells added between the ring and the far-end terminals.
    """

    cell: np.ndarray
    hop: float
    eps: np.ndarray
    modes: np.ndarray
    active: np.ndarray
    frozen_sigma: np.ndarray
    chunk_cells: int

    @property
    def width(self) -> int:
        return self.cell.shape[0]

    @property
    def n_active(self) -> int:
        return int(self.active.sum())

    def sigma(self, energies) -> np.ndarray:
        """Self-energies of the active modes, shape ``(n_E, n_active)``."""
        e = np.atleast_1d(np.asarray(energies, dtype=float))[:, None]
        return chain_sigma(e, self.eps[self.active][None, :], self.hop)

    def n_open(self, energy: float) -> int:
        """Number of propagating modes at ``energy``."""
        return int(np.sum(np.abs(energy - self.eps) <= 2.0 * abs(self.hop)))


def mode_lead(lead, params: dict, center: float, half_width: float, *, name: str) -> ModeLead:
    """Split a kwant lead into active and frozen transverse modes for ``center +- half_width``.

    Raises
    ------
    ParameterError
        The lead is not of the separable form ``V = v 1`` with a Hermitian cell, or kwant's
        self-energy at ``center`` differs from the closed form (e.g. a disordered lead).
    """
    cell = np.asarray(lead.cell_hamiltonian(params=params), dtype=complex)
    v = np.asarray(lead.inter_cell_hopping(params=params), dtype=complex)
    w = cell.shape[0]
    if v.shape != (w, w):
        raise ParameterError(name, "lead", "needs one orbital set per cell (square hopping)")
    hop = complex(v[0, 0]) if w else 0j
    if (
        w == 0
        or abs(hop.imag) > 1e-14 * abs(hop)
        or hop == 0
        or not np.allclose(v, hop * np.eye(w), rtol=0, atol=1e-14 * abs(hop))
    ):
        raise ParameterError(
            name, "lead", "the spectral engine needs a clean lead with hopping v*identity"
        )
    if not np.allclose(cell, cell.conj().T, rtol=0, atol=1e-13):
        raise ParameterError(name, "lead", "cell Hamiltonian must be Hermitian")
    eps, modes = np.linalg.eigh(cell)
    hop_r = float(hop.real)
    sigma_c = chain_sigma(center, eps, hop_r)
    ref = np.asarray(lead.selfenergy(center, params=params))
    mine = (modes * sigma_c) @ modes.conj().T
    scale = max(1.0, float(np.abs(ref).max(initial=0.0)))
    if ref.shape != mine.shape or np.abs(ref - mine).max() > 1e-9 * scale:
        raise ParameterError(name, "lead", "its self-energy is not that of a clean separable lead")
    dist = np.maximum(np.abs(eps - center) - float(half_width), 0.0)
    active = _kappa(dist, hop_r) < KAPPA_ACTIVE
    frozen = ~active
    fs = (modes[:, frozen] * sigma_c[frozen].real) @ modes[:, frozen].conj().T
    cells = int(math.ceil(DECAY / (2.0 * KAPPA_ACTIVE)))
    return ModeLead(cell, hop_r, eps, modes, active, 0.5 * (fs + fs.conj().T), cells)
