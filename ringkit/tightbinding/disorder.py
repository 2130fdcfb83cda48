"""Anderson on-site disorder keyed by integer site coordinates, and its Born mean free path.

API
---
hash_uniform(keys, seed, stream=0)
    Counter-based uniform numbers in [0, 1) from integer keys (vectorised splitmix64).
anderson_potential(keys, strength, seed, stream=0)
    On-site energies uniform in [-W/2, W/2).
lattice_dos(energy)
    Square-lattice density of states per site and spin, in 1/t.
mean_fermi_speed(energy)
    Average |v| over the square-lattice Fermi contour, in t a/hbar.
born_mean_free_path(strength, energy, *, dim=2)
    Born (golden-rule) elastic mean free path in lattice spacings.
born_mean_free_path_continuum(strength, energy)
    Band-bottom (continuum) limit ``48 (t/W)^2 sqrt(E/t)`` in lattice spacings.
strength_for_mean_free_path(mean_free_path, energy, *, dim=2)
    Inverse: Anderson W (units of t) giving a Born mean free path (lattice spacings).
mean_free_path_from_mobility(mobility, fermi_wavevector)
    ``l = hbar kF mu/e`` in m.

Reproducibility
---------------
The value on a site depends only on (its integer lattice coordinates, seed, stream): a
realisation is identical on the sites two geometries share, and independent of site order,
platform and kwant version (docs/engine.md §5). Energies here are in units of the hopping
t, lengths in lattice spacings a, unless stated.

Born approximation (docs/physics.md §8.2)
--------------------------------------
For uncorrelated on-site disorder with ``<V^2> = W^2/12`` the golden-rule rate is

    hbar/tau = 2 pi <V^2> nu(E) = pi W^2 nu(E)/6,     l = <|v|> tau,

nu the density of states per site and spin. For the square lattice (onsite 4t, band [0, 8t])
``nu(E) = K(m)/(2 pi^2 t)``, ``m = 1 - ((E - 4t)/4t)^2`` (K: complete elliptic integral of the
first kind, parameter convention), and <|v|> is the average speed over the Fermi contour. In
the band-bottom limit this gives ``l/a = 48 (t/W)^2 sqrt(E/t)``. For the chain (onsite 2t,
band [0, 4t], ``E = 2t(1 - cos ka)``): ``nu = 1/(2 pi t sin ka)``, ``v = 2 t a sin(ka)/hbar``,
``l/a = 24 (t/W)^2 sin^2(ka)`` (total out-scattering length; backscattering length 2l and
Thouless' localisation length ``96 (t/W)^2 sin^2 ka = 4l``).
Sources: golden rule for the Anderson model as in T. Ando, Phys. Rev. B 44, 8017 (1991) [M];
quasi-1D mean transmission ``<T>/N = l'/(L + l')`` with ``l' = (pi/2) l`` in 2D:
C. W. J. Beenakker, H. van Houten, Solid State Physics 44, 1 (1991) [M]. Check values
(docs/physics.md §8.2, computed): W = t, E = 0.5t gives nu = 0.0849772/t, l = 30.26 a (continuum
33.941 a).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.special import ellipk

from ringkit._validation import ParameterError, check_positive, check_range
from ringkit.units import HBAR, E

__all__ = [
    "hash_uniform",
    "anderson_potential",
    "lattice_dos",
    "mean_fermi_speed",
    "born_mean_free_path",
    "born_mean_free_path_continuum",
    "strength_for_mean_free_path",
    "mean_free_path_from_mobility",
]

_M64 = np.uint64(0xFFFFFFFFFFFFFFFF)
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MUL1 = np.uint64(0xBF58476D1CE4E5B9)
_MUL2 = np.uint64(0x94D049BB133111EB)


def _mix(z: np.ndarray) -> np.ndarray:
    """splitmix64 finaliser on a uint64 array (wrap-around arithmetic, arrays only)."""
    z = z + _GOLDEN
    z = (z ^ (z >> np.uint64(30))) * _MUL1
    z = (z ^ (z >> np.uint64(27))) * _MUL2
    return z ^ (z >> np.uint64(31))


def _as_u64(values: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(values, dtype=np.int64).view(np.uint64)


def hash_uniform(keys: np.ndarray, seed: int, stream: int = 0) -> np.ndarray:
    """Uniform numbers in [0, 1) determined by integer ``keys``, ``seed`` and ``stream``.

    Parameters
    ----------
    keys : array_like of int, shape (n, d) or (n,)
        Integer site coordinates (lattice tags).
    seed : int
        Realisation seed, 0 <= seed < 2**63.
    stream : int
        Independent stream label (e.g. one per lattice family).

    Returns
    -------
    ndarray, shape (n,)
        53-bit uniform floats, a pure function of (key, seed, stream).
    """
    keys = np.asarray(keys)
    if keys.ndim == 1:
        keys = keys[:, None]
    if keys.ndim != 2 or not np.issubdtype(keys.dtype, np.integer):
        raise ParameterError("keys", keys.shape, "must be an integer array of shape (n, d)")
    for name, v in (("seed", seed), ("stream", stream)):
        if int(v) != v or not 0 <= int(v) < 2**63:
            raise ParameterError(name, v, "must be an integer in [0, 2**63)")
    n = keys.shape[0]
    h = _mix(_mix(np.full(n, int(seed), dtype=np.uint64)) ^ np.full(n, int(stream), np.uint64))
    for col in range(keys.shape[1]):
        h = _mix(h ^ _as_u64(keys[:, col]))
    return (h >> np.uint64(11)).astype(np.float64) * (1.0 / 2**53)


def anderson_potential(keys: np.ndarray, strength: float, seed: int, stream: int = 0) -> np.ndarray:
    """Anderson on-site energies uniform in ``[-W/2, W/2)`` keyed by site coordinates.

    ``strength`` is W in any energy unit (the result has the same unit); see
    :func:`hash_uniform` for ``keys``, ``seed``, ``stream``.
    """
    w = check_positive("strength", strength, allow_zero=True)
    u = hash_uniform(keys, seed, stream)
    return w * (u - 0.5)


def lattice_dos(energy: float | np.ndarray) -> float | np.ndarray:
    """Square-lattice DOS per site and spin in 1/t at ``energy`` (units of t, band [0, 8])."""
    e = np.asarray(energy, float)
    if np.any((e <= 0) | (e >= 8)):
        raise ParameterError("energy", energy, "must lie inside the band (0, 8) t")
    m = 1.0 - ((e - 4.0) / 4.0) ** 2
    out = ellipk(m) / (2.0 * math.pi**2)
    return float(out) if out.ndim == 0 else out


def _contour_radius(energy: float, theta: np.ndarray) -> np.ndarray:
    """|k| on the ray at angle theta where 4 - 2cos kx - 2cos ky = energy (energy < 4)."""
    c, s = np.abs(np.cos(theta)), np.abs(np.sin(theta))
    lo = np.zeros_like(theta)
    hi = math.pi / np.maximum(c, s)
    for _ in range(60):  # bisection to ~1e-18 relative
        mid = 0.5 * (lo + hi)
        val = 4.0 - 2.0 * np.cos(mid * c) - 2.0 * np.cos(mid * s)
        below = val < energy
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    return 0.5 * (lo + hi)


def mean_fermi_speed(energy: float) -> float:
    """Average speed over the square-lattice Fermi contour, in units of ``t a/hbar``.

    ``<|v|> = L / oint dl/|v|`` with L the contour length and ``oint dl/|v| = (2 pi)^2 nu(E)``
    (states at energy E are uniformly weighted). Uses ``<|v|>(E) = <|v|>(8 - E)``.
    """
    e = float(energy)
    if not 0 < e < 8 or e == 4:
        raise ParameterError("energy", energy, "must lie in (0, 4) or (4, 8) t")
    if e > 4:
        e = 8.0 - e
    return _mean_fermi_speed(e)


@functools.lru_cache(maxsize=256)
def _mean_fermi_speed(e: float) -> float:
    """:func:`mean_fermi_speed` for ``0 < e < 4`` (cached: a lattice build calls it for E_F)."""
    theta = np.linspace(0.0, math.pi / 2, 20001)
    k = _contour_radius(e, theta)
    pts = np.stack([k * np.cos(theta), k * np.sin(theta)])
    length = 4.0 * float(np.sum(np.hypot(*np.diff(pts, axis=1))))
    return length / ((2.0 * math.pi) ** 2 * lattice_dos(e))


def born_mean_free_path(strength: float, energy: float, *, dim: int = 2) -> float:
    """Born elastic mean free path in lattice spacings (see module docstring).

    Parameters
    ----------
    strength : float
        Anderson W in units of t (> 0).
    energy : float
        Energy above the band bottom in units of t (2D: (0, 8), 4 excluded; chain: (0, 4)).
    dim : {1, 2}
        Chain (1) or square lattice (2).
    """
    w = check_positive("strength", strength)
    if dim == 2:
        hbar_over_tau = math.pi * w**2 * lattice_dos(energy) / 6.0
        return mean_fermi_speed(energy) / hbar_over_tau
    if dim == 1:
        e = check_range("energy", energy, 0.0, 4.0, inclusive=(False, False))
        sin2 = 1.0 - (1.0 - e / 2.0) ** 2
        return 24.0 * sin2 / w**2
    raise ParameterError("dim", dim, "must be 1 or 2")


def born_mean_free_path_continuum(strength: float, energy: float) -> float:
    """Band-bottom limit ``l/a = 48 (t/W)^2 sqrt(E/t)`` of the 2D Born mean free path."""
    w = check_positive("strength", strength)
    e = check_positive("energy", energy)
    return 48.0 * math.sqrt(e) / w**2


def strength_for_mean_free_path(mean_free_path: float, energy: float, *, dim: int = 2) -> float:
    """Anderson W (units of t) whose Born mean free path is ``mean_free_path`` (lattice units).

    Since ``l ∝ 1/W^2`` at fixed energy: ``W = sqrt(l(W=1)/l)``.
    """
    lmfp = check_positive("mean_free_path", mean_free_path)
    return math.sqrt(born_mean_free_path(1.0, energy, dim=dim) / lmfp)


def mean_free_path_from_mobility(mobility: float, fermi_wavevector: float) -> float:
    """Elastic mean free path ``l = hbar kF mu/e`` in m (mu in m^2/(V s), kF in 1/m).

    From ``mu = e tau/m*`` and ``l = v_F tau = hbar kF tau/m*`` (docs/physics.md §8.3).
    """
    mu = check_positive("mobility", mobility, "m^2/(V s)")
    kf = check_positive("fermi_wavevector", fermi_wavevector, "1/m")
    return HBAR * kf * mu / E
