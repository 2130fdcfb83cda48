"""Private: fast evaluation of a pole-residue resolvent over an energy window.

The reduced resolvent of :mod:`._spectral_lanczos` is ``g(E) = C diag(1/(E - p)) C^dag`` with
``C`` of shape ``(b, K)`` and ``K`` real poles ``p``. The direct sum costs ``K b^2`` per
energy. Inside a window ``|E - mu| <= half`` only the few poles in or next to the window vary
quickly; the contribution of every pole farther than ``r * half`` from ``mu`` is an analytic
function of ``E`` on the window and is replaced by a truncated Chebyshev series in
``t = (E - mu) / half`` with matrix coefficients. Per energy the cost becomes
``(K_near + N + 1) b^2`` real multiply-adds (one real-times-complex matrix product, basis
values times the upper triangles of ``C_k C_k^dag`` and of the coefficients; the lower triangle
follows from Hermiticity) instead of ``4 K b^2``, plus a one-off ``4 sum_far (N_k + 1) b^2``.

Chebyshev rather than Taylor: for a pole at ``a = (p - mu)/half`` the Taylor series in ``t``
converges like ``|a|^-n``, the Chebyshev series like ``(|a| + sqrt(a^2 - 1))^-n``, i.e. about
twice as fast (the Bernstein ellipse, L. N. Trefethen, *Approximation Theory and Approximation
Practice*, SIAM 2013, ch. 8). The expansion of one pole is closed-form (the generating function
of the Chebyshev polynomials, J. C. Mason and D. C. Handscomb, *Chebyshev Polynomials*, CRC 2003,
§5.1), which gives a rigorous remainder bound (see :class:`WindowResolvent`).
"""

from __future__ import annotations

import math

import numpy as np

from ringkit._validation import ParameterError, check_positive

__all__ = ["WindowResolvent"]

_CHUNK_BYTES = 64 * 2**20  # temporaries per energy chunk / cached near-pole products
_EDGE = 1e-12  # relative slack of the window edge (as SpectralSweeper.transmission)
_STEP_OFF = 1e-13  # an energy on a pole is moved by this relative amount (as ReducedResolvent)
_SETUP_WEIGHT = 4.0  # cost of one (pole, order) coefficient term relative to one basis column
_RADII = 1.08 * 1.12 ** np.arange(60)  # candidate near/far radii in units of the half width


class WindowResolvent:
    """``g(E) = C diag(1/(E - poles)) C^dag`` for many energies ``|E - mu| <= half``.

    Parameters
    ----------
    poles : ndarray of float, shape (K,)
        Real poles (units of energy, the units of ``mu`` and ``half``).
    weights : ndarray, shape (b, K)
        ``C`` (real or complex); ``g`` has the units of ``|C|^2`` / energy.
    mu : float
        Window centre (energy).
    half : float
        Window half width (energy), > 0. Energies up to ``half * (1 + 1e-12)`` from ``mu`` are
        accepted; the expansion is made on that slightly wider interval ``h``.
    tol : float
        Bound on the truncation error of every matrix element, relative to :attr:`scale`.
    n_energies : int
        Expected number of energies evaluated with this object; only used to choose the split
        between near and far poles (one-off coefficient cost against per-energy cost).

    Attributes
    ----------
    error_bound : float
        Rigorous bound of ``max |g_ij(E) - g~_ij(E)|`` over every element and every ``E`` of
        the window, for exact arithmetic (units of ``g``); ``<= tol * scale``.
    scale : float
        ``max_i sum_k |C_ik|^2 / max(|p_k - mu|, half)`` (units of ``g``): the size of ``g``
        at a generic energy of the window.
    n_near, order : int
        Poles summed exactly, and the highest Chebyshev order kept (-1: no far poles).
    radius : float
        The closest far pole lies at ``|p - mu| = radius * h`` (``inf``: no far pole, every
        pole summed exactly).

    Notes
    -----
    Write ``h = half (1 + 1e-12)``, ``t = (E - mu)/h`` in ``[-1, 1]`` and, for a far pole,
    ``a_k = (p_k - mu)/h`` with ``|a_k| > 1``, ``s_k = sqrt(a_k^2 - 1)`` and
    ``beta_k = sign(a_k) / (|a_k| + s_k)``. Then exactly (Chebyshev generating function)

    ``1/(E - p_k) = -(2 sign(a_k) / (h s_k)) sum'_{n>=0} beta_k^n T_n(t)``

    (primed sum: the ``n = 0`` term halved). Pole ``k`` keeps the orders ``n <= N_k``; since
    ``|T_n(t)| <= 1`` on the window, its dropped tail is at most

    ``rho_k = 2 |beta_k|^(N_k + 1) / (h s_k (1 - |beta_k|))``

    at every energy. For every element, by Cauchy-Schwarz,
    ``|R_ij(E)| <= sum_k |C_ik| |C_jk| rho_k <= max_i sum_k |C_ik|^2 rho_k = error_bound``.
    ``N_k`` is the smallest order with ``rho_k <= tol * scale / S``,
    ``S = max_i sum_far |C_ik|^2``, hence ``error_bound <= tol * scale``. Rounding adds a
    few ``eps * sum_k |C_ik| |C_jk| / |E - p_k|``, as in the direct sum.

    Near poles (``|a_k| <= radius``) are summed exactly; an energy closer to one of them than
    ``1e-13 * max(1, max|p|)`` is moved by that amount, as ``ReducedResolvent.resolvent``
    does. The radius minimises ``n_energies * (K_near + N + 1) + 4 sum_far (N_k + 1)`` over a
    geometric grid of radii (including "every pole near").
    """

    def __init__(
        self,
        poles: np.ndarray,
        weights: np.ndarray,
        mu: float,
        half: float,
        *,
        tol: float = 1e-13,
        n_energies: int = 400,
    ) -> None:
        poles = np.asarray(poles, dtype=float).ravel()
        c = np.asarray(weights)
        if c.ndim != 2 or c.shape[1] != poles.size:
            raise ParameterError("weights", c.shape, f"must have shape (b, {poles.size})")
        if not np.all(np.isfinite(poles)):
            raise ParameterError("poles", poles[~np.isfinite(poles)][:3], "must be finite")
        if not math.isfinite(float(mu)):
            raise ParameterError("mu", mu, "must be finite")
        self.mu = float(mu)
        self.half = check_positive("half", half)
        self.tol = check_positive("tol", tol)
        self._h = self.half * (1.0 + _EDGE)
        self._dtype = np.result_type(c.dtype, np.float64)
        c = c.astype(self._dtype, copy=False)
        self.b, k_all = c.shape
        self._tiny = _STEP_OFF * max(1.0, float(np.max(np.abs(poles), initial=1.0)))
        self._iu = np.triu_indices(self.b)
        abs2 = np.abs(c) ** 2
        dist = np.abs(poles - self.mu)
        self.scale = float(np.max(abs2 @ (1.0 / np.maximum(dist, self.half)), initial=0.0))

        a = (poles - self.mu) / self._h
        order = np.argsort(np.abs(a), kind="stable")
        a, c, abs2 = a[order], c[:, order], abs2[:, order]
        m, n_k = _choose_split(np.abs(a), abs2, self.tol * self.scale, self._h, int(n_energies))
        self.n_near = m
        self.radius = float(np.abs(a[m])) if m < k_all else math.inf
        self._near_p = poles[order][:m]
        self._near_c = c[:, :m]
        self.order, self._far, self.error_bound = -1, None, 0.0
        if m < k_all:
            self._far, self.error_bound = _far_coefficients(
                a[m:], c[:, m:], abs2[:, m:], n_k, self._h, self._iu
            )
            self.order = self._far.shape[0] - 1
        # products C_k C_k^dag of the near poles (upper triangle), cached if small enough
        tri = self._iu[0].size
        self._near_tri = None
        if m * tri * 16 <= _CHUNK_BYTES:
            self._near_tri = _outer_tri(self._near_c, self._iu)

    def __call__(self, energies) -> np.ndarray:
        """``g(E)`` at every energy, shape ``(n_E, b, b)``.

        Raises
        ------
        ParameterError
            If an energy lies outside ``|E - mu| <= half * (1 + 1e-12)``.
        """
        e = np.atleast_1d(np.asarray(energies, dtype=float)).ravel()
        bad = ~(np.abs(e - self.mu) <= self._h)
        if np.any(bad):
            raise ParameterError(
                "energies",
                e[bad][:3],
                f"must lie inside the window |E - {self.mu:g}| <= {self.half:g}",
            )
        b = self.b
        out = np.empty((e.size, b, b), dtype=self._dtype)
        step = max(1, _CHUNK_BYTES // (16 * b * b))
        flat = out.reshape(e.size, b * b)
        upper = self._iu[0] * b + self._iu[1]
        lower = self._iu[1] * b + self._iu[0]
        for s in range(0, e.size, step):
            vals = self._tri_values(e[s : s + step])
            flat[s : s + step, lower] = vals.conj()
            flat[s : s + step, upper] = vals  # the diagonal keeps this (real-part) value
        return out

    # ------------------------------------------------------------------ internals
    def _tri_values(self, e: np.ndarray) -> np.ndarray:
        """Upper-triangle elements of ``g`` at a chunk of energies, ``(n, b(b+1)/2)``."""
        tri = self._iu[0].size
        acc = np.zeros((e.size, tri), dtype=self._dtype)
        if self._far is not None:
            acc += _real_matmul(_chebyshev_basis((e - self.mu) / self._h, self.order), self._far)
        m = self._near_p.size
        if m:
            dist = e[:, None] - self._near_p[None, :]
            dist = np.where(np.abs(dist) < self._tiny, self._tiny, dist)
            d = 1.0 / dist
            if self._near_tri is not None:
                acc += _real_matmul(d, self._near_tri)
            else:
                step = max(1, _CHUNK_BYTES // (16 * tri))
                for s in range(0, m, step):
                    blk = _outer_tri(self._near_c[:, s : s + step], self._iu)
                    acc += _real_matmul(d[:, s : s + step], blk)
        return acc


def _real_matmul(x: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``x @ w`` for real ``x`` and real or complex ``w`` in real arithmetic (half the work)."""
    if np.isrealobj(w):
        return x @ w
    w = np.ascontiguousarray(w)
    rows = w.shape[0]
    return np.ascontiguousarray(x @ w.view(np.float64).reshape(rows, -1)).view(w.dtype)


def _outer_tri(c: np.ndarray, iu: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """``C_ik conj(C_jk)`` for ``i <= j``, shape ``(K, b(b+1)/2)``."""
    return np.ascontiguousarray((c[iu[0], :] * c[iu[1], :].conj()).T)


def _chebyshev_basis(t: np.ndarray, order: int) -> np.ndarray:
    """``T_n(t)`` for ``n = 0..order`` (three-term recurrence, stable on [-1, 1])."""
    out = np.empty((t.size, order + 1))
    out[:, 0] = 1.0
    if order >= 1:
        out[:, 1] = t
    for n in range(2, order + 1):
        out[:, n] = 2.0 * t * out[:, n - 1] - out[:, n - 2]
    return out


def _pole_terms(absa: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``|beta|``, ``s = sqrt(a^2 - 1)`` and ``gamma = 2/(h s (1 - |beta|))`` for ``|a| > 1``."""
    s = np.sqrt((absa - 1.0) * (absa + 1.0))
    beta = 1.0 / (absa + s)
    return beta, s, 2.0 / (h * s * (1.0 - beta))


def _orders(absa: np.ndarray, eps: float, h: float) -> np.ndarray:
    """Smallest ``N_k >= 0`` with ``gamma_k |beta_k|^(N_k + 1) <= eps``."""
    beta, _, gamma = _pole_terms(absa, h)
    with np.errstate(divide="ignore"):
        n = np.ceil(np.log(eps / gamma) / np.log(beta)) - 1.0
    n = np.maximum(n, 0.0).astype(np.int64)
    n += gamma * beta ** (n + 1.0) > eps  # guard the rounding of ceil
    return n


def _choose_split(
    absa: np.ndarray, abs2: np.ndarray, target: float, h: float, n_energies: int
) -> tuple[int, np.ndarray]:
    """Number of near poles (``absa`` ascending) and the far poles' orders, by the cost model."""
    k_all = absa.size
    if k_all == 0 or target <= 0.0:
        return k_all, np.zeros(0, np.int64)
    # S(m) = max_i sum_{k >= m} |C_ik|^2, for every split m
    tail = np.cumsum(abs2[:, ::-1], axis=1)[:, ::-1].max(axis=0)
    best = (n_energies * k_all, k_all, np.zeros(0, np.int64))  # every pole near
    for r in _RADII:
        m = int(np.searchsorted(absa, r, side="right"))
        if m >= k_all:
            break
        if absa[m] <= 1.0 + 1e-9 or tail[m] <= 0.0:
            continue
        n_k = _orders(absa[m:], target / tail[m], h)
        cost = n_energies * (m + int(n_k.max()) + 1) + _SETUP_WEIGHT * float(np.sum(n_k + 1))
        if cost < best[0]:
            best = (cost, m, n_k)
    return best[1], best[2]


def _far_coefficients(a, c, abs2, n_k, h, iu) -> tuple[np.ndarray, float]:
    """Chebyshev matrix coefficients ``M_n`` (upper triangles) of the far poles, and the bound."""
    absa = np.abs(a)
    beta, s, gamma = _pole_terms(absa, h)
    bound = float(np.max(abs2 @ (gamma * beta ** (n_k + 1.0)), initial=0.0))
    perm = np.argsort(-n_k, kind="stable")  # poles needing order n form a prefix
    n_k, a, c, beta, s = n_k[perm], a[perm], c[:, perm], beta[perm], s[perm]
    top = int(n_k[0])
    lengths = np.searchsorted(-n_k, -np.arange(top + 1), side="right")
    amp = -2.0 * np.sign(a) / (h * s)
    sbeta = np.sign(a) * beta
    coef = np.empty((top + 1, iu[0].size), dtype=c.dtype)
    phi = amp.copy()
    for n in range(top + 1):
        length = int(lengths[n])
        cl = c[:, :length]
        coef[n] = ((cl * (phi[:length] if n else 0.5 * phi[:length])) @ cl.conj().T)[iu]
        phi *= sbeta
    return coef, bound
