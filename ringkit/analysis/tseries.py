"""L_phi(T) from a temperature series of analysed traces (kwant-free helper for CLI and panel).

Public API
----------
group_by_temperature(temperatures, rtol=1e-3) -> list of index lists
l_phi_from_series(temperatures, amplitudes_rms, noise_rms, *, radius, ...) -> dict

Traces at the same temperature (up and down sweeps, several columns) are averaged: the
cosine amplitude is ``sqrt(2) x`` the mean band rms, and its 1-sigma error combines the
noise-floor contribution of each trace (``noise_rms / sqrt(n)``) with the scatter between the
sweeps (standard error of the mean). The fit is
:func:`ringkit.analysis.fitting.fit_l_phi_temperature` with the path length of
:func:`ringkit.conventions.path_length` (h/e: ``L = pi r``); its parameter errors are the
fit's. docs/measured-data.md, "Temperature series".
"""

from __future__ import annotations

import math

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis.fitting import fit_l_phi_temperature, l_phi_at
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY, path_length

__all__ = ["group_by_temperature", "l_phi_from_series"]


def group_by_temperature(temperatures: list[float | None], rtol: float = 1e-3) -> list[list[int]]:
    """Indices of equal temperatures (within ``rtol``), sorted by temperature; None skipped."""
    known = sorted((t, i) for i, t in enumerate(temperatures) if t is not None)
    groups: list[list[int]] = []
    ref = None
    for t, i in known:
        if ref is None or abs(t - ref) > rtol * max(abs(ref), 1e-300):
            groups.append([])
            ref = t
        groups[-1].append(i)
    return groups


def _average(idx: list[int], temps, amps: np.ndarray, noise: np.ndarray) -> dict:
    """Mean cosine amplitude of traces ``idx`` and its error (module docstring)."""
    a = amps[idx]
    nz = np.where(np.isfinite(noise[idx]), noise[idx], 0.0)
    n = len(idx)
    var = float(np.mean(nz**2)) / n + (float(np.var(a, ddof=1)) / n if n > 1 else 0.0)
    return {
        "temperature_K": float(np.mean([temps[i] for i in idx])),
        "amplitude_e2h": math.sqrt(2) * float(np.mean(a)),
        "amplitude_err_e2h": math.sqrt(2) * math.sqrt(var),
        "n_traces": n,
    }


def _points(temps, amps, noise) -> list[dict]:
    amps = np.asarray(amps, dtype=float)
    noise = np.asarray(noise, dtype=float)
    usable = [
        t if (t is not None and math.isfinite(amps[i]) and amps[i] > 0) else None
        for i, t in enumerate(temps)
    ]
    return [_average(idx, temps, amps, noise) for idx in group_by_temperature(usable)]


def _arrays(pts: list[dict]) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    t = np.array([q["temperature_K"] for q in pts])
    a = np.array([q["amplitude_e2h"] for q in pts])
    err = np.array([q["amplitude_err_e2h"] for q in pts])
    return t, a, (err if np.all(err > 0) else None)


def l_phi_from_series(
    temperatures: list[float | None],
    amplitudes_rms: list[float],
    noise_rms: list[float],
    *,
    radius: float,
    order: int = 1,
    thermal: str = "none",
    thermal_energy: float | None = None,
    p: float | None = None,
    amplitudes_h2e_rms: list[float] | None = None,
    noise_h2e_rms: list[float] | None = None,
) -> dict:
    """Average per temperature and fit L_phi(T) (module docstring).

    Parameters
    ----------
    temperatures : list of float or None
        Temperature of each trace in K (traces without one are left out, and counted).
    amplitudes_rms, noise_rms : list of float
        Band rms amplitude and its noise-floor contribution of each trace (e^2/h); NaN
        entries (not analysed) are left out.
    radius : float
        Ring radius in m (path length ``order * pi * radius``).
    order, thermal, thermal_energy, p
        Passed to :func:`~ringkit.analysis.fitting.fit_l_phi_temperature`.
    amplitudes_h2e_rms, noise_h2e_rms : list of float, optional
        h/2e band rms and noise of each trace: the joint h/e + h/2e fit
        (:func:`~ringkit.analysis.fit_joint.fit_l_phi_joint`, Hansen et al., Phys. Rev. B
        64, 045327 (2001)) separates thermal averaging (h/e only) from dephasing.

    Returns
    -------
    dict
        ``l_phi_ref_m``, ``l_phi_ref_err_m`` (L_phi at the reference temperature and its
        1-sigma error; NaN/inf if unconstrained), ``points`` (T, amplitude, error, n
        traces; ``points_h2e`` for the joint fit), ``fit`` (values, errors, units, reduced
        chi2, model, unconstrained, notes), ``l_phi_at_points_m`` and errors,
        ``path_length_m``, ``l_phi_convention``, ``n_traces_without_temperature``.
    """
    pts = _points(temperatures, amplitudes_rms, noise_rms)
    if len(pts) < 3:
        raise ParameterError(
            "temperature series",
            f"{len(pts)} distinct temperatures",
            "need at least 3 temperatures with an h/e amplitude (give group_by or a "
            "temperature in each file's header or name)",
        )
    t, a, err = _arrays(pts)
    length = float(path_length(radius, order))
    out: dict = {}
    if amplitudes_h2e_rms is not None:
        from ringkit.analysis.fit_joint import fit_l_phi_joint

        pts2 = _points(temperatures, amplitudes_h2e_rms, noise_h2e_rms)
        t2, a2, err2 = _arrays(pts2)
        both = err is not None and err2 is not None
        fit = fit_l_phi_joint(
            t,
            a,
            t2,
            a2,
            radius=radius,
            amplitude_he_err=err if both else None,
            amplitude_h2e_err=err2 if both else None,
            thermal=thermal,
            thermal_energy=thermal_energy,
            p=p,
        )
        out["points_h2e"] = pts2
        out["path_length_h2e_m"] = float(path_length(radius, 2))
    else:
        fit = fit_l_phi_temperature(
            t,
            a,
            path_length=length,
            order=order,
            amplitude_err=err,
            thermal=thermal,
            thermal_energy=thermal_energy,
            p=p,
        )
    l_phi, l_phi_err = l_phi_at(fit, t)
    ref_name = next(k for k in fit.values if k.replace("_", "") == "lphiref")
    out.update(
        {
            "l_phi_ref_m": float(fit.values[ref_name]),
            "l_phi_ref_err_m": float(fit.errors[ref_name]),
            "reference_temperature_K": float(fit.fixed.get("reference_temperature", 1.0)),
            "points": pts,
            "fit": {
                "values": dict(fit.values),
                "errors": dict(fit.errors),
                "units": dict(fit.units),
                "reduced_chi2": fit.reduced_chi2,
                "dof": fit.dof,
                "model": fit.model,
                "success": fit.success,
                "unconstrained": list(getattr(fit, "unconstrained", ())),
                "notes": list(getattr(fit, "notes", ())),
                "joint": amplitudes_h2e_rms is not None,
            },
            "l_phi_at_points_m": [float(x) for x in np.ravel(l_phi)],
            "l_phi_err_at_points_m": [float(x) for x in np.ravel(l_phi_err)],
            "path_length_m": length,
            "order": order,
            "thermal": thermal,
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            "n_traces_without_temperature": sum(1 for x in temperatures if x is None),
        }
    )
    return out
