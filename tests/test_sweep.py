"""The default (fast) field-sweep path of ringkit.transport.field_sweep against plain kwant.

References: kwant.smatrix on the same finalized system (an independent solver path), the
thermal identity G(T) = sum_k w_k G(E_k) evaluated with kwant at every grid energy, and the
Onsager-Büttiker relation G(B) = G(-B) for two terminals with floating probes (Büttiker,
Phys. Rev. Lett. 57, 1761 (1986)).
"""

from __future__ import annotations

import math
import warnings

import kwant
import numpy as np
import pytest
from scipy import constants

from ringkit.device import ArmGate, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import field_sweep
from ringkit.transport.fastsweep import FieldSweeper
from ringkit.transport.sweep import transmission_bound
from ringkit.transport.thermal import thermal_average
from ringkit.units import PHI0

A = 10e-9
T_A = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)


def _ring(mode: str, seed: int = 3):
    mat = Material(0.067, fermi_energy=1.3 * T_A, disorder_strength=0.6 * T_A, name="test")
    geo = RingGeometry.circular(45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25))
    dev = RingDevice(
        mat,
        geo,
        lattice_spacing=A,
        field_mode=mode,
        gate=ArmGate("upper", 0.02 * T_A),
        max_kfa=1.2,
    )
    return build_ring(dev, seed=seed)


def _kwant_G(ring, name, values, energy_t):
    out = []
    for v in values:
        p = ring.params(**{name: v})
        out.append(2 * kwant.smatrix(ring.fsyst, energy_t, params=p).transmission(1, 0))
    return np.array(out)


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_fast_path_equals_kwant(mode):
    ring = _ring(mode)
    name = ring.field_param
    values = np.linspace(-0.3, 0.4, 9) if mode == "uniform" else np.linspace(-1.3, 2.6, 9) * PHI0
    fast = field_sweep(ring, values)
    slow = field_sweep(ring, values, method="kwant")
    assert "ringkit.transport" in fast.attrs["solver"]
    ref = _kwant_G(ring, name, values, ring.fermi_energy_lattice)
    assert np.max(np.abs(fast["G"].values - ref)) < 1e-10
    assert np.max(np.abs(slow["G"].values - ref)) < 1e-10
    assert fast.attrs["n_energies"] == 1
    assert fast.attrs["thermal_error_estimate"] == 0.0


def test_finite_temperature_equals_policy_sum_of_kwant_values():
    ring = _ring("flux_tube")
    fluxes = np.array([0.3]) * PHI0
    temperature, tol = 2.0, 1e-2  # K (k_B T / t = 0.0306 here), e^2/h (a loose goal: fast)
    ds = field_sweep(ring, fluxes, temperature=temperature, thermal_tol=tol)
    # the same policy run on plain kwant.smatrix values picks the same energies (the values
    # agree to 1e-10) and gives G(T) = sum_k w_k G(E_k)
    values: dict[float, np.ndarray] = {}

    def kwant_t(e: float) -> np.ndarray:
        values[e] = _kwant_G(ring, "flux", fluxes, e) / 2
        return values[e]

    avg = thermal_average(
        kwant_t,
        ring.fermi_energy_lattice,
        temperature,
        energy_unit=ring.hopping,
        tol=0.5 * tol,
        bound=transmission_bound(ring, ring.fermi_energy_lattice, temperature, tol, ring.params()),
    )
    assert ds.attrs["n_energies"] == avg.n_energies > 15
    assert ds.attrs["thermal_error_estimate"] == pytest.approx(2 * avg.error, rel=1e-6)
    assert ds.attrs["thermal_tol"] == tol and ds.attrs["thermal_method"] == "adaptive"
    ref = 2 * avg.weights @ np.array([values[float(e)] for e in avg.energies])
    assert np.max(np.abs(ds["G"].values - ref)) < 1e-9
    # T -> 0 is the single-energy result
    cold = field_sweep(ring, fluxes, temperature=1e-9)
    assert np.max(np.abs(cold["G"].values - field_sweep(ring, fluxes)["G"].values)) < 1e-8


@pytest.mark.parametrize("mode", ["uniform", "flux_tube"])
def test_dephasing_probes_keep_onsager_and_reduce_h_over_e(mode):
    ring = _ring(mode)
    if mode == "uniform":
        period = PHI0 / ring.device.geometry.area_mean
        values = np.linspace(0, 2 * period, 24, endpoint=False)
        values = np.r_[values, -values]
    else:
        values = np.linspace(0, 1, 24, endpoint=False) * PHI0
        values = np.r_[values, -values]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # field-regime warnings are not the subject here
        coherent = field_sweep(ring, values)["G"].values
        weak = field_sweep(ring, values, l_phi=2e-6, n_probes=20)
        strong = field_sweep(ring, values, l_phi=50e-9, n_probes=20)
    n = len(values) // 2
    for g in (weak["G"].values, strong["G"].values):
        assert np.max(np.abs(g[1:n] - g[n + 1 :])) < 1e-10  # G(B) = G(-B)

    def swing(g):
        return np.ptp(g[:n])

    assert swing(strong["G"].values) < swing(weak["G"].values) < swing(coherent)
    assert weak.attrs["n_probes"] == 20 and weak.attrs["l_phi_m"] == pytest.approx(2e-6)


def test_method_choices_and_errors():
    ring = _ring("uniform")
    with pytest.raises(ValueError, match="method"):
        field_sweep(ring, [0.0, 0.1], method="magic")
    with pytest.raises(ValueError, match="temperature and l_phi"):
        field_sweep(ring, [0.0, 0.1], method="kwant", temperature=1.0)
    with pytest.raises(ValueError, match="zeeman"):
        field_sweep(ring, [0.0, 0.1], method="fast", zeeman=True)
    # the engine is used by default and agrees with its own smatrix on this ring
    sw = FieldSweeper(ring.fsyst, field_param="B", params=ring.params(), energy=0.5)
    assert sw.n_leads == 2


# --------------------------------------------------------------------------------------------
# Realised L_phi by default (issue 15.1; docs/probes.md "Realised L_phi") and the explicit
# field/flux keywords (issue 15.9; docs/conventions.md "Field or flux").


def _gaas(mode: str, seed: int = 5):
    dev = RingDevice(
        Material.preset("GaAs", temperature=0.3),
        RingGeometry.from_mean_radius(0.1e-6, 0.03e-6),
        field_mode=mode,
    )
    return build_ring(dev, seed=seed)


L_PHI = 0.25e-6  # pi r/L_phi = 1.26, inside the validated range (VALIDATED_DAMPING)


def test_default_sweeps_report_the_realised_l_phi_and_calibrate_once():
    # Every dephasing result carries the L_phi its probes realise, with an error. The probes
    # are those of calibrate_ring_probes (checked by recomputing G with them through the
    # independent FluxTubeSweeper path), and one device is calibrated once per process: the
    # uniform-field ring reuses its flux-tube twin's calibration, a finite-T sweep reuses the
    # probes of the T = 0 sweep.
    from ringkit.transport.lowrank import FluxTubeSweeper
    from ringkit.transport.probe_calibration import calibrate_ring_probes
    from ringkit.transport.realised_l_phi import cache_info, clear_calibration_cache

    clear_calibration_cache()
    tube, uni = _gaas("flux_tube"), _gaas("uniform")
    flux = np.linspace(0, 1, 12, endpoint=False) * PHI0
    ds = field_sweep(tube, fluxes=flux, l_phi=L_PHI, n_probes=24)
    assert cache_info()["setups"] == 1 and cache_info()["calibrations"] == 1
    for key in ("l_phi_realised_m", "l_phi_realised_err_m"):
        assert math.isfinite(ds.attrs[key]) and ds.attrs[key] > 0
    assert ds.attrs["l_phi_realised_m"] == pytest.approx(L_PHI, rel=0.031)  # secant tol 3 %
    assert ds.attrs["l_phi_realised_err_m"] < 0.5 * L_PHI
    assert ds.attrs["l_phi_status"].startswith("measured on this device")
    pr = calibrate_ring_probes(tube, L_PHI, tube.fermi_energy, n_probes=24)  # from the cache
    assert cache_info()["setups"] == 1 and cache_info()["calibrations"] == 1
    assert cache_info()["reused"] >= 1
    ref = FluxTubeSweeper(
        tube.fsyst, energy=tube.fermi_energy_lattice, params=tube.params(), probes=pr
    ).conductance(flux)
    assert np.max(np.abs(ds["G"].values - 2 * np.asarray(ref))) < 1e-10
    period = PHI0 / uni.device.geometry.area_mean
    b = np.linspace(0, period, 12, endpoint=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # field-regime hints are not the subject
        du = field_sweep(uni, fields=b, l_phi=L_PHI, n_probes=24)
    warm = field_sweep(
        tube, fluxes=flux[:2], l_phi=L_PHI, n_probes=24, temperature=0.05, thermal_tol=1e-2
    )
    assert cache_info()["setups"] == 1 and cache_info()["calibrations"] == 1  # no recalibration
    for d in (du, warm):
        assert d.attrs["l_phi_realised_m"] == ds.attrs["l_phi_realised_m"]
        assert d.attrs["l_phi_realised_err_m"] == ds.attrs["l_phi_realised_err_m"]
        assert d.attrs["l_phi_status"].startswith("measured on this device")
    assert warm.attrs["n_energies"] > 1 and warm.attrs["temperature_K"] == 0.05


def test_opt_out_says_not_measured_and_coherent_results_say_no_dephasing():
    ring = _gaas("flux_tube")
    flux = np.linspace(0, 1, 8, endpoint=False) * PHI0
    fast = field_sweep(ring, fluxes=flux, l_phi=L_PHI, n_probes=24, calibrate_l_phi=False)
    assert math.isnan(fast.attrs["l_phi_realised_m"])
    assert math.isnan(fast.attrs["l_phi_realised_err_m"])
    assert fast.attrs["l_phi_status"].startswith("not measured (calibrate_l_phi=False)")
    coherent = field_sweep(ring, fluxes=flux)
    assert coherent.attrs["l_phi_realised_m"] == math.inf
    assert coherent.attrs["l_phi_status"] == "no dephasing"


def test_out_of_range_l_phi_warns_with_the_range_every_time():
    from ringkit.transport.probe_calibration import CalibrationRangeWarning

    ring = _gaas("flux_tube")
    flux = np.linspace(0, 1, 8, endpoint=False) * PHI0
    for _ in range(2):  # the second call is served from the cache and still warns
        with pytest.warns(CalibrationRangeWarning, match=r"validated range 0.25 <= pi r/L_phi"):
            ds = field_sweep(ring, fluxes=flux, l_phi=20e-6, n_probes=24)
    assert ds.attrs["l_phi_realised_m"] == pytest.approx(20e-6, rel=0.1)


def test_field_or_flux_keywords_name_the_mode():
    tube, uni = _gaas("flux_tube"), _gaas("uniform")
    flux = np.array([0.0, 0.3]) * PHI0
    with pytest.raises(ValueError, match=r"fields.*field_mode 'flux_tube'.*fluxes="):
        field_sweep(tube, fields=[0.0, 0.01])
    with pytest.raises(ValueError, match=r"fluxes.*field_mode 'uniform'.*fields="):
        field_sweep(uni, fluxes=flux)
    with pytest.raises(ValueError, match="exactly one"):
        field_sweep(tube, flux, fluxes=flux)
    with pytest.raises(ValueError, match="exactly one"):
        field_sweep(tube)
    # the positional form takes the ring's unit and refuses values that cannot be meant so
    with pytest.raises(ValueError, match=r"flux in Wb in field_mode 'flux_tube'"):
        field_sweep(tube, [0.0, 0.01])  # tesla given to a flux-tube ring
    with pytest.raises(ValueError, match=r"field B in T in field_mode 'uniform'"):
        field_sweep(uni, flux)  # webers given to a uniform-field ring
    keyword = field_sweep(tube, fluxes=flux)
    assert np.array_equal(field_sweep(tube, flux)["G"].values, keyword["G"].values)
    assert "flux" in keyword.coords and keyword["flux"].attrs["units"] == "Wb"


def test_failed_calibration_falls_back_with_a_warning_and_says_not_measured(monkeypatch):
    from ringkit._validation import ParameterError
    from ringkit.transport import realised_l_phi

    def fail(*args, **kwargs):
        raise ParameterError("l_phi", 1.0, "the probes do not damp the h/e amplitude here")

    monkeypatch.setattr(realised_l_phi, "realised_ring_probes", fail)
    ring = _gaas("flux_tube")
    flux = np.linspace(0, 1, 8, endpoint=False) * PHI0
    with pytest.warns(realised_l_phi.LPhiNotMeasuredWarning, match="calibration failed"):
        ds = field_sweep(ring, fluxes=flux, l_phi=L_PHI, n_probes=24)
    assert math.isnan(ds.attrs["l_phi_realised_m"])
    assert ds.attrs["l_phi_status"].startswith("not measured: the calibration failed")
    assert ds.attrs["n_probes"] == 24 and ds.attrs["probe_eta"] > 0  # still dephased
