"""Oscillation analysis of a study's traces (calls :func:`ringkit.analysis.extract_oscillations`).

Every condition (Fermi energy, gate potential, temperature, dephasing length) is analysed
twice: the ensemble-averaged trace ``<G>(B)`` (h/e averages out over disorder, h/2e survives)
and each single realization (the typical sample-specific amplitude). Bands come from the
ring's inner and outer radius. In flux-tube mode the flux axis is mapped to the equivalent
field ``flux / (pi r_m^2)`` so that the same analysis applies; the period is reported in Wb
(expected: exactly h/e) and no area is reported.

API
---
CONDITION_DIMS
analyse_dataset(plan, ds, setup) -> (xarray.Dataset of results, summary dict)
analyse_trace(plan, x, g, setup) -> OscillationResult or None
"""

from __future__ import annotations

import math
import warnings
from typing import Any

import numpy as np

from ringkit.study.plan import StudyPlan
from ringkit.study.setup import StudySetup

__all__ = ["CONDITION_DIMS", "analyse_dataset", "analyse_trace", "reference_area"]

CONDITION_DIMS: tuple[str, ...] = (
    "fermi_energy",
    "gate_potential",
    "temperature",
    "l_phi",
)

_SCALARS = (
    ("period_he", "h/e period", None),
    ("period_he_err", "uncertainty of the h/e period", None),
    ("area", "effective enclosed area (h/e band centroid)", "m^2"),
    ("area_err", "uncertainty of the area", "m^2"),
    ("radius", "effective radius sqrt(area/pi)", "m"),
    ("amplitude_he_rms", "rms of the h/e band content", "e^2/h"),
    ("amplitude_he_pp", "mean peak-to-peak h/e amplitude", "e^2/h"),
    ("amplitude_h2e_rms", "rms of the h/2e band content", "e^2/h"),
    ("amplitude_h2e_pp", "mean peak-to-peak h/2e amplitude", "e^2/h"),
    ("relative_amplitude_he", "h/e rms / mean conductance", "1"),
    ("relative_amplitude_h2e", "h/2e rms / mean conductance", "1"),
)
_SINGLE = (
    "period_he",
    "amplitude_he_rms",
    "amplitude_h2e_rms",
    "amplitude_he_pp",
    "amplitude_h2e_pp",
)


def reference_area(setup: StudySetup) -> float:
    """Mean-radius area ``pi r_m^2`` in m^2 (maps flux to equivalent field in flux-tube mode)."""
    r_m = 0.5 * (setup.r_in + setup.r_out)
    return math.pi * r_m**2


def analyse_trace(plan: StudyPlan, x: np.ndarray, g: np.ndarray, setup: StudySetup):
    """Extract the oscillations of one trace; ``None`` if the analysis refuses the trace.

    Parameters
    ----------
    plan : StudyPlan
    x : ndarray
        Field in T (uniform mode) or flux in Wb (flux-tube mode).
    g : ndarray
        Conductance in e^2/h.
    setup : StudySetup

    Returns
    -------
    ringkit.analysis.OscillationResult or None
        Warnings of the analysis are re-emitted (the caller records them).
    """
    from ringkit.analysis.extract import extract_oscillations

    a = plan.config["analysis"]
    field = np.asarray(x, float)
    if plan.field_name == "flux":
        field = field / reference_area(setup)
    if not np.all(np.isfinite(g)) or np.ptp(g) == 0:
        return None
    try:
        return extract_oscillations(
            field,
            np.asarray(g, float),
            r_in=setup.r_in,
            r_out=setup.r_out,
            background=a["background"],
            window=a["window"],
        )
    except ValueError as err:  # FieldRangeError, SamplingError: no number rather than a wrong one
        warnings.warn(f"oscillation analysis skipped: {err}", RuntimeWarning, stacklevel=2)
        return None


def _values(plan: StudyPlan, res, setup: StudySetup) -> dict[str, float]:
    if res is None:
        return {name: math.nan for name, _, _ in _SCALARS}
    out = {name: float(getattr(res, name)) for name, _, _ in _SCALARS}
    if plan.field_name == "flux":  # equivalent field -> flux; no geometric area
        a_ref = reference_area(setup)
        out["period_he"] *= a_ref
        out["period_he_err"] *= a_ref
        out["area"] = out["area_err"] = out["radius"] = math.nan
    return out


def _realised(ds, idx: tuple) -> dict[str, Any]:
    """Realised L_phi of one condition over the realizations (m): ``mean``, ``err`` (rms of
    the per-realization errors), ``min``, ``max``, ``n`` (measured values); ``n = 0`` if not
    measured. The coherent ring gives ``mean = inf``."""
    out: dict[str, Any] = {"mean": None, "err": None, "min": None, "max": None, "n": 0}
    if "l_phi_realised" not in ds:
        return out
    pick = {d: idx[CONDITION_DIMS.index(d)] for d in ("fermi_energy", "gate_potential", "l_phi")}
    val = ds["l_phi_realised"].isel(pick).values
    err = ds["l_phi_realised_err"].isel(pick).values
    ok = ~np.isnan(val)
    if not ok.any():
        return out
    val, err = val[ok], err[ok]
    out.update(
        mean=float(np.mean(val)),
        err=float(np.sqrt(np.mean(err**2))),
        min=float(np.min(val)),
        max=float(np.max(val)),
        n=int(val.size),
    )
    return out


def analyse_dataset(plan: StudyPlan, ds, setup: StudySetup) -> tuple[Any, dict[str, Any]]:
    """Analyse ``G_mean`` and every single trace of ``ds``.

    Returns
    -------
    analysis : xarray.Dataset
        Variables on :data:`CONDITION_DIMS` (ensemble-averaged trace) and
        ``<name>_single`` on ``("realization", *CONDITION_DIMS)``.
    summary : dict
        ``{"explanation": str, "conditions": [...]}`` for ``summary.json``.
    """
    import xarray as xr

    x = ds[plan.field_name].values
    shape_c = tuple(ds.sizes[d] for d in CONDITION_DIMS)
    n_r = ds.sizes["realization"]
    mean_vals = {name: np.full(shape_c, np.nan) for name, _, _ in _SCALARS}
    single_vals = {name: np.full((n_r, *shape_c), np.nan) for name in _SINGLE}
    conditions = []
    gm = ds["G_mean"].transpose(*CONDITION_DIMS, plan.field_name).values
    gs = ds["G"].transpose("realization", *CONDITION_DIMS, plan.field_name).values
    for idx in np.ndindex(*shape_c):
        vals = _values(plan, analyse_trace(plan, x, gm[idx], setup), setup)
        for k, v in vals.items():
            mean_vals[k][idx] = v
        for r in range(n_r):
            sv = _values(plan, analyse_trace(plan, x, gs[(r, *idx)], setup), setup)
            for k in _SINGLE:
                single_vals[k][(r, *idx)] = sv[k]
        coord = {d: float(ds[d].values[i]) for d, i in zip(CONDITION_DIMS, idx, strict=True)}
        stats = {}
        for k in _SINGLE:
            col = single_vals[k][(slice(None), *idx)]
            ok = col[np.isfinite(col)]
            key = k + ("" if k == "period_he" else "_e2h")
            if k == "period_he":
                key += "_Wb" if plan.field_name == "flux" else "_T"
            stats[key] = {
                "mean": float(ok.mean()) if ok.size else None,
                "std": float(ok.std(ddof=1)) if ok.size > 1 else None,
                "n": int(ok.size),
            }
        unit = "_Wb" if plan.field_name == "flux" else "_T"
        realised = _realised(ds, idx)
        conditions.append(
            {
                "fermi_energy_J": coord["fermi_energy"],
                "gate_potential_J": coord["gate_potential"],
                "temperature_K": coord["temperature"],
                "l_phi_m": coord["l_phi"],
                "l_phi_realised_m": realised,
                "mean_conductance_e2h": float(np.mean(gm[idx])),
                "ensemble_mean": {
                    f"period_he{unit}": vals["period_he"],
                    f"period_he_err{unit}": vals["period_he_err"],
                    "area_m2": vals["area"],
                    "area_err_m2": vals["area_err"],
                    "radius_m": vals["radius"],
                    "amplitude_he_rms_e2h": vals["amplitude_he_rms"],
                    "amplitude_he_pp_e2h": vals["amplitude_he_pp"],
                    "amplitude_h2e_rms_e2h": vals["amplitude_h2e_rms"],
                    "amplitude_h2e_pp_e2h": vals["amplitude_h2e_pp"],
                    "relative_amplitude_he": vals["relative_amplitude_he"],
                    "relative_amplitude_h2e": vals["relative_amplitude_h2e"],
                },
                "single_realizations": stats,
            }
        )
    period_unit = "Wb" if plan.field_name == "flux" else "T"
    data = {}
    for name, long_name, unit in _SCALARS:
        u = unit or period_unit
        data[name] = (
            CONDITION_DIMS,
            mean_vals[name],
            {"units": u, "long_name": f"{long_name} of the ensemble-averaged trace"},
        )
    for name in _SINGLE:
        unit = dict((n, u) for n, _, u in _SCALARS)[name] or period_unit
        data[f"{name}_single"] = (
            ("realization", *CONDITION_DIMS),
            single_vals[name],
            {"units": unit, "long_name": f"{name} of each realization"},
        )
    analysis = xr.Dataset(data, coords={d: ds[d] for d in ("realization", *CONDITION_DIMS)})
    explanation = (
        "Per condition: 'ensemble_mean' analyses the disorder-averaged trace <G>(B) (its h/e "
        "part shrinks with the number of realizations, the h/2e (AAS) part survives); "
        "'single_realizations' gives mean and standard deviation over the individual traces. "
        "Amplitudes: rms of the band content (a cosine of amplitude A gives A/sqrt(2)) and mean "
        "peak-to-peak, in e^2/h; bands from r_in and r_out; area from the h/e band centroid. "
        "'l_phi_realised_m': the L_phi the dephasing probes realise, measured on each "
        "realization (h/e damping exp(-pi r/L_phi), docs/probes.md): mean, rms of the "
        "per-realization errors, min, max and count; 'l_phi_m' is the requested value."
    )
    return analysis, {"explanation": explanation, "conditions": conditions}
