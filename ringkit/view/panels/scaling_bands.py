"""Size-scaling panel, compute part for the simulated bands (no widgets here).

The panel shows quantile bands (16/50/84 %) of the h/e and h/2e rms amplitudes of simulated
disorder ensembles versus radius (issue 13, point 5), and the semi-analytic law fitted through
the medians (prefactors with errors, effective L_phi) extended beyond the simulated radii.

Public API
----------
size_dataset(path=None) -> dict
    The shipped dataset (``ringkit/data/amplitude_size_gaas.json``) or another file.
dataset_mismatch(params, data) -> list of str
    How the panel settings differ from the rings of ``data`` (empty: the bands apply).
law_prefactors(params, data) -> dict
    Prefactors, L_phi and fit quality the law is drawn with (fitted, or typed override).
law_curves(params, data) -> xarray.Dataset
    The law on the panel's radius grid, with ``inside_simulated`` (bool per radius).
family_for(params, radii) -> SizeFamily
params_for_dataset(data, base) -> ScalingParams
    Panel settings of the rings of ``data`` (the panel opens on the shipped dataset).
recompute_bands(params, radii, n_realizations, ...) -> dict
    New bands for the panel's own material/width/T/L_phi (``amplitude_vs_radius``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis.scaling_data import SizeFamily, load_size_dataset, size_dataset_from_result

__all__ = [
    "size_dataset",
    "dataset_mismatch",
    "law_prefactors",
    "law_curves",
    "family_for",
    "params_for_dataset",
    "recompute_bands",
    "THERMAL_MATCH",
]

THERMAL_MATCH = 0.98
"""Bands computed at T = 0 apply at the panel's T if the law's thermal factor of the h/e term
is >= this at every simulated radius (T effects below 2 %, under the bands' errors)."""

_REL = 0.02  # relative tolerance for material parameters and width


def size_dataset(path=None) -> dict:
    """The size dataset (default: the shipped one), see
    :func:`ringkit.analysis.scaling_data.load_size_dataset`."""
    return load_size_dataset(path)


def _law_l_phi(data: dict) -> tuple[float, float | None]:
    """L_phi of the law fitted to ``data`` (effective, if fitted) and its error."""
    fit = data.get("fit") or {}
    if fit.get("l_phi_fitted") and fit.get("l_phi") is not None:
        return float(fit["l_phi"]), fit.get("l_phi_err")
    return float(data["family"].l_phi), None


def dataset_mismatch(params, data: dict) -> list[str]:
    """Differences between the panel settings and the simulated rings of ``data``.

    Compared: material, mean free path, arm width (2 %), samples averaged (bands are single
    rings), L_phi (the law's L_phi of the dataset: within 2 sigma or 5 %) and temperature (same
    within 5 %, or for T = 0 bands the law's thermal factor >= :data:`THERMAL_MATCH`).
    """
    fam: SizeFamily = data["family"]
    out = []
    if params.material != fam.material:
        out.append(f"material {params.material} (bands: {fam.material})")
    mfp = params.material_obj().elastic_mean_free_path
    ref = data["device"]["mean_free_path_m"]
    if abs(mfp - ref) > _REL * ref:
        out.append(f"mean free path {mfp * 1e6:.3g} um (bands: {ref * 1e6:.3g} um)")
    if abs(params.width - fam.width) > _REL * fam.width:
        out.append(f"arm width {params.width * 1e9:.0f} nm (bands: {fam.width * 1e9:.0f} nm)")
    if params.n_averaged != 1:
        out.append(f"{params.n_averaged} samples averaged (bands: single rings)")
    l_law, l_err = _law_l_phi(data)
    tol = max(0.05 * l_law, 2 * (l_err or 0.0))
    if not math.isfinite(params.l_phi) or abs(params.l_phi - l_law) > tol:
        how = "realised by the probes, law fit" if l_err is not None else "probe setting"
        out.append(f"L_phi {params.l_phi * 1e6:.3g} um (bands: {l_law * 1e6:.3g} um, {how})")
    if fam.temperature == 0:
        factor = _thermal_min(fam, params.temperature, l_law)
        if factor < THERMAL_MATCH:
            out.append(
                f"temperature {params.temperature:.3g} K (bands: T = 0; the law's thermal "
                f"factor falls to {factor:.2f})"
            )
    elif abs(params.temperature - fam.temperature) > 0.05 * fam.temperature:
        out.append(f"temperature {params.temperature:.3g} K (bands: {fam.temperature:.3g} K)")
    return out


def _thermal_min(fam: SizeFamily, temperature: float, l_phi: float) -> float:
    """Smallest thermal factor of the law's h/e term over the radii of ``fam`` at T."""
    from ringkit.analysis.scaling import model_arrays

    kw = {**fam.model_kwargs(), "temperature": temperature, "l_phi": l_phi}
    return float(np.min(model_arrays(np.asarray(fam.radii), **kw)["thermal_factor_he"]))


def law_prefactors(params, data: dict | None) -> dict:
    """What the law is drawn with: ``coherent_amplitude``, ``aas_amplitude`` (e^2/h) with
    ``*_err``, ``source`` ("fit" or "override"), and the fit's chi2, dof, p-value, model
    discrepancy and effective L_phi (m) when fitted. An unconstrained prefactor is None."""
    if params.override_prefactors or data is None or not data.get("fit"):
        return {
            "source": "override" if params.override_prefactors else "typed (no fit)",
            "coherent_amplitude": params.coherent_amplitude,
            "coherent_amplitude_err": None,
            "aas_amplitude": params.aas_amplitude,
            "aas_amplitude_err": None,
        }
    fit = dict(data["fit"])
    fit["source"] = "fit"
    return fit


def law_curves(params, data: dict | None):
    """The law for the panel's settings with the prefactors of :func:`law_prefactors`.

    The panel's L_phi and temperature are used (the law's prediction there); radii inside the
    simulated range are flagged in ``inside_simulated``. An unconstrained AAS prefactor is
    drawn as 0 (h/2e = second h/e harmonic only) and flagged in ``attrs``.
    """
    from ringkit.view.panels.scaling import scaling_curves

    pre = law_prefactors(params, data)
    if pre["coherent_amplitude"] is None:
        raise ParameterError("coherent_amplitude", None, "is unconstrained by the simulated bands")
    drawn = params.updated(
        coherent_amplitude=pre["coherent_amplitude"], aas_amplitude=pre["aas_amplitude"] or 0.0
    )
    ds = scaling_curves(drawn, n_modes=family_for(params, (1e-6,)).n_modes())
    r = ds["radius"].values
    if data is not None:
        rs = np.asarray(data["radius_m"])
        inside = (r >= rs.min() * (1 - 1e-9)) & (r <= rs.max() * (1 + 1e-9))
    else:
        inside = np.zeros(r.shape, dtype=bool)
    ds["inside_simulated"] = ("radius", inside)
    ds.attrs["prefactor_source"] = pre["source"]
    ds.attrs["aas_unconstrained"] = int(pre["aas_amplitude"] is None)
    return ds


def family_for(params, radii: Sequence[float], calibrate_l_phi: bool = True) -> SizeFamily:
    """The ring family of the panel's settings at ``radii`` (m)."""
    return SizeFamily(
        calibrate_l_phi=bool(calibrate_l_phi),
        material=params.material,
        mean_free_path=params.mean_free_path,
        width=params.width,
        radii=tuple(float(r) for r in radii),
        temperature=params.temperature,
        l_phi=params.l_phi,
    )


def params_for_dataset(data: dict, base):
    """``base`` (ScalingParams) with material, mean free path, arm width, L_phi (the law's, i.e.
    the fitted effective L_phi if any) and temperature of ``data``'s rings (T = 0 bands: 1 mK,
    the lowest temperature of the panel, where the law's thermal factor is >= 0.98)."""
    fam: SizeFamily = data["family"]
    return base.updated(
        material=fam.material,
        mean_free_path=fam.mean_free_path,
        width=fam.width,
        temperature=max(fam.temperature, 1e-3),
        l_phi=_law_l_phi(data)[0],
        n_averaged=1,
    )


def recompute_bands(
    params,
    radii: Sequence[float],
    n_realizations: int,
    *,
    executor: Any = None,
    checkpoint=None,
    report: Callable[[float, str], None] | None = None,
    calibrate_l_phi: bool = True,
) -> dict:
    """Bands and fitted law for the panel's own rings (material, width, T, L_phi).

    Runs :func:`ringkit.transport.amplitude_size.amplitude_vs_radius` with a fixed ensemble of
    ``n_realizations`` per radius (seeds 0..n-1) on ``executor`` (default: a process pool),
    and returns the dict of :func:`size_dataset_from_result` (as loaded by
    :func:`size_dataset`). ``report(fraction, text)`` is called before each radius.
    ``calibrate_l_phi``: probes calibrated on each ring so that they realise the panel's L_phi
    (ringkit's default; about twice the cost) or the analytic coupling.
    """
    import warnings

    from ringkit.analysis.ensemble_stats import StoppingRule
    from ringkit.transport.amplitude_size import family_vs_radius

    if not math.isfinite(params.l_phi):
        raise ParameterError("l_phi", params.l_phi, "must be finite for simulated bands", "m")
    n = int(n_realizations)
    if n != n_realizations or n < 5:  # StoppingRule's smallest ensemble
        raise ParameterError("n_realizations", n_realizations, "must be an integer >= 5")
    fam = family_for(params, radii, calibrate_l_phi)
    if fam.temperature > 0 and _thermal_min(fam, params.temperature, fam.l_phi) >= THERMAL_MATCH:
        # T effects below 2 % at every radius: computed at T = 0 (one energy instead of ~180)
        fam = family_for(params.updated(temperature=0.0), radii, calibrate_l_phi)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")  # fixed-size ensembles warn; recorded as notes
        out = family_vs_radius(
            fam, StoppingRule.fixed(n), executor=executor, checkpoint=checkpoint, report=report
        )
    data = size_dataset_from_result(out, fam)
    data["notes"] = sorted({f"{w.category.__name__}: {w.message}"[:200] for w in caught})
    data["family"] = fam
    for k, v in list(data.items()):
        if isinstance(v, list) and v and isinstance(v[0], float):
            data[k] = np.asarray(v)
    return data
