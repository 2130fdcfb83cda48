"""Tests of the low-rank flux-tube path (ringkit.transport.lowrank).

Every check compares against something computed without the code under test:

* kwant's own scattering solver (``kwant.smatrix``, mode matching) on the same system with the
  branch-cut phases set through kwant's value functions;
* ``kwant.greens_function`` with wide-band self-energy terminals, and a dense numpy inverse of
  ``E - H - Sigma`` with the Fisher-Lee formula (D. S. Fisher, P. A. Lee, Phys. Rev. B 23, 6851
  (1981)), for dephasing probes;
* exact symmetries: period h/e of a pure Aharonov-Bohm flux and independence of the cut position
  (docs/physics.md §4.5), two-terminal reciprocity G(flux) = G(-flux) (Büttiker, Phys. Rev. Lett.
  57, 1761 (1986); docs/physics.md §5.3), current conservation of the conductance matrix
  (docs/physics.md §5.2);
* CODATA h/e from scipy.constants for the detected phase per unit flux.

The test systems come from tests/lowrank_systems.py (plain kwant, no ringkit code).
"""

from __future__ import annotations

import copy
import math
import warnings

import kwant
import numpy as np
import pytest
import scipy.constants as sc
from lowrank_systems import (
    chain_ring,
    flux_tube_ring,
    ring_sites_near,
    side_coupled_ring,
)

from ringkit import ParameterError
from ringkit.transport.lowrank import (
    FluxTubeModel,
    FluxTubeSweeper,
    LowRankFallbackWarning,
    thermal_flux_sweep,
)

H_OVER_E = sc.h / sc.e  # CODATA 2018 exact SI value, independent of ringkit.units
TOL = 1e-10  # exactness required by issue 8 (absolute, in units of e^2/h per spin)
FLUXES = np.array([-2.7, -0.5, 0.0, 0.13, 0.5, 0.77, 1.37, 3.9]) * H_OVER_E


def kwant_t(fsyst, energy, fluxes, i=1, j=0, **extra):
    """T_ij from kwant.smatrix at each flux (value functions evaluated by kwant)."""
    return np.array(
        [
            kwant.smatrix(fsyst, energy, params=dict(flux=f, **extra)).transmission(i, j)
            for f in fluxes
        ]
    )


# ------------------------------------------------------------------------ cut detection
def test_detects_exactly_the_cut_bonds_with_the_codata_phase_rate():
    fsyst = flux_tube_ring(12.0, 7.0, hole_offset=(0.0, 1.5), disorder=1.0)
    model = FluxTubeModel(fsyst)
    tags = {tuple(s.tag) for s in fsyst.sites}
    # bonds (0, y)-(1, y) above the hole centre y = 1.5 cross the cut x = 0.5 (geometry)
    crossing = [y for (x, y) in tags if x == 0 and (1, y) in tags and y > 1.5]
    assert model.cut.n_entries == 2 * len(crossing)
    cut_tags = {tuple(fsyst.sites[i].tag) for i in model.cut.sites}
    assert cut_tags == {(x, y) for y in crossing for x in (0, 1)}
    # phase 2 pi flux/(h/e) per crossing (docs/physics.md §4.5), sign by direction of the hop
    np.testing.assert_allclose(np.abs(model.cut.rates), 2 * np.pi / H_OVER_E, rtol=1e-12)
    assert np.sum(model.cut.rates > 0) == len(crossing)


def test_builder_metadata_shortcut_finds_the_same_cut(monkeypatch):
    # only the cut bonds are value functions: the model re-evaluates just those (kwant Builder
    # metadata); the result must equal a full re-evaluation of the Hamiltonian
    import ringkit.transport._lowrank_cut as cutmod

    fsyst = flux_tube_ring(12.0, 7.0, value_functions="cut", disorder=1.0, seed=2)
    fast = FluxTubeModel(fsyst)
    h0, offsets = cutmod.hamiltonian_coo(fsyst, {"flux": 0.0})
    assert cutmod._targeted_values(fsyst, "flux", {}, (0.1,), h0, offsets) is not None
    monkeypatch.setattr(cutmod, "_targeted_values", lambda *args: None)
    full = FluxTubeModel(fsyst)
    for name in ("rows", "cols", "values"):
        np.testing.assert_array_equal(getattr(fast.cut, name), getattr(full.cut, name))
    np.testing.assert_allclose(fast.cut.rates, full.cut.rates, rtol=1e-14)
    got = FluxTubeSweeper(fast, energy=0.9).transmission(FLUXES)
    np.testing.assert_allclose(got, kwant_t(fsyst, 0.9, FLUXES), rtol=0, atol=TOL)


# ------------------------------------------------------------------------ exactness vs kwant
CASES = {
    # name: (builder kwargs, energies): 1 open mode (W = 3), 3 and 4 modes (W = 8), ...
    "narrow-1mode": (dict(lead_width=3, disorder=1.0, seed=1), (0.8, 1.6)),
    "multimode-3": (dict(lead_width=8, disorder=1.0, seed=2), (1.3, 2.2)),
    "asymmetric-arms": (dict(lead_width=5, hole_offset=(0.0, 2.0), disorder=0.5, seed=3), (0.6,)),
    "asymmetric-clean": (dict(lead_width=5, hole_offset=(0.5, -1.5)), (1.1,)),
    "other-disorder": (dict(lead_width=5, disorder=2.0, seed=7), (0.9,)),
}


@pytest.mark.parametrize("name", list(CASES))
def test_transmission_equals_kwant_smatrix(name):
    kwargs, energies = CASES[name]
    fsyst = flux_tube_ring(12.0, 7.0, **kwargs)
    model = FluxTubeModel(fsyst)
    for energy in energies:
        sweeper = FluxTubeSweeper(model, energy=energy)
        got = sweeper.transmission(FLUXES)
        ref = kwant_t(fsyst, energy, FLUXES)
        np.testing.assert_allclose(got, ref, rtol=0, atol=TOL)
        assert sweeper.n_fallback == 0
        # open modes of a clean strip of W sites: #{n : 2t(1 - cos(n pi/(W+1))) < E}
        # (hard-wall transverse levels, closed form; docs/physics.md §3)
        w = kwargs["lead_width"]
        n_open = int(np.sum(2 * (1 - np.cos(np.arange(1, w + 1) * np.pi / (w + 1))) < energy))
        assert sweeper.n_channels == (n_open, n_open)


def test_multi_orbital_sites_equal_kwant():
    # two orbitals per site with a Zeeman term sigma_z: the bookkeeping of orbital offsets
    fsyst = flux_tube_ring(10.0, 6.0, lead_width=4, disorder=1.0, norbs=2, zeeman=0.15)
    got = FluxTubeSweeper(fsyst, energy=1.1).transmission(FLUXES[:5])
    np.testing.assert_allclose(got, kwant_t(fsyst, 1.1, FLUXES[:5]), rtol=0, atol=TOL)
    # with two probes (self-energy -i eta/2 on both orbitals of the site)
    sites = ring_sites_near(fsyst, [1.2, 4.1], 8.0)
    sweeper = FluxTubeSweeper(fsyst, energy=1.1, probe_sites=sites, probe_eta=[0.3, 0.5])
    assert sweeper.n_channels[2:] == (2, 2)
    tm = sweeper.transmission_matrix(FLUXES[[2, 6]])
    extended = _with_probe_terminals(fsyst, sites, [0.3, 0.5], norbs=2)
    for k, f in enumerate(FLUXES[[2, 6]]):
        gf = kwant.greens_function(extended, 1.1, params=dict(flux=f))
        ref = [[gf.transmission(i, j) if i != j else 0.0 for j in range(4)] for i in range(4)]
        np.testing.assert_allclose(tm[k], ref, rtol=0, atol=TOL)


def test_three_real_leads_conductance_matrix_equals_kwant():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=4, third_lead=True, disorder=1.0, seed=5)
    sweeper = FluxTubeSweeper(fsyst, energy=1.2)
    got = sweeper.conductance_matrix(FLUXES[:4])
    for k, f in enumerate(FLUXES[:4]):
        ref = kwant.smatrix(fsyst, 1.2, params=dict(flux=f)).conductance_matrix()
        np.testing.assert_allclose(got[k], ref, rtol=0, atol=TOL)


def test_many_dependent_entries_are_still_exact_and_max_entries_refuses_them():
    # the flux spread over all 10 bonds of a chain ring (like a field): 20 entries
    fsyst = chain_ring(10, variant="all_bonds")
    sweeper = FluxTubeSweeper(fsyst, energy=0.7)
    assert sweeper.model.cut.n_entries == 20
    np.testing.assert_allclose(
        sweeper.transmission(FLUXES), kwant_t(fsyst, 0.7, FLUXES), rtol=0, atol=TOL
    )
    with pytest.raises(ParameterError, match="max_entries"):
        FluxTubeModel(fsyst, max_entries=10)


# ------------------------------------------------------------------------ symmetries
def test_period_h_over_e_and_onsager_symmetry():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=6, hole_offset=(0.0, 1.0), disorder=1.5, seed=4)
    sweeper = FluxTubeSweeper(fsyst, energy=1.4)
    phi = np.linspace(-1.3, 2.1, 61) * H_OVER_E
    g = sweeper.transmission(phi)
    assert np.ptp(g) > 0.05  # the flux really matters
    np.testing.assert_allclose(sweeper.transmission(phi + H_OVER_E), g, rtol=0, atol=TOL)
    np.testing.assert_allclose(sweeper.transmission(phi - 3 * H_OVER_E), g, rtol=0, atol=TOL)
    np.testing.assert_allclose(sweeper.transmission(-phi), g, rtol=0, atol=TOL)


def test_result_does_not_depend_on_where_the_cut_is_drawn():
    common = dict(lead_width=5, hole_offset=(0.0, 1.0), disorder=1.0, seed=6)
    top = FluxTubeSweeper(flux_tube_ring(12.0, 7.0, **common), energy=0.9)
    shifted = FluxTubeSweeper(flux_tube_ring(12.0, 7.0, cut_x=2.5, **common), energy=0.9)
    bottom = FluxTubeSweeper(flux_tube_ring(12.0, 7.0, cut="bottom", **common), energy=0.9)
    g = top.transmission(FLUXES)
    np.testing.assert_allclose(shifted.transmission(FLUXES), g, rtol=0, atol=TOL)
    np.testing.assert_allclose(bottom.transmission(FLUXES), g, rtol=0, atol=TOL)


# ------------------------------------------------------------------------ dephasing probes
class _WideBandTerminal:
    """Self-energy-only kwant lead -i eta/2 on every orbital of one site (docs/engine.md §3 (B))."""

    parameters = frozenset()

    def __init__(self, eta: float, norbs: int = 1) -> None:
        self.eta, self.norbs = eta, norbs

    def selfenergy(self, energy, args=(), *, params=None):
        return -0.5j * self.eta * np.eye(self.norbs)


def _with_probe_terminals(fsyst, sites, etas, norbs=1):
    out = copy.copy(fsyst)
    out.leads = list(fsyst.leads) + [_WideBandTerminal(e, norbs) for e in etas]
    out.lead_interfaces = list(fsyst.lead_interfaces) + [np.array([s]) for s in sites]
    out.lead_paddings = list(fsyst.lead_paddings) + [np.array([], dtype=int) for _ in sites]
    return out


def _dense_fisher_lee(fsyst, energy, flux, sites, etas):
    """Independent dense computation: G = (E - H - Sigma)^-1, T_pq = Tr(G_p G G_q G^+)."""
    h = fsyst.hamiltonian_submatrix(params=dict(flux=flux))
    a = energy * np.eye(h.shape[0]) - h
    blocks = [
        (np.asarray(i), lead.selfenergy(energy, params=dict(flux=flux)))
        for i, lead in zip(fsyst.lead_interfaces, fsyst.leads, strict=True)
    ]
    blocks += [(np.array([s]), np.array([[-0.5j * e]])) for s, e in zip(sites, etas, strict=True)]
    for idx, sig in blocks:
        a[np.ix_(idx, idx)] -= sig
    g = np.linalg.inv(a)
    n = len(blocks)
    t = np.zeros((n, n))
    for p, (ip, sp_) in enumerate(blocks):
        for q, (iq, sq) in enumerate(blocks):
            if p != q:
                gpq = g[np.ix_(ip, iq)]
                gam_p, gam_q = 1j * (sp_ - sp_.conj().T), 1j * (sq - sq.conj().T)
                t[p, q] = np.trace(gam_p @ gpq @ gam_q @ gpq.conj().T).real
    return t


def test_probe_transmission_matrix_equals_greens_function_and_dense():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=5, hole_offset=(0.0, 1.0), disorder=1.0, seed=8)
    sites = ring_sites_near(fsyst, np.linspace(0.3, 2 * np.pi - 0.3, 6), 9.5)
    etas = [0.2, 0.35, 0.5, 0.2, 0.8, 0.4]
    energy = 1.2
    sweeper = FluxTubeSweeper(fsyst, energy=energy, probe_sites=sites, probe_eta=etas)
    assert sweeper.model.n_terminals == 8
    fluxes = FLUXES[[1, 3, 5, 7]]
    tm = sweeper.transmission_matrix(fluxes)
    cm = sweeper.conductance_matrix(fluxes)
    extended = _with_probe_terminals(fsyst, sites, etas)
    for k, f in enumerate(fluxes):
        gf = kwant.greens_function(extended, energy, params=dict(flux=f))
        for i in range(8):
            for j in range(8):
                if i != j:
                    assert abs(tm[k, i, j] - gf.transmission(i, j)) < TOL
        np.testing.assert_allclose(
            tm[k], _dense_fisher_lee(fsyst, energy, f, sites, etas), rtol=0, atol=TOL
        )
        # current conservation: rows of C sum to zero as well as columns (Büttiker sum rules)
        np.testing.assert_allclose(cm[k].sum(axis=1), 0.0, atol=1e-12)
        np.testing.assert_allclose(cm[k].sum(axis=0), 0.0, atol=1e-12)
    # the two-lead transmission from the same sweeper agrees with the matrix
    np.testing.assert_allclose(sweeper.transmission(fluxes), tm[:, 1, 0], rtol=0, atol=1e-13)
    np.testing.assert_allclose(
        sweeper.transmission(fluxes, source=3, drain=6), tm[:, 6, 3], rtol=0, atol=1e-13
    )


def test_with_probes_equals_a_freshly_built_model():
    # reference: a model built from scratch with the same probes (its own Hamiltonian
    # evaluation and cut detection) and the dense Fisher-Lee computation
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=4, disorder=1.0, seed=9)
    sites = ring_sites_near(fsyst, [1.0, 2.2, 4.0, 5.3], 9.5)
    etas = [0.3, 0.5, 0.2, 0.4]
    base = FluxTubeModel(fsyst)
    base.local_dos(0.9)  # factorizes in the MUMPS context that the derived model shares
    derived = base.with_probes(probe_sites=sites, probe_eta=etas)
    fresh = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    assert derived.h0 is base.h0 and derived.n_terminals == 6 and base.n_terminals == 2
    fluxes = FLUXES[[0, 3, 6]]
    a = derived.sweeper(0.9).transmission_matrix(fluxes)
    b = fresh.sweeper(0.9).transmission_matrix(fluxes)
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-13)
    for k, f in enumerate(fluxes):
        ref = _dense_fisher_lee(fsyst, 0.9, f, sites, etas)
        np.testing.assert_allclose(a[k], ref, rtol=0, atol=TOL)
    # the base model is untouched, and dropping the probes again gives the two-lead result
    np.testing.assert_allclose(
        derived.with_probes().sweeper(0.9).transmission(fluxes),
        kwant_t(fsyst, 0.9, fluxes),
        rtol=0,
        atol=TOL,
    )
    assert base.n_terminals == 2
    with pytest.raises(ParameterError, match="probe_eta"):
        base.with_probes(probe_sites=sites)


def test_model_local_dos_equals_kwant_ldos_and_the_dense_spectral_function():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=4, disorder=1.0, seed=9)
    model = FluxTubeModel(fsyst)
    for energy, flux in ((0.9, 0.0), (1.7, 0.37 * H_OVER_E)):
        # reference: kwant.ldos (kwant's scattering wave functions) with the cut phases set
        ref = kwant.ldos(fsyst, energy, params=dict(flux=flux))
        got = model.local_dos(energy, flux)
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-10 * ref.max())
    # with probes: -Im G_ii / pi of a dense inverse (spectral sum rule G Gamma G^+ = i(G - G^+))
    sites = ring_sites_near(fsyst, [1.0, 4.0], 9.5)
    derived = model.with_probes(probe_sites=sites, probe_eta=[0.4, 0.7])
    flux = 0.61 * H_OVER_E
    h = fsyst.hamiltonian_submatrix(params=dict(flux=flux))
    a = 1.1 * np.eye(h.shape[0]) - h
    for idx, lead in zip(fsyst.lead_interfaces, fsyst.leads, strict=True):
        a[np.ix_(idx, idx)] -= lead.selfenergy(1.1, params=dict(flux=flux))
    a[sites, sites] += 0.5j * np.array([0.4, 0.7])
    dense = -np.diag(np.linalg.inv(a)).imag / np.pi
    np.testing.assert_allclose(derived.local_dos(1.1, flux), dense, rtol=0, atol=1e-10)


def test_probes_keep_onsager_and_period():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=4, disorder=1.0, seed=9)
    sites = ring_sites_near(fsyst, [1.0, 2.2, 4.0, 5.3], 9.5)
    sweeper = FluxTubeSweeper(fsyst, energy=0.9, probe_sites=sites, probe_eta=0.3)
    phi = np.linspace(-0.9, 1.4, 25) * H_OVER_E
    c = sweeper.conductance_matrix(phi)
    # reciprocity of the full matrix: C(flux) = C(-flux)^T (Büttiker 1986)
    np.testing.assert_allclose(
        sweeper.conductance_matrix(-phi), np.swapaxes(c, 1, 2), rtol=0, atol=TOL
    )
    np.testing.assert_allclose(sweeper.conductance_matrix(phi + H_OVER_E), c, rtol=0, atol=TOL)


def test_one_floating_probe_matches_the_closed_form():
    # G_eff = T21 + T23 T31 / (T31 + T32) for one floating probe 3 (docs/physics.md §7.1),
    # with the transmissions from kwant.greens_function (terminals 0, 1 = leads, 2 = probe)
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=4, hole_offset=(0.0, 1.0), disorder=1.0, seed=12)
    site = ring_sites_near(fsyst, [np.pi / 2 + 0.4], 9.5)
    sweeper = FluxTubeSweeper(fsyst, energy=1.0, probe_sites=site, probe_eta=0.6)
    fluxes = FLUXES[[1, 3, 6]]
    got = sweeper.conductance(fluxes)
    extended = _with_probe_terminals(fsyst, site, [0.6])
    for k, f in enumerate(fluxes):
        gf = kwant.greens_function(extended, 1.0, params=dict(flux=f))
        t10, t12, t20, t21 = (gf.transmission(i, j) for i, j in ((1, 0), (1, 2), (2, 0), (2, 1)))
        assert abs(got[k] - (t10 + t12 * t20 / (t20 + t21))) < TOL
    probes_mod = pytest.importorskip("ringkit.transport.probes")
    same = FluxTubeSweeper(fsyst, energy=1.0, probes=probes_mod.DephasingProbes(site, 0.6))
    np.testing.assert_allclose(same.conductance(fluxes), got, rtol=0, atol=1e-13)


# ------------------------------------------------------------------------ thermal averaging
def test_thermal_sweep_equals_weighted_kwant_sum():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=5, disorder=1.0, seed=10)
    mu, kt = 1.0, 0.02
    energies = mu + kt * np.linspace(-5.0, 5.0, 7)
    # -df/dE = 1/(4 kT cosh^2((E - mu)/2kT)) (derivative of the Fermi function; docs/physics.md
    # §5.4), trapezoid-free point weights
    w = 1.0 / (4 * kt * np.cosh((energies - mu) / (2 * kt)) ** 2) * (energies[1] - energies[0])
    fluxes = FLUXES[2:5]
    got = thermal_flux_sweep(fsyst, fluxes, energies, w)
    ref = sum(wk * kwant_t(fsyst, e, fluxes) for e, wk in zip(energies, w, strict=True))
    np.testing.assert_allclose(got, ref, rtol=0, atol=TOL)
    model = FluxTubeModel(fsyst)
    got_c = thermal_flux_sweep(model, fluxes, energies, w, quantity="conductance_matrix")
    np.testing.assert_allclose(got_c[:, 1, 0], -ref, rtol=0, atol=TOL)


def test_works_with_the_engine_thermal_average():
    thermal = pytest.importorskip("ringkit.transport.thermal")
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=5, disorder=1.0, seed=13)
    sweeper = FluxTubeSweeper(fsyst, energy=1.0)
    fluxes = FLUXES[[3, 6]]
    # k_B T = 0.01 t in lattice units (energy_unit = 1 J, so temperature = 0.01 J / k_B)
    res = thermal.thermal_conductance(sweeper, fluxes, 0.01 / sc.k, energy_unit=1.0, tol=1e-3)
    assert res.n_energies > 5
    # independent reference: plain kwant.smatrix at the policy's energies and weights
    ref = sum(
        w * kwant_t(fsyst, e, fluxes)
        for e, w in zip(res.energies, res.weights, strict=True)
        if w != 0.0
    )
    np.testing.assert_allclose(res.value, ref, rtol=0, atol=TOL)


# ------------------------------------------------------------------------ ill-conditioned updates
def test_bound_state_at_the_reference_flux_falls_back_and_warns_once():
    # loop states sin(2 pi m n/N) vanish at the joint: bound states in the continuum at
    # E = -2t cos(2 pi m/N) for zero flux only (see lowrank_systems.side_coupled_ring), so
    # E - H - Sigma is singular at the reference flux 0 but regular at the swept fluxes.
    fsyst = side_coupled_ring(10)
    energy = -2.0 * math.cos(2 * math.pi * 2 / 10)
    fluxes = np.array([0.05, 0.1, 0.3, 0.7, 1.2]) * H_OVER_E
    ref = kwant_t(fsyst, energy, fluxes)
    model = FluxTubeModel(fsyst)
    sweeper = FluxTubeSweeper(model, energy=energy, reference_flux=0.0)
    assert np.all(sweeper.condition(fluxes) > 1e10)
    with pytest.warns(LowRankFallbackWarning, match="solved directly") as record:
        got = sweeper.transmission(fluxes)
        got2 = sweeper.transmission(fluxes[::-1])
    assert len(record) == 1  # said once
    assert sweeper.n_fallback == 2 * fluxes.size
    np.testing.assert_allclose(got, ref, rtol=0, atol=TOL)
    np.testing.assert_allclose(got2, ref[::-1], rtol=0, atol=TOL)
    # the guard matters: with the check disabled the same update returns wrong numbers
    unguarded = FluxTubeSweeper(model, energy=energy, reference_flux=0.0, tol=1e300)
    assert np.max(np.abs(unguarded.transmission(fluxes) - ref)) > 1e-6
    # the default (automatic) reference avoids the singular point: no fallback needed
    auto = FluxTubeSweeper(model, energy=energy)
    with warnings.catch_warnings():
        warnings.simplefilter("error", LowRankFallbackWarning)
        np.testing.assert_allclose(auto.transmission(fluxes), ref, rtol=0, atol=TOL)


def test_forced_direct_path_equals_low_rank_with_probes_and_many_modes():
    fsyst = flux_tube_ring(12.0, 7.0, lead_width=8, disorder=1.0, seed=11)
    sites = ring_sites_near(fsyst, [1.3, 4.4], 9.5)
    kw = dict(energy=2.0, probe_sites=sites, probe_eta=0.5)
    fast = FluxTubeSweeper(fsyst, **kw)
    forced = FluxTubeSweeper(fast.model, energy=2.0, tol=1e-300)
    with pytest.warns(LowRankFallbackWarning):
        direct = forced.conductance_matrix(FLUXES[:4])
    assert forced.n_fallback == 4
    np.testing.assert_allclose(fast.conductance_matrix(FLUXES[:4]), direct, rtol=0, atol=TOL)


# ------------------------------------------------------------------------ refusals and input
@pytest.mark.parametrize(
    ("variant", "match"),
    [
        ("onsite", "on-site"),
        ("modulus", "modulus"),
        ("nonlinear", "linear law"),
        ("lead", "leads must not depend"),
        ("none", "no Hamiltonian entry"),
    ],
)
def test_refuses_systems_that_are_not_a_pure_flux_tube(variant, match):
    with pytest.raises(ParameterError, match=match):
        FluxTubeModel(chain_ring(10, variant=variant))


def test_bad_input_is_named():
    fsyst = chain_ring(10)
    with pytest.raises(ParameterError, match="energy"):
        FluxTubeSweeper(fsyst, energy=float("nan"))
    with pytest.raises(ParameterError, match="probe_eta"):
        FluxTubeModel(fsyst, probe_sites=[3])
    with pytest.raises(ParameterError, match="probe_eta"):
        FluxTubeModel(fsyst, probe_sites=[3], probe_eta=-0.1)
    with pytest.raises(ParameterError, match="probe_sites"):
        FluxTubeModel(fsyst, probe_sites=[3, 3], probe_eta=0.1)
    with pytest.raises(ParameterError, match="probe_sites"):
        FluxTubeModel(fsyst, probe_sites=[10**6], probe_eta=0.1)
    with pytest.raises(ParameterError, match="fsyst"):
        FluxTubeModel(object())
    with pytest.raises(ParameterError, match="PrecalculatedLead"):
        FluxTubeModel(fsyst.precalculate(0.7, params=dict(flux=0.0)))
    model = FluxTubeModel(fsyst)
    with pytest.raises(ParameterError, match="params"):
        FluxTubeSweeper(model, energy=0.7, params={"x": 1})
    sweeper = FluxTubeSweeper(model, energy=0.7)
    with pytest.raises(ParameterError, match="drain"):
        sweeper.transmission(0.0, source=1, drain=1)
    with pytest.raises(ParameterError, match="source"):
        sweeper.transmission(0.0, source=2)
    with pytest.raises(ParameterError, match="weights"):
        thermal_flux_sweep(model, [0.0], [0.7, 0.8], [1.0])
    with pytest.raises(ParameterError, match="quantity"):
        thermal_flux_sweep(model, [0.0], [0.7], [1.0], quantity="G")


def test_shapes_follow_the_flux_argument():
    sweeper = FluxTubeSweeper(chain_ring(10), energy=0.7)
    assert sweeper.transmission(0.1 * H_OVER_E).shape == ()
    assert sweeper.transmission(np.zeros((2, 3))).shape == (2, 3)
    assert sweeper.conductance_matrix([0.0, 1.0]).shape == (2, 2, 2)


# ------------------------------------------------------------------------ ringkit's own builder
def test_core_flux_tube_ring_equals_kwant():
    tb = pytest.importorskip("ringkit.tightbinding")
    dev_mod = pytest.importorskip("ringkit.device")
    if not hasattr(tb, "build_ring"):
        pytest.skip("ringkit.tightbinding.build_ring not available yet")
    t_small = 50e-3 * sc.e  # a hopping of about 50 meV: a ~250-site ring (as in test_fields.py)
    a = math.sqrt(sc.hbar**2 / (2 * 0.067 * sc.m_e * t_small))
    mat = dev_mod.Material(0.067, fermi_energy=0.2 * t_small, disorder_strength=0.8 * t_small)
    geo = dev_mod.RingGeometry.circular(
        45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25), lead_width=40e-9
    )
    device = dev_mod.RingDevice(mat, geo, lattice_spacing=a, field_mode="flux_tube")
    ring = tb.build_ring(device, seed=3)
    energy = ring.to_lattice_energy(mat.fermi_energy_J)
    base = ring.params(flux=0.0)
    sweeper = FluxTubeSweeper(ring.fsyst, params=base, energy=energy)
    got = sweeper.transmission(FLUXES)
    ref = np.array(
        [
            kwant.smatrix(ring.fsyst, energy, params=ring.params(flux=f)).transmission(1, 0)
            for f in FLUXES
        ]
    )
    np.testing.assert_allclose(got, ref, rtol=0, atol=TOL)
    np.testing.assert_allclose(sweeper.transmission(-FLUXES), got, rtol=0, atol=TOL)


def test_no_open_channel_gives_zero_like_kwant():
    """Below the first lead subband (clean strip of width 4: 2t (1 - cos(pi/5)) = 0.382t,
    closed form) the flux-tube sweeper returns T = 0 exactly, as kwant.smatrix does; with a
    probe the floating-probe conductance is 0 too (no channel in source or drain)."""
    fsyst = flux_tube_ring(disorder=0.5, seed=4)
    for energy in (-0.2, 0.3):
        sw = FluxTubeSweeper(fsyst, energy=energy)
        assert np.all(kwant_t(fsyst, energy, FLUXES[:3]) == 0.0)
        assert np.all(sw.transmission(FLUXES[:3]) == 0.0)
        assert np.all(sw.conductance_matrix(FLUXES[:3]) == 0.0)
        swp = FluxTubeSweeper(fsyst, energy=energy, probe_sites=[40, 90], probe_eta=0.3)
        assert np.all(swp.conductance(FLUXES[:3]) == 0.0)
