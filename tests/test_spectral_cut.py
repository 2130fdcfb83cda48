"""Flux-tube ("cut") mode of the spectral engine: the cut pencil against independent references.

References, each named beside its check:
* kwant 1.5.0's scattering solver (``kwant.smatrix``) on the same finalized flux-tube system;
* a dense inverse ``(E - H(Phi) - Sigma_L - Sigma_R)^-1`` of the whole system with kwant's
  Hamiltonian and kwant's lead self-energies (``lead.selfenergy``), Fisher-Lee
  ``T = Tr(Gamma_R G Gamma_L G^dag)`` (D. S. Fisher and P. A. Lee, Phys. Rev. B 23, 6851 (1981));
* numpy's dense inverse of a random terminal-block model (the algebra of the cut update alone);
* exact symmetries: h/e periodicity of a pure Aharonov-Bohm flux and G(Phi) = G(-Phi) for a
  two-terminal conductor (M. Buttiker, Phys. Rev. Lett. 57, 1761 (1986)).
"""

from __future__ import annotations

import math

import kwant
import numpy as np
import pytest
from scipy import constants

from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import _spectral_pencil, _spectral_terminals
from ringkit.transport._spectral_pencil import CutPencil
from ringkit.transport._spectral_terminals import Terminals
from ringkit.transport.spectral import SpectralSweeper
from ringkit.units import PHI0

A = 10e-9
T_A = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)


@pytest.fixture(scope="module")
def ring():
    mat = Material(0.067, fermi_energy=1.3 * T_A, disorder_strength=0.6 * T_A, name="test")
    geo = RingGeometry.circular(45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25))
    dev = RingDevice(mat, geo, lattice_spacing=A, field_mode="flux_tube", max_kfa=1.2)
    return build_ring(dev, seed=4)


def _sweeper(ring, fluxes, **kw):
    mu = ring.fermi_energy_lattice
    sw = SpectralSweeper(
        ring.fsyst, field_param=ring.field_param, params=ring.params(), mu=mu, half_width=0.04,
        model_tol=1e-12, workers=1, **kw,
    )  # fmt: skip
    return sw.models(fluxes), mu


def _dense_t(fsyst, params, e):
    """Fisher-Lee T with a dense inverse of the whole system and kwant's self-energies."""
    h = fsyst.hamiltonian_submatrix(params=params)
    iface = [np.concatenate([np.arange(k, k + 1) for k in i]) for i in fsyst.lead_interfaces]
    offs = np.cumsum([0] + [s.family.norbs or 1 for s in fsyst.sites])
    orbs = [np.concatenate([np.arange(offs[k], offs[k + 1]) for k in i]) for i in iface]
    m = e * np.eye(len(h)) - h
    sig = [lead.selfenergy(e, params=params) for lead in fsyst.leads]
    for o, s in zip(orbs, sig, strict=True):
        m[np.ix_(o, o)] -= s
    g = np.linalg.inv(m)
    gam = [1j * (s - s.conj().T) for s in sig]
    grl = g[np.ix_(orbs[1], orbs[0])]
    return float(np.trace(gam[1] @ grl @ gam[0] @ grl.conj().T).real)


def test_pencil_sweep_matches_kwant_and_a_dense_inverse(ring):
    # 30 fluxes (>= PENCIL_MIN_VALUES: one eigendecomposition per energy serves them all),
    # unfolded; references: kwant.smatrix and the dense inverse with kwant's self-energies
    assert len(np.linspace(0, 1, 30)) >= _spectral_terminals.PENCIL_MIN_VALUES
    fluxes = np.linspace(-0.83, 1.4, 30) * PHI0
    sw, mu = _sweeper(ring, fluxes, fold=False)
    assert sw.terminals.pencil() is not None
    energies = mu + 0.04 * np.array([-0.8, 0.05, 0.9])
    g = sw.transmission(energies)
    assert sw.terminals.pencil_fallbacks == 0
    for a, e in enumerate(energies):
        for b in (0, 7, 19, 29):
            params = ring.params(**{ring.field_param: float(fluxes[b])})
            ref = kwant.smatrix(ring.fsyst, e, params=params).transmission(1, 0)
            assert abs(g[a, b] - ref) < 1e-10, (e, fluxes[b])
    params = ring.params(**{ring.field_param: float(fluxes[11])})
    assert abs(g[1, 11] - _dense_t(ring.fsyst, params, energies[1])) < 1e-10


def test_pencil_periodicity_and_onsager_on_the_unfolded_path(ring):
    # h/e periodicity (pure AB flux) and G(Phi) = G(-Phi) (Buttiker 1986), no folding
    base = np.linspace(0.0, 0.97, 13)
    fluxes = np.concatenate([base, base + 1.0, -base, -base + 2.0]) * PHI0
    sw, mu = _sweeper(ring, fluxes, fold=False)
    g = sw.transmission(mu + 0.04 * np.array([-0.6, 0.2, 0.75]))
    n = base.size
    assert np.abs(g[:, :n] - g[:, n : 2 * n]).max() < 1e-10  # Phi + h/e
    assert np.abs(g[:, :n] - g[:, 2 * n : 3 * n]).max() < 1e-10  # -Phi
    assert np.abs(g[:, :n] - g[:, 3 * n :]).max() < 1e-10  # -Phi + 2 h/e
    assert np.ptp(g[:, :n], axis=1).min() > 1e-3  # the flux does change G (not a constant)


def test_pencil_equals_the_per_flux_solve_and_falls_back_when_its_checks_fail(ring, monkeypatch):
    fluxes = np.linspace(-0.4, 2.3, 27) * PHI0
    sw, mu = _sweeper(ring, fluxes, fold=False)
    energies = mu + 0.04 * np.linspace(-0.95, 0.95, 9)
    term = sw.terminals
    g_pencil = sw.transmission(energies)
    monkeypatch.setattr(_spectral_terminals, "PENCIL_MIN_VALUES", 10**9)
    g_direct = sw.transmission(energies)
    assert np.abs(g_pencil - g_direct).max() < 1e-12
    monkeypatch.setattr(_spectral_terminals, "PENCIL_MIN_VALUES", 1)
    # a corrupted eigendecomposition (eigenvalues off by 1e-7) must be caught by the checks
    # and every energy recomputed by the direct solve, never returned
    eig = np.linalg.eig

    def bad_eig(a):
        lam, x = eig(a)
        return lam * (1 + 1e-7), x

    monkeypatch.setattr(_spectral_pencil.np.linalg, "eig", bad_eig)
    term.pencil_fallbacks = 0
    g_fallback = sw.transmission(energies)
    assert term.pencil_fallbacks == energies.size
    assert np.abs(g_fallback - g_direct).max() < 1e-12
    monkeypatch.setattr(_spectral_pencil.np.linalg, "eig", eig)
    monkeypatch.setattr(_spectral_pencil, "_KAPPA_MAX", 1.0)  # every X is "ill-conditioned"
    term.pencil_fallbacks = 0
    assert np.abs(sw.transmission(energies) - g_direct).max() < 1e-12
    assert term.pencil_fallbacks == energies.size


class _Lead:
    """A stand-in lead of the terminal block with fixed retarded self-energies (test only)."""

    def __init__(self, sig):
        self.s = np.asarray(sig, complex)
        self.n_active = self.s.size

    def sigma(self, energies):
        return np.broadcast_to(self.s, (np.size(energies), self.n_active))


@pytest.mark.parametrize("winding", ["one", "two"])
def test_cut_update_algebra_against_numpy_inverse(winding, monkeypatch):
    # random Hermitian block model (2 + 3 lead modes, 5 cut orbitals on each side, cut hops
    # S1 -> S2 with one winding, or with windings 1 and 2: no pencil, the direct solve);
    # reference: numpy's inverse of (E - H - Sigma - V(Phi)) on the whole block
    rng = np.random.default_rng(7)
    n_l = (2, 3)
    t, c = sum(n_l), 10
    b = t + c
    h = rng.normal(size=(b, b)) + 1j * rng.normal(size=(b, b))
    h = 0.5 * (h + h.conj().T)
    sig = -0.3 - 0.4j * rng.uniform(0.2, 1.0, t)
    leads = [_Lead(sig[: n_l[0]]), _Lead(sig[n_l[0] :])]
    s1, s2 = np.array([0, 2, 4, 6, 8]), np.array([1, 3, 5, 7, 9])
    hop = rng.normal(size=5) + 1j * rng.normal(size=5)
    w = np.array([1.0, 1.0, 2.0, 1.0, 1.0]) if winding == "two" else np.ones(5)
    rows = np.concatenate([s1, s2])
    cols = np.concatenate([s2, s1])
    base = np.concatenate([hop, hop.conj()])
    coef = 0.8 * np.concatenate([w, -w])
    term = Terminals(leads, np.zeros(0), c, rows, cols, base, coef)
    assert (term.pencil() is None) == (winding == "two")
    h0 = h.copy()
    h0[t + rows, t + cols] = base  # the cut hops at zero field
    energies = np.array([-0.7, 0.3, 1.1])
    g = np.linalg.inv(energies[:, None, None] * np.eye(b) - h0)
    phis = np.linspace(-2.0, 3.0, 26)
    got = term.conductance(g, energies, tuple(phis))
    for a, e in enumerate(energies):
        for j, phi in enumerate(phis):
            hp = h0.copy()
            hp[t + rows, t + cols] = base * np.exp(1j * coef * phi)
            m = e * np.eye(b) - hp
            m[np.arange(t), np.arange(t)] -= sig
            gr = np.linalg.inv(m)
            gam = -2.0 * sig.imag
            blk = gr[n_l[0] : t, : n_l[0]]
            ref = np.sum(gam[n_l[0] :, None] * np.abs(blk) ** 2 * gam[None, : n_l[0]])
            assert abs(got[a, j] - ref) < 1e-11 * max(1.0, ref), (winding, e, phi)
    monkeypatch.setattr(_spectral_terminals, "PENCIL_MIN_VALUES", 10**9)
    assert np.abs(term.conductance(g, energies, tuple(phis)) - got).max() < 1e-12


def test_pencil_structure_rules():
    # one winding with S1/S2 disjoint -> pencil; an orbital on both sides or a field-dependent
    # diagonal entry -> None (the per-flux solve)
    ok = CutPencil.build(4, [0, 2, 1, 3], [1, 3, 0, 2], [1, 1, 1, 1], [1.0, 1.0, -1.0, -1.0])
    assert ok is not None and ok.n1 == 2
    both = CutPencil.build(3, [0, 1, 1, 2], [1, 2, 0, 1], [1, 1, 1, 1], [1.0, 1.0, -1.0, -1.0])
    assert both is None
    assert CutPencil.build(2, [0, 1], [0, 1], [1, 1], [1.0, -1.0]) is None


def test_a_model_stopped_by_the_step_limit_reports_its_full_change(ring, monkeypatch):
    # grid-first checks return a lower bound while failing; a run that ends at the step limit
    # must report the full measured change (not zero, not the grid part only)
    from ringkit.transport import spectral

    monkeypatch.setattr(spectral, "_MAX_STEPS", 9)
    sw = SpectralSweeper(
        ring.fsyst, field_param=ring.field_param, params=ring.params(),
        mu=ring.fermi_energy_lattice, half_width=0.04, model_tol=1e-13, workers=1,
    )  # fmt: skip
    checks = (0.1 * PHI0, 0.4 * PHI0)
    red, err = sw.reduce(0.0, checks)
    assert red.steps <= 9 and np.isfinite(err) and err > 1e-13
