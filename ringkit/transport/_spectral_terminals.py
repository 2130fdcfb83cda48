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
PENCIL_MIN_VALUES = 24
"""Field values per energy from which the cut pencil (one eigendecomposition per energy)
replaces the per-value dense solve (measured crossover, docs/engine.md §9)."""


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
        self.pencil_fallbacks = 0  # energies the pencil's checks sent to the direct solve

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
        t = self.n_phys
        g1 = _attach(g, sig[:, :t])  # Green's function with the self-energies
        gam = -2.0 * sig[:, :t].imag  # > 0 for open modes and coupled probes only
        out = np.empty((len(energies), len(values)))
        k0 = self.n_lead[0]
        # without probes only the block (lead 1, lead 0) of G_tt enters T_10
        rows, cols = (slice(k0, t), slice(0, k0)) if self.n_probes == 0 else (slice(0, t),) * 2
        cut = [j for j, v in enumerate(values) if v is not None and self.n_cut]
        pencil = self.pencil() if len(cut) >= PENCIL_MIN_VALUES else None
        n_r, n_m = len(range(*rows.indices(t))), len(range(*cols.indices(t)))
        per = 16 * n_r * n_m * (len(cut) + 2 * self.n_cut + 2)  # bytes per energy
        step = max(1, int(_CHUNK_BYTES // per))
        for a in range(0, len(energies), step):
            e = slice(a, a + step)
            gtt = np.empty((g1[e].shape[0], len(values), n_r, n_m), complex)
            gtt[:] = g1[e, None, rows, cols]  # values None (the model holds the field)
            if pencil is not None:
                blocks, bad = pencil.terminal_blocks(g1[e], t, [values[j] for j in cut], rows, cols)
                gtt[:, cut] = blocks
                if np.any(bad):  # those energies by the direct dense solve
                    self.pencil_fallbacks += int(np.sum(bad))
                    redo = self._direct(g1[e][bad], [values[j] for j in cut], rows, cols)
                    gtt[np.flatnonzero(bad)[:, None], np.array(cut)[None, :]] = redo
            elif cut:
                gtt[:, cut] = self._direct(g1[e], [values[j] for j in cut], rows, cols)
            gm = gam[e]
            w = gm[:, None, rows, None] * (gtt.real**2 + gtt.imag**2) * gm[:, None, None, cols]
            if self.n_probes == 0:
                out[e] = w.sum(axis=(2, 3))
            else:
                tmat = np.einsum("ip,evij,jq->evpq", self._group, w, self._group, optimize=True)
                out[e] = effective_conductance(tmat, 0, 1)
        return out

    def pencil(self):
        """The cut pencil (:mod:`._spectral_pencil`), or ``None`` if the cut has no single
        winding."""
        if not hasattr(self, "_pencil"):
            from ringkit.transport._spectral_pencil import CutPencil

            self._pencil = None
            if self.n_cut:
                self._pencil = CutPencil.build(
                    self.n_cut, self.cut_rows, self.cut_cols, self.cut_base, self.cut_coef
                )
        return self._pencil

    def energy_chunk(self) -> int:
        """Energies per chunk so that one ``(n_E, size, size)`` temporary stays small."""
        return max(1, int(_CHUNK_BYTES // (16 * max(1, self.size) ** 2)))

    def _direct(self, g1: np.ndarray, values, rows: slice, cols: slice) -> np.ndarray:
        """``G_tt[rows, cols]`` at each field value by the dense ``c x c`` Dyson solve of the
        cut update ``G_tt = G1_tt + G1_tc (1 - V G1_cc)^-1 V G1_ct``; ``(n_E, n_values, r, m)``.
        """
        t = self.n_phys
        r_idx, c_idx = np.arange(t)[rows], np.arange(t)[cols]
        gcc, gct = g1[:, t:, t:], g1[:, t:][:, :, c_idx]
        gtc = g1[:, r_idx, t:]
        base = g1[:, rows, cols]
        one_per_row = np.array_equal(np.sort(self.cut_rows), np.arange(self.n_cut))
        if one_per_row:  # V @ X is a row gather and a scaling: gather once for all values
            order = np.argsort(self.cut_rows)
            src = self.cut_cols[order]
            gcc_g, gct_g = gcc[:, src], gct[:, src]
        eye = np.eye(self.n_cut)[None]
        out = np.empty((g1.shape[0], len(values), r_idx.size, c_idx.size), complex)
        for j, value in enumerate(values):
            vals = self.cut_base * (np.exp(1j * float(value) * self.cut_coef) - 1.0)
            if one_per_row:
                vr = vals[order][None, :, None]
                k, rhs = eye - vr * gcc_g, vr * gct_g
            else:
                v = sp.csr_matrix((vals, (self.cut_rows, self.cut_cols)), shape=eye.shape[1:])
                k, rhs = eye - _left(v, gcc), _left(v, gct)
            out[:, j] = base + gtc @ np.linalg.solve(k, rhs)
        return out


def _attach(g: np.ndarray, sig: np.ndarray) -> np.ndarray:
    """``(1 - g Sigma)^-1 g`` with ``Sigma = diag(sig)`` on the first ``t`` columns only.

    Woodbury identity on the rank-``t`` update: ``g + g[:, :t] (1 - S g_tt)^-1 S g[:t]``,
    ``S = diag(sig)`` (a ``t x t`` solve instead of the ``b x b`` one), used when ``t <= b/2``
    (a cut block); otherwise the plain ``b x b`` solve.
    """
    t, b = sig.shape[1], g.shape[1]
    if t == 0:
        return g.astype(complex)
    if 2 * t > b:  # no gain (e.g. no cut block): the plain b x b solve
        full = np.concatenate([sig, np.zeros((sig.shape[0], b - t), sig.dtype)], axis=1)
        return np.linalg.solve(np.eye(b)[None] - g * full[:, None, :], g)
    k = np.eye(t)[None] - sig[:, :, None] * g[:, :t, :t]
    y = np.linalg.solve(k, sig[:, :, None] * g[:, :t, :])
    return g + g[:, :, :t] @ y


def _left(v: sp.csr_matrix, x: np.ndarray) -> np.ndarray:
    """``v @ x[e]`` for every ``e`` of a stack ``x`` (n_E, c, m), with a sparse ``v``."""
    n, c, m = x.shape
    y = v @ np.ascontiguousarray(x.transpose(1, 0, 2)).reshape(c, n * m)
    return np.ascontiguousarray(y.reshape(c, n, m).transpose(1, 0, 2))
