"""Closed-ring spectrum E_n(Phi) and persistent currents -dE_n/dPhi.

Reference: a clean 1D ring of N sites (on-site 2t, hopping -t) threaded by flux Phi has the
exact lattice spectrum E_n = 2t(1 - cos(2 pi (n + Phi/Phi0)/N)), n = 0..N-1 (Bloch's theorem
with twisted boundary conditions; Byers and Yang, Phys. Rev. Lett. 7, 46 (1961) [from memory]),
so dE_n/dPhi = (2 pi/(N Phi0)) 2t sin(2 pi (n + Phi/Phi0)/N). Phi0 = h/e from scipy.constants.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import closed_ring_spectrum

PHI0 = constants.h / constants.e


def _hopping(mass_me: float, a: float) -> float:
    return constants.hbar**2 / (2 * mass_me * constants.m_e * a**2)


def _chain(n: int, mode: str, disorder: float = 0.0):
    radius = 200e-9
    a = 2 * math.pi * radius / n
    t = _hopping(0.067, a)
    mat = Material(0.067, fermi_energy=0.2 * t, disorder_strength=disorder * t or None)
    dev = RingDevice(mat, RingGeometry.chain(radius, n_sites=n), field_mode=mode)
    return dev, t, 0.5 * n * radius**2 * math.sin(2 * math.pi / n)


def _exact(n: int, frac: float, t: float):
    q = 2 * math.pi * (np.arange(n) + frac) / n
    energy = 2 * t * (1 - np.cos(q))
    slope = (2 * math.pi / (n * PHI0)) * 2 * t * np.sin(q)
    order = np.argsort(energy)
    return energy[order], slope[order]


FRACS = [0.07, 0.23, 0.41, 0.66, 0.93, 1.31, -0.18]


@pytest.mark.parametrize("mode", ["flux_tube", "uniform"])
def test_chain_spectrum_and_currents_match_the_exact_lattice_result(mode):
    n = 36
    dev, t, area = _chain(n, mode)
    ring = build_ring(dev)
    # uniform mode: the enclosed flux is B times the N-gon area (ring.loop_area)
    assert ring.loop_area == pytest.approx(area, rel=1e-12)
    spec = closed_ring_spectrum(ring, np.array(FRACS) * PHI0, n_levels=n)
    for k, frac in enumerate(FRACS):
        e_ref, s_ref = _exact(n, frac, t)
        assert np.max(np.abs(spec.energies[k] - e_ref)) < 1e-10 * t
        # slopes in units of t/Phi0
        assert np.max(np.abs(spec.slopes[k] - s_ref)) * PHI0 / t < 1e-10
    np.testing.assert_allclose(spec.persistent_current, -spec.slopes)
    if mode == "uniform":
        np.testing.assert_allclose(spec.field, np.array(FRACS) * PHI0 / area, rtol=1e-12)


def test_degenerate_levels_at_zero_flux_get_opposite_currents():
    """At Phi = 0 the levels n and -n are degenerate; their currents are +-I (diagonalised in
    the degenerate subspace), and the ground state carries none."""
    n = 20
    dev, t, _ = _chain(n, "flux_tube")
    spec = closed_ring_spectrum(dev, [0.0], n_levels=7)
    e_ref, _ = _exact(n, 0.0, t)
    assert np.max(np.abs(spec.energies[0] - e_ref[:7])) < 1e-10 * t
    s = spec.slopes[0] * PHI0 / t
    amp = 2 * math.pi / n * 2 * np.sin(2 * math.pi * np.arange(1, 4) / n)
    assert abs(s[0]) < 1e-10
    for k in range(3):
        np.testing.assert_allclose(s[1 + 2 * k : 3 + 2 * k], [-amp[k], amp[k]], atol=1e-10)


def _ring2d(mode: str):
    a = 10e-9
    t = _hopping(0.067, a)
    mat = Material(0.067, fermi_energy=0.2 * t, disorder_strength=1.0 * t)
    geo = RingGeometry.circular(40e-9, 80e-9, width_lower=30e-9)
    return build_ring(RingDevice(mat, geo, lattice_spacing=a, field_mode=mode), seed=1), t


def test_2d_ring_spectrum_is_periodic_even_and_currents_sum_to_zero():
    """Flux tube: E_n(Phi + Phi0) = E_n(Phi) (Byers-Yang), E_n(-Phi) = E_n(Phi) (time reversal
    with real disorder), and sum_n dE_n/dPhi = d Tr H/dPhi = 0 (Peierls phases leave the
    diagonal alone)."""
    ring, t = _ring2d("flux_tube")
    n_ring = int(ring.ring_sites.sum())
    fr = np.array([0.19, 1.19, -0.19, -2.81])
    spec = closed_ring_spectrum(ring, fr * PHI0, n_levels=n_ring)
    assert np.max(np.abs(spec.energies - spec.energies[0])) < 1e-10 * t
    assert np.max(np.abs(spec.slopes.sum(axis=1))) * PHI0 / t < 1e-9
    assert np.max(np.abs(spec.slopes[0])) * PHI0 / t > 1e-3  # currents are not all zero
    tol = 1e-9 * t / PHI0
    np.testing.assert_allclose(spec.slopes[1], spec.slopes[0], atol=tol)
    np.testing.assert_allclose(spec.slopes[3], spec.slopes[0], atol=tol)
    np.testing.assert_allclose(spec.slopes[2], -spec.slopes[0], atol=tol)


@pytest.mark.parametrize("mode", ["flux_tube", "uniform"])
def test_hellmann_feynman_slopes_match_finite_differences(mode):
    ring, t = _ring2d(mode)
    phi, d = 0.173 * PHI0, 1e-6 * PHI0
    spec = closed_ring_spectrum(ring, [phi - d, phi, phi + d], n_levels=12, energy=1.0 * t)
    fd = (spec.energies[2] - spec.energies[0]) / (2 * d)
    assert np.max(np.abs(spec.slopes[1] - fd)) * PHI0 / t < 1e-6
    # levels near E = t were selected, ascending
    assert np.all(np.diff(spec.energies[1]) >= 0)
    assert spec.energies[1].min() < t < spec.energies[1].max()


def test_spectrum_dataset_has_si_units():
    dev, t, _ = _chain(16, "flux_tube")
    ds = closed_ring_spectrum(dev, np.linspace(0, PHI0, 5), n_levels=4).to_dataset()
    assert ds["energy"].attrs["units"] == "J"
    assert ds["persistent_current"].attrs["units"] == "A"
    assert ds["flux"].attrs["units"] == "Wb"
    assert ds["energy"].shape == (5, 4)
    assert ds.attrs["field_mode"] == "flux_tube" and "ringkit_version" in ds.attrs
    np.testing.assert_allclose(ds["energy"][0], ds["energy"][-1], atol=1e-10 * t)
