"""Exact single-channel ring with 2 to 4 leads as a scattering network (numpy only).

A one-dimensional ring of radius R with single-channel leads at polar angles theta_i: every
lead meets the ring at a three-way junction with a symmetric 3x3 S-matrix; between two
neighbouring junctions the wave picks up the dynamic phase ``k R dtheta`` and its share of the
Aharonov-Bohm phase. The 2N amplitudes arriving at the junctions from the arms are found by one
linear solve (vectorised over any leading axes, e.g. the field), giving all lead-to-lead
transmissions T_ij and, with :mod:`ringkit.contacts`, any R_mn,kl. The kwant-free companion of
:mod:`ringkit.transport.multiterminal` for quick previews and checks.

Public API
----------
griffiths_junction()
    S = (2/3) - delta_ij: the symmetric, energy-independent junction of a continuum network
    (S. Griffiths, Trans. Faraday Soc. 49, 345 (1953) [from memory]; the coupling-1/2-limit
    member eps = 4/9 of the Büttiker-Imry-Azbel family, Phys. Rev. A 30, 1982 (1984)).
lattice_junction(ka)
    S_ij = -delta_ij + 2i sin(ka) / (2 e^{ika} - e^{-ika}): a tight-binding site joining three
    semi-infinite chains (exact for ringkit's chain rings, docs/multiterminal.md).
ring_network_transmissions(lead_angles, k_radius, ab_phase, *, junction=None, arm_phases=None)
    T_ij (..., N, N), T[i, j] from lead j into lead i (lead order as given).
network_conductance_matrix(T, spin_degeneracy=2)
    Büttiker conductance matrix in e^2/h.

Convention: electrons; a counter-clockwise loop carries ``exp(-i ab_phase)`` with
``ab_phase = 2 pi Phi/(h/e)`` (as :mod:`ringkit.tightbinding.fields`); T does not depend on how
the AB phase is split between the arms.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ringkit._validation import ParameterError

__all__ = [
    "griffiths_junction",
    "lattice_junction",
    "ring_network_transmissions",
    "network_conductance_matrix",
]

_TWO_PI = 2.0 * math.pi


def griffiths_junction() -> np.ndarray:
    """Symmetric continuum three-way junction, ``S_ij = 2/3 - delta_ij`` (channel 0 = lead)."""
    return np.full((3, 3), 2.0 / 3.0) - np.eye(3)


def lattice_junction(ka: np.ndarray | float) -> np.ndarray:
    """S-matrix (..., 3, 3) of a lattice site joining three chains at ``E = 2t(1 - cos ka)``.

    With ``psi_j(n) = a_j e^{-ikn} + b_j e^{ikn}`` on chain j (n = 0 the shared site), the node
    equation ``(E - 2t) psi_0 = -t sum_j psi_j(1)`` gives
    ``psi_0 = 2i sin k sum_j a_j / (2 e^{ik} - e^{-ik})`` and ``b_j = psi_0 - a_j``.
    """
    k = np.asarray(ka, dtype=float)
    if np.any(~np.isfinite(k)) or np.any((k <= 0) | (k >= math.pi)):
        raise ParameterError("ka", ka, "must lie in (0, pi) (inside the chain band)")
    c = 2j * np.sin(k) / (2 * np.exp(1j * k) - np.exp(-1j * k))
    return c[..., None, None] * np.ones((3, 3)) - np.eye(3)


def ring_network_transmissions(
    lead_angles: Sequence[float],
    k_radius: np.ndarray | float,
    ab_phase: np.ndarray | float,
    *,
    junction: np.ndarray | None = None,
    arm_phases: Sequence[np.ndarray | float] | None = None,
) -> np.ndarray:
    """Lead-to-lead transmissions of a single-channel ring with N = 2..4 leads.

    Parameters
    ----------
    lead_angles : sequence of float
        Polar angles (rad) of the N junctions, in lead order; must be distinct.
    k_radius : array_like
        ``k R`` (dimensionless): an arm spanning ``dtheta`` has dynamic phase ``k R dtheta``.
    ab_phase : array_like
        ``2 pi Phi/(h/e)``; broadcasts with ``k_radius``.
    junction : ndarray (..., 3, 3), optional
        Junction S-matrix (channel 0 = lead, 1 = the arm clockwise of it, 2 = the arm
        counter-clockwise of it); default :func:`griffiths_junction`. May broadcast.
    arm_phases : sequence of array_like, optional
        Extra dynamic phase of each arm (e.g. an arm gate), one per arm in counter-clockwise
        order starting at the smallest angle in [0, 2 pi).

    Returns
    -------
    ndarray (..., N, N)
        ``T[i, j]`` from lead j into lead i; the diagonal holds the reflection ``|S_jj|^2``.
    """
    ang = np.mod(np.asarray(lead_angles, dtype=float), _TWO_PI)
    nj = ang.size
    if ang.ndim != 1 or not 2 <= nj <= 4:
        raise ParameterError("lead_angles", lead_angles, "must give 2 to 4 angles")
    order = np.argsort(ang)
    a_sorted = ang[order]
    spans = np.diff(np.r_[a_sorted, a_sorted[0] + _TWO_PI])
    if np.any(spans < 1e-12):
        raise ParameterError("lead_angles", lead_angles, "must be distinct")
    s = griffiths_junction() if junction is None else np.asarray(junction, dtype=complex)
    kr = np.asarray(k_radius, dtype=float)
    phi = np.asarray(ab_phase, dtype=float)
    extra = [0.0] * nj if arm_phases is None else list(arm_phases)
    if len(extra) != nj:
        raise ParameterError("arm_phases", len(extra), f"must give one phase per arm ({nj})")
    shape = np.broadcast_shapes(kr.shape, phi.shape, s.shape[:-2], *(np.shape(e) for e in extra))
    s = np.broadcast_to(s, shape + (3, 3))
    size = 2 * nj
    m = np.broadcast_to(np.eye(size, dtype=complex), shape + (size, size)).copy()
    drive = np.zeros(shape + (size, nj), dtype=complex)
    for a in range(nj):
        b = (a + 1) % nj
        dyn = kr * spans[a] + np.asarray(extra[a], dtype=float)
        ab = phi * spans[a] / _TWO_PI  # AB phase shared in proportion to the arm's angle
        ph_ccw = np.broadcast_to(np.exp(1j * (dyn - ab)), shape)
        ph_cw = np.broadcast_to(np.exp(1j * (dyn + ab)), shape)
        # leaving junction a counter-clockwise (its channel 2), arriving at b (its channel 1)
        m[..., 2 * b, 2 * a] -= ph_ccw * s[..., 2, 1]
        m[..., 2 * b, 2 * a + 1] -= ph_ccw * s[..., 2, 2]
        drive[..., 2 * b, a] += ph_ccw * s[..., 2, 0]
        # leaving junction b clockwise (its channel 1), arriving at a (its channel 2)
        m[..., 2 * a + 1, 2 * b] -= ph_cw * s[..., 1, 1]
        m[..., 2 * a + 1, 2 * b + 1] -= ph_cw * s[..., 1, 2]
        drive[..., 2 * a + 1, b] += ph_cw * s[..., 1, 0]
    x = np.linalg.solve(m, drive)
    out = s[..., 0, 1, None, None] * x[..., 0::2, :] + s[..., 0, 2, None, None] * x[..., 1::2, :]
    out = out + s[..., 0, 0, None, None] * np.eye(nj)
    t_sorted = np.abs(out) ** 2
    tm = np.empty_like(t_sorted)
    tm[..., order[:, None], order[None, :]] = t_sorted
    return tm


def network_conductance_matrix(t_matrix: np.ndarray, spin_degeneracy: int = 2) -> np.ndarray:
    """Büttiker conductance matrix (e^2/h) from transmissions: ``G_ij = -g T_ij`` (i != j),
    ``G_jj = g sum_{i != j} T_ij``; rows and columns sum to zero for a unitary network."""
    t = np.asarray(t_matrix, dtype=float)
    n = t.shape[-1]
    idx = np.arange(n)
    g = -float(spin_degeneracy) * t
    g[..., idx, idx] = 0.0
    g[..., idx, idx] = -g.sum(axis=-2)
    return g
