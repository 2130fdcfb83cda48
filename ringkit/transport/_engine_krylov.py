"""Private: field sweeps that reuse one sparse factorization across a field window, exactly.

The linear system ``A(B) x = b`` of a field point is solved by block GMRES (all right-hand
sides of the source terminal at once) preconditioned from the left by the MUMPS LU of
``A(B_ref)`` at a reference field ``B_ref``; the first guess is the quadratic extrapolation of
the solutions at the three previous field points. The iteration stops when the estimated error
of every solution column is below ``tol``:

    err_j = ||s_j|| / sigma_min(Hbar_m),

where ``s_j = M^-1 (b_j - A x_j)`` is the preconditioned residual of column ``j`` (exact in the
Arnoldi relation) and ``Hbar_m`` the block Hessenberg matrix, i.e. ``M^-1 A`` restricted to the
Krylov space: the error is ``(M^-1 A)^-1 s`` and ``1/sigma_min(Hbar_m)`` estimates
``||(M^-1 A)^-1||`` (the Ritz estimate, converging from below as the space grows). The true
residual ``b - A x`` is checked at the end as well (it must be of the size ``||A|| tol``). The
scattering amplitudes are entries of ``x`` (|S| <= 1), so ``tol = 1e-10`` bounds the amplitude
error and, through ``T = sum |t|^2``, the error of G well below 1e-8 e^2/h.

A point whose iteration count exceeds ``refactor_after`` makes the next point factorize afresh
(the new reference); a point not converged within ``max_iter`` is solved directly from a fresh
factorization (which then becomes the reference) and counted as a fallback.

Cost model (issue 11, measured at 28.6k sites on 2 shared cores): one MUMPS numeric
factorization 65-140 ms, one solve with the 5 source columns 18-42 ms (a single column 9-23
ms: the triangular solves are bound by the factor size, ~1e6 entries, not by the number of
columns). A converged point needs 1 + iterations solves, so this path only pays off when the
reference is very close or the factorization much dearer than a solve (large 2D systems with
wide fronts); see ``docs/engine.md`` and ``benchmarks/RESULTS-uniform.md``.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ringkit._validation import ParameterError
from ringkit.transport._engine_linsys import MumpsKernel, PatternSystem

__all__ = ["KrylovReuse", "KrylovStats", "reuse_memory_bytes"]


@dataclass
class KrylovStats:
    """Counters of a :class:`KrylovReuse` (cumulative)."""

    points: int = 0
    factorizations: int = 0
    solves: int = 0
    iterations: int = 0
    fallbacks: int = 0
    max_error: float = 0.0


def reuse_memory_bytes(n_unknowns: int, n_rhs: int, max_iter: int, lu_entries: float) -> float:
    """Extra memory of the reuse path beyond the direct one, in bytes.

    The LU factors of the reference (``lu_entries`` complex entries, 16 B each; kept while the
    direct Schur path discards them), the Krylov basis (``max_iter + 1`` blocks of ``n_rhs``
    columns), three stored solutions for the extrapolation and two work blocks, all complex
    vectors of length ``n_unknowns``.
    """
    vectors = (max_iter + 1 + 3 + 2) * n_rhs * n_unknowns
    return 16.0 * (float(lu_entries) + vectors)


class KrylovReuse:
    """Solutions of ``A(B) X = rhs`` for successive field values from few factorizations.

    Parameters
    ----------
    system : PatternSystem
        The sweeper's linear system (its value buffer holds ``A`` at the current field).
    ordering : str
        MUMPS ordering of the reference factorization.
    tol : float
        Bound on the estimated error of every solution entry (absolute; scattering amplitudes
        are <= 1 in modulus).
    max_iter : int
        Block iterations before the point is solved directly instead.
    refactor_after : int
        A converged point that needed more iterations than this moves the reference to the
        next point.
    """

    def __init__(
        self,
        system: PatternSystem,
        *,
        ordering: str = "amd",
        tol: float = 1e-10,
        max_iter: int = 20,
        refactor_after: int = 6,
    ) -> None:
        if not (isinstance(tol, (int, float)) and 1e-15 <= tol <= 1e-6):
            raise ParameterError("tol", tol, "must lie in [1e-15, 1e-6]")
        if int(max_iter) != max_iter or max_iter < 1:
            raise ParameterError("max_iter", max_iter, "must be an integer >= 1")
        self.system = system
        self.tol = float(tol)
        self.max_iter = int(max_iter)
        self.refactor_after = int(refactor_after)
        n = system.layout.n_total
        # the COO matrix shares the system's value buffer: it always holds A at the current field
        self._a = sp.coo_matrix(
            (system.data, (system.rows.ravel() - 1, system.cols.ravel() - 1)), shape=(n, n)
        )
        if not np.shares_memory(self._a.data, system.data):  # pragma: no cover - scipy change
            raise RuntimeError("scipy copied the value buffer")
        self._lu = MumpsKernel(system, "lu", ordering)
        self.reference: float | None = None
        self._force_refactor = False
        # largest |B - B_ref| that converged within ``refactor_after`` iterations so far: a
        # point more than twice as far is factorized afresh without trying (e.g. a jump in a
        # non-monotonic list of fields)
        self._reach: float | None = None
        self._history: dict[int, deque] = {}
        self.stats = KrylovStats()

    # ------------------------------------------------------------------ helpers
    def _anorm(self) -> float:
        """Max row sum of |A| at the current field (inf-norm)."""
        n = self.system.layout.n_total
        return float(np.bincount(self._a.row, np.abs(self._a.data), n).max())

    def _factor_here(self, value: float) -> None:
        self._lu.factor()  # numeric factorization of the buffer (= A at ``value``)
        self.reference = float(value)
        self._force_refactor = False
        self.stats.factorizations += 1

    def _precond(self, v: np.ndarray) -> np.ndarray:
        self.stats.solves += 1
        return self._lu.solve(v)

    def _guess(self, key: int, value: float, shape) -> np.ndarray:
        hist = self._history.get(key)
        if not hist:
            return np.zeros(shape, dtype=complex)
        pts = list(hist)[-3:]
        if len(pts) > 1 and abs(value - pts[-1][0]) > 2.0 * abs(pts[-1][0] - pts[-2][0]):
            pts = pts[-1:]  # a jump: extrapolation would be worse than the nearest solution
        if len(pts) == 1:
            near = abs(value - pts[0][0]) <= 2.0 * abs(value - (self.reference or 0.0))
            return pts[0][1].copy() if near else np.zeros(shape, dtype=complex)
        xs = [p[0] for p in pts]
        out = np.zeros(shape, dtype=complex)
        for i, (bi, x) in enumerate(pts):  # Lagrange extrapolation in the field
            w = 1.0
            for j, bj in enumerate(xs):
                if j != i:
                    w *= (value - bj) / (bi - bj)
            out += w * x
        return out

    def _remember(self, key: int, value: float, x: np.ndarray) -> None:
        hist = self._history.setdefault(key, deque(maxlen=3))
        if hist and hist[-1][0] == value:
            hist.pop()
        hist.append((float(value), x))

    # ------------------------------------------------------------------ the solve
    def solve(self, value: float, rhs: np.ndarray, key: int = 0) -> tuple[np.ndarray, bool]:
        """Solution at field ``value`` (the system buffer must already hold ``A(value)``).

        Returns ``(x, iterative)``: ``iterative`` is False when the point was solved directly
        from a fresh factorization (first point, scheduled refactorization or fallback).
        """
        self.stats.points += 1
        rhs = np.asarray(rhs, dtype=complex)
        if rhs.shape[1] == 0:
            return rhs.copy(), True
        far = self._reach is not None and abs(value - self.reference) > 2.0 * self._reach
        if self.reference is None or self._force_refactor or far:
            return self._direct(value, rhs, key), False
        x, its, err, status = self._gmres(rhs, self._guess(key, value, rhs.shape))
        self.stats.iterations += its
        if status != "ok":
            # "slow": the observed rate cannot reach tol within max_iter -> a new reference
            # (scheduled); "fail": not converged (or inconsistent) at max_iter -> fallback
            self.stats.fallbacks += status == "fail"
            return self._direct(value, rhs, key), False
        self.stats.max_error = max(self.stats.max_error, err)
        if its > self.refactor_after:
            self._force_refactor = True
        else:
            dist = abs(value - self.reference)
            self._reach = dist if self._reach is None else max(self._reach, dist)
        self._remember(key, value, x)
        return x, True

    def _direct(self, value: float, rhs: np.ndarray, key: int) -> np.ndarray:
        self._factor_here(value)
        x = self._precond(rhs)
        self._remember(key, value, x)
        return x

    def _gmres(self, b: np.ndarray, x0: np.ndarray):
        """Left-preconditioned block GMRES from ``x0``.

        Returns ``(x, iterations, err, status)`` with status ``"ok"`` (converged), ``"slow"``
        (stopped early: at the observed rate ``tol`` is out of reach within ``max_iter``) or
        ``"fail"``.
        """
        a = self._a
        k = b.shape[1]
        s0 = self._precond(b - a @ x0)
        q, r0 = np.linalg.qr(s0)
        basis = [q]
        hbar = np.zeros(((self.max_iter + 1) * k, self.max_iter * k), dtype=complex)
        rhs_small = np.zeros(((self.max_iter + 1) * k, k), dtype=complex)
        rhs_small[:k] = r0
        err = float(np.linalg.norm(s0, axis=0).max())
        if err <= 0.1 * self.tol:
            return x0, 0, 0.0, "ok" if self._true_residual_ok(b, x0) else "fail"
        y = None
        for j in range(self.max_iter):
            prev = err
            w = self._precond(a @ basis[j])
            for _ in range(2):  # block Gram-Schmidt, twice for orthogonality to rounding
                for i in range(j + 1):
                    h = basis[i].conj().T @ w
                    w -= basis[i] @ h
                    hbar[i * k : (i + 1) * k, j * k : (j + 1) * k] += h
            q, rr = np.linalg.qr(w)
            hbar[(j + 1) * k : (j + 2) * k, j * k : (j + 1) * k] = rr
            basis.append(q)
            m = (j + 1) * k
            hm = hbar[: m + k, :m]
            y = np.linalg.lstsq(hm, rhs_small[: m + k], rcond=None)[0]
            res = np.linalg.norm(rhs_small[: m + k] - hm @ y, axis=0).max()
            smin = np.linalg.svd(hm, compute_uv=False)[-1]
            err = res / smin if smin > 0 else np.inf
            if err <= self.tol:
                x = x0 + np.hstack(basis[: j + 1]) @ y
                return x, j + 1, float(err), "ok" if self._true_residual_ok(b, x) else "fail"
            if j >= 2 and j + 1 < self.max_iter:
                rate = err / prev if prev > 0 else 1.0
                need = np.inf if rate >= 1.0 else np.log(self.tol / err) / np.log(rate)
                if j + 1 + need > self.max_iter:
                    return x0, j + 1, float(err), "slow"
        return x0, self.max_iter, float(err), "fail"

    def _true_residual_ok(self, b: np.ndarray, x: np.ndarray) -> bool:
        """The recurrence agrees with the true residual (no loss of orthogonality/drift)."""
        res = np.abs(b - self._a @ x).max()
        return bool(np.isfinite(res) and res <= 100.0 * self._anorm() * self.tol)
