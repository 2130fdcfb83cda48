"""Prefactors of the amplitude model fitted to simulated (or measured) amplitudes.

:func:`fit_amplitude_prefactors` (weighted least squares with 1-sigma errors, chi^2, and the
prefactors the data do not constrain) and :func:`match_prefactors` (mean log ratio = 0, the
size panel's calibration) for the model of :func:`ringkit.analysis.scaling.predict_amplitudes`
(docs/amplitude-model.md, "Prefactors from simulations").
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis._common import Described
from ringkit.analysis.scaling import JUNCTION_REFLECTION, predict_amplitudes

__all__ = ["fit_amplitude_prefactors", "match_prefactors"]


def fit_amplitude_prefactors(
    radius,
    *,
    amplitude_he=None,
    amplitude_he_err=None,
    amplitude_h2e=None,
    amplitude_h2e_err=None,
    **model_kwargs,
) -> dict:
    """Fit ``coherent_amplitude`` and ``aas_amplitude`` to simulated amplitudes versus radius.

    Weighted least squares (``scipy.optimize.least_squares``) of the model of
    :func:`predict_amplitudes` to, e.g., the ensemble medians of the h/e and h/2e rms
    amplitudes with their bootstrap errors; the h/e data fix ``c_he``, the h/2e data then fix
    ``c_aas`` (the h/2e model contains both). 1-sigma errors from the Jacobian at the optimum,
    scaled by sqrt(chi^2/dof) when no errors are given (then only the scatter is known).

    Parameters
    ----------
    radius : array
        Radii in m.
    amplitude_he, amplitude_h2e : array, optional
        Amplitudes in e^2/h (at least one).
    amplitude_he_err, amplitude_h2e_err : array, optional
        1-sigma errors (same shape), e.g. bootstrap errors of the medians.
    **model_kwargs
        Everything else of :func:`predict_amplitudes` (``l_phi``, ``temperature``, ...).

    Returns
    -------
    dict
        ``coherent_amplitude``, ``coherent_amplitude_err``, ``aas_amplitude``,
        ``aas_amplitude_err`` (e^2/h; None if not constrained by the data), ``chi2``, ``dof``,
        ``unconstrained`` (list of names).
    """
    from scipy.optimize import least_squares

    r = np.atleast_1d(np.asarray(radius, dtype=float))
    for key in ("coherent_amplitude", "aas_amplitude", "simulated"):
        if key in model_kwargs:
            raise ParameterError(key, model_kwargs[key], "is fitted here; do not pass it")
    parts = []
    for name, val, err in (
        ("amplitude_he_rms", amplitude_he, amplitude_he_err),
        ("amplitude_h2e_rms", amplitude_h2e, amplitude_h2e_err),
    ):
        if val is None:
            continue
        y = np.asarray(val, dtype=float)
        if y.shape != r.shape or np.any(~np.isfinite(y)):
            raise ParameterError(name, Described(str(val)), f"must be finite, shape {r.shape}")
        s = np.ones_like(y) if err is None else np.asarray(err, dtype=float)
        if s.shape != r.shape or np.any(~(s > 0)):
            raise ParameterError(f"{name}_err", Described(str(err)), "must be > 0, same shape")
        parts.append((name, y, s, err is not None))
    if not parts:
        raise ParameterError("amplitude_he", None, "give amplitude_he and/or amplitude_h2e")
    has_aas = any(name == "amplitude_h2e_rms" for name, *_ in parts)
    names = ["coherent_amplitude"] + (["aas_amplitude"] if has_aas else [])

    def resid(theta):
        kw = dict(zip(names, np.abs(theta), strict=True))
        ds = predict_amplitudes(r, **model_kwargs, **kw)
        return np.concatenate([(ds[n].values - y) / s for n, y, s, _ in parts])

    fit = least_squares(resid, x0=np.ones(len(names)), x_scale="jac")
    chi2 = float(np.sum(fit.fun**2))
    dof = int(fit.fun.size - len(names))
    jtj = fit.jac.T @ fit.jac
    scale = 1.0 if all(w for *_, w in parts) else max(chi2 / max(dof, 1), 0.0)
    out: dict = {"chi2": chi2, "dof": dof, "unconstrained": [], "n_points": int(fit.fun.size)}
    try:
        cov = np.linalg.inv(jtj) * scale
        errs = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        errs = np.full(len(names), np.inf)
    for k, name in enumerate(names):
        val = float(abs(fit.x[k]))
        bad = not np.isfinite(errs[k]) or errs[k] > 10 * max(val, 1e-12)
        out[name] = None if bad else val
        out[f"{name}_err"] = None if bad else float(errs[k])
        if bad:
            out["unconstrained"].append(name)
    if not has_aas:
        out["aas_amplitude"] = out["aas_amplitude_err"] = None
        out["unconstrained"].append("aas_amplitude")
    return out


def _kwargs_from_attrs(attrs: Mapping) -> dict:
    g = attrs.get("conductance_e2h", "model")
    return {
        "l_phi": float(attrs["l_phi_m"]),
        "temperature": float(attrs["temperature_K"]),
        "mean_free_path": float(attrs["mean_free_path_m"]),
        "fermi_velocity": float(attrs["fermi_velocity_m_per_s"]),
        "dimension": int(attrs.get("dimension", 2)),
        "n_averaged": int(attrs.get("n_averaged", 1)),
        "n_modes": int(attrs.get("n_modes", 1)),
        "conductance": None if isinstance(g, str) else np.asarray(g, dtype=float),
        "junction_reflection": float(attrs.get("junction_reflection", JUNCTION_REFLECTION)),
        "mode_mixing": float(attrs.get("mode_mixing", 0.0)),
    }


def match_prefactors(dataset) -> tuple[float, float]:
    """Prefactors ``(c_he, c_aas)`` for which the model passes through the simulated points.

    For a :func:`predict_amplitudes` dataset with ``sim_*`` variables: ``c_he`` solves
    ``mean log(sim_he/model_he) = 0`` (a monotone scalar equation, Brent's method); then
    ``c_aas`` the same for h/2e with ``c_he`` fixed. Points the bound by G cannot reach leave
    the prefactor at its largest bracket value. For prefactors with uncertainties use
    :func:`fit_amplitude_prefactors`.
    """
    from scipy.optimize import brentq

    ds = dataset
    kw = _kwargs_from_attrs(ds.attrs)
    sr = np.asarray(ds["sim_radius"].values, dtype=float)
    c_he = float(ds.attrs.get("coherent_amplitude_e2h", 1.0))
    c_aas = float(ds.attrs.get("aas_amplitude_e2h", 1.0))

    def solve(key: str, make) -> float | None:
        if f"sim_{key}" not in ds:
            return None
        sim = np.asarray(ds[f"sim_{key}"].values, dtype=float)
        ok = sim > 0
        if not np.any(ok):
            return None

        def f(logc: float) -> float:
            mod = predict_amplitudes(sr[ok], **kw, **make(np.exp(logc)))[key].values
            return float(np.mean(np.log(np.maximum(mod, 1e-300) / sim[ok])))

        lo, hi = -30.0, 8.0
        if f(hi) < 0:
            return float(np.exp(hi))
        if f(lo) > 0:
            return float(np.exp(lo))
        return float(np.exp(brentq(f, lo, hi, xtol=1e-12)))

    new_he = solve("amplitude_he_rms", lambda c: {"coherent_amplitude": c, "aas_amplitude": c_aas})
    c_he = c_he if new_he is None else new_he
    new_aas = solve("amplitude_h2e_rms", lambda c: {"coherent_amplitude": c_he, "aas_amplitude": c})
    return c_he, c_aas if new_aas is None else new_aas
