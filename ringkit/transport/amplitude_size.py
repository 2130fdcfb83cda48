"""Amplitude versus ring size from simulated ensembles (issue 13, point 5).

:func:`amplitude_vs_radius` runs :func:`ringkit.transport.amplitude_stats.amplitude_statistics`
at each radius, returns the quantile bands (16/50/84 %) of the h/e and h/2e rms amplitudes and
fits the semi-analytic law (:func:`ringkit.analysis.scaling_fit.fit_amplitude_prefactors`)
through the medians, so that it extrapolates beyond the simulated radii with prefactors that
carry uncertainties (docs/amplitude-statistics.md, "Amplitude versus radius").
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ringkit._validation import ParameterError
from ringkit.analysis.ensemble_stats import DEFAULT_QUANTILES
from ringkit.transport.amplitude_stats import amplitude_statistics

__all__ = ["amplitude_vs_radius", "family_vs_radius", "radius_checkpoint"]


def radius_checkpoint(checkpoint, radius: float) -> Path:
    """Checkpoint directory of one radius inside ``checkpoint`` (``r_<nm>nm``)."""
    return Path(checkpoint) / f"r_{radius * 1e9:.1f}nm"


def amplitude_vs_radius(
    make_device, radii, make_fields, *, fit_kwargs=None, report=None, **kwargs
) -> dict:
    """Amplitude quantile bands versus ring radius and the semi-analytic law fitted through them.

    Parameters
    ----------
    make_device : callable
        ``make_device(radius) -> RingDevice`` (same material, width, field mode).
    radii : sequence of float
        Mean radii in m.
    make_fields : callable
        ``make_fields(device) -> fields`` (T or Wb).
    fit_kwargs : dict, optional
        Model keywords for :func:`fit_amplitude_prefactors` (``l_phi``, ``temperature``,
        ``mean_free_path``, ``fermi_velocity``, ``n_modes``, ``fit_l_phi``, ``space``,
        ``model_discrepancy``, ...); the simulated median mean G per radius is passed as
        ``conductance`` unless given (``conductance=None``: the model's G).
    report : callable, optional
        ``report(fraction, text)`` before each radius (may raise to cancel, e.g. a panel job).
    **kwargs
        Of :func:`amplitude_statistics` (temperature, l_phi, rule, executor, ...);
        ``checkpoint`` is a directory holding one sub-directory per radius
        (:func:`radius_checkpoint`).

    Returns
    -------
    dict
        ``radius`` (m); for ``he`` and ``h2e``: ``{name}_q16``, ``{name}_median``,
        ``{name}_q84`` with ``*_err``; ``mean_g_median``; ``n_realizations``, ``stop_reason``
        per radius; ``fit`` (prefactors with errors, chi2, unconstrained; None if the fit
        could not run); ``statistics`` (the AmplitudeStatistics per radius).
    """
    from ringkit.analysis.scaling_fit import fit_amplitude_prefactors

    r = np.asarray(radii, dtype=float)
    q = kwargs.setdefault("quantiles", DEFAULT_QUANTILES)
    if not (np.any(np.isclose(q, 0.5)) and len(q) == 3):
        raise ParameterError("quantiles", q, "must be three probabilities including 0.5")
    ckpt = kwargs.pop("checkpoint", None)
    stats = []
    for i, radius in enumerate(r):
        if report is not None:
            report(i / r.size, f"r = {radius * 1e9:.0f} nm ({i + 1} of {r.size})")
        dev = make_device(float(radius))
        if ckpt is not None:  # one checkpoint per radius (a checkpoint holds one task)
            kwargs["checkpoint"] = radius_checkpoint(ckpt, float(radius))
        stats.append(amplitude_statistics(dev, make_fields(dev), **kwargs))
    out: dict = {"radius": r, "statistics": stats}
    for j, name in ((0, "he"), (1, "h2e")):
        for k, lab in enumerate(("q16", "median", "q84")):
            out[f"{name}_{lab}"] = np.array([s.quantiles[j, k] for s in stats])
            out[f"{name}_{lab}_err"] = np.array([s.quantile_errors[j, k] for s in stats])
    out["mean_g_median"] = np.array([s.quantiles[2, 1] for s in stats])
    out["n_realizations"] = np.array([s.n_realizations for s in stats])
    out["stop_reason"] = [s.stop_reason for s in stats]
    fk = dict(fit_kwargs or {})
    fk.setdefault("conductance", out["mean_g_median"])
    if fk["conductance"] is None:
        del fk["conductance"]
    try:
        out["fit"] = fit_amplitude_prefactors(
            r,
            amplitude_he=out["he_median"],
            amplitude_he_err=out["he_median_err"],
            amplitude_h2e=out["h2e_median"],
            amplitude_h2e_err=out["h2e_median_err"],
            **fk,
        )
    except ParameterError as err:  # reported, not hidden
        out["fit"] = None
        out["fit_error"] = str(err)
    if report is not None:
        report(1.0, "done")
    return out


def family_vs_radius(family, rule, **kwargs) -> dict:
    """:func:`amplitude_vs_radius` for a :class:`ringkit.analysis.scaling_data.SizeFamily`.

    Its devices, flux window, T, L_phi and law-fit keywords (effective L_phi fitted, model G);
    ``rule`` the :class:`StoppingRule` per radius; ``**kwargs`` of :func:`amplitude_vs_radius`
    (executor, checkpoint, report, ...).
    """
    return amplitude_vs_radius(
        family.device,
        family.radii,
        lambda dev: family.fluxes(),
        temperature=family.temperature,
        l_phi=family.l_phi,
        calibrate_l_phi=family.calibrate_l_phi,
        rule=rule,
        fit_kwargs=family.fit_kwargs(),
        **kwargs,
    )
