"""Four-terminal analysis (ringkit.analysis.fourterminal; docs/multiterminal.md "Analysis").

Checks against closed forms: the projection of a cosine A cos(2 pi f B + phi) returns A and
phi; even/odd parts and the Onsager-Büttiker combination of traces built from known even and
odd functions; h/e in ohm from CODATA (scipy.constants). All traces here are invented test
signals (labelled as such), not measurements.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis import fourterminal as ft
from ringkit.analysis import network_multi as nm
from ringkit.analysis.network1d import ring_transmission
from ringkit.contacts import resistance_from_conductance

PERIOD = 4.0e-3  # T, invented ring (h/e area ~ 1 um^2)


def _invented_trace(field, phase_he=0.7, phase_h2e=1.9):
    """Invented four-terminal R(B) in ohm: background, h/e and h/2e cosines."""
    return (
        120.0
        + 30.0 * field
        + 2.0 * np.cos(2 * np.pi * field / PERIOD + phase_he)
        + 0.5 * np.cos(4 * np.pi * field / PERIOD + phase_h2e)
    )


def test_ohm_per_h_e2_is_codata():
    assert math.isclose(ft.OHM_PER_H_E2, constants.h / constants.e**2, rel_tol=1e-15)
    assert math.isclose(ft.OHM_PER_H_E2, 25812.80745, rel_tol=1e-9)  # CODATA R_K (exact SI)


@pytest.mark.parametrize("offset", [0.0, 0.37e-3])
def test_projection_recovers_amplitude_and_phase_of_a_cosine(offset):
    """Closed form: A cos(2 pi f B + phi) -> (A, phi), on grids centred or not on B = 0."""
    b = np.linspace(-0.05, 0.05, 2001) + offset  # 25 periods
    for phi in (-2.5, 0.0, 0.7, math.pi):
        s = 3.0 + 1.5 * np.cos(2 * np.pi * b / PERIOD + phi)
        amp, ph = ft.oscillation_phase(b, s, 1 / PERIOD)
        assert abs(amp - 1.5) < 2e-3 * 1.5
        assert abs(np.angle(np.exp(1j * (ph - phi)))) < 2e-3


def test_even_odd_and_reciprocal_combination_are_exact_on_a_symmetric_grid():
    b = np.linspace(-0.02, 0.02, 401)
    even = 5.0 + np.cos(2 * np.pi * b / PERIOD) + b**2
    odd = 0.3 * np.sin(2 * np.pi * b / PERIOD) + 2 * b
    parts = ft.even_odd(b, even + odd)
    assert np.array_equal(parts.field, b)
    assert np.abs(parts.symmetric - even).max() < 1e-12
    assert np.abs(parts.remainder - odd).max() < 1e-12
    # reciprocity R_mn,kl(B) = R_kl,mn(-B): the combination returns the trace, residual 0
    noise = 1e-3 * np.sin(17 * b / PERIOD)  # invented, odd under nothing in particular
    sym = ft.reciprocal_symmetrize(b, even + odd + noise, b, (even + odd)[::-1] - noise[::-1])
    assert np.abs(sym.symmetric - (even + odd)).max() < 1e-12
    assert np.abs(sym.remainder - noise).max() < 1e-12
    with pytest.raises(ParameterError) as err:
        ft.even_odd(np.linspace(0.01, 0.03, 50), np.ones(50))
    assert err.value.name == "field"


def test_analyze_four_terminal_reports_he_and_h2e_amplitudes_and_phases():
    b = np.linspace(-0.06, 0.06, 3001)  # 30 h/e periods, invented trace
    r = _invented_trace(b)
    res = ft.analyze_four_terminal(b, r, contacts="0,2,1,3")
    assert abs(res.oscillations.period_he - PERIOD) < 0.02 * PERIOD
    assert abs(res.amplitude_he_ohm - 2.0) < 0.05
    assert abs(res.amplitude_h2e_ohm - 0.5) < 0.02
    assert abs(np.angle(np.exp(1j * (res.phase_he - 0.7)))) < 0.05
    assert abs(np.angle(np.exp(1j * (res.phase_h2e - 1.9)))) < 0.05
    assert abs(res.mean_ohm - np.mean(r)) < 1e-9
    d = res.as_dict()
    json.dumps(d)  # JSON-ready
    assert d["configuration"] == "R_02,13" and d["symmetrization"] == "even/odd"
    assert d["odd_fraction"] > 0.1  # phase 0.7 rad: a clearly odd part
    # the reverse configuration measured too: residual ~ 0 for reciprocal data
    rev = ft.analyze_four_terminal(b, r, contacts="0,2,1,3", reverse=(b, r[::-1]))
    assert rev.reciprocity_residual_ohm < 1e-9
    assert abs(np.angle(np.exp(1j * (rev.phase_he - 0.7)))) < 0.05
    # even part only: the h/e phase becomes 0 or pi (rigid), amplitude 2 cos(0.7)
    even = ft.analyze_four_terminal(b, r, contacts="0,2,1,3", symmetrize="even")
    assert abs(np.angle(np.exp(2j * even.phase_he))) < 1e-6
    assert abs(even.amplitude_he_ohm - 2.0 * math.cos(0.7)) < 0.05


def test_relative_change_and_bad_input():
    r = np.array([99.0, 100.0, 101.0])
    assert np.allclose(ft.relative_change(r), [-0.01, 0.0, 0.01])
    assert np.allclose(ft.relative_change(r, "zero"), [-0.01, 0.0, 0.01])
    with pytest.raises(ParameterError):
        ft.relative_change(np.zeros(3))
    with pytest.raises(ParameterError) as err:
        ft.analyze_four_terminal(np.linspace(-1, 1, 50), np.ones(50), contacts="0,1,1,2")
    assert err.value.name == "contacts.voltage" or "contact" in str(err.value)
    with pytest.raises(ParameterError):
        ft.analyze_four_terminal(np.linspace(-1, 1, 50), np.ones(50), contacts="0,1")


def test_fourterminal_analysis_does_not_import_kwant():
    code = (
        "import sys, ringkit.analysis.fourterminal, ringkit.contacts; "
        "sys.exit(1 if 'kwant' in sys.modules else 0)"
    )
    assert subprocess.run([sys.executable, "-c", code], check=False).returncode == 0


# ------------------------------------------------------------------------------- network
def test_network_two_lead_limit_equals_the_two_lead_network():
    """Griffiths junction = the Büttiker-Imry-Azbel junction with coupling 4/9: the N-lead
    network with two leads reproduces ringkit.analysis.network1d (a separate implementation)."""
    kr = np.linspace(3.0, 9.0, 13)[:, None]
    phi = np.linspace(-1.0, 2.5, 8)[None, :]
    for a0, a1 in ((math.pi, 0.0), (math.pi + 0.3, 0.2)):
        tm = nm.ring_network_transmissions([a0, a1], kr, phi)
        up = (a0 - a1) % (2 * math.pi)  # arm counter-clockwise from lead 1 to lead 0
        ref = ring_transmission(kr * up, kr * (2 * math.pi - up), phi, 4.0 / 9.0)
        assert np.abs(tm[..., 1, 0] - ref).max() < 1e-12
        assert np.abs(tm[..., 0, 1] - ref).max() < 1e-12


def test_network_is_unitary_and_reciprocal_with_four_leads():
    angles = [3.0, 0.4, 3.9, -0.7]
    kr = np.linspace(2.0, 7.0, 11)[:, None]
    phi = np.linspace(0.0, 2 * math.pi, 9)[None, :]
    for junction in (None, nm.lattice_junction(np.linspace(0.3, 2.5, 11))[:, None]):
        tm = nm.ring_network_transmissions(angles, kr, phi, junction=junction)
        assert np.abs(tm.sum(axis=-1) - 1).max() < 1e-12  # unitarity (one channel per lead)
        assert np.abs(tm.sum(axis=-2) - 1).max() < 1e-12
        back = nm.ring_network_transmissions(angles, kr, -phi, junction=junction)
        assert np.abs(tm - np.swapaxes(back, -1, -2)).max() < 1e-12  # T_ij(B) = T_ji(-B)
        g = nm.network_conductance_matrix(tm)
        r = resistance_from_conductance(g, "0,2,1,3")
        r_rev = resistance_from_conductance(nm.network_conductance_matrix(back), "1,3,0,2")
        assert np.abs(r - r_rev).max() < 1e-10  # Büttiker 1986 reciprocity
    with pytest.raises(ParameterError):
        nm.ring_network_transmissions([0.0, 0.0], 1.0, 0.0)
