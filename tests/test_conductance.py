"""Landauer conductance observables: G = (e^2/h) sum_sigma T_sigma, sweeps, datasets, I/O."""

from __future__ import annotations

import json
import math

import kwant
import numpy as np
import pytest
import xarray as xr
from scipy import constants

import ringkit
from ringkit._validation import ParameterError
from ringkit.device import ArmGate, Material, RingDevice, RingGeometry
from ringkit.tightbinding import build_ring
from ringkit.transport import (
    conductance,
    device_from_attrs,
    energy_sweep,
    field_sweep,
    gate_sweep,
    load_dataset,
    save_dataset,
    transmission,
)

PHI0 = constants.h / constants.e
MU_B = constants.physical_constants["Bohr magneton"][0]
A = 10e-9
T_A = constants.hbar**2 / (2 * 0.067 * constants.m_e * A**2)


def _ring(mode="uniform", g_factor=0.0, gate=True, seed=0):
    mat = Material(
        0.067, fermi_energy=1.3 * T_A, disorder_strength=0.6 * T_A, g_factor=g_factor, name="test"
    )
    geo = RingGeometry.circular(45e-9, 85e-9, width_lower=30e-9, lead_angles=(math.pi + 0.2, 0.25))
    dev = RingDevice(
        mat,
        geo,
        lattice_spacing=A,
        field_mode=mode,
        gate=ArmGate("upper", 0.02 * T_A) if gate else None,
        max_kfa=1.2,
    )
    return build_ring(dev, seed=seed)


def test_spin_degenerate_conductance_is_twice_the_transmission():
    ring = _ring()
    for b in (0.0, 0.23):
        t = transmission(ring, B=b)
        assert conductance(ring, B=b) == pytest.approx(2 * t, rel=1e-13)
        np.testing.assert_allclose(conductance(ring, B=b, spin_resolved=True), [t, t], rtol=1e-13)
        assert 0.0 < t <= ring.lead_sites  # never more than the open channels


def test_zeeman_split_spin_resolved_conductance():
    """No spin-orbit: each spin sees the band shifted by -sigma g mu_B B/2 (CODATA sign
    convention, mu_B from scipy), i.e. T_sigma(E) = T(E + sigma g mu_B B/2)."""
    g, b = -15.0, 0.3
    ring = _ring(g_factor=g)
    e = ring.fermi_energy
    t0 = transmission(ring, B=b)
    assert conductance(ring, B=b) == pytest.approx(2 * t0, rel=1e-13)  # default: degenerate
    up, down = conductance(ring, B=b, spin_resolved=True, zeeman=True)
    assert up == pytest.approx(transmission(ring, B=b, energy=e + g * MU_B * b / 2), rel=1e-12)
    assert down == pytest.approx(transmission(ring, B=b, energy=e - g * MU_B * b / 2), rel=1e-12)
    assert abs(up - down) > 1e-3  # the splitting is visible
    assert conductance(ring, B=b, zeeman=True) == pytest.approx(up + down, rel=1e-13)
    ft = _ring("flux_tube", g_factor=g)  # field-free arms: no Zeeman splitting
    up, down = conductance(ft, flux=0.3 * PHI0, spin_resolved=True, zeeman=True)
    assert up == down


def test_scattering_matrix_is_unitary_and_current_is_conserved():
    ring = _ring()
    e = ring.fermi_energy_lattice
    smat = kwant.smatrix(ring.fsyst, e, params=ring.params(B=0.17))
    s = smat.data
    np.testing.assert_allclose(s @ s.conj().T, np.eye(len(s)), atol=1e-12)
    n0 = smat.num_propagating(0)
    assert smat.transmission(1, 0) + smat.transmission(0, 0) == pytest.approx(n0, abs=1e-12)
    assert transmission(ring, B=0.17) == pytest.approx(smat.transmission(1, 0), abs=1e-12)


def test_field_sweep_dataset_values_units_and_provenance():
    ring = _ring()
    b = np.linspace(-0.1, 0.1, 7)
    ds = field_sweep(ring, b)
    assert list(ds.coords) == ["B"] and ds["B"].attrs["units"] == "T"
    assert ds["G"].attrs["units"] == "e^2/h"
    for k, bk in enumerate(b):
        assert ds["G"].values[k] == pytest.approx(conductance(ring, B=bk), abs=1e-12)
    np.testing.assert_allclose(ds["G"].values, ds["G"].values[::-1], atol=1e-10)  # G(B)=G(-B)
    attrs = ds.attrs
    assert attrs["ringkit_version"] == ringkit.__version__
    assert attrs["kwant_version"] == kwant.__version__
    assert attrs["lattice_spacing_m"] == A and attrs["hopping_J"] == pytest.approx(T_A)
    assert attrs["energy_J"] == ring.fermi_energy and attrs["n_sites"] == ring.n_sites
    assert attrs["seed"] == 0 and attrs["field_mode"] == "uniform"
    assert attrs["disorder_strength_J"] == pytest.approx(0.6 * T_A)
    # every device parameter is there, flat (with its unit in the name) and as JSON
    dev = ring.device.to_dict()
    for section in ("material", "geometry"):
        for key, value in dev[section].items():
            if value is None:
                continue
            names = [n for n in attrs if n.startswith(f"{section}_{key}")]
            assert names, f"{section}.{key} missing from the attributes"
    assert json.loads(attrs["device_json"]) == json.loads(json.dumps(dev))
    assert device_from_attrs(attrs) == ring.device


def test_datasets_round_trip_through_netcdf_losslessly(tmp_path):
    ring = _ring(g_factor=-15.0)
    ds = field_sweep(ring, np.linspace(0, 0.05, 4), spin_resolved=True, zeeman=True)
    assert ds.attrs["zeeman"] == 1
    assert ds["G_spin"].dims == ("spin", "B") and list(ds["spin"].values) == ["up", "down"]
    np.testing.assert_allclose(ds["G"], ds["G_spin"].sum("spin"), rtol=1e-14)
    path = save_dataset(ds, tmp_path / "sweep.nc")
    back = load_dataset(path)
    xr.testing.assert_identical(back, ds)
    np.testing.assert_array_equal(back["G"].values, ds["G"].values)  # bit for bit
    assert device_from_attrs(back.attrs) == ring.device


def test_energy_and_gate_sweeps():
    ring = _ring()
    energies = np.array([0.8, 1.3, 2.0]) * T_A
    ds_e = energy_sweep(ring, energies, B=0.05)
    assert ds_e["energy"].attrs["units"] == "J" and ds_e.attrs["B_T"] == 0.05
    for k, e in enumerate(energies):
        assert ds_e["G"].values[k] == pytest.approx(conductance(ring, B=0.05, energy=e), abs=1e-12)
    pots = np.array([-0.2, 0.0, 0.3]) * T_A
    ds_g = gate_sweep(ring, pots)
    assert ds_g["gate"].attrs["units"] == "J"
    for k, v in enumerate(pots):
        assert ds_g["G"].values[k] == pytest.approx(conductance(ring, gate=v), abs=1e-12)
    assert np.ptp(ds_g["G"].values) > 1e-3
    ft = _ring("flux_tube")
    ds_f = field_sweep(ft, np.array([0.0, 0.5]) * PHI0)
    assert list(ds_f.coords) == ["flux"] and ds_f["flux"].attrs["units"] == "Wb"


def test_arm_gate_shifts_the_interference_phase():
    """Electric AB effect: a symmetric 1D ring at half a flux quantum blocks (T = 0); a
    potential on one arm changes that arm's wavevector and lifts the blocking."""
    n, radius = 40, 150e-9
    a = 2 * math.pi * radius / n
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a**2)
    dev = RingDevice(
        Material(0.067, fermi_energy=0.2 * t),
        RingGeometry.chain(radius, n_sites=n),
        field_mode="flux_tube",
        gate=ArmGate("upper", 0.0),
    )
    ring = build_ring(dev)
    g = gate_sweep(ring, np.linspace(0.0, 0.1, 6) * t, flux=0.5 * PHI0)["G"].values
    assert g[0] < 1e-12
    assert g[1:].max() > 0.1


def test_bad_inputs():
    ring = _ring(gate=False)
    with pytest.raises(ParameterError, match="energy"):
        conductance(ring, energy=9 * T_A)  # above the band top 8t
    with pytest.raises(ParameterError, match="energy"):
        conductance(ring, energy=-1e-23)
    with pytest.raises(ParameterError, match="gate"):
        gate_sweep(ring, [0.0, 1e-23])
    with pytest.raises(ParameterError, match="build_ring"):
        conductance(ring.device)
    with pytest.raises(ParameterError, match="B"):
        field_sweep(ring, [])
