"""Private: the terminal block of the spectral engine and the conductance from its resolvent.

The spectral engine reduces the closed extended Hamiltonian ``H`` (ring + clean lead chunks +
frozen far-end modes) to its resolvent ``g(E) = X^dag (E - H)^-1 X`` on a block ``X`` of
orthonormal terminal vectors with disjoint supports:

* the active transverse modes of each lead at the far end of its chunk, self-energy
  ``sigma_n(E)`` (closed form, :mod:`._spectral_leads`);
* one orbital per dephasing probe, wide-band self-energy ``-i eta/2`` (energy-independent);
* in flux-tube mode, the orbitals at both ends of the hops that cross the branch cut: the flux
  changes only those hops, ``V(Phi) = H(Phi) - H(0)`` lives on this block, and one reduced model
  at ``Phi = 0`` serves every flux.

Everything that couples to the outside or changes with the field then acts inside the block, and
the exact Dyson equation gives the full Green's function there,
``G = (1 - g (Sigma + V))^-1 g``. The Fisher-Lee transmissions between the physical terminals are
``T_pq = sum_{m in p, n in q} Gamma_m Gamma_n |G_mn|^2`` (``Gamma = -2 Im sigma``; diagonal in
this basis). Without probes the two-terminal conductance per spin is ``T_10``; with probes the
probe voltages float (energy-conserving dephasing probes: Kron reduction at each energy,
:func:`ringkit.transport.probes.effective_conductance`). The cut update is done last and only on
the cut block: ``G_tt = G1_tt + G1_tc (1 - V G1_cc)^-1 V G1_ct`` with ``G1`` the Green's function
with the (field-independent) self-energies, so each flux costs a ``c x c`` solve.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ringkit.transport._spectral_leads import ModeLead

__all__ = ["Terminals"]

_CHUNK_BYTES = 48 * 2**20  # complex temporaries of one energy chunk


@dataclass
class Terminals:
    """Terminal block of the spectral engine (column layout and self-energies).

    Attributes
    ----------
    leads : list of ModeLead
        The two leads (active modes first in the block, lead 0 then lead 1).
    probe_eta : ndarray
        Coupling ``Gamma`` of each probe (units of H); columns follow the lead modes.
    n_cut : int
        Number of cut orbitals (last columns); 0 outside flux-tube mode.
    cut_rows, cut_cols : ndarray of int
        Positions inside the cut block of each field-dependent entry.
    cut_base : ndarray of complex
        Value of each field-dependent entry at zero field.
    cut_coef : ndarray of float
        Phase per unit of the field of each field-dependent entry (rad).
    """

    leads: list[ModeLead]
    probe_eta: np.ndarray
    n_cut: int = 0
    cut_rows: np.ndarray | None = None
    cut_cols: np.ndarray | None = None
    cut_base: np.ndarray | None = None
    cut_coef: np.ndarray | None = None

    def __post_init__(self) -> None:
        self.probe_eta = np.asarray(self.probe_eta, dtype=float).ravel()
        self.n_lead = [ld.n_active for ld in self.leads]
        self.n_phys = int(sum(self.n_lead) + self.probe_eta.size)
        self.size = self.n_phys + int(self.n_cut)
        # physical terminal of every physical column: lead 0, lead 1, probe 0, probe 1, ...
        owner = np.concatenate(
            [np.zeros(self.n_lead[0], int), np.ones(self.n_lead[1], int),
             2 + np.arange(self.probe_eta.size)]
        )  # fmt: skip
        self._group = np.zeros((self.n_phys, 2 + self.probe_eta.size))
        self._group[np.arange(self.n_phys), owner] = 1.0

    @property
    def n_probes(self) -> int:
        return int(self.probe_eta.size)

    def sigma(self, energies: np.ndarray) -> np.ndarray:
        """Diagonal self-energy of every column, shape ``(n_E, size)`` (zero on the cut)."""
        energies = np.asarray(energies, dtype=float)
        parts = [ld.sigma(energies) for ld in self.leads]
        parts.append(np.broadcast_to(-0.5j * self.probe_eta, (energies.size, self.n_probes)))
        parts.append(np.zeros((energies.size, self.n_cut), complex))
        return np.concatenate(parts, axis=1)

    def cut_matrix(self, value: float) -> sp.csr_matrix:
        """``V = H(value) - H(0)`` on the cut block, sparse ``(n_cut, n_cut)``."""
        vals = self.cut_base * (np.exp(1j * float(value) * self.cut_coef) - 1.0)
        shape = (self.n_cut, self.n_cut)
        return sp.csr_matrix((vals, (self.cut_rows, self.cut_cols)), shape=shape)

    def conductance(self, g: np.ndarray, energies: np.ndarray, values=(None,)) -> np.ndarray:
        """Two-terminal conductance per spin from the reduced resolvent.

        Parameters
        ----------
        g : ndarray (n_E, size, size)
            ``X^dag (E - H)^-1 X`` at ``energies``.
        energies : ndarray (n_E,)
        values : sequence
            Field values for the cut update (flux-tube mode), or ``(None,)``: the model
            already holds the field.

        Returns
        -------
        ndarray (n_E, len(values))
            ``T_10`` without probes; with probes, the Kron-reduced conductance (e^2/h per spin).
        """
        from ringkit.transport.probes import effective_conductance

        sig = self.sigma(energies)
        b, t = self.size, self.n_phys
        lhs = np.eye(b)[None] - g * sig[:, None, :]
        g1 = np.linalg.solve(lhs, g)  # Green's function with the self-energies
        gam = -2.0 * sig[:, :t].imag  # > 0 for open modes and coupled probes only
        out = np.empty((len(energies), len(values)))
        gtt0 = g1[:, :t, :t]
        for j, value in enumerate(values):
            if value is None or self.n_cut == 0:
                gtt = gtt0
            else:
                v = self.cut_matrix(value)
                k = np.eye(self.n_cut)[None] - _left(v, g1[:, t:, t:])
                gtt = gtt0 + g1[:, :t, t:] @ np.linalg.solve(k, _left(v, g1[:, t:, :t]))
            w = gam[:, :, None] * (gtt.real**2 + gtt.imag**2) * gam[:, None, :]
            if self.n_probes == 0:
                k0 = self.n_lead[0]
                out[:, j] = w[:, k0:, :k0].sum(axis=(1, 2))
            else:
                tmat = np.einsum("ip,eij,jq->epq", self._group, w, self._group, optimize=True)
                out[:, j] = effective_conductance(tmat, 0, 1)
        return out

    def energy_chunk(self) -> int:
        """Energies per chunk so that one ``(n_E, size, size)`` temporary stays small."""
        return max(1, int(_CHUNK_BYTES // (16 * max(1, self.size) ** 2)))


def _left(v: sp.csr_matrix, x: np.ndarray) -> np.ndarray:
    """``v @ x[e]`` for every ``e`` of a stack ``x`` (n_E, c, m), with a sparse ``v``."""
    n, c, m = x.shape
    y = v @ np.ascontiguousarray(x.transpose(1, 0, 2)).reshape(c, n * m)
    return np.ascontiguousarray(y.reshape(c, n, m).transpose(1, 0, 2))
