"""Realised L_phi of a ringkit ring, by default and cached: one calibration per device.

Every ringkit result with dephasing reports the L_phi its probes actually realise on the
device, with an uncertainty (issue 15): the probe coupling is calibrated on the ring itself
(:class:`ringkit.transport.probe_calibration.LPhiCalibrator`: h/e damping over 16 energies
around E_F, bootstrap error; docs/probes.md "Realised L_phi").

The calibration's set-up (flux-tube twin of a uniform-field ring, one sparse factorization per
calibration energy, the probe-free amplitudes) is kept per process, keyed by

* the ring fingerprint (:func:`ring_fingerprint`: device with the field mode set to flux tube,
  so a uniform-field ring and its flux-tube twin share it, and the disorder seed),
* the working energy and the non-field kwant parameters (the gate),
* the probe count and the probe-placement centre,

so a device is calibrated once per process; every requested L_phi then costs only dense
solves, and the probes of an L_phi already served are returned again (with the warnings they
raised the first time). :func:`cache_info` counts set-ups, calibrations and reuses.

Public API
----------
ring_fingerprint, ring_calibrator, realised_ring_probes, realised_l_phi_info,
cache_info, clear_calibration_cache, STATUS_MEASURED, STATUS_NOT_MEASURED, CACHE_SIZE,
LPhiNotMeasuredWarning
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import warnings
from collections import OrderedDict

import numpy as np

from ringkit._validation import ParameterError
from ringkit.conventions import L_PHI_CONVENTION, L_PHI_CONVENTION_KEY
from ringkit.transport.probes import DephasingProbes

__all__ = [
    "CACHE_SIZE",
    "LPhiNotMeasuredWarning",
    "STATUS_MEASURED",
    "STATUS_NOT_MEASURED",
    "ring_fingerprint",
    "ring_calibrator",
    "realised_ring_probes",
    "realised_l_phi_info",
    "cache_info",
    "clear_calibration_cache",
]

CACHE_SIZE = 4
"""Calibrators kept per process (least recently used dropped first)."""

STATUS_MEASURED = "measured on this device (h/e damping over 16 energies at E_F, docs/probes.md)"
STATUS_NOT_MEASURED = (
    "not measured (calibrate_l_phi=False): probe coupling from the analytic estimate, whose "
    "realised L_phi varies 0.7-2.1x between devices (docs/probes.md)"
)


class LPhiNotMeasuredWarning(UserWarning):
    """The probe coupling could not be calibrated on this device (analytic coupling used)."""


_SI_KEYS = ("l_phi_requested", "l_phi_realised", "l_phi_realised_err", "path_length", "radius")
_CALIBRATORS: OrderedDict = OrderedDict()  # key -> (calibrator, twin ring)
_PROBES: OrderedDict = OrderedDict()  # (key, l_phi, tol, max_steps) -> (probes, warnings)
_SITES: dict = {}  # (key, field mode) -> probe sites in that ring's site order
_STATS = {"setups": 0, "calibrations": 0, "reused": 0}


def cache_info() -> dict:
    """Counters of this process: calibrator ``setups``, secant ``calibrations`` (one per new
    L_phi) and ``reused`` probe sets, plus the number of calibrators kept (``size``)."""
    return {**_STATS, "size": len(_CALIBRATORS)}


def clear_calibration_cache() -> None:
    """Forget every calibrator and calibrated probe set of this process (counters reset)."""
    _CALIBRATORS.clear()
    _PROBES.clear()
    _SITES.clear()
    _STATS.update(setups=0, calibrations=0, reused=0)


def _twin_device(ring):
    """The ring's device in flux-tube mode (device notes were given when the ring was built)."""
    if ring.device.field_mode == "flux_tube":
        return ring.device
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return dataclasses.replace(ring.device, field_mode="flux_tube")


def ring_fingerprint(ring) -> str:
    """SHA-256 of what fixes the ring's Hamiltonian apart from the field: the device (field mode
    set to flux tube, so a uniform-field ring shares its flux-tube twin's entry) and the seed."""
    text = json.dumps([_twin_device(ring).to_dict(), int(ring.seed)], sort_keys=True, default=repr)
    return hashlib.sha256(text.encode()).hexdigest()


def _non_field(params: dict | None) -> dict:
    return {k: float(v) for k, v in sorted((params or {}).items()) if k not in ("B", "flux")}


def ring_calibrator(
    ring,
    energy_t: float,
    params: dict | None = None,
    n_probes: int = 100,
    *,
    center: tuple[float, float] | None = None,
    model=None,
    **calibrator_options,
):
    """The cached :class:`LPhiCalibrator` of ``ring`` at ``energy_t`` (units of t).

    Parameters
    ----------
    ring : ringkit.tightbinding.TightBindingRing
        Either field mode; a uniform-field ring is calibrated on its flux-tube twin (same
        device and seed: the same sites, disorder and hoppings apart from the Peierls phases).
    energy_t : float
        Working energy in units of the hopping t.
    params : dict, optional
        kwant parameters of the ring; the field entry is ignored, the others (gate, in units
        of t) enter the calibration and its cache key.
    n_probes : int
        Number of probes.
    center : (float, float), optional
        Probe-placement centre in lattice units (rings with more than two leads).
    model : ringkit.transport.lowrank.FluxTubeModel, optional
        The probe-free flux-tube model of a flux-tube ``ring`` at ``params`` if the caller
        already has it (saves one Hamiltonian evaluation); ignored for uniform-field rings.
    **calibrator_options
        ``n_energies``, ``n_flux``, ``energies``, ``seed`` of :class:`LPhiCalibrator`.

    Returns
    -------
    (LPhiCalibrator, str)
        The calibrator and its cache key.
    """
    from ringkit.tightbinding import build_ring
    from ringkit.transport.lowrank import FluxTubeModel
    from ringkit.transport.probe_calibration import LPhiCalibrator

    extra = _non_field(params)
    key = json.dumps(
        [
            ring_fingerprint(ring),
            repr(float(energy_t)),
            extra,
            int(n_probes),
            None if center is None else [float(c) for c in center],
            {k: repr(v) for k, v in sorted(calibrator_options.items())},
        ]
    )
    if key in _CALIBRATORS:
        _CALIBRATORS.move_to_end(key)
        return _CALIBRATORS[key][0], key
    twin = ring
    if ring.field_mode != "flux_tube":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # device notes were given when `ring` was built
            twin = build_ring(_twin_device(ring), seed=ring.seed)
    if model is None or twin is not ring:
        model = FluxTubeModel(twin.fsyst, params={**twin.params(), **extra})
    a = ring.lattice_spacing
    cal = LPhiCalibrator(
        model,
        float(energy_t),
        n_probes=int(n_probes),
        radius=ring.device.geometry.mean_radius / a,
        center=center,
        **calibrator_options,
    )
    _STATS["setups"] += 1
    _CALIBRATORS[key] = (cal, twin)
    while len(_CALIBRATORS) > CACHE_SIZE:
        old, _ = _CALIBRATORS.popitem(last=False)
        for k in [k for k in _PROBES if k[0] == old]:
            del _PROBES[k]
        for k in [k for k in _SITES if k[0] == old]:
            del _SITES[k]
    return cal, key


def _sites_in(ring, key: str) -> np.ndarray:
    """The calibrator's probe sites in ``ring``'s site order (mapped by lattice tags)."""
    cal, twin = _CALIBRATORS[key]
    if ring.field_mode == "flux_tube":  # same device and seed as the twin: same site order
        return cal.sites
    skey = (key, ring.field_mode)
    if skey not in _SITES:
        index = {tuple(t): i for i, t in enumerate(np.asarray(ring.tags).tolist())}
        try:
            _SITES[skey] = np.array([index[tuple(twin.tags[s].tolist())] for s in cal.sites])
        except KeyError:
            raise ParameterError(
                "ring", "uniform-field ring", "its flux-tube twin has other sites"
            ) from None
    return _SITES[skey]


def realised_ring_probes(
    ring,
    l_phi: float,
    energy_t: float,
    params: dict | None = None,
    n_probes: int = 100,
    *,
    center: tuple[float, float] | None = None,
    tol: float = 0.03,
    max_steps: int = 4,
    model=None,
    **calibrator_options,
) -> DephasingProbes:
    """Probes of ``ring`` that realise ``l_phi`` (m) on this device, from the per-process cache.

    Parameters as in :func:`ring_calibrator` (``model``: the probe-free flux-tube model, if
    already built); ``l_phi`` in m (``inf``: zero coupling),
    ``tol`` and ``max_steps`` as in :meth:`LPhiCalibrator.probes`. Out-of-range requests warn
    (:class:`~ringkit.transport.probe_calibration.CalibrationRangeWarning`, naming the range)
    every time they are served, also from the cache.

    Returns
    -------
    DephasingProbes
        Sites of ``ring.fsyst``; ``info`` lengths in m (``l_phi_realised``,
        ``l_phi_realised_err``, ``path_length``, ``radius``, ``l_phi_requested``), plus
        ``calibrated_on`` and ``l_phi_status``.
    """
    cal, key = ring_calibrator(
        ring, energy_t, params, n_probes, center=center, model=model, **calibrator_options
    )
    a = ring.lattice_spacing
    pkey = (key, repr(float(l_phi)), float(tol), int(max_steps))
    if pkey in _PROBES:
        _STATS["reused"] += 1
        _PROBES.move_to_end(pkey)
        base, caught = _PROBES[pkey]
    else:
        l_lat = float(l_phi) / a
        with warnings.catch_warnings(record=True) as rec:
            warnings.simplefilter("always")
            pr = cal.probes(l_lat, tol=tol, max_steps=max_steps)
        caught = [(w.message, w.category) for w in rec]
        info = dict(pr.info)
        for k in _SI_KEYS:
            if info.get(k) is not None:
                info[k] = float(info[k]) * a  # lattice spacings -> m
        info["lattice_spacing"] = a
        info["calibrated_on"] = "flux-tube twin" if ring.field_mode != "flux_tube" else "this ring"
        info["l_phi_status"] = STATUS_MEASURED
        base = DephasingProbes(cal.sites, pr.eta, float(l_phi), info)
        _STATS["calibrations"] += 1
        _PROBES[pkey] = (base, caught)
        while len(_PROBES) > 64:
            _PROBES.popitem(last=False)
    for message, category in caught:
        warnings.warn(message, category, stacklevel=2)
    return DephasingProbes(_sites_in(ring, key), base.eta, base.l_phi, dict(base.info))


def realised_l_phi_info(probes: DephasingProbes | None) -> dict:
    """Result attrs of the L_phi that ``probes`` realise: ``l_phi_realised_m``,
    ``l_phi_realised_err_m`` (m; NaN when not measured, inf/0 without dephasing),
    ``l_phi_status`` and the path-length convention."""
    if probes is None:
        real, err, status = math.inf, 0.0, "no dephasing"
    elif probes.info.get("l_phi_realised") is None:
        real, err = math.nan, math.nan
        status = str(probes.info.get("l_phi_status", STATUS_NOT_MEASURED))
        if "not measured" not in status:
            status = "not measured: " + status
    else:
        real, err = float(probes.info["l_phi_realised"]), float(probes.info["l_phi_realised_err"])
        status = str(probes.info.get("l_phi_status", STATUS_MEASURED))
    return {
        "l_phi_realised_m": real,
        "l_phi_realised_err_m": err,
        "l_phi_status": status,
        L_PHI_CONVENTION_KEY: L_PHI_CONVENTION,
    }
