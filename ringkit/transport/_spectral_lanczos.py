"""Private: block Lanczos reduced model of a projected resolvent, ``P^dag (E - H)^-1 P``.

For a Hermitian sparse ``H`` (the closed scattering region with clean lead chunks) and a block
``P`` of terminal vectors, block Lanczos on the shift-and-invert operator ``A = (H - s)^-1``
started from ``P = Q_1 R`` builds a block-tridiagonal ``T_m = Q^dag A Q``. The Gauss-quadrature
(moment-matching) approximation

    P^dag (E - H)^-1 P = -R^dag E_1^dag A (1 - z A)^-1 E_1 R  ~  C diag(1 / (z - 1/theta_k)) C^dag,

with ``z = E - s``, ``T_m = U diag(theta) U^dag`` and ``C = R^dag U[:b]``, matches the first
``2m`` moments ``P^dag A^k P`` (G. H. Golub and G. Meurant, *Matrices, Moments and Quadrature
with Applications*, Princeton 2010, ch. 7; block version: ch. 8). Its poles ``s + 1/theta_k``
converge first to the eigenvalues of ``H`` nearest the shift, i.e. to the states inside a
thermal window centred on ``s``, and the smooth background of the far states is matched by the
moments. Loss of orthogonality of the plain three-term recurrence does not spoil the
quadrature (A. Greenbaum, Linear Algebra Appl. 113, 7 (1989)); the caller stops on a measured
change of the result between successive steps, not on an a-priori count.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.linalg.blas

__all__ = ["ReducedResolvent", "BlockLanczos"]

_DEFLATE = 1e-10  # relative size of a new direction below which it is dropped


@dataclass(frozen=True)
class ReducedResolvent:
    """``P^dag (E - H)^-1 P ~ C diag(1/(E - poles)) C^dag`` (pole-residue form).

    Attributes
    ----------
    poles : ndarray of float
        Ritz energies ``s + 1/theta_k`` (units of H); infinite poles are dropped.
    weights : ndarray of complex
        ``C``, shape ``(b, K)``.
    steps : int
        Block Lanczos steps used.
    """

    poles: np.ndarray
    weights: np.ndarray
    steps: int

    def resolvent(self, energies: np.ndarray) -> np.ndarray:
        """``P^dag (E - H)^-1 P`` at every energy, shape ``(n_E, b, b)``."""
        dist = np.asarray(energies, dtype=float)[:, None] - self.poles[None, :]
        # an energy exactly on a pole (probability zero): step off it by a relative 1e-13
        tiny = 1e-13 * max(1.0, float(np.max(np.abs(self.poles), initial=1.0)))
        dist = np.where(np.abs(dist) < tiny, tiny, dist)
        d = 1.0 / dist
        c = self.weights
        return np.matmul(c[None, :, :] * d[:, None, :], c.conj().T[None, :, :])


def _ctm(q: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``q^H w`` by one BLAS call, without a conjugated copy of the tall ``q``."""
    if np.iscomplexobj(q) or np.iscomplexobj(w):
        return scipy.linalg.blas.zgemm(1.0, q, w, trans_a=2)
    return scipy.linalg.blas.dgemm(1.0, q, w, trans_a=1)


def _sub(w: np.ndarray, q: np.ndarray, c: np.ndarray) -> None:
    """``w -= q @ c`` in place (``w`` Fortran-ordered, of ``q``'s or a wider dtype)."""
    if np.iscomplexobj(w):
        gemm = scipy.linalg.blas.zgemm
        q, c = q.astype(complex, copy=False), c.astype(complex, copy=False)
    else:
        gemm = scipy.linalg.blas.dgemm
    out = gemm(-1.0, q, c, beta=1.0, c=w, overwrite_c=1)
    if out is not w:  # pragma: no cover - BLAS wrapper had to copy
        w[...] = out


class BlockLanczos:
    """Three-term block Lanczos on ``A = (H - shift)^-1`` given its solve, with deflation.

    Parameters
    ----------
    solve : callable
        ``solve(B) -> (H - shift)^-1 B`` for a dense block ``B`` (n x b).
    p : ndarray
        Starting block (n x b), full column rank. Real ``p`` with a real ``solve`` (a real
        symmetric ``H``) keeps the whole recurrence, and the reduced model, real.
    shift : float
        The shift ``s`` (units of H).

    Notes
    -----
    A direction of the new block that is (numerically) already in the Krylov space — an exact
    invariant direction, common on symmetric lattices — is dropped (rank-revealing QR with
    column pivoting, relative threshold 1e-10): the blocks shrink and ``T`` is block
    tridiagonal with rectangular off-diagonal blocks. Keeping such a direction would inject
    rounding noise as a spurious new direction and bias the projected resolvent.
    """

    def __init__(self, solve, p: np.ndarray, shift: float):
        self._solve = solve
        self.shift = float(shift)
        p = np.asarray(p)
        q, r = scipy.linalg.qr(p if np.isrealobj(p) else p.astype(complex), mode="economic")
        self._r = r
        self._q, self._q_prev, self._b_prev = np.asfortranarray(q), None, None
        self._a: list[np.ndarray] = []
        self._b: list[np.ndarray] = []  # (b_{j+1} x b_j)
        self.exhausted = False  # an invariant subspace was found: the model is exact
        self.deflated = 0  # directions dropped so far

    @property
    def steps(self) -> int:
        return len(self._a)

    def step(self) -> None:
        """One block step (one block solve)."""
        if self.exhausted:
            return
        q = self._q
        w = np.asfortranarray(self._solve(q))
        a = _ctm(q, w)
        a = 0.5 * (a + a.conj().T)
        _sub(w, q, a)
        if self._q_prev is not None:
            _sub(w, self._q_prev, self._b_prev.conj().T)
        # local re-orthogonalisation against the last two blocks (keeps T accurate)
        for blk in (q, self._q_prev):
            if blk is not None:
                _sub(w, blk, _ctm(blk, w))
        self._a.append(a)
        qn, rn, piv = scipy.linalg.qr(w, mode="economic", pivoting=True)
        scale = max(float(np.abs(a).max(initial=0.0)), 1e-300)
        d = np.abs(np.diag(rn))
        rank = int(np.sum(d > _DEFLATE * scale))
        if rank == 0:
            self.exhausted = True  # invariant subspace: stop with the exact model
            return
        self.deflated += q.shape[1] - rank
        b = np.empty((rank, q.shape[1]), dtype=rn.dtype)
        b[:, piv] = rn[:rank]
        self._b.append(b)
        self._q_prev, self._b_prev, self._q = q, b, np.asfortranarray(qn[:, :rank])

    def model(self) -> ReducedResolvent:
        """The reduced resolvent after the steps taken so far."""
        sizes = [a.shape[0] for a in self._a]
        offs = np.concatenate([[0], np.cumsum(sizes)])
        t = np.zeros((offs[-1], offs[-1]), dtype=self._a[0].dtype)
        for j, a in enumerate(self._a):
            t[offs[j] : offs[j + 1], offs[j] : offs[j + 1]] = a
            if j + 1 < len(self._a):
                b = self._b[j]
                t[offs[j + 1] : offs[j + 2], offs[j] : offs[j + 1]] = b
                t[offs[j] : offs[j + 1], offs[j + 1] : offs[j + 2]] = b.conj().T
        theta, u = np.linalg.eigh(t)
        nb = self._r.shape[1]
        c = self._r.conj().T @ u[:nb, :]
        keep = theta != 0.0
        return ReducedResolvent(self.shift + 1.0 / theta[keep], c[:, keep], len(self._a))
