"""Likelihood pieces of the amplitude emulator: temperature projection, predictive t, error.

No kwant. Used by :class:`ringkit.analysis.emulator.AmplitudeEmulator`; the reasons are in
docs/inverse-fit.md, "Statistical model" and "Why the projection".

Projection on smooth functions of ln T
--------------------------------------
The transformed amplitudes ``y_q(T_j)`` of one ring (q = sqrt h/e rms, sqrt h/2e rms, G) are
strongly correlated between neighbouring temperatures (0.91 on average on the benchmark
emulator, 0.99-1.00 at the lowest), so their covariance over J temperatures is close to
singular. Estimated from n realizations, the inverse of a p-dimensional sample covariance is
biased high by ``(n - 1)/(n - p - 2)`` (Hartlap, Simon and Schneider, Astron. Astrophys. 464,
399 (2007)): with p = 18 and n = 32 the likelihood was ~2.6x too sharp; shrinking the
correlations instead biased L_phi low, and the fine structure over T is not modelled well
enough to carry weight. The likelihood therefore uses the summary
``z_q = Q^T y_q`` with ``Q`` (J x K) the orthonormal polynomials of degree < K in ln T over
the measured temperatures (K = 2: level and slope), so ``p = K x n_quantities`` (6) is
small against n. This is the exact likelihood of a linear summary of the data (information
in the curvature over T is discarded, which widens the intervals honestly).

Density and the finite-ensemble corrections
-------------------------------------------
The model mean and covariance of z come from the n realizations. A Gaussian with the plain
sample covariance S gives intervals that are too narrow: the inverse of S is biased high by
``(n - 1)/(n - p - 2)`` and its noise adds scatter to the fitted parameters. With n >= p + 5
the density is Gaussian with covariance ``S (1 + 1/n) m1/alpha`` plus the measurement and
interpolation variances (:func:`covariance_factor`: Hartlap et al. 2007, Percival et al.
2014). On a correlated Gaussian toy with a known truth this covers 66-68 % / 93-94 % at
n = 16-64 (tests/test_inverse_fit_likelihood.py); the predictive Student t alone (the
density of a new draw, Jeffreys prior) covered 54 % / 86 % at n = 16 and 63 % / 91 % at
n = 32. With fewer realizations the t is used (shrunk covariance; not calibrated).

Interpolation error
-------------------
Leave-one-node-out: each interior coupling node (in u = 1/L_phi) and temperature node is
dropped in turn and predicted from the others by the emulator's own PCHIP; the squared error
per (node, temperature, quantity), averaged over realizations, divided by 16 (the dropped
node doubles the step; PCHIP assumed second order, so the built grid's error is a quarter),
is the interpolation variance. Between nodes the larger neighbour is used (conservative).

Public API (package-internal)
-----------------------------
temperature_basis, project_measurement_cov, sample_covariance, shrunk_covariance,
covariance_factor, predictive_scale, logpdf, distance,
interpolation_variance_tables
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.special import gammaln

__all__ = [
    "N_BASIS",
    "temperature_basis",
    "project_measurement_cov",
    "sample_covariance",
    "shrunk_covariance",
    "covariance_factor",
    "predictive_scale",
    "logpdf",
    "distance",
    "interpolation_variance_tables",
]

#: Polynomials in ln T kept in the likelihood summary (level and slope).
N_BASIS = 2
#: Convergence order assumed for PCHIP when scaling the leave-one-node-out error.
_ORDER = 2


def temperature_basis(temperatures, n_basis: int = N_BASIS) -> np.ndarray:
    """Orthonormal polynomials of degree < K in ln T at the given temperatures (K).

    Returns ``Q`` of shape (J, K), ``K = min(n_basis, J)``, with ``Q^T Q = 1``.
    """
    return _basis(tuple(float(t) for t in np.atleast_1d(temperatures)), int(n_basis)).copy()


@functools.lru_cache(maxsize=32)
def _basis(temperatures: tuple, n_basis: int) -> np.ndarray:
    x = np.log(np.asarray(temperatures, dtype=float))
    k = int(min(max(n_basis, 1), x.size))
    sd = x.std()
    x = (x - x.mean()) / (sd if sd > 0 else 1.0)
    q, r = np.linalg.qr(np.vander(x, k, increasing=True))
    return q * np.sign(np.diag(r))[None, :]


def project(y: np.ndarray, q: np.ndarray) -> np.ndarray:
    """``y`` (..., J, nq) -> ``z`` (..., K*nq), ordered basis-major (k * nq + quantity)."""
    z = np.einsum("tk,...tq->...kq", q, y)
    return z.reshape(z.shape[:-2] + (-1,))


def project_measurement_cov(var: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Covariance of ``z`` from independent variances ``var`` (J, nq) of ``y``."""
    j, nq = var.shape
    k = q.shape[1]
    out = np.zeros((k * nq, k * nq))
    for i in range(nq):
        idx = np.arange(k) * nq + i
        out[np.ix_(idx, idx)] = (q * var[:, i][:, None]).T @ q
    return out


def shrunk_covariance(y: np.ndarray) -> np.ndarray:
    """Covariance of the rows of ``y`` with the correlations shrunk towards 0.

    Schafer and Strimmer, Stat. Appl. Genet. Mol. Biol. 4, 32 (2005), target "D" (diagonal,
    unequal variances): ``lambda = sum Var(r_ij) / sum r_ij^2`` over i != j, clipped to [0, 1].
    """
    n, p = y.shape
    sd = y.std(axis=0, ddof=1)
    sd = np.where(sd > 0, sd, 1e-300)
    x = (y - y.mean(axis=0)) / sd
    w = x[:, :, None] * x[:, None, :]
    r = w.mean(axis=0) * n / (n - 1)
    var_r = w.var(axis=0, ddof=1) * n / (n - 1) ** 2
    off = ~np.eye(p, dtype=bool)
    den = float(np.sum(r[off] ** 2))
    lam = 1.0 if den == 0 else min(1.0, max(0.0, float(np.sum(var_r[off])) / den))
    rs = (1.0 - lam) * r
    rs[np.diag_indices(p)] = 1.0
    return rs * sd[:, None] * sd[None, :]


def sample_covariance(z: np.ndarray, shrink) -> np.ndarray:
    """Unbiased sample covariance of the rows of ``z``; ``shrink(z)`` if n < p + 5.

    With fewer realizations the sample covariance is singular or the corrections of
    :func:`covariance_factor` do not exist; the correlations are then shrunk (``shrink`` =
    Schafer-Strimmer) and the density is the predictive t (not calibrated: too few
    realizations).
    """
    n, p = z.shape
    if n < p + 5:
        return shrink(z)
    return np.atleast_2d(np.cov(z, rowvar=False))


def covariance_factor(n: int, p: int, n_theta: int) -> float | None:
    """Factor on the sample covariance for parameter intervals from n realizations.

    ``m1 / alpha``: alpha = (n - p - 2)/(n - 1) debiases the inverse of the sample covariance
    (Hartlap, Simon and Schneider, Astron. Astrophys. 464, 399 (2007)); m1 =
    (1 + B (p - n_theta)) / (1 + A + B (n_theta + 1)), A = 2/((n - p - 1)(n - p - 4)),
    B = (n - p - 2)/((n - p - 1)(n - p - 4)), adds the scatter of the fitted parameters caused
    by the noise of the estimate (Percival et al., Mon. Not. R. Astron. Soc. 439, 2531
    (2014), from memory; Dodelson and Schneider, Phys. Rev. D 88, 063537 (2013)). None when
    n < p + 5 (undefined).
    """
    if n < p + 5:
        return None
    a = 2.0 / ((n - p - 1) * (n - p - 4))
    b = (n - p - 2) / ((n - p - 1) * (n - p - 4))
    m1 = (1.0 + b * (p - n_theta)) / (1.0 + a + b * (n_theta + 1))
    return m1 * (n - 1) / (n - p - 2)


def predictive_scale(cov: np.ndarray, n: int, extra, n_theta: int) -> tuple[np.ndarray, float]:
    """Covariance (or t scale) of the measured summary, and nu (inf: Gaussian).

    n >= p + 5: Gaussian with ``S (1 + 1/n) m1/alpha + extra`` (:func:`covariance_factor`;
    ``1 + 1/n`` for the estimated mean). Fewer realizations: the predictive Student t of a
    new draw (normal model, unknown mean and covariance, Jeffreys prior; from memory) with
    ``nu = max(n - p, 3)`` and scale ``S (1 + 1/n)(n - 1)/nu + extra``.
    """
    p = cov.shape[0]
    f = covariance_factor(n, p, n_theta)
    if f is not None:
        return cov * (1.0 + 1.0 / n) * f + extra, math.inf
    nu = float(max(n - p, 3))
    return cov * (1.0 + 1.0 / n) * (n - 1) / nu + extra, nu


def logpdf(x: np.ndarray, mean: np.ndarray, cov, n: int, extra, n_theta: int = 3) -> float:
    """Log density of the measured summary ``x`` (:func:`predictive_scale`)."""
    c, nu = predictive_scale(cov, n, extra, n_theta)
    p = x.size
    try:
        ch = np.linalg.cholesky(c)
    except np.linalg.LinAlgError:
        return -math.inf
    r = np.linalg.solve(ch, x - mean)
    d2 = float(r @ r)
    logdet = float(np.sum(np.log(np.diag(ch))))
    if math.isinf(nu):
        return -0.5 * d2 - logdet - 0.5 * p * math.log(2.0 * math.pi)
    return float(
        gammaln(0.5 * (nu + p))
        - gammaln(0.5 * nu)
        - 0.5 * p * math.log(nu * math.pi)
        - logdet
        - 0.5 * (nu + p) * math.log1p(d2 / nu)
    )


def distance(x, mean, cov, n: int, extra, n_theta: int = 3) -> tuple[float, float]:
    """Squared distance of ``x`` in the scale of :func:`logpdf`, and nu.

    Gaussian (nu = inf): ``d2`` follows chi-square(p) at the truth; t: ``d2/p`` follows
    F(p, nu) (closed forms).
    """
    c, nu = predictive_scale(cov, n, extra, n_theta)
    r = x - mean
    return float(r @ np.linalg.solve(c, r)), nu


def _drop_error(x: np.ndarray, vals: np.ndarray, axis: int) -> np.ndarray:
    """Mean squared leave-one-node-out error along ``axis`` of ``vals`` (n_seed, ...).

    Interior nodes are dropped and predicted by PCHIP from the others; the end nodes copy
    their neighbour. Returns the array without the seed axis, node axis in place.
    """
    moved = np.moveaxis(vals, axis, 1)  # (s, m, ...)
    m = x.size
    err = np.zeros(moved.shape[1:])
    if m >= 3:
        for i in range(1, m - 1):
            keep = [j for j in range(m) if j != i]
            pred = PchipInterpolator(x[keep], moved[:, keep], axis=1)(x[i])
            err[i] = np.mean((pred - moved[:, i]) ** 2, axis=0)
        err[0], err[-1] = err[1], err[-2]
    return np.moveaxis(err, 0, axis - 1)


def interpolation_variance_tables(u: np.ndarray, lt: np.ndarray, vals: np.ndarray):
    """Interpolation variance at the nodes of one mean free path.

    Parameters
    ----------
    u : ndarray (n_eta,)
        Realised 1/L_phi of the coupling nodes (1/m).
    lt : ndarray (n_T,)
        ln T of the temperature nodes.
    vals : ndarray (n_seed, n_eta, n_T, 3)
        Per-realization y (sqrt amplitudes, G).

    Returns
    -------
    ndarray (n_eta, n_T, 3)
        Variance of y from interpolating in u plus in ln T, scaled to the built grid.
    """
    scale = 0.5 ** (2 * _ORDER)
    eu = _drop_error(u, vals, 1)
    et = _drop_error(lt, vals, 2)
    return scale * (eu + et)


def variance_at(table: np.ndarray, u_nodes: np.ndarray, lt_nodes: np.ndarray, u, lt):
    """Interpolation variance (J, 3) at paired (u_j, ln T_j): larger neighbour in u and T."""

    def pair(nodes, x):
        if nodes.size < 2:
            return np.zeros((np.size(x), 2), dtype=int)
        i = np.clip(np.searchsorted(nodes, np.atleast_1d(x)), 1, nodes.size - 1)
        return np.stack([i - 1, i], axis=1)

    iu, it = pair(u_nodes, u), pair(lt_nodes, lt)
    return table[iu[:, :, None], it[:, None, :]].max(axis=(1, 2))
