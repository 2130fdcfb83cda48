"""Fast conductance sweeps of a built ring: the default path behind :func:`field_sweep`.

API
---
fast_field_conductance(ring, fields, *, energy, gate=None, temperature=0.0, l_phi=None,
                       n_probes=100, thermal_tol=1e-4, thermal_method="adaptive",
                       calibrate_l_phi=True) -> FastSweepResult
    Two-terminal G [e^2/h] (spin-degenerate) over a field sweep (``fields``: the values of
    the ring's field parameter, T or Wb; :func:`ringkit.transport.field_sweep` has the
    explicit ``fields=``/``fluxes=`` keywords).
ring_probes(ring, l_phi, energy_t, params, n_probes, *, center=None, calibrate=True)
    The dephasing probes every ringkit sweep uses (calibrated on the device by default).

Which solver
------------
* uniform field: :class:`ringkit.transport.fastsweep.FieldSweeper` (Hamiltonian values updated
  with numpy per field, MUMPS symbolic analysis reused, lead data cached per energy);
* flux tube: :class:`ringkit.transport.lowrank.FluxTubeSweeper` (one factorization per energy,
  then an exact low-rank update per flux value).

Both agree with plain ``kwant.smatrix`` on the same system to 1e-10 (tests/test_sweep.py).
Finite temperature uses the one thermal policy (:mod:`ringkit.thermal_policy` through
:func:`ringkit.transport.thermal.thermal_conductance`): energies are added until the estimated
error of G at every field point, and of the h/e and h/2e band projections of G over the field
axis (uniformly spaced sweeps), is below ``thermal_tol`` (e^2/h). The number of energies, the
error estimate, the tolerance and the method are returned in ``info`` (dataset attrs).
Dephasing adds floating Büttiker probes along both arms whose coupling is calibrated on the
device so that they realise the requested ``l_phi`` (:func:`ring_probes`,
:mod:`ringkit.transport.realised_l_phi`); ``info`` reports the realised L_phi with its error
(``calibrate_l_phi=False``: analytic coupling, status "not measured").
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ringkit._validation import ParameterError, check_choice, check_positive
from ringkit.thermal_policy import DEFAULT_TOL, thermal_window
from ringkit.transport.fastsweep import FieldSweeper
from ringkit.transport.lowrank import FluxTubeSweeper
from ringkit.transport.probes import attach_probes
from ringkit.transport.realised_l_phi import STATUS_NOT_MEASURED, realised_l_phi_info
from ringkit.transport.spectral import (
    spectral_eligible,
    spectral_preferred,
    spectral_thermal_transmission,
)
from ringkit.transport.thermal import thermal_conductance
from ringkit.units import HBAR, K_B, PHI0

__all__ = [
    "FastSweepResult",
    "check_l_phi",
    "fast_field_conductance",
    "realised_l_phi_info",
    "ring_probes",
    "ring_correlation_energy",
    "transmission_bound",
]


@dataclass(frozen=True)
class FastSweepResult:
    """Conductance of a sweep and how it was computed.

    Attributes
    ----------
    conductance : ndarray
        Two-terminal G in e^2/h (spin-degenerate, probes floating).
    info : dict
        ``solver``, ``n_energies`` (energies of the thermal average), ``thermal_error_estimate``
        (largest estimated error of G, e^2/h), ``thermal_error_he`` / ``thermal_error_h2e``
        (estimated error of the rms h/e and h/2e band contents; -1 if not computed),
        ``thermal_tol``, ``thermal_method``, ``n_probes``, ``probe_eta``, ``temperature_K``,
        ``l_phi_m`` and ``n_fallbacks`` (points recomputed by a direct solve).
    """

    conductance: np.ndarray
    info: dict = field(default_factory=dict)


def ring_correlation_energy(ring) -> float:
    """Ballistic correlation energy ``hbar v_F / (2 pi r_mean)`` of the ring, in units of t."""
    geo = ring.device.geometry
    v_f = ring.device.material.fermi_velocity
    return HBAR * v_f / (2 * math.pi * geo.mean_radius) / ring.hopping


def check_l_phi(l_phi, lattice_spacing: float) -> float | None:
    """Validate a phase-coherence length in m: None or +inf mean fully coherent (None returned).

    NaN, -inf, zero, negative values and lengths shorter than the lattice spacing (no probe
    lattice can realise them) raise :class:`ParameterError` naming ``l_phi``.
    """
    if l_phi is None:
        return None
    try:
        v = float(l_phi)
    except (TypeError, ValueError):
        raise ParameterError("l_phi", l_phi, "must be a length in m, or None/inf") from None
    if v == math.inf:
        return None
    if not math.isfinite(v) or v < lattice_spacing:
        raise ParameterError(
            "l_phi",
            l_phi,
            f"must be >= the lattice spacing {lattice_spacing:.3g} m and finite "
            "(None or inf: fully coherent)",
            "m",
        )
    return v


def ring_probes(
    ring,
    l_phi,
    energy_t: float,
    params: dict,
    n_probes: int,
    *,
    center=None,
    calibrate: bool = True,
):
    """Dephasing probes of ``ring`` for ``l_phi`` (m) at ``energy_t`` (units of t), or None.

    ``l_phi`` is validated by :func:`check_l_phi` (None or inf: no probes). With ``calibrate``
    (default) the coupling is calibrated on the device so that the probes realise ``l_phi``,
    and ``info`` carries the realised value and its error
    (:func:`ringkit.transport.realised_l_phi.realised_ring_probes`, cached per process);
    ``calibrate=False`` gives the analytic estimate
    (:func:`ringkit.transport.probes.attach_probes`), whose realised L_phi is not measured.
    If the calibration is impossible on the device (ParameterError, e.g. no h/e amplitude to
    damp), the analytic coupling is used with a :class:`LPhiNotMeasuredWarning` and the status
    says why.
    ``center`` (lattice units) as in :func:`ringkit.transport.probes.ring_probe_sites`.
    """
    l_phi = check_l_phi(l_phi, ring.lattice_spacing)
    if l_phi is None:
        return None
    status = STATUS_NOT_MEASURED
    if calibrate:
        from ringkit.transport.realised_l_phi import LPhiNotMeasuredWarning, realised_ring_probes

        try:
            return realised_ring_probes(ring, l_phi, energy_t, params, int(n_probes), center=center)
        except ParameterError as err:  # e.g. no h/e amplitude to damp on this device
            status = f"not measured: the calibration failed ({err}); analytic probe coupling"
            warnings.warn(f"L_phi = {l_phi:.4g} m: {status}", LPhiNotMeasuredWarning, stacklevel=3)
    probes = attach_probes(
        ring.fsyst,
        l_phi=l_phi,
        energy=energy_t,
        n_probes=int(n_probes),
        lattice_spacing=ring.lattice_spacing,
        params=params,
        zero_field={ring.field_param: 0.0},
        center=center,
    )
    probes.info["l_phi_status"] = status
    return probes


def fast_field_conductance(
    ring,
    fields,
    *,
    energy: float,
    gate: float | None = None,
    temperature: float = 0.0,
    l_phi: float | None = None,
    n_probes: int = 100,
    thermal_tol: float = DEFAULT_TOL,
    thermal_method: str = "adaptive",
    calibrate_l_phi: bool = True,
    thermal_engine: str = "auto",
) -> FastSweepResult:
    """Two-terminal conductance over a field sweep with the fast solvers.

    Parameters
    ----------
    ring : TightBindingRing
        From :func:`ringkit.tightbinding.build_ring`.
    fields : array_like
        B in T (uniform mode) or flux through the hole in Wb (flux-tube mode).
    energy : float
        Fermi energy in J above the band bottom.
    gate : float, optional
        Arm-gate potential in J (default: the device's gate).
    temperature : float
        Temperature in K (0: a single energy).
    l_phi : float, optional
        Phase-coherence length in m (None or inf: fully coherent, no probes).
    n_probes : int
        Number of dephasing probes spread along both arms when ``l_phi`` is finite.
    thermal_tol : float
        Absolute error goal of the thermal average in e^2/h (default 1e-4), in [1e-10, 0.1].
    thermal_method : {"adaptive", "grid"}
        Rule of :func:`ringkit.thermal_policy.energy_average` ("grid": dense reference).
    calibrate_l_phi : bool
        Default True: the probe coupling is calibrated on this device so that the probes
        realise ``l_phi`` (:func:`ringkit.transport.realised_l_phi.realised_ring_probes`; set-up
        cached per process and device, docs/probes.md "Realised L_phi"), and ``info`` holds
        ``l_phi_realised_m`` and ``l_phi_realised_err_m`` (m). False (faster): the analytic
        coupling; both are NaN and ``l_phi_status`` says "not measured".
    thermal_engine : {"auto", "spectral", "direct"}
        How the energies of a finite-temperature sweep are computed. ``"spectral"``: one
        factorization per distinct field point (uniform field) or a single one for every flux
        (flux tube) serves every energy of the window (:mod:`ringkit.transport.spectral`,
        with or without probes); ``"direct"``: one factorization per (energy, field) point in
        uniform field, or the low-rank flux-tube update per energy. ``"auto"`` (default) takes
        the spectral engine at T > 0 without probes, and with at most
        :data:`ringkit.transport.spectral.AUTO_MAX_PROBES` probes in a uniform field.

    Returns
    -------
    FastSweepResult
    """
    temperature = check_positive("temperature", temperature, "K", allow_zero=True)
    values = np.asarray(fields, dtype=float)
    e_t = ring.to_lattice_energy(energy)
    name = ring.field_param
    params = ring.params(gate=gate)
    l_phi = check_l_phi(l_phi, ring.lattice_spacing)
    probes = ring_probes(ring, l_phi, e_t, params, n_probes, calibrate=calibrate_l_phi)

    def make_sweeper():
        if name == "flux":
            sw = FluxTubeSweeper(ring.fsyst, energy=e_t, params=params, probes=probes)
            return sw, "low-rank flux-tube update (ringkit.transport.lowrank)"
        sw = FieldSweeper(ring.fsyst, field_param=name, params=params, energy=e_t, probes=probes)
        return sw, "fixed-pattern MUMPS sweep (ringkit.transport.fastsweep)"

    thermal = {"thermal_error_estimate": 0.0, "thermal_error_he": 0.0, "thermal_error_h2e": 0.0}
    check_choice("thermal_engine", thermal_engine, ("auto", "spectral", "direct"))
    use_spectral = False
    if temperature > 0 and thermal_engine != "direct":
        why = spectral_eligible(ring.fsyst, name, params, probes)
        if why is not None and thermal_engine == "spectral":
            raise ParameterError("thermal_engine", "spectral", f"not available here: {why}")
        # "auto": see spectral_preferred (the block of lead modes + probes (+ cut) sets the
        # cost; many probes or a flux tube with probes stay on the per-energy paths)
        prefer = thermal_engine == "spectral" or spectral_preferred(name == "flux", probes)
        use_spectral = why is None and prefer
    if temperature > 0:
        bands = _band_projector(ring, values)
        bound = transmission_bound(ring, e_t, temperature, thermal_tol, params)
        # per spin: G = 2 T, so the tolerance of T is half the tolerance of G
        if use_spectral:
            res, spec = spectral_thermal_transmission(
                ring.fsyst,
                values,
                field_param=name,
                params=params,
                mu=e_t,
                kt=K_B * temperature / ring.hopping,
                tol=0.5 * thermal_tol,
                method=thermal_method,
                bound=bound,
                functionals=bands,
                probes=probes,
            )
            solver = (
                "spectral engine: one factorization per distinct field point"
                if spec.mode == "per-field"
                else "spectral engine: one factorization for every flux (cut block)"
            ) + " (transport.spectral)"
            thermal["n_factorizations"] = spec.n_models
            thermal["spectral_model_error"] = 2.0 * spec.model_error
            thermal["lanczos_steps_median"] = float(np.median(spec.steps))
        else:
            sweeper, solver = make_sweeper()
            res = thermal_conductance(
                sweeper,
                values,
                temperature,
                energy_unit=ring.hopping,
                tol=0.5 * thermal_tol,
                method=thermal_method,
                bound=bound,
                functionals=bands,
            )
        g_spin, n_e = np.asarray(res.value), res.n_energies
        if not use_spectral:
            thermal["n_factorizations"] = int(n_e * (values.size if name != "flux" else 1))
        thermal["thermal_error_estimate"] = 2.0 * float(np.max(res.errors))
        if res.extra_errors is not None:
            he, h2e = np.split(2.0 * res.extra_errors, 2)
            thermal["thermal_error_he"] = float(np.sqrt(np.mean(he**2)))
            thermal["thermal_error_h2e"] = float(np.sqrt(np.mean(h2e**2)))
        else:
            thermal["thermal_error_he"] = thermal["thermal_error_h2e"] = -1.0
    else:
        sweeper, solver = make_sweeper()
        g_spin, n_e = np.asarray(sweeper.conductance(values)), 1
        thermal["n_factorizations"] = 1 if name == "flux" else int(values.size)
    sweeper = None if use_spectral else sweeper
    fallbacks = int(getattr(sweeper, "n_fallbacks", getattr(sweeper, "n_fallback", 0)))
    info = {
        "solver": solver,
        "n_energies": int(n_e),
        **thermal,
        "thermal_tol": float(thermal_tol),
        "thermal_method": thermal_method if temperature > 0 else "single energy (T = 0)",
        "temperature_K": temperature,
        "l_phi_m": float("inf") if probes is None else float(l_phi),
        "n_probes": 0 if probes is None else len(np.atleast_1d(probes.sites)),
        "probe_eta": 0.0 if probes is None else float(np.mean(probes.eta)),
        "n_fallbacks": fallbacks,
        **realised_l_phi_info(probes),
    }
    return FastSweepResult(2.0 * g_spin, info)


def transmission_bound(ring, e_t: float, temperature: float, tol: float, params) -> float:
    """Upper bound of the per-spin transmission over the thermal window: the largest number of
    propagating lead modes at the window's centre and edges (at least 1)."""
    kt = K_B * temperature / ring.hopping
    half = thermal_window(kt, 0.5 * tol, 64.0)
    best = 1
    for lead in ring.fsyst.leads:
        for e in (e_t - half, e_t, e_t + half):
            try:
                prop, _ = lead.modes(energy=e, params=params)
            except Exception:  # outside the lead band: no open mode
                continue
            best = max(best, len(prop.velocities) // 2)
    return float(best)


def _band_projector(ring, values: np.ndarray):
    """Linear map G(field) -> (h/e band part, h/2e band part) of G over a uniformly spaced
    field sweep (FFT mask), or None when the sweep is not uniform or too short.

    Bands: flux-tube mode ``|f - m/Phi0| < 1/(2 Phi0)``; uniform field
    ``m A_inner/Phi0 <= f <= m A_outer/Phi0`` (m = 1: h/e, m = 2: h/2e).
    """
    v = np.asarray(values, dtype=float)
    if v.size < 8 or not np.allclose(np.diff(v), v[1] - v[0], rtol=1e-9, atol=0.0):
        return None
    step = v[1] - v[0]
    if step == 0:
        return None
    freq = np.abs(np.fft.rfftfreq(v.size, d=step))
    masks = []
    for m in (1, 2):
        if ring.field_param == "flux":
            masks.append(np.abs(freq - m / PHI0) < 0.5 / PHI0)
        else:
            geo = ring.device.geometry
            masks.append((freq >= m * geo.area_inner / PHI0) & (freq <= m * geo.area_outer / PHI0))

    def project(rows: np.ndarray) -> np.ndarray:
        rows = np.asarray(rows, dtype=float).reshape(rows.shape[0], -1)
        spec = np.fft.rfft(rows - rows.mean(axis=1, keepdims=True), axis=1)
        parts = [np.fft.irfft(spec * mk, n=v.size, axis=1) for mk in masks]
        return np.concatenate(parts, axis=1)

    return project
