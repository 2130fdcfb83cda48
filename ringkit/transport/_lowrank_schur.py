"""Block of ``A^-1`` on a few orbitals from one MUMPS Schur complement (private).

Used by the probe paths of the low-rank flux-tube engine (:mod:`ringkit.transport.lowrank`,
:mod:`ringkit.transport._probe_solver`), where the wanted block is large: cut orbitals, lead
interfaces and one orbital per dephasing probe (~230 of 28 626 on the 0.5 um ring). MUMPS
eliminates every other orbital and returns the dense Schur complement ``S`` on the kept ones
(ICNTL(19)); then ``(A^-1)[keep, keep] = S^-1`` exactly (block inversion). One numeric
elimination replaces the LU factorization plus the selected-inverse solve of
:class:`ringkit.transport._lowrank_linalg.Factorization` (measured on that ring: 0.07 s
against 0.07 + 0.11 s per energy; benchmarks/RESULTS-study.md).

The elimination of the other orbitals cannot pivot across the kept ones: when the energy sits
(numerically) on an eigenvalue of the closed interior (the system with the kept orbitals
removed) it meets a (near-)null pivot. Three guards, each sending the energy to the pivoting LU:

* MUMPS's null-pivot report (ICNTL(24), pivots below :data:`NULL_PIVOT_THRESHOLD`). With the
  Schur option of the MUMPS 5.x used here it stays silent at an exact interior eigenvalue
  (tests/test_probe_schur.py constructs one: pivot ~1e-13, Schur entries ~1e13, block wrong
  by 1e-3), so it is not relied upon;
* the growth ``max|S| max|S^-1|`` above :data:`MAX_GROWTH` (4 to 60 on the 0.5 um ring at
  regular energies, 1e13 at the constructed eigenvalue): :meth:`SchurInverse.inverse_block`
  returns ``None``;
* the caller's check of the block against S-matrix unitarity
  (:func:`unitarity_residual` above :data:`MAX_UNITARITY_RESIDUAL`; 6e-14 to 2e-13 on that ring,
  1e-14 with the LU block).
"""

from __future__ import annotations

import numpy as np
from kwant.linalg import _mumps

__all__ = [
    "MAX_GROWTH",
    "MAX_UNITARITY_RESIDUAL",
    "NULL_PIVOT_THRESHOLD",
    "SchurInverse",
    "unitarity_residual",
]

MAX_GROWTH = 1e8
"""Largest accepted ``max|S| max|S^-1|`` (a lower bound on the condition number of ``S``)."""

MAX_UNITARITY_RESIDUAL = 1e-10
"""Largest accepted :func:`unitarity_residual` of a block from the Schur path (e^2/h)."""

NULL_PIVOT_THRESHOLD = 1e-9
"""Absolute pivot size (Hamiltonian energy units, ~t) reported as a null pivot (CNTL(3));
the value of the uniform-field engine's Schur method (``_engine_linsys``)."""

_AMD = 0  # ICNTL(7): AMD ordering, as the LU path (half the fill of SCOTCH on rings)


class SchurInverse:
    """``(A^-1)[keep, keep]`` for matrices of one sparsity pattern (analysis done once).

    Parameters
    ----------
    rows, cols : ndarray of int
        The pattern (0-based, one entry per stored value).
    n : int
        Matrix size.
    keep : ndarray of int
        Sorted unique indices of the wanted block.
    """

    def __init__(self, rows: np.ndarray, cols: np.ndarray, n: int, keep: np.ndarray) -> None:
        self.keep = np.asarray(keep, dtype=np.int64)
        self._rows = np.asfortranarray(np.asarray(rows).astype(_mumps.int_dtype) + 1)
        self._cols = np.asfortranarray(np.asarray(cols).astype(_mumps.int_dtype) + 1)
        self._data = np.zeros(self._rows.size, dtype=complex, order="F")
        self._idx = np.asfortranarray(self.keep.astype(_mumps.int_dtype) + 1)
        self.schur = np.zeros((self.keep.size, self.keep.size), dtype=complex, order="C")
        inst = _mumps.zmumps(False)
        inst.set_assembled_matrix(int(n), self._rows, self._cols, self._data)
        inst.icntl[7] = _AMD
        # no row/column scaling: entries are O(t) (hoppings, wide-band and lead self-energies);
        # as in the uniform-field engine (_engine_linsys), ~10 % less per elimination, and the
        # guards below check every block
        inst.icntl[8] = 0
        inst.icntl[19] = 1  # centralized Schur complement on ``keep``
        inst.icntl[31] = 1  # the factors of the eliminated part are not needed
        inst.icntl[24] = 1  # null-pivot detection (see the module docstring)
        inst.cntl[3] = NULL_PIVOT_THRESHOLD
        inst.set_schur(self.schur, self._idx)
        inst.job = 1
        inst.call()
        if inst.infog[1] < 0:
            raise RuntimeError(f"MUMPS analysis failed ({inst.infog[1]}, {inst.infog[2]})")
        self._inst = inst
        self.null_pivots = 0
        self.growth = float("nan")

    def inverse_block(self, data: np.ndarray) -> np.ndarray | None:
        """``(A^-1)[keep][:, keep]`` for the values ``data``; ``None`` if it cannot be trusted.

        ``None`` means a null pivot in the elimination (energy on an eigenvalue of the closed
        interior) or a singular Schur complement (``A`` itself singular): use a pivoting LU.
        """
        self._data[:] = data
        inst = self._inst
        inst.job = 2
        while True:
            inst.call()
            if inst.infog[1] in (-8, -9):  # workspace too small: enlarge and retry
                inst.icntl[14] = max(2 * inst.icntl[14], 40)
                continue
            break
        if inst.infog[1] == -10:
            self.null_pivots = max(1, int(inst.infog[28]))
            return None
        if inst.infog[1] < 0:
            raise RuntimeError(f"MUMPS failed ({inst.infog[1]}, {inst.infog[2]})")
        self.null_pivots = int(inst.infog[28])
        if self.null_pivots:
            return None
        try:
            g = np.linalg.inv(self.schur)
        except np.linalg.LinAlgError:
            return None
        if not np.all(np.isfinite(g)):
            return None
        self.growth = float(np.abs(self.schur).max() * np.abs(g).max())
        return g if self.growth <= MAX_GROWTH else None


def unitarity_residual(amp: np.ndarray) -> np.ndarray:
    """``max_j |sum_i |a_ij|^2 + 2 Im a_jj|`` of channel amplitudes ``a = L^dagger G L``.

    Zero for the exact retarded ``G`` when ``L`` holds the channels of every terminal
    (``G - G^dagger = -i G Gamma G^dagger`` with ``Gamma = L L^dagger``: unitarity of the
    S-matrix ``1 - i a``; Fisher and Lee, Phys. Rev. B 23, 6851 (1981)). ``amp`` has shape
    ``(..., n_ch, n_ch)``; the result has the leading shape.
    """
    n = amp.shape[-1]
    t2 = amp.real**2 + amp.imag**2
    diag = amp[..., np.arange(n), np.arange(n)].imag
    return np.abs(t2.sum(axis=-2) + 2.0 * diag).max(axis=-1, initial=0.0)
