"""Predicted h/e and h/2e amplitudes versus ring radius (semi-analytic scaling model).

Public API
----------
predict_amplitudes(radius, *, lphi, temperature, mean_free_path, fermi_velocity, ...)
    -> xarray.Dataset on coordinate ``radius`` (m), optionally with simulated points.

Model (phenomenological; physics notes §9.1-9.4, forms and sources below)
-----------------------------------------------------------------------------
Path lengths: ``L1 = pi r`` (one arm: the pair of paths of the h/e term) and
``L2 = 2 pi r`` (circumference: the time-reversed loops of the AAS h/2e term) (§9.3).

* Dephasing: ``D_n = exp(-L_n/L_phi)`` — exponential damping with the length of the
  interfering paths (Milliken, Umbach, Webb, Phys. Rev. B 36, 4465 (1987): abstract verified,
  reference from memory; Hansen et al., Phys. Rev. B 64, 045327 (2001)).
* Regime: diffusive if the mean free path l < L1, else ballistic.
* Thermal averaging of the sample-specific (random-phase) terms:
  diffusive ``F = min(1, L_T/L)`` with ``L_T = sqrt(hbar D/(k_B T))``,
  ``D = v_F l/dimension`` — the ``T^-1/2`` law seen in Au rings (Washburn, Umbach, Laibowitz,
  Webb, Phys. Rev. B 32, 4789 (1985): law verified, reference from memory);
  ballistic ``F = x/sinh(x)``, ``x = pi k_B T L/(hbar v_F)`` — the exact energy average of
  an interference term with travel-time difference ``L/v_F`` (§5.4).
* h/e: ``amplitude_he = coherent_amplitude F(L1) D_1 / sqrt(n_averaged)``.
* h/2e: the AAS term ``aas_amplitude D_2`` (diffusive only; same phase in every sample and
  energy strip, so no thermal or ensemble reduction, §9.1; Al'tshuler, Aronov, Spivak, JETP
  Lett. 33, 94 (1981)) added in quadrature to the second h/e harmonic
  ``coherent_amplitude F(L2) D_2 / sqrt(n_averaged)``.
* Averaging ``n_averaged`` independent samples (series array or disorder ensemble) reduces
  the random-phase parts as ``N^-1/2`` and keeps AAS (Umbach et al., Phys. Rev. Lett. 56,
  386 (1986), verified abstract, §9.4).

The prefactors ``coherent_amplitude`` and ``aas_amplitude`` (rms, e^2/h) default to 1: the
fully coherent h/e fluctuation is of order e^2/h (Webb et al., Phys. Rev. Lett. 54, 2696
(1985)); calibrate them on a simulated ensemble or a measured ring. The model's content is
the scaling with r, L_phi, T and l, not the absolute scale.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from ringkit._validation import ParameterError, check_positive, check_range
from ringkit.analysis._common import Described
from ringkit.units import HBAR, K_B, PHI0

__all__ = ["predict_amplitudes", "MODEL_DESCRIPTION"]

MODEL_DESCRIPTION = (
    "amplitude_he = c_he F_T(pi r) exp(-pi r/L_phi)/sqrt(N); amplitude_h2e = "
    "sqrt((c_aas exp(-2 pi r/L_phi))^2 [diffusive only] + (c_he F_T(2 pi r) "
    "exp(-2 pi r/L_phi))^2/N); F_T = min(1, L_T/L) diffusive (L_T = sqrt(hbar D/kT), "
    "D = v_F l/d), x/sinh x ballistic (x = pi k T L/(hbar v_F)); rms in e^2/h"
)


def _thermal(length: np.ndarray, regime: np.ndarray, l_t: float, x_per_m: float) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        diff = np.minimum(1.0, l_t / length)
        x = x_per_m * length
        ball = np.where(x > 1e-8, x / np.sinh(np.maximum(x, 1e-8)), 1.0)
        ball = np.where(x > 700, 0.0, ball)
    return np.where(regime == "diffusive", diff, ball)


def _from_material(material: Any, attrs: tuple[str, ...]) -> float | None:
    for a in attrs:
        v = getattr(material, a, None)
        if v is not None:
            return float(v)
    return None


def predict_amplitudes(
    radius: np.ndarray,
    *,
    material: Any = None,
    lphi: float | None = None,
    temperature: float | None = None,
    mean_free_path: float | None = None,
    fermi_velocity: float | None = None,
    dimension: int = 2,
    coherent_amplitude: float = 1.0,
    aas_amplitude: float = 1.0,
    n_averaged: int = 1,
    simulated: Mapping | Any = None,
):
    """Semi-analytic h/e and h/2e rms amplitudes versus ring radius (module docstring).

    Parameters
    ----------
    radius : array
        Ring (mean) radii in m.
    material : object, optional
        Anything with ``fermi_velocity``, ``elastic_mean_free_path`` or
        ``mean_free_path``, ``phase_coherence_length`` and ``temperature`` (e.g.
        :class:`ringkit.device.Material`); explicit keywords override it.
    lphi : float
        Phase-coherence length L_phi in m (``inf`` allowed: no dephasing).
    temperature : float
        Temperature in K (>= 0).
    mean_free_path : float
        Elastic mean free path l in m.
    fermi_velocity : float
        Fermi velocity in m/s.
    dimension : {2, 3}
        Dimension in ``D = v_F l/d`` (2DEG: 2, metal film: 3).
    coherent_amplitude, aas_amplitude : float
        rms prefactors in e^2/h (see module docstring).
    n_averaged : int
        Number of independent samples averaged (ensemble mean, series array).
    simulated : mapping or xarray.Dataset, optional
        Simulated (or measured) points to place beside the model: ``radius`` (m) and any
        of ``amplitude_he_rms``, ``amplitude_h2e_rms`` (e^2/h) with optional ``*_err``.

    Returns
    -------
    xarray.Dataset
        Coordinate ``radius``; variables ``amplitude_he_rms``, ``amplitude_h2e_rms``,
        ``aas_h2e_rms``, ``harmonic_h2e_rms`` (e^2/h), ``thermal_factor_he``,
        ``dephasing_factor_he``, ``dephasing_factor_h2e``, ``period_he`` (T),
        ``frequency_he`` (1/T), ``path_length_he`` (m), ``regime``; with ``simulated``
        also ``sim_*`` variables on coordinate ``sim_radius`` and the model evaluated
        there (``model_amplitude_*_at_sim``). ``attrs`` hold every input and the model
        description.
    """
    import xarray as xr

    if material is not None:
        if lphi is None:
            lphi = _from_material(material, ("phase_coherence_length",))
        if temperature is None:
            temperature = _from_material(material, ("temperature",))
        if mean_free_path is None:
            mean_free_path = _from_material(material, ("elastic_mean_free_path", "mean_free_path"))
        if fermi_velocity is None:
            fermi_velocity = _from_material(material, ("fermi_velocity",))
    for name, v in (
        ("lphi", lphi),
        ("temperature", temperature),
        ("mean_free_path", mean_free_path),
        ("fermi_velocity", fermi_velocity),
    ):
        if v is None:
            raise ParameterError(name, None, "is required (directly or via material)")
    lphi = float(lphi)
    if not lphi > 0:  # inf allowed (no dephasing); NaN and <= 0 are not
        raise ParameterError("lphi", lphi, "must be > 0 (inf allowed)", "m")
    temperature = check_range("temperature", temperature, 0.0, None, "K")
    mean_free_path = check_positive("mean_free_path", mean_free_path, "m")
    fermi_velocity = check_positive("fermi_velocity", fermi_velocity, "m/s")
    if dimension not in (1, 2, 3):
        raise ParameterError("dimension", dimension, "must be 1, 2 or 3")
    c_he = check_positive("coherent_amplitude", coherent_amplitude, "e^2/h", allow_zero=True)
    c_aas = check_positive("aas_amplitude", aas_amplitude, "e^2/h", allow_zero=True)
    if int(n_averaged) != n_averaged or n_averaged < 1:
        raise ParameterError("n_averaged", n_averaged, "must be an integer >= 1")
    r = np.atleast_1d(np.asarray(radius, dtype=float))
    if r.ndim != 1 or np.any(~np.isfinite(r)) or np.any(r <= 0):
        raise ParameterError("radius", Described(str(radius)), "must be a 1-D array of > 0", "m")

    diffusion = fermi_velocity * mean_free_path / dimension
    l_t = np.inf if temperature == 0 else float(np.sqrt(HBAR * diffusion / (K_B * temperature)))
    x_per_m = np.pi * K_B * temperature / (HBAR * fermi_velocity)

    def model(rr: np.ndarray) -> dict[str, np.ndarray]:
        l1, l2 = np.pi * rr, 2 * np.pi * rr
        regime = np.where(mean_free_path < l1, "diffusive", "ballistic")
        d1, d2 = np.exp(-l1 / lphi), np.exp(-l2 / lphi)
        f1 = _thermal(l1, regime, l_t, x_per_m)
        f2 = _thermal(l2, regime, l_t, x_per_m)
        he = c_he * f1 * d1 / np.sqrt(n_averaged)
        harm = c_he * f2 * d2 / np.sqrt(n_averaged)
        aas = np.where(regime == "diffusive", c_aas * d2, 0.0)
        return {
            "amplitude_he_rms": he,
            "amplitude_h2e_rms": np.hypot(aas, harm),
            "aas_h2e_rms": aas,
            "harmonic_h2e_rms": harm,
            "thermal_factor_he": f1,
            "dephasing_factor_he": d1,
            "dephasing_factor_h2e": d2,
            "period_he": PHI0 / (np.pi * rr**2),
            "frequency_he": np.pi * rr**2 / PHI0,
            "path_length_he": l1,
            "regime": regime,
        }

    units = {
        "amplitude_he_rms": ("e^2/h", "predicted h/e rms amplitude"),
        "amplitude_h2e_rms": ("e^2/h", "predicted h/2e rms amplitude (AAS + 2nd harmonic)"),
        "aas_h2e_rms": ("e^2/h", "AAS part of the h/2e amplitude"),
        "harmonic_h2e_rms": ("e^2/h", "second h/e harmonic part of the h/2e amplitude"),
        "thermal_factor_he": ("1", "thermal averaging factor of the h/e term"),
        "dephasing_factor_he": ("1", "exp(-pi r/L_phi)"),
        "dephasing_factor_h2e": ("1", "exp(-2 pi r/L_phi)"),
        "period_he": ("T", "h/e period h/(e pi r^2)"),
        "frequency_he": ("1/T", "h/e frequency pi r^2/(h/e)"),
        "path_length_he": ("m", "path length pi r of the h/e pair"),
        "regime": ("", "diffusive if l < pi r else ballistic"),
    }
    values = model(r)
    data = {
        k: ("radius", v, {"units": units[k][0], "long_name": units[k][1]})
        for k, v in values.items()
    }
    coords: dict[str, Any] = {"radius": ("radius", r, {"units": "m", "long_name": "ring radius"})}
    if simulated is not None:
        if hasattr(simulated, "data_vars"):
            keys = set(simulated.data_vars) | set(simulated.coords)
        else:
            keys = set(simulated.keys())
        if "radius" not in keys:
            raise ParameterError("simulated", Described(str(sorted(keys))), "needs 'radius'")
        sr = np.atleast_1d(np.asarray(simulated["radius"], dtype=float))
        coords["sim_radius"] = ("sim_radius", sr, {"units": "m", "long_name": "simulated radius"})
        at = model(sr)
        present = [k for k in ("amplitude_he_rms", "amplitude_h2e_rms") if k in keys]
        if not present:
            raise ParameterError(
                "simulated",
                Described(str(sorted(keys))),
                "needs amplitude_he_rms and/or amplitude_h2e_rms",
            )
        for key in present:
            data[f"sim_{key}"] = (
                "sim_radius",
                np.asarray(simulated[key], dtype=float),
                {"units": "e^2/h", "long_name": f"simulated {key}"},
            )
            if f"{key}_err" in keys:
                data[f"sim_{key}_err"] = (
                    "sim_radius",
                    np.asarray(simulated[f"{key}_err"], dtype=float),
                    {"units": "e^2/h", "long_name": f"1-sigma error of simulated {key}"},
                )
            data[f"model_{key}_at_sim"] = (
                "sim_radius",
                at[key],
                {"units": "e^2/h", "long_name": f"model {key} at the simulated radii"},
            )
    attrs = {
        "lphi_m": lphi,
        "temperature_K": temperature,
        "mean_free_path_m": mean_free_path,
        "fermi_velocity_m_per_s": fermi_velocity,
        "dimension": dimension,
        "diffusion_constant_m2_per_s": diffusion,
        "thermal_length_m": l_t,
        "coherent_amplitude_e2h": c_he,
        "aas_amplitude_e2h": c_aas,
        "n_averaged": int(n_averaged),
        "model": MODEL_DESCRIPTION,
        "references": (
            "Milliken, Umbach, Webb PRB 36, 4465 (1987); Hansen et al. PRB 64, 045327 (2001); "
            "Washburn et al. PRB 32, 4789 (1985); Umbach et al. PRL 56, 386 (1986); "
            "Al'tshuler, Aronov, Spivak JETP Lett. 33, 94 (1981); Webb et al. PRL 54, 2696 (1985)"
        ),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)
