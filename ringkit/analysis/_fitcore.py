"""Shared pieces of the l_phi fits: result type, thermal factor, constraint checks.

Used by :mod:`ringkit.analysis.fitting` and :mod:`ringkit.analysis.fit_joint` (which
re-export the public names). Criteria for unconstrained parameters: module docstring of
:mod:`ringkit.analysis.fitting` and ``docs/physics.md`` §13.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.analysis._common import AnalysisWarning, Described
from ringkit.conventions import path_length as _default_path_length
from ringkit.units import K_B

__all__ = [
    "MAX_LOG_ERROR",
    "MAX_CORRELATION",
    "UnconstrainedWarning",
    "FitResult",
    "thermal_factor",
    "find_unconstrained",
    "fd_jacobian",
    "physical_errors",
]

#: Largest 1-sigma error of ln(parameter) for a scale parameter to count as constrained.
MAX_LOG_ERROR = 0.5
#: Largest |correlation| between two non-amplitude parameters (else a degenerate direction).
MAX_CORRELATION = 0.995


class UnconstrainedWarning(AnalysisWarning):
    """The data cannot fix some fit parameters; they are reported as unconstrained (NaN)."""


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
        Constants of the model (path length, reference temperature, fixed parameters) and
        ``l_phi_convention`` (:data:`ringkit.conventions.L_PHI_CONVENTION`).
    unconstrained : tuple of str
        Parameters the data cannot fix: their ``values`` are NaN and ``errors`` inf.
    estimates : dict
        Best-fit numbers of all parameters, including unconstrained ones (not to be quoted).
    notes : tuple of str
        Warnings emitted by the fit (same text).
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
    unconstrained: tuple[str, ...] = ()
    estimates: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()

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


def find_unconstrained(
    names: list[str] | tuple[str, ...],
    cov: np.ndarray,
    q: np.ndarray,
    linear: tuple[str, ...] = ("p",),
    amplitudes: tuple[str, ...] = (),
    chi2: Callable[[np.ndarray], float] | None = None,
    scale: float = 1.0,
) -> tuple[list[str], str]:
    """Parameters the data cannot fix (module docstring), and the reason in words.

    ``cov`` and ``q`` are in the fitted parameterisation: ``ln`` of every parameter except
    those in ``linear``. Amplitude parameters are judged by their own error only.
    """
    n = len(names)
    if not np.all(np.isfinite(cov)):
        return [m for m in names if m not in amplitudes], "covariance could not be estimated"
    err = np.sqrt(np.maximum(np.diag(cov), 0.0))
    bad: dict[str, str] = {}
    for i, m in enumerate(names):
        if m in linear:
            if err[i] > 0.5 * min(abs(float(q[i])), 1.0):
                bad[m] = f"{m} = {q[i]:.3g} +- {err[i]:.2g}"
        elif err[i] > MAX_LOG_ERROR:
            bad[m] = f"{m} uncertain by a factor {np.exp(err[i]):.3g}"
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(err, err)
    for i in range(n):
        for j in range(i + 1, n):
            if names[i] in amplitudes or names[j] in amplitudes:
                continue
            if abs(corr[i, j]) > MAX_CORRELATION:
                why = f"{names[i]} and {names[j]} correlated by {corr[i, j]:+.4f}"
                bad.setdefault(names[i], why)
                bad.setdefault(names[j], why)
    if chi2 is not None and scale > 1e-12:  # (an exact, noise-free fit has no valley)
        # Linearity check: moving parameter i by +-1 sigma (others by their regression on it,
        # the covariance column) must raise chi2 by ~1 (times ``scale``, the reduced chi2
        # when the errors were rescaled). A curved, degenerate valley breaks this.
        c0 = chi2(q)
        for i, m in enumerate(names):
            if m in amplitudes or m in bad or not err[i] > 0:
                continue
            d = cov[:, i] / err[i]
            rise = [(chi2(q + sgn * d) - c0) / scale for sgn in (1.0, -1.0)]
            if not all(np.isfinite(rise)) or min(rise) < 0.5 or max(rise) > 2.0:
                bad[m] = f"{m}: chi2 rises by {rise[0]:.2g}/{rise[1]:.2g} at +-1 sigma, not 1"
    return [m for m in names if m in bad], "; ".join(dict.fromkeys(bad.values()))


def _mark_unconstrained(
    vals: dict, errs: dict, bad: list[str], reason: str, advice: str, notes: list[str]
) -> dict:
    """Replace unconstrained values by NaN/inf, warn once; return the raw estimates."""
    estimates = dict(vals)
    if bad:
        msg = (
            f"the data cannot constrain {', '.join(bad)} ({reason}); reported as "
            f"unconstrained (NaN). {advice}"
        )
        notes.append(msg)
        warnings.warn(msg, UnconstrainedWarning, stacklevel=3)
        for m in bad:
            vals[m] = float("nan")
            errs[m] = float("inf")
    return estimates


def physical_errors(
    vals: dict[str, float],
    jac: list[float],
    cov: np.ndarray,
    names: list[str],
    shape: tuple[bool, float, bool, float],
) -> tuple[dict[str, float], np.ndarray]:
    """Add the optional shape parameters to ``vals``; 1-sigma errors and covariance of ``vals``.

    ``jac`` holds d(physical)/d(fit parameter) of the parameters already in ``vals`` (the fit
    works in logs); ``shape = (fit_p, p, fit_ec, thermal_energy)`` appends the exponent
    (derivative 1) and the thermal energy (fitted as a log: derivative ``thermal_energy``).
    Infinite or NaN covariance entries stay so (unconstrained parameters).
    """
    fit_p, pp, fit_ec, ec = shape
    jac = list(jac)
    if fit_p:
        vals["p"] = float(pp)
        jac.append(1.0)
    if fit_ec:
        vals["thermal_energy"] = float(ec)
        jac.append(float(ec))
    jm = np.diag(jac)
    with np.errstate(invalid="ignore", over="ignore"):  # inf/NaN covariance stays so
        cov_ext = jm @ cov @ jm.T
    return {n: float(np.sqrt(cov_ext[i, i])) for i, n in enumerate(names)}, cov_ext


def fd_jacobian(model: Callable[..., np.ndarray]) -> Callable[..., np.ndarray]:
    """Central-difference Jacobian of ``model(x, *q)`` with steps ``1e-6 max(1, |q_i|)``.

    MINPACK's default forward step is relative to ``|q_i|`` and vanishes for a parameter
    that is ~0 (e.g. ``ln A0`` when A0 = 1), which makes the covariance infinite.
    """

    def jac(x: np.ndarray, *q: float) -> np.ndarray:
        q = np.asarray(q, dtype=float)
        cols = []
        for i in range(q.size):
            h = 1e-6 * max(1.0, abs(q[i]))
            up, dn = q.copy(), q.copy()
            up[i] += h
            dn[i] -= h
            cols.append((model(x, *up) - model(x, *dn)) / (2 * h))
        return np.column_stack(cols)

    return jac


def _path_length(radius: float | None, path_length: float | None, order: int) -> float:
    if order not in (1, 2):
        raise ParameterError("order", order, "must be 1 (h/e, L = pi r) or 2 (h/2e, L = 2 pi r)")
    if (radius is None) == (path_length is None):
        raise ParameterError("radius/path_length", (radius, path_length), "give exactly one", "m")
    if path_length is not None:
        return check_positive("path_length", path_length, "m")
    return float(_default_path_length(check_positive("radius", radius, "m"), order))


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
