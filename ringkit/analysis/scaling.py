"""Predicted h/e and h/2e amplitudes versus ring radius (semi-analytic scaling model).

Public API
----------
predict_amplitudes(radius, *, l_phi, temperature, mean_free_path, fermi_velocity, n_modes, ...)
    -> xarray.Dataset on coordinate ``radius`` (m), optionally with simulated points.
fit_amplitude_prefactors(radius, amplitude_he=..., amplitude_h2e=..., ...)
    -> prefactors ``coherent_amplitude`` and ``aas_amplitude`` with 1-sigma errors, fitted to
    simulated (or measured) amplitudes, e.g. ensemble medians with bootstrap errors.

Model (formulas and sources in docs/amplitude-model.md; every term is continuous in r)
----------------------------------------------------------------------------------------
Path lengths (:mod:`ringkit.conventions`): ``L1 = pi r`` (h/e pair), ``L2 = 2 pi r`` (h/2e).
``b = l/(l + L1)`` is the ballistic weight (1: ballistic, 0: diffusive); the nominal regime
boundary ``l = pi r`` (``b = 1/2``) is reported as ``regime_boundary_radius``.

* Mean conductance (unless ``conductance`` is given): contacts of ``N`` modes in series with
  two arms of length ``L1`` in parallel, ``G = 2 N/(1 + L1/(2 l))`` e^2/h (spin-degenerate;
  Landauer transmission ``N lambda/(L + lambda)``, S. Datta, Electronic Transport in Mesoscopic
  Systems (CUP 1995), from memory).
* Number of independent coherent channels ``N_c = 1 + (N - 1) b (1 - m)``: ballistic arms
  without mode mixing (``m = 0``, default) keep ``N`` channels with independent phases (rms
  of the sum ~ sqrt(N), central limit theorem); a diffusive arm, or junctions and bends that
  mix the modes completely (``m = 1``), give a universal fluctuation of order e^2/h whatever
  ``N`` (Lee and Stone, Phys. Rev. Lett. 55, 1622 (1985); Webb et al., Phys. Rev. Lett. 54,
  2696 (1985)). benchmarks/RESULTS-amplitude-model.md compares both with simulated rings.
* Dephasing ``D_n = exp(-L_n/L_phi)`` (Milliken, Umbach, Webb, Phys. Rev. B 36, 4465 (1987),
  abstract verified, reference from memory; Hansen et al., Phys. Rev. B 64, 045327 (2001)).
* Thermal factor ``F = b x/sinh x + (1 - b)/sqrt(1 + (L/L_T)^2)`` with ``x = pi k_B T L/(hbar
  v_F)`` (exact energy average of a ballistic interference term) and ``L_T = sqrt(hbar D/k_B T)``,
  ``D = v_F l/d`` (smooth form of the diffusive ``T^-1/2`` law, Washburn et al., Phys. Rev. B 32,
  4789 (1985), law verified, reference from memory).
* h/e: ``A_he = c_he sqrt(N_c) F(L1) D_1/sqrt(n_averaged)``.
* h/2e: AAS term ``c_aas p_ret D_2`` with the return probability of a closed loop
  ``p_ret = (L1 + l R_j)/(L1 + l)`` (1 diffusive; the junction back-scattering probability
  ``R_j`` in a ballistic ring, default 1/9 for the symmetric three-way junction of Büttiker,
  Imry and Azbel, Phys. Rev. A 30, 1982 (1984), from memory), not reduced by thermal or
  ensemble averaging (Al'tshuler, Aronov, Spivak, JETP Lett. 33, 94 (1981); Umbach et al.,
  Phys. Rev. Lett. 56, 386 (1986)); added in quadrature to the second h/e harmonic
  ``c_he sqrt(N_c) F(L2) D_2 p_ret/sqrt(n_averaged)`` (a second winding needs the same
  return as the AAS loop).
* Bound by G: every amplitude is passed through the smooth minimum
  ``A = (A_raw^-2 + (kappa G)^-2)^-1/2`` with ``kappa = 1/sqrt(2)``: a conductance that stays
  >= 0 can oscillate at most as ``G (1 + cos phi)``, whose rms is ``G/sqrt(2)``.

The prefactors ``c_he`` (``coherent_amplitude``) and ``c_aas`` (``aas_amplitude``) default to
1 e^2/h; :func:`fit_amplitude_prefactors` fits them to simulated ensembles.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from ringkit._validation import ParameterError, check_positive, check_range
from ringkit.analysis._common import Described
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY, path_length
from ringkit.units import HBAR, K_B, PHI0

__all__ = [
    "predict_amplitudes",
    "fit_amplitude_prefactors",
    "match_prefactors",
    "MODEL_DESCRIPTION",
    "KAPPA_MAX",
]

KAPPA_MAX = 1.0 / np.sqrt(2.0)
"""Largest rms/G of an oscillating conductance that stays >= 0 (G (1 + cos phi))."""

JUNCTION_REFLECTION = 1.0 / 9.0
"""Back-scattering probability of the symmetric three-way junction (eps = 4/9, from memory)."""

MODEL_DESCRIPTION = (
    "A_he = c_he sqrt(N_c) F(pi r) exp(-pi r/L_phi)/sqrt(n); A_h2e = sqrt((c_aas p_ret "
    "exp(-2 pi r/L_phi))^2 + (c_he sqrt(N_c) F(2 pi r) exp(-2 pi r/L_phi) p_ret)^2/n); "
    "b = l/(l + pi r), N_c = 1 + (N-1) b (1-m), p_ret = (pi r + l R_j)/(pi r + l), "
    "F = b x/sinh x + (1-b)/sqrt(1 + (L/L_T)^2); each bounded smoothly by G/sqrt(2), "
    "G = 2N/(1 + pi r/(2 l)) unless given; rms in e^2/h (docs/amplitude-model.md)"
)


def _smooth_min(raw: np.ndarray, cap: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        inv = np.where(raw > 0, 1.0 / np.maximum(raw, 1e-300) ** 2, np.inf) + 1.0 / cap**2
    return np.where(raw > 0, 1.0 / np.sqrt(inv), 0.0)


def _thermal(length, ball_w, l_t: float, x_per_m: float) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = x_per_m * length
        ball = np.where(x > 1e-8, x / np.sinh(np.clip(x, 1e-8, 700)), 1.0)
        ball = np.where(x > 700, 0.0, ball)
        diff = 1.0 / np.sqrt(1.0 + (length / l_t) ** 2) if np.isfinite(l_t) else 1.0
    return ball_w * ball + (1.0 - ball_w) * diff


def _from_material(material: Any, attrs: tuple[str, ...]) -> float | None:
    for a in attrs:
        v = getattr(material, a, None)
        if v is not None:
            return float(v)
    return None


def _model(r, p: dict) -> dict[str, np.ndarray]:
    l1, l2 = path_length(r, 1), path_length(r, 2)
    mfp, n = p["mean_free_path"], p["n_modes"]
    b = mfp / (mfp + l1)
    g = p["conductance"] if p["conductance"] is not None else 2.0 * n / (1.0 + l1 / (2 * mfp))
    g = np.broadcast_to(np.asarray(g, dtype=float), r.shape)
    n_c = 1.0 + (n - 1.0) * b * (1.0 - p["mode_mixing"])
    d1, d2 = np.exp(-l1 / p["l_phi"]), np.exp(-l2 / p["l_phi"])
    f1 = _thermal(l1, b, p["l_t"], p["x_per_m"])
    f2 = _thermal(l2, b, p["l_t"], p["x_per_m"])
    sq = np.sqrt(n_c / p["n_averaged"])
    p_ret = (l1 + mfp * p["junction_reflection"]) / (l1 + mfp)
    he_raw = p["c_he"] * sq * f1 * d1
    harm_raw = p["c_he"] * sq * f2 * d2 * p_ret
    aas_raw = p["c_aas"] * p_ret * d2
    cap = KAPPA_MAX * g
    he = _smooth_min(he_raw, cap)
    h2e = _smooth_min(np.hypot(aas_raw, harm_raw), cap)
    share = np.where(np.hypot(aas_raw, harm_raw) > 0, h2e / np.hypot(aas_raw, harm_raw), 0.0)
    return {
        "amplitude_he_rms": he,
        "amplitude_h2e_rms": h2e,
        "aas_h2e_rms": aas_raw * share,
        "harmonic_h2e_rms": harm_raw * share,
        "conductance": g,
        "n_coherent_channels": n_c,
        "ballistic_weight": b,
        "return_probability": p_ret,
        "thermal_factor_he": f1,
        "dephasing_factor_he": d1,
        "dephasing_factor_h2e": d2,
        "period_he": PHI0 / (np.pi * r**2),
        "frequency_he": np.pi * r**2 / PHI0,
        "path_length_he": l1,
        "regime": np.where(mfp < l1, "diffusive", "ballistic"),
    }


_UNITS = {
    "amplitude_he_rms": ("e^2/h", "predicted h/e rms amplitude"),
    "amplitude_h2e_rms": ("e^2/h", "predicted h/2e rms amplitude (AAS + 2nd harmonic)"),
    "aas_h2e_rms": ("e^2/h", "AAS part of the h/2e amplitude"),
    "harmonic_h2e_rms": ("e^2/h", "second h/e harmonic part of the h/2e amplitude"),
    "conductance": ("e^2/h", "mean two-terminal conductance G (bound: rms <= G/sqrt(2))"),
    "n_coherent_channels": ("1", "independent coherent channels N_c = 1 + (N-1) b"),
    "ballistic_weight": ("1", "b = l/(l + pi r)"),
    "return_probability": ("1", "closed-loop return probability of the AAS term"),
    "thermal_factor_he": ("1", "thermal averaging factor of the h/e term"),
    "dephasing_factor_he": ("1", "exp(-pi r/L_phi)"),
    "dephasing_factor_h2e": ("1", "exp(-2 pi r/L_phi)"),
    "period_he": ("T", "h/e period h/(e pi r^2)"),
    "frequency_he": ("1/T", "h/e frequency pi r^2/(h/e)"),
    "path_length_he": ("m", "path length pi r of the h/e pair (ringkit.conventions)"),
    "regime": ("", "dominant regime: diffusive if l < pi r else ballistic (smooth crossover)"),
}


def _parameters(
    material,
    l_phi,
    temperature,
    mean_free_path,
    fermi_velocity,
    dimension,
    coherent_amplitude,
    aas_amplitude,
    n_averaged,
    n_modes,
    conductance,
    junction_reflection,
    mode_mixing=0.0,
) -> dict:
    if material is not None:
        if l_phi is None:
            l_phi = _from_material(material, ("l_phi",))
        if temperature is None:
            temperature = _from_material(material, ("temperature",))
        if mean_free_path is None:
            mean_free_path = _from_material(material, ("elastic_mean_free_path", "mean_free_path"))
        if fermi_velocity is None:
            fermi_velocity = _from_material(material, ("fermi_velocity",))
    for name, v in (
        ("l_phi", l_phi),
        ("temperature", temperature),
        ("mean_free_path", mean_free_path),
        ("fermi_velocity", fermi_velocity),
    ):
        if v is None:
            raise ParameterError(name, None, "is required (directly or via material)")
    l_phi = float(l_phi)
    if not l_phi > 0:  # inf allowed (no dephasing); NaN and <= 0 are not
        raise ParameterError("l_phi", l_phi, "must be > 0 (inf allowed)", "m")
    temperature = check_range("temperature", temperature, 0.0, None, "K")
    mean_free_path = check_positive("mean_free_path", mean_free_path, "m")
    fermi_velocity = check_positive("fermi_velocity", fermi_velocity, "m/s")
    if dimension not in (1, 2, 3):
        raise ParameterError("dimension", dimension, "must be 1, 2 or 3")
    c_he = check_positive("coherent_amplitude", coherent_amplitude, "e^2/h", allow_zero=True)
    c_aas = check_positive("aas_amplitude", aas_amplitude, "e^2/h", allow_zero=True)
    if int(n_averaged) != n_averaged or n_averaged < 1:
        raise ParameterError("n_averaged", n_averaged, "must be an integer >= 1")
    if int(n_modes) != n_modes or n_modes < 1:
        raise ParameterError("n_modes", n_modes, "must be an integer >= 1 (modes per arm)")
    if conductance is not None:
        g = np.asarray(conductance, dtype=float)
        if g.ndim > 1 or np.any(~np.isfinite(g)) or np.any(g <= 0):
            raise ParameterError("conductance", conductance, "must be > 0 (scalar or per radius)")
        conductance = float(g) if g.ndim == 0 else g
    r_j = check_range("junction_reflection", junction_reflection, 0.0, 1.0)
    diffusion = fermi_velocity * mean_free_path / dimension
    l_t = np.inf if temperature == 0 else float(np.sqrt(HBAR * diffusion / (K_B * temperature)))
    return {
        "l_phi": l_phi,
        "temperature": temperature,
        "mean_free_path": mean_free_path,
        "fermi_velocity": fermi_velocity,
        "dimension": dimension,
        "diffusion": diffusion,
        "l_t": l_t,
        "x_per_m": np.pi * K_B * temperature / (HBAR * fermi_velocity),
        "c_he": c_he,
        "c_aas": c_aas,
        "n_averaged": int(n_averaged),
        "n_modes": int(n_modes),
        "conductance": conductance,
        "junction_reflection": r_j,
        "mode_mixing": check_range("mode_mixing", mode_mixing, 0.0, 1.0),
    }


def predict_amplitudes(
    radius: np.ndarray,
    *,
    material: Any = None,
    l_phi: float | None = None,
    temperature: float | None = None,
    mean_free_path: float | None = None,
    fermi_velocity: float | None = None,
    dimension: int = 2,
    coherent_amplitude: float = 1.0,
    aas_amplitude: float = 1.0,
    n_averaged: int = 1,
    n_modes: int = 1,
    conductance: float | None = None,
    junction_reflection: float = JUNCTION_REFLECTION,
    mode_mixing: float = 0.0,
    simulated: Mapping | Any = None,
):
    """Semi-analytic h/e and h/2e rms amplitudes versus ring radius (module docstring).

    Parameters
    ----------
    radius : array
        Ring (mean) radii in m.
    material : object, optional
        Anything with ``fermi_velocity``, ``elastic_mean_free_path`` or
        ``mean_free_path``, ``l_phi`` and ``temperature`` (e.g.
        :class:`ringkit.device.Material`); explicit keywords override it.
    l_phi : float
        Phase-coherence length L_phi in m (``inf`` allowed), convention
        :data:`ringkit.conventions.L_PHI_CONVENTION` (h/e damped by exp(-pi r/L_phi)).
    temperature : float
        Temperature in K (>= 0).
    mean_free_path : float
        Elastic mean free path l in m.
    fermi_velocity : float
        Fermi velocity in m/s.
    dimension : {1, 2, 3}
        Dimension in ``D = v_F l/d`` (2DEG: 2, metal film: 3).
    coherent_amplitude, aas_amplitude : float
        rms prefactors ``c_he``, ``c_aas`` in e^2/h.
    n_averaged : int
        Number of independent samples averaged (ensemble mean, series array).
    n_modes : int
        Open transverse modes per arm, N >= 1.
    conductance : float or array, optional
        Mean two-terminal conductance G in e^2/h, scalar or one value per radius (default: the
        model's ``2N/(1 + pi r/2l)``).
    junction_reflection : float
        Back-scattering probability at a junction, in [0, 1] (AAS in ballistic rings).
    mode_mixing : float
        0: ballistic channels keep independent phases (sqrt(N) scaling); 1: modes fully mixed
        by junctions/bends (universal amplitude); in between linearly in ``N_c``.
    simulated : mapping or xarray.Dataset, optional
        Simulated (or measured) points to place beside the model: ``radius`` (m) and any
        of ``amplitude_he_rms``, ``amplitude_h2e_rms`` (e^2/h) with optional ``*_err``.

    Returns
    -------
    xarray.Dataset
        Coordinate ``radius``; the variables of the module docstring (``amplitude_he_rms``,
        ``amplitude_h2e_rms``, ``aas_h2e_rms``, ``harmonic_h2e_rms``, ``conductance``, ...);
        with ``simulated`` also ``sim_*`` variables on ``sim_radius`` and the model there
        (``model_amplitude_*_at_sim``). ``attrs`` hold every input, the model description,
        ``regime_boundary_radius`` (m, where l = pi r) and the L_phi convention.
    """
    import xarray as xr

    p = _parameters(
        material,
        l_phi,
        temperature,
        mean_free_path,
        fermi_velocity,
        dimension,
        coherent_amplitude,
        aas_amplitude,
        n_averaged,
        n_modes,
        conductance,
        junction_reflection,
        mode_mixing,
    )
    r = np.atleast_1d(np.asarray(radius, dtype=float))
    if r.ndim != 1 or np.any(~np.isfinite(r)) or np.any(r <= 0):
        raise ParameterError("radius", Described(str(radius)), "must be a 1-D array of > 0", "m")
    data = {
        k: ("radius", v, {"units": _UNITS[k][0], "long_name": _UNITS[k][1]})
        for k, v in _model(r, p).items()
    }
    coords: dict[str, Any] = {"radius": ("radius", r, {"units": "m", "long_name": "ring radius"})}
    if simulated is not None:
        if np.ndim(p["conductance"]) > 0:
            raise ParameterError("conductance", "array", "must be a scalar with simulated=")
        _add_simulated(data, coords, simulated, p)
    attrs = {
        "l_phi_m": p["l_phi"],
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
        "temperature_K": p["temperature"],
        "mean_free_path_m": p["mean_free_path"],
        "fermi_velocity_m_per_s": p["fermi_velocity"],
        "dimension": p["dimension"],
        "diffusion_constant_m2_per_s": p["diffusion"],
        "thermal_length_m": p["l_t"],
        "coherent_amplitude_e2h": p["c_he"],
        "aas_amplitude_e2h": p["c_aas"],
        "n_averaged": p["n_averaged"],
        "n_modes": p["n_modes"],
        "conductance_e2h": "model" if p["conductance"] is None else p["conductance"],
        # (an array of conductances, one per radius, is stored as given)
        "junction_reflection": p["junction_reflection"],
        "mode_mixing": p["mode_mixing"],
        "kappa_max": KAPPA_MAX,
        "regime_boundary_radius": p["mean_free_path"] / np.pi,
        "model": MODEL_DESCRIPTION,
        "references": (
            "Milliken, Umbach, Webb PRB 36, 4465 (1987); Hansen et al. PRB 64, 045327 (2001); "
            "Washburn et al. PRB 32, 4789 (1985); Umbach et al. PRL 56, 386 (1986); "
            "Al'tshuler, Aronov, Spivak JETP Lett. 33, 94 (1981); Webb et al. PRL 54, 2696 "
            "(1985); Lee, Stone PRL 55, 1622 (1985); Datta 1995; Buttiker, Imry, Azbel PRA 30, "
            "1982 (1984); docs/amplitude-model.md"
        ),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


def model_arrays(radius: np.ndarray, **kwargs: Any) -> dict[str, np.ndarray]:
    """The variables of :func:`predict_amplitudes` as numpy arrays (same keywords; no xarray,
    no validation of ``radius``: for fits that evaluate the model many times)."""
    import inspect

    sig = inspect.signature(predict_amplitudes).parameters
    kw = {k: v.default for k, v in sig.items() if k not in ("radius", "simulated")}
    unknown = set(kwargs) - set(kw)
    if unknown:
        raise ParameterError(sorted(unknown)[0], "given", "is not a keyword of the model")
    kw.update(kwargs)
    return _model(np.asarray(radius, dtype=float), _parameters(**kw))


def _add_simulated(data: dict, coords: dict, simulated, p: dict) -> None:
    if hasattr(simulated, "data_vars"):
        keys = set(simulated.data_vars) | set(simulated.coords)
    else:
        keys = set(simulated.keys())
    if "radius" not in keys:
        raise ParameterError("simulated", Described(str(sorted(keys))), "needs 'radius'")
    sr = np.atleast_1d(np.asarray(simulated["radius"], dtype=float))
    coords["sim_radius"] = ("sim_radius", sr, {"units": "m", "long_name": "simulated radius"})
    at = _model(sr, p)
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


# re-exported: the fits live in their own module (they call predict_amplitudes)
from ringkit.analysis.scaling_fit import (  # noqa: E402
    fit_amplitude_prefactors,
    match_prefactors,
)
