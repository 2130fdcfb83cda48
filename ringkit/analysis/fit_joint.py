"""Joint h/e + h/2e temperature fit: thermal averaging separated from dephasing.

Public API
----------
fit_l_phi_joint(t_he, a_he, t_h2e, a_h2e, *, radius | path lengths, ...) -> FitResult

Why two harmonics (``docs/physics.md``, "Separating thermal averaging from dephasing")
-------------------------------------------------------------------------------------
The h/e term comes from two paths through different arms; their phase difference depends on
energy, so the thermal average over the Fermi window multiplies it by ``F_T(T)`` (``x/sinh x``
for a phase linear in energy, :func:`ringkit.analysis.fitting.thermal_factor`). The h/2e
(Altshuler-Aronov-Spivak) term comes from a closed loop and its time-reversed partner, which
accumulate the same dynamic phase at every energy (Al'tshuler, Aronov, Spivak, JETP Lett. 33,
94 (1981)): it is insensitive to the energy average and damped by dephasing only. Fitting both
with one ``l_phi(T)`` therefore separates the two mechanisms -- the practice of Hansen et al.,
Phys. Rev. B 64, 045327 (2001). Model, with the path lengths of :mod:`ringkit.conventions`
(``L1 = pi r``, ``L2 = 2 pi r`` by default)::

    A_he(T)  = A1 F_T(T; E_c) exp(-L1 / l_phi(T))
    A_h2e(T) = A2             exp(-L2 / l_phi(T)),      l_phi(T) = l_phi_ref (T/T_ref)^-p

Parameters that the data cannot fix (for example when the h/2e amplitudes are too noisy) are
reported as unconstrained with an :class:`~ringkit.analysis.fitting.UnconstrainedWarning`
naming them (criteria: :func:`~ringkit.analysis.fitting.find_unconstrained`).
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import Described
from ringkit.analysis._fitcore import (
    FitResult,
    _data,
    _mark_unconstrained,
    fd_jacobian,
    find_unconstrained,
    physical_errors,
    thermal_factor,
)
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY, path_length
from ringkit.units import K_B

__all__ = ["fit_l_phi_joint"]


def fit_l_phi_joint(
    temperature_he: np.ndarray,
    amplitude_he: np.ndarray,
    temperature_h2e: np.ndarray,
    amplitude_h2e: np.ndarray,
    *,
    radius: float | None = None,
    path_length_he: float | None = None,
    path_length_h2e: float | None = None,
    amplitude_he_err: np.ndarray | float | None = None,
    amplitude_h2e_err: np.ndarray | float | None = None,
    thermal: Literal["ballistic", "diffusive", "none"] = "ballistic",
    thermal_energy: float | None = None,
    p: float | None = None,
    reference_temperature: float = 1.0,
) -> FitResult:
    """Fit the h/e and h/2e amplitudes versus temperature with one ``l_phi(T)``.

    Parameters
    ----------
    temperature_he, amplitude_he : array
        Temperatures (K) and h/e amplitudes (> 0, e.g. cosine amplitudes in e^2/h).
    temperature_h2e, amplitude_h2e : array
        Temperatures (K) and h/2e amplitudes (> 0); the temperatures may differ.
    radius : float, optional
        Ring radius in m: default path lengths ``pi r`` (h/e) and ``2 pi r`` (h/2e).
    path_length_he, path_length_h2e : float, optional
        Explicit path lengths in m (both, instead of ``radius``).
    amplitude_he_err, amplitude_h2e_err : array or float, optional
        1-sigma amplitude errors (give both or neither; without them the covariance is
        scaled by the reduced chi-square).
    thermal : {"ballistic", "diffusive", "none"}
        Thermal factor of the h/e term (:func:`~ringkit.analysis.fitting.thermal_factor`).
    thermal_energy : float, optional
        E_c in J; fitted (parameter ``thermal_energy``) when None and ``thermal != "none"``.
    p : float, optional
        Fix the exponent of ``l_phi ∝ T^-p`` (fitted if None).
    reference_temperature : float
        T_ref in K where ``l_phi_ref`` is quoted.

    Returns
    -------
    FitResult
        Parameters ``amplitude0_he``, ``amplitude0_h2e`` (amplitude units), ``l_phi_ref`` (m),
        ``p``, ``thermal_energy`` (J) as fitted; ``x``/``y`` are the concatenated h/e then
        h/2e data and ``fixed["harmonic"]`` tells them apart. ``predict(T)`` returns an
        array of shape ``(2, len(T))``: h/e and h/2e model amplitudes.
    """
    t1, a1, s1 = _data(temperature_he, amplitude_he, amplitude_he_err, "temperature_he", "K")
    t2, a2, s2 = _data(temperature_h2e, amplitude_h2e, amplitude_h2e_err, "temperature_h2e", "K")
    if (s1 is None) != (s2 is None):
        raise ParameterError(
            "amplitude_he_err/amplitude_h2e_err", "one of them", "give both or neither"
        )
    if radius is not None and path_length_he is None and path_length_h2e is None:
        len1, len2 = (float(path_length(radius, n)) for n in (1, 2))
    elif radius is None and path_length_he is not None and path_length_h2e is not None:
        len1 = check_positive("path_length_he", path_length_he, "m")
        len2 = check_positive("path_length_h2e", path_length_h2e, "m")
    else:
        raise ParameterError(
            "radius/path_length",
            (radius, path_length_he, path_length_h2e),
            "give radius, or path_length_he and path_length_h2e",
            "m",
        )
    check_choice("thermal", thermal, ("ballistic", "diffusive", "none"))
    t_ref = check_positive("reference_temperature", reference_temperature, "K")
    if np.any(t1 <= 0) or np.any(t2 <= 0):
        raise ParameterError("temperature", Described("values <= 0"), "must be > 0", "K")
    fit_p, fit_ec = p is None, thermal != "none" and thermal_energy is None
    if thermal_energy is not None:
        thermal_energy = check_positive("thermal_energy", thermal_energy, "J")
    names = (
        ["amplitude0_he", "amplitude0_h2e", "l_phi_ref"]
        + (["p"] if fit_p else [])
        + (["thermal_energy"] if fit_ec else [])
    )
    t_all = np.concatenate([t1, t2])
    is_he = np.r_[np.ones(t1.size, bool), np.zeros(t2.size, bool)]
    need = len(names) + (1 if s1 is None else 0)
    if t_all.size < need or t1.size < 2 or t2.size < 2:
        raise ParameterError(
            "temperature_he/temperature_h2e",
            Described(f"{t1.size} + {t2.size} points"),
            f"need >= 2 of each and >= {need} in total for {names}",
        )
    y = np.log(np.concatenate([a1, a2]))
    sy = None if s1 is None else np.concatenate([s1 / a1, s2 / a2])
    ratio = len2 / len1

    def unpack(q):
        pp = q[3] if fit_p else float(p)
        ec = float(np.exp(q[-1])) if fit_ec else thermal_energy
        return q[0], q[1], q[2], pp, ec

    def log_model(idx, *q):
        idx = np.asarray(idx, dtype=int)
        la1, la2, lc, pp, ec = unpack(q)
        tt = t_all[idx]
        decay = np.exp(lc) * (tt / t_ref) ** pp
        ft = thermal_factor(tt, thermal, ec) if thermal != "none" else np.ones_like(tt)
        he = la1 + np.log(np.maximum(ft, 1e-300)) - decay
        return np.where(is_he[idx], he, la2 - ratio * decay)

    idx = np.arange(t_all.size)
    dof = t_all.size - len(names)
    good_chi2 = dof + 3.0 * np.sqrt(2.0 * max(dof, 1))
    best = None
    starts_p = [1.0, 0.5, 2.0] if fit_p else [float(p)]
    starts_ec = (
        [K_B * float(np.median(t_all)) * f for f in (0.3, 1.0, 3.0, 10.0)]
        if fit_ec
        else [thermal_energy]
    )
    for p0 in starts_p:
        # h/2e alone fixes the dephasing law: ln A2 = ln A2_0 - (L2/l_phi_ref) (T/T_ref)^p0
        slope, icpt = np.polyfit((t2 / t_ref) ** p0, np.log(a2), 1)
        c1 = max(-slope / ratio, 1e-3)
        base_he = np.log(a1) + c1 * (t1 / t_ref) ** p0
        for ec0 in starts_ec:
            ft0 = thermal_factor(t1, thermal, ec0) if thermal != "none" else 1.0
            la1 = float(np.mean(base_he - np.log(np.maximum(ft0, 1e-300))))
            q0 = [la1, icpt, np.log(c1)] + ([p0] if fit_p else [])
            q0 += [np.log(ec0)] if fit_ec else []
            try:
                with warnings.catch_warnings():  # an inestimable covariance is reported below
                    warnings.simplefilter("ignore", OptimizeWarning)
                    q, cov = curve_fit(
                        log_model,
                        idx,
                        y,
                        p0=q0,
                        sigma=sy,
                        absolute_sigma=sy is not None,
                        jac=fd_jacobian(log_model),
                        maxfev=2000,
                    )
            except (RuntimeError, ValueError):
                continue
            r = (y - log_model(idx, *q)) / (1.0 if sy is None else sy)
            chi2 = float(np.sum(r**2))
            if best is None or chi2 < best[0]:
                best = (chi2, q, cov)
        if best is not None and sy is not None and best[0] <= good_chi2:
            break  # statistically acceptable: no need for further starting points
    if best is None:
        n = len(names)
        best = (float("nan"), np.asarray(q0, float), np.full((n, n), np.nan))
        message = "fit failed"
    else:
        message = "converged"
    chi2, q, cov = best
    la1, la2, lc, pp, ec = unpack(q)
    vals = {
        "amplitude0_he": float(np.exp(la1)),
        "amplitude0_h2e": float(np.exp(la2)),
        "l_phi_ref": float(len1 / np.exp(lc)),
    }
    jac = [vals["amplitude0_he"], vals["amplitude0_h2e"], -vals["l_phi_ref"]]
    errs, cov_ext = physical_errors(vals, jac, cov, names, (fit_p, pp, fit_ec, ec))
    notes: list[str] = []
    bad, why = find_unconstrained(
        names, cov, np.asarray(q), amplitudes=("amplitude0_he", "amplitude0_h2e")
    )
    estimates = _mark_unconstrained(
        vals,
        errs,
        bad,
        why,
        "The h/e and h/2e data do not discriminate thermal averaging from dephasing: "
        "measure more temperatures or the h/2e amplitude with smaller errors, or fix p or "
        "the thermal energy.",
        notes,
    )
    success = bool(np.all(np.isfinite(cov))) and message == "converged"
    units = {
        "amplitude0_he": "amplitude",
        "amplitude0_h2e": "amplitude",
        "l_phi_ref": "m",
        "p": "1",
        "thermal_energy": "J",
    }
    q_best = np.asarray(q, float)

    def predict(tt: np.ndarray) -> np.ndarray:
        tt = np.atleast_1d(np.asarray(tt, dtype=float))
        la1_, la2_, lc_, pp_, ec_ = unpack(q_best)
        decay = np.exp(lc_) * (tt / t_ref) ** pp_
        ft = thermal_factor(tt, thermal, ec_) if thermal != "none" else 1.0
        return np.vstack([np.exp(la1_) * ft * np.exp(-decay), np.exp(la2_ - ratio * decay)])

    return FitResult(
        values=vals,
        errors=errs,
        covariance=cov_ext,
        parameter_names=tuple(names),
        units={n: units[n] for n in names},
        chi2=chi2,
        dof=int(dof),
        success=success and not bad,
        message=message if not bad else f"{message}; unconstrained: {', '.join(bad)}",
        model=(
            f"A_he = A1 F_T(T) exp(-L1/l_phi), A_h2e = A2 exp(-L2/l_phi), "
            f"l_phi = l_phi_ref (T/{t_ref:g} K)^-p, L1 = {len1:.6g} m, L2 = {len2:.6g} m, "
            f"F_T = {thermal}"
        ),
        x=t_all,
        y=np.exp(y),
        sigma=None if sy is None else np.concatenate([s1, s2]),
        fixed={
            "path_length_he": len1,
            "path_length_h2e": len2,
            "reference_temperature": t_ref,
            "thermal": thermal,
            "harmonic": np.where(is_he, 1, 2),
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            **({} if fit_p else {"p": float(p)}),
            **({} if fit_ec or thermal == "none" else {"thermal_energy": thermal_energy}),
        },
        _predict=predict,
        unconstrained=tuple(bad),
        estimates=estimates,
        notes=tuple(notes),
    )
