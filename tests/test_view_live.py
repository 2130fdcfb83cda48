"""Live lattice view of the device explorer (issue 8, point 4) and the fast lattice build.

The panel is driven like a user would (control ``.value``s, "live lattice" checkbox) and the
plotted lattice line is compared with references outside the live-view code:

* ``ringkit.transport.field_sweep`` on the same built ring (the engine's own path, fresh
  sweepers, probes from ``attach_probes``) at every plotted flux, to 1e-10;
* plain ``kwant.smatrix`` (coherent) or ``kwant.greens_function`` with wide-band self-energy
  terminals plus the floating-probe Kron reduction written here (Büttiker, Phys. Rev. Lett. 57,
  1761 (1986); docs/engine.md §3 (B)) on a ring assembled by a kwant ``Builder`` site by site (the
  reference path of the builder, not the bulk path the live view uses), at a few fluxes;
* Onsager-Büttiker reciprocity of a two-terminal conductance, G(Phi) = G(-Phi) (Büttiker, IBM
  J. Res. Dev. 32, 317 (1988)), on the symmetric plotted grid, which the live view does not
  use (it only folds the flux modulo h/e).

The cache tests count lattice builds and sparse factorizations; the builder test checks that
the bulk assembly gives kwant's Builder result entry by entry.
"""

from __future__ import annotations

import copy
import math
from dataclasses import replace

import kwant
import numpy as np
import pytest
from scipy import constants

from ringkit.tightbinding import build_ring
from ringkit.tightbinding import builder as tb_builder
from ringkit.transport import field_sweep
from ringkit.transport.lowrank import FluxTubeSweeper
from ringkit.transport.probes import attach_probes, ring_probe_sites
from ringkit.view.panels import DeviceExplorer
from ringkit.view.panels.explorer import ExplorerParams
from ringkit.view.panels.explorer_live import (
    LIVE_MAX_ENERGIES,
    LIVE_TOL,
    LiveLattice,
    live_device,
    live_flux_grid,
)

H_OVER_E = constants.h / constants.e  # Wb, CODATA via scipy.constants (exact in SI 2019)
MEV = 1e-3 * constants.e
TOL = 1e-10  # issue 8: the low-rank path must equal a direct solve to 1e-10

# A small GaAs ring (~2 300 sites) keeps every reference solve fast.
SMALL = dict(radius=120e-9, width=35e-9, field_min=-0.06, field_max=0.06)


def _live_line(ex):
    """Plotted live lattice line: field in T and G in e^2/h."""
    line = ex.artists["live"]
    return np.asarray(line.get_xdata()) / 1e3, np.asarray(line.get_ydata())  # mT -> T


def _explorer(live=None, live_calibration=True, **kw):
    params = ExplorerParams(**{**SMALL, **kw})
    return DeviceExplorer(params, live_lattice=True, live=live, live_calibration=live_calibration)


def _reference_fsyst(ex):
    """The same lattice assembled by a kwant Builder (the builder's reference path)."""
    return tb_builder._build_square(live_device(ex.params), ex.params.seed, direct=False)


class _WideBandTerminal:
    """Self-energy-only kwant lead -i eta/2 on one site (docs/engine.md §3 (B))."""

    parameters = frozenset()

    def __init__(self, eta: float) -> None:
        self.eta = eta

    def selfenergy(self, energy, args=(), *, params=None):
        return np.array([[-0.5j * self.eta]])


def _floating_probe_g(fsyst, energy, params, sites, eta):
    """Two-terminal G (spinless) with floating probes: kwant.greens_function + Kron reduction."""
    ext = copy.copy(fsyst)
    ext.leads = list(fsyst.leads) + [_WideBandTerminal(eta) for _ in sites]
    ext.lead_interfaces = list(fsyst.lead_interfaces) + [np.array([s]) for s in sites]
    ext.lead_paddings = list(fsyst.lead_paddings) + [np.array([], dtype=int) for _ in sites]
    gf = kwant.greens_function(ext, energy, params=params)
    n = len(ext.leads)
    t = np.array([[gf.transmission(i, j) if i != j else 0.0 for j in range(n)] for i in range(n)])
    c = -t
    c[np.arange(n), np.arange(n)] = t.sum(axis=0)  # C_jj = sum_{i != j} T_ij
    # source 0 at voltage 1, drain 1 grounded, probes 2.. floating (zero net current)
    vp = np.linalg.solve(c[2:, 2:], -c[2:, 0])
    return c[0, 0] + c[0, 2:] @ vp


# --------------------------------------------------------------------------- the flux grid
def test_flux_grid_is_commensurate_with_the_period():
    period = 21.1e-3
    k, m = live_flux_grid(-0.05, 0.05, period)
    step = period / m
    assert m >= 64 and k.size >= 161
    b = k * step
    assert b[0] >= -0.05 - 1e-12 and b[-1] <= 0.05 + 1e-12
    assert b[0] - step < -0.05 and b[-1] + step > 0.05  # the whole window is covered
    k2, m2 = live_flux_grid(0.0, 0.2 * period, period)  # narrow window: denser grid
    assert k2.size >= 161 and m2 > 64
    k3, m3 = live_flux_grid(-30.0, 30.0, period)  # very wide window: capped point count
    assert k3.size <= 20_001 and m3 >= 4


# --------------------------------------------------------------------------- exactness
def test_live_line_equals_field_sweep_and_kwant_coherent():
    ex = _explorer(temperature=0.0, l_phi=None)
    c = ex.controls
    c["gate"].value = 0.8  # meV on the upper arm
    c["field"].value = (-70.0, 50.0)  # asymmetric window (mT)
    live = ex.live
    assert live is not None and ex.live_note is None
    b, g = _live_line(ex)
    ring = ex.live_view.ring
    area = ring.loop_area
    np.testing.assert_allclose(b, live.flux / area, rtol=1e-12)
    assert b[0] >= -0.070 - 1e-9 and b[-1] <= 0.050 + 1e-9
    # flux grid: multiples of (h/e)/M
    np.testing.assert_allclose(live.flux / (H_OVER_E / live.points_per_period),
                               np.round(live.flux / (H_OVER_E / live.points_per_period)),
                               atol=1e-9)  # fmt: skip
    gate_j = 0.8 * MEV
    ds = field_sweep(ring, live.flux, energy=ring.fermi_energy, gate=gate_j)
    np.testing.assert_allclose(g, ds["G"].values, rtol=0, atol=TOL)
    # plain kwant on the Builder-assembled lattice at a few fluxes (spin degeneracy 2)
    ref = _reference_fsyst(ex)
    assert ref.n_sites == ring.n_sites
    e_t = ring.fermi_energy_lattice
    for i in (0, len(g) // 3, len(g) - 1):
        p = ref.params(flux=float(live.flux[i]), gate=gate_j)
        t = kwant.smatrix(ref.fsyst, e_t, params=p).transmission(1, 0)
        assert g[i] == pytest.approx(2 * t, abs=1e-9)  # kwant's own MUMPS rounding ~1e-13


def test_live_line_onsager_and_period():
    ex = _explorer(temperature=0.0, l_phi=None)
    ex.controls["field"].value = (-60.0, 60.0)
    live = ex.live
    k = np.round(live.flux / (H_OVER_E / live.points_per_period)).astype(int)
    assert np.array_equal(k, -k[::-1])  # symmetric grid
    # Onsager (two terminals, no magnetic leads): G(Phi) = G(-Phi)
    np.testing.assert_allclose(live.conductance, live.conductance[::-1], rtol=0, atol=1e-10)
    # the h/e period is the one of the ring's mean area: a shift by M points is one flux quantum
    m = live.points_per_period
    np.testing.assert_allclose(live.conductance[m:], live.conductance[:-m], atol=1e-12)
    assert live.period == pytest.approx(H_OVER_E / (math.pi * (120e-9) ** 2), rel=1e-12)


def test_live_with_probes_and_temperature_equals_engine():
    live_view = LiveLattice(n_probes=8)
    # analytic coupling only (the calibrated redraw: test_live_realised_l_phi_...)
    ex = _explorer(live=live_view, live_calibration=False, temperature=0.0, l_phi=1.0e-6)
    live = ex.live
    ring = live_view.ring
    assert live.n_probes == 8 and live.probe_eta > 0
    # the live probes (model LDOS, tag positions) are attach_probes' defaults (site.pos, and
    # kwant.ldos as the independent reference of the LDOS weight)
    zero = ring.params(flux=0.0)
    e_f = ring.fermi_energy_lattice
    np.testing.assert_array_equal(live.probe_sites, ring_probe_sites(ring.fsyst, 8))
    ldos = kwant.ldos(ring.fsyst, e_f, params=zero)
    info = live_view._probes[(e_f, tuple(sorted(zero.items())))].info
    assert abs(info["probe_fraction"] - ldos[live.probe_sites].sum() / ldos.sum()) < 1e-12
    _, g = _live_line(ex)
    # T = 0: the engine's field_sweep with the same L_phi and probe count
    ds = field_sweep(ring, live.flux, energy=ring.fermi_energy, l_phi=1.0e-6, n_probes=8,
                     calibrate_l_phi=False)  # fmt: skip
    np.testing.assert_allclose(g, ds["G"].values, rtol=0, atol=TOL)
    # independent reference at two fluxes: greens_function + floating-probe Kron reduction
    ref = _reference_fsyst(ex)
    e_t = ring.fermi_energy_lattice
    for i in (5, len(g) // 2 + 7):
        p = ref.params(flux=float(live.flux[i]))
        g_ref = 2 * _floating_probe_g(ref.fsyst, e_t, p, live.probe_sites, live.probe_eta)
        assert g[i] == pytest.approx(g_ref, abs=1e-9)
    # a new L_phi reuses the cached probe weights: same as a fresh field_sweep
    ex.controls["l_phi"].value = 0.5  # µm
    l_phi = ex.params.l_phi
    assert l_phi == pytest.approx(0.5e-6, rel=0.02)
    ds = field_sweep(ring, ex.live.flux, energy=ring.fermi_energy, l_phi=l_phi, n_probes=8,
                     calibrate_l_phi=False)  # fmt: skip
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)
    # finite temperature: the thermal policy at the live tolerance (docs/panels.md, "Live
    # lattice view"), here re-done with fresh engine sweepers at the live energies
    ex.controls["temperature"].value = 2.0
    live = ex.live
    assert 1 < live.n_energies <= LIVE_MAX_ENERGIES and live.thermal_tol == LIVE_TOL
    assert live.thermal_converged and 0 < live.thermal_error <= LIVE_TOL
    np.testing.assert_allclose(live.weights.sum(), 1.0, rtol=1e-12)
    probes = attach_probes(
        ring.fsyst, l_phi=l_phi, energy=ring.fermi_energy_lattice, n_probes=8,
        lattice_spacing=ring.lattice_spacing, params=ring.params(flux=0.0),
    )  # fmt: skip
    expect = np.zeros(live.flux.size)
    for e_j, w in zip(live.energies, live.weights, strict=True):
        if w == 0.0:  # energy of a superseded coarse rule
            continue
        sw = FluxTubeSweeper(
            ring.fsyst, energy=ring.to_lattice_energy(e_j), params=ring.params(flux=0.0),
            probes=probes,
        )  # fmt: skip
        expect += w * sw.conductance(live.flux)
    np.testing.assert_allclose(_live_line(ex)[1], 2 * expect, rtol=0, atol=TOL)
    assert "lattice (live): mean G" in ex.summary.value
    # the error estimate and the number of energies are shown (numbers table and banner)
    table = ex.summary.value
    assert f"{live.n_energies} energies, estimated error {live.thermal_error:.2g} e²/h" in table
    assert f"goal {LIVE_TOL:g}, converged" in table
    assert f"{live.n_energies} energies, thermal error ≤ {live.thermal_error:.1g}" in (
        ex.banner_text()
    )
    assert "requested 0.5 µm; realised: not measured" in table


def test_live_at_0p3_kelvin_equals_kwant_thermal_average():
    """0.3 K with dephasing probes (the live view's default temperature regime): the drawn line
    equals the thermal average, at the live energies and weights, of the floating-probe
    conductance from ``kwant.greens_function`` plus the Kron reduction written here (Büttiker,
    Phys. Rev. Lett. 57, 1761 (1986)) on the Builder-assembled lattice, to 1e-8 e^2/h."""
    ex = _explorer(live=LiveLattice(n_probes=6), live_calibration=False, temperature=0.3,
                   l_phi=1.0e-6, gate_potential=0.3 * MEV)  # fmt: skip
    live = ex.live
    assert live.n_probes == 6 and 1 < live.n_energies <= LIVE_MAX_ENERGIES
    assert live.thermal_tol == LIVE_TOL and live.thermal_error > 0
    # the weights are those of the Fermi window: they sum to 1 (-df/dE is normalised)
    assert live.weights.sum() == pytest.approx(1.0, abs=1e-12)
    ref = _reference_fsyst(ex)
    _, g = _live_line(ex)
    for i in (3, len(g) // 2 + 11):
        p = ref.params(flux=float(live.flux[i]), gate=0.3 * MEV)
        expect = 0.0
        for e_j, w in zip(live.energies, live.weights, strict=True):
            if w != 0.0:  # energies of a superseded coarse rule carry no weight
                expect += w * _floating_probe_g(ref.fsyst, ref.to_lattice_energy(e_j), p,
                                                live.probe_sites, live.probe_eta)  # fmt: skip
        assert g[i] == pytest.approx(2 * expect, abs=1e-8)


def test_coupling_independent_blocks_equal_per_coupling_factorizations():
    """With probes the live view keeps per energy one probe-free block (cut, lead and probe
    orbitals) and adds any coupling and flux by exact dense algebra. Reference: the per-coupling
    path it replaced, a FluxTubeSweeper of the model WITH the probes attached (one sparse
    factorization of E - H - Sigma_leads - Sigma_probes per energy and coupling) plus the
    floating-probe Kron reduction (Büttiker, Phys. Rev. Lett. 57, 1761 (1986)), thermally
    averaged at the live energies and weights: to 1e-8 e^2/h at two couplings, gated, 0.3 K."""
    from ringkit.transport.fastsweep import kron_reduce

    view = LiveLattice(n_probes=6, workers=1)
    gate = 0.3 * MEV
    params = ExplorerParams(**SMALL, temperature=0.3, l_phi=1.0e-6, gate_potential=gate)
    first = view.compute(params)
    second = view.compute(replace(params, l_phi=0.4e-6))  # a new coupling, same lattice
    assert second.probe_eta > 1.5 * first.probe_eta > 0
    # the second coupling re-uses the blocks: factorizations only at energies not done before
    assert second.factorizations == len(set(second.energies) - set(first.energies))
    ring = view.ring
    zero = ring.params(flux=0.0)
    for live in (first, second):
        probes = attach_probes(
            ring.fsyst, l_phi=live.l_phi, energy=ring.fermi_energy_lattice, n_probes=6,
            lattice_spacing=ring.lattice_spacing, params=zero,
        )  # fmt: skip
        np.testing.assert_array_equal(probes.sites, live.probe_sites)
        assert float(np.mean(probes.eta)) == pytest.approx(live.probe_eta, rel=1e-12)
        expect = np.zeros(live.flux.size)
        for e_j, w in zip(live.energies, live.weights, strict=True):
            if w != 0.0:  # energies of a superseded coarse rule carry no weight
                sw = FluxTubeSweeper(ring.fsyst, energy=ring.to_lattice_energy(e_j),
                                     params=zero, probes=probes)  # fmt: skip
                expect += w * kron_reduce(sw.conductance_matrix(live.flux), 0, 1)
        np.testing.assert_allclose(live.conductance, 2 * expect, rtol=0, atol=1e-8)


def test_live_realised_l_phi_after_background_calibration():
    """Dephased live view: analytic first frame ("being measured…"), then the calibrated
    redraw (docs/panels.md "Live lattice view"; docs/probes.md "Realised L_phi"). References:
    a fresh LPhiCalibrator built here on the same ring and energy, and ``field_sweep(...,
    calibrate_l_phi=True)`` (the library's calibrated path)."""
    from ringkit.transport import realised_l_phi as rl
    from ringkit.transport.lowrank import FluxTubeModel
    from ringkit.transport.probe_calibration import LPhiCalibrator

    rl.clear_calibration_cache()
    live_view = LiveLattice(n_probes=8)
    params = ExplorerParams(**SMALL, temperature=0.0, l_phi=1.0e-6)
    ex = DeviceExplorer(params, live_lattice=False, live=live_view)
    frames = []
    first = ex._live_frame

    def spy(p, result):
        first(p, result)
        frames.append((result, ex.banner_text(), ex.summary.value))

    ex._live_frame = spy
    ex.live_lattice.value = True  # analytic frame, then the calibration (worker, waited for)
    (pre, banner, table), = frames  # fmt: skip
    assert math.isnan(pre.l_phi_realised)
    assert "L_phi requested 1 µm, realised: being measured…" in banner
    assert "requested 1 µm; realised: being measured…" in table
    live = ex.live
    ring = live_view.ring
    assert rl.cache_info()["setups"] == 1
    # a fresh calibrator on the same device, energy and probe count
    a = ring.lattice_spacing
    cal = LPhiCalibrator(
        FluxTubeModel(ring.fsyst, params=ring.params()), ring.fermi_energy_lattice, n_probes=8,
        radius=ring.device.geometry.mean_radius / a,
    )  # fmt: skip
    ref = cal.probes(1.0e-6 / a).info
    assert np.isfinite(live.l_phi_realised) and live.l_phi_realised_err > 0
    assert live.l_phi_realised == pytest.approx(ref["l_phi_realised"] * a, rel=1e-10)
    assert live.l_phi_realised_err == pytest.approx(ref["l_phi_realised_err"] * a, rel=1e-10)
    real, err = live.l_phi_realised * 1e6, live.l_phi_realised_err * 1e6
    assert f"L_phi requested 1 µm, realised {real:.3g} ± {err:.2g} µm" in ex.banner_text()
    assert f"requested 1 µm; realised {real:.3g} ± {err:.2g} µm" in ex.summary.value
    # the drawn line is the library's calibrated sweep at the same energy
    ds = field_sweep(ring, live.flux, energy=ring.fermi_energy, l_phi=1.0e-6, n_probes=8,
                     calibrate_l_phi=True)  # fmt: skip
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)
    assert ds.attrs["l_phi_realised_m"] == pytest.approx(live.l_phi_realised, rel=1e-10)
    setups = rl.cache_info()["setups"]
    # an L_phi change and a temperature change reuse the calibrator (no new set-up)
    ex.controls["l_phi"].value = 0.6  # µm
    assert np.isfinite(ex.live.l_phi_realised) and ex.live.l_phi == ex.params.l_phi
    ex.controls["temperature"].value = 0.5
    assert np.isfinite(ex.live.l_phi_realised)
    assert rl.cache_info()["setups"] == setups
    # a new disorder seed is another device: one new set-up
    ex.controls["seed"].value = 4
    assert np.isfinite(ex.live.l_phi_realised) and ex.live.rebuilt
    assert rl.cache_info()["setups"] == setups + 1


def test_live_thermal_equals_field_sweep_at_same_tolerance():
    # the live thermal average is the policy call of field_sweep (same bound, band functionals
    # and per-spin tol/2): with the same goal and budget both choose the same energies
    live_view = LiveLattice(tol=3e-3, max_energies=2000)
    ex = _explorer(live=live_view, radius=70e-9, width=20e-9, temperature=1.5, l_phi=None,
                   gate_potential=0.4 * MEV)  # fmt: skip
    assert live_view.ring.n_sites < 1000  # ~150 energies twice: keep the lattice small
    live = ex.live
    ring = live_view.ring
    ds = field_sweep(ring, live.flux, energy=ring.fermi_energy, temperature=1.5,
                     gate=0.4 * MEV, thermal_tol=3e-3)  # fmt: skip
    assert ds.attrs["n_energies"] == live.n_energies > 1
    assert live.thermal_error == pytest.approx(ds.attrs["thermal_error_estimate"], rel=1e-6)
    assert live.thermal_converged and live.thermal_error <= 3e-3
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)


def test_superseded_update_is_cancelled_and_its_energies_kept():
    from ringkit.view.panels.explorer_live import LiveCancelled

    view = LiveLattice(workers=1)  # serial: cancellation is polled before every energy
    params = ExplorerParams(**SMALL, temperature=1.0, l_phi=None)
    polls = []

    def cancelled() -> bool:  # newer settings arrive after three energies
        polls.append(1)
        return len(polls) > 4

    with pytest.raises(LiveCancelled):
        view.compute(params, cancelled=cancelled)
    done = view.factorizations
    assert 0 < view.builds and len(view._rows) == 3  # finished energies stay cached
    full = view.compute(params)
    assert full.factorizations == full.n_energies - 3 and view.factorizations > done
    fresh = LiveLattice().compute(params)
    np.testing.assert_allclose(full.conductance, fresh.conductance, rtol=0, atol=TOL)


def test_energies_in_worker_processes_equal_the_serial_path(monkeypatch):
    # the live view hands uncached energies to forked workers (ringkit.transport.energy_pool);
    # the rows must be those of the serial loop (same code, one BLAS thread)
    pool_mod = pytest.importorskip("ringkit.transport.energy_pool")
    monkeypatch.setattr(pool_mod, "MIN_SECONDS_PER_ENERGY", 0.0)  # fork even for a small ring
    params = ExplorerParams(**SMALL, temperature=1.0, l_phi=1.0e-6)
    serial = LiveLattice(workers=1, n_probes=8).compute(params)
    forked = LiveLattice(workers=2, n_probes=8).compute(params)
    assert forked.timings.get("workers") == 2 and "workers" not in serial.timings
    assert forked.n_energies == serial.n_energies == forked.factorizations > 1
    np.testing.assert_allclose(forked.conductance, serial.conductance, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------- caching
def test_cache_no_rebuild_for_gate_temperature_l_phi_window():
    ex = _explorer(live=LiveLattice(n_probes=8), live_calibration=False, temperature=0.0,
                   l_phi=2e-6)  # fmt: skip
    view = ex.live_view
    builds, ring = view.builds, view.ring
    c = ex.controls
    for name, value in (("gate", 1.5), ("l_phi", 1.0), ("field", (-40.0, 40.0)),
                        ("gate", -0.5), ("temperature", 0.05)):  # fmt: skip
        c[name].value = value
        assert ex.live is not None and not ex.live.rebuilt, name
        assert view.builds == builds and view.ring.fsyst is ring.fsyst, name
    # a temperature change keeps the lattice and factorizes at most once per energy of the
    # thermal policy; a new field window then needs no factorization (G per energy is kept
    # over the whole h/e period)
    assert ex.live.factorizations <= ex.live.n_energies
    c["field"].value = (-20.0, 60.0)
    assert ex.live.factorizations == 0 and ex.live.n_energies > 1
    # the reused lattice is exact for the new settings: compare with a fresh build (T = 0)
    c["temperature"].value = 0.0
    assert not ex.live.rebuilt
    fresh = build_ring(live_device(ex.params), seed=0)
    ds = field_sweep(fresh, ex.live.flux, energy=fresh.fermi_energy, gate=-0.5 * MEV,
                     l_phi=ex.params.l_phi, n_probes=view.n_probes,
                     calibrate_l_phi=False)  # fmt: skip
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)
    # geometry and disorder seed rebuild
    c["radius"].value = 130.0
    assert ex.live.rebuilt and view.builds == builds + 1
    c["seed"].value = 3
    assert ex.live.rebuilt and view.builds == builds + 2


def test_cache_energy_change():
    # fixed lattice spacing and a clean ring: the lattice does not depend on E_F -> reused
    ex = _explorer(temperature=0.0, l_phi=None, mobility=math.inf,
                   lattice_spacing=3.0e-9)  # fmt: skip
    view = ex.live_view
    builds = view.builds
    ex.controls["fermi_energy"].value = 9.0  # meV
    assert not ex.live.rebuilt and view.builds == builds
    ring = view.ring
    assert ring.fermi_energy == pytest.approx(9.0 * MEV, rel=1e-12)
    fresh = build_ring(live_device(ex.params), seed=0)
    ds = field_sweep(fresh, ex.live.flux, energy=9.0 * MEV)
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)
    # with a mobility the Anderson strength follows E_F (mean free path l = hbar kF mu/e):
    # the lattice changes, so the live view rebuilds - and stays exact
    ex.controls["mobility"].value = 2.0e5  # cm^2/(V s)
    builds = view.builds
    ex.controls["fermi_energy"].value = 8.0
    assert ex.live.rebuilt and view.builds == builds + 1
    ring = view.ring
    assert ring.disorder_strength > 0
    ds = field_sweep(ring, ex.live.flux, energy=8.0 * MEV)
    np.testing.assert_allclose(_live_line(ex)[1], ds["G"].values, rtol=0, atol=TOL)


# --------------------------------------------------------------------------- panel behaviour
def test_live_off_uniform_too_large_and_invalid():
    ex = _explorer(temperature=0.0, l_phi=None)
    good = _live_line(ex)[1].copy()
    ex.controls["width"].value = 300.0  # wider than 2 * radius: invalid
    assert "width" in ex.message.value and ex.last_error is not None
    np.testing.assert_array_equal(_live_line(ex)[1], good)  # last good plot stays
    ex.controls["width"].value = 35.0
    assert ex.message.value == ""
    ex.controls["field_mode"].value = "uniform"
    assert ex.live is None and "live" not in ex.artists
    assert "flux-tube" in ex.live_note and "lattice (live)" in ex.summary.value
    ex.controls["field_mode"].value = "flux_tube"
    assert ex.live is not None
    ex.controls["radius"].value = 3000.0  # ~50 000 sites at the automatic spacing
    assert ex.live is None and "sites >" in ex.live_note
    ex.live_lattice.value = False
    assert ex.live is None and ex.live_note is None
    assert "preview" in ex.artists


def test_live_and_full_drawn_together():
    ex = _explorer(temperature=0.0, l_phi=None)
    job = ex.run_full()
    assert job.wait(timeout=180) and job.error is None, job.error
    full, live = ex.full, ex.live
    assert {"preview", "live", "full", "live_spectrum", "full_spectrum"} <= set(ex.artists)
    # same model and settings: the full sweep (other grid) agrees with the live line where the
    # fluxes coincide modulo h/e; compare at B = 0
    i0 = int(np.argmin(np.abs(full.field)))
    j0 = int(np.argmin(np.abs(live.field)))
    assert abs(full.field[i0]) < 1e-12 and abs(live.field[j0]) < 1e-12
    assert full.conductance[i0] == pytest.approx(live.conductance[j0], abs=1e-9)


# --------------------------------------------------------------------------- fast build
@pytest.mark.parametrize(
    "field_mode, gate_arm, mobility",
    [("flux_tube", "upper", None), ("uniform", "lower", None), ("flux_tube", None, math.inf)],
)
def test_bulk_build_equals_kwant_builder(field_mode, gate_arm, mobility):
    from ringkit.device import ArmGate, RingDevice

    params = ExplorerParams(radius=110e-9, width=30e-9, width_ratio=1.4, lead_angle=2.9,
                            mobility=mobility, field_mode=field_mode)  # fmt: skip
    gate = None if gate_arm is None else ArmGate(arm=gate_arm, potential=0.3 * MEV)
    device = RingDevice(params.material_obj(), params.geometry(), gate=gate,
                        field_mode=field_mode)  # fmt: skip
    fast = tb_builder._build_square(device, 5, direct=True)
    ref = tb_builder._build_square(device, 5, direct=False)
    f1, f2 = fast.fsyst, ref.fsyst
    assert type(f1) is type(f2) and f1.sites == f2.sites
    assert list(f1.graph) == list(f2.graph)  # same edges in the same order
    assert f1.parameters == f2.parameters
    assert [n for _, n in f1.hoppings] == [n for _, n in f2.hoppings]
    assert [n for _, n in f1.onsites] == [n for _, n in f2.onsites]
    for a, b in zip(f1.lead_interfaces, f2.lead_interfaces, strict=True):
        np.testing.assert_array_equal(a, b)
    for a, b in zip(f1.leads, f2.leads, strict=True):
        assert a.sites == b.sites
        np.testing.assert_array_equal(a.cell_hamiltonian(), b.cell_hamiltonian())
        np.testing.assert_array_equal(a.inter_cell_hopping(), b.inter_cell_hopping())
    for name in ("positions", "tags", "arm_of_site", "onsite_potential"):
        np.testing.assert_array_equal(getattr(fast, name), getattr(ref, name))
    field = {"flux": 0.37 * H_OVER_E} if field_mode == "flux_tube" else {"B": 0.05}
    p = fast.params(**field)
    h1 = f1.hamiltonian_submatrix(params=p, sparse=True).tocoo()
    h2 = f2.hamiltonian_submatrix(params=p, sparse=True).tocoo()
    np.testing.assert_array_equal(h1.row, h2.row)
    np.testing.assert_array_equal(h1.col, h2.col)
    np.testing.assert_array_equal(h1.data, h2.data)  # bit for bit
    e_t = fast.fermi_energy_lattice
    t1 = kwant.smatrix(f1, e_t, params=p).transmission(1, 0)
    t2 = kwant.smatrix(f2, e_t, params=p).transmission(1, 0)
    assert t1 == pytest.approx(t2, abs=1e-11)  # kwant's MUMPS/SCOTCH is not bit-reproducible


@pytest.mark.parametrize("arm", ["upper", "lower"])
def test_gated_model_equals_kwant_hamiltonian(arm):
    # H(gate) = H(0) + gate P_arm, assembled by the live view, against kwant's own evaluation
    # of the value functions (hamiltonian_submatrix) and a plain kwant.smatrix at one flux
    from ringkit.transport.lowrank import FluxTubeModel
    from ringkit.view.panels.explorer_live import gated_model

    ring = build_ring(live_device(ExplorerParams(**SMALL, gate_arm=arm, mobility=30.0)), seed=2)
    zero = ring.params(flux=0.0)
    root = FluxTubeModel(ring.fsyst, params={**zero, "gate": 0.0})
    gate = 0.37 * MEV / ring.hopping
    model = gated_model(root, gate, ring.arm_of_site == arm)
    ref = ring.fsyst.hamiltonian_submatrix(params={**zero, "gate": gate}, sparse=True).tocoo()
    np.testing.assert_array_equal(model.h0.row, ref.row)
    np.testing.assert_array_equal(model.h0.col, ref.col)
    np.testing.assert_array_equal(model.h0.data, ref.data)  # same sums: bit for bit
    assert np.count_nonzero(model.h0.data != root.h0.data) > 100  # the arm is gated
    flux = 0.31 * H_OVER_E
    t = FluxTubeSweeper(model, energy=ring.fermi_energy_lattice).transmission([flux])[0]
    p = ring.params(flux=flux, gate=0.37 * MEV)
    t_ref = kwant.smatrix(ring.fsyst, ring.fermi_energy_lattice, params=p).transmission(1, 0)
    assert t == pytest.approx(t_ref, abs=1e-9)


def test_bad_live_settings_raise_parameter_error():
    from ringkit._validation import ParameterError

    with pytest.raises(ParameterError, match="max_energies"):
        LiveLattice(max_energies=0)
    with pytest.raises(ParameterError, match="points_per_period"):
        LiveLattice(points_per_period=2)
    with pytest.raises(ParameterError, match="field_max"):
        live_flux_grid(0.01, -0.01, 0.02)
    with pytest.raises(ParameterError, match="period"):
        live_flux_grid(-0.01, 0.01, 0.0)
    with pytest.raises(ParameterError, match="flux-tube"):
        LiveLattice().compute(ExplorerParams(**SMALL, field_mode="uniform"))
