"""Distributions of the h/e and h/2e amplitudes over disorder realizations, until converged.

The h/e amplitude of one ring is sample-specific; a prediction for "rings like this" is a
distribution. :func:`ensemble_statistics` runs any ensemble task (``task(seed) -> G(B)`` row,
e.g. :class:`RingAmplitudeTask`) through :func:`ringkit.transport.ensemble.run_ensemble` in
batches of seeds ``seed0, seed0 + 1, ...`` (any executor, checkpointed: nothing computed is
lost, a rerun reloads it), extracts the h/e rms, h/2e rms and mean G of every realization
(:func:`ringkit.analysis.ensemble_stats.trace_amplitudes`, i.e. ``extract_oscillations``), and
stops when every requested quantile's bootstrap error meets the :class:`StoppingRule`. The
result depends only on the seeds, so it is identical for every executor and worker count.

:func:`amplitude_statistics` is the device-level entry point (device, T, L_phi, field window);
:func:`ringkit.transport.amplitude_size.amplitude_vs_radius` repeats it over radii and fits
the semi-analytic law (:func:`ringkit.analysis.scaling_fit.fit_amplitude_prefactors`) through
the medians.
docs/amplitude-statistics.md describes conventions and measured costs.

Public API
----------
RingAmplitudeTask, ensemble_statistics, amplitude_statistics, AmplitudeStatistics
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from ringkit._validation import ParameterError, check_positive
from ringkit.analysis.ensemble_stats import (
    AMPLITUDE_COLUMNS,
    DEFAULT_QUANTILES,
    ConvergenceWarning,
    StoppingRule,
    bootstrap_quantiles,
    exceedance_probability,
    flux_to_equivalent_field,
    trace_amplitudes,
)
from ringkit.transport.ensemble import default_executor, run_ensemble

__all__ = [
    "RingAmplitudeTask",
    "AmplitudeStatistics",
    "ensemble_statistics",
    "amplitude_statistics",
]

#: Trailing columns of a RingAmplitudeTask row after G(B).
INFO_COLUMNS = (
    "thermal_error_he",
    "thermal_error_h2e",
    "n_energies",
    "l_phi_realised_m",
    "l_phi_realised_err_m",
)


@dataclass(frozen=True, eq=False)
class RingAmplitudeTask:
    """One disorder realization of a ringkit device: G(B) [e^2/h] and thermal diagnostics.

    ``task(seed)`` builds the ring (:func:`ringkit.tightbinding.build_ring`) and runs
    :func:`ringkit.transport.sweep.fast_field_conductance`; the row is G over ``fields``
    followed by :data:`INFO_COLUMNS` (estimated thermal error of the h/e and h/2e rms in
    e^2/h, number of energies, and the L_phi the probes realise on this realization with its
    error, in m: inf/0 without dephasing, NaN with ``calibrate_l_phi=False``). Picklable;
    ``describe()`` fingerprints the checkpoint.
    """

    device: object
    fields: tuple
    temperature: float = 0.0
    l_phi: float | None = None
    energy: float | None = None
    n_probes: int = 100
    thermal_tol: float = 1e-4
    calibrate_l_phi: bool = True

    n_info = len(INFO_COLUMNS)
    info_columns = INFO_COLUMNS

    def __post_init__(self) -> None:
        vals = np.asarray(self.fields, dtype=float)
        if vals.ndim != 1 or vals.size < 8 or not np.all(np.isfinite(vals)):
            raise ParameterError("fields", f"{vals.size} values", "need >= 8 finite values")
        object.__setattr__(self, "fields", tuple(vals.tolist()))
        check_positive("temperature", self.temperature, "K", allow_zero=True)

    @property
    def fermi_energy(self) -> float:
        """Fermi energy in J (the material's unless ``energy`` is given)."""
        return float(self.device.material.fermi_energy_J if self.energy is None else self.energy)

    def __call__(self, seed: int) -> np.ndarray:
        from ringkit.tightbinding import build_ring
        from ringkit.transport.sweep import fast_field_conductance

        ring = build_ring(self.device, seed=int(seed))
        res = fast_field_conductance(
            ring,
            np.asarray(self.fields),
            energy=self.fermi_energy,
            temperature=self.temperature,
            l_phi=self.l_phi,
            n_probes=self.n_probes,
            thermal_tol=self.thermal_tol,
            calibrate_l_phi=self.calibrate_l_phi,
        )
        info = res.info
        extra = [info[c] for c in INFO_COLUMNS]
        return np.concatenate([np.asarray(res.conductance, dtype=float), extra])

    def describe(self) -> dict:
        vals = np.asarray(self.fields)
        return {
            "task": "ringkit.transport.amplitude_stats.RingAmplitudeTask",
            "device": repr(self.device),
            "fields": [repr(float(vals[0])), repr(float(vals[-1])), len(vals)],
            "fields_sha256": hashlib.sha256(vals.tobytes()).hexdigest(),
            "temperature_K": repr(float(self.temperature)),
            "l_phi_m": repr(self.l_phi),
            "energy_J": repr(self.fermi_energy),
            "n_probes": int(self.n_probes),
            "thermal_tol": repr(float(self.thermal_tol)),
            "calibrate_l_phi": bool(self.calibrate_l_phi),
            "row_layout": ["G(fields)", *INFO_COLUMNS],
        }


@dataclass(frozen=True, eq=False)
class AmplitudeStatistics:
    """Amplitude distribution over disorder realizations (units e^2/h).

    Attributes
    ----------
    seeds : ndarray (n,)
    field : ndarray (m,)
        Field axis used for the extraction, T (equivalent field for flux-tube sweeps).
    traces : ndarray (n, m)
        G(B) per realization.
    samples : ndarray (n, 3)
        Columns ``AMPLITUDE_COLUMNS``: h/e rms, h/2e rms, mean G.
    q : ndarray
        Probabilities of the quantiles.
    quantiles, quantile_errors : ndarray (3, len(q))
        Sample quantiles and bootstrap standard errors.
    n_realizations : int
    stop_reason : str
        ``"converged"`` or ``"max_realizations"``.
    converged : ndarray of bool (3, len(q))
    history : list of (n, largest relative error)
    exceedance : dict or None
        ``noise_floor``, ``p``, ``low``, ``high``, ``confidence``: probability that the h/e rms
        exceeds the noise floor, with the Wilson interval.
    info : dict
        Task description, rule, thermal diagnostics, timing, notes of the extraction, and the
        distribution of the realised L_phi (``l_phi_realised_median_m``, ``..._q16_m``,
        ``..._q84_m``, ``l_phi_realised_err_median_m``) when the task reports it.
    diagnostics : dict
        Per-realization diagnostic columns of the task by name (arrays over ``seeds``), e.g.
        ``l_phi_realised_m`` and ``l_phi_realised_err_m``.
    """

    seeds: np.ndarray
    field: np.ndarray
    traces: np.ndarray
    samples: np.ndarray
    q: np.ndarray
    quantiles: np.ndarray
    quantile_errors: np.ndarray
    n_realizations: int
    stop_reason: str
    converged: np.ndarray
    history: list
    exceedance: dict | None = None
    info: dict = field(default_factory=dict)
    diagnostics: dict = field(default_factory=dict)

    def quantile(self, column: str, q: float) -> tuple[float, float]:
        """(value, bootstrap error) of one column (``amplitude_he_rms``...) at probability q."""
        j = AMPLITUDE_COLUMNS.index(column)
        k = int(np.flatnonzero(np.isclose(self.q, q))[0])
        return float(self.quantiles[j, k]), float(self.quantile_errors[j, k])

    def to_dataset(self):
        """netCDF-safe xarray Dataset: samples on ``seed``, quantiles on ``quantile``."""
        import xarray as xr

        data = {
            "G": (("seed", "field"), self.traces),
            **{c: (("seed",), self.samples[:, j]) for j, c in enumerate(AMPLITUDE_COLUMNS)},
        }
        for name, col in self.diagnostics.items():
            data[name] = (("seed",), np.asarray(col, dtype=float))
        for j, c in enumerate(AMPLITUDE_COLUMNS):
            data[f"{c}_quantile"] = (("quantile",), self.quantiles[j])
            data[f"{c}_quantile_err"] = (("quantile",), self.quantile_errors[j])
        attrs = {
            "n_realizations": int(self.n_realizations),
            "stop_reason": self.stop_reason,
            "converged": int(bool(np.all(self.converged))),
            "units": "e^2/h (conductance), T (field)",
            "history_n": np.array([h[0] for h in self.history], dtype=np.int64),
            "history_max_rel_err": np.array([h[1] for h in self.history]),
        }
        if self.exceedance is not None:
            for k, v in self.exceedance.items():
                attrs[f"exceedance_{k}"] = float(v)
        for k, v in self.info.items():
            attrs[k] = v if isinstance(v, (int, float, str)) else repr(v)
        coords = {"seed": self.seeds, "field": self.field, "quantile": self.q}
        return xr.Dataset(data, coords=coords, attrs=attrs)


def _max_rel(q: np.ndarray, e: np.ndarray) -> float:
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(np.abs(q) > 0, e / np.abs(q), np.inf)
    return float(np.max(r))


def ensemble_statistics(
    task,
    field,
    *,
    r_in: float,
    r_out: float,
    rule: StoppingRule | None = None,
    quantiles=DEFAULT_QUANTILES,
    seed0: int = 0,
    noise_floor: float | None = None,
    confidence: float = 0.95,
    executor=None,
    max_workers: int | None = None,
    checkpoint=None,
    n_boot: int = 1000,
    progress: bool = False,
    columns=AMPLITUDE_COLUMNS,
    background: str = "polynomial",
) -> AmplitudeStatistics:
    """Amplitude quantiles of ``task`` realizations, adding batches until converged.

    Parameters
    ----------
    task : callable
        ``run_ensemble`` task; ``task(seed)`` returns G(B) in e^2/h over ``field`` followed by
        ``getattr(task, "n_info", 0)`` diagnostic columns.
    field : array
        Field axis in T for the extraction (flux sweeps: equivalent field).
    r_in, r_out : float
        Inner/outer radius in m (the h/e and h/2e bands).
    rule : StoppingRule
        Tolerance, batches and cap (default ``StoppingRule()``: 5 %, 20 + 20k, <= 400).
    quantiles : sequence of float
        Probabilities (default 16/50/84 %).
    seed0 : int
        Realization k uses disorder seed ``seed0 + k``.
    noise_floor : float, optional
        h/e rms noise floor in e^2/h for the exceedance probability.
    confidence : float
        Level of the Wilson interval of that probability.
    executor, max_workers, checkpoint, progress
        As in :func:`run_ensemble` (one default process pool serves all batches).
    n_boot : int
        Bootstrap resamples (the bootstrap is seeded by ``seed0``: reproducible).
    columns : sequence of str
        Which of ``AMPLITUDE_COLUMNS`` must converge (all by default).
    background : str
        Background removal of the extraction (``"none"`` for flux-tube sweeps).
    """
    rule = StoppingRule() if rule is None else rule
    fld = np.asarray(field, dtype=float)
    want = [AMPLITUDE_COLUMNS.index(c) for c in columns]
    n_info = int(getattr(task, "n_info", 0))
    own = executor is None
    if own:
        executor = default_executor(max_workers)
    rows: list[np.ndarray] = []
    history: list[tuple[int, float]] = []
    notes: list[str] = []
    samples = np.empty((0, len(AMPLITUDE_COLUMNS)))
    t0 = time.perf_counter()
    try:
        n = 0
        while True:
            target = rule.next_size(n)
            seeds = list(range(seed0 + n, seed0 + target))
            res = run_ensemble(
                task, seeds, executor=executor, checkpoint=checkpoint, progress=progress
            )
            rows.append(res.values)
            n = target
            vals = np.concatenate(rows)
            traces = vals[:, : vals.shape[1] - n_info]
            if traces.shape[1] != fld.size:
                raise ParameterError("field", f"{fld.size} values", f"task gives {traces.shape}")
            new = trace_amplitudes(
                fld,
                traces[-len(seeds) :],
                r_in=r_in,
                r_out=r_out,
                background=background,
                notes=notes,
            )
            samples = np.concatenate([samples, new])
            qv, qe = bootstrap_quantiles(samples, quantiles, n_boot=n_boot, seed=seed0)
            history.append((n, _max_rel(qv[want], qe[want])))
            stop, reason = rule.check(qv[want], qe[want], n)
            if stop:
                break
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
    elapsed = time.perf_counter() - t0
    conv = rule.converged(qv, qe)
    if reason == "max_realizations":
        warnings.warn(
            f"amplitude quantiles not converged to rel_tol = {rule.rel_tol} after "
            f"max_realizations = {rule.max_realizations} (largest relative bootstrap error "
            f"{history[-1][1]:.3g}); raise max_realizations or the tolerance",
            ConvergenceWarning,
            stacklevel=2,
        )
    exc = None
    if noise_floor is not None:
        p, lo, hi = exceedance_probability(samples[:, 0], noise_floor, confidence=confidence)
        exc = {"noise_floor": float(noise_floor), "p": p, "low": lo, "high": hi}
        exc["confidence"] = float(confidence)
    info = {
        "task_description": repr(res.description),
        "rule": repr(rule),
        "seed0": int(seed0),
        "n_boot": int(n_boot),
        "wall_time_s": elapsed,
        "n_extraction_notes": len(notes),
        "extraction_notes": "\n".join(notes[:20]),
    }
    diagnostics = {}
    if n_info:
        diag = vals[:, vals.shape[1] - n_info :]
        names = tuple(getattr(task, "info_columns", ()))
        if len(names) == n_info:
            diagnostics = {c: diag[:, j] for j, c in enumerate(names)}
        if n_info >= 3:
            info["thermal_error_he_max"] = float(np.max(diag[:, 0]))
            info["thermal_error_h2e_max"] = float(np.max(diag[:, 1]))
            info["n_energies_median"] = float(np.median(diag[:, 2]))
        info.update(_realised_summary(diagnostics))
    return AmplitudeStatistics(
        seeds=np.arange(seed0, seed0 + n, dtype=np.int64),
        field=fld,
        traces=traces,
        samples=samples,
        q=np.asarray(quantiles, dtype=float),
        quantiles=qv,
        quantile_errors=qe,
        n_realizations=n,
        stop_reason=reason,
        converged=conv,
        history=history,
        exceedance=exc,
        info=info,
        diagnostics=diagnostics,
    )


def _realised_summary(diag: dict) -> dict:
    """Distribution of the realised L_phi over the realizations (m): median, 16 and 84 %
    quantiles, median error, and the status (measured, not measured, no dephasing)."""
    if "l_phi_realised_m" not in diag:
        return {}
    val = np.asarray(diag["l_phi_realised_m"], float)
    err = np.asarray(diag.get("l_phi_realised_err_m", np.full_like(val, np.nan)), float)
    if np.all(np.isinf(val)):
        return {"l_phi_status": "no dephasing"}
    if np.all(np.isnan(val)):
        return {"l_phi_status": "not measured (calibrate_l_phi=False)"}
    ok = np.isfinite(val)
    q16, q50, q84 = np.quantile(val[ok], [0.16, 0.5, 0.84])
    return {
        "l_phi_realised_median_m": float(q50),
        "l_phi_realised_q16_m": float(q16),
        "l_phi_realised_q84_m": float(q84),
        "l_phi_realised_err_median_m": float(np.median(err[ok])),
        "l_phi_realised_n": int(ok.sum()),
        "l_phi_status": "measured on each realization (docs/probes.md 'Realised L_phi')",
    }


def _radii(device) -> tuple[float, float, float]:
    geo = device.geometry
    return tuple(math.sqrt(a / math.pi) for a in (geo.area_inner, geo.area_mean, geo.area_outer))


def amplitude_statistics(
    device,
    fields,
    *,
    temperature: float = 0.0,
    l_phi: float | None = None,
    energy: float | None = None,
    n_probes: int = 100,
    thermal_tol: float = 1e-4,
    calibrate_l_phi: bool = True,
    **kwargs,
) -> AmplitudeStatistics:
    """Amplitude statistics of a ringkit device at T and L_phi over a field window.

    Parameters
    ----------
    device : RingDevice
    fields : array
        B in T (uniform mode) or flux in Wb (flux-tube mode), uniformly spaced, >= 4 h/e
        periods with >= 10 points per period (extract_oscillations' requirements).
    temperature : float
        K.
    l_phi : float, optional
        Phase-coherence length in m (dephasing probes; None: coherent).
    energy : float, optional
        Fermi energy in J (default: the material's).
    n_probes, thermal_tol, calibrate_l_phi
        As in :func:`ringkit.transport.sweep.fast_field_conductance` (the realised L_phi of
        every realization is in ``diagnostics`` and its distribution in ``info``).
    **kwargs
        Of :func:`ensemble_statistics` (rule, quantiles, seed0, noise_floor, executor, ...).
    """
    task = RingAmplitudeTask(device, tuple(np.asarray(fields, float)), temperature, l_phi, energy)
    task = dataclasses.replace(
        task,
        n_probes=int(n_probes),
        thermal_tol=float(thermal_tol),
        calibrate_l_phi=bool(calibrate_l_phi),
    )
    r_in, r_mean, r_out = _radii(device)
    fld = np.asarray(task.fields)
    if device.field_mode == "flux_tube":
        # G is strictly h/e periodic in the flux: one line at A_mean/Phi0 in the equivalent
        # field, so narrow bands (+-5 % in radius) and no background removal
        fld = flux_to_equivalent_field(fld, r_mean)
        r_in, r_out = 0.95 * r_mean, 1.05 * r_mean
        kwargs.setdefault("background", "none")
    out = ensemble_statistics(task, fld, r_in=r_in, r_out=r_out, **kwargs)
    out.info.update(
        {"field_mode": device.field_mode, "r_in_m": r_in, "r_mean_m": r_mean, "r_out_m": r_out}
    )
    out.info.update({"temperature_K": float(temperature), "l_phi_m": repr(l_phi)})
    return out
