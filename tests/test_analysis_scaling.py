"""Scaling model of h/e and h/2e amplitudes versus ring size: closed forms and cited laws.

References: h/e period h/(e pi r^2) from scipy.constants; exp(-L/L_phi) damping (Milliken,
Umbach, Webb 1987, abstract verified); T^-1/2 thermal law of Au rings (Washburn et al. 1985,
law verified); x/sinh(x) check value 0.272029 at x = pi (physics notes §5.4, [C]); h/e
amplitude ∝ N^-1/2 and h/2e independent of N for N loops (Umbach et al., Phys. Rev. Lett.
56, 386 (1986), verified abstract).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis import predict_amplitudes

PHI0 = constants.h / constants.e
HBAR, K_B = constants.hbar, constants.k
R = np.linspace(0.2e-6, 2.0e-6, 19)
BASE = {"lphi": 3e-6, "temperature": 0.3, "mean_free_path": 0.1e-6, "fermi_velocity": 2e5}


def test_periods_and_labels():
    ds = predict_amplitudes(R, **BASE)
    assert ds["period_he"].values == pytest.approx(PHI0 / (np.pi * R**2), rel=1e-14)
    assert ds["frequency_he"].values == pytest.approx(np.pi * R**2 / PHI0, rel=1e-14)
    assert ds["radius"].attrs["units"] == "m"
    assert ds["amplitude_he_rms"].attrs["units"] == "e^2/h"
    for key in ("lphi_m", "temperature_K", "mean_free_path_m", "model", "references"):
        assert key in ds.attrs
    assert set(ds["regime"].values) == {"diffusive"}


def test_zero_temperature_no_dephasing_gives_prefactors():
    ds = predict_amplitudes(
        R,
        lphi=np.inf,
        temperature=0.0,
        mean_free_path=0.1e-6,
        fermi_velocity=2e5,
        coherent_amplitude=0.7,
        aas_amplitude=0.4,
    )
    assert ds["amplitude_he_rms"].values == pytest.approx(0.7, rel=1e-14)
    assert ds["amplitude_h2e_rms"].values == pytest.approx(np.hypot(0.4, 0.7), rel=1e-14)


def test_dephasing_ratio_is_exponential_in_path_length():
    ds = predict_amplitudes(
        R, lphi=1.3e-6, temperature=0.0, mean_free_path=0.05e-6, fermi_velocity=2e5
    )
    he = ds["amplitude_he_rms"].values
    assert he[1:] / he[:-1] == pytest.approx(np.exp(-np.pi * np.diff(R) / 1.3e-6), rel=1e-12)
    aas = ds["aas_h2e_rms"].values
    assert aas[1:] / aas[:-1] == pytest.approx(np.exp(-2 * np.pi * np.diff(R) / 1.3e-6), rel=1e-12)


def test_diffusive_thermal_law_and_aas_temperature_independent():
    temps = np.array([0.5, 1.0, 2.0, 4.0])
    he, aas = [], []
    for t in temps:
        ds = predict_amplitudes(
            [1.5e-6], lphi=5e-6, temperature=t, mean_free_path=0.05e-6, fermi_velocity=2e5
        )
        lt = np.sqrt(HBAR * 2e5 * 0.05e-6 / 2 / (K_B * t))
        assert ds.attrs["thermal_length_m"] == pytest.approx(lt, rel=1e-12)
        assert lt < np.pi * 1.5e-6  # in the averaging regime
        he.append(float(ds["amplitude_he_rms"][0]))
        aas.append(float(ds["aas_h2e_rms"][0]))
    slope = np.polyfit(np.log(temps), np.log(he), 1)[0]
    assert slope == pytest.approx(-0.5, abs=1e-12)  # T^-1/2
    assert aas == pytest.approx([aas[0]] * 4, rel=1e-14)  # AAS survives thermal averaging


def test_ballistic_thermal_factor_check_value():
    r = 0.5e-6
    vf = 3e5
    length = np.pi * r
    t = HBAR * vf / (K_B * length)  # x = pi k_B T L/(hbar v_F) = pi
    ds = predict_amplitudes(
        [r], lphi=np.inf, temperature=t, mean_free_path=10e-6, fermi_velocity=vf
    )
    assert ds["regime"].values[0] == "ballistic"
    assert float(ds["thermal_factor_he"][0]) == pytest.approx(0.272029, rel=1e-5)
    assert float(ds["aas_h2e_rms"][0]) == 0.0  # no AAS without diffusive backscattering


def test_series_array_averaging():
    one = predict_amplitudes(R, **BASE)
    many = predict_amplitudes(R, n_averaged=16, **BASE)
    ratio = many["amplitude_he_rms"].values / one["amplitude_he_rms"].values
    assert ratio == pytest.approx(0.25, rel=1e-14)
    assert many["aas_h2e_rms"].values == pytest.approx(one["aas_h2e_rms"].values, rel=1e-14)


def test_regime_switch_at_mean_free_path():
    ds = predict_amplitudes(
        R, lphi=3e-6, temperature=0.1, mean_free_path=np.pi * 1.0e-6, fermi_velocity=2e5
    )
    assert np.all(ds["regime"].values[R * np.pi > np.pi * 1.0e-6 + 1e-12] == "diffusive")
    assert np.all(ds["regime"].values[R < 1.0e-6 - 1e-12] == "ballistic")


def test_material_like_input_and_override():
    mat = SimpleNamespace(
        fermi_velocity=2e5,
        elastic_mean_free_path=0.1e-6,
        phase_coherence_length=3e-6,
        temperature=0.3,
    )
    a = predict_amplitudes(R, material=mat)
    b = predict_amplitudes(R, **BASE)
    assert a["amplitude_he_rms"].values == pytest.approx(b["amplitude_he_rms"].values)
    c = predict_amplitudes(R, material=mat, temperature=1.2)
    assert c.attrs["temperature_K"] == 1.2
    try:  # the project's own Material, when the device layer is present
        from ringkit.device import Material
    except ImportError:  # pragma: no cover
        return
    gaas = Material.preset("GaAs", temperature=0.3)
    ds = predict_amplitudes(R, material=gaas)
    assert ds.attrs["fermi_velocity_m_per_s"] == pytest.approx(gaas.fermi_velocity)


def test_simulated_points_side_by_side():
    sim = {
        "radius": [0.5e-6, 1.0e-6],
        "amplitude_he_rms": [0.4, 0.2],
        "amplitude_he_rms_err": [0.05, 0.03],
        "amplitude_h2e_rms": [0.1, 0.05],
    }
    ds = predict_amplitudes(R, simulated=sim, **BASE)
    assert ds["sim_amplitude_he_rms"].values == pytest.approx([0.4, 0.2])
    assert ds["sim_amplitude_he_rms_err"].values == pytest.approx([0.05, 0.03])
    at = predict_amplitudes(np.array(sim["radius"]), **BASE)
    assert ds["model_amplitude_he_rms_at_sim"].values == pytest.approx(
        at["amplitude_he_rms"].values, rel=1e-14
    )
    assert ds["sim_radius"].attrs["units"] == "m"
    import xarray as xr

    as_ds = xr.Dataset({"amplitude_h2e_rms": ("radius", [0.1])}, coords={"radius": [1e-6]})
    ds2 = predict_amplitudes(R, simulated=as_ds, **BASE)
    assert "sim_amplitude_h2e_rms" in ds2 and "sim_amplitude_he_rms" not in ds2


def test_errors_name_parameter():
    with pytest.raises(ParameterError, match="lphi"):
        predict_amplitudes(R, temperature=0.3, mean_free_path=1e-7, fermi_velocity=2e5)
    with pytest.raises(ParameterError, match="radius"):
        predict_amplitudes([-1e-6], **BASE)
    with pytest.raises(ParameterError, match="n_averaged"):
        predict_amplitudes(R, n_averaged=0, **BASE)
    with pytest.raises(ParameterError, match="simulated"):
        predict_amplitudes(R, simulated={"radius": [1e-6]}, **BASE)
