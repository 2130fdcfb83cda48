"""Multi-terminal rings (docs/multiterminal.md): lead layout, gauge, G_ij(B) and R_mn,kl(B).

Independent references used here:

* the gauge: ``kwant.physics.magnetic_gauge`` for the same field distribution (B inside the
  scattering region, 0 in every lead), mode-resolved |t_mn|^2 between all lead pairs;
* a dense multi-terminal Fisher-Lee calculation written here without kwant
  (T_pq = Tr(Gamma_p G Gamma_q G^dagger); D. S. Fisher, P. A. Lee, Phys. Rev. B 23, 6851
  (1981); M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986) for the multi-terminal form), with
  the analytic strip self-energies of tests/test_reference_fisher_lee.py;
* a 1D scattering network of the clean four-lead chain ring (ringkit.analysis.network_multi,
  numpy only, no Green's functions): lattice three-way junctions
  S_ij = -delta_ij + 2i sin k/(2 e^{ik} - e^{-ik}) (the tight-binding form of the symmetric
  junction of M. Büttiker, Y. Imry, M. Ya. Azbel, Phys. Rev. A 30, 1982 (1984), derived in
  ``lattice_junction``) joined by arms of phase e^{ik n};
* Onsager-Büttiker reciprocity R_mn,kl(B) = R_kl,mn(-B) (Büttiker 1986).
"""

from __future__ import annotations

import math
import warnings

import kwant
import numpy as np
import pytest
from scipy import constants
from test_reference_fisher_lee import _ring2d_matrix, _strip_self_energy

from ringkit._validation import ParameterError
from ringkit.analysis.network_multi import (
    lattice_junction,
    network_conductance_matrix,
    ring_network_transmissions,
)
from ringkit.contacts import Contacts, resistance_from_conductance
from ringkit.device import ArmGate, LeadSpec, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.tightbinding.fields import FieldRegimeWarning
from ringkit.transport import field_sweep
from ringkit.transport import multiterminal as mt
from ringkit.transport.ensemble import SerialExecutor

PHI0 = constants.h / constants.e  # CODATA via scipy
A = 10e-9
T_HOP = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)


def _four_lead_device(mode="uniform", *, disorder=0.8, gate=None, cut_angle=math.pi / 2):
    """Small disordered four-lead ring (~200 sites), leads of unequal widths."""
    mat = Material(0.067, fermi_energy=0.2 * T_HOP, disorder_strength=disorder * T_HOP)
    geo = RingGeometry.circular(
        45e-9,
        85e-9,
        width_lower=30e-9,
        leads=[
            LeadSpec(math.pi - 0.45, 30e-9),
            LeadSpec(0.45),
            LeadSpec(math.pi + 0.5, 20e-9),
            LeadSpec(-0.5, 20e-9),
        ],
    )
    return RingDevice(mat, geo, lattice_spacing=A, field_mode=mode, gate=gate, cut_angle=cut_angle)


# ------------------------------------------------------------------------------- device
def test_lead_specs_round_trip_and_two_lead_default_unchanged():
    geo = _four_lead_device().geometry
    assert geo.n_leads == 4 and [geo.lead_side(k) for k in range(4)] == [-1, 1, -1, 1]
    assert RingGeometry.from_dict(geo.to_dict()) == geo
    two = RingGeometry.circular(45e-9, 85e-9)
    assert two.n_leads == 2 and "extra_leads" not in two.to_dict()
    outl = geo.lead_outlines()
    assert [o["side"] for o in outl] == [-1, 1, -1, 1]
    assert math.isclose(outl[2]["width"], 20e-9)
    # polygon: horizontal strip of the lead's width, centred on r_mean sin(angle)
    poly = outl[3]["polygon"]
    assert np.allclose(poly[:, 1].mean(), 65e-9 * math.sin(-0.5))
    assert np.isclose(np.ptp(poly[:, 1]), 20e-9)


def test_built_four_lead_ring_has_four_field_free_leads():
    ring = build_ring(_four_lead_device(), seed=3)
    assert ring.n_leads == 4
    assert [d["n_sites"] for d in ring.lead_info] == [3, 3, 2, 2]
    for d in ring.lead_info:
        x = ring.positions[d["interface"], 0]
        assert np.all(np.sign(x) == d["side"])  # interface on the lead's side


@pytest.mark.parametrize(
    "leads, param",
    [
        ([math.pi - 0.2, 0.3, math.pi + 0.1], "leads"),  # strips overlap on the left
        ([math.pi, 0.3, math.pi / 2], "leads[2].angle"),  # on the y axis: no +-x lead
        ([math.pi, 0.3, 0.5, -0.5, 2.0], "leads"),  # five leads
        ([0.2, 0.3], "leads[0].angle"),  # lead 0 must be on the left
    ],
)
def test_bad_lead_layouts_raise_naming_the_parameter(leads, param):
    with pytest.raises(ParameterError) as err:
        RingGeometry.circular(45e-9, 85e-9, lead_width=20e-9, leads=[LeadSpec(a) for a in leads])
    assert err.value.name == param
    assert "allowed" in str(err.value) or "must" in str(err.value)


def test_leads_on_the_same_lattice_rows_are_refused():
    mat = Material(0.067, fermi_energy=0.2 * T_HOP)
    # geometric strips do not overlap, but on a 10 nm lattice they touch (no free row)
    geo = RingGeometry.circular(
        45e-9, 85e-9, leads=[LeadSpec(math.pi - 0.16, 10e-9), LeadSpec(0.0), LeadSpec(math.pi)]
    )
    with pytest.raises(ParameterError, match="lattice row") as err:
        build_ring(RingDevice(mat, geo, lattice_spacing=A))
    assert err.value.name == "leads"
    chain = RingGeometry.chain(150e-9, n_sites=20, leads=[math.pi, 0.0, math.pi + 0.05])
    with pytest.raises(ParameterError, match="same chain site"):
        build_ring(RingDevice(Material(0.067, fermi_energy=0.01 * T_HOP), chain))


# ------------------------------------------------------------------------------- gauge
def test_four_lead_gauge_agrees_with_kwant_magnetic_gauge():
    """Same field distribution built by kwant.physics.magnetic_gauge (B = 2 phi per plaquette
    in kwant's unit, pi per unit flux; see tests/test_fields.py), leads field-free."""
    ring = build_ring(_four_lead_device(), seed=3)
    fs = ring.fsyst
    h0 = fs.hamiltonian_submatrix(params=ring.params(B=0.0))
    syst = kwant.Builder()
    for k, site in enumerate(fs.sites):
        syst[site] = h0[k, k].real

    def hop(site_a, site_b, peierls):
        return -peierls(site_a, site_b)

    for i in range(fs.graph.num_nodes):
        for j in fs.graph.out_neighbors(i):
            if i < j:
                syst[fs.sites[i], fs.sites[j]] = hop
    lat = kwant.lattice.square(1, norbs=1)
    for k, d in enumerate(ring.lead_info):
        lead = kwant.Builder(kwant.TranslationalSymmetry((d["side"], 0)))
        for s in d["interface"]:
            lead[lat(0, round(ring.positions[s, 1] / A))] = 4.0
        lead[lat.neighbors()] = hop
        syst.attach_lead(lead.substituted(peierls=f"peierls_lead{k}"))
    ref = syst.finalized()
    xs = ring.positions[:, 0] / A
    x_lo, x_hi = xs.min(), xs.max()
    gauge = kwant.physics.magnetic_gauge(ref)
    energy = 1.6
    for b in (0.6, -1.3):
        phi = b * A**2 / PHI0

        def field(pos, phi=phi):
            return 2 * phi if x_lo < pos[0] < x_hi else 0.0

        phases = gauge(field, *([0.0] * 4))
        params = dict(peierls=phases[0], **{f"peierls_lead{k}": phases[k + 1] for k in range(4)})
        s_ref = kwant.smatrix(ref, energy, params=params)
        s_ours = kwant.smatrix(fs, energy, params=ring.params(B=b))
        s_flip = kwant.smatrix(fs, energy, params=ring.params(B=-b))
        worst, flip = 0.0, 0.0
        for p in range(4):
            for q in range(4):
                if p == q:
                    continue
                t_ref = np.abs(s_ref.submatrix(p, q)) ** 2
                worst = max(worst, np.abs(np.abs(s_ours.submatrix(p, q)) ** 2 - t_ref).max())
                flip = max(flip, np.abs(np.abs(s_flip.submatrix(p, q)) ** 2 - t_ref).max())
        assert worst < 1e-9
        assert flip > 1e-3  # the sign of B matters: the comparison can fail


# ------------------------------------------------------------------------------- dense FL
def _dense_h(ring, b_field=0.0, flux=0.0, cut_angle=None):
    """Dense H (units of t) from site positions only (Landau gauge / cut, as documented;
    tests/test_reference_fisher_lee.py) and the interface runs of every lead."""
    h, xy = _ring2d_matrix(ring, b_field=b_field, flux=flux, cut_angle=cut_angle)
    # interfaces: contiguous runs of the outermost columns, ordered like the lead list
    runs = []
    for edge in (xy[:, 0].min(), xy[:, 0].max()):
        col = np.nonzero(xy[:, 0] == edge)[0]
        col = col[np.argsort(xy[col, 1])]
        cuts = np.nonzero(np.diff(xy[col, 1]) > 1)[0] + 1
        runs += [(int(np.sign(edge)), r) for r in np.split(col, cuts)]
    return h, runs


def _dense_tmatrix(h, ifaces, energy_t):
    n = len(h)
    sig = [_strip_self_energy(len(c), energy_t) for c in ifaces]
    a_mat = energy_t * np.eye(n, dtype=complex) - h
    for c, s in zip(ifaces, sig, strict=True):
        a_mat[np.ix_(c, c)] -= s
    g = np.linalg.inv(a_mat)
    gam = [1j * (s - s.conj().T) for s in sig]
    nt = len(ifaces)
    tm = np.zeros((nt, nt))
    for p in range(nt):
        for q in range(nt):
            if p != q:
                gpq = g[np.ix_(ifaces[p], ifaces[q])]
                tm[p, q] = np.trace(gam[p] @ gpq @ gam[q] @ gpq.conj().T).real
    return tm


def _match_interfaces(ring, runs):
    """Order the dense interface runs like ringkit's leads (by side and height)."""
    out = []
    for d in ring.lead_info:
        ys = sorted(np.rint(ring.positions[d["interface"], 1] / A).astype(int))
        for side, r in runs:
            if side == d["side"] and sorted(np.rint(ring.positions[r, 1] / A).astype(int)) == ys:
                out.append(r)
    assert len(out) == ring.n_leads
    return out


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_conductance_matrix_matches_dense_multiterminal_fisher_lee(mode):
    dev = _four_lead_device(mode, cut_angle=-math.pi / 2)
    ring = build_ring(dev, seed=11)
    fields = [0.0, 0.25, -0.4] if mode == "uniform" else [0.0, 0.21 * PHI0, 0.77 * PHI0]
    worst = 0.0
    for e in (1.1, 1.7):  # the two-row leads open at E = t
        g = mt.conductance_matrix_sweep(ring, fields, energy=e * T_HOP).G.values / 2.0
        for k, f in enumerate(fields):
            if mode == "uniform":
                h, runs = _dense_h(ring, b_field=f)
            else:  # the reference draws its own cut at +pi/2 (gauge-equivalent)
                h, runs = _dense_h(ring, flux=f, cut_angle=math.pi / 2)
            tm = _dense_tmatrix(h, _match_interfaces(ring, runs), e)
            off = ~np.eye(4, dtype=bool)
            worst = max(worst, np.abs(-g[k][off] - tm[off]).max())
    assert worst < 1e-9


# ------------------------------------------------------------------------------- sum rules
@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_sum_rules_reciprocity_and_two_terminal_limit(mode):
    ring = build_ring(_four_lead_device(mode), seed=5)
    unit = 0.4 if mode == "uniform" else PHI0 / 0.9  # B in T or flux in Wb
    fields = np.linspace(-1.0, 1.0, 9) * unit
    ds = mt.conductance_matrix_sweep(ring, fields, energy=1.3 * T_HOP)
    g = ds.G.values
    assert ds.G.dims == (ring.field_param, "i", "j") and ds.G.attrs["units"] == "e^2/h"
    assert np.abs(g.sum(axis=-1)).max() < 1e-10 and np.abs(g.sum(axis=-2)).max() < 1e-10
    # Büttiker 1986: G_ij(B) = G_ji(-B), hence R_mn,kl(B) = R_kl,mn(-B)
    assert np.abs(g - np.swapaxes(g[::-1], -1, -2)).max() < 1e-10
    res = mt.resistance_sweep(ds, ["0,1,2,3", "2,3,0,1", "0,2,1,3", "1,3,0,2"])
    r = res.R.values
    assert np.abs(r[:, 0] - r[::-1, 1]).max() < 1e-8
    assert np.abs(r[:, 2] - r[::-1, 3]).max() < 1e-8
    assert np.abs(r[:, 0] - r[::-1, 0]).max() > 1e-4  # four-terminal R is not even in B
    assert np.allclose(res.R_ohm.values, r * constants.h / constants.e**2, rtol=1e-14)
    assert res.R_ohm.attrs["units"] == "ohm" and res.R.attrs["units"] == "h/e^2"


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_two_lead_ring_limit_equals_field_sweep(mode):
    mat = Material(0.067, fermi_energy=0.2 * T_HOP, disorder_strength=0.8 * T_HOP)
    geo = RingGeometry.circular(45e-9, 85e-9, lead_angles=(math.pi + 0.2, 0.25))
    ring = build_ring(RingDevice(mat, geo, lattice_spacing=A, field_mode=mode), seed=2)
    fields = np.linspace(0, 0.4, 5) * (1.0 if mode == "uniform" else 2 * PHI0)
    for opts in ({}, {"l_phi": 300e-9, "n_probes": 12}):
        ds = mt.conductance_matrix_sweep(ring, fields, energy=1.2 * T_HOP, **opts)
        ref = field_sweep(ring, fields, energy=1.2 * T_HOP, **opts).G.values
        assert np.abs(ds.G.values[:, 1, 0] + ref).max() < 1e-10
        assert np.abs(ds.G.values[:, 0, 0] - ref).max() < 1e-10
        two = mt.resistance_sweep(ds, "0,1,0,1", allow_shared=True).R.values[:, 0]
        assert np.abs(two - 1.0 / ref).max() < 1e-9 * np.abs(1 / ref).max()
    # finite temperature, the one thermal policy: the dense "grid" rule gives today's G to
    # 1e-10 (same energies and weights); the adaptive rule agrees within its error estimate
    kw = dict(energy=1.2 * T_HOP, temperature=0.4, thermal_tol=1e-3)
    fields = fields[1::2]  # two fields: the grid rule takes ~90 energies
    ds = mt.conductance_matrix_sweep(ring, fields, thermal_method="grid", **kw)
    ref = field_sweep(ring, fields, thermal_method="grid", **kw).G.values
    assert ds.attrs["n_energies"] > 10
    assert np.abs(ds.G.values[:, 0, 0] - ref).max() < 1e-10
    adaptive = mt.conductance_matrix_sweep(ring, fields, **kw)
    err = adaptive.attrs["thermal_error_estimate"]
    assert err <= 1e-3 and adaptive.attrs["thermal_method"] == "adaptive"
    assert np.abs(adaptive.G.values[:, 0, 0] - ref).max() < 1e-3


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_thermal_probe_and_ensemble_paths_conserve_current_and_are_reciprocal(mode):
    dev = _four_lead_device(mode)
    ring = build_ring(dev, seed=4)
    unit = 1.0 if mode == "uniform" else PHI0
    fields = np.array([-0.35, 0.0, 0.35]) * unit
    ds = mt.conductance_matrix_sweep(
        ring,
        fields,
        energy=1.3 * T_HOP,
        temperature=0.3,
        l_phi=400e-9,
        n_probes=16,
        thermal_tol=1e-2,  # sum rules and reciprocity are exact for any energy set
    )
    g = ds.G.values
    assert ds.attrs["n_energies"] > 1 and ds.attrs["n_probes"] == 16
    assert np.abs(g.sum(axis=-1)).max() < 1e-10 and np.abs(g.sum(axis=-2)).max() < 1e-10
    assert np.abs(g - np.swapaxes(g[::-1], -1, -2)).max() < 1e-10
    # ensemble: each realization equals the single-ring computation for that seed
    ens = mt.ensemble_conductance_matrices(
        dev, fields, [4, 9], executor=SerialExecutor(), energy=1.3 * T_HOP
    )
    assert ens.G.dims == ("seed", ring.field_param, "i", "j")
    single = mt.conductance_matrix_sweep(ring, fields, energy=1.3 * T_HOP).G.values
    assert np.abs(ens.G.sel(seed=4).values - single).max() < 1e-12
    r = mt.resistance_sweep(ens, "0,1,2,3").R
    assert r.dims == ("seed", ring.field_param, "config")


# ------------------------------------------------------------------------------- errors
def test_three_lead_ring_sum_rules_and_reciprocity():
    mat = Material(0.067, fermi_energy=0.2 * T_HOP, disorder_strength=0.8 * T_HOP)
    geo = RingGeometry.circular(
        45e-9, 85e-9, leads=[LeadSpec(math.pi - 0.4, 30e-9), LeadSpec(0.2), LeadSpec(-2.3, 20e-9)]
    )
    ring = build_ring(RingDevice(mat, geo, lattice_spacing=A), seed=8)
    fields = np.linspace(-0.3, 0.3, 7)
    ds = mt.conductance_matrix_sweep(ring, fields, energy=1.4 * T_HOP)
    g = ds.G.values
    assert g.shape == (7, 3, 3)
    assert np.abs(g.sum(axis=-1)).max() < 1e-10 and np.abs(g.sum(axis=-2)).max() < 1e-10
    r = mt.resistance_sweep(ds, ["0,1,0,2", "0,2,0,1"], allow_shared=True).R.values
    assert np.abs(r[:, 0] - r[::-1, 1]).max() < 1e-8  # three-terminal: R_01,02(B) = R_02,01(-B)


def test_resistance_errors_name_the_parameter():
    g = np.array([[2.0, -1.0, -1.0, 0.0], [-1.0, 2.0, -1.0, 0.0], [-1.0, -1.0, 2.0, 0.0]])
    g = np.pad(g, ((0, 1), (0, 0)))  # contact 3 decoupled
    with pytest.raises(ParameterError, match="singular") as err:
        resistance_from_conductance(g, "0,1,2,3")
    assert err.value.name == "contacts"
    with pytest.raises(ParameterError, match="current contact") as err:
        resistance_from_conductance(g, "0,1,1,2")
    assert err.value.name == "contacts.voltage"
    with pytest.raises(ParameterError):
        Contacts.parse("0,1,2")
    for text in ("0,2,1,3", "0 2 1 3", "I02V13", "I0-2,V1-3", (0, 2, 1, 3)):
        c = Contacts.parse(text)
        assert c.current == (0, 2) and c.voltage == (1, 3) and c.label == "R_02,13"
    assert Contacts.parse("0,2,1,3").reversed() == Contacts((1, 3), (0, 2))
    with pytest.raises(ParameterError):
        resistance_from_conductance(g, "0,1,2,7")
    ring4 = build_ring(_four_lead_device("flux_tube"), seed=2)
    with pytest.raises(ParameterError) as err:  # refused before any computation
        mt.resistance_field_sweep(ring4, [0.0], ["0,1,2,3", "0,1,1,3"])
    assert err.value.name == "contacts.voltage"
    one = mt.resistance_field_sweep(ring4, [0.0, 0.3 * PHI0], "0,2,1,3", energy=1.3 * T_HOP)
    assert one.R_ohm.dims == ("flux", "config") and one.G.dims == ("flux", "i", "j")
    # a physical case: a one-row lead is closed below E = 2t, its contact floats undefined
    mat = Material(0.067, fermi_energy=0.2 * T_HOP)
    geo = RingGeometry.circular(
        45e-9, 85e-9, leads=[LeadSpec(math.pi), LeadSpec(0.0), LeadSpec(math.pi + 0.7, 10e-9)]
    )
    ring = build_ring(RingDevice(mat, geo, lattice_spacing=A, field_mode="flux_tube"), seed=0)
    ds = mt.conductance_matrix_sweep(ring, [0.0, 0.3 * PHI0], energy=1.2 * T_HOP)
    with pytest.raises(ParameterError, match="singular"):
        mt.resistance_sweep(ds, "0,1,2,0", allow_shared=True)
    uniform = build_ring(RingDevice(mat, geo, lattice_spacing=A), seed=0)
    ds = mt.conductance_matrix_sweep(uniform, [0.0, 0.1], energy=1.2 * T_HOP)
    assert np.all(ds.G.values[:, 2, :] == 0) and np.all(ds.G.values[:, :, 2] == 0)
    assert np.all(mt.resistance_sweep(ds, "0,1,0,1", allow_shared=True).R.values > 0)
    with pytest.raises(ParameterError, match="singular") as err:
        mt.resistance_sweep(ds, "0,2,1,2", allow_shared=True)
    assert err.value.name == "contacts"


# ------------------------------------------------------------------------------- 1D network
@pytest.mark.parametrize("mode", ["flux_tube", "uniform"])
def test_clean_symmetric_four_lead_chain_ring_matches_network(mode):
    """R_mn,kl of a clean symmetric four-lead 1D ring against the independent network.

    Uniform field: the only loop is the regular 24-gon of sites, Phi = B * area(24-gon); the
    lead stubs at heights y != 0 carry no phase (trees: a pure gauge), which this checks."""
    n = 24
    radius = 150e-9
    a_chain = 2 * math.pi * radius / n
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a_chain**2)
    mat = Material(0.067, fermi_energy=0.2 * t)
    angles = [math.pi - math.pi / 4, math.pi / 4, math.pi + math.pi / 4, -math.pi / 4]
    geo = RingGeometry.chain(radius, n_sites=n, leads=angles)
    ring = build_ring(RingDevice(mat, geo, field_mode=mode))
    sites = [round(((ang - angles[0]) % (2 * math.pi)) / (2 * math.pi / n)) % n for ang in angles]
    fluxes = np.array([0.0, 0.13, 0.31, 0.5, 0.77]) * PHI0
    area = 0.5 * n * radius**2 * math.sin(2 * math.pi / n)  # regular n-gon inscribed in r
    configs = ["0,1,2,3", "0,2,1,3", "0,3,1,2", "2,3,0,1"]
    worst = 0.0
    for e in (0.45, 1.3, 2.6):
        k = math.acos(1 - e / 2)
        sweep = fluxes if mode == "flux_tube" else fluxes / area  # B in T
        with warnings.catch_warnings():
            # "flux per plaquette" is meaningless for a chain (no plaquettes, one loop)
            warnings.simplefilter("ignore", FieldRegimeWarning)
            ds = mt.conductance_matrix_sweep(ring, sweep, energy=e * t)
        r_ours = mt.resistance_sweep(ds, configs).R.values
        for f_idx, f in enumerate(fluxes):
            # sites on a circle of n bonds: k R dtheta = k a * (bonds between junctions)
            tm = ring_network_transmissions(
                [2 * math.pi * j / n for j in sites],
                k * n / (2 * math.pi),
                2 * math.pi * f / PHI0,
                junction=lattice_junction(k),
            )
            g = network_conductance_matrix(tm)
            for c_idx, c in enumerate(configs):
                ref = resistance_from_conductance(g, c)
                worst = max(worst, abs(r_ours[f_idx, c_idx] - ref) / max(1.0, abs(ref)))
    assert worst < 1e-9


# ------------------------------------------------------------------------------- electric AB
def _gated_chain_ring(n_leads: int):
    """Clean 40-site chain ring (r = 150 nm), gate on the upper arm (between leads 1 and 0)."""
    n, radius = 40, 150e-9
    a_chain = 2 * math.pi * radius / n
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a_chain**2)
    mat = Material(0.067, fermi_energy=1.1 * t)  # k a = 1.10 (coarse on purpose: short ring)
    angles = [3 * math.pi / 4, math.pi / 4, 5 * math.pi / 4, -math.pi / 4][:n_leads]
    geo = RingGeometry.chain(radius, n_sites=n, leads=angles)
    dev = RingDevice(mat, geo, field_mode="flux_tube", gate=ArmGate("upper", 0.0), max_kfa=1.2)
    return build_ring(dev), t


def test_two_terminal_ab_phase_is_rigid_under_an_arm_gate():
    """Phase rigidity: G(Phi) = G(-Phi) for two terminals (Büttiker 1986; Yacoby et al.,
    PRL 74, 4047 (1995)), so the h/e phase is 0 or pi at every gate value (to 1e-8)."""
    from ringkit.analysis.fourterminal import phase_versus_gate

    fluxes = np.linspace(-1.0, 1.0, 65) * PHI0  # symmetric about 0
    gates_t = np.linspace(0.0, 0.6, 13)
    for n_leads, cfg in ((2, "0,1,0,1"), (4, "0,1,0,1"), (4, "0,2,0,2")):
        ring, t = _gated_chain_ring(n_leads)
        ds = mt.gate_conductance_sweep(ring, gates_t * t, fluxes, energy=1.1 * t)
        r = mt.resistance_sweep(ds, cfg, allow_shared=True).R.values[..., 0]
        ph = phase_versus_gate(gates_t * t, fluxes, r, 1.0 / PHI0)
        dist = np.abs(np.angle(np.exp(2j * ph.phase.values)))  # 0 for phases 0 or pi
        assert dist.max() < 1e-8
        assert ph.amplitude.values.max() > 1e-3  # there is an h/e component to speak of
    # uniform field, disordered 2D four-lead ring, two-terminal R_01,01 (symmetric B grid)
    ring = build_ring(_four_lead_device("uniform", gate=ArmGate("upper", 0.0)), seed=7)
    fields = np.linspace(-0.4, 0.4, 41)
    gates = np.array([0.0, 0.1, 0.2]) * T_HOP
    ds = mt.gate_conductance_sweep(ring, gates, fields, energy=1.3 * T_HOP)
    r = mt.resistance_sweep(ds, "0,1,0,1", allow_shared=True).R.values[..., 0]
    ph = phase_versus_gate(gates, fields, r, ring.loop_area / PHI0)
    assert np.abs(np.angle(np.exp(2j * ph.phase.values))).max() < 1e-8


def test_four_terminal_ab_phase_moves_continuously_with_the_gate():
    """R_02,13 (current 0 -> 2 on the left, voltage 1 - 3 on the right) of the four-lead chain
    ring: the h/e phase is not pinned and moves by more than pi/2 as the upper-arm gate goes
    from 0 to 0.6 t (0 to 0.61 meV for this ring, t = 1.02 meV), continuously (steps
    < 0.5 rad between 25 gate values, amplitude never below 30 % of its maximum)."""
    from ringkit.analysis.fourterminal import phase_versus_gate

    ring, t = _gated_chain_ring(4)
    assert math.isclose(t / constants.e * 1e3, 1.02, rel_tol=0.01)  # t in meV
    fluxes = np.linspace(-1.0, 1.0, 65) * PHI0
    gates = np.linspace(0.0, 0.6, 25) * t
    ds = mt.gate_conductance_sweep(ring, gates, fluxes, energy=1.1 * t)
    r = mt.resistance_sweep(ds, "0,2,1,3").R.values[..., 0]
    ph = phase_versus_gate(gates, fluxes, r, 1.0 / PHI0)
    un = ph.phase_unwrapped.values
    assert np.abs(np.diff(un)).max() < 0.5
    assert np.ptp(un) > math.pi / 2
    amp = ph.amplitude.values
    assert amp.min() > 0.3 * amp.max()
    # and its odd part in flux is a sizeable part of the trace (not phase-rigid)
    odd = 0.5 * (r - r[:, ::-1])
    assert np.abs(odd).max() > 0.1 * np.ptp(r, axis=1).max()


def test_multiterminal_dataset_round_trips_through_netcdf(tmp_path):
    from ringkit.transport import device_from_attrs, load_dataset, save_dataset

    dev = _four_lead_device("flux_tube")
    ring = build_ring(dev, seed=1)
    ds = mt.conductance_matrix_sweep(ring, [0.0, 0.4 * PHI0], energy=1.3 * T_HOP)
    res = mt.resistance_sweep(ds, ["0,1,2,3", "0,2,1,3"])
    for d, name in ((ds, "g.nc"), (res, "r.nc")):
        back = load_dataset(save_dataset(d, tmp_path / name))
        assert back.identical(d)
    assert device_from_attrs(ds.attrs) == dev
