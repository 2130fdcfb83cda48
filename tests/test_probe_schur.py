"""Shortcuts of the dephased flux-tube path (issue 11, pt 6; docs/studies.md, "Dephasing").

* The probe blocks come from one MUMPS Schur complement (ringkit/transport/_lowrank_schur.py);
  at an energy on an eigenvalue of the closed interior that elimination meets a null pivot,
  which its guards (growth of the Schur complement, S-matrix unitarity of the block) detect,
  and the pivoting LU is used instead.
* The all-channel amplitudes are checked against S-matrix unitarity at every flux point
  (sum_i |a_ij|^2 + 2 Im a_jj = 0, from G - G^+ = -i G Gamma G^+; D. S. Fisher and P. A. Lee,
  Phys. Rev. B 23, 6851 (1981)); failing points are solved directly.
* Distinct flux points only (ringkit/transport/flux_symmetry.py): h/e periodicity of a pure AB
  flux (docs/physics.md §4.5) and Onsager-Büttiker reciprocity G(-Phi) = G(Phi) of the
  two-terminal conductance (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986); docs/physics.md §5.3).

References are computed without the code under test: a dense numpy inverse of E - H - Sigma with
the Fisher-Lee formula, and kwant.smatrix on the same finalized system.
"""

from __future__ import annotations

import warnings

import kwant
import numpy as np
import pytest
import scipy.constants as sc
from lowrank_systems import flux_tube_ring, ring_sites_near

import ringkit.transport._lowrank_schur as schur_mod
from ringkit.transport.fastsweep import kron_reduce
from ringkit.transport.flux_symmetry import flux_classes, is_reciprocal
from ringkit.transport.lowrank import FluxTubeModel, FluxTubeSweeper, LowRankFallbackWarning

H_OVER_E = sc.h / sc.e  # CODATA exact SI value
TOL = 1e-10  # exactness of the fast paths against kwant / dense references (issue 8)


def _dense_t(fsyst, energy, flux, sites, etas):
    """T_pq of leads + wide-band probes from a dense inverse (Fisher-Lee)."""
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
    t = np.zeros((len(blocks), len(blocks)))
    for p, (ip, sp_) in enumerate(blocks):
        for q, (iq, sq) in enumerate(blocks):
            if p != q:
                gpq = g[np.ix_(ip, iq)]
                gp, gq = 1j * (sp_ - sp_.conj().T), 1j * (sq - sq.conj().T)
                t[p, q] = np.trace(gp @ gpq @ gq @ gpq.conj().T).real
    return t


@pytest.fixture(scope="module")
def ring():
    fsyst = flux_tube_ring(10.0, 6.0, lead_width=4, disorder=1.0, seed=3)
    sites = ring_sites_near(fsyst, np.linspace(0.4, 2 * np.pi - 0.4, 6), 8.0)
    etas = [0.2, 0.4, 0.3, 0.5, 0.25, 0.35]
    return fsyst, sites, etas


def _interior_eigenvalue(model, sweeper, near):
    """An eigenvalue of the closed interior: H without the kept (cut, lead, probe) orbitals."""
    keep = np.unique(np.concatenate([model.cut.rows, model.cut.cols, sweeper._i_orbs]))
    rest = np.setdiff1d(np.arange(model.h0.shape[0]), keep)
    h = model.h0.tocsr()[rest][:, rest].toarray()
    lam = np.linalg.eigvalsh(h)
    return float(lam[np.argmin(np.abs(lam - near))])


def test_schur_block_is_used_and_exact(ring):
    fsyst, sites, etas = ring
    model = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    sw = FluxTubeSweeper(model, energy=1.1)
    assert model._schur is not None and model._schur.null_pivots == 0
    fluxes = np.array([-0.6, 0.13, 0.77]) * H_OVER_E
    tm = sw.transmission_matrix(fluxes)
    for k, f in enumerate(fluxes):
        np.testing.assert_allclose(tm[k], _dense_t(fsyst, 1.1, f, sites, etas), atol=TOL, rtol=0)


def test_interior_eigenvalue_is_caught_and_solved_by_lu(ring, monkeypatch):
    fsyst, sites, etas = ring
    model = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    energy = _interior_eigenvalue(model, FluxTubeSweeper(model, energy=1.0), 1.0)
    fluxes = np.array([0.21, 0.55]) * H_OVER_E
    ref = [_dense_t(fsyst, energy, f, sites, etas) for f in fluxes]
    calls = []
    original = schur_mod.SchurInverse.inverse_block

    def spy(self, data):
        out = original(self, data)
        calls.append((out is None, self.growth))
        return out

    monkeypatch.setattr(schur_mod.SchurInverse, "inverse_block", spy)
    sw = FluxTubeSweeper(model, energy=energy)
    assert calls[0][0] and calls[0][1] > schur_mod.MAX_GROWTH  # growth guard fired: LU used
    with warnings.catch_warnings():
        warnings.simplefilter("error", LowRankFallbackWarning)
        tm = sw.transmission_matrix(fluxes)
    np.testing.assert_allclose(tm, ref, atol=TOL, rtol=0)
    # the guards matter: without them the Schur block is wrong (MUMPS reports no null pivot)
    monkeypatch.setattr(schur_mod, "MAX_GROWTH", np.inf)
    monkeypatch.setattr("ringkit.transport.lowrank.MAX_UNITARITY_RESIDUAL", np.inf)
    unguarded = FluxTubeSweeper(model, energy=energy)
    assert model._schur.null_pivots == 0
    err = np.abs(unguarded.transmission(fluxes, source=0, drain=1) - [r[1, 0] for r in ref])
    assert err.max() > 1e-6


def test_a_wrong_schur_block_fails_the_unitarity_check(ring, monkeypatch):
    fsyst, sites, etas = ring
    model = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    original = schur_mod.SchurInverse.inverse_block
    monkeypatch.setattr(
        schur_mod.SchurInverse, "inverse_block", lambda self, data: original(self, data) + 1e-7
    )
    sw = FluxTubeSweeper(model, energy=1.1)
    fluxes = np.array([0.3, 0.8]) * H_OVER_E
    got = sw.transmission(fluxes, source=2, drain=1)  # no per-flux check on this path
    ref = [_dense_t(fsyst, 1.1, f, sites, etas)[1, 2] for f in fluxes]
    np.testing.assert_allclose(got, ref, atol=TOL, rtol=0)


def test_unitarity_check_sends_corrupted_points_to_the_direct_solve(ring):
    fsyst, sites, etas = ring
    model = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    fluxes = np.array([0.1, 0.4, 0.9]) * H_OVER_E
    sw = FluxTubeSweeper(model, energy=1.1)
    with warnings.catch_warnings():
        warnings.simplefilter("error", LowRankFallbackWarning)
        clean = sw.transmission_matrix(fluxes)
    assert sw.n_fallback == 0
    sw._base = sw._base + 1e-6  # a wrong block of G that the error bound cannot see
    with pytest.warns(LowRankFallbackWarning, match="solved directly"):
        checked = sw.transmission_matrix(fluxes)
    assert sw.n_fallback == fluxes.size
    np.testing.assert_allclose(checked, clean, atol=TOL, rtol=0)
    np.testing.assert_allclose(
        checked[1], _dense_t(fsyst, 1.1, fluxes[1], sites, etas), atol=TOL, rtol=0
    )


def test_distinct_flux_points_reproduce_the_full_grid(ring):
    fsyst, sites, etas = ring
    model = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=etas)
    assert is_reciprocal(model)
    grid = np.linspace(-3.0, 3.0, 201) * H_OVER_E
    reps, inverse = flux_classes(model, grid)
    assert reps.size == 51  # 201 points over 6 periods: 100 residues, folded by Phi -> -Phi
    assert flux_classes(model, np.linspace(-2.5, 2.5, 97) * H_OVER_E)[0].size == 49
    sw = FluxTubeSweeper(model, energy=1.1)
    g_full = kron_reduce(sw.conductance_matrix(grid))
    g_fold = kron_reduce(sw.conductance_matrix(reps))[inverse]
    np.testing.assert_allclose(g_fold, g_full, atol=1e-12, rtol=0)
    # and against kwant on the probe-free ring (two-terminal T, kwant's own solver)
    coherent = FluxTubeSweeper(FluxTubeModel(fsyst), energy=1.1)
    pick = [0, 37, 120, 200]
    ref = [kwant.smatrix(fsyst, 1.1, params=dict(flux=f)).transmission(1, 0) for f in grid[pick]]
    np.testing.assert_allclose(coherent.transmission(reps)[inverse][pick], ref, atol=TOL, rtol=0)


def test_a_system_without_reciprocity_is_not_folded():
    builder = flux_tube_ring(10.0, 6.0, lead_width=4, disorder=1.0, seed=3, finalized=False)
    lat = kwant.lattice.square(1.0, norbs=1)
    a, b = lat(0, -8), lat(1, -8)  # a bond of the lower arm: a fixed extra phase (not the cut)
    builder[b, a] = -np.exp(0.7j)
    fsyst = builder.finalized()
    model = FluxTubeModel(fsyst)
    assert not is_reciprocal(model)
    grid = np.array([-0.3, 0.3, 0.7, 1.3]) * H_OVER_E
    reps, inverse = flux_classes(model, grid)
    assert reps.size == 2  # periodicity only: 0.3 = 1.3 and -0.3 = 0.7 (no folding to 0.3)
    ref = [kwant.smatrix(fsyst, 1.1, params=dict(flux=f)).transmission(1, 0) for f in grid]
    assert abs(ref[0] - ref[1]) > 1e-3  # G(-Phi) != G(Phi) here: folding would be wrong
    got = FluxTubeSweeper(model, energy=1.1).transmission(reps)[inverse]
    np.testing.assert_allclose(got, ref, atol=TOL, rtol=0)


# A ~300-site GaAs ring in flux-tube mode with 8 probes (invented test scenario, as in
# tests/test_study_l_phi.py): the study engine over a symmetric grid of 48 points (24 distinct).
TINY_STUDY = """
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
mode = "flux_tube"
start = "-2 h/e"
stop = "2 h/e"
points = 48
[sweep]
temperature = "0 K"
l_phi = ["300 nm"]
[dephasing]
probes = 8
"""


def _dense_kron(fsyst, params, energy, sites, etas):
    """Two-terminal G (per spin) with floating probes from a dense inverse: Fisher-Lee T_pq,
    C = -T (off-diagonal), C_jj = sum_i T_ij, floating probe voltages solved with numpy."""
    h = fsyst.hamiltonian_submatrix(params=params)
    a = energy * np.eye(h.shape[0]) - h
    blocks = [
        (np.asarray(i), lead.selfenergy(energy, params=params))
        for i, lead in zip(fsyst.lead_interfaces, fsyst.leads, strict=True)
    ]
    blocks += [(np.array([s]), np.array([[-0.5j * e]])) for s, e in zip(sites, etas, strict=True)]
    for idx, sig in blocks:
        a[np.ix_(idx, idx)] -= sig
    g = np.linalg.inv(a)
    n = len(blocks)
    c = np.zeros((n, n))
    for p, (ip, sp_) in enumerate(blocks):
        for q, (iq, sq) in enumerate(blocks):
            if p != q:
                gpq = g[np.ix_(ip, iq)]
                gp, gq = 1j * (sp_ - sp_.conj().T), 1j * (sq - sq.conj().T)
                c[p, q] = -np.trace(gp @ gpq @ gq @ gpq.conj().T).real
    c[np.arange(n), np.arange(n)] = -c.sum(axis=0)
    v = np.linalg.solve(c[2:, 2:], -c[2:, 0])  # source 0 at V = 1, drain 1 grounded
    return -(c[1, 0] + c[1, 2:] @ v)  # current into the drain


def test_study_engine_with_probes_equals_dense_kron_reduction():
    from ringkit.study import compute, make_plan, parse_config

    plan = make_plan(parse_config(TINY_STUDY))
    task = compute.make_tasks(plan, [plan.units[0]])[0]
    engine = compute.UnitEngine(compute.state_for(task), task)
    assert engine._flux_points()[0].size == 24  # 48 points, +-Phi pairs
    ring = engine.ring
    e = ring.fermi_energy_lattice
    g = engine.conductance(e)
    sites, etas = engine.probes.sites, np.broadcast_to(engine.probes.eta, (engine.probes.n,))
    for k in (0, 5, 23, 30, 47):
        params = ring.params(flux=float(engine.field[k]))
        ref = 2.0 * _dense_kron(ring.fsyst, params, e, sites, etas)  # spin degeneracy
        assert abs(g[k] - ref) < TOL, (k, g[k], ref)
