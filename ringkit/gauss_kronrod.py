"""Gauss-Kronrod rules of any order on [-1, 1], computed (numpy only).

The (2n+1)-point Kronrod extension of the n-point Gauss-Legendre rule keeps the n Gauss nodes
and adds the n+1 zeros of the Stieltjes polynomial E_{n+1}, defined (up to a factor) by

    integral_{-1}^{1} P_n(x) E_{n+1}(x) x^k dx = 0,    k = 0, ..., n

(Kronrod 1965; Monegato, SIAM Rev. 24, 137 (1982)). Here E_{n+1} is expanded in Legendre
polynomials, E_{n+1} = P_{n+1} + sum_{j<=n} c_j P_j, and the n+1 conditions above (integrals
P_k P_n P_j computed exactly by an (2n+4)-point Gauss-Legendre rule) give the c_j by a linear
solve. Its zeros (``numpy.polynomial.legendre.legroots``, then two Newton steps) and the Gauss
nodes are the Kronrod nodes; the Kronrod weights solve the moment equations
sum_i w_i P_j(x_i) = 2 delta_j0, j = 0..2n, in the Legendre basis (well conditioned). The rule
integrates polynomials of degree 3n+1 exactly (n even or odd), the embedded Gauss rule degree
2n-1; tests check both on monomials and the 7/15 rule against the QUADPACK table (Piessens et
al. 1983) to 1e-15.

Public API
----------
kronrod_rule(n) -> (nodes, kronrod_weights, gauss_weights)   (ascending nodes; Gauss weights
    zero at the Kronrod-only nodes)
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.polynomial import legendre

from ringkit._validation import ParameterError

__all__ = ["kronrod_rule"]


def _legendre_rows(x: np.ndarray, m: int) -> np.ndarray:
    """P_0..P_{m-1} at ``x`` (rows), by the three-term recurrence."""
    p = np.empty((m, x.size))
    p[0] = 1.0
    if m > 1:
        p[1] = x
    for j in range(1, m - 1):
        p[j + 1] = ((2 * j + 1) * x * p[j] - j * p[j - 1]) / (j + 1)
    return p


@functools.lru_cache(maxsize=16)
def kronrod_rule(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Nodes and weights of the Gauss-Kronrod rule G_n / K_{2n+1} on [-1, 1].

    Parameters
    ----------
    n : int
        Number of Gauss nodes, 1 <= n <= 40 (K_{2n+1} exact to degree 3n+1).

    Returns
    -------
    nodes, wk, wg : ndarray
        2n+1 ascending nodes, the Kronrod weights and the Gauss weights (0 at the n+1
        Kronrod-only nodes). Read-only arrays.
    """
    if isinstance(n, bool) or int(n) != n or not 1 <= int(n) <= 40:
        raise ParameterError("n", n, "must be an integer in [1, 40]")
    n = int(n)
    xq, wq = legendre.leggauss(2 * n + 4)
    p = _legendre_rows(xq, n + 2)
    # a[k, j] = integral P_k P_n P_j, k = 0..n, j = 0..n+1
    a = (p[: n + 1] * p[n] * wq) @ p.T
    c = np.linalg.lstsq(a[:, : n + 1], -a[:, n + 1], rcond=None)[0]
    c = np.r_[c, 1.0]
    roots = np.sort(legendre.legroots(c).real)
    dc = legendre.legder(c)
    for _ in range(2):
        roots = roots - legendre.legval(roots, c) / legendre.legval(roots, dc)
    xg, wg_n = legendre.leggauss(n)
    nodes = np.sort(np.r_[xg, roots])
    nodes = 0.5 * (nodes - nodes[::-1])  # exact symmetry
    v = _legendre_rows(nodes, 2 * n + 1)
    rhs = np.zeros(2 * n + 1)
    rhs[0] = 2.0
    wk = np.linalg.solve(v, rhs)
    wk = 0.5 * (wk + wk[::-1])
    wg = np.zeros(2 * n + 1)
    wg[np.argmin(np.abs(nodes[:, None] - xg[None, :]), axis=0)] = wg_n
    for arr in (nodes, wk, wg):
        arr.setflags(write=False)
    return nodes, wk, wg
