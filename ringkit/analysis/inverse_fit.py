"""Inverse fit of one ring: L_phi(T) = L_ref (T/T_ref)^-p and the mean free path, by likelihood.

The measured amplitudes (h/e rms, h/2e rms, mean G at each temperature,
:class:`~ringkit.analysis.inverse_fit_data.MeasuredAmplitudes`) are compared with the MODEL'S
ENSEMBLE DISTRIBUTION over disorder realizations
(:class:`~ringkit.analysis.emulator.AmplitudeEmulator`: Gaussian density, with finite-ensemble
corrections, of the level and slope in ln T of ``y = (sqrt r_he, sqrt r_h2e, G)``, all
temperatures of the ring jointly), not with one realization. No kwant import. docs/inverse-fit.md.

Parameters: ``l_phi_ref`` (m, at ``t_ref``, default the geometric mean of the measured
temperatures), ``p`` (L_phi proportional to T^-p) and ``mean_free_path`` (m, the disorder).
The contact coupling is not a parameter: the emulator's leads are ideal, and mean G is the only
amplitude that would carry it, which it shares with the mean free path (not identifiable).

Estimation: maximum likelihood (coarse grid, then Nelder-Mead in box-scaled coordinates).
Confidence intervals: profile likelihood (Wilks): ``2 (lnL_max - lnL_prof) <= 0.989`` (68 %)
and ``3.841`` (95 %), the chi-square(1) quantiles; crossings are bisected. A parameter whose
profile stays below the 68 % level across the whole emulator range is reported as
unconstrained (no value) with an :class:`UnconstrainedWarning` naming it; an interval that
reaches the edge of the range is open on that side. Goodness of fit: the squared distance d2
of the measured summary at the MLE in the scale of the likelihood, referred to
chi-square(dof) with ``dof = n_data - n_params`` (an approximation: parameters fitted; F for
the t used with very few realizations).
Overlay: measured values against the model quantiles (16/50/84 %) at the MLE, per temperature.

Public API
----------
fit_device, InverseFitResult, MeasuredAmplitudes, measured_amplitudes_from_traces
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

from ringkit._validation import ParameterError
from ringkit.analysis._fitcore import UnconstrainedWarning
from ringkit.analysis.inverse_fit_data import MeasuredAmplitudes, measured_amplitudes_from_traces
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY

__all__ = [
    "fit_device",
    "InverseFitResult",
    "MeasuredAmplitudes",
    "measured_amplitudes_from_traces",
    "UnconstrainedWarning",
    "LEVELS",
]

#: Wilks thresholds of 2 Delta lnL for one parameter: chi-square(1) quantiles (scipy.stats).
LEVELS = {0.68: float(stats.chi2.ppf(0.68, 1)), 0.95: float(stats.chi2.ppf(0.95, 1))}
NAMES = ("l_phi_ref", "p", "mean_free_path")
UNITS = {"l_phi_ref": "m", "p": "1", "mean_free_path": "m"}
_QUANT = {"he": 0, "h2e": 1, "g": 2}
_BAD = 1e12


@dataclass
class InverseFitResult:
    """Result of :func:`fit_device` (SI units; see ``to_dict`` for the JSON form).

    Attributes
    ----------
    parameters : dict
        Per name (``l_phi_ref``, ``p``, ``mean_free_path``): ``value`` (NaN if unconstrained),
        ``ci68``, ``ci95`` (``[lo, hi]``; an open side is the range edge or inf),
        ``constrained``, ``open_low``/``open_high`` and ``unit``.
    t_ref : float
        Reference temperature in K.
    l_phi_at_temperatures : list of dict
        ``temperature_K``, ``value``, ``ci68``, ``ci95`` (profile of L_phi(T_j)).
    max_log_likelihood : float
    goodness : dict
        ``statistic``, ``value``, ``dof``, ``p_value``, ``reference``.
    overlay : dict
        ``temperature_K``, ``measured``/``measured_err`` per quantity, ``model`` per quantity
        (J x 3: 16/50/84 % quantiles at the MLE), ``q``.
    profiles : dict
        Per name: ``x`` and ``two_delta_loglike``.
    unconstrained : list of str
    warnings : list of str
    info : dict
        Emulator description, quantities used, timing, coupling statement.
    """

    parameters: dict
    t_ref: float
    l_phi_at_temperatures: list
    max_log_likelihood: float
    goodness: dict
    overlay: dict
    profiles: dict
    unconstrained: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    info: dict = field(default_factory=dict)

    def value(self, name: str) -> float:
        return float(self.parameters[name]["value"])

    def interval(self, name: str, level: float = 0.68) -> tuple[float, float]:
        lo, hi = self.parameters[name][f"ci{round(level * 100)}"]
        return float(lo), float(hi)

    def to_dict(self) -> dict:
        """JSON-safe dict (inf as the strings "inf"/"-inf", NaN as None)."""
        return _jsonable(
            {
                "parameters": self.parameters,
                "t_ref_K": self.t_ref,
                "l_phi_at_temperatures": self.l_phi_at_temperatures,
                "max_log_likelihood": self.max_log_likelihood,
                "goodness": self.goodness,
                "overlay": self.overlay,
                "profiles": self.profiles,
                "unconstrained": self.unconstrained,
                "warnings": self.warnings,
                "info": self.info,
                L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
            }
        )


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        v = float(obj)
        if math.isnan(v):
            return None
        return v if math.isfinite(v) else ("inf" if v > 0 else "-inf")
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


class _Problem:
    """Negative log-likelihood in box-scaled coordinates z in [0, 1]^3."""

    def __init__(self, emu, measured, t_ref, use, p_bounds):
        self.emu, self.measured, self.t_ref, self.use = emu, measured, float(t_ref), use
        self.temps = np.array([m.temperature for m in measured])
        self.l_min = emu.l_phi_range[0]
        self.l_top = 10.0 * emu.largest_finite_l_phi
        lo_l, hi_l = emu.mean_free_path_range
        self.lo = np.array([math.log(self.l_min), p_bounds[0], math.log(lo_l)])
        self.hi = np.array([math.log(self.l_top), p_bounds[1], math.log(hi_l)])
        self.n_eval = 0
        self.n_theta = 3 if self.temps.size > 1 else 2
        self.fixed: dict = {}  # scaled coordinates held fixed in every minimization

    def phys(self, z):
        x = self.lo + np.asarray(z) * (self.hi - self.lo)
        return x

    def l_phi(self, x) -> np.ndarray:
        return math.exp(x[0]) * (self.temps / self.t_ref) ** (-x[1])

    def nll(self, z) -> float:
        z = np.asarray(z, dtype=float)
        out = float(np.sum(np.clip(-z, 0, None) + np.clip(z - 1, 0, None)))
        if out > 0:
            return _BAD * (1 + out)
        x = self.phys(z)
        lp = self.l_phi(x)
        if np.any(lp < self.l_min * (1 - 1e-9)):
            return _BAD * (1 + float(np.max(np.log(self.l_min / lp))))
        lp = np.where(lp > self.l_top, np.inf, lp)
        self.n_eval += 1
        ll = self.emu.logpdf(self.measured, lp, math.exp(x[2]), self.use, self.n_theta)
        return -ll if math.isfinite(ll) else _BAD

    def minimize(self, z0, fixed: dict | None = None, scan: bool = False):
        """Minimize over the free coordinates (``fixed``: index -> scaled value).

        ``scan``: also start from the best point of a coarse grid over the free coordinates
        (the likelihood can have several maxima along the L_ref-p ridge).
        """
        fixed = {**self.fixed, **(fixed or {})}
        free = [k for k in range(3) if k not in fixed]

        def f(w):
            z = np.empty(3)
            z[free] = w
            for k, v in fixed.items():
                z[k] = v
            return self.nll(z)

        w0 = np.clip(np.asarray(z0, dtype=float)[free], 0, 1)
        if scan and free:
            axes = [np.linspace(0.0, 1.0, 7 if k != 2 else 3) for k in free]
            best = f(w0)
            for w in np.array(np.meshgrid(*axes, indexing="ij")).reshape(len(free), -1).T:
                v = f(w)
                if v < best:
                    best, w0 = v, w
        r = optimize.minimize(
            f,
            w0,
            method="Nelder-Mead",
            options={"xatol": 1e-3, "fatol": 5e-4, "maxfev": 400, "initial_simplex": _simplex(w0)},
        )
        z = np.empty(3)
        z[free] = r.x
        for k, v in fixed.items():
            z[k] = v
        return z, float(r.fun)


def _simplex(w0: np.ndarray, step: float = 0.08) -> np.ndarray:
    pts = [w0.copy()]
    for k in range(w0.size):
        p = w0.copy()
        p[k] = p[k] + step if p[k] + step <= 1 else p[k] - step
        pts.append(p)
    return np.array(pts)


def _grid_start(prob: _Problem, n: int = 7) -> np.ndarray:
    best, zb = math.inf, None
    g = np.linspace(0.02, 0.98, n)
    nd = prob.emu.mean_free_paths.size
    gl = np.linspace(0, 1, max(2 * nd - 1, 2))
    for a in g:
        for b in np.linspace(0.05, 0.95, 5):
            for c in gl:
                v = prob.nll([a, b, c])
                if v < best:
                    best, zb = v, np.array([a, b, c])
    return zb


def _profile(prob: _Problem, k: int, z_hat: np.ndarray, nll_hat: float, n: int) -> dict:
    """Profile of coordinate k: coarse grid through the MLE, then bisected crossings."""
    xs = np.unique(np.concatenate([np.linspace(0, 1, n), [z_hat[k]]]))
    start = int(np.searchsorted(xs, z_hat[k]))
    prof = {}
    for order in (range(start, xs.size), range(start, -1, -1)):
        zc = z_hat.copy()
        for i in order:
            zc, v = prob.minimize(zc, {k: xs[i]}, scan=True)
            prof[i] = (v, zc.copy())
    vals = np.array([prof[i][0] for i in range(xs.size)])
    best = min(nll_hat, float(np.min(vals)))
    two_d = 2.0 * (vals - best)

    def crossing(level: float, side: int):
        i0 = int(np.argmin(vals))
        rng = range(i0, xs.size) if side > 0 else range(i0, -1, -1)
        prev = i0
        for i in rng:
            if two_d[i] > level:
                a, b = xs[prev], xs[i]
                za = prof[prev][1]
                for _ in range(5):
                    m = 0.5 * (a + b)
                    zm, v = prob.minimize(za, {k: m}, scan=True)
                    if 2.0 * (v - best) > level:
                        b = m
                    else:
                        a, za = m, zm
                return 0.5 * (a + b), False
            prev = i
        return (1.0 if side > 0 else 0.0), True

    out = {"x": xs, "two_delta": two_d, "best_nll": best, "z_best": prof[int(np.argmin(vals))][1]}
    for lev, c in LEVELS.items():
        lo, open_lo = crossing(c, -1)
        hi, open_hi = crossing(c, +1)
        out[lev] = (lo, hi, open_lo, open_hi)
    return out


def _to_phys(prob: _Problem, k: int, zk: float) -> float:
    x = prob.lo[k] + zk * (prob.hi[k] - prob.lo[k])
    return x if k == 1 else math.exp(x)


def _param_entry(prob, k, prof, z_hat) -> dict:
    lo68, hi68, olo68, ohi68 = prof[0.68]
    lo95, hi95, olo95, ohi95 = prof[0.95]
    flat = olo68 and ohi68
    val = math.nan if flat else _to_phys(prob, k, z_hat[k])

    def edge(zv, is_open, side):
        v = _to_phys(prob, k, zv)
        if is_open and k == 0 and side > 0:
            return math.inf  # above the emulator's largest L_phi: consistent with coherent
        return v

    return {
        "value": val,
        "ci68": [math.nan, math.nan] if flat else [edge(lo68, olo68, -1), edge(hi68, ohi68, 1)],
        "ci95": [math.nan, math.nan] if flat else [edge(lo95, olo95, -1), edge(hi95, ohi95, 1)],
        "open_low": bool(olo95),
        "open_high": bool(ohi95),
        "constrained": not flat,
        "profiled": True,
        "unit": UNITS[NAMES[k]],
    }


def _check(measured, emu) -> list:
    ms = list(measured)
    if not ms:
        raise ParameterError("measured", ms, "need amplitudes at >= 1 temperature")
    for i, m in enumerate(ms):
        if not isinstance(m, MeasuredAmplitudes):
            raise ParameterError(f"measured[{i}]", type(m).__name__, "must be MeasuredAmplitudes")
    lo, hi = emu.temperature_range
    for m in ms:
        if not lo * (1 - 1e-9) <= m.temperature <= hi * (1 + 1e-9):
            raise ParameterError(
                "temperature", m.temperature, f"the emulator covers [{lo:g}, {hi:g}]", "K"
            )
    return sorted(ms, key=lambda m: m.temperature)


def fit_device(
    measured,
    emulator,
    *,
    t_ref: float | None = None,
    quantities=("he", "h2e", "g"),
    p_bounds: tuple[float, float] = (-0.5, 3.0),
    n_profile: int = 11,
    l_phi_per_temperature: bool = True,
    profile: tuple = NAMES,
) -> InverseFitResult:
    """Maximum-likelihood L_phi(T) and mean free path of one ring, with profile intervals.

    Parameters
    ----------
    measured : sequence of MeasuredAmplitudes
        One entry per temperature (K inside the emulator's range).
    emulator : AmplitudeEmulator
    t_ref : float, optional
        Reference temperature of ``l_phi_ref`` in K (default: geometric mean of the measured).
    quantities : sequence of {"he", "h2e", "g"}
        Amplitudes used in the likelihood (drop ``"g"`` if the measured G carries a series
        resistance the model does not have).
    p_bounds : (float, float)
        Search range of the exponent p.
    n_profile : int
        Coarse profile points per parameter (crossings are then bisected).
    l_phi_per_temperature : bool
        Also profile L_phi(T_j) at every measured temperature.
    profile : tuple of str
        Parameters to profile (default all). A parameter left out is reported with
        ``value`` NaN and ``profiled`` False (no number without its interval).

    Returns
    -------
    InverseFitResult
    """
    t0 = time.perf_counter()
    ms = _check(measured, emulator)
    use = tuple(sorted({_QUANT[q] for q in quantities}))
    if not use:
        raise ParameterError("quantities", quantities, "choose from 'he', 'h2e', 'g'")
    temps = np.array([m.temperature for m in ms])
    t_ref = float(np.exp(np.mean(np.log(temps)))) if t_ref is None else float(t_ref)
    n_free = 3 if temps.size > 1 else 2
    prob = _Problem(emulator, ms, t_ref, use, p_bounds)
    z0 = _grid_start(prob)
    fixed = {} if temps.size > 1 else {1: (0.0 - p_bounds[0]) / (p_bounds[1] - p_bounds[0])}
    prob.fixed = fixed
    z_hat, nll_hat = prob.minimize(z0)
    profiles, params, unconstrained, notes = {}, {}, [], []
    ks = [k for k in range(3) if k not in fixed and NAMES[k] in profile]
    for name in NAMES:
        if name not in profile and not (fixed and name == "p"):
            params[name] = {"value": math.nan, "ci68": [math.nan] * 2, "ci95": [math.nan] * 2}
            params[name].update(constrained=None, profiled=False, unit=UNITS[name])
    for k in ks:
        prof = _profile(prob, k, z_hat, nll_hat, n_profile)
        if prof["best_nll"] < nll_hat - 1e-6:
            z_hat, nll_hat = prof["z_best"], prof["best_nll"]
        profiles[NAMES[k]] = {
            "x": [_to_phys(prob, k, z) for z in prof["x"]],
            "two_delta_loglike": prof["two_delta"].tolist(),
        }
        params[NAMES[k]] = _param_entry(prob, k, prof, z_hat)
        if not params[NAMES[k]]["constrained"]:
            unconstrained.append(NAMES[k])
    if fixed:
        params["p"] = {"value": math.nan, "ci68": [math.nan] * 2, "ci95": [math.nan] * 2}
        params["p"].update(constrained=False, open_low=True, open_high=True, profiled=False)
        params["p"]["unit"] = "1"
        unconstrained.append("p")
    for name in unconstrained:
        msg = (
            f"{name} is not constrained by these data within the emulator range "
            "(flat profile likelihood); no value is reported"
        )
        notes.append(msg)
        warnings.warn(msg, UnconstrainedWarning, stacklevel=2)
    x_hat = prob.phys(z_hat)
    per_t = []
    if l_phi_per_temperature and temps.size > 1:
        for m in ms:
            sub = _Problem(emulator, ms, m.temperature, use, p_bounds)
            zs = z_hat.copy()
            zs[0] = (math.log(prob.l_phi(x_hat)[list(temps).index(m.temperature)]) - sub.lo[0]) / (
                sub.hi[0] - sub.lo[0]
            )
            prof = _profile(sub, 0, np.clip(zs, 0, 1), nll_hat, max(5, n_profile // 2))
            e = _param_entry(sub, 0, prof, np.clip(zs, 0, 1))
            per_t.append({"temperature_K": m.temperature, **e})
    lp_hat = prob.l_phi(x_hat)
    lp_hat = np.where(lp_hat > prob.l_top, np.inf, lp_hat)
    mfp = math.exp(x_hat[2])
    d2, nu, n_data = emulator.mahalanobis(ms, lp_hat, mfp, use, n_free)
    dof = n_data - n_free
    if math.isinf(nu):
        p_value = float(stats.chi2.sf(d2, dof)) if dof > 0 else math.nan
        reference = "d2 ~ chi-square(dof), dof = n_data - n_params (approximation)"
    else:
        p_value = float(stats.f.sf(d2 / dof, dof, nu)) if dof > 0 else math.nan
        reference = "d2/dof ~ F(dof, t_dof), dof = n_data - n_params (approximation)"
    goodness = {
        "statistic": "squared distance d2 of the measured summary (level and slope in ln T) "
        "at the MLE (predictive-t scale)",
        "value": d2,
        "dof": dof,
        "t_dof": nu,  # inf: Gaussian
        "p_value": p_value,
        "reference": reference,
    }
    noise = np.array([[m.he_noise_rms, m.h2e_noise_rms] for m in ms])
    q = (0.16, 0.5, 0.84)
    model = emulator.quantiles(lp_hat, temps, mfp, q=q, noise_rms=noise)
    overlay = {
        "temperature_K": temps.tolist(),
        "q": list(q),
        "measured": {
            "amplitude_he_rms": [m.he_rms for m in ms],
            "amplitude_h2e_rms": [m.h2e_rms for m in ms],
            "mean_conductance": [m.mean_g for m in ms],
        },
        "measured_err": {
            "amplitude_he_rms": [m.he_rms_err for m in ms],
            "amplitude_h2e_rms": [m.h2e_rms_err for m in ms],
            "mean_conductance": [m.mean_g_err for m in ms],
        },
        "model": {k: v.tolist() for k, v in model.items()},
        "l_phi_m": lp_hat.tolist(),
    }
    info = {
        "emulator_sha256": emulator.content_hash(),
        "quantities": [k for k, v in _QUANT.items() if v in use],
        "n_realizations": int(emulator.seeds.size),
        "l_phi_range_m": [prob.l_min, prob.l_top],
        "mean_free_path_range_m": list(emulator.mean_free_path_range),
        "p_bounds": list(p_bounds),
        "n_likelihood_evaluations": prob.n_eval,
        "wall_time_s": time.perf_counter() - t0,
        "contact_coupling": "not fitted: ideal leads in the model; with mean G it would be "
        "degenerate with the mean free path (not identifiable)",
        "field_model": emulator.info.get("field_model", ""),
    }
    return InverseFitResult(
        parameters=params,
        t_ref=t_ref,
        l_phi_at_temperatures=per_t,
        max_log_likelihood=-nll_hat,
        goodness=goodness,
        overlay=overlay,
        profiles=profiles,
        unconstrained=unconstrained,
        warnings=notes,
        info=info,
    )
