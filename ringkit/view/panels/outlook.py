"""Pre-fabrication outlook, compute part (no widgets): will rings like this one oscillate?

Given a device (material, sheet density, mobility, radius, arm width), a temperature, L_phi,
a noise floor and the number of rings to be made, run the disorder-ensemble amplitude
statistics (:func:`ringkit.transport.amplitude_stats.amplitude_statistics`) on a flux-tube
ring and answer with distributions, not with one number:

* quantiles (16/50/84 %) with bootstrap errors of the h/e rms, h/2e rms and mean G;
* P(h/e rms > floor) with its Wilson interval (the floor in e^2/h, or as a resistance
  amplitude in Ohm through :func:`ringkit.analysis.labunits.resistance_amplitude`, ring by
  ring: dR_i = (h/e^2) dG_i / G_i^2);
* "of N rings, k are expected above the floor": the predictive (beta-binomial) distribution
  of k, i.e. Binomial(N, p) averaged over the Jeffreys posterior Beta(k_s + 1/2,
  n_s - k_s + 1/2) of p given k_s of n_s simulated realizations above the floor. Its mean and
  equal-tailed interval carry both the ring-to-ring randomness and the uncertainty of p.

Also the after-measurement overlay: :func:`measured_overlay` reads the ``fit.json`` written
by ``ringkit fit`` (docs/outlook-and-fit-usage.md) and returns the measured amplitudes and the
model quantile bands versus temperature.

Public API
----------
OutlookParams, Outlook, ring_outlook(params, *, report=None, executor=None, checkpoint=None),
rings_above_floor(k, n, n_rings, confidence=0.95), measured_overlay(fit) -> dict,
reevaluate(outlook, params) (new floor or N, same realizations), same_physics, ProgressExecutor,
overlay_rows(overlay) (fit.json rows of a fit's overlay)
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import math
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive, check_range

__all__ = [
    "OutlookParams",
    "Outlook",
    "ring_outlook",
    "rings_above_floor",
    "measured_overlay",
    "ProgressExecutor",
    "reevaluate",
    "same_physics",
    "overlay_rows",
]

FLOOR_UNITS = ("e2/h", "ohm")
LABELS = {
    "amplitude_he_rms": "h/e rms",
    "amplitude_h2e_rms": "h/2e rms",
    "mean_conductance": "mean G",
}


@dataclass(frozen=True)
class OutlookParams:
    """Settings of the outlook (SI units at the boundary).

    Parameters
    ----------
    material : {"GaAs", "InAs", "Au"}
        Preset (effective mass; density and mobility unless given).
    density : float or None
        Sheet density in m^-2 (None: the preset's).
    mobility : float or None
        Mobility in m^2/(V s) (None: the preset's); gives the Born disorder strength.
    radius, width : float
        Mean ring radius and arm width in m.
    temperature : float
        K (thermal average by the thermal policy, tolerance ``thermal_tol``).
    l_phi : float
        Phase-coherence length in m (``inf``: coherent, no probes).
    noise_floor : float
        h/e rms noise floor, in ``floor_unit``.
    floor_unit : {"e2/h", "ohm"}
        ``"ohm"``: the floor is a resistance amplitude dR (rms), compared ring by ring.
    n_rings : int
        Rings to be fabricated.
    realizations : int
        Largest number of disorder realizations (the ensemble stops earlier when every
        quantile's bootstrap error is below ``rel_tol``).
    rel_tol : float
        Relative tolerance of the quantiles (``StoppingRule.rel_tol``).
    periods, points_per_period : int
        Flux window in h/e periods and its sampling (>= 4 and >= 10, the extraction's limits).
    seed : int
        First disorder seed.
    n_probes : int
        Dephasing probes when L_phi is finite.
    thermal_tol : float
        Thermal-average tolerance in e^2/h.
    calibrate_l_phi : bool
        Measure the L_phi the probes realise on every realization and adjust their coupling
        (docs/probes.md, "Realised L_phi"; about 4x the cost of the analytic coupling).
    confidence : float
        Level of the intervals (Wilson and predictive).
    """

    material: str = "GaAs"
    density: float | None = None
    mobility: float | None = None
    radius: float = 150e-9
    width: float = 60e-9
    temperature: float = 0.0
    l_phi: float = 1e-6
    noise_floor: float = 0.01
    floor_unit: str = "e2/h"
    n_rings: int = 20
    realizations: int = 40
    rel_tol: float = 0.1
    periods: int = 5
    points_per_period: int = 12
    seed: int = 0
    n_probes: int = 24
    thermal_tol: float = 1e-3
    calibrate_l_phi: bool = True
    confidence: float = 0.95

    def __post_init__(self) -> None:
        check_choice("material", self.material, ("GaAs", "InAs", "Au"))
        if self.density is not None:
            check_positive("density", self.density, "m^-2")
        if self.mobility is not None:
            check_positive("mobility", self.mobility, "m^2/Vs")
        check_positive("radius", self.radius, "m")
        check_range("width", self.width, 0.0, 2 * self.radius, "m", inclusive=(False, False))
        check_positive("temperature", self.temperature, "K", allow_zero=True)
        if not (isinstance(self.l_phi, (int, float)) and self.l_phi == math.inf):
            check_positive("l_phi", self.l_phi, "m")  # inf: coherent
        check_positive("noise_floor", self.noise_floor, self.floor_unit)
        check_choice("floor_unit", self.floor_unit, FLOOR_UNITS)
        _int("n_rings", self.n_rings, 1, 10**6)
        _int("realizations", self.realizations, 5, 10**5)
        check_range("rel_tol", self.rel_tol, 0.0, 1.0, inclusive=(False, True))
        _int("periods", self.periods, 4, 1000)
        _int("points_per_period", self.points_per_period, 10, 1000)
        _int("seed", self.seed, 0, 2**62)
        _int("n_probes", self.n_probes, 2, 10**4)
        check_range("confidence", self.confidence, 0.0, 1.0, inclusive=(False, False))

    def updated(self, **changes: Any) -> OutlookParams:
        """Copy with fields replaced (validated)."""
        return replace(self, **changes)

    def device(self):
        """The flux-tube :class:`ringkit.device.RingDevice` (flux through the hole only)."""
        from ringkit.device import Material, RingDevice, RingGeometry

        over = {k: v for k, v in (("density", self.density), ("mobility", self.mobility)) if v}
        mat = Material.preset(self.material, **over)
        geo = RingGeometry.from_mean_radius(self.radius, self.width)
        return RingDevice(mat, geo, field_mode="flux_tube")

    def fluxes(self) -> np.ndarray:
        """Flux window in Wb: ``periods`` h/e periods, ``points_per_period`` points each."""
        from ringkit.units import PHI0

        n = int(self.periods) * int(self.points_per_period)
        return PHI0 * np.arange(n) / int(self.points_per_period)

    def rule(self):
        """The :class:`~ringkit.analysis.ensemble_stats.StoppingRule` of this outlook."""
        from ringkit.analysis.ensemble_stats import StoppingRule

        n = int(self.realizations)
        first = min(20, n)
        return StoppingRule(rel_tol=self.rel_tol, min_realizations=first, batch=first,
                            max_realizations=n)  # fmt: skip


def _int(name: str, value: Any, lo: int, hi: int) -> int:
    if isinstance(value, bool) or int(value) != value or not lo <= value <= hi:
        raise ParameterError(name, value, f"must be an integer in [{lo}, {hi}]")
    return int(value)


def rings_above_floor(k: int, n: int, n_rings: int, confidence: float = 0.95):
    """Expected number of rings (of ``n_rings``) above the floor, with its interval.

    Parameters
    ----------
    k, n : int
        Simulated realizations above the floor, and simulated realizations.
    n_rings : int
        Rings to be made.
    confidence : float
        Level of the equal-tailed interval.

    Returns
    -------
    mean, low, high : float, int, int
        Mean and interval of the beta-binomial predictive distribution
        BetaBinomial(n_rings, k + 1/2, n - k + 1/2): Binomial(n_rings, p) averaged over the
        Jeffreys posterior of p.
    """
    from scipy.stats import betabinom

    k, n = _int("k", k, 0, 10**9), _int("n", n, 1, 10**9)
    if k > n:
        raise ParameterError("k", k, f"must be <= n = {n}")
    n_rings = _int("n_rings", n_rings, 1, 10**6)
    conf = check_range("confidence", confidence, 0.0, 1.0, inclusive=(False, False))
    dist = betabinom(n_rings, k + 0.5, n - k + 0.5)
    lo, hi = dist.ppf(0.5 - 0.5 * conf), dist.ppf(0.5 + 0.5 * conf)
    return float(dist.mean()), int(lo), int(hi)


class ProgressExecutor(cf.Executor):
    """Serial executor that calls ``report(fraction, text)`` before each submitted chunk.

    ``report`` may raise (e.g. :class:`ringkit.view.panels._base.JobCancelled`) to stop the
    ensemble between realizations; finished ones are kept in a checkpoint if one is used.
    ``_max_workers`` is large so that :func:`ringkit.transport.ensemble.run_ensemble` submits
    one realization per chunk.
    """

    _max_workers = 10**6

    def __init__(self, report: Callable[[float, str], None], total: int) -> None:
        self._report, self._total, self.done = report, max(int(total), 1), 0

    def submit(self, fn, /, *args, **kwargs):
        from ringkit.transport.ensemble import SerialExecutor

        self._report(min(self.done / self._total, 0.99),
                     f"realization {self.done + 1} (at most {self._total})")  # fmt: skip
        fut = SerialExecutor().submit(fn, *args, **kwargs)
        self.done += len(args[1]) if len(args) > 1 and hasattr(args[1], "__len__") else 1
        return fut


@dataclass(frozen=True)
class Outlook:
    """Result of :func:`ring_outlook` (amplitudes in e^2/h, resistance amplitudes in Ohm).

    Attributes
    ----------
    params : OutlookParams
    stats : AmplitudeStatistics
    floor_samples : ndarray (n,)
        The per-realization h/e rms in the floor's unit (e^2/h, or dR in Ohm).
    p, p_low, p_high : float
        P(h/e rms > floor) and its Wilson interval at ``params.confidence``.
    k_above : int
        Simulated realizations above the floor.
    expected_rings : float
        Mean number of the ``n_rings`` above the floor.
    rings_low, rings_high : int
        Its predictive interval.
    notes : tuple of str
        Warnings recorded on the way (convergence, extraction, coarse lattice).
    elapsed : float
        s.
    """

    params: OutlookParams
    stats: Any
    floor_samples: np.ndarray
    p: float
    p_low: float
    p_high: float
    k_above: int
    expected_rings: float
    rings_low: int
    rings_high: int
    notes: tuple[str, ...] = ()
    elapsed: float = 0.0

    def quantile_rows(self) -> list[tuple[str, float, float, float]]:
        """``(label, q, value, error)`` of every column and quantile (e^2/h)."""
        from ringkit.analysis.ensemble_stats import AMPLITUDE_COLUMNS

        s = self.stats
        return [
            (LABELS[c], float(q), float(s.quantiles[j, i]), float(s.quantile_errors[j, i]))
            for j, c in enumerate(AMPLITUDE_COLUMNS)
            for i, q in enumerate(s.q)
        ]

    def realised_l_phi(self) -> str:
        """The L_phi realised by the probes over the realizations (median, 16-84 %), or why
        it was not measured."""
        info = self.stats.info
        if "l_phi_realised_median_m" not in info:
            return str(info.get("l_phi_status", "not measured"))
        return (
            f"{1e6 * info['l_phi_realised_median_m']:.3g} µm (16-84 %: "
            f"{1e6 * info['l_phi_realised_q16_m']:.3g}-{1e6 * info['l_phi_realised_q84_m']:.3g}"
            f" µm, error {1e6 * info['l_phi_realised_err_median_m']:.2g} µm)"
        )

    def sentence(self) -> str:
        """The answer in one line."""
        p = self.params
        unit = "e²/h" if p.floor_unit == "e2/h" else "Ω"
        return (
            f"Of {p.n_rings} rings, expected {self.expected_rings:.1f} "
            f"({self.rings_low}-{self.rings_high}, {100 * p.confidence:.0f} %) show h/e above "
            f"the floor of {p.noise_floor:.3g} {unit}; P = {self.p:.2f} "
            f"({self.p_low:.2f}-{self.p_high:.2f}) from {self.stats.n_realizations} realizations"
        )


def ring_outlook(
    params: OutlookParams,
    *,
    report: Callable[[float, str], None] | None = None,
    executor: cf.Executor | None = None,
    checkpoint: str | Path | None = None,
) -> Outlook:
    """Amplitude statistics of rings like ``params`` and the chance they show h/e.

    Parameters
    ----------
    params : OutlookParams
    report : callable, optional
        ``report(fraction, text)`` before each realization (may raise to cancel); then the
        realizations run in this process.
    executor : concurrent.futures.Executor, optional
        Any executor (ignored when ``report`` is given); default: in this process.
    checkpoint : path, optional
        Keep finished realizations (a rerun or a resumed cancel reuses them).

    Returns
    -------
    Outlook
    """
    from ringkit.transport.amplitude_stats import amplitude_statistics
    from ringkit.transport.ensemble import SerialExecutor

    t0 = time.perf_counter()
    say = report or (lambda frac, text: None)
    say(0.0, "building the device")
    device = params.device()
    if report is not None:
        executor = ProgressExecutor(report, params.realizations)
    elif executor is None:
        executor = SerialExecutor()
    l_phi = params.l_phi if math.isfinite(params.l_phi) else None
    with warnings.catch_warnings(record=True) as caught:  # notes, not errors in a job thread
        warnings.simplefilter("always")
        stats = amplitude_statistics(
            device, params.fluxes(), temperature=params.temperature, l_phi=l_phi,
            n_probes=params.n_probes, thermal_tol=params.thermal_tol, rule=params.rule(),
            calibrate_l_phi=bool(params.calibrate_l_phi),
            seed0=params.seed, executor=executor, checkpoint=checkpoint, progress=False,
        )  # fmt: skip
    notes = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
    say(1.0, "done")
    answer = _floor_answer(stats, params)
    return Outlook(params=params, stats=stats, notes=notes, elapsed=time.perf_counter() - t0,
                   **answer)  # fmt: skip


def _floor_answer(stats, params: OutlookParams) -> dict[str, Any]:
    """Exceedance probability and rings above the floor of these realizations."""
    from ringkit.analysis.ensemble_stats import exceedance_probability

    he, g = stats.samples[:, 0], stats.samples[:, 2]
    if params.floor_unit == "ohm":
        from ringkit.analysis.labunits import resistance_amplitude

        if not np.all(g > 0):
            raise ParameterError("noise_floor", params.noise_floor,
                                 "in Ohm needs G > 0 in every realization; use e2/h")  # fmt: skip
        x = np.array([resistance_amplitude(a, gi) for a, gi in zip(he, g, strict=True)])
    else:
        x = he.copy()
    p, lo, hi = exceedance_probability(x, params.noise_floor, confidence=params.confidence)
    k = int(np.count_nonzero(x > params.noise_floor))
    mean, r_lo, r_hi = rings_above_floor(k, x.size, params.n_rings, params.confidence)
    return dict(floor_samples=x, p=p, p_low=lo, p_high=hi, k_above=k, expected_rings=mean,
                rings_low=r_lo, rings_high=r_hi)  # fmt: skip


def same_physics(a: OutlookParams, b: OutlookParams) -> bool:
    """True if ``a`` and ``b`` differ only in the floor, its unit, N or the confidence."""
    skip = {"noise_floor", "floor_unit", "n_rings", "confidence"}
    return all(getattr(a, f) == getattr(b, f) for f in a.__dataclass_fields__ if f not in skip)


def reevaluate(res: Outlook, params: OutlookParams) -> Outlook:
    """The same realizations against the floor, unit, N and confidence of ``params``."""
    if not same_physics(res.params, params):
        raise ParameterError("params", "device or ensemble", "changed: run the outlook again")
    return replace(res, params=params, **_floor_answer(res.stats, params))


_QUANT = (("he", "amplitude_he_rms"), ("h2e", "amplitude_h2e_rms"), ("g", "mean_conductance"))


def overlay_rows(overlay: dict) -> tuple[list[dict], list[dict]]:
    """Measured rows and model-band rows (one per temperature) of a fit's ``overlay``.

    ``overlay`` is ``InverseFitResult.overlay`` (docs/inverse-fit.md, "API summary"); the rows
    are those of ``fit.json`` (``measured``: ``amplitude_he_e2h``, ``amplitude_he_err_e2h``,
    ..., ``mean_conductance_e2h``; ``model_bands``: ``he_q16`` ... ``g_q84``).
    """
    temps = [float(t) for t in overlay.get("temperature_K", [])]
    l_phi = list(overlay.get("l_phi_m") or [None] * len(temps))
    measured, bands = [], []
    for j, t in enumerate(temps):
        m: dict[str, Any] = {"temperature_K": t}
        b: dict[str, Any] = {"temperature_K": t}
        for short, key in _QUANT:
            base = key.replace("_rms", "")
            m[f"{base}_e2h"] = overlay["measured"][key][j]
            m[f"{base}_err_e2h"] = overlay["measured_err"][key][j]
            for q, v in zip(("q16", "q50", "q84"), overlay["model"][key][j], strict=True):
                b[f"{short}_{q}"] = v
        m["l_phi_fit_m"] = l_phi[j]
        measured.append(m)
        bands.append(b)
    return measured, bands


def measured_overlay(fit: dict | str | Path) -> dict[str, np.ndarray]:
    """Measured amplitudes and model quantile bands versus T from a ``fit.json``.

    Parameters
    ----------
    fit : dict, path or InverseFitResult
        The document written by ``ringkit fit`` (or its path; see
        docs/outlook-and-fit-usage.md, "fit.json"), or a fit result of
        :func:`ringkit.analysis.inverse_fit.fit_device` (or its ``to_dict()``).

    Returns
    -------
    dict
        ``temperature`` (K), ``measured_he``, ``measured_h2e``, ``measured_g`` and, when the
        document has model bands, ``model_T`` with ``he_q16/he_q50/he_q84`` (and h2e, g).

    Raises
    ------
    ParameterError
        Not a fit document, or no measured amplitudes in it.
    """
    doc = fit
    if hasattr(fit, "overlay") and hasattr(fit, "to_dict"):  # an InverseFitResult
        doc = {"overlay": fit.overlay}
    elif not isinstance(fit, dict):
        path = Path(fit)
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
            raise ParameterError(
                "fit file", str(path), f"must be a readable fit.json ({err})"
            ) from None
    if isinstance(doc, dict) and "measured" not in doc and isinstance(doc.get("overlay"), dict):
        rows, bands = overlay_rows(doc["overlay"])
        doc = {"measured": rows, "model_bands": bands}
    meas = doc.get("measured") if isinstance(doc, dict) else None
    if not meas or not isinstance(meas, list):
        raise ParameterError("fit file", "document", "has no 'measured' amplitudes (fit.json)")
    out: dict[str, np.ndarray] = {}
    keys = {"temperature": "temperature_K", "measured_he": "amplitude_he_e2h",
            "measured_h2e": "amplitude_h2e_e2h", "measured_g": "mean_conductance_e2h"}  # fmt: skip
    for name, key in keys.items():
        out[name] = np.array([_num(m.get(key)) for m in meas], dtype=float)
    bands = doc.get("model_bands") or []
    if bands:
        out["model_T"] = np.array([_num(b.get("temperature_K")) for b in bands])
        for col in ("he", "h2e", "g"):
            for q in ("q16", "q50", "q84"):
                out[f"{col}_{q}"] = np.array([_num(b.get(f"{col}_{q}")) for b in bands])
    return out


def _num(v: Any) -> float:
    return float("nan") if v is None else float(v)
