"""Phase-coherence length from oscillation amplitudes (scipy.optimize fits with errors).

Public API
----------
FitResult(values, errors, covariance, ...)      fitted parameters and 1-sigma errors
thermal_factor(temperature, kind, energy)        thermal averaging factor F_T
fit_lphi_temperature(temperature, amplitude, *, path_length | radius, ...) -> FitResult
fit_lphi_size(radius, amplitude, *, order=1, ...) -> FitResult
lphi_at(fit, temperature) -> (L_phi, error)

Model (physics notes §9.2-9.3)
------------------------------
``A(T) = A0 F_T(T) exp(-L/L_phi(T))`` with ``L_phi(T) = L_phi,ref (T/T_ref)^-p`` and L the
length of the interfering paths: ``L = pi r`` (one arm, h/e pair of paths, ``order=1``) or
``2 pi r`` (circumference, AAS loop, ``order=2``). Exponential damping with path length:
Milliken, Umbach, Webb, Phys. Rev. B 36, 4465 (1987) (abstract verified; reference from
memory); ``L_phi ∝ 1/T`` in GaAs rings: Hansen et al., Phys. Rev. B 64, 045327 (2001).

Thermal factor F_T (documented choice, :func:`thermal_factor`):

* ``"none"``: 1 (thermal averaging negligible or already divided out);
* ``"ballistic"``: ``x/sinh(x)``, ``x = pi k_B T / E_c``, the exact average of an
  interference term whose phase changes with energy as ``E/E_c`` (``E_c = hbar/tau``,
  tau the travel-time difference of the paths; physics notes §5.4);
* ``"diffusive"``: ``min(1, sqrt(E_c/(k_B T)))`` with ``E_c = hbar D/L^2`` the Thouless
  energy: ``k_B T/E_c`` independent energy strips average a random-phase signal as
  ``T^(-1/2)`` (observed in Au rings, Washburn et al. 1985; form from memory).

The fit is made on ``ln A`` (relative errors ``sigma_A/A``) with ``scipy.optimize.curve_fit``;
errors are the square roots of the covariance diagonal. Without ``amplitude_err`` the
covariance is scaled by the reduced chi-square (``absolute_sigma=False``).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from scipy.optimize import OptimizeWarning, curve_fit

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import Described
from ringkit.units import K_B

__all__ = ["FitResult", "thermal_factor", "fit_lphi_temperature", "fit_lphi_size", "lphi_at"]


@dataclass(frozen=True)
class FitResult:
    """Result of a least-squares fit.

    Attributes
    ----------
    values, errors : dict
        Parameter values and 1-sigma errors (SI units, see ``units``).
    covariance : ndarray
        Covariance matrix in the order of ``parameter_names``.
    parameter_names : tuple of str
    units : dict
        Unit of each parameter.
    chi2 : float
        Sum of squared normalised residuals (of ln A).
    dof : int
        Degrees of freedom.
    success : bool
    message : str
    model : str
        The fitted formula.
    x, y, sigma : ndarray
        Data fitted (sigma None if no errors were given).
    fixed : dict
        Constants of the model (path length, reference temperature, fixed parameters).
    """

    values: dict
    errors: dict
    covariance: np.ndarray
    parameter_names: tuple[str, ...]
    units: dict
    chi2: float
    dof: int
    success: bool
    message: str
    model: str
    x: np.ndarray
    y: np.ndarray
    sigma: np.ndarray | None
    fixed: dict
    _predict: Callable[[np.ndarray], np.ndarray] = field(repr=False, compare=False)

    @property
    def reduced_chi2(self) -> float:
        """chi2 / dof (NaN without degrees of freedom)."""
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def predict(self, x: float | np.ndarray) -> np.ndarray:
        """Model evaluated at ``x`` with the fitted parameters."""
        return self._predict(np.asarray(x, dtype=float))

    def __getitem__(self, name: str) -> float:
        return self.values[name]


def thermal_factor(
    temperature: float | np.ndarray,
    kind: Literal["none", "ballistic", "diffusive"] = "none",
    energy: float | None = None,
) -> np.ndarray:
    """Thermal averaging factor F_T (see module docstring).

    Parameters
    ----------
    temperature : float or array
        Temperature in K (>= 0).
    kind : {"none", "ballistic", "diffusive"}
    energy : float
        E_c in J: ``hbar/tau`` (ballistic) or the Thouless energy ``hbar D/L^2``
        (diffusive). Required unless ``kind="none"``.
    """
    check_choice("kind", kind, ("none", "ballistic", "diffusive"))
    t = np.asarray(temperature, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t < 0):
        raise ParameterError("temperature", Described(str(temperature)), "must be >= 0", "K")
    if kind == "none":
        return np.ones_like(t)
    e_c = check_positive("energy", energy, "J")
    if kind == "ballistic":
        x = np.pi * K_B * t / e_c
        with np.errstate(invalid="ignore", over="ignore"):
            f = np.where(x > 1e-8, x / np.sinh(np.maximum(x, 1e-8)), 1.0 - x**2 / 6)
        return np.where(x > 700, 0.0, f)
    with np.errstate(divide="ignore"):
        return np.minimum(1.0, np.sqrt(e_c / (K_B * t)))


def _path_length(radius: float | None, path_length: float | None, order: int) -> float:
    if order not in (1, 2):
        raise ParameterError("order", order, "must be 1 (h/e, L = pi r) or 2 (h/2e, L = 2 pi r)")
    if (radius is None) == (path_length is None):
        raise ParameterError("radius/path_length", (radius, path_length), "give exactly one", "m")
    if path_length is not None:
        return check_positive("path_length", path_length, "m")
    return order * np.pi * check_positive("radius", radius, "m")


def _data(x: object, y: object, err: object, xname: str, xunit: str):
    xa = np.asarray(x, dtype=float).ravel()
    ya = np.asarray(y, dtype=float).ravel()
    if xa.shape != ya.shape:
        raise ParameterError("amplitude", Described(f"{ya.size} values"), f"need {xa.size}")
    if np.any(~np.isfinite(xa)) or np.any(xa < 0):
        raise ParameterError(xname, Described(str(x)), "must be finite and >= 0", xunit)
    bad = np.count_nonzero(~(np.isfinite(ya) & (ya > 0)))
    if bad:
        raise ParameterError(
            "amplitude",
            Described(f"{bad} non-positive or NaN values"),
            "must be finite and > 0 (drop undersampled or missing points first)",
            "e^2/h",
        )
    sig = None
    if err is not None:
        sig = np.broadcast_to(np.asarray(err, dtype=float), ya.shape).copy()
        if np.any(~(np.isfinite(sig) & (sig > 0))):
            raise ParameterError("amplitude_err", Described(str(err)), "must be finite and > 0")
    return xa, ya, sig


def fit_lphi_temperature(
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
    """Fit ``A(T) = A0 F_T(T) exp(-(L/L_phi,ref) (T/T_ref)^p)``.

    Parameters
    ----------
    temperature : array
        Temperatures in K.
    amplitude : array
        Oscillation amplitudes (e.g. rms in e^2/h), > 0.
    radius, path_length : float
        Ring radius in m (``L = order pi r``) or the path length L directly; one of them.
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
        T_ref in K where ``lphi_ref`` is quoted.

    Returns
    -------
    FitResult
        Parameters ``amplitude0`` (units of A), ``lphi_ref`` (m), ``p`` and possibly
        ``thermal_energy`` (J).
    """
    length = _path_length(radius, path_length, order)
    t, a, sig = _data(temperature, amplitude, amplitude_err, "temperature", "K")
    t_ref = check_positive("reference_temperature", reference_temperature, "K")
    check_choice("thermal", thermal, ("none", "ballistic", "diffusive"))
    fit_ec = thermal != "none" and thermal_energy is None
    fit_p = p is None
    names = (
        ["amplitude0", "lphi_ref"]
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
                log_model, t, y, p0=q0, sigma=sy, absolute_sigma=sig is not None, maxfev=20000
            )
        success, message = bool(np.all(np.isfinite(cov))), "converged"
    except (RuntimeError, ValueError) as err:
        q, cov = np.asarray(q0, float), np.full((n_par, n_par), np.nan)
        success, message = False, f"fit failed: {err}"
    if not np.all(np.isfinite(cov)):
        success, message = False, "covariance could not be estimated (degenerate data)"
    resid = (y - log_model(t, *q)) / (1.0 if sy is None else sy)
    ln_a0, ln_c, pp, ec = unpack(q)
    vals = {"amplitude0": float(np.exp(ln_a0)), "lphi_ref": float(length / np.exp(ln_c))}
    jac = [vals["amplitude0"], -vals["lphi_ref"]]
    if fit_p:
        vals["p"] = float(pp)
        jac.append(1.0)
    if fit_ec:
        vals["thermal_energy"] = float(ec)
        jac.append(float(ec))
    jm = np.diag(jac)
    cov_ext = jm @ cov @ jm.T
    errs = {n: float(np.sqrt(cov_ext[i, i])) for i, n in enumerate(names)}
    units = {"amplitude0": "amplitude", "lphi_ref": "m", "p": "1", "thermal_energy": "J"}
    model = (
        f"A(T) = A0 F_T(T) exp(-L/L_phi(T)), L_phi = lphi_ref (T/{t_ref:g} K)^-p, "
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
        success=success,
        message=message,
        model=model,
        x=t,
        y=a,
        sigma=sig,
        fixed={
            "path_length": length,
            "reference_temperature": t_ref,
            "thermal": thermal,
            **({} if fit_p else {"p": float(p)}),
            **({} if fit_ec or thermal == "none" else {"thermal_energy": thermal_energy}),
        },
        _predict=lambda tt: np.exp(log_model(tt, *q)),
    )


def lphi_at(fit: FitResult, temperature: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """L_phi(T) in m and its 1-sigma error from a :func:`fit_lphi_temperature` result."""
    if "lphi_ref" not in fit.values:
        raise ParameterError("fit", fit.model, "must come from fit_lphi_temperature")
    t_ref = fit.fixed["reference_temperature"]
    t = np.asarray(temperature, dtype=float)
    lref = fit.values["lphi_ref"]
    p = fit.values["p"] if "p" in fit.values else fit.fixed["p"]
    names = fit.parameter_names
    u = t / t_ref
    lphi = lref * u ** (-p)
    # gradient with respect to (lphi_ref, p)
    grad = np.zeros((t.size if t.ndim else 1, len(names)))
    grad[:, names.index("lphi_ref")] = np.ravel(u ** (-p))
    if "p" in names:
        grad[:, names.index("p")] = np.ravel(-lphi * np.log(u))
    var = np.einsum("ij,jk,ik->i", grad, fit.covariance, grad)
    err = np.sqrt(var).reshape(t.shape)
    return lphi, err


def fit_lphi_size(
    radius: np.ndarray,
    amplitude: np.ndarray,
    *,
    order: int = 1,
    amplitude_err: np.ndarray | float | None = None,
    thermal_length: float | None = None,
) -> FitResult:
    """Fit ``A(r) = A0 F_T(L) exp(-L/L_phi)`` over ring sizes at one temperature.

    ``L = order pi r`` (physics notes §9.3); with ``thermal_length`` L_T (m) the diffusive
    factor ``F_T = min(1, L_T/L)`` is included, else F_T = 1. The model is linear in
    ``(ln A0, 1/L_phi)`` (fitted with ``scipy.optimize.curve_fit``).

    Returns
    -------
    FitResult
        ``amplitude0``, ``inverse_lphi`` (1/m; may be <= 0 if the amplitude does not decay)
        and ``lphi`` (m; NaN and ``success=False`` when ``inverse_lphi <= 0``).
    """
    if order not in (1, 2):
        raise ParameterError("order", order, "must be 1 (h/e) or 2 (h/2e)")
    r, a, sig = _data(radius, amplitude, amplitude_err, "radius", "m")
    if np.any(r <= 0):
        raise ParameterError("radius", Described(str(radius)), "must be > 0", "m")
    need = 2 + (0 if sig is not None else 1)
    if r.size < need or np.unique(r).size < 2:
        raise ParameterError("radius", Described(f"{r.size} points"), f"need >= {need} sizes")
    length = order * np.pi * r
    lt = None if thermal_length is None else check_positive("thermal_length", thermal_length, "m")
    ft = np.ones_like(length) if lt is None else np.minimum(1.0, lt / length)
    y = np.log(a) - np.log(ft)
    sy = None if sig is None else sig / a

    def line(ll: np.ndarray, ln_a0: float, inv_lphi: float) -> np.ndarray:
        return ln_a0 - inv_lphi * ll

    start = np.polyfit(length, y, 1)  # exact for a straight line; curve_fit gives the cov
    with warnings.catch_warnings():  # an inestimable covariance is reported below
        warnings.simplefilter("ignore", OptimizeWarning)
        coef, cov = curve_fit(
            line, length, y, p0=[start[1], -start[0]], sigma=sy, absolute_sigma=sig is not None
        )
    resid = (y - line(length, *coef)) / (1.0 if sy is None else sy)
    chi2 = float(np.sum(resid**2))
    dof = r.size - 2
    a0, k = float(np.exp(coef[0])), float(coef[1])
    jm = np.diag([a0, 1.0])
    cov_ext = jm @ cov @ jm.T
    success = bool(k > 0 and np.all(np.isfinite(cov)))
    vals = {"amplitude0": a0, "inverse_lphi": k, "lphi": 1.0 / k if success else float("nan")}
    errs = {
        "amplitude0": float(np.sqrt(cov_ext[0, 0])),
        "inverse_lphi": float(np.sqrt(cov_ext[1, 1])),
        "lphi": float(np.sqrt(cov_ext[1, 1]) / k**2) if success else float("nan"),
    }

    def predict(rr: np.ndarray) -> np.ndarray:
        ll = order * np.pi * rr
        f = 1.0 if lt is None else np.minimum(1.0, lt / ll)
        return a0 * f * np.exp(-k * ll)

    return FitResult(
        values=vals,
        errors=errs,
        covariance=cov_ext,
        parameter_names=("amplitude0", "inverse_lphi"),
        units={"amplitude0": "amplitude", "inverse_lphi": "1/m", "lphi": "m"},
        chi2=chi2,
        dof=dof,
        success=success,
        message="converged"
        if success
        else "amplitude does not decay with size: L_phi undetermined",
        model=f"A(r) = A0 F_T exp(-L/L_phi), L = {order} pi r"
        + ("" if lt is None else f", F_T = min(1, {lt:.4g} m / L)"),
        x=r,
        y=a,
        sigma=sig,
        fixed={"order": order, "thermal_length": lt},
        _predict=predict,
    )
