"""The spectral energy engine (ringkit.transport.spectral) against independent references.

References, each named beside its check:
* kwant 1.5.0's own scattering solver (``kwant.smatrix``) on the same finalized system, and
  ``lead.selfenergy`` for the closed-form self-energies of the clean leads;
* scipy.integrate.quad of the exact T(E) (kwant.smatrix per energy) times -df/dE for a thermal
  average;
* the direct path of ringkit (one factorization per energy and field), itself checked against
  kwant in tests/test_fastsweep.py;
* Onsager: G(B) = G(-B) for a two-terminal conductor (M. Buttiker, Phys. Rev. Lett. 57, 1761
  (1986)).
The derivation and error budget are in docs/engine.md section 9.
"""

from __future__ import annotations

import math

import kwant
import numpy as np
import pytest
from engine_systems import square_ring
from scipy import constants, integrate
from test_probe_schur import _dense_kron

from ringkit._validation import ParameterError
from ringkit.device import ArmGate, LeadSpec, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import field_sweep
from ringkit.transport._spectral_leads import chain_sigma, mode_lead
from ringkit.transport.probes import DephasingProbes
from ringkit.transport.spectral import SpectralSweeper
from ringkit.units import PHI0

A = 10e-9
T_A = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)
K_B = constants.k


def _ring(mode="uniform", seed=3, fermi=1.3):
    mat = Material(0.067, fermi_energy=fermi * T_A, disorder_strength=0.6 * T_A, name="test")
    geo = RingGeometry.circular(45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25))
    dev = RingDevice(
        mat, geo, lattice_spacing=A, field_mode=mode, gate=ArmGate("upper", 0.02 * T_A), max_kfa=1.2
    )
    return build_ring(dev, seed=seed)


def test_mode_self_energy_matches_kwant_lead_selfenergy():
    # reference: kwant's lead.selfenergy (its own mode solver); propagating, evanescent and
    # near-threshold energies of a 7-wide lead
    fsyst = square_ring(14, 9, 7, field_param="B", lattice_spacing=5e-9)
    lead = fsyst.leads[0]
    ml = mode_lead(lead, {"B": 0.0}, 0.7, 0.05, name="lead")
    thresholds = ml.eps - 2.0
    for e in (0.05, 0.7, 1.9, float(thresholds[2]) + 1e-9, float(thresholds[3]) - 1e-9, 3.3):
        mine = (ml.modes * chain_sigma(e, ml.eps, ml.hop)) @ ml.modes.conj().T
        ref = lead.selfenergy(e, params={"B": 0.0})
        assert np.abs(mine - ref).max() < 1e-10  # kwant: ~3e-12 within 1e-9 of a threshold
    assert ml.n_active >= ml.n_open(0.7)  # every open mode stays an energy-dependent terminal


@pytest.mark.parametrize("which", ["ringkit-ring", "independent-square-ring"])
def test_transmission_matches_kwant_smatrix(which):
    # reference: kwant.smatrix on the same finalized system, energies and fields spread over
    # the window (disordered, gated ring; a ring built without ringkit)
    if which == "ringkit-ring":
        ring = _ring()
        fsyst, name, mu = ring.fsyst, "B", ring.fermi_energy_lattice
        params = ring.params()
        fields = np.array([-0.31, 0.05, 0.77]) * PHI0 / ring.loop_area
    else:
        fsyst = square_ring(14, 9, 5, disorder=1.5, seed=2, field_param="B", lattice_spacing=5e-9)
        name, mu, params, fields = "B", 0.7, {}, np.array([-2.0, 0.4, 3.0])
    half = 0.05
    sw = SpectralSweeper(fsyst, field_param=name, params=params, mu=mu, half_width=half)
    sw.models(fields)
    energies = mu + half * np.array([-0.97, -0.41, 0.0, 0.23, 0.88])
    t = sw.transmission(energies)
    for i, e in enumerate(energies):
        for j, b in enumerate(fields):
            ref = kwant.smatrix(fsyst, e, params={**params, name: b}).transmission(1, 0)
            assert abs(t[i, j] - ref) < 1e-9, (which, e, b)
    assert sw.model_error <= 1e-9


def _dense_fisher_lee(fsyst, params):
    """Exact T(E) by the dense Fisher-Lee formula T = Tr(Gamma_R G Gamma_L G^dagger),
    G = (E - H - Sigma_L - Sigma_R)^-1 (D. S. Fisher and P. A. Lee, Phys. Rev. B 23, 6851
    (1981)), with kwant's Hamiltonian and lead self-energies (no Lanczos, no lead chunks).
    The closed region's resolvent is taken on the lead interfaces from a full eigendecomposition
    (numpy eigh), and the leads are attached by the exact Dyson equation on the interfaces."""
    h = fsyst.hamiltonian_submatrix(params=params)
    assert np.allclose(h, h.conj().T)
    lam, vec = np.linalg.eigh(h)
    iface = [np.asarray(i) for i in fsyst.lead_interfaces]
    both = np.concatenate(iface)
    v = vec[both]  # interface rows of the eigenvectors
    n0 = len(iface[0])

    def t_of(e):
        sig = [lead.selfenergy(e, params=params) for lead in fsyst.leads]
        sig_all = np.zeros((len(both), len(both)), complex)
        sig_all[:n0, :n0], sig_all[n0:, n0:] = sig
        g0 = (v / (e - lam)) @ v.conj().T  # (E - H)^-1 on the interfaces
        g = np.linalg.solve(np.eye(len(both)) - g0 @ sig_all, g0)
        gam = [1j * (s - s.conj().T) for s in sig]
        grl = g[n0:, :n0]
        return float(np.trace(gam[1] @ grl @ gam[0] @ grl.conj().T).real)

    return t_of


def test_thermal_average_matches_quadrature_of_exact_T_and_onsager():
    # reference: scipy.integrate.quad of 2 T(E) (-df/dE) with the exact dense Fisher-Lee T(E)
    ring = _ring()
    temp = 1.0
    kt = K_B * temp / ring.hopping
    mu = ring.fermi_energy_lattice
    b0 = 0.6 * PHI0 / ring.loop_area
    ds = field_sweep(ring, fields=[-b0, b0], temperature=temp, thermal_tol=1e-6)
    assert ds.attrs["n_factorizations"] == 1  # -B and B: one point (Onsager folding)
    assert "spectral" in ds.attrs["solver"]
    exact = _dense_fisher_lee(ring.fsyst, ring.params(B=b0))
    e_chk = mu + 3.1 * kt  # the dense reference itself against kwant.smatrix
    assert (
        abs(
            exact(e_chk)
            - kwant.smatrix(ring.fsyst, e_chk, params=ring.params(B=b0)).transmission(1, 0)
        )
        < 1e-10
    )

    def f(e):
        return 2.0 * exact(e) / (4.0 * kt * math.cosh((e - mu) / (2.0 * kt)) ** 2)

    ref, qerr = integrate.quad(f, mu - 22 * kt, mu + 22 * kt, epsabs=1e-7, limit=400)
    g = ds["G"].values
    # tails beyond 22 kT: 2 N e^-22 < 1e-8
    assert abs(g[1] - ref) <= ds.attrs["thermal_error_estimate"] + qerr + 2e-8
    assert abs(g[1] - ref) < 2e-6
    assert ds.attrs["thermal_error_estimate"] <= 1e-6
    assert abs(g[0] - g[1]) < 1e-12  # folded: G(-B) = G(B) (the unfolded check is below)


@pytest.mark.filterwarnings("ignore::ringkit.thermal_policy.ThermalToleranceWarning")
def test_spectral_equals_direct_path_with_thresholds_in_the_window():
    # the issue-11 crash case (GaAs, r_in 110 nm, r_out 150 nm, E_F 5 meV, a = 6 nm, 4.2 K):
    # subband thresholds inside the thermal window; reference: the direct path (kwant-checked)
    mat = Material.preset("GaAs")
    dev = RingDevice(
        Material(mat.effective_mass, fermi_energy=5e-3 * constants.e, name="GaAs 5 meV"),
        RingGeometry.circular(110e-9, 150e-9),
        lattice_spacing=6e-9,
        max_kfa=0.6,  # kF a = 0.563 here, as in the issue
    )
    ring = build_ring(dev, seed=1)
    fields = np.linspace(0.0, 0.12, 4)
    # the same dense grid for both paths (the adaptive rule needs thousands of energies for the
    # square-root threshold singularities at 1e-5; the spectral path can afford them, the
    # direct one not in a unit test)
    kw = dict(fields=fields, temperature=4.2, thermal_tol=1e-2, thermal_method="grid")
    spec = field_sweep(ring, thermal_engine="spectral", **kw)
    direct = field_sweep(ring, thermal_engine="direct", **kw)
    assert np.all(np.isfinite(spec["G"].values))
    assert spec.attrs["n_energies"] == direct.attrs["n_energies"]
    assert np.abs(spec["G"].values - direct["G"].values).max() < 1e-9


def test_bad_input_names_the_parameter():
    ring = _ring()
    with pytest.raises(ParameterError, match="thermal_engine"):
        field_sweep(ring, fields=[0.0, 0.1], temperature=1.0, thermal_engine="magic")
    mat = Material(0.067, fermi_energy=1.3 * T_A, name="test")
    leads = [LeadSpec(math.pi - 0.3, 30e-9), LeadSpec(0.3), LeadSpec(math.pi + 0.5, 20e-9)]
    geo = RingGeometry.circular(45e-9, 85e-9, leads=leads)
    three = build_ring(RingDevice(mat, geo, lattice_spacing=A, max_kfa=1.2), seed=1)
    with pytest.raises(ParameterError, match="fsyst.*two-terminal"):
        SpectralSweeper(
            three.fsyst, field_param="B", params=three.params(), mu=1.3, half_width=0.01
        )
    mu = ring.fermi_energy_lattice
    with pytest.raises(ParameterError, match="model_tol"):
        SpectralSweeper(
            ring.fsyst, field_param="B", params=ring.params(), mu=mu, half_width=0.01, model_tol=0.5
        )
    sw = SpectralSweeper(
        ring.fsyst, field_param="B", params=ring.params(), mu=mu, half_width=0.01
    ).models([0.0])
    with pytest.raises(ParameterError, match="energies"):
        sw.transmission([mu + 0.02])


def _probes(fsyst, n=6, seed=4):
    rng = np.random.default_rng(seed)
    sites = np.sort(rng.choice(len(fsyst.sites), size=n, replace=False))
    return DephasingProbes(sites, rng.uniform(0.05, 0.4, size=n))


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_probes_and_flux_tube_against_dense_kron_reduction(mode):
    # reference: dense inverse with kwant's lead self-energies and the probes' -i eta/2,
    # Fisher-Lee T_pq and the floating-probe (Kron) reduction solved with numpy
    # (tests/test_probe_schur.py::_dense_kron); flux tube: one reduced model for every flux
    ring = _ring(mode)
    name = ring.field_param
    unit = PHI0 / ring.loop_area if mode == "uniform" else PHI0
    fields = np.array([-0.37, 0.0, 0.37, 0.5, 1.21]) * unit
    mu, half = ring.fermi_energy_lattice, 0.04
    energies = mu + half * np.array([-0.9, -0.2, 0.35, 0.8])
    pr = _probes(ring.fsyst)
    for probes in (None, pr):
        sw = SpectralSweeper(
            ring.fsyst, field_param=name, params=ring.params(), mu=mu, half_width=half,
            probes=probes,
        ).models(fields)  # fmt: skip
        assert sw.mode == ("per-field" if mode == "uniform" else "cut")
        assert sw.n_models == (1 if mode == "flux_tube" else 4)  # -0.37 and 0.37: one point
        g = sw.transmission(energies)
        for a, e in enumerate(energies):
            for b, v in enumerate(fields):
                params = ring.params(**{name: float(v)})
                if probes is None:
                    ref = kwant.smatrix(ring.fsyst, e, params=params).transmission(1, 0)
                else:
                    ref = _dense_kron(ring.fsyst, params, e, pr.sites, pr.eta)
                assert abs(g[a, b] - ref) < 1e-9, (mode, probes is None, e, v)
        assert sw.model_error <= 1e-9


def test_folding_is_exact_and_the_unfolded_path_obeys_onsager():
    # G(B) = G(-B) (Buttiker 1986) on the unfolded spectral path; folding changes nothing
    ring = _ring(seed=5)
    b = np.array([-0.8, -0.3, 0.3, 0.8]) * PHI0 / ring.loop_area
    mu = ring.fermi_energy_lattice
    kw = dict(field_param="B", params=ring.params(), mu=mu, half_width=0.03, workers=1)
    e = mu + 0.03 * np.array([-0.5, 0.1, 0.7])
    plain = SpectralSweeper(ring.fsyst, fold=False, **kw).models(b)
    folded = SpectralSweeper(ring.fsyst, **kw).models(b)
    assert plain.n_models == 4 and folded.n_models == 2
    gp, gf = plain.transmission(e), folded.transmission(e)
    assert np.abs(gp - gp[:, ::-1]).max() < 1e-9
    assert np.abs(gp - gf).max() < 1e-9


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_thermal_sweep_spectral_equals_the_direct_paths(mode):
    # reference: the direct paths (uniform: one factorization per energy and field; flux
    # tube: the low-rank update per energy), both checked against kwant elsewhere; uniform
    # with dephasing probes
    ring = _ring(mode)
    if mode == "uniform":
        kw = dict(fields=np.linspace(-0.4, 0.7, 5) * PHI0 / ring.loop_area, l_phi=150e-9)
        kw.update(n_probes=6, calibrate_l_phi=False)
    else:
        kw = dict(fluxes=np.linspace(-0.4, 1.3, 7) * PHI0)
    kw.update(temperature=1.5, thermal_tol=1e-6)
    spec = field_sweep(ring, thermal_engine="spectral", **kw)
    direct = field_sweep(ring, thermal_engine="direct", **kw)
    assert "spectral" in spec.attrs["solver"] and "spectral" not in direct.attrs["solver"]
    assert np.abs(spec["G"].values - direct["G"].values).max() < 2e-6  # both within tol
    assert spec.attrs["thermal_error_estimate"] <= 1e-6
    if mode == "flux_tube":
        assert spec.attrs["n_factorizations"] == 1


STUDY = """
[material]
preset = "GaAs"
fermi_energy = "5.5 meV"
mean_free_path = "250 nm"
[geometry]
r_in = "70 nm"
r_out = "98 nm"
[lattice]
spacing = "7 nm"
[field]
start = "-0.3 T"
stop = "0.3 T"
points = 16
[sweep]
temperature = ["0 K", "1.5 K"]
l_phi = "inf"
[thermal]
tol = 1e-5
"""


@pytest.mark.filterwarnings("ignore::ringkit.device.DiscretisationWarning")
def test_study_unit_uses_the_spectral_engine_and_equals_kwant():
    # a coherent uniform-field study unit at T > 0 runs on the spectral engine; reference: the
    # same policy energies evaluated with kwant.smatrix (kwant's own solver), at three fields
    from ringkit.study import compute, make_plan, parse_config

    plan = make_plan(parse_config(STUDY))
    task = compute.make_tasks(plan, [plan.units[0]])[0]
    res = compute.compute_unit(task)
    assert res.info["engine"].startswith("spectral")
    assert res.info["spectral_model_error_e2h"] <= 1e-7
    engine = compute.UnitEngine(compute.state_for(task), task)
    ring = engine.ring
    e = ring.fermi_energy_lattice + 0.4 * engine._spectral.half_width
    g = engine.conductance(e)
    for k in (0, 7, 15):
        sm = kwant.smatrix(ring.fsyst, e, params=ring.params(B=float(engine.field[k])))
        assert abs(g[k] - 2.0 * sm.transmission(1, 0)) < 1e-8  # spin degeneracy
    assert res.info["thermal_error_e2h"][1] <= 1e-5


@pytest.mark.filterwarnings("ignore::ringkit.device.DiscretisationWarning")
def test_flux_tube_study_unit_with_probes_follows_the_auto_rule(monkeypatch):
    # a flux-tube study unit with 6 probes at T > 0: "auto" takes the spectral engine (cut
    # mode, benchmarks/RESULTS-auto-rule.md); reference: the same unit on the per-energy
    # low-rank path (checked against kwant in tests/test_lowrank.py), same calibrated probes
    from ringkit.study import compute, make_plan, parse_config
    from ringkit.transport import spectral

    text = STUDY.replace('start = "-0.3 T"', 'mode = "flux_tube"\nstart = "-1 h/e"')
    text = text.replace('stop = "0.3 T"', 'stop = "1 h/e"').replace('"inf"', '"300 nm"')
    plan = make_plan(parse_config(text + "[dephasing]\nprobes = 6\n"))
    task = compute.make_tasks(plan, [plan.units[0]])[0]
    compute.clear_cache()
    spec = compute.compute_unit(task)
    monkeypatch.setattr(spectral, "AUTO_MAX_PROBES_FLUX_TUBE", 5)
    compute.clear_cache()
    low = compute.compute_unit(task)
    compute.clear_cache()
    assert spec.info["engine"].startswith("spectral")
    assert "engine" not in low.info  # only spectral units name their engine
    # T = 0 row: the same energy on both paths; 1.5 K row: both within tol = 1e-5 e^2/h
    np.testing.assert_allclose(spec.conductance[0], low.conductance[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(spec.conductance[1], low.conductance[1], rtol=0, atol=3e-5)


def test_a_large_step_hint_still_measures_the_error():
    # the first checks go where the previous model converged; a huge hint must not skip the
    # comparison (the measured error would stay infinite)
    ring = _ring(seed=2)
    mu = ring.fermi_energy_lattice
    sw = SpectralSweeper(
        ring.fsyst, field_param="B", params=ring.params(), mu=mu, half_width=0.03, workers=1
    )
    sw._last_steps = 10_000
    red, err = sw.reduce(0.1 * PHI0 / ring.loop_area)
    assert err <= sw.model_tol and red.steps < 400


def test_auto_choice_of_the_engine():
    # the rule of docs/engine.md section 9.5; source of the limits: benchmarks/
    # RESULTS-auto-rule.md (0.5 um GaAs ring, 28.6k sites, spectral vs low-rank/direct path
    # through the public thermal path, same energies)
    from ringkit.transport.spectral import (
        AUTO_MAX_PROBES,
        AUTO_MAX_PROBES_FLUX_TUBE,
        spectral_preferred,
    )

    def probes(n):
        return DephasingProbes(np.arange(n), 0.1)

    assert spectral_preferred(False) and spectral_preferred(True)  # no probes: always
    for flux_tube, limit in ((False, AUTO_MAX_PROBES), (True, AUTO_MAX_PROBES_FLUX_TUBE)):
        assert spectral_preferred(flux_tube, probes(1))
        assert spectral_preferred(flux_tube, probes(limit))
        assert not spectral_preferred(flux_tube, probes(limit + 1))
    # the measured decisions: 40 probes spectral in both field modes, 100 probes (the default
    # of field_sweep and the amplitude statistics) on the per-energy paths
    assert spectral_preferred(True, probes(40)) and spectral_preferred(False, probes(40))
    assert not spectral_preferred(True, probes(100)) and not spectral_preferred(False, probes(100))


def test_auto_flux_tube_with_probes_follows_the_rule(monkeypatch):
    # "auto" through field_sweep on a flux tube with probes: spectral up to the limit, the
    # low-rank update above it; reference: the low-rank path (checked against kwant in
    # tests/test_lowrank.py); both within their thermal tolerance
    from ringkit.transport import spectral

    ring = _ring("flux_tube")
    kw = dict(fluxes=np.linspace(0.0, 1.0, 5) * PHI0, temperature=1.5, thermal_tol=1e-6)
    kw.update(l_phi=150e-9, n_probes=6, calibrate_l_phi=False)
    auto = field_sweep(ring, **kw)
    assert "spectral" in auto.attrs["solver"] and auto.attrs["n_probes"] == 6
    monkeypatch.setattr(spectral, "AUTO_MAX_PROBES_FLUX_TUBE", 5)
    low = field_sweep(ring, **kw)
    assert "low-rank" in low.attrs["solver"]
    assert np.abs(auto["G"].values - low["G"].values).max() < 2e-6
