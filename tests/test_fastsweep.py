"""FieldSweeper against plain kwant.smatrix on systems built independently (tests/engine_systems).

Reference: kwant 1.5.0's own scattering solver on the same finalized system, with the value
functions evaluated by kwant at every field (the "straightforward kwant script"). Agreement is
required to 1e-10 (issue requirement); measured agreement is ~1e-13.
"""

from __future__ import annotations

import kwant
import numpy as np
import pytest
from engine_systems import chain_loop, square_ring

from ringkit._validation import ParameterError
from ringkit.transport._engine_linsys import PatternSystem, compute_lead_data
from ringkit.transport.fastsweep import FieldSweeper, kron_reduce
from ringkit.units import PHI0

TOL = 1e-10


def _kwant_t(fsyst, energy, name, value):
    return kwant.smatrix(fsyst, energy, params={name: value}).transmission(1, 0)


CASES = {
    # uniform field in tesla, a = 5 nm: phases ~1e-2 rad per tesla -> automatic scale finding
    "B-tesla": (
        lambda: square_ring(14, 9, 5, disorder=1.5, seed=2, field_param="B", lattice_spacing=5e-9),
        "B",
        np.linspace(-2.0, 3.0, 5),
        0.7,
    ),
    "phi-per-plaquette": (
        lambda: square_ring(14, 9, 5, disorder=1.0, seed=5),
        "phi",
        np.linspace(-0.01, 0.02, 4),
        0.5,
    ),
    "flux-tube": (
        lambda: square_ring(14, 9, 5, disorder=1.0, seed=7, field_param="flux"),
        "flux",
        np.linspace(-0.7, 1.3, 5),
        1.1,
    ),
    "field-in-leads": (
        lambda: square_ring(14, 9, 5, disorder=1.0, seed=3, field_in_leads=True),
        "phi",
        np.linspace(0.0, 0.02, 4),
        0.6,
    ),
    "chain-loop": (lambda: chain_loop(10, 6, 3), "flux", np.linspace(0, 1, 5), 0.3),
}


@pytest.mark.parametrize("method", ["schur", "lu"])
@pytest.mark.parametrize("case", list(CASES))
def test_agrees_with_kwant_smatrix(case, method):
    build, name, values, energy = CASES[case]
    fsyst = build()
    sw = FieldSweeper(fsyst, field_param=name, energy=energy, method=method)
    t = sw.transmission(values)
    ref = np.array([_kwant_t(fsyst, energy, name, v) for v in values])
    assert np.max(np.abs(t - ref)) < TOL
    # the full S matrix and kwant's conductance matrix at one value
    v = values[-1]
    sk = kwant.smatrix(fsyst, energy, params={name: v})
    s = sw.smatrix(v)
    assert s.data.shape == sk.data.shape
    assert np.max(np.abs(s.data - sk.data)) < TOL
    assert np.max(np.abs(sw.conductance_matrix(v) - sk.conductance_matrix())) < TOL
    # the interference is really there: T varies with the field by more than the tolerance
    assert np.ptp(ref) > 1e-3


def test_lead_padding_sites_are_reproduced():
    # ring edge narrower than the lead: attach_lead adds padding sites whose hoppings take the
    # field-free lead value inside the system (kwant's attach_lead padding sites; docs/engine.md
    # §1.2)
    fsyst = square_ring(12, 8, 13, disorder=1.0, seed=1)
    assert sum(len(p) for p in fsyst.lead_paddings) > 0
    values = np.linspace(0, 0.02, 4)
    sw = FieldSweeper(fsyst, field_param="phi", energy=0.8)
    ref = [_kwant_t(fsyst, 0.8, "phi", v) for v in values]
    assert np.max(np.abs(sw.transmission(values) - ref)) < TOL


def test_lead_data_never_reused_at_another_energy():
    fsyst = square_ring(12, 8, 4, disorder=1.0, seed=4)
    sw1 = FieldSweeper(fsyst, field_param="phi", energy=0.5)
    sw2 = sw1.at_energy(0.9)
    assert sw2.model is sw1.model  # the field model is shared ...
    assert sw2.energy == 0.9 and sw1.energy == 0.5
    v = 0.004
    assert abs(sw2.transmission(v) - _kwant_t(fsyst, 0.9, "phi", v)) < TOL
    assert abs(sw1.transmission(v) - _kwant_t(fsyst, 0.5, "phi", v)) < TOL
    assert abs(sw1.transmission(v) - sw2.transmission(v)) > 1e-3
    # ... but lead data carry their energy and a linear system refuses foreign ones
    iface = sw1._iface_orbs
    leads = [
        compute_lead_data(lead, 0.9, {"phi": 0.0}, i)
        for lead, i in zip(fsyst.leads, iface, strict=True)
    ]
    with pytest.raises(RuntimeError, match="another energy"):
        PatternSystem(sw1.model, leads, 0.5)


def test_energy_on_closed_interior_eigenvalue_falls_back_to_lu():
    # The Schur elimination of the closed interior cannot pivot when E is one of its
    # eigenvalues; the conservation check must catch it and recompute with a pivoting LU.
    fsyst = square_ring(12, 8, 4, disorder=1.0, seed=3)
    base = FieldSweeper(fsyst, field_param="phi", energy=0.5)
    v = 0.003
    h = base.model.matrix(v).toarray()
    iface = np.unique(np.concatenate(base._iface_orbs))
    inner = np.setdiff1d(np.arange(h.shape[0]), iface)
    ev = np.linalg.eigvalsh(h[np.ix_(inner, inner)])
    energy = float(ev[np.argmin(np.abs(ev - 0.5))])
    sw = base.at_energy(energy)
    sk = kwant.smatrix(fsyst, energy, params={"phi": v})
    assert np.max(np.abs(sw.smatrix(v).data - sk.data)) < TOL
    assert sw.n_fallbacks >= 1


def test_clean_wire_transmission_equals_open_modes():
    # closed form: hard-wall strip of M sites, G = number of open modes (Datta 1995, ch. 3)
    lat = kwant.lattice.square(1.0, norbs=1)
    m = 9
    syst = kwant.Builder()
    syst[(lat(x, y) for x in range(8) for y in range(m))] = 4.0

    def hop(s1, s2, phi):
        (x1, y1), (x2, y2) = s1.pos, s2.pos
        return -np.exp(2j * np.pi * phi * (x1 - x2) * (y1 + y2) / 2)

    syst[lat.neighbors()] = hop
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[(lat(0, y) for y in range(m))] = 4.0
    lead[lat.neighbors()] = hop
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    fsyst = syst.finalized()
    eps = 2 * (1 - np.cos(np.arange(1, m + 1) * np.pi / (m + 1)))
    for energy in (0.5 * (eps[1] + eps[2]), 0.5 * (eps[4] + eps[5])):
        sw = FieldSweeper(fsyst, field_param="phi", energy=energy)
        assert abs(sw.transmission(0.0) - np.sum(eps < energy)) < 1e-10


def test_two_terminal_onsager_symmetry():
    # G(B) = G(-B) for two terminals (Buttiker 1986; docs/physics.md §5.3)
    fsyst = square_ring(14, 9, 5, disorder=2.0, seed=11)
    sw = FieldSweeper(fsyst, field_param="phi", energy=0.6)
    v = np.array([0.0013, 0.004, 0.011])
    assert np.max(np.abs(sw.transmission(v) - sw.transmission(-v))) < TOL


def test_flux_in_weber_scale_is_found():
    # a flux parameter in Wb: phases 2 pi Phi/(h/e), coefficients ~1.5e15 per Wb
    lat = kwant.lattice.chain(1.0, norbs=1)
    syst = kwant.Builder()
    syst[(lat(x) for x in range(4))] = 0.0
    syst[lat.neighbors()] = -1.0
    syst[lat(0), lat(3)] = lambda a, b, flux_wb: -np.exp(-2j * np.pi * flux_wb / PHI0)
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1,)))
    lead[lat(0)] = 0.0
    lead[lat.neighbors()] = -1.0
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    fsyst = syst.finalized()
    values = np.array([0.0, 0.3, 0.5, 1.2]) * PHI0
    sw = FieldSweeper(fsyst, field_param="flux_wb", energy=0.4)
    ref = [_kwant_t(fsyst, 0.4, "flux_wb", v) for v in values]
    assert np.max(np.abs(sw.transmission(values) - ref)) < TOL
    assert np.ptp(ref) > 1e-2


def _onsite_zeeman_system():
    lat = kwant.lattice.square(1.0, norbs=1)
    syst = kwant.Builder()
    syst[(lat(x, y) for x in range(4) for y in range(3))] = lambda s, B: 4.0 + 0.1 * B
    syst[lat.neighbors()] = -1.0
    lead = kwant.Builder(kwant.TranslationalSymmetry((-1, 0)))
    lead[(lat(0, y) for y in range(3))] = 4.0
    lead[lat.neighbors()] = -1.0
    syst.attach_lead(lead)
    syst.attach_lead(lead.reversed())
    return syst


def test_rejects_field_that_is_not_a_peierls_phase():
    syst = _onsite_zeeman_system()
    with pytest.raises(ParameterError, match="Peierls"):
        FieldSweeper(syst.finalized(), field_param="B", energy=0.5)
    with pytest.raises(ParameterError, match="finalized"):
        FieldSweeper(syst, field_param="B", energy=0.5)
    with pytest.raises(ParameterError, match="field_param"):
        FieldSweeper(square_ring(8, 5, 3), field_param="nonexistent", energy=0.5)
    with pytest.raises(ParameterError, match="energy"):
        FieldSweeper(square_ring(8, 5, 3), field_param="phi", energy=float("nan"))


def test_kron_reduce_one_probe_closed_form():
    # docs/physics.md §7.1: G = T21 + T23 T31 / (T31 + T32)
    rng = np.random.default_rng(1)
    t = rng.uniform(0.1, 1.0, (3, 3))
    c = -t.copy()
    np.fill_diagonal(c, 0.0)
    np.fill_diagonal(c, -c.sum(axis=0))
    # make rows sum to zero too (current conservation): symmetrise the off-diagonal part
    t = 0.5 * (t + t.T)
    c = -t.copy()
    np.fill_diagonal(c, 0.0)
    np.fill_diagonal(c, -c.sum(axis=0))
    g = kron_reduce(c, 0, 1)
    expected = t[1, 0] + t[1, 2] * t[2, 0] / (t[2, 0] + t[2, 1])
    assert abs(g - expected) < 1e-14


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_generic_over_the_ringkit_builder(mode):
    # the engine must work unchanged with the physics-core builder (B in T, flux in Wb)
    device_mod = pytest.importorskip("ringkit.device")
    tb = pytest.importorskip("ringkit.tightbinding")
    material = device_mod.Material.preset("GaAs", mean_free_path=3e-7)
    geometry = device_mod.RingGeometry.from_mean_radius(1.5e-7, 6e-8)
    ring = tb.build_ring(device_mod.RingDevice(material, geometry, field_mode=mode), seed=3)
    params = ring.params()
    energy = ring.fermi_energy_lattice
    name = ring.field_param
    values = np.linspace(0, 0.05, 4) if mode == "uniform" else np.linspace(0, 1.5, 4) * PHI0
    sw = FieldSweeper(ring.fsyst, field_param=name, params=params, energy=energy)
    ref = [
        kwant.smatrix(ring.fsyst, energy, params={**params, name: v}).transmission(1, 0)
        for v in values
    ]
    assert np.max(np.abs(sw.transmission(values) - ref)) < TOL


def test_schur_bound_state_in_continuum_falls_back_to_lu():
    """Energy exactly on a bound state of a loop side-coupled to a wire (closed-form energy
    E = -2t cos(2 pi m/n), m = 1, n = 8: the loop state sin(2 pi m j/n) vanishes at the joint).

    The Schur elimination onto the lead variables is singular there; without null-pivot
    detection it returned T = 0.99923 instead of kwant's 1.0 while still conserving current.
    """
    from lowrank_systems import side_coupled_ring

    fsyst = side_coupled_ring(8)
    energy = -2.0 * np.cos(2 * np.pi / 8)
    fluxes = np.array([0.3, 0.5, 1.7]) * PHI0
    ref = [kwant.smatrix(fsyst, energy, params=dict(flux=f)).transmission(1, 0) for f in fluxes]
    sw = FieldSweeper(fsyst, field_param="flux", energy=energy, method="schur")
    got = sw.transmission(fluxes)
    assert np.max(np.abs(got - ref)) < 1e-10
    assert sw.n_fallbacks == len(fluxes)


# ------------------------------------------------------------------ no open channel (issue 11)
# First subband of a clean square-lattice strip of width W (on-site 4t, hopping t): band
# bottom 2t (1 - cos(pi/(W+1))) (closed form of the transverse standing waves); W = 5:
# 0.268t. Below it (and below the band bottom 0) a lead has no open channel and G = 0 exactly;
# kwant.smatrix returns 0 there too. Regression: IndexError in _tmatrix_from.
NO_CHANNEL_ENERGIES = (-0.3, 0.1)
E_FIRST_SUBBAND_W5 = 2.0 * (1.0 - np.cos(np.pi / 6.0))


@pytest.mark.parametrize("method", ["schur", "lu"])
def test_no_open_channel_gives_zero_not_a_crash(method):
    from types import SimpleNamespace

    fsyst = square_ring(14, 9, 5, disorder=1.0, seed=5)
    values = np.array([0.0, 0.004, -0.01])
    probes = SimpleNamespace(sites=np.array([30, 150, 300]), eta=0.2)
    for energy in NO_CHANNEL_ENERGIES + (E_FIRST_SUBBAND_W5 + 0.03,):
        sw = FieldSweeper(fsyst, field_param="phi", energy=energy, method=method)
        ref = np.array([_kwant_t(fsyst, energy, "phi", v) for v in values])
        assert np.max(np.abs(sw.transmission(values) - ref)) < TOL
        assert np.max(np.abs(sw.conductance(values) - ref)) < TOL
        sk = kwant.smatrix(fsyst, energy, params={"phi": values[1]})
        assert np.max(np.abs(sw.conductance_matrix(values[1]) - sk.conductance_matrix())) < TOL
        swp = FieldSweeper(fsyst, field_param="phi", energy=energy, method=method, probes=probes)
        g = swp.conductance(values)
        assert np.all(np.isfinite(g))
        if energy < E_FIRST_SUBBAND_W5:
            assert np.all(ref == 0.0)
            assert np.all(g == 0.0)  # no channel in source/drain: exactly zero
        else:  # one open channel: the sweep is alive (kwant gives T > 0)
            assert np.all(ref > 1e-3) and np.all(g > 1e-3)


def test_kron_reduce_with_a_dead_terminal_is_zero():
    # source without any coupling, two probes coupled only to each other: C_pp is singular
    c = np.zeros((4, 4))
    c[2, 2] = c[3, 3] = 0.3
    c[2, 3] = c[3, 2] = -0.3
    assert kron_reduce(c, 0, 1) == 0.0
    assert np.all(kron_reduce(np.stack([c, c]), 0, 1) == 0.0)


def test_no_open_channel_every_ringkit_path():
    """Issue 11 device (GaAs, r_in 110 nm, r_out 150 nm, a = 6 nm) at 0.5 meV, below the first
    lead subband (hbar^2 pi^2 / (2 m* W^2) ~ 3 meV for the ~40 nm lead, closed form): G = 0
    on the kwant path, the fast uniform path and the flux tube (probes: see the sweeper
    tests above; their L_phi calibration needs an open channel at the Fermi energy)."""
    import warnings

    from scipy.constants import e as q_e

    from ringkit.device import DiscretisationWarning, Material, RingDevice, RingGeometry
    from ringkit.tightbinding import build_ring
    from ringkit.transport.conductance import conductance, field_sweep

    mat = Material(0.067, fermi_energy=5e-3 * q_e, mobility=4.0)
    geo = RingGeometry.circular(110e-9, 150e-9)
    energy = 0.5e-3 * q_e
    for mode, vals in (("uniform", [0.0, 0.05]), ("flux_tube", [0.0, 0.3 * PHI0])):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DiscretisationWarning)
            dev = RingDevice(mat, geo, lattice_spacing=6e-9, field_mode=mode)
        ring = build_ring(dev, seed=1)
        assert conductance(ring, energy=energy) == 0.0
        for kw in ({"method": "kwant"}, {}):
            ds = field_sweep(ring, vals, energy=energy, **kw)
            assert np.all(ds.G.values == 0.0), (mode, kw)


# ------------------------------------------------------- reuse of one factorization (issue 11)
# method="krylov": block GMRES preconditioned by the LU at a reference field, error of every
# amplitude estimated below tol (docs/engine.md, section 6). Independent references: plain
# kwant.smatrix on the same finalized system; Onsager-Buttiker reciprocity G(B) = G(-B) for a
# two-terminal conductance (M. Buttiker, Phys. Rev. Lett. 57, 1761 (1986)); current
# conservation (unitarity of S).


def _gated_ring(seed=3):
    from ringkit.device import ArmGate, Material, RingDevice, RingGeometry
    from ringkit.tightbinding import build_ring

    material = Material.preset("GaAs", mean_free_path=3e-7)
    geometry = RingGeometry.from_mean_radius(1.5e-7, 6e-8)
    gate = ArmGate("upper", 0.4 * material.fermi_energy_J)
    return build_ring(RingDevice(material, geometry, gate=gate), seed=seed)


def test_krylov_reuse_equals_kwant_with_gate_and_probes_at_two_energies():
    from types import SimpleNamespace

    ring = _gated_ring()
    params = ring.params()
    period = PHI0 / (np.pi * ring.device.geometry.mean_radius**2)
    fields = np.linspace(-0.4, 0.6, 21) * period
    e0 = ring.fermi_energy_lattice
    probes = SimpleNamespace(sites=np.array([40, 400, 800, 1200]), eta=0.05)
    for energy in (e0, 1.07 * e0):
        sw = FieldSweeper(ring.fsyst, field_param="B", params=params, energy=energy)
        kr = FieldSweeper(
            ring.fsyst,
            field_param="B",
            params=params,
            energy=energy,
            method="krylov",
            model=sw.model,
        )
        g = kr.transmission(fields)
        st = kr.krylov_stats
        assert st.factorizations < len(fields)  # the factorization is really reused
        assert st.max_error <= 1e-10
        pick = [0, 7, 13, 20]
        ref = [
            kwant.smatrix(ring.fsyst, energy, params={**params, "B": b}).transmission(1, 0)
            for b in fields[pick]
        ]
        assert np.max(np.abs(g[pick] - ref)) < 1e-8
        assert np.max(np.abs(g - sw.transmission(fields))) < 1e-8
        assert np.ptp(g) > 1e-2  # the sweep has structure on the scale of the tolerance
        # with probes (all terminal columns): same as the direct path, current conserved
        krp = kr.__class__(
            ring.fsyst,
            field_param="B",
            params=params,
            energy=energy,
            method="krylov",
            probes=probes,
            model=sw.model,
        )
        swp = FieldSweeper(
            ring.fsyst,
            field_param="B",
            params=params,
            energy=energy,
            probes=probes,
            model=sw.model,
        )
        tm = krp.transmission_matrix(fields[:6])
        assert np.max(np.abs(tm - swp.transmission_matrix(fields[:6]))) < 1e-8
        nch = krp.num_modes()
        assert np.max(np.abs(tm.sum(axis=1) - nch)) < 1e-8  # columns: sum_i T_ij = N_j
        assert np.max(np.abs(tm.sum(axis=2) - nch)) < 1e-8  # rows: sum_j T_ij = N_i
        gk = krp.conductance(fields[:6])
        assert np.max(np.abs(gk - swp.conductance(fields[:6]))) < 1e-8


def test_krylov_reuse_onsager_and_unitarity():
    fsyst = square_ring(16, 10, 5, disorder=1.5, seed=11)
    fields = np.linspace(0.0, 4e-3, 9)
    sym = np.concatenate([fields, -fields])
    kr = FieldSweeper(fsyst, field_param="phi", energy=0.8, method="krylov")
    g = kr.transmission(sym)
    assert np.max(np.abs(g[:9] - g[9:])) < 1e-9  # G(B) = G(-B), two terminals
    tm = kr.transmission_matrix(fields[3])
    n = kr.num_modes()
    assert np.max(np.abs(tm.sum(axis=0) - n)) < 1e-9
    s = kr.smatrix(fields[3]).data
    assert np.max(np.abs(s.conj().T @ s - np.eye(len(s)))) < 1e-9  # unitarity of S


def test_krylov_fallback_warns_once_and_stays_exact():
    from ringkit.transport.fastsweep import KrylovFallbackWarning

    fsyst = square_ring(16, 10, 5, disorder=1.5, seed=11)
    fields = np.linspace(0.0, 6e-3, 7)
    kr = FieldSweeper(fsyst, field_param="phi", energy=0.8, method="krylov", max_iter=1)
    with pytest.warns(KrylovFallbackWarning, match=r"of 7 field point") as rec:
        g = kr.transmission(fields)
    assert len(rec) == 1
    assert kr.krylov_stats.fallbacks >= 1 and kr.n_fallbacks == kr.krylov_stats.fallbacks
    ref = [_kwant_t(fsyst, 0.8, "phi", v) for v in fields]
    assert np.max(np.abs(g - ref)) < 1e-10
    with pytest.raises(ParameterError, match="tol"):
        FieldSweeper(fsyst, field_param="phi", energy=0.8, method="krylov", tol=1e-3)
    with pytest.raises(ParameterError, match="field-free leads"):
        FieldSweeper(
            square_ring(14, 9, 5, disorder=1.0, seed=3, field_in_leads=True),
            field_param="phi",
            energy=0.6,
            method="krylov",
        )
