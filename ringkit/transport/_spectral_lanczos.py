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
_GRAM_MIN_COLUMNS = 24  # blocks at least this wide are orthonormalised by CholQR2
_GRAM_RESOLVED = 1e-6  # singular values the Gram matrix resolves (relative to the largest)


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


def _orthonormal_basis(w: np.ndarray, threshold: float) -> tuple[np.ndarray, np.ndarray]:
    """``w ~ Q B`` with orthonormal ``Q`` (n x r, Fortran order) and ``B`` (r x k), dropping
    the directions of ``w`` with singular value below ``threshold`` (deflation).

    Wide blocks (dephasing probes, cut orbitals) use the Gram matrix: two passes of
    Cholesky-QR (CholQR2; Y. Yamamoto et al., ETNA 44, 306 (2015)) on the directions whose
    singular values the Gram matrix resolves, i.e. above 1e-6 of the largest (its relative
    accuracy is ~1e-8). Whenever the threshold falls where the Gram matrix cannot decide (a
    direction below 1e-6 of the largest that might lie above ``threshold``), and for narrow
    blocks where it is not faster, the rank-revealing QR with column pivoting decides.
    """
    k = w.shape[1]
    if k >= _GRAM_MIN_COLUMNS:
        g = _ctm(w, w)
        lam, v = np.linalg.eigh(0.5 * (g + g.conj().T))
        sig = np.sqrt(np.clip(lam, 0.0, None))
        top = float(sig[-1]) if sig.size else 0.0
        resolved = sig > _GRAM_RESOLVED * top
        keep = resolved & (sig > threshold)
        if top > 0 and (np.all(resolved) or threshold >= _GRAM_RESOLVED * top):
            m = v[:, keep] / sig[keep]
            b = sig[keep, None] * v[:, keep].conj().T
            q = np.asfortranarray(w @ m)
            # second pass: orthonormal to rounding (cond of q is ~1 after the first)
            g = _ctm(q, q)
            r = scipy.linalg.cholesky(0.5 * (g + g.conj().T), lower=False)
            trsm = scipy.linalg.blas.ztrsm if np.iscomplexobj(q) else scipy.linalg.blas.dtrsm
            q = trsm(1.0, r, q, side=1, lower=0, overwrite_b=1)  # q r^-1
            return np.asfortranarray(q), r @ b
    qn, rn, piv = scipy.linalg.qr(w, mode="economic", pivoting=True)
    rank = int(np.sum(np.abs(np.diag(rn)) > threshold))
    b = np.empty((rank, k), dtype=rn.dtype)
    b[:, piv] = rn[:rank]
    return np.asfortranarray(qn[:, :rank]), b


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
        p = np.asfortranarray(p if np.isrealobj(p) else p.astype(complex))
        # dependent terminal vectors (e.g. a probe on a cut orbital) give one direction
        q, r = _orthonormal_basis(p, _DEFLATE * float(np.max(np.linalg.norm(p, axis=0))))
        self._r = r  # p = q r, r of shape (rank x b)
        self._q, self._q_prev, self._b_prev = q, None, None
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
        scale = max(float(np.abs(a).max(initial=0.0)), 1e-300)
        qn, b = _orthonormal_basis(w, _DEFLATE * scale)
        rank = b.shape[0]
        if rank == 0:
            self.exhausted = True  # invariant subspace: stop with the exact model
            return
        self.deflated += q.shape[1] - rank
        self._b.append(b)
        self._q_prev, self._b_prev, self._q = q, b, qn

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
        nb = self._r.shape[0]
        c = self._r.conj().T @ u[:nb, :]
        keep = theta != 0.0
        return ReducedResolvent(self.shift + 1.0 / theta[keep], c[:, keep], len(self._a))
