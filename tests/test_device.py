"""Device description in SI units: materials, geometries, gates, discretisation, validation."""

from __future__ import annotations

import math
import warnings

import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.device import (
    ArmGate,
    DeviceTooLargeError,
    DiscretisationWarning,
    Material,
    RingDevice,
    RingGeometry,
    dispersion_error,
)
from ringkit.units import EV, hopping_energy

MEV = 1e-3 * constants.electron_volt


# ----------------------------------------------------------------------------- materials
def test_gaas_preset_and_derived_fermi_quantities():
    """Yu & Cardona m* = 0.067; n = 3e11 cm^-2 -> E_F = 10.719 meV, kF = 1.373e8 1/m,
    v_F = 2.372e5 m/s (docs/physics.md §11, computed there; rtol 1e-4 since m_e enters)."""
    gaas = Material.preset("GaAs")
    assert gaas.effective_mass == 0.067
    assert gaas.density == 3e15
    assert gaas.fermi_energy_J / MEV == pytest.approx(10.719, rel=1e-4)
    assert gaas.fermi_wavevector == pytest.approx(1.373e8, rel=1e-3)
    assert gaas.fermi_velocity == pytest.approx(2.372e5, rel=1e-3)
    assert gaas.fermi_wavelength == pytest.approx(45.76e-9, rel=1e-3)
    # E_F = pi hbar^2 n/m* written out with scipy constants
    e_f = math.pi * constants.hbar**2 * 3e15 / (0.067 * constants.m_e)
    assert gaas.fermi_energy_J == pytest.approx(e_f, rel=1e-14)
    assert gaas.sheet_density == pytest.approx(3e15, rel=1e-12)
    # Chang et al. ring (Surf. Sci. 196, 46 (1988)): 4e4 cm^2/Vs, L_phi ~ 0.4 um
    assert gaas.mobility == pytest.approx(4.0)
    assert gaas.l_phi == pytest.approx(0.4e-6)


def test_inas_and_au_presets():
    inas = Material.preset("InAs", density=3e15)  # override drops the preset density
    assert inas.effective_mass == 0.026  # Yu & Cardona
    # E_F = pi hbar^2 n/m* (free 2DEG); docs/physics.md §3, §11
    assert inas.fermi_energy_J / MEV == pytest.approx(27.622, rel=1e-4)
    assert Material.preset("InAs", effective_mass=0.023, density=3e15).fermi_energy_J / MEV == (
        pytest.approx(31.225, rel=1e-4)
    )
    au = Material.preset("Au")
    assert au.fermi_energy_J == pytest.approx(5.53 * constants.electron_volt)
    # Ashcroft & Mermin free-electron table: v_F = 1.40e6 m/s, kF = 1.21e10 1/m (3 digits)
    assert au.fermi_velocity == pytest.approx(1.40e6, rel=0.01)
    assert au.fermi_wavevector == pytest.approx(1.21e10, rel=0.01)
    assert au.g_factor == constants.physical_constants["electron g factor"][0]
    # free-electron Zeeman energy for spin up along B: -g mu_B B/2 = +1.00116 mu_B B
    mu_b = constants.physical_constants["Bohr magneton"][0]
    assert au.zeeman_energy(1.0, +1) == pytest.approx(1.0011596521 * mu_b, rel=1e-9)
    assert au.zeeman_energy(1.0, -1) == pytest.approx(-au.zeeman_energy(1.0, +1))


def test_transport_lengths_from_mobility():
    """n = 3e11 cm^-2: mu = 1e4 / 1e5 / 1e6 cm^2/Vs -> tau = 0.381 / 3.809 / 38.09 ps,
    l = 0.090 / 0.904 / 9.04 um, D = 0.0107 / 0.107 / 1.07 m^2/s (docs/physics.md §8.3)."""
    for mu_cm2, tau_ps, l_um, d in ((1e4, 0.381, 0.090, 0.0107), (1e5, 3.809, 0.904, 0.107)):
        m = Material.preset("GaAs", mobility=mu_cm2 * 1e-4)
        assert m.scattering_time == pytest.approx(tau_ps * 1e-12, rel=2e-3)
        assert m.elastic_mean_free_path == pytest.approx(l_um * 1e-6, rel=6e-3)
        assert m.diffusion_constant == pytest.approx(d, rel=6e-3)
        # sheet conductance n e mu in units of e^2/h equals kF l (identity, notes 8.3)
        assert m.sheet_conductance == pytest.approx(
            m.fermi_wavevector * m.elastic_mean_free_path, rel=1e-12
        )
    m = Material.preset("GaAs", mean_free_path=0.904e-6)
    assert m.transport_mobility == pytest.approx(10.0, rel=2e-3)


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        (dict(effective_mass=0.0, density=1e15), "effective_mass"),
        (dict(effective_mass=0.067, density=-1e15), "density"),
        (dict(effective_mass=0.067), "fermi_energy"),
        (dict(effective_mass=0.067, fermi_energy=1e-21, density=3e15), "fermi_energy"),
        (
            dict(effective_mass=0.067, density=1e15, mobility=1.0, mean_free_path=1e-6),
            "mean_free_path",
        ),
        (dict(effective_mass=0.067, density=1e15, temperature=-1.0), "temperature"),
        (
            dict(effective_mass=0.067, density=1e15, l_phi=0.0),
            "l_phi",
        ),
    ],
)
def test_material_validation_names_parameter_value_and_range(kwargs, name):
    with pytest.raises(ParameterError) as err:
        Material(**kwargs)
    assert err.value.name == name
    assert name in str(err.value) and "not allowed" in str(err.value)


def test_unknown_preset_lists_the_choices():
    with pytest.raises(ParameterError, match=r"name = 'Si'.*'GaAs', 'InAs', 'Au'"):
        Material.preset("Si")


# ----------------------------------------------------------------------------- geometry
def test_circular_geometry_areas_and_bands():
    geo = RingGeometry.circular(392e-9, 433e-9)  # Webb et al. ring (docs/physics.md §2.1)
    assert geo.mean_radius == pytest.approx(412.5e-9)
    assert geo.area_mean == pytest.approx(0.53456e-12, rel=1e-4)
    assert geo.area_inner == pytest.approx(math.pi * 392e-9**2, rel=1e-12)
    assert geo.area_outer == pytest.approx(math.pi * 433e-9**2, rel=1e-12)
    assert sum(geo.arm_lengths) == pytest.approx(2 * math.pi * 412.5e-9)
    same = RingGeometry.from_mean_radius(412.5e-9, 41e-9)
    assert same.r_in == pytest.approx(geo.r_in) and same.r_out == pytest.approx(geo.r_out)


def test_asymmetric_arms_and_lead_angles():
    geo = RingGeometry.circular(
        100e-9, 140e-9, width_lower=20e-9, lead_angles=(math.pi, math.pi / 3), lead_width=20e-9
    )
    up, low = geo.arm_lengths
    assert up / low == pytest.approx((2 / 3) / (4 / 3))  # arcs pi - pi/3 and pi + pi/3
    assert geo.max_arm_width == pytest.approx(40e-9) and geo.min_arm_width == pytest.approx(20e-9)
    # hole: upper sector reaches r_in, the narrow lower arm leaves a larger lower half-hole
    r_m = 120e-9
    expected = 0.5 * (2 * math.pi / 3) * 100e-9**2 + 0.5 * (4 * math.pi / 3) * (r_m - 10e-9) ** 2
    assert geo.area_inner == pytest.approx(expected, rel=1e-12)


def test_rectangular_geometry():
    geo = RingGeometry.rectangular(400e-9, 300e-9, 50e-9, width_upper=30e-9)
    assert geo.area_outer == pytest.approx(400e-9 * 300e-9)
    assert geo.area_inner == pytest.approx(300e-9 * (300e-9 - 80e-9))
    assert math.pi * geo.r_in**2 == pytest.approx(geo.area_inner)
    assert geo.area_mean == pytest.approx(350e-9 * (300e-9 - 40e-9))
    assert sum(geo.arm_lengths) == pytest.approx(2 * (350e-9 + 260e-9), rel=1e-6)


@pytest.mark.parametrize(
    ("call", "name"),
    [
        (lambda: RingGeometry.circular(-1e-7, 2e-7), "r_in"),
        (lambda: RingGeometry.circular(2e-7, 2e-7), "r_in"),  # inner >= outer
        (lambda: RingGeometry.circular(3e-7, 2e-7), "r_in"),
        (lambda: RingGeometry.circular(1e-7, 2e-7, width_upper=0.0), "width_upper"),
        (lambda: RingGeometry.circular(1e-7, 2e-7, width_lower=2e-7), "width_lower"),
        (lambda: RingGeometry.circular(1e-7, 2e-7, lead_width=0.4e-6), "lead_width"),  # wider
        (lambda: RingGeometry.circular(1e-7, 2e-7, lead_angles=(0.2, 0.0)), "lead_angles[0]"),
        (lambda: RingGeometry.circular(1e-7, 2e-7, lead_angles=(math.pi, 2.0)), "lead_angles[1]"),
        (lambda: RingGeometry.rectangular(2e-7, 2e-7, 1.2e-7), "width"),
        (lambda: RingGeometry.chain(0.0), "radius"),
        (lambda: RingGeometry.chain(1e-7, n_sites=3), "n_sites"),
    ],
)
def test_geometry_validation(call, name):
    with pytest.raises(ParameterError) as err:
        call()
    assert err.value.name == name
    assert "not allowed" in str(err.value)


def test_lead_wider_than_the_ring_message_gives_the_limit():
    with pytest.raises(ParameterError, match=r"lead_width = 4e-07 m .* must be <= 3e-07 m"):
        RingGeometry.circular(1e-7, 2e-7, lead_width=4e-7)


def test_arm_gate_validation():
    assert ArmGate("lower", -1e-22).potential == -1e-22
    with pytest.raises(ParameterError, match="arm"):
        ArmGate("left", 0.0)
    with pytest.raises(ParameterError, match="potential"):
        ArmGate("upper", float("nan"))


# ----------------------------------------------------------------------------- discretisation
def test_hopping_check_value():
    """t for GaAs at a = 5 nm: 22.746 meV (t = hbar^2/(2 m* a^2) from scipy.constants;
    docs/physics.md §3)."""
    assert hopping_energy(0.067, 5e-9) / MEV == pytest.approx(22.746, rel=1e-4)


def test_dispersion_error_check_value():
    """Relative lattice error along an axis at ka = 0.5: 2.066 % (closed form 1 - 2(1 - cos
    ka)/(ka)^2; docs/physics.md §3)."""
    assert dispersion_error(0.5) == pytest.approx(0.02066, rel=1e-3)
    assert dispersion_error(0.2) == pytest.approx(0.2**2 / 12, rel=0.01)


def test_automatic_spacing_keeps_kfa_at_most_one_half():
    mat = Material.preset("GaAs")
    dev = RingDevice(mat, RingGeometry.circular(300e-9, 400e-9))
    assert dev.kfa == pytest.approx(0.5)
    assert dev.hopping == pytest.approx(hopping_energy(0.067, dev.spacing))
    assert dev.dispersion_error < 0.021
    narrow = RingDevice(mat, RingGeometry.circular(300e-9, 306e-9))  # 6 nm arms: >= 3 sites
    assert narrow.spacing == pytest.approx(2e-9) and narrow.kfa < 0.5
    chain = RingDevice(mat, RingGeometry.chain(200e-9))
    assert chain.kfa <= 0.5 and chain.n_chain_sites == pytest.approx(
        2 * math.pi * 200e-9 / chain.spacing
    )
    # a chain keeps its radius: a given spacing is rounded to a whole number of sites
    chain = RingDevice(mat, RingGeometry.chain(200e-9), lattice_spacing=3.3e-9)
    assert chain.n_chain_sites == 381
    assert chain.spacing * 381 == pytest.approx(2 * math.pi * 200e-9, rel=1e-12)
    with pytest.raises(ParameterError, match="lattice_spacing"):
        RingDevice(mat, RingGeometry.chain(200e-9, n_sites=100), lattice_spacing=3e-9)


def test_coarse_spacing_warns_with_the_error_estimate():
    mat = Material.preset("GaAs")
    kfa = mat.fermi_wavevector * 8e-9
    err = 1 - 2 * (1 - math.cos(kfa)) / kfa**2  # lattice vs parabolic band along an axis
    with pytest.warns(DiscretisationWarning, match=rf"kF\*a = 1.1 > 0.5.* {100 * err:.2g} %"):
        RingDevice(mat, RingGeometry.circular(300e-9, 400e-9), lattice_spacing=8e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        RingDevice(mat, RingGeometry.circular(300e-9, 400e-9), lattice_spacing=8e-9, max_kfa=1.2)
        RingDevice(mat, RingGeometry.circular(300e-9, 400e-9), lattice_spacing=3e-9)


def test_fermi_energy_outside_the_band_is_refused():
    mat = Material(0.067, fermi_energy=50 * MEV)
    t = hopping_energy(0.067, 10e-9)  # 5.69 meV, band top 8t = 45.5 meV
    with pytest.raises(ParameterError, match=r"fermi_energy = .* must lie inside the lattice band"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DiscretisationWarning)
            RingDevice(mat, RingGeometry.circular(300e-9, 400e-9), lattice_spacing=10e-9)
    assert 8 * t < 50 * MEV


def test_lattice_must_resolve_the_arms():
    mat = Material.preset("GaAs")
    with pytest.raises(ParameterError, match="lattice_spacing"):
        RingDevice(mat, RingGeometry.circular(300e-9, 305e-9), lattice_spacing=6e-9)


def test_site_estimate_and_size_limit():
    mat = Material.preset("GaAs")
    geo = RingGeometry.circular(300e-9, 400e-9)
    dev = RingDevice(mat, geo, max_sites=10_000)
    est = dev.site_estimate()
    ring_sites = (geo.area_outer - geo.area_inner) / dev.spacing**2
    assert ring_sites < est.n_sites < 1.1 * ring_sites
    assert est.memory_bytes > 100 * 2**20
    with pytest.raises(DeviceTooLargeError, match=r"n_sites = \d+ .*max_sites = 10,000.*MiB"):
        dev.check_size()
    assert isinstance(DeviceTooLargeError("n", 1, "x"), ParameterError)
    # an Au ring of Webb's size needs ~6e7 sites at kF a = 0.5: described, not buildable
    au = RingDevice(Material.preset("Au"), RingGeometry.circular(392e-9, 433e-9))
    assert au.site_estimate().n_sites > 5e7 > au.max_sites


def test_device_round_trip_and_validation():
    dev = RingDevice(
        Material.preset("InAs", temperature=0.3),
        RingGeometry.rectangular(400e-9, 300e-9, 60e-9, lead_angles=(math.pi + 0.1, 0.0)),
        gate=ArmGate("lower", 2e-23),
        field_mode="flux_tube",
        cut_angle=-math.pi / 2,
    )
    assert RingDevice.from_dict(dev.to_dict()) == dev
    with pytest.raises(ParameterError, match="field_mode"):
        RingDevice(dev.material, dev.geometry, field_mode="tube")
    with pytest.raises(ParameterError, match="max_sites"):
        RingDevice(dev.material, dev.geometry, max_sites=0)
    with pytest.raises(ParameterError, match="material"):
        RingDevice("GaAs", dev.geometry)
    assert dev.material.fermi_energy_J == pytest.approx(
        math.pi * constants.hbar**2 * 5e15 / (0.026 * constants.m_e)
    )
    assert EV == constants.electron_volt
