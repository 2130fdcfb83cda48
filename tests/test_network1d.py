"""Exact single-channel ring (ringkit.analysis.network1d) against closed forms and an
independent network solver written here.

Check values: docs/physics.md §6, derived there symbolically and
verified numerically [C]; the junction matrix is that of Büttiker, Imry, Azbel,
Phys. Rev. A 30, 1982 (1984) (citation from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis.network1d import (
    NetworkRing,
    classical_transmission,
    coherent_fraction,
    junction_smatrix,
    ring_scattering,
    ring_transmission,
    thermal_weights,
)
from ringkit.units import EV, HBAR, K_B, M_E

RNG = np.random.default_rng(20240611)
H_OVER_E = constants.h / constants.e  # CODATA via scipy.constants (exact in SI 2019)


def closed_form_T(th1, th2, phi, eps):
    """Gefen-Imry-Azbel type closed form, docs/physics.md §6.2 [C]."""
    a = (np.sqrt(1 - 2 * eps) - 1) / 2
    b = (np.sqrt(1 - 2 * eps) + 1) / 2
    num = eps**2 * (
        np.sin(th1) ** 2 + np.sin(th2) ** 2 + 2 * np.sin(th1) * np.sin(th2) * np.cos(phi)
    )
    den = ((1 - eps) * np.cos(th1 + th2) - a**2 * np.cos(th1 - th2) - b**2 * np.cos(phi)) ** 2
    den = den + eps**2 * np.sin(th1 + th2) ** 2
    return num / den


def closed_form_t(th1, th2, phi, eps):
    """Complex amplitude, docs/physics.md §6.2 [C] (AB factor on arm 1, junction 1 -> 2)."""
    a = (np.sqrt(1 - 2 * eps) - 1) / 2
    b = (np.sqrt(1 - 2 * eps) + 1) / 2
    s = th1 + th2
    den = (1 - 2 * eps) * np.exp(1j * s) + np.exp(-1j * s)
    den = den - 2 * a**2 * np.cos(th1 - th2) - 2 * b**2 * np.cos(phi)
    return -2j * eps * (np.sin(th1) + np.exp(1j * phi) * np.sin(th2)) / den


def reference_graph_T(th1, th2, phi, eps, refl):
    """Independent solver: 8 directed half-arm bonds, one node per junction and per mid-arm
    scatterer, amplitudes at bond starts as unknowns (written for this test only)."""
    sj = junction_smatrix(eps)
    # bonds: (from_node, from_port, to_node, to_port, phase)
    # nodes: 'J1','J2' ports 0 lead, 1 arm1, 2 arm2; 'M1','M2' ports 0 (J1 side), 1 (J2 side)
    bonds = []
    for arm, th in ((1, th1), (2, th2)):
        ab = phi / 2 if arm == 1 else 0.0
        m = f"M{arm}"
        bonds += [
            ("J1", arm, m, 0, th / 2 + ab),
            (m, 1, "J2", arm, th / 2 + ab),
            ("J2", arm, m, 1, th / 2 - ab),
            (m, 0, "J1", arm, th / 2 - ab),
        ]
    smat = {"J1": sj, "J2": sj}
    for arm, r in ((1, refl[0]), (2, refl[1])):
        rho, tau = 1j * math.sqrt(r), math.sqrt(1 - r)
        smat[f"M{arm}"] = np.array([[rho, tau], [tau, rho]])
    n = len(bonds)
    mat = np.eye(n, dtype=complex)
    rhs = np.zeros(n, dtype=complex)
    for i, (fn, fp, _, _, _) in enumerate(bonds):
        for j, (_, _, tn, tp, ph) in enumerate(bonds):
            if tn == fn:
                mat[i, j] -= smat[fn][fp, tp] * np.exp(1j * ph)
        if fn == "J1":
            rhs[i] = smat["J1"][fp, 0]  # unit wave from the left lead
    amp = np.linalg.solve(mat, rhs)
    t = sum(
        sj[0, tp] * amp[j] * np.exp(1j * ph)
        for j, (_, _, tn, tp, ph) in enumerate(bonds)
        if tn == "J2"
    )
    return abs(t) ** 2


def reference_markov_T(eps, refl):
    """Classical random walk on directed half-arm bonds with absorbing leads (this test)."""
    a = (math.sqrt(1 - 2 * eps) - 1) / 2
    b = (math.sqrt(1 - 2 * eps) + 1) / 2
    pj = np.array([[(a + b) ** 2, eps, eps], [eps, a * a, b * b], [eps, b * b, a * a]])
    # states: bonds entering a node: (node, port). Transient states: arrivals at J1/J2 from arms
    # and at M1/M2 from either side.
    states = [
        ("J1", 1),
        ("J1", 2),
        ("J2", 1),
        ("J2", 2),
        ("M1", 0),
        ("M1", 1),
        ("M2", 0),
        ("M2", 1),
    ]
    idx = {s: i for i, s in enumerate(states)}
    q = np.zeros((8, 8))
    absorb2 = np.zeros(8)
    for (node, port), i in idx.items():
        if node in ("J1", "J2"):
            for out in (1, 2):  # into arm `out`, next arrival at the scatterer of that arm
                q[i, idx[(f"M{out}", 0 if node == "J1" else 1)]] += pj[out, port]
            if node == "J2":
                absorb2[i] = pj[0, port]
        else:
            arm = int(node[1])
            r = refl[arm - 1]
            back = "J1" if port == 0 else "J2"
            fwd = "J2" if port == 0 else "J1"
            q[i, idx[(back, arm)]] += r
            q[i, idx[(fwd, arm)]] += 1 - r
    start = np.zeros(8)
    start[idx[("M1", 0)]] = eps
    start[idx[("M2", 0)]] = eps
    return float(start @ np.linalg.solve(np.eye(8) - q, absorb2))


# --------------------------------------------------------------------------------- junction


@pytest.mark.parametrize("eps", [0.0, 0.1, 0.25, 4 / 9, 0.5])
def test_junction_unitary_real_symmetric(eps):
    s = junction_smatrix(eps)
    assert np.allclose(s @ s.conj().T, np.eye(3), atol=1e-14)  # docs/physics.md §14: 1e-14
    assert np.array_equal(s, s.T) and np.isrealobj(s)
    a, b = s[1, 1], s[1, 2]
    # unitarity identities, docs/physics.md §6.1 [C]
    assert (a + b) ** 2 + 2 * eps == pytest.approx(1, abs=1e-14)
    assert a * a + b * b + eps == pytest.approx(1, abs=1e-14)
    assert 2 * a * b + eps == pytest.approx(0, abs=1e-14)
    assert b - a == pytest.approx(1, abs=1e-14)


def test_griffith_junction():
    # eps = 4/9: -1/3 on the diagonal, 2/3 off it (unitarity of the junction S-matrix;
    # docs/physics.md §6.1, computed)
    s = junction_smatrix(4 / 9)
    assert np.allclose(np.diag(s), -1 / 3, atol=1e-14)
    assert np.allclose(s[~np.eye(3, dtype=bool)], 2 / 3, atol=1e-14)


def test_bad_coupling_names_parameter():
    with pytest.raises(ParameterError, match="coupling"):
        ring_transmission(1.0, 1.0, 0.0, 0.6)
    with pytest.raises(ParameterError, match="arm_reflection"):
        ring_transmission(1.0, 1.0, 0.0, 0.3, arm_reflection=(1.5, 0.0))


# --------------------------------------------------------------------------------- ideal ring


def test_matches_closed_form_on_random_parameters():
    n = 4000
    th1, th2, phi = RNG.uniform(-20, 20, (3, n))
    eps = RNG.uniform(1e-3, 0.5, n)
    got = ring_transmission(th1, th2, phi, eps)
    assert got.shape == (n,)
    np.testing.assert_allclose(got, closed_form_T(th1, th2, phi, eps), rtol=0, atol=1e-10)
    t, _ = ring_scattering(th1[:200], th2[:200], phi[:200], eps[:200])
    np.testing.assert_allclose(
        t, closed_form_t(th1[:200], th2[:200], phi[:200], eps[:200]), atol=1e-10
    )


def test_broadcasting_grid():
    th = np.linspace(0.1, 3, 7)[:, None]
    phi = np.linspace(0, 2 * np.pi, 5)[None, :]
    got = ring_transmission(th, 1.3 * th, phi, 0.4)
    assert got.shape == (7, 5)
    np.testing.assert_allclose(got, closed_form_T(th, 1.3 * th, phi, 0.4), atol=1e-12)


@pytest.mark.parametrize(
    ("eps", "phi", "expected"),
    [
        (4 / 9, 0.0, 0.64),  # T = 16/25, docs/physics.md §6.3 [C]
        (4 / 9, np.pi / 2, 8 / 9),  # §6.3 [C]
        (0.5, np.pi / 2, 8 / 9),  # §6.3 [C]
        (0.25, 0.0, 1 / 9),  # §6.3 [C]
        (0.3, 0.0, 0.3**2 / 0.7**2),  # eps^2/(1-eps)^2 at theta = pi/2, §6.3 [C]
    ],
)
def test_exact_values_quarter_wave(eps, phi, expected):
    assert ring_transmission(np.pi / 2, np.pi / 2, phi, eps) == pytest.approx(expected, abs=1e-12)


def test_half_flux_quantum_blocks_symmetric_ring():
    # theta1 = theta2, phi = pi: T = 0 exactly for any eps, k (closed form of docs/physics.md
    # §6.2-6.3, computed)
    th = RNG.uniform(0, 30, 500)
    eps = RNG.uniform(0.01, 0.5, 500)
    assert np.max(ring_transmission(th, th, np.pi, eps)) < 1e-12


def test_perfect_coupling_symmetric_zero_flux_transmits():
    # eps = 1/2, theta1 = theta2, phi = 0: T = 1 (closed form of docs/physics.md §6.2-6.3, computed)
    th = RNG.uniform(0.05, 30, 500)
    np.testing.assert_allclose(ring_transmission(th, th, 0.0, 0.5), 1.0, atol=1e-12)


def test_unitarity_onsager_periodicity_with_arm_scatterers():
    n = 2000
    th1, th2, phi = RNG.uniform(-15, 15, (3, n))
    eps = RNG.uniform(0.01, 0.5, n)
    refl = RNG.uniform(0, 1, (2, n))
    t, r = ring_scattering(th1, th2, phi, eps, arm_reflection=(refl[0], refl[1]))
    np.testing.assert_allclose(np.abs(t) ** 2 + np.abs(r) ** 2, 1.0, atol=1e-12)  # T + R = 1
    tm, _ = ring_scattering(th1, th2, -phi, eps, arm_reflection=(refl[0], refl[1]))
    np.testing.assert_allclose(np.abs(tm) ** 2, np.abs(t) ** 2, atol=1e-12)  # T(phi) = T(-phi)
    tp, _ = ring_scattering(th1, th2, phi + 2 * np.pi, eps, arm_reflection=(refl[0], refl[1]))
    np.testing.assert_allclose(np.abs(tp) ** 2, np.abs(t) ** 2, atol=1e-12)


def test_arm_scatterers_match_independent_graph_solver():
    for _ in range(40):
        th1, th2, phi = RNG.uniform(-10, 10, 3)
        eps = RNG.uniform(0.02, 0.5)
        refl = tuple(RNG.uniform(0, 1, 2))
        got = ring_transmission(th1, th2, phi, eps, arm_reflection=refl)
        assert got == pytest.approx(reference_graph_T(th1, th2, phi, eps, refl), abs=1e-11)


def test_pinched_arm_kills_ab_oscillation():
    phi = np.linspace(0, 2 * np.pi, 50)
    got = ring_transmission(1.1, 2.3, phi, 0.4, arm_reflection=(1.0, 0.0))
    assert np.ptp(got) < 1e-12


# --------------------------------------------------------------------------------- classical


@pytest.mark.parametrize("eps", [0.05, 0.2, 4 / 9, 0.5])
def test_classical_ideal_arms_geometric_series(eps):
    # Derived for this test: inject 2 eps into the ring; each junction visit exits with
    # probability eps and stays with a^2 + b^2 = 1 - eps; exits alternate between junctions,
    # so P(right) = eps / (1 - (1 - eps)^2) = 1/(2 - eps) and T = 2 eps/(2 - eps).
    assert classical_transmission(eps) == pytest.approx(2 * eps / (2 - eps), rel=1e-12)


def test_classical_with_scatterers_matches_markov_chain():
    for _ in range(20):
        eps = RNG.uniform(0.02, 0.5)
        refl = tuple(RNG.uniform(0, 1, 2))
        got = classical_transmission(eps, arm_reflection=refl)
        assert got == pytest.approx(reference_markov_T(eps, refl), rel=1e-10)


def test_energy_average_leaves_h2e_with_aas_sign():
    # docs/physics.md §6.5 [computed, qualitative; AAS sign: Al'tshuler, Aronov, Spivak 1981]: L2/L1
    # = 1.3, eps = 1/2, average over a k window of
    # 320/L1: the h/2e cosine coefficient ~ -0.127 survives, h/e decays (|h/2e| > 5 |h/e|).
    k = np.linspace(50.0, 370.0, 6401)[:, None]  # units of 1/L1
    phi = np.linspace(0, 2 * np.pi, 64, endpoint=False)[None, :]
    avg = ring_transmission(k, 1.3 * k, phi, 0.5).mean(axis=0)
    coeff = 2 * np.fft.rfft(avg).real / avg.size
    c1, c2 = coeff[1], coeff[2]
    assert c2 < 0
    assert abs(c2) > 5 * abs(c1)
    assert c2 == pytest.approx(-0.127, abs=0.02)


# --------------------------------------------------------------------------------- physical ring


GAAS = {"effective_mass": 0.067, "fermi_energy": 10.72e-3 * EV}  # docs/physics.md §8.3 GaAs E_F


def test_thermal_weights_kernel_identity():
    # int cos(a E) (-df/dE) dE = x/sinh(x), x = pi a kT; a kT = 1 -> 0.272029
    # (closed form, docs/physics.md §5.4, computed)
    kt = K_B * 1.0
    e = np.linspace(-40 * kt, 40 * kt, 4001)
    w = thermal_weights(e, 0.0, 1.0)
    assert w.sum() == pytest.approx(1.0, abs=1e-14)
    assert w @ np.cos(e / kt) == pytest.approx(0.272029, abs=2e-6)


def test_zero_temperature_conductance_is_spin_times_T():
    ring = NetworkRing(0.5e-6, **GAAS, arm_fraction=0.4, coupling=0.3)
    b = np.linspace(0, 0.02, 41)
    kf = math.sqrt(2 * 0.067 * M_E * GAAS["fermi_energy"]) / HBAR
    l1, l2 = ring.arm_lengths
    assert l1 == pytest.approx(0.4 * 2 * math.pi * 0.5e-6) and l1 + l2 == pytest.approx(
        ring.circumference
    )
    phi = 2 * math.pi * b * math.pi * 0.5e-6**2 / H_OVER_E
    expected = 2 * closed_form_T(kf * l1, kf * l2, phi, 0.3)
    np.testing.assert_allclose(ring.conductance(b), expected, atol=1e-9)
    # AB period h/(e pi r^2) in field
    period = H_OVER_E / (math.pi * 0.5e-6**2)
    np.testing.assert_allclose(ring.conductance(b + period), ring.conductance(b), atol=1e-9)


def test_finite_temperature_matches_dense_quadrature():
    ring = NetworkRing(0.4e-6, **GAAS, arm_fraction=0.45, coupling=0.45, temperature=0.5)
    b = np.linspace(-0.01, 0.01, 21)
    kt = K_B * 0.5
    e = np.linspace(GAAS["fermi_energy"] - 14 * kt, GAAS["fermi_energy"] + 14 * kt, 6001)
    x = (e - GAAS["fermi_energy"]) / kt
    w = np.exp(x) / (1 + np.exp(x)) ** 2  # -df/dE up to the factor 1/kT
    w /= w.sum()
    k = np.sqrt(2 * 0.067 * M_E * e) / HBAR
    l1, l2 = ring.arm_lengths
    phi = 2 * math.pi * b * ring.area / H_OVER_E
    ref = 2 * closed_form_T(k[:, None] * l1, k[:, None] * l2, phi[None, :], 0.45).T @ w
    np.testing.assert_allclose(ring.conductance(b), ref, atol=2e-3)
    assert np.allclose(ring.conductance(b), ring.conductance(-b), atol=1e-12)  # G(B) = G(-B)


def test_dephasing_limit_is_classical():
    ring = NetworkRing(0.5e-6, **GAAS, coupling=0.4, l_phi=1e-9)
    g = ring.conductance(np.linspace(0, 0.02, 30))
    np.testing.assert_allclose(g, 2 * 2 * 0.4 / (2 - 0.4), atol=1e-9)
    assert coherent_fraction(2.0, 1.0) == pytest.approx(math.exp(-2.0))
    assert coherent_fraction(2.0, None) == 1.0


def test_gate_phase_pi_blocks_zero_field():
    # theta1 = theta2 - pi (symmetric geometry): numerator of §6.2 is 2 sin^2(1 - cos phi) -> 0
    r = 0.5e-6
    ring0 = NetworkRing(r, **GAAS)
    l1 = ring0.arm_lengths[0]
    kf = ring0.fermi_wavevector
    kg = kf - math.pi / l1
    v_gate = GAAS["fermi_energy"] - (HBAR * kg) ** 2 / (2 * 0.067 * M_E)
    ring = NetworkRing(r, **GAAS, gate_potential=v_gate)
    assert ring.conductance(np.array([0.0]))[0] < 1e-10
    assert ring0.conductance(np.array([0.0]))[0] == pytest.approx(2.0, abs=1e-9)  # eps = 1/2


def test_pinched_gate_and_lead_angles():
    ring = NetworkRing(0.5e-6, **GAAS, gate_potential=2 * GAAS["fermi_energy"], coupling=0.3)
    assert np.ptp(ring.conductance(np.linspace(0, 0.03, 40))) < 1e-12
    ring2 = NetworkRing.from_lead_angles(0.5e-6, (math.pi, 0.0), **GAAS)
    assert ring2.arm_fraction == pytest.approx(0.5)
    ring3 = NetworkRing.from_lead_angles(0.5e-6, (0.75 * math.pi, -0.25 * math.pi), **GAAS)
    assert ring3.arm_fraction == pytest.approx(0.5)
    ring4 = NetworkRing.from_lead_angles(0.5e-6, (math.pi / 2, 0.0), **GAAS)
    assert ring4.arm_fraction == pytest.approx(0.25)


@pytest.mark.parametrize(
    ("field", "value"),
    [("radius", -1e-6), ("coupling", 0.7), ("arm_fraction", 1.0), ("temperature", -1.0)],
)
def test_ring_validation(field, value):
    kwargs = {"radius": 0.5e-6, **GAAS, field: value}
    with pytest.raises(ParameterError, match=field):
        NetworkRing(**kwargs)


def test_both_arms_pinched_including_singular_pivot():
    # eps = 1/2, theta = pi/2 makes the junction-1 pivot block singular (eigenvalue
    # 1 + i e^{i theta} = 0), so the dense fallback is exercised; physically no wave gets
    # through two closed arms: T = 0, |r| = 1.
    th = np.array([np.pi / 2, 0.3, 2.0])
    t, r = ring_scattering(th, np.pi / 2, 0.7, 0.5, arm_reflection=(1.0, 1.0))
    np.testing.assert_allclose(np.abs(t), 0.0, atol=1e-12)
    np.testing.assert_allclose(np.abs(r), 1.0, atol=1e-12)
