"""Phase-coherence length ``l_phi`` from oscillation amplitudes (scipy.optimize fits with errors).

Public API
----------
FitResult(values, errors, covariance, ...)      fitted parameters and 1-sigma errors
thermal_factor(temperature, kind, energy)        thermal averaging factor F_T
fit_l_phi_temperature(temperature, amplitude, *, path_length | radius, ...) -> FitResult
fit_l_phi_size(radius, amplitude, *, order=1, path_length=None, ...) -> FitResult
l_phi_at(fit, temperature) -> (l_phi, error)
UnconstrainedWarning                             the data cannot fix some parameters
(The joint h/e + h/2e temperature fit is :func:`ringkit.analysis.fit_joint.fit_l_phi_joint`.)

Model (``docs/physics.md``, "Amplitude damping and thermal averaging")
-----------------------------------------------------------------------
``A(T) = A0 F_T(T) exp(-L/l_phi(T))`` with ``l_phi(T) = l_phi_ref (T/T_ref)^-p`` and L the
explicit length of the interfering paths, in the one convention of
:mod:`ringkit.conventions` (``L = pi r`` for h/e, ``order=1``; ``2 pi r`` for the h/2e AAS
loop, ``order=2``); every result states it in ``fixed["l_phi_convention"]``. Exponential
damping with path length: Milliken, Umbach, Webb, Phys. Rev. B 36, 4465 (1987) (abstract
verified; reference from memory); ``l_phi ∝ 1/T`` in GaAs rings: Hansen et al., Phys. Rev. B
64, 045327 (2001).

Thermal factor F_T (documented choice, :func:`thermal_factor`):

* ``"none"``: 1 (thermal averaging negligible or already divided out);
* ``"ballistic"``: ``x/sinh(x)``, ``x = pi k_B T / E_c``, the exact average of an
  interference term whose phase changes with energy as ``E/E_c`` (``E_c = hbar/tau``,
  tau the travel-time difference of the paths; ``docs/physics.md``, "Thermal averaging");
* ``"diffusive"``: ``min(1, sqrt(E_c/(k_B T)))`` with ``E_c = hbar D/L^2`` the Thouless
  energy: ``k_B T/E_c`` independent energy strips average a random-phase signal as
  ``T^(-1/2)`` (observed in Au rings, Washburn et al. 1985; form from memory).

The fit is made on ``ln A`` (relative errors ``sigma_A/A``) with ``scipy.optimize.curve_fit``;
errors are the square roots of the covariance diagonal. Without ``amplitude_err`` the
covariance is scaled by the reduced chi-square (``absolute_sigma=False``).

Unconstrained parameters. One harmonic cannot separate thermal averaging from dephasing:
with the energy scale free, ``x/sinh x`` and ``l_phi ∝ 1/T`` both give ``exp(-c T)``, and a
pure power law ``T^-1/2`` (thermal averaging alone) is fitted by ``exp(-c T^p)`` with
``p -> 0``. Linearised errors are then far too small. A parameter is reported as
*unconstrained* (value NaN, error inf, best-fit number kept in ``estimates``, an
:class:`UnconstrainedWarning` naming it) when its 1-sigma error exceeds
:data:`MAX_LOG_ERROR` in ``ln`` for scale parameters (a factor 1.65), or ``0.5 min(|p|, 1)``
for ``p`` (p not distinguishable from 0, or from its neighbours 1/2 and 1), or when it is
correlated with another non-amplitude parameter by more than :data:`MAX_CORRELATION` (a
degenerate direction), or when the covariance cannot be estimated.
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import Described
from ringkit.analysis._fitcore import (
    MAX_CORRELATION,
    MAX_LOG_ERROR,
    FitResult,
    UnconstrainedWarning,
    _data,
    _mark_unconstrained,
    _path_length,
    fd_jacobian,
    find_unconstrained,
    physical_errors,
    thermal_factor,
)
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY
from ringkit.conventions import path_length as _default_path_length
from ringkit.units import K_B

__all__ = [
    "FitResult",
    "UnconstrainedWarning",
    "MAX_LOG_ERROR",
    "MAX_CORRELATION",
    "thermal_factor",
    "find_unconstrained",
    "fd_jacobian",
    "fit_l_phi_temperature",
    "fit_l_phi_size",
    "l_phi_at",
]


def fit_l_phi_temperature(
    temperature: np.ndarray,
    amplitude: np.ndarray,
    *,
    radius: float | None = None,
    path_length: float | None = None,
    order: int = 1,
    amplitude_err: np.ndarray | float | None = None,
    thermal: Literal["none", "ballistic", "diffusive"] = "none",
    thermal_energy: float | None = None,
    p: float | None = None,
    reference_temperature: float = 1.0,
) -> FitResult:
    """Fit ``A(T) = A0 F_T(T) exp(-(L/l_phi_ref) (T/T_ref)^p)`` to one harmonic.

    One harmonic cannot separate thermal averaging from dephasing when both the energy
    scale and ``p`` are free (module docstring): such parameters come out unconstrained
    with an :class:`UnconstrainedWarning`; fit h/e and h/2e together with
    :func:`ringkit.analysis.fit_joint.fit_l_phi_joint`.

    Parameters
    ----------
    temperature : array
        Temperatures in K.
    amplitude : array
        Oscillation amplitudes (e.g. rms in e^2/h), > 0.
    radius, path_length : float
        Ring radius in m (``L = order pi r``, :func:`ringkit.conventions.path_length`) or the
        path length L of the interfering paths directly; one of them.
    order : {1, 2}
        1 for h/e (L = pi r), 2 for h/2e (L = 2 pi r).
    amplitude_err : array or float, optional
        1-sigma errors of the amplitudes.
    thermal : {"none", "ballistic", "diffusive"}
        Thermal factor (:func:`thermal_factor`).
    thermal_energy : float, optional
        E_c in J; if None and ``thermal != "none"`` it is fitted (parameter
        ``"thermal_energy"``).
    p : float, optional
        Fix the exponent of ``L_phi ∝ T^-p`` (fitted if None).
    reference_temperature : float
        T_ref in K where ``l_phi_ref`` is quoted.

    Returns
    -------
    FitResult
        Parameters ``amplitude0`` (units of A), ``l_phi_ref`` (m), ``p`` and possibly
        ``thermal_energy`` (J); unconstrained ones are NaN (``unconstrained``).
    """
    length = _path_length(radius, path_length, order)
    t, a, sig = _data(temperature, amplitude, amplitude_err, "temperature", "K")
    t_ref = check_positive("reference_temperature", reference_temperature, "K")
    check_choice("thermal", thermal, ("none", "ballistic", "diffusive"))
    fit_ec = thermal != "none" and thermal_energy is None
    fit_p = p is None
    names = (
        ["amplitude0", "l_phi_ref"]
        + (["p"] if fit_p else [])
        + (["thermal_energy"] if fit_ec else [])
    )
    if np.any(t <= 0) and (fit_p or (p is not None and p > 0)):
        raise ParameterError("temperature", Described(str(temperature)), "must be > 0", "K")
    n_par = len(names)
    need = n_par + (0 if sig is not None else 1)
    if t.size < need:
        raise ParameterError(
            "temperature", Described(f"{t.size} points"), f"need at least {need} for {names}"
        )

    def unpack(q):
        ln_a0, ln_c = q[0], q[1]
        pp = q[2] if fit_p else float(p)
        ec = np.exp(q[-1]) if fit_ec else thermal_energy
        return ln_a0, ln_c, pp, ec

    def log_model(tt, *q):
        ln_a0, ln_c, pp, ec = unpack(q)
        ft = thermal_factor(tt, thermal, ec) if thermal != "none" else 1.0
        return ln_a0 + np.log(np.maximum(ft, 1e-300)) - np.exp(ln_c) * (tt / t_ref) ** pp

    # start: linear fit of ln A vs T/T_ref with p = 1 (or the fixed p)
    p0_p = 1.0 if fit_p else float(p)
    ec0 = thermal_energy if not fit_ec else K_B * float(np.median(t)) * 3.0
    ft0 = thermal_factor(t, thermal, ec0) if thermal != "none" else 1.0
    slope, icpt = np.polyfit((t / t_ref) ** p0_p, np.log(a) - np.log(ft0), 1)
    c0 = -slope if slope < 0 else 0.1 * np.ptp(np.log(a)) + 1e-3
    q0 = [icpt, np.log(c0)] + ([p0_p] if fit_p else []) + ([np.log(ec0)] if fit_ec else [])
    y = np.log(a)
    sy = None if sig is None else sig / a
    try:
        with warnings.catch_warnings():  # an inestimable covariance is reported below
            warnings.simplefilter("ignore", OptimizeWarning)
            q, cov = curve_fit(
                log_model,
                t,
                y,
                p0=q0,
                sigma=sy,
                absolute_sigma=sig is not None,
                jac=fd_jacobian(log_model),
                maxfev=2000,
            )
        success, message = bool(np.all(np.isfinite(cov))), "converged"
    except (RuntimeError, ValueError) as err:
        q, cov = np.asarray(q0, float), np.full((n_par, n_par), np.nan)
        success, message = False, f"fit failed: {err}"
    if not np.all(np.isfinite(cov)):
        success, message = False, "covariance could not be estimated (degenerate data)"
    resid = (y - log_model(t, *q)) / (1.0 if sy is None else sy)
    ln_a0, ln_c, pp, ec = unpack(q)
    vals = {"amplitude0": float(np.exp(ln_a0)), "l_phi_ref": float(length / np.exp(ln_c))}
    jac = [vals["amplitude0"], -vals["l_phi_ref"]]
    errs, cov_ext = physical_errors(vals, jac, cov, names, (fit_p, pp, fit_ec, ec))
    notes: list[str] = []

    def chi2_of(qq: np.ndarray) -> float:
        rr = (y - log_model(t, *qq)) / (1.0 if sy is None else sy)
        return float(np.sum(rr**2))

    dof = int(t.size - n_par)
    scale = 1.0 if sig is not None or dof <= 0 else max(chi2_of(np.asarray(q)) / dof, 1e-300)
    bad, why = find_unconstrained(
        names, cov, np.asarray(q), amplitudes=("amplitude0",), chi2=chi2_of, scale=scale
    )
    estimates = _mark_unconstrained(
        vals,
        errs,
        bad,
        why,
        "One harmonic cannot separate thermal averaging from dephasing: fit h/e together "
        "with h/2e (fit_l_phi_joint), or fix p or the thermal energy.",
        notes,
    )
    units = {"amplitude0": "amplitude", "l_phi_ref": "m", "p": "1", "thermal_energy": "J"}
    model = (
        f"A(T) = A0 F_T(T) exp(-L/l_phi(T)), l_phi = l_phi_ref (T/{t_ref:g} K)^-p, "
        f"L = {length:.6g} m, F_T = {thermal}"
        + ("" if fit_p else f", p fixed = {p:g}")
        + ("" if fit_ec or thermal == "none" else f", E_c fixed = {thermal_energy:.4g} J")
    )
    return FitResult(
        values=vals,
        errors=errs,
        covariance=cov_ext,
        parameter_names=tuple(names),
        units={n: units[n] for n in names},
        chi2=float(np.sum(resid**2)),
        dof=int(t.size - n_par),
        success=success and not bad,
        message=message if not bad else f"{message}; unconstrained: {', '.join(bad)}",
        model=model,
        x=t,
        y=a,
        sigma=sig,
        fixed={
            "path_length": length,
            "reference_temperature": t_ref,
            "thermal": thermal,
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            **({} if fit_p else {"p": float(p)}),
            **({} if fit_ec or thermal == "none" else {"thermal_energy": thermal_energy}),
        },
        _predict=lambda tt: np.exp(log_model(tt, *q)),
        unconstrained=tuple(bad),
        estimates=estimates,
        notes=tuple(notes),
    )


def l_phi_at(fit: FitResult, temperature: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """l_phi(T) in m and its 1-sigma error from a temperature fit (NaN, inf if unconstrained).

    Works for :func:`fit_l_phi_temperature` and
    :func:`ringkit.analysis.fit_joint.fit_l_phi_joint` results (same path-length convention,
    ``fit.fixed["l_phi_convention"]``).
    """
    if "l_phi_ref" not in fit.values:
        raise ParameterError("fit", fit.model, "must come from a temperature fit of l_phi")
    t_ref = fit.fixed["reference_temperature"]
    t = np.asarray(temperature, dtype=float)
    lref = fit.values["l_phi_ref"]
    p = fit.values["p"] if "p" in fit.values else fit.fixed["p"]
    names = fit.parameter_names
    u = t / t_ref
    l_phi = lref * u ** (-p)
    # gradient with respect to (l_phi_ref, p)
    grad = np.zeros((t.size if t.ndim else 1, len(names)))
    grad[:, names.index("l_phi_ref")] = np.ravel(u ** (-p))
    if "p" in names:
        grad[:, names.index("p")] = np.ravel(-l_phi * np.log(u))
    if not np.isfinite(lref) or not np.isfinite(p):
        nan = np.full(t.shape, np.nan)
        return nan, np.full(t.shape, np.inf)
    var = np.einsum("ij,jk,ik->i", grad, fit.covariance, grad)
    err = np.sqrt(var).reshape(t.shape)
    return l_phi, err


def fit_l_phi_size(
    radius: np.ndarray,
    amplitude: np.ndarray,
    *,
    order: int = 1,
    path_length: np.ndarray | None = None,
    amplitude_err: np.ndarray | float | None = None,
    thermal_length: float | None = None,
) -> FitResult:
    """Fit ``A = A0 F_T(L) exp(-L/l_phi)`` over ring sizes at one temperature.

    Parameters
    ----------
    radius : array
        Ring radii in m (> 0).
    amplitude : array
        Oscillation amplitudes (> 0).
    order : {1, 2}
        Harmonic: 1 for h/e, 2 for h/2e (AAS).
    path_length : array, optional
        Explicit length L (m) of the interfering paths of each ring, e.g. measured arm
        lengths of non-circular rings. Default: the convention of :mod:`ringkit.conventions`,
        ``L = order pi r`` (h/e: one arm; h/2e: the circumference).
    amplitude_err : array or float, optional
        1-sigma errors of the amplitudes.
    thermal_length : float, optional
        L_T in m: the diffusive factor ``F_T = min(1, L_T/L)`` is included (else F_T = 1).

    Returns
    -------
    FitResult
        ``amplitude0``, ``inverse_l_phi`` (1/m; may be <= 0 if the amplitude does not decay)
        and ``l_phi`` (m; NaN and ``success=False`` when ``inverse_l_phi <= 0``).
        ``fixed`` holds ``path_length`` (array, m) and ``l_phi_convention``. ``predict(r)``
        uses ``L = kappa r`` with kappa the least-squares ratio of the path lengths to the
        radii (``order pi`` by default).

    Notes
    -----
    The model is linear in ``(ln A0, 1/l_phi)`` (``scipy.optimize.curve_fit``).
    """
    if order not in (1, 2):
        raise ParameterError("order", order, "must be 1 (h/e) or 2 (h/2e)")
    r, a, sig = _data(radius, amplitude, amplitude_err, "radius", "m")
    if np.any(r <= 0):
        raise ParameterError("radius", Described(str(radius)), "must be > 0", "m")
    need = 2 + (0 if sig is not None else 1)
    if r.size < need or np.unique(r).size < 2:
        raise ParameterError("radius", Described(f"{r.size} points"), f"need >= {need} sizes")
    if path_length is None:
        length = np.asarray(_default_path_length(r, order), dtype=float)
        source = f"{order} pi r ({L_PHI_CONVENTION_KEY} default)"
    else:
        length = np.asarray(path_length, dtype=float).ravel()
        if length.shape != r.shape or np.any(~np.isfinite(length)) or np.any(length <= 0):
            raise ParameterError(
                "path_length", Described(str(path_length)), f"need {r.size} lengths > 0", "m"
            )
        source = "explicit"
    kappa = float(np.sum(length * r) / np.sum(r * r))
    lt = None if thermal_length is None else check_positive("thermal_length", thermal_length, "m")
    ft = np.ones_like(length) if lt is None else np.minimum(1.0, lt / length)
    y = np.log(a) - np.log(ft)
    sy = None if sig is None else sig / a

    def line(ll: np.ndarray, ln_a0: float, inv_l_phi: float) -> np.ndarray:
        return ln_a0 - inv_l_phi * ll

    start = np.polyfit(length, y, 1)  # exact for a straight line; curve_fit gives the cov
    with warnings.catch_warnings():  # an inestimable covariance is reported below
        warnings.simplefilter("ignore", OptimizeWarning)
        coef, cov = curve_fit(
            line,
            length / kappa,  # in units of the radius: well-conditioned
            y,
            p0=[start[1], -start[0] * kappa],
            sigma=sy,
            absolute_sigma=sig is not None,
            jac=fd_jacobian(line),
        )
    coef = np.array([coef[0], coef[1] / kappa])
    cov = cov / np.outer([1.0, kappa], [1.0, kappa])
    resid = (y - line(length, *coef)) / (1.0 if sy is None else sy)
    chi2 = float(np.sum(resid**2))
    dof = r.size - 2
    a0, k = float(np.exp(coef[0])), float(coef[1])
    jm = np.diag([a0, 1.0])
    cov_ext = jm @ cov @ jm.T
    success = bool(k > 0 and np.all(np.isfinite(cov)))
    vals = {"amplitude0": a0, "inverse_l_phi": k, "l_phi": 1.0 / k if success else float("nan")}
    errs = {
        "amplitude0": float(np.sqrt(cov_ext[0, 0])),
        "inverse_l_phi": float(np.sqrt(cov_ext[1, 1])),
        "l_phi": float(np.sqrt(cov_ext[1, 1]) / k**2) if success else float("nan"),
    }

    def predict(rr: np.ndarray) -> np.ndarray:
        ll = kappa * rr
        f = 1.0 if lt is None else np.minimum(1.0, lt / ll)
        return a0 * f * np.exp(-k * ll)

    return FitResult(
        values=vals,
        errors=errs,
        covariance=cov_ext,
        parameter_names=("amplitude0", "inverse_l_phi"),
        units={"amplitude0": "amplitude", "inverse_l_phi": "1/m", "l_phi": "m"},
        chi2=chi2,
        dof=dof,
        success=success,
        message="converged"
        if success
        else "amplitude does not decay with size: l_phi undetermined",
        model=f"A = A0 F_T exp(-L/l_phi), L = {source}"
        + ("" if lt is None else f", F_T = min(1, {lt:.4g} m / L)"),
        x=r,
        y=a,
        sigma=sig,
        fixed={
            "order": order,
            "thermal_length": lt,
            "path_length": length,
            L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
        },
        _predict=predict,
    )
