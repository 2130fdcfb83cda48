"""ringkit's conductance against an independent dense Fisher-Lee calculation (numpy/scipy only).

Reference (written here, no kwant): T = Tr(Gamma_L G Gamma_R G^dagger), G = (E - H - Sigma_L -
Sigma_R)^-1, Gamma = i(Sigma - Sigma^dagger) (D. S. Fisher, P. A. Lee, Phys. Rev. B 23, 6851
(1981) [from memory]; S. Datta, Electronic Transport in Mesoscopic Systems, CUP 1995, ch. 3
[from memory]). Lead self-energies are analytic:

* semi-infinite chain (on-site 2t, hopping -t) attached by -t: Sigma = -t e^{ik},
  E = 2t(1 - cos k), k in (0, pi) (retarded branch);
* square-lattice strip of M rows (on-site 4t, hopping -t, hard walls) attached column-wise:
  transverse modes chi_n(m) = sqrt(2/(M+1)) sin(n pi m/(M+1)), eps_n = 2t(1 - cos(n pi/(M+1))),
  Sigma = sum_n chi_n (-t lambda_n) chi_n^T with lambda_n = e^{ik_n}, cos k_n = 1 - (E - eps_n)/2t,
  and the decaying root |lambda_n| < 1 for closed (evanescent) modes.

The Hamiltonians are built here from the site positions and the documented conventions only:
hopping -t, Peierls factor exp(i theta_ij) with theta_ij = 2 pi B a^2 ybar (x_i - x_j)/(h/e)
(electrons, Landau gauge A = (-By, 0), docs/physics.md §4.2), h/e from scipy.constants;
flux tube: a phase 2 pi Phi/(h/e) on the bonds crossing a cut drawn by this test. Agreement
required: 1e-9 (absolute, T is O(1)).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit.device import ArmGate, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import conductance, transmission

PHI0 = constants.h / constants.e  # CODATA via scipy (exact in the 2019 SI)
TOL = 1e-9


def _hopping(mass_me: float, a: float) -> float:
    return constants.hbar**2 / (2 * mass_me * constants.m_e * a**2)


# ------------------------------------------------------------------------------- 1D ring
def _chain_device(n_sites: int, angles=(math.pi, 0.0), mode="flux_tube", gate=None):
    radius = 150e-9
    a = 2 * math.pi * radius / n_sites
    t = _hopping(0.067, a)
    mat = Material(0.067, fermi_energy=0.2 * t)  # kF a = 0.45 < 0.5
    geo = RingGeometry.chain(radius, n_sites=n_sites, lead_angles=angles)
    return RingDevice(mat, geo, field_mode=mode, gate=gate), t


def _chain_reference(n, n_right, energy_t, loop_phase, gate_sites=(), gate_t=0.0):
    """Dense Fisher-Lee T of an n-site ring with 1D leads on sites 0 and n_right.

    ``loop_phase`` is the total Peierls phase around the ring (placed on bond n-1 -> 0).
    """
    h = np.zeros((n, n), complex)
    np.fill_diagonal(h, 2.0)
    for s in gate_sites:
        h[s, s] += gate_t
    for j in range(n):
        i = (j + 1) % n
        phase = loop_phase if j == n - 1 else 0.0
        h[i, j] = -np.exp(1j * phase)
        h[j, i] = np.conj(h[i, j])
    k = np.arccos(1.0 - energy_t / 2.0)
    sigma = -np.exp(1j * k)
    s_l = np.zeros((n, n), complex)
    s_r = np.zeros((n, n), complex)
    s_l[0, 0] = sigma
    s_r[n_right, n_right] = sigma
    g = np.linalg.inv(energy_t * np.eye(n) - h - s_l - s_r)
    gam_l = 1j * (s_l - s_l.conj().T)
    gam_r = 1j * (s_r - s_r.conj().T)
    return float(np.trace(gam_l @ g @ gam_r @ g.conj().T).real)


ENERGIES_T = [0.13, 0.61, 1.07, 1.9, 2.55, 3.3, 3.86]
FLUX_FRACTIONS = [0.0, 0.13, 0.5, 0.77, 1.3, -0.42]


@pytest.mark.parametrize("angles", [(math.pi, 0.0), (math.pi + 0.35, 0.6)], ids=["sym", "asym"])
def test_chain_ring_flux_tube_matches_fisher_lee(angles):
    n = 30
    dev, t = _chain_device(n, angles)
    ring = build_ring(dev)
    # right lead on the site nearest to its angle, sites counted counter-clockwise from the left
    n_right = round(((angles[1] - angles[0]) % (2 * math.pi)) / (2 * math.pi / n)) % n
    worst = 0.0
    for e in ENERGIES_T:
        for frac in FLUX_FRACTIONS:
            ref = _chain_reference(n, n_right, e, 2 * math.pi * frac)
            got = transmission(ring, flux=frac * PHI0, energy=e * t)
            worst = max(worst, abs(got - ref))
    assert worst < TOL


def test_chain_ring_uniform_field_matches_fisher_lee():
    """Uniform B: the only loop is the N-gon of sites, so the AB phase is 2 pi B A_N/(h/e)."""
    n = 26
    dev, t = _chain_device(n, mode="uniform")
    ring = build_ring(dev)
    radius = dev.geometry.r_in
    area = 0.5 * n * radius**2 * math.sin(2 * math.pi / n)  # regular N-gon inscribed in r
    for e in (0.4, 1.3, 2.9):
        for b in (0.0, 0.011, 0.037, -0.05):
            ref = _chain_reference(n, n // 2, e, 2 * math.pi * b * area / PHI0)
            got = transmission(ring, B=b, energy=e * t)
            assert abs(got - ref) < TOL


def test_chain_ring_with_arm_gate_matches_fisher_lee():
    n = 28
    v_t = 0.37
    dev, t = _chain_device(n, mode="flux_tube", gate=ArmGate("upper", 0.0))
    ring = build_ring(dev)
    upper = list(range(n // 2 + 1, n))  # strictly between the junctions, counter-clockwise
    for e in (0.5, 1.7):
        for frac in (0.0, 0.3):
            ref = _chain_reference(n, n // 2, e, 2 * math.pi * frac, upper, v_t)
            got = transmission(ring, flux=frac * PHI0, energy=e * t, gate=v_t * t)
            assert abs(got - ref) < TOL


def test_symmetric_chain_ring_blocks_at_half_flux_quantum():
    """Symmetric arms, Phi = h/2e: the two arm paths interfere destructively, T = 0 exactly
    (closed form, docs/physics.md §6.2-6.3, any coupling and any k)."""
    dev, t = _chain_device(32)
    ring = build_ring(dev)
    for e in (0.3, 1.1, 2.2, 3.7):
        assert _chain_reference(32, 16, e, math.pi) < 1e-20  # the reference agrees
        assert transmission(ring, flux=0.5 * PHI0, energy=e * t) < 1e-12
        assert conductance(ring, flux=0.5 * PHI0, energy=e * t) < 1e-12
        assert transmission(ring, flux=0.0, energy=e * t) > 1e-3  # not blocked without flux


# ------------------------------------------------------------------------------- 2D ring
def _strip_self_energy(m_rows: int, energy_t: float) -> np.ndarray:
    """Self-energy (units of t) of a semi-infinite M-row strip on its M surface sites."""
    m = np.arange(1, m_rows + 1)
    sigma = np.zeros((m_rows, m_rows), complex)
    for n in range(1, m_rows + 1):
        chi = np.sqrt(2.0 / (m_rows + 1)) * np.sin(n * np.pi * m / (m_rows + 1))
        eps = 2.0 * (1.0 - np.cos(n * np.pi / (m_rows + 1)))
        c = 1.0 - (energy_t - eps) / 2.0
        if abs(c) <= 1.0:
            lam = c + 1j * math.sqrt(1.0 - c * c)  # propagating, retarded (sin k > 0)
        else:
            lam = c - math.copysign(math.sqrt(c * c - 1.0), c)  # evanescent, |lam| < 1
        sigma += -lam * np.outer(chi, chi)
    return sigma


def _cut_phase_sign(ri, rj, cut_angle):
    """+1 if the straight hop j -> i crosses the ray (origin, angle) counter-clockwise, -1 if
    clockwise, 0 if not; computed by segment-ray intersection (independent of ringkit)."""
    d = np.array([math.cos(cut_angle), math.sin(cut_angle)])
    seg = ri - rj
    den = d[0] * (-seg[1]) - d[1] * (-seg[0])
    if abs(den) < 1e-14:
        return 0
    # solve rj + u*seg = s*d  for s >= 0, 0 <= u < 1 (half-open so a site on the ray counts once)
    s = (rj[0] * (-seg[1]) - rj[1] * (-seg[0])) / den
    u = (d[0] * rj[1] - d[1] * rj[0]) / den
    if s < 0 or not (0 < u <= 1):
        return 0
    return 1 if (rj[0] * ri[1] - rj[1] * ri[0]) > 0 else -1


def _ring2d_hamiltonian(ring, b_field=0.0, flux=0.0, cut_angle=None, gate_t=0.0):
    """Dense H (units of t) and the two lead-interface columns, from positions only."""
    h, xy = _ring2d_matrix(ring, b_field, flux, cut_angle, gate_t)
    cols = []
    for edge in (xy[:, 0].min(), xy[:, 0].max()):
        col = np.nonzero(xy[:, 0] == edge)[0]
        col = col[np.argsort(xy[col, 1])]
        assert np.all(np.diff(xy[col, 1]) == 1)  # one contiguous interface column
        cols.append(col)
    return h, cols


def _ring2d_matrix(ring, b_field=0.0, flux=0.0, cut_angle=None, gate_t=0.0):
    """Dense H (units of t) and the integer site coordinates, from positions only (also used
    by tests/test_multiterminal.py)."""
    a = ring.lattice_spacing
    xy = np.rint(ring.positions / a).astype(int)
    n = len(xy)
    index = {tuple(p): k for k, p in enumerate(xy)}
    h = np.zeros((n, n), complex)
    np.fill_diagonal(h, 4.0 + ring.onsite_potential / ring.hopping)
    h[np.diag_indices(n)] += np.where(ring.arm_of_site == "upper", gate_t, 0.0)
    for (x, y), j in index.items():
        for dx, dy in ((1, 0), (0, 1)):
            i = index.get((x + dx, y + dy))
            if i is None:
                continue
            ri, rj = xy[i].astype(float), xy[j].astype(float)
            theta = 2 * math.pi * b_field * a**2 * 0.5 * (ri[1] + rj[1]) * (ri[0] - rj[0]) / PHI0
            if cut_angle is not None:
                theta += -2 * math.pi * flux / PHI0 * _cut_phase_sign(ri, rj, cut_angle)
            h[i, j] = -np.exp(1j * theta)
            h[j, i] = np.conj(h[i, j])
    return h, xy


def _fisher_lee(h, cols, energy_t):
    """T = Tr(Gamma_L G Gamma_R G^dagger); Gamma_L/R live on the interface columns only."""
    n = len(h)
    cl, cr = cols
    sig = [_strip_self_energy(len(c), energy_t) for c in cols]
    a_mat = energy_t * np.eye(n, dtype=complex) - h
    a_mat[np.ix_(cl, cl)] -= sig[0]
    a_mat[np.ix_(cr, cr)] -= sig[1]
    rhs = np.zeros((n, len(cr)), complex)
    rhs[cr, np.arange(len(cr))] = 1.0
    g_lr = np.linalg.solve(a_mat, rhs)[cl]  # G[cl, cr]
    gam_l, gam_r = (1j * (s - s.conj().T) for s in sig)
    return float(np.trace(gam_l @ g_lr @ gam_r @ g_lr.conj().T).real)


def _ring2d_device(mode: str, cut_angle: float = math.pi / 2):
    a = 10e-9
    t = _hopping(0.067, a)
    mat = Material(0.067, fermi_energy=0.2 * t, disorder_strength=0.8 * t)
    geo = RingGeometry.circular(
        45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25), lead_width=40e-9
    )
    dev = RingDevice(
        mat,
        geo,
        lattice_spacing=a,
        field_mode=mode,
        gate=ArmGate("upper", 0.0),
        cut_angle=cut_angle,
    )
    return dev, t


def test_small_2d_ring_uniform_field_matches_dense_fisher_lee():
    dev, t = _ring2d_device("uniform")
    ring = build_ring(dev, seed=11)
    assert ring.lead_sites == 4 and 150 < ring.n_sites < 400
    worst = 0.0
    for b in (0.0, 0.3, -0.8, 2.1):
        for v in (0.0, 0.25):
            h, cols = _ring2d_hamiltonian(ring, b_field=b, gate_t=v)
            for e in (0.6, 1.0, 1.6, 2.4):
                ref = _fisher_lee(h, cols, e)
                got = transmission(ring, B=b, energy=e * t, gate=v * t)
                worst = max(worst, abs(got - ref))
    assert worst < TOL


def test_small_2d_ring_flux_tube_matches_dense_fisher_lee_with_another_cut():
    """ringkit's cut at -pi/2, the reference's cut at +pi/2: gauge-equivalent, same T."""
    dev, t = _ring2d_device("flux_tube", cut_angle=-math.pi / 2)
    ring = build_ring(dev, seed=5)
    worst = 0.0
    for frac in (0.0, 0.21, 0.5, 0.9):
        h, cols = _ring2d_hamiltonian(ring, flux=frac * PHI0, cut_angle=math.pi / 2)
        for e in (0.7, 1.5):
            ref = _fisher_lee(h, cols, e)
            got = transmission(ring, flux=frac * PHI0, energy=e * t)
            worst = max(worst, abs(got - ref))
    assert worst < TOL
