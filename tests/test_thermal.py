"""The thermal-averaging policy (ringkit.thermal_policy) against independent references.

References (source beside each check):

* closed form: integral cos(aE)(-df/dE) dE = x/sinh x, x = pi a k_B T. With -df/dE =
  1/(4kT cosh^2(E/2kT)) and E = 2kT y this is (1/2) integral cos(2akT y) sech^2 y dy, and
  integral cos(w y) sech^2 y dy = pi w / sinh(pi w/2) (Gradshteyn & Ryzhik 3.982.1, from memory;
  checked at w -> 0: integral sech^2 = 2);
* a chain ring with Fano resonances (the case of issue 11: 40 sites, leads 13 bonds apart,
  r = 100 nm, m* = 0.067, E_F = 1.3 t, 1 K, flux tube, Phi = h/2e): scipy.integrate.quad of the
  exact T(E) from the dense Fisher-Lee reference of tests/test_reference_fisher_lee.py (D. S.
  Fisher, P. A. Lee, Phys. Rev. B 23, 6851 (1981)), which equals kwant.smatrix to 1e-12;
* a disordered 2D ring with an arm gate: a dense uniform grid (spacing k_B T/16, trapezoidal) of
  direct kwant.smatrix values; with dephasing probes: the dense grid of the same engine;
* honesty: the true error (against the reference) is below the returned estimate.

The policy itself is described in docs/thermal.md.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import kwant
import numpy as np
import pytest
from scipy import constants, integrate
from test_reference_fisher_lee import _chain_reference

from ringkit._validation import ParameterError
from ringkit.analysis.network1d import NetworkRing, ring_transmission
from ringkit.device import ArmGate, Material, RingDevice, RingGeometry
from ringkit.thermal_policy import (
    ThermalToleranceWarning,
    budget_grid,
    energy_average,
    fermi_window,
    thermal_window,
)
from ringkit.tightbinding import build_ring
from ringkit.transport import field_sweep
from ringkit.transport.thermal import thermal_average, thouless_energy
from ringkit.units import HBAR, K_B, PHI0


def _x_over_sinh(akt: float) -> float:
    x = math.pi * akt
    return x / math.sinh(x)


@pytest.mark.parametrize("method", ["adaptive", "grid"])
@pytest.mark.parametrize("akt", [0.1, 0.5, 1.0, 3.0, 10.0])
def test_kernel_identity_x_over_sinh_x(method, akt):
    # closed form x/sinh x (module docstring); a k_B T = 10 has ~1.6 periods per k_B T, which a
    # coarse nested grid aliases: the rule must refine, not report the alias
    kt, mu = 0.02, 0.3
    a = akt / kt
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = energy_average(lambda e: np.cos(a * (e - mu)), mu, kt, method=method, spacing=kt / 16)
    true = abs(float(res.value) - _x_over_sinh(akt))
    assert res.converged and res.error <= 1e-4
    assert true <= res.error  # the estimate is honest
    assert res.weights @ np.cos(a * (res.energies - mu)) == pytest.approx(float(res.value))


def test_window_tails_and_kernel():
    kt = 0.7
    half = thermal_window(kt, 1e-4, 4.0)
    # kernel mass outside the window is below tol/(10 bound): 2/(1 + exp(L/kT))
    assert 2.0 / (1.0 + math.exp(half / kt)) * 4.0 < 1e-5
    # -df/dE integrates to 1 and has FWHM 2 ln(3 + 2 sqrt 2) k_B T = 3.5255 k_B T (closed form
    # of 1/cosh^2(x/2) = 1/2)
    e = np.linspace(-40, 40, 400001)
    w = fermi_window(e, 0.0, 1.0)
    assert np.trapezoid(w, e) == pytest.approx(1.0, abs=1e-12)
    above = e[w >= w.max() / 2]
    assert above.max() - above.min() == pytest.approx(2 * math.log(3 + 2 * math.sqrt(2)), abs=1e-3)
    energies, weights = budget_grid(0.0, kt, 31)
    assert energies.size <= 31 and weights.sum() == pytest.approx(1.0, abs=1e-14)


def _chain_ring():
    n, r = 40, 100e-9
    a = 2 * math.pi * r / n
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a**2)  # 2.30 meV
    geo = RingGeometry.chain(r, n_sites=n, lead_angles=(2 * math.pi * 13 / n, 0.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # coarse lattice (kF a = 1.14) is the point of the case
        dev = RingDevice(Material(0.067, fermi_energy=1.3 * t), geo, field_mode="flux_tube")
    return build_ring(dev), n, 27  # right lead 27 sites counter-clockwise from the left one


def test_chain_ring_with_fano_resonances_matches_quadrature_of_exact_T():
    ring, n, n_right = _chain_ring()
    mu = ring.fermi_energy_lattice
    assert mu == pytest.approx(1.3)
    kt = K_B * 1.0 / ring.hopping
    fluxes = np.array([0.5, 0.2])  # h/e units

    def reference(frac):  # quad of 2 T(E)(-df/dE) with exact T (dense Fisher-Lee)
        def f(e):
            return 2 * _chain_reference(n, n_right, e, 2 * math.pi * frac) * fermi_window(e, mu, kt)

        val, err = integrate.quad(f, mu - 20 * kt, mu + 20 * kt, epsabs=1e-10, limit=2000)
        assert err < 1e-8
        return val

    ref = np.array([reference(f) for f in fluxes])
    assert ref[0] == pytest.approx(0.94820, abs=1e-5)  # value quoted in issue 11 (quad)
    ds = field_sweep(ring, fluxes * PHI0, temperature=1.0)
    g = ds["G"].values
    true = np.abs(g - ref)
    assert true.max() < 1e-4
    assert true.max() <= ds.attrs["thermal_error_estimate"] <= 1e-4
    assert ds.attrs["thermal_method"] == "adaptive" and ds.attrs["thermal_tol"] == 1e-4
    assert ds.attrs["n_energies"] > 100  # the Fano resonances (width ~0.006 t) are resolved
    # the former grid (step min(k_B T, E_c/4) = 0.0143 t) stepped over them: 0.97576
    e_c = HBAR * ring.device.material.fermi_velocity / (2 * math.pi * 100e-9) / ring.hopping
    h = min(kt, e_c / 4)
    m = math.ceil(kt * math.log(2e6) / h)
    grid = mu + h * np.arange(-m, m + 1)
    w = fermi_window(grid, mu, kt)
    old = 2 * np.array([_chain_reference(n, n_right, e, math.pi) for e in grid]) @ (w / w.sum())
    assert old == pytest.approx(0.97576, abs=1e-5) and abs(old - ref[0]) > 0.02


def _ring2d(mode="flux_tube"):
    a = 10e-9
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a**2)
    mat = Material(0.067, fermi_energy=1.3 * t, disorder_strength=0.6 * t, name="test")
    geo = RingGeometry.circular(45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25))
    dev = RingDevice(
        mat, geo, lattice_spacing=a, field_mode=mode, gate=ArmGate("upper", 0.02 * t), max_kfa=1.2
    )
    return build_ring(dev, seed=3)


def _engine_quad(ring, fluxes, temperature, probes=None):
    """Reference: scipy.integrate.quad_vec of the per-energy engine values (which equal
    kwant.smatrix to 1e-10, spot-checked here) times -df/dE, epsabs 2e-5 (GK15)."""
    from ringkit.transport.lowrank import FluxTubeSweeper

    mu, kt = ring.fermi_energy_lattice, K_B * temperature / ring.hopping

    def g(e):
        sw = FluxTubeSweeper(ring.fsyst, energy=e, params=ring.params(), probes=probes)
        return 2 * sw.conductance(fluxes)

    for e in (mu - 0.7 * kt, mu + 1.9 * kt):  # spot check against plain kwant.smatrix
        smat = [kwant.smatrix(ring.fsyst, e, params=ring.params(flux=f)) for f in fluxes]
        if probes is None:
            assert np.allclose(g(e), [2 * s.transmission(1, 0) for s in smat], atol=1e-10)
    val, err = integrate.quad_vec(
        lambda e: g(e) * fermi_window(e, mu, kt),
        mu - 14 * kt,
        mu + 14 * kt,
        epsabs=2e-5,
        norm="max",
        limit=2000,
        quadrature="gk15",
    )
    assert err < 2e-5
    return val


def test_disordered_gated_ring_two_temperatures_with_probes():
    ring = _ring2d()
    assert ring.params()["gate"] == pytest.approx(0.02)  # the arm gate (units of t) is on
    fluxes = np.array([0.0, 0.3]) * PHI0
    # 1 K, coherent, against quadrature of direct values
    ds = field_sweep(ring, fluxes, temperature=1.0)
    true = np.abs(ds["G"].values - _engine_quad(ring, fluxes, 1.0))
    assert true.max() + 2e-5 <= ds.attrs["thermal_error_estimate"] <= 1e-4
    # 1.5 K with floating dephasing probes (coupling mapped from L_phi at E_F, as field_sweep)
    from ringkit.transport.probes import attach_probes

    probes = attach_probes(
        ring.fsyst,
        l_phi=300e-9,
        energy=ring.fermi_energy_lattice,
        n_probes=12,
        lattice_spacing=ring.lattice_spacing,
        params=ring.params(),
        zero_field={"flux": 0.0},
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # field-regime notes are not the subject
        # the subject is the thermal error estimate with the same probes as the reference
        # (analytic coupling of attach_probes), not the realised-L_phi calibration
        ds = field_sweep(
            ring, fluxes, temperature=1.5, l_phi=300e-9, n_probes=12, calibrate_l_phi=False
        )
    true = np.abs(ds["G"].values - _engine_quad(ring, fluxes, 1.5, probes))
    assert true.max() + 2e-5 <= ds.attrs["thermal_error_estimate"] <= 1e-4
    # h/e and h/2e band errors are reported (-1: not computed for 2 non-uniform points)
    assert ds.attrs["thermal_error_he"] == -1.0
    # T -> 0: the single-energy value
    cold = field_sweep(ring, fluxes, temperature=1e-6)
    zero = field_sweep(ring, fluxes)
    assert np.max(np.abs(cold["G"].values - zero["G"].values)) < 1e-4
    assert zero.attrs["n_energies"] == 1 and zero.attrs["thermal_error_estimate"] == 0.0


def test_band_projection_errors_are_controlled():
    ring = _ring2d()
    fluxes = np.linspace(0, 2, 16, endpoint=False) * PHI0
    ds = field_sweep(ring, fluxes, temperature=1.0)
    assert 0.0 < ds.attrs["thermal_error_he"] <= 1e-4
    assert 0.0 < ds.attrs["thermal_error_h2e"] <= 1e-4


def test_zero_temperature_and_t_to_zero_limit():
    res = energy_average(lambda e: np.array([np.sin(e), 2.0]), 0.4, 0.0)
    assert res.n_energies == 1 and res.error == 0.0
    assert res.value[0] == math.sin(0.4)
    # k_B T far below the scale of the integrand: the value at mu (error ~ (kT)^2 pi^2/6 f'')
    res = energy_average(lambda e: np.sin(e), 0.4, 1e-6)
    assert abs(float(res.value) - math.sin(0.4)) <= res.error + 1e-11


def test_network1d_uses_the_same_policy():
    gaas = {"effective_mass": 0.067, "fermi_energy": 10.72e-3 * constants.e}
    ring = NetworkRing(0.4e-6, **gaas, arm_fraction=0.45, coupling=0.45, temperature=0.5)
    b = np.linspace(-0.01, 0.01, 11)
    g = ring.conductance(b)
    # the same rule called directly on the network transmission gives the same numbers
    l1, l2 = ring.arm_lengths
    m_eff = 0.067 * constants.m_e

    def trans(e):
        k = np.sqrt(2 * m_eff * e) / constants.hbar
        phi = 2 * math.pi * b * ring.area / PHI0
        return ring_transmission(k * l1, k * l2, phi, 0.45)

    direct = thermal_average(trans, gaas["fermi_energy"], 0.5, tol=0.5e-4, bound=1.0)
    np.testing.assert_allclose(g, 2 * direct.value, atol=1e-12)
    avg = ring.thermal_average(b)
    assert avg.converged and avg.n_energies == direct.n_energies


def test_bad_tol_budget_warning_and_thouless_energy():
    for bad in (0.0, -1e-4, 0.5, float("nan"), "x"):
        with pytest.raises(ParameterError, match="tol"):
            energy_average(np.cos, 0.0, 0.1, tol=bad)
    ring = _ring2d()
    with pytest.raises(ParameterError, match="tol"):
        field_sweep(ring, [0.0], temperature=1.0, thermal_tol=2.0)
    with pytest.raises(ParameterError, match="method"):
        energy_average(np.cos, 0.0, 0.1, method="simpson")
    # budget too small for the tolerance: one warning with the achieved error, stored
    with pytest.warns(ThermalToleranceWarning, match="estimated error") as rec:
        res = energy_average(lambda e: np.cos(400 * e), 0.0, 0.02, max_energies=100)
    assert len(rec) == 1
    assert not res.converged and res.error > 1e-4 and res.n_energies <= 100
    assert thouless_energy(1e-6, fermi_velocity=2e5) == pytest.approx(HBAR * 2e5 / 1e-6)
    with pytest.raises(ParameterError, match="exactly one"):
        thouless_energy(1e-6)


@pytest.mark.parametrize("mode", ["flux_tube", "uniform"])
def test_explorer_full_computation_uses_the_same_policy(mode):
    # uniform: the explorer runs the spectral engine; the reference is the direct path (one
    # factorization per energy and field, checked against kwant in tests/test_fastsweep.py)
    from ringkit.view.panels.explorer import ExplorerParams
    from ringkit.view.panels.explorer_full import build_device, explorer_full

    params = ExplorerParams(
        radius=0.1e-6,
        width=0.04e-6,
        temperature=2.0,
        l_phi=None,
        field_mode=mode,
        lattice_spacing=8e-9,
        field_min=-0.2,
        field_max=0.2,
        mobility=None,
    )
    full = explorer_full(params, tol=1e-2)
    assert any("estimated error" in n for n in full.notes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # coarse lattice (kF a = 1.1): not the subject here
        ring = build_ring(build_device(params), seed=params.seed)
    if mode == "flux_tube":
        ds = field_sweep(ring, full.field * ring.loop_area, temperature=2.0, thermal_tol=1e-2)
    else:
        assert any("spectral engine" in n for n in full.notes)
        pick = slice(None, None, max(1, full.field.size // 3))  # a few fields suffice
        full = replace(full, field=full.field[pick], conductance=full.conductance[pick])
        ds = field_sweep(
            ring, full.field, temperature=2.0, thermal_tol=1e-2, thermal_engine="direct"
        )
    # same device, same policy: the same energies and the same G (values exact to 1e-10)
    assert ds.attrs["n_energies"] == full.energies.size
    np.testing.assert_allclose(ds["G"].values, full.conductance, rtol=0, atol=1e-9)


# QUADPACK Gauss-Kronrod 7/15 table (Piessens, de Doncker-Kapenga, Ueberhuber, Kahaner,
# QUADPACK, Springer 1983, routine QK15): positive nodes, Kronrod weights, Gauss weights
_QK15_XGK = [
    0.991455371120812639206854697526329,
    0.949107912342758524526189684047851,
    0.864864423359769072789712788640926,
    0.741531185599394439863864773280788,
    0.586087235467691130294144838258730,
    0.405845151377397166906606412076961,
    0.207784955007898467600689403773245,
    0.0,
]
_QK15_WGK = [
    0.022935322010529224963732008058970,
    0.063092092629978553290700663189204,
    0.104790010322250183839876322541518,
    0.140653259715525918745189590510238,
    0.169004726639267902826583426598550,
    0.190350578064785409913256402421014,
    0.204432940075298892414161999234649,
    0.209482141084727828012999174891714,
]
_QK15_WG = [
    0.129484966168869693270611432679082,
    0.279705391489276667901467771423780,
    0.381830050505118944950369775488975,
    0.417959183673469387755102040816327,
]


def test_kronrod_rules_against_quadpack_scipy_and_monomials():
    from ringkit.gauss_kronrod import kronrod_rule

    x, wk, wg = kronrod_rule(7)
    np.testing.assert_allclose(x[7:][::-1], _QK15_XGK, rtol=0, atol=1e-15)
    np.testing.assert_allclose(wk[7:][::-1], _QK15_WGK, rtol=0, atol=1e-15)
    np.testing.assert_allclose(wg[7:][::-1][1::2], _QK15_WG, rtol=0, atol=1e-15)
    # 10/21 against the table inside scipy.integrate.quad_vec (one interval, no subdivision)
    x, wk, wg = kronrod_rule(10)

    def f(t):
        return np.exp(t) * np.cos(3 * t)

    val = integrate.quad_vec(f, -1, 1, quadrature="gk21", epsabs=10.0, limit=1)[0]
    assert float(wk @ f(x)) == pytest.approx(val, abs=2e-15)
    # claimed degrees, on Legendre polynomials (closed form: integral of P_d over [-1, 1] is
    # 2 for d = 0, else 0): Kronrod exact to 3n+1, Gauss to 2n-1, and not beyond
    for n in (5, 7, 10, 15, 20):
        x, wk, wg = kronrod_rule(n)
        assert x.size == 2 * n + 1 and np.all(np.diff(x) > 0) and np.all(wk > 0)
        p = np.polynomial.legendre.legvander(x, 3 * n + 3).T  # rows P_0 .. P_{3n+3}
        exact = np.zeros(3 * n + 4)
        exact[0] = 2.0
        assert np.max(np.abs(p[: 3 * n + 2] @ wk - exact[: 3 * n + 2])) < 1e-14
        assert np.max(np.abs(p[: 2 * n] @ wg - exact[: 2 * n])) < 1e-14
        first = 3 * n + 2 + (3 * n) % 2  # the first even degree above 3n+1
        assert abs(p[first] @ wk) > 1e-5 and abs(p[2 * n] @ wg) > 1e-5
    with pytest.raises(ParameterError, match="n"):
        kronrod_rule(0)


def test_disordered_ring_at_2k_is_not_fooled():
    # docs/thermal.md ("Rejected"): a nested-trapezoid estimate said 7.6e-5 here for a true
    # error of 1.05e-3; reference: quad_vec of direct values (see _engine_quad)
    ring = _ring2d()
    fluxes = np.array([0.0, 0.5]) * PHI0
    ds = field_sweep(ring, fluxes, temperature=2.0)
    true = np.abs(ds["G"].values - _engine_quad(ring, fluxes, 2.0))
    assert true.max() + 2e-5 <= ds.attrs["thermal_error_estimate"] <= 1e-4


def test_energies_of_a_round_in_parallel_workers_equal_serial():
    from ringkit.transport.energy_pool import EnergyPool, thermal_workers
    from ringkit.transport.lowrank import FluxTubeSweeper

    ring = _ring2d()
    fluxes = np.linspace(0, 1, 8, endpoint=False) * PHI0
    sw = FluxTubeSweeper(ring.fsyst, energy=ring.fermi_energy_lattice, params=ring.params())
    kt = K_B * 1.0 / ring.hopping
    calls = []
    results = []
    for workers in (1, 2):
        with EnergyPool(sw, fluxes, workers=workers, min_seconds=0.0) as pool:

            def batch(energies, pool=pool):
                calls.append(len(energies))
                return pool(energies)

            res = energy_average(batch, sw.energy, kt, tol=5e-4, bound=2.0, batched=True)
            assert pool.used_workers == workers
        results.append(res)
    serial, parallel = results
    assert np.array_equal(serial.energies, parallel.energies)
    np.testing.assert_allclose(parallel.value, serial.value, rtol=0, atol=1e-12)
    # the policy asks for whole rounds: far fewer calls than energies
    assert len(calls) <= 2 * 8 and sum(calls) == serial.n_energies + parallel.n_energies
    # the per-energy values are those of a sweeper at that energy (kwant-checked elsewhere)
    e = float(serial.energies[3])
    row = sw.at_energy(e).conductance(fluxes)
    with EnergyPool(sw, fluxes, workers=2, min_seconds=0.0) as pool:
        np.testing.assert_allclose(pool([e, serial.energies[5]])[0], row, rtol=0, atol=1e-12)
    assert thermal_workers(3) == 3
    for bad in (0, -1, 1.5, True):
        with pytest.raises(ParameterError, match="workers"):
            thermal_workers(bad)
