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
removed) it meets a null pivot. MUMPS reports pivots below :data:`NULL_PIVOT_THRESHOLD`
(ICNTL(24)); :meth:`SchurInverse.inverse_block` then returns ``None`` and the caller uses the
pivoting LU instead. Smaller-than-usual pivots above the threshold only cost accuracy, which the
callers check a posteriori (unitarity of the channel amplitudes, ``lowrank``).
"""

from __future__ import annotations

import numpy as np
from kwant.linalg import _mumps

__all__ = ["NULL_PIVOT_THRESHOLD", "SchurInverse"]

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
        return g if np.all(np.isfinite(g)) else None
