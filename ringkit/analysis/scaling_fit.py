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
from ringkit.analysis.scaling import JUNCTION_REFLECTION, model_arrays, predict_amplitudes

__all__ = ["fit_amplitude_prefactors", "match_prefactors"]


def fit_amplitude_prefactors(
    radius,
    *,
    amplitude_he=None,
    amplitude_he_err=None,
    amplitude_h2e=None,
    amplitude_h2e_err=None,
    space: str = "log",
    fit_l_phi: bool = False,
    model_discrepancy: str | float | None = "auto",
    **model_kwargs,
) -> dict:
    """Fit the law's prefactors (and optionally an effective L_phi) to amplitudes versus radius.

    Least squares (``scipy.optimize.least_squares``) of the model of :func:`predict_amplitudes`
    to, e.g., the ensemble medians of the h/e and h/2e rms amplitudes with their bootstrap
    errors (docs/amplitude-model.md, "Prefactors from simulations"). The h/e data fix
    ``c_he``; the h/2e data fix ``c_aas`` (the h/2e model contains both); with ``fit_l_phi``
    the decay length of the law is a third parameter.

    * ``space="log"`` (default): residuals of ln A with sigma_ln = err/A. The medians span
      orders of magnitude over 0.3-1 um, so a linear fit is dominated by the smallest radius.
    * ``model_discrepancy="auto"``: if the law does not describe the data (chi^2 p-value
      < 0.05), a relative model error sigma_m is added in quadrature to every point and
      raised until chi^2/dof = 1 (Birge ratio; the prefactor errors then include the misfit).
      Both chi^2 values are reported; ``law_consistent`` says whether the law alone fits. A
      number fixes sigma_m (relative, log space only); None disables it.
    * A parameter whose 1-sigma error of ln(value) exceeds
      :data:`ringkit.analysis._fitcore.MAX_LOG_ERROR` is unconstrained (reported None).

    Parameters
    ----------
    radius : array
        Radii in m.
    amplitude_he, amplitude_h2e : array, optional
        Amplitudes in e^2/h (at least one; > 0 in log space).
    amplitude_he_err, amplitude_h2e_err : array, optional
        1-sigma errors (same shape), e.g. bootstrap errors of the medians.
    space : {"log", "linear"}
    fit_l_phi : bool
        Also fit the L_phi of the law (``l_phi`` in ``model_kwargs`` is the start value).
    model_discrepancy : "auto", float or None
    **model_kwargs
        Everything else of :func:`predict_amplitudes` (``l_phi``, ``temperature``, ...).

    Returns
    -------
    dict
        ``coherent_amplitude``, ``aas_amplitude`` (e^2/h) and with ``fit_l_phi`` ``l_phi``
        (m), each with ``*_err`` (None if unconstrained); ``chi2``, ``dof``, ``p_value`` (of
        the final fit), ``chi2_stat`` and ``p_value_stat`` (statistical errors only),
        ``model_discrepancy`` (relative, 0 if none was needed), ``law_consistent``,
        ``unconstrained``, ``n_points``, ``space``, ``l_phi_fitted``.
    """
    from scipy.optimize import least_squares
    from scipy.stats import chi2 as chi2_dist

    from ringkit.analysis._fitcore import MAX_LOG_ERROR

    r = np.atleast_1d(np.asarray(radius, dtype=float))
    for key in ("coherent_amplitude", "aas_amplitude", "simulated"):
        if key in model_kwargs:
            raise ParameterError(key, model_kwargs[key], "is fitted here; do not pass it")
    if space not in ("log", "linear"):
        raise ParameterError("space", space, "must be 'log' or 'linear'")
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
        if space == "log" and np.any(y <= 0):
            raise ParameterError(name, Described(str(val)), "must be > 0 for space='log'")
        s = np.ones_like(y) if err is None else np.asarray(err, dtype=float)
        if s.shape != r.shape or np.any(~(s > 0)):
            raise ParameterError(f"{name}_err", Described(str(err)), "must be > 0, same shape")
        if err is None and space == "log":
            s = y  # unit relative weights; the scale comes from the scatter
        parts.append((name, y, s, err is not None))
    if not parts:
        raise ParameterError("amplitude_he", None, "give amplitude_he and/or amplitude_h2e")
    has_aas = any(name == "amplitude_h2e_rms" for name, *_ in parts)
    names = ["coherent_amplitude"] + (["aas_amplitude"] if has_aas else [])
    if fit_l_phi:
        l0 = float(model_kwargs.get("l_phi", np.inf))
        if not (np.isfinite(l0) and l0 > 0):
            raise ParameterError("l_phi", l0, "must be a finite start value with fit_l_phi", "m")
        names.append("l_phi")
    with_errors = all(w for *_, w in parts)
    y_all = np.concatenate([y for _, y, _, _ in parts])
    s_all = np.concatenate([s for _, _, s, _ in parts])
    if space == "log":
        y_fit, s_stat = np.log(y_all), s_all / y_all
    else:
        y_fit, s_stat = y_all, s_all

    def model(theta):
        kw = {**model_kwargs, **dict(zip(names, np.exp(theta), strict=True))}
        ds = model_arrays(r, **kw)
        m = np.concatenate([ds[n] for n, *_ in parts])
        return np.log(np.maximum(m, 1e-300)) if space == "log" else m

    def solve(sigma, x0):
        return least_squares(lambda t: (model(t) - y_fit) / sigma, x0=x0, x_scale=1.0)

    x0 = np.array([0.0] * (len(names) - fit_l_phi) + ([np.log(l0)] if fit_l_phi else []))
    if space == "log":  # start each prefactor at the mean log ratio data/model of its part
        gap, start = y_fit - model(x0), 0
        for k, (_, y, _, _) in enumerate(parts):
            x0[k] = float(np.mean(gap[start : start + y.size]))
            start += y.size
    first = solve(s_stat, x0)
    n_pts, n_par = y_fit.size, len(names)
    dof = int(n_pts - n_par)
    chi2_stat = float(np.sum(first.fun**2))
    p_stat = float(chi2_dist.sf(chi2_stat, dof)) if dof > 0 else float("nan")
    sigma_m, fit = 0.0, first
    if space == "log" and model_discrepancy is not None and dof > 0:
        if model_discrepancy == "auto":
            if with_errors and p_stat < 0.05:
                sigma_m, fit = _birge(solve, s_stat, first, dof)
        else:
            sigma_m = float(model_discrepancy)
            if not sigma_m >= 0:
                raise ParameterError("model_discrepancy", model_discrepancy, "must be >= 0")
            fit = solve(np.hypot(s_stat, sigma_m), first.x)
    chi2 = float(np.sum(fit.fun**2))
    scale = 1.0 if with_errors else max(chi2 / max(dof, 1), 0.0)
    # a prefactor driven to 0 (ln -> -inf) has a vanishing Jacobian column: it is
    # unconstrained, and the errors of the others come from the remaining columns
    norms = np.linalg.norm(fit.jac, axis=0)
    live = norms > 1e-6 * max(float(norms.max()), 1e-300)
    log_err = np.full(n_par, np.inf)
    try:
        jl = fit.jac[:, live]
        log_err[live] = np.sqrt(np.clip(np.diag(np.linalg.inv(jl.T @ jl) * scale), 0, None))
    except np.linalg.LinAlgError:
        pass
    out: dict = {
        "chi2": chi2,
        "dof": dof,
        "p_value": float(chi2_dist.sf(chi2, dof)) if dof > 0 else float("nan"),
        "chi2_stat": chi2_stat,
        "p_value_stat": p_stat,
        "model_discrepancy": sigma_m,
        "law_consistent": bool(dof > 0 and p_stat >= 0.05),
        "unconstrained": [],
        "n_points": int(n_pts),
        "space": space,
        "l_phi_fitted": bool(fit_l_phi),
    }
    for k, name in enumerate(names):
        val = float(np.exp(fit.x[k]))
        bad = not np.isfinite(log_err[k]) or log_err[k] > MAX_LOG_ERROR
        out[name] = None if bad else val
        out[f"{name}_err"] = None if bad else float(val * log_err[k])
        if bad:
            out["unconstrained"].append(name)
    if not has_aas:
        out["aas_amplitude"] = out["aas_amplitude_err"] = None
        out["unconstrained"].append("aas_amplitude")
    return out


def _birge(solve, s_stat: np.ndarray, first, dof: int):
    """Relative model error sigma_m (log space) with chi^2/dof = 1, and the refit with it."""
    from scipy.optimize import brentq

    cache: dict[float, object] = {}

    def excess(sm: float) -> float:
        cache[sm] = solve(np.hypot(s_stat, sm), first.x)
        return float(np.sum(cache[sm].fun ** 2)) / dof - 1.0

    hi = 0.1
    while excess(hi) > 0 and hi < 100:
        hi *= 4
    sm = float(brentq(excess, 0.0, hi, xtol=1e-4, rtol=1e-4))
    return sm, cache.get(sm) or solve(np.hypot(s_stat, sm), first.x)


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
