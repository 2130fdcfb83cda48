"""The lattice model built from a device: sites, hoppings, leads, arms, gate, size limit."""

from __future__ import annotations

import math
from collections import Counter

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.device import ArmGate, DeviceTooLargeError, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring

A = 8e-9
T_A = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)  # t = hbar^2/(2 m* a^2)


def _device(geo, **kw):
    mat = kw.pop("material", Material(0.067, fermi_energy=0.2 * T_A))
    return RingDevice(mat, geo, lattice_spacing=A, **kw)


def test_hopping_and_onsite_energies_in_units_of_t():
    ring = build_ring(_device(RingGeometry.circular(60e-9, 100e-9)))
    assert ring.hopping == pytest.approx(T_A, rel=1e-12)
    assert ring.lattice_spacing == A
    h = ring.fsyst.hamiltonian_submatrix(params=ring.params(B=0.0))
    np.testing.assert_allclose(h.diagonal(), 4.0)  # clean: band bottom at E = 0
    off = h[~np.eye(len(h), dtype=bool)]
    np.testing.assert_allclose(off[off != 0], -1.0)
    # nearest neighbours only, at distance a
    i, j = np.nonzero(np.triu(h, 1))
    np.testing.assert_allclose(np.hypot(*(ring.positions[i] - ring.positions[j]).T), A)
    assert ring.to_lattice_energy(0.2 * T_A) == pytest.approx(0.2)
    with pytest.raises(ParameterError, match="energy"):
        ring.to_lattice_energy(8.5 * T_A)


def test_circular_ring_sites_match_an_independent_enumeration():
    geo = RingGeometry.circular(60e-9, 100e-9, width_lower=24e-9)
    ring = build_ring(_device(geo))
    ring_pos = ring.positions[ring.ring_sites] / A
    idx = np.arange(-14, 15)
    gx, gy = np.meshgrid(idx, idx, indexing="ij")
    r = np.hypot(gx, gy) * A
    width = np.where(gy >= 0, 40e-9, 24e-9)  # leads at angles pi and 0: upper = y > 0 half
    inside = np.abs(r - 80e-9) <= width / 2 + 1e-12
    expected = {(x, y) for x, y in zip(gx[inside], gy[inside], strict=True)}
    got = {tuple(p) for p in np.rint(ring_pos).astype(int)}
    # the builder drops isolated corner sites (no nearest neighbour); nothing else differs
    assert got <= expected and len(expected - got) <= 4
    est = ring.device.site_estimate().n_sites
    assert abs(est - ring.n_sites) < 0.1 * ring.n_sites


def test_arm_labels_follow_widths_and_lead_angles():
    sym = build_ring(_device(RingGeometry.circular(60e-9, 100e-9)))
    c = Counter(sym.arm_of_site)
    assert c["upper"] == c["lower"]  # mirror symmetric about the x axis
    up = sym.arm_of_site == "upper"
    # y = 0 sites belong to the arm that starts there counter-clockwise (right: upper)
    assert np.all(sym.positions[up, 1] >= 0)
    assert np.all(sym.positions[up & (sym.positions[:, 1] == 0), 0] > 0)
    narrow = build_ring(_device(RingGeometry.circular(60e-9, 100e-9, width_lower=16e-9)))
    c = Counter(narrow.arm_of_site)
    assert c["lower"] / c["upper"] == pytest.approx(16 / 40, rel=0.15)
    geo = RingGeometry.circular(60e-9, 100e-9, lead_angles=(math.pi, math.pi / 4), lead_width=24e-9)
    skew = build_ring(_device(geo))
    c = Counter(skew.arm_of_site)
    assert c["upper"] / c["lower"] == pytest.approx((3 / 4) / (5 / 4), rel=0.1)


def test_leads_are_clean_strips_with_the_expected_open_modes():
    """Lead of M rows: N(E) = #{n : 2t(1 - cos(n pi/(M+1))) < E} (hard-wall transverse levels,
    closed form; docs/physics.md §3)."""
    geo = RingGeometry.circular(60e-9, 110e-9, lead_width=48e-9)
    ring = build_ring(_device(geo))
    fs = ring.fsyst
    assert ring.lead_sites == 6
    assert all(len(p) == 0 for p in fs.lead_paddings)  # no padding sites added by kwant
    assert [len(i) for i in fs.lead_interfaces] == [6, 6]
    for energy in (0.2, 0.5, 1.0, 2.1):
        n = np.arange(1, 7)
        expected = int(np.sum(2 * (1 - np.cos(n * np.pi / 7)) < energy))
        for lead in fs.leads:
            assert lead.modes(energy)[1].nmodes == expected
    # interface columns are the outermost columns, at the lead centre heights
    for k, iface in enumerate(fs.lead_interfaces):
        pos = ring.positions[iface]
        assert np.ptp(pos[:, 0]) == 0
        assert abs(pos[:, 0]).min() > geo.outer_extent
        assert np.mean(pos[:, 1]) == pytest.approx(geo.lead_center(k), abs=A)
        assert set(ring.arm_of_site[iface]) == {"lead-contact"}


def test_rectangular_ring_has_an_empty_hole():
    geo = RingGeometry.rectangular(240e-9, 200e-9, 40e-9, width_upper=24e-9)
    ring = build_ring(_device(geo))
    x, y = ring.positions.T
    hole = (np.abs(x) < 80e-9 - 1e-12) & (y > -60e-9 + 1e-12) & (y < 76e-9 - 1e-12)
    assert not hole.any()
    # lattice points of the frame: outer box with edges included, hole with edges excluded
    gx, gy = np.meshgrid(np.arange(-15, 16), np.arange(-12, 13), indexing="ij")
    frame = ~((np.abs(gx) < 10) & (gy > -7.5) & (gy < 9.5))
    assert ring.ring_sites.sum() == frame.sum() == 775 - 19 * 17
    assert frame.sum() == pytest.approx((geo.area_outer - geo.area_inner) / A**2, rel=0.15)


def test_chain_ring_structure():
    n, radius = 30, 100e-9
    a = 2 * math.pi * radius / n
    mat = Material(0.067, fermi_energy=0.1 * constants.hbar**2 / (2 * 0.067 * constants.m_e * a**2))
    ring = build_ring(RingDevice(mat, RingGeometry.chain(radius, n_sites=n)))
    h = ring.fsyst.hamiltonian_submatrix(params=ring.params(B=0.0))
    idx = np.nonzero(ring.ring_sites)[0]
    assert len(idx) == n and ring.n_sites == n + 2 * ring.device.lead_stub
    sub = h[np.ix_(idx, idx)]
    np.testing.assert_allclose(sub.diagonal(), 2.0)  # chain band [0, 4t]
    assert np.all(np.count_nonzero(sub - np.diag(sub.diagonal()), axis=1) == 2)
    assert ring.lattice_spacing == pytest.approx(a)
    np.testing.assert_allclose(np.hypot(*ring.positions[idx].T), radius, rtol=1e-12)
    assert Counter(ring.arm_of_site)["junction"] == 2
    assert ring.loop_area == pytest.approx(0.5 * n * radius**2 * math.sin(2 * math.pi / n))
    assert all(len(i) == 1 for i in ring.fsyst.lead_interfaces)


def test_gate_shifts_only_the_gated_arm():
    w = 0.5 * T_A
    mat = Material(0.067, fermi_energy=0.2 * T_A, disorder_strength=w)
    ring = build_ring(
        _device(
            RingGeometry.circular(60e-9, 100e-9), material=mat, gate=ArmGate("lower", 0.1 * T_A)
        ),
        seed=7,
    )
    base = 4.0 + ring.onsite_potential / T_A
    gated = ring.arm_of_site == "lower"
    for v in (None, -0.3 * T_A):
        d = ring.fsyst.hamiltonian_submatrix(params=ring.params(gate=v)).diagonal().real
        shift = 0.1 if v is None else -0.3
        np.testing.assert_allclose(d[gated], base[gated] + shift, atol=1e-12)
        np.testing.assert_allclose(d[~gated], base[~gated], atol=1e-12)
    assert np.all(ring.onsite_potential[ring.arm_of_site == "lead-contact"] == 0)
    assert np.abs(ring.onsite_potential).max() <= w / 2


def test_params_and_refusals():
    ring = build_ring(_device(RingGeometry.circular(60e-9, 100e-9)))
    assert ring.params(B=0.2) == {"B": 0.2}
    with pytest.raises(ParameterError, match="flux"):
        ring.params(flux=1e-15)
    with pytest.raises(ParameterError, match="gate"):
        ring.params(gate=1e-22)
    ft = build_ring(_device(RingGeometry.circular(60e-9, 100e-9), field_mode="flux_tube"))
    assert ft.params(flux=2e-15) == {"flux": 2e-15} and ft.field_param == "flux"
    with pytest.raises(ParameterError, match="B"):
        ft.params(B=0.1)
    big = _device(RingGeometry.circular(600e-9, 1000e-9), max_sites=5000)
    with pytest.raises(DeviceTooLargeError, match=r"n_sites = \d+ .* MiB"):
        build_ring(big)
    with pytest.raises(ParameterError, match="seed"):
        build_ring(_device(RingGeometry.circular(60e-9, 100e-9)), seed=-1)
