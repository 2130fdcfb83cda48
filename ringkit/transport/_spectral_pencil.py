"""Private: every flux of a flux tube from one eigendecomposition per energy (cut pencil).

In flux-tube mode the flux changes only the hops across the branch cut. When every cut hop
carries the same winding (``H_rc = h_rc e^{i w Phi}`` with ``r`` on one side ``S1`` of the cut,
``c`` on the other side ``S2``, and the Hermitian partner ``e^{-i w Phi}``), the cut coupling at
``z = e^{i w Phi}`` is a unitary diagonal rescaling of the zero-field one,

    C(z) = D C0 D^dag,    D = diag(z on S1, 1 on S2),    C0 = [[0, B12], [B21, 0]],

and ``V(z) = C(z) - C0``. With ``G1`` the zero-field Green's function of the terminal block
(self-energies attached) and ``G = G1_cc`` split into blocks ``Gij`` on ``S1``/``S2``, a direct
expansion gives ``1 - G V(z) = D diag(z^-1, 1) (1 + (z - 1) T1) D^dag`` with the
flux-independent

    T1 = [[1 + G12 B21, -G11 B12], [G22 B21, -G21 B12]],

and ``G1_tc V(z) D = (z - 1) L1``, ``L1 = [-G1_t2 B21, G1_t1 B12]``. The exact Dyson update
``G_tt = G1_tt + G1_tc V (1 - G1_cc V)^-1 G1_ct`` is therefore

    G_tt(z) = G1_tt + (z - 1) L1 (1 + (z - 1) T1)^-1 G1_ct,

a linear pencil in ``z`` (``|z| = 1``). One eigendecomposition ``T1 = X diag(lam) X^-1`` per
energy gives every flux by a diagonal scaling,

    G_tt(z) = G1_tt + sum_k (L1 X)_k (z - 1) / (1 + (z - 1) lam_k) (X^-1 G1_ct)_k,

``O(c t^2)`` per flux instead of an ``O(c^3)`` solve (``c`` cut orbitals, ``t`` terminals).

Error control, per energy (a failing energy is recomputed by the caller's direct solve, so a
defective or nearly defective ``T1``, or a flux on a bound state, never returns a wrong number):

* ``X`` must be well conditioned: ``||X||_F ||X^-1||_F <= 1e6``;
* at two fluxes, the one nearest a pole of the pencil (largest ``|(z-1)/(1+(z-1) lam_k)|``,
  where the rounding of ``lam`` is amplified most) and the one farthest from zero field
  (largest ``|z - 1|``), the result must equal a direct dense solve of
  ``(1 + (z - 1) T1) Y = G1_ct`` to ``1e-11`` relative to the size of ``G_tt``; the result
  must be finite.
"""

from __future__ import annotations

import numpy as np

__all__ = ["CutPencil"]

_KAPPA_MAX = 1e6  # Frobenius condition number of the eigenvectors above which we fall back
_AGREE = 1e-11  # relative agreement of the two per-energy checks


class CutPencil:
    """The cut pencil of a terminal block (see the module docstring).

    Parameters
    ----------
    n_cut : int
        Cut orbitals (the last ``n_cut`` columns of the terminal block).
    rows, cols : ndarray of int
        Positions inside the cut block of each field-dependent entry.
    base : ndarray of complex
        Zero-field value of each entry (units of H).
    coef : ndarray of float
        Phase per unit of the field of each entry (rad per unit).

    Use :meth:`build`, which returns ``None`` when the structure does not apply (entries with
    different windings, a diagonal entry, an orbital on both sides of the cut).
    """

    def __init__(self, n_cut: int, s1: np.ndarray, s2: np.ndarray, c0: np.ndarray, rate: float):
        self.n_cut = int(n_cut)
        self.perm = np.concatenate([s1, s2])
        self.n1 = int(s1.size)
        self.rate = float(rate)
        cp = c0[np.ix_(self.perm, self.perm)]
        n1 = self.n1
        # blockdiag(B21, -B12) with B12 = C0[S1, S2], B21 = C0[S2, S1]
        n2 = self.n_cut - n1
        self.bd = np.zeros((self.n_cut, self.n_cut), complex)
        self.bd[:n2, :n1] = cp[n1:, :n1]
        self.bd[n2:, n1:] = -cp[:n1, n1:]
        self.fallbacks = 0  # energies recomputed by the direct solve (last call)

    @classmethod
    def build(cls, n_cut, rows, cols, base, coef) -> CutPencil | None:
        """The pencil, or ``None`` if the cut entries do not have the one-winding structure."""
        rows, cols = np.asarray(rows, int), np.asarray(cols, int)
        coef, base = np.asarray(coef, float), np.asarray(base, complex)
        if n_cut == 0 or coef.size == 0 or np.any(rows == cols):
            return None
        rate = float(np.max(np.abs(coef)))
        if rate == 0.0 or np.any(np.abs(np.abs(coef) - rate) > 1e-12 * rate):
            return None
        plus = coef > 0
        s1 = np.unique(np.concatenate([rows[plus], cols[~plus]]))
        s2 = np.unique(np.concatenate([cols[plus], rows[~plus]]))
        if np.intersect1d(s1, s2).size or s1.size + s2.size != n_cut:
            return None
        c0 = np.zeros((n_cut, n_cut), complex)
        np.add.at(c0, (rows, cols), base)
        return cls(n_cut, s1, s2, c0, rate)

    def terminal_blocks(
        self, g1: np.ndarray, t: int, values, rows: slice, cols: slice
    ) -> tuple[np.ndarray, np.ndarray]:
        """``G_tt(value)[rows, cols]`` for every value, and the energies that need a fallback.

        Parameters
        ----------
        g1 : ndarray (n_E, b, b)
            Zero-flux Green's function of the terminal block with the self-energies.
        t : int
            Physical columns (the cut block is ``g1[:, t:, t:]``).
        values : sequence of float
            Field values (phase ``rate * value`` on the S1 -> S2 hops).
        rows, cols : slice
            Part of the physical block to return.

        Returns
        -------
        out : ndarray (n_E, n_values, n_rows, n_cols)
        bad : ndarray of bool (n_E,)
            Energies where a check failed (``out`` is not valid there).
        """
        n_e = g1.shape[0]
        c, n1 = self.n_cut, self.n1
        z = np.exp(1j * self.rate * np.asarray(values, float))
        cut = t + self.perm  # cut block in pencil order (S1, then S2)
        swap = np.concatenate([cut[n1:], cut[:n1]])
        r_idx = np.arange(t)[rows]
        # [G_cc; G_rc] with swapped column blocks, times blockdiag(B21, -B12)
        gb = g1[:, np.concatenate([cut, r_idx])][:, :, swap] @ self.bd
        t1 = gb[:, :c]
        t1[:, np.arange(n1), np.arange(n1)] += 1.0
        l1 = -gb[:, c:]  # (n_E, r, c)
        rhs = g1[:, cut][:, :, np.arange(t)[cols]]  # G1_ct (n_E, c, m)
        base = g1[:, rows, cols]
        bad = np.zeros(n_e, bool)
        lam, x = np.linalg.eig(t1)
        try:
            xi = np.linalg.inv(x)
        except np.linalg.LinAlgError:
            xi = _solve_each(x, np.broadcast_to(np.eye(c), x.shape), bad)
        kappa = np.linalg.norm(x, axis=(1, 2)) * np.linalg.norm(xi, axis=(1, 2))
        bad |= ~(kappa <= _KAPPA_MAX)
        w = xi @ rhs  # (n_E, c, m)
        p = l1 @ x  # (n_E, r, c)
        d = (z[None, :, None] - 1.0) / (1.0 + (z[None, :, None] - 1.0) * lam[:, None, :])
        out = _assemble(p, w, d, base)
        # checks against a direct dense solve of (1 + (z - 1) T1) Y = G1_ct at two fluxes:
        # the one nearest a pole of the pencil (largest |d|) and the one farthest from zero
        # field (largest |z - 1|, the largest update)
        big = np.max(np.abs(d), axis=2)
        scale = np.max(np.abs(base), axis=(1, 2)) + np.max(np.abs(out), axis=(1, 2, 3))
        eye = np.eye(c)[None]
        far = np.full(n_e, int(np.argmax(np.abs(z - 1.0))))
        for pick in (np.argmax(big, axis=1), far):
            zw = z[pick][:, None, None]
            mw = eye + (zw - 1.0) * t1
            try:
                yw = np.linalg.solve(mw, rhs)
            except np.linalg.LinAlgError:
                yw = _solve_each(mw, rhs, bad)
            direct = base + (zw - 1.0) * (l1 @ yw)
            got = out[np.arange(n_e), pick]
            bad |= ~(np.max(np.abs(got - direct), axis=(1, 2)) <= _AGREE * scale)
        bad |= ~np.all(np.isfinite(out), axis=(1, 2, 3))
        self.fallbacks = int(np.sum(bad))
        return out, bad


def _assemble(p, w, d, base) -> np.ndarray:
    """``base + sum_k p[:, :, k] d[:, z, k] w[:, k, :]`` for every energy and flux ``z``."""
    n_e, r, c = p.shape
    m = w.shape[2]
    # (n_E, c, r*m) rank-one products, then one batched GEMM with d (n_E, n_z, c)
    k = (p.transpose(0, 2, 1)[:, :, :, None] * w[:, :, None, :]).reshape(n_e, c, r * m)
    return base[:, None] + (d @ k).reshape(n_e, d.shape[1], r, m)


def _solve_each(a: np.ndarray, b: np.ndarray, bad: np.ndarray) -> np.ndarray:
    """Batched solve that marks singular members in ``bad`` instead of raising."""
    out = np.zeros(b.shape, complex)
    for e in range(a.shape[0]):
        try:
            out[e] = np.linalg.solve(a[e], b[e])
        except np.linalg.LinAlgError:
            bad[e] = True
    return out
