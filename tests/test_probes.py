"""Buttiker dephasing probes: exactness, current conservation, reciprocity, L_phi mapping.

References: M. Buttiker, Phys. Rev. B 33, 3020 (1986) (voltage probes as dephasers) and
Phys. Rev. Lett. 57, 1761 (1986) (multi-terminal formula, two-terminal reciprocity); closed
forms of the one-probe and many-probe effective conductance from the physics notes 7.1-7.3.
"""

from __future__ import annotations

import kwant
import numpy as np
import pytest
from engine_systems import chain_loop, square_ring

from ringkit._validation import ParameterError
from ringkit.transport.fastsweep import FieldSweeper
from ringkit.transport.probes import (
    CALIBRATION_LATTICE,
    DephasingProbes,
    attach_probes,
    conductance_matrix_from_transmission,
    coupling_from_lphi,
    effective_conductance,
    local_dos,
    lphi_from_coupling,
    ring_probe_sites,
)

TOL = 1e-10


def _ring(**kw):
    return square_ring(12, 8, 4, disorder=1.0, seed=3, **kw)


def test_self_energy_probe_equals_real_lead_probe():
    # A buffer site plus a semi-infinite chain centred on E gives the ring site the exact
    # self-energy -i tc^2/tl at E (surface Green's function of a chain at its band centre,
    # g = -i/t; e.g. Datta 1995 ch. 3), i.e. a wide-band probe with eta = 2 tc^2/tl. kwant's
    # smatrix on the system with real probe leads is the reference.
    energy, tc, tl = 0.5, 0.4, 1.3
    fsyst = _ring()
    sites = ring_probe_sites(fsyst, 6)
    tags = [tuple(int(c) for c in fsyst.sites[i].tag) for i in sites]
    ref_syst = _ring(probe_leads=tags, probe_tc=tc, probe_tl=tl, probe_energy=energy)
    sw = FieldSweeper(
        fsyst, field_param="phi", energy=energy, probes=DephasingProbes(sites, 2 * tc**2 / tl)
    )
    for phi in (0.0, 0.004, -0.007):
        ref = kwant.smatrix(ref_syst, energy, params={"phi": phi}).conductance_matrix()
        assert np.max(np.abs(sw.conductance_matrix(phi) - ref)) < TOL


def test_probe_sites_spread_over_both_arms():
    fsyst = square_ring(20, 14, 6)
    sites = ring_probe_sites(fsyst, 10)
    pos = np.array([fsyst.sites[i].pos for i in sites])
    assert len(set(sites.tolist())) == 10
    assert np.sum(pos[:, 1] > 0) == 5 and np.sum(pos[:, 1] < 0) == 5  # upper / lower arm
    r = np.hypot(pos[:, 0], pos[:, 1])
    assert np.all((r >= 14) & (r < 20))
    ang = np.sort(np.arctan2(pos[:, 1], pos[:, 0]))
    gaps = np.diff(np.r_[ang, ang[0] + 2 * np.pi])
    assert gaps.max() < 2.2 * (2 * np.pi / 10)  # evenly spread, none at the junctions
    with pytest.raises(ParameterError, match="n_probes"):
        ring_probe_sites(fsyst, 0)


def test_zero_coupling_reproduces_coherent_result():
    fsyst = _ring()
    values = np.linspace(-0.01, 0.01, 5)
    coherent = FieldSweeper(fsyst, field_param="phi", energy=0.6).transmission(values)
    probes = DephasingProbes(ring_probe_sites(fsyst, 8), 0.0)
    sw = FieldSweeper(fsyst, field_param="phi", energy=0.6, probes=probes)
    assert np.max(np.abs(sw.conductance(values) - coherent)) < 1e-12


def test_current_conservation_and_floating_probes():
    fsyst = _ring()
    sw = FieldSweeper(
        fsyst,
        field_param="phi",
        energy=0.6,
        probes=DephasingProbes(ring_probe_sites(fsyst, 10), 0.3),
    )
    c = sw.conductance_matrix(0.006)
    assert np.max(np.abs(c.sum(axis=0))) < TOL  # columns (by construction of the diagonal)
    assert np.max(np.abs(c.sum(axis=1))) < TOL  # rows: unitarity of the scattering problem
    # floating probes: solve for their voltages with V_source = 1, V_drain = 0, then I_p = 0
    p = np.arange(2, c.shape[0])
    v = np.zeros(c.shape[0])
    v[0] = 1.0
    v[p] = np.linalg.solve(c[np.ix_(p, p)], -c[p, 0])
    current = c @ v
    assert np.max(np.abs(current[p])) < TOL
    assert current[0] == pytest.approx(-current[1], abs=TOL)
    assert current[0] == pytest.approx(sw.conductance(0.006), abs=TOL)
    # the many-probe closed form (physics notes 7.2): G = T21 + sum T2p (W^-1)pq Tq1
    t = sw.transmission_matrix(0.006)
    w = -t[np.ix_(p, p)]
    w[np.diag_indices(len(p))] = c[p, p]
    closed = t[1, 0] + t[1, p] @ np.linalg.solve(w, t[p, 0])
    assert closed == pytest.approx(sw.conductance(0.006), abs=TOL)


def test_effective_conductance_is_reciprocal():
    fsyst = square_ring(12, 8, 4, disorder=2.0, seed=8)
    sw = FieldSweeper(
        fsyst,
        field_param="phi",
        energy=0.7,
        probes=DephasingProbes(ring_probe_sites(fsyst, 12), 0.5),
    )
    b = np.array([0.002, 0.005, 0.013])
    g_plus, g_minus = sw.conductance(b), sw.conductance(-b)
    assert np.max(np.abs(g_plus - g_minus)) < TOL  # Buttiker 1986: G(B) = G(-B)
    assert np.ptp(g_plus) > 1e-3


def _he_amplitude(fsyst, energies, eta_of_energy, n_probes):
    """rms over energies of the h/e Fourier amplitude of G(flux) over one period."""
    flux = np.arange(10) / 10
    amps = []
    base = None
    for e in energies:
        probes = None
        eta = eta_of_energy(e)
        if eta is not None:
            probes = DephasingProbes(ring_probe_sites(fsyst, n_probes), eta)
        sw = FieldSweeper(
            fsyst,
            field_param="flux",
            energy=e,
            probes=probes,
            model=None if base is None else base.model,
        )
        base = base or sw
        g = sw.conductance(flux)
        amps.append(2 * abs(np.fft.rfft(g)[1]) / len(flux))
    return float(np.sqrt(np.mean(np.square(amps))))


def test_h_over_e_amplitude_falls_monotonically_with_coupling():
    fsyst = square_ring(14, 10, 5, disorder=0.75, seed=2, field_param="flux")
    energies = np.linspace(0.8, 1.3, 5)
    etas = [0.0, 0.02, 0.05, 0.1, 0.2, 0.4, 0.8]
    amps = [_he_amplitude(fsyst, energies, lambda e, x=x: x, 16) for x in etas]
    assert np.all(np.diff(amps) < 0)
    assert amps[-1] < 0.3 * amps[0]


def _fitted_lphi(builder, sizes, l_phi, energies, n_probes_of):
    """Fit log(A(eta)/A(0)) = const - L_arm/L_phi over rings of several arm lengths."""
    arm, ratio = [], []
    for size in sizes:
        fsyst, l_arm = builder(size)
        n_probes = n_probes_of(fsyst)
        a0 = _he_amplitude(fsyst, energies, lambda e: None, n_probes)

        def eta(e, fsyst=fsyst, n_probes=n_probes):
            return attach_probes(
                fsyst, l_phi=l_phi, energy=e, n_probes=n_probes, zero_field={"flux": 0.0}
            ).eta

        arm.append(l_arm)
        ratio.append(_he_amplitude(fsyst, energies, eta, n_probes) / a0)
    slope = np.polyfit(arm, np.log(ratio), 1)[0]
    return -1.0 / slope


def test_lphi_mapping_single_channel_ring():
    # Single-channel square loops (arms of w + 2h = 2w sites): the mapping is exact per probe
    # (module docstring), so the fitted decay length must match within the scatter of the
    # energy average (~10 %).
    def builder(h):
        return chain_loop(2 * h, h, h), 4 * h

    l_phi = 30.0
    fitted = _fitted_lphi(
        builder,
        (4, 7, 10, 13, 16),
        l_phi,
        np.linspace(-1.15, 1.25, 9),
        lambda f: max(2, f.graph.num_nodes // 3),
    )
    assert fitted == pytest.approx(l_phi, rel=0.15)


@pytest.mark.slow
def test_lphi_mapping_square_lattice_rings():
    # Narrow disordered square-lattice rings (4 sites wide) at L_phi = 30 a, a value not used
    # for the calibration (module docstring of ringkit.transport.probes): fitted within 25 %.
    def builder(r):
        return square_ring(r + 2, r - 2, 5, disorder=0.75, seed=int(r), field_param="flux"), (
            np.pi * r
        )

    l_phi = 30.0
    fitted = _fitted_lphi(
        builder,
        (8, 11, 14, 17, 20),
        l_phi,
        np.linspace(0.7, 1.4, 8),
        lambda f: max(4, int(round(f.graph.num_nodes / 12))),
    )
    assert fitted == pytest.approx(l_phi, rel=0.25)


def test_full_dephasing_single_probe_gives_series_resistance():
    # Physics notes 7.3: if every electron from 1 to 2 passes through the probe reservoir 3
    # (T21 = 0, T31 = T1, T23 = T2), G = T1 T2 / (T1 + T2), i.e. 1/G = 1/G1 + 1/G2.
    # Two disordered wires A (lead 0 -> reservoir) and B (reservoir -> lead 1); the reservoir
    # is one terminal made of leads 2 and 3. G1, G2 come from kwant on each wire alone.
    lat = kwant.lattice.square(1.0, norbs=1)
    width, length = 4, 12
    rng = np.random.default_rng(5)

    def hop(s1, s2, phi):
        (x1, y1), (x2, y2) = s1.pos, s2.pos
        return -np.exp(2j * np.pi * phi * (x1 - x2) * (y1 + y2) / 2)

    def wire(y0, onsite):
        syst = kwant.Builder()
        for x in range(length):
            for y in range(width):
                syst[lat(x, y0 + y)] = onsite[x, y]
        syst[lat.neighbors()] = hop
        return syst

    def lead(y0, direction):
        ld = kwant.Builder(kwant.TranslationalSymmetry((direction, 0)))
        ld[(lat(0, y0 + y) for y in range(width))] = 4.0
        ld[lat.neighbors()] = -1.0
        return ld

    on_a = 4.0 + 1.5 * (rng.random((length, width)) - 0.5)
    on_b = 4.0 + 1.5 * (rng.random((length, width)) - 0.5)
    both = wire(0, on_a)
    both.update(wire(50, on_b))
    for y0, d in ((0, -1), (50, 1), (0, 1), (50, -1)):  # leads 0, 1, 2, 3
        both.attach_lead(lead(y0, d))
    fboth = both.finalized()
    energy, phi = 1.1, 0.01
    t = FieldSweeper(fboth, field_param="phi", energy=energy).transmission_matrix(phi)
    # merge leads 2 and 3 into one reservoir terminal
    merge = np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 1, 1]], dtype=float)
    t3 = merge @ t @ merge.T
    g = effective_conductance(t3, 0, 1)

    def alone(onsite):
        s = wire(0, onsite)
        s.attach_lead(lead(0, -1))
        s.attach_lead(lead(0, 1))
        return kwant.smatrix(s.finalized(), energy, params={"phi": phi}).transmission(1, 0)

    g1, g2 = alone(on_a), alone(on_b)
    assert t[1, 0] == 0.0  # no coherent path
    assert 1.0 / g == pytest.approx(1.0 / g1 + 1.0 / g2, rel=1e-10)


def test_mapping_inverse_and_validation():
    eta = coupling_from_lphi(40.0, velocity=1.3, probe_fraction=0.05)
    assert lphi_from_coupling(eta, velocity=1.3, probe_fraction=0.05) == pytest.approx(40.0)
    # weak coupling: rate picture 1/tau = eta f, L_phi = v tau (module docstring)
    eta_weak = coupling_from_lphi(1e4, velocity=1.3, probe_fraction=0.05)
    assert eta_weak == pytest.approx(1.3 / (0.05 * 1e4), rel=1e-3)  # correction 1/(4 f L)
    eta_d = coupling_from_lphi(20.0, velocity=1.0, probe_fraction=0.1, diffusion_constant=3.0)
    assert eta_d == pytest.approx(3.0 / (0.1 * 400.0))
    assert 0 < CALIBRATION_LATTICE < 1
    with pytest.raises(ParameterError, match="l_phi"):
        coupling_from_lphi(-1.0, velocity=1.0, probe_fraction=0.1)
    with pytest.raises(ParameterError, match="probe_fraction"):
        coupling_from_lphi(10.0, velocity=1.0, probe_fraction=2.0)
    with pytest.raises(ParameterError, match="probes.sites"):
        FieldSweeper(
            _ring(), field_param="phi", energy=0.5, probes=DephasingProbes(np.array([0, 0]), 0.1)
        )
    c = conductance_matrix_from_transmission(np.array([[0.0, 0.4], [0.4, 0.0]]))
    assert np.allclose(c, [[0.4, -0.4], [-0.4, 0.4]])


@pytest.mark.parametrize("energy", [0.7, 1.9])
def test_local_dos_equals_kwant_ldos(energy):
    # reference: kwant.ldos (scattering wave functions of all lead channels, kwant's solver),
    # on a disordered ring with 4-site-wide leads (several open channels at E = 1.9 t)
    fsyst = _ring()
    p = dict(phi=0.013)
    ref = kwant.ldos(fsyst, energy, params=p)
    got = local_dos(fsyst, energy, p)
    np.testing.assert_allclose(got, ref, rtol=0, atol=TOL * float(ref.max()))
    # a pre-evaluated Hamiltonian of the same parameters gives the same numbers
    h = fsyst.hamiltonian_submatrix(sparse=True, params=p)
    np.testing.assert_allclose(local_dos(fsyst, energy, p, hamiltonian=h), got, rtol=0, atol=0)


def test_local_dos_of_a_chain_is_the_closed_form():
    # clean infinite chain (hopping 1, closed form, from memory): LDOS = 1/(pi sqrt(4 - E^2))
    # per site; a finite stretch between two semi-infinite leads is reflectionless, so every
    # site of the scattering region has exactly this value
    lat = kwant.lattice.chain(norbs=1)
    syst = kwant.Builder()
    syst[(lat(x) for x in range(7))] = 0.0
    syst[lat.neighbors()] = -1.0
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1,)))
    lead[lat(0)] = 0.0
    lead[lat.neighbors()] = -1.0
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    energy = 0.6
    got = local_dos(syst.finalized(), energy)
    np.testing.assert_allclose(got, 1.0 / (np.pi * np.sqrt(4.0 - energy**2)), rtol=1e-12)


def test_attach_probes_with_given_hamiltonian_gives_the_kwant_ldos_weights():
    fsyst = _ring()
    p, zero = dict(), dict(phi=0.0)
    pr = attach_probes(fsyst, l_phi=30.0, energy=1.1, n_probes=6, params=p, zero_field=zero)
    h = fsyst.hamiltonian_submatrix(sparse=True, params=zero)
    pr2 = attach_probes(
        fsyst, l_phi=30.0, energy=1.1, n_probes=6, params=p, zero_field=zero, hamiltonian=h
    )
    # reference weight: fraction of kwant.ldos on the probe sites (the documented mapping)
    ldos = kwant.ldos(fsyst, 1.1, params=zero)
    f_ref = ldos[pr.sites].sum() / ldos.sum()
    assert abs(pr.info["probe_fraction"] - f_ref) < TOL
    assert pr2.info["probe_fraction"] == pr.info["probe_fraction"]
    assert pr2.eta == pr.eta and np.array_equal(pr2.sites, pr.sites)
