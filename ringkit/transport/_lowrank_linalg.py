"""Linear-algebra kernels of the low-rank flux-tube path (private).

* :func:`lead_self_energies` - kwant lead self-energies, computed once per distinct lead;
* :class:`SparsePattern` - fixed sparsity pattern of ``A = E - H - Sigma`` with scatter maps, so a
  new energy or flux only refills the data array;
* :class:`Factorization` - MUMPS LU of ``A`` and blocks of ``A^-1`` (selected inverse entries);
* :func:`gamma_factor` - ``L`` with ``L L^dagger = i (Sigma - Sigma^dagger)``;
* :func:`batched_update_solve` - the per-flux small solves, vectorised, with a condition
  estimate from random probe vectors.
"""

from __future__ import annotations

import kwant
import numpy as np
import scipy.sparse as sp
from kwant.linalg import _mumps, mumps

__all__ = [
    "Factorization",
    "SparsePattern",
    "batched_update_solve",
    "gamma_factor",
    "lead_self_energies",
]

_ORDERING = "amd" if "amd" in mumps.possible_orderings() else "auto"


def lead_self_energies(leads, params: dict, energy: float, cache: dict) -> list[np.ndarray]:
    """Retarded self-energy of every lead at ``energy`` (kwant's own algorithm).

    Leads using kwant's default ``InfiniteSystem.selfenergy`` are evaluated through
    ``kwant.physics.selfenergy(H_cell - E, V)`` exactly as kwant does, and leads with identical
    ``(H_cell, V)`` (e.g. a lead and its reversed copy) share one computation. ``cache`` keeps
    the energy-independent lead matrices between calls.
    """
    out = []
    done: dict[bytes, np.ndarray] = {}
    for k, lead in enumerate(leads):
        if type(lead).selfenergy is not kwant.system.InfiniteSystem.selfenergy:
            out.append(np.asarray(lead.selfenergy(energy, params=params), dtype=complex))
            continue
        if k not in cache:
            h = np.asarray(lead.cell_hamiltonian(params=params), dtype=complex)
            v = np.asarray(lead.inter_cell_hopping(params=params), dtype=complex)
            key = repr((h.shape, v.shape)).encode() + h.tobytes() + v.tobytes()
            cache[k] = (h, v, key)
        h, v, key = cache[k]
        if key not in done:
            ham = h.copy()
            ham.flat[:: ham.shape[0] + 1] -= energy
            done[key] = np.asarray(kwant.physics.selfenergy(ham, v), dtype=complex)
        out.append(done[key])
    return out


class SparsePattern:
    """Union sparsity pattern of several (rows, cols) sources, with scatter maps.

    ``fill(values_per_source)`` returns the data array of the summed matrix in the pattern's
    order; duplicates inside and across sources are summed.
    """

    def __init__(self, n: int, sources: list[tuple[np.ndarray, np.ndarray]]) -> None:
        keys = np.concatenate([np.asarray(r, np.int64) * n + np.asarray(c) for r, c in sources])
        uniq, inverse = np.unique(keys, return_inverse=True)
        self.n = n
        self.rows = uniq // n
        self.cols = uniq % n
        sizes = np.cumsum([0] + [len(r) for r, _ in sources])
        self.maps = [inverse[sizes[i] : sizes[i + 1]] for i in range(len(sources))]
        self._all = inverse

    def fill(self, values: list[np.ndarray]) -> np.ndarray:
        """Data array for ``values`` (one array per source, in the sources' order)."""
        w = np.concatenate([np.asarray(v, dtype=complex).ravel() for v in values])
        m = self.rows.size
        return np.bincount(self._all, w.real, m) + 1j * np.bincount(self._all, w.imag, m)

    def matrix(self, data: np.ndarray) -> sp.coo_matrix:
        """COO matrix with this pattern and ``data``."""
        return sp.coo_matrix((data, (self.rows, self.cols)), shape=(self.n, self.n))


class Factorization:
    """Sparse LU factorization of ``A`` (MUMPS, AMD ordering) and blocks of ``A^-1``.

    Blocks of the inverse are computed with MUMPS's selected-entries-of-the-inverse mode
    (ICNTL(30)), which visits only the needed parts of the elimination tree. The matrix is
    factorized as a whole with MUMPS's own pivoting, so only ``A`` itself must be regular.
    Re-factorizing a matrix of the same pattern reuses the symbolic analysis.
    """

    def __init__(self) -> None:
        self._ctx = mumps.MUMPSContext()
        self._analysed = False
        self.ok = False

    def factor(self, a: sp.coo_matrix) -> bool:
        """Factorize ``a``; return False if MUMPS finds it (numerically) singular."""
        try:
            self._ctx.factor(a, ordering=_ORDERING, reuse_analysis=self._analysed)
        except mumps.MUMPSError:
            self.ok = False
            return False
        self._analysed = True
        self.ok = True
        return True

    def solve(self, b: np.ndarray) -> np.ndarray:
        """``A^-1 b`` for a dense right-hand side (after a successful :meth:`factor`)."""
        if not self.ok:
            raise RuntimeError("no valid factorization")
        return np.asarray(self._ctx.solve(b))

    def inverse_block(self, keep: np.ndarray) -> np.ndarray:
        """``(A^-1)[keep][:, keep]`` for sorted unique ``keep`` (NaN if not factorized)."""
        nk = keep.size
        if not self.ok:
            return np.full((nk, nk), np.nan, dtype=complex)
        n = self._ctx.n
        ptr = np.zeros(n + 1, dtype=np.int64)
        ptr[keep + 1] = nk
        col_ptr = np.asfortranarray(np.cumsum(ptr) + 1, dtype=_mumps.int_dtype)
        row_ind = np.asfortranarray(np.tile(keep + 1, nk), dtype=_mumps.int_dtype)
        data = np.zeros(nk * nk, dtype=complex)
        inst = self._ctx.mumps_instance
        inst.set_sparse_rhs(col_ptr, row_ind, data)
        inst.icntl[30] = 1  # compute the requested entries of A^-1
        inst.job = 3
        try:
            inst.call()
        finally:
            inst.icntl[30] = 0
        if inst.infog[1] < 0:
            raise mumps.MUMPSError(inst.infog)
        return data.reshape(nk, nk).T  # CSC order: column j of the block is contiguous


def gamma_factor(sigma: np.ndarray) -> np.ndarray:
    """``L`` with ``L L^dagger = Gamma = i (Sigma - Sigma^dagger)``, dropping null directions."""
    if sigma.size == 0:
        return np.zeros((sigma.shape[0], 0), dtype=complex)
    gamma = 1j * (sigma - sigma.conj().T)
    gamma = 0.5 * (gamma + gamma.conj().T)
    lam, u = np.linalg.eigh(gamma)
    # relative to the self-energy itself: below the first subband Sigma is real up to
    # rounding (evanescent modes only) and no channel may survive (T = 0 exactly, as kwant)
    scale = max(float(np.max(np.abs(sigma))), float(np.max(np.abs(lam))), 1e-300)
    keep = lam > 1e-12 * scale
    return u[:, keep] * np.sqrt(lam[keep])


def batched_update_solve(
    negq: np.ndarray, qcol2: np.ndarray, v: np.ndarray, rhs: np.ndarray, probes: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Solve ``(1 - Q diag(v_f)) Y_f = rhs`` for every row ``v_f`` of ``v``.

    Parameters
    ----------
    negq : (n, n) complex
        ``-Q``.
    qcol2 : (n,) float
        Squared column norms of ``Q``.
    v : (nf, n) complex
        Diagonal of the update at each flux.
    rhs : (n, r) complex
        Right-hand sides (shared by all fluxes).
    probes : (n, p) complex
        Unit-norm random vectors used to estimate ``||M^-1||``.

    Returns
    -------
    y : (nf, n, r) complex
        Solutions (NaN where the matrix is singular).
    kappa : (nf,) float
        Estimate of the Frobenius condition number ``||M||_F ||M^-1||_F`` (``inf`` if singular):
        ``||M^-1||_F`` is estimated as ``sqrt(n) max_k ||M^-1 g_k||`` over the probe vectors
        (unbiased in the mean square; an underestimate by a factor 100 has probability about
        1e-4 per probe vector for complex Gaussian probes).
    """
    nf, n = v.shape
    mat = negq[None, :, :] * v[:, None, :]
    idx = np.arange(n)
    mat[:, idx, idx] += 1.0
    b = np.concatenate([rhs, probes], axis=1)
    try:
        sol = np.linalg.solve(mat, b[None, :, :])
        ok = np.ones(nf, dtype=bool)
    except np.linalg.LinAlgError:
        sol = np.full((nf,) + b.shape, np.nan, dtype=complex)
        ok = np.zeros(nf, dtype=bool)
        for k in range(nf):
            try:
                sol[k] = np.linalg.solve(mat[k], b)
                ok[k] = True
            except np.linalg.LinAlgError:
                pass
    r = rhs.shape[1]
    y = sol[:, :, :r]
    inv_est = np.sqrt(n) * np.sqrt((np.abs(sol[:, :, r:]) ** 2).sum(axis=1)).max(axis=1)
    norm_m = np.sqrt(n) + np.sqrt((np.abs(v) ** 2 * qcol2[None, :]).sum(axis=1))
    kappa = np.where(ok, norm_m * inv_est, np.inf)
    return y, kappa
