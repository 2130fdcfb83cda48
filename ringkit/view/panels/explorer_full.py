"""Full tight-binding computation of the device explorer (runs in a background job).

explorer_full(params, *, report=None) -> FullResult
    Builds the lattice ring of :meth:`ExplorerParams.device` (ringkit.tightbinding), then
    sweeps the field with the transport engine: the exact low-rank flux-tube sweeper
    (:class:`ringkit.transport.lowrank.FluxTubeSweeper`) in flux-tube mode, or the
    fixed-pattern MUMPS sweeper (:class:`ringkit.transport.fastsweep.FieldSweeper`) for a
    uniform field. At T > 0 the transmission is averaged with ``-df/dE`` by the thermal policy
    (one factorization per energy; a coherent uniform-field sweep uses the spectral engine,
    :mod:`ringkit.transport.spectral`, one factorization per field point).
    ``report(fraction, text)`` is called between chunks of work; it raises to cancel.

In flux-tube mode the x axis is the equivalent field ``B = flux / A_mean`` (A_mean = area
enclosed by the centre line), so that the h/e period is ``(h/e)/A_mean`` in both modes.
Conductance is ``2 T`` in e^2/h (spin degenerate; Zeeman splitting is not included here).
"""

from __future__ import annotations

import math
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from ringkit.analysis.spectrum import OscillationSpectrum, ab_bands, oscillation_spectrum
from ringkit.units import EV, K_B, PHI0
from ringkit.view.panels.explorer import N_PROBES, ExplorerParams, _band_rms, preview_field_grid

__all__ = ["FullResult", "explorer_full", "build_device", "thermal_grid"]

_CHUNK = 64


@dataclass(frozen=True)
class FullResult:
    """Result of the full tight-binding computation.

    Attributes
    ----------
    field : ndarray
        Field in T (equivalent field ``flux/A_mean`` in flux-tube mode).
    conductance : ndarray
        Two-terminal conductance in e^2/h.
    spectrum : OscillationSpectrum
    period : float
        h/e period ``(h/e)/A_mean`` in T.
    mean_conductance, amplitude_he, amplitude_h2e : float
        Mean G and rms of the h/e and h/2e band contents, in e^2/h.
    positions : ndarray, shape (N, 2)
        Site positions in m.
    onsite_meV : ndarray
        On-site disorder energy per site in meV.
    lead_sites : list of ndarray
        Positions (m) of the lead-contact sites.
    probe_sites : ndarray or None
        Positions (m) of dephasing probes (None if none are attached).
    energies : ndarray
        Energies (J) used for the thermal average.
    n_sites : int
    lattice_spacing : float
        m.
    field_mode : str
    elapsed : float
        Wall time in s.
    notes : tuple of str
        How the thermal average and dephasing were done.
    """

    field: np.ndarray
    conductance: np.ndarray
    spectrum: OscillationSpectrum
    period: float
    mean_conductance: float
    amplitude_he: float
    amplitude_h2e: float
    positions: np.ndarray
    onsite_meV: np.ndarray
    lead_sites: list
    probe_sites: np.ndarray | None
    energies: np.ndarray
    n_sites: int
    lattice_spacing: float
    field_mode: str
    elapsed: float
    notes: tuple[str, ...] = ()


def build_device(params: ExplorerParams):
    """The :class:`ringkit.device.RingDevice` described by the explorer settings."""
    from ringkit.device import ArmGate, RingDevice

    gate = None
    if params.gate_potential != 0.0:
        gate = ArmGate(arm=params.gate_arm, potential=params.gate_potential)
    return RingDevice(
        params.material_obj(),
        params.geometry(),
        gate=gate,
        field_mode=params.field_mode,
        lattice_spacing=params.lattice_spacing,
    )


def thermal_grid(ring, temperature: float, max_energies: int) -> tuple[np.ndarray, np.ndarray, str]:
    """Energies (J), -df/dE weights and a note for a thermal average with a fixed budget.

    For quick views only: a single energy when ``k_B T`` is below a tenth of the ballistic
    correlation energy ``hbar v_F/L`` (L = half circumference), otherwise the fixed-budget
    grid of the thermal policy (:func:`ringkit.thermal_policy.budget_grid`, at most
    ``max_energies`` energies on the policy's window); no error control (the note says so).
    :func:`explorer_full` uses the converged, error-controlled policy instead.
    """
    from ringkit.thermal_policy import budget_grid
    from ringkit.transport.thermal import thouless_energy

    fermi = ring.fermi_energy
    if temperature == 0.0:
        return np.array([fermi]), np.array([1.0]), "T = 0: single energy"
    mat = ring.device.material
    e_c = thouless_energy(
        math.pi * ring.device.geometry.mean_radius, fermi_velocity=mat.fermi_velocity
    )
    if K_B * temperature < 0.1 * e_c:
        return np.array([fermi]), np.array([1.0]), "k_B T < E_c/10: single energy (preview)"
    energies, weights = budget_grid(fermi, K_B * temperature, int(max_energies))
    note = f"thermal average over {energies.size} energies (fixed budget, no error control)"
    return energies, weights, note


def explorer_full(
    params: ExplorerParams,
    *,
    report: Callable[[float, str], None] | None = None,
    max_energies: int = 1000,
    n_probes: int = N_PROBES,
    tol: float = 1e-4,
) -> FullResult:
    """Full tight-binding G(B) for the explorer settings.

    Parameters
    ----------
    params : ExplorerParams
    report : callable, optional
        ``report(fraction, text)`` progress callback (may raise to cancel).
    max_energies : int
        Budget of energies of the thermal average at T > 0 (one sparse factorization each).
    tol : float
        Error goal of the thermal average in e^2/h (thermal policy,
        :mod:`ringkit.thermal_policy`); the estimate is reported in the notes.
    n_probes : int
        Dephasing probes spread along both arms when ``l_phi`` is set
        (:func:`ringkit.transport.probes.attach_probes`, coupling mapped from L_phi at E_F).

    Returns
    -------
    FullResult

    Raises
    ------
    ParameterError
        Invalid settings or a device too large to build (message gives the size estimate).

    Notes
    -----
    Warnings raised on the way (coarse lattice, field regime, low-rank fallbacks) are
    recorded into ``FullResult.notes`` instead of being emitted (this uses
    :class:`warnings.catch_warnings`, which is process-global while the job runs).
    """
    say = report or (lambda frac, text: None)
    # Warnings (coarse lattice, field regime, low-rank fallbacks) become notes of the result:
    # in a background thread a warning turned into an error would silently kill the job.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = _compute(params, say, max_energies, n_probes, tol)
    if caught:
        extra = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
        result = replace(result, notes=result.notes + extra)
    say(1.0, "done")
    return result


def _compute(params: ExplorerParams, say, max_energies: int, n_probes: int, tol: float):
    from ringkit.tightbinding import build_ring

    t0 = time.perf_counter()
    say(0.0, "building lattice")
    device = build_device(params)
    ring = build_ring(device, seed=params.seed)
    area = ring.loop_area
    period = PHI0 / area
    field = preview_field_grid(params, period)
    notes: list[str] = []
    probes = None
    if params.l_phi is not None:
        from ringkit.transport.realised_l_phi import realised_l_phi_info
        from ringkit.transport.sweep import ring_probes

        say(0.05, f"{ring.n_sites} sites; calibrating {n_probes} dephasing probes on the device")
        zero = ring.params(B=0.0) if params.field_mode == "uniform" else ring.params(flux=0.0)
        # coupling calibrated so that the probes realise l_phi on this device (docs/probes.md)
        probes = ring_probes(ring, params.l_phi, ring.fermi_energy_lattice, zero, n_probes)
        notes.append(f"{probes.n} dephasing probes, eta = {float(np.mean(probes.eta)):.3g} t")
        info = realised_l_phi_info(probes)
        real, err = info["l_phi_realised_m"], info["l_phi_realised_err_m"]
        notes.append(
            f"L_phi requested {params.l_phi * 1e6:.3g} um, realised "
            f"{real * 1e6:.3g} +- {err * 1e6:.2g} um ({info['l_phi_status']})"
        )
    say(0.1, f"{ring.n_sites} sites; factorizing")
    count = [0]

    def sweep_at(e_j: float) -> np.ndarray:
        e_t = ring.to_lattice_energy(e_j)
        sweeper, values = _sweeper(params, ring, e_t, probes, field, area)
        out = np.empty_like(field)
        for start in range(0, field.size, _CHUNK):
            sl = slice(start, start + _CHUNK)
            out[sl] = _two_terminal(sweeper, values[sl], probes)
        count[0] += 1
        say(0.1 + 0.88 * count[0] / (count[0] + 20.0), f"energy {count[0]}")
        return out

    if params.field_mode == "uniform" and probes is None and params.temperature > 0:
        say(0.1, f"{ring.n_sites} sites; spectral engine (one factorization per field point)")
        total, energies, note = _spectral_thermal(ring, params.temperature, field, tol)
    else:
        total, energies, note = _thermal(ring, params.temperature, sweep_at, tol, max_energies)
    notes.insert(0, note)
    g = 2.0 * total
    spec = oscillation_spectrum(field, g, window="hann", pad=4)
    geo = device.geometry
    bands = ab_bands(math.sqrt(geo.area_inner / math.pi), math.sqrt(geo.area_outer / math.pi))
    contacts = ring.arm_of_site == "lead-contact"
    pos = np.asarray(ring.positions)
    left = contacts & (pos[:, 0] < 0)
    result = FullResult(
        field=field,
        conductance=g,
        spectrum=spec,
        period=period,
        mean_conductance=float(np.mean(g)),
        amplitude_he=_band_rms(spec, bands[1]),
        amplitude_h2e=_band_rms(spec, bands[2]),
        positions=pos,
        onsite_meV=np.asarray(ring.onsite_potential) / (1e-3 * EV),
        lead_sites=[pos[left], pos[contacts & ~left]],
        probe_sites=None if probes is None else pos[np.asarray(probes.sites)],
        energies=energies,
        n_sites=ring.n_sites,
        lattice_spacing=ring.lattice_spacing,
        field_mode=params.field_mode,
        elapsed=time.perf_counter() - t0,
        notes=tuple(notes),
    )
    return result


def _thermal(ring, temperature: float, sweep_at, tol: float, max_energies: int):
    """Thermal average of ``sweep_at`` (spinless G over the field) by the thermal policy."""
    if temperature == 0.0:
        e_f = ring.fermi_energy
        return sweep_at(e_f), np.array([e_f]), "T = 0: single energy"
    from ringkit.thermal_policy import energy_average
    from ringkit.transport.sweep import transmission_bound

    e_t = ring.fermi_energy_lattice
    bound = transmission_bound(ring, e_t, temperature, tol, ring.params())
    avg = energy_average(
        sweep_at, ring.fermi_energy, K_B * temperature, tol=0.5 * tol, bound=bound,
        max_energies=max_energies,
    )  # fmt: skip
    note = (f"thermal average over {avg.n_energies} energies, estimated error "
            f"{2 * avg.error:.2g} e^2/h (tol {tol:g})")  # fmt: skip
    return avg.value, avg.energies, note


def _spectral_thermal(ring, temperature: float, field: np.ndarray, tol: float):
    """Coherent uniform-field thermal average on the spectral engine (same policy and tol)."""
    from ringkit.transport.spectral import spectral_thermal_transmission
    from ringkit.transport.sweep import transmission_bound

    e_t = ring.fermi_energy_lattice
    params = ring.params(B=0.0)
    avg, sw = spectral_thermal_transmission(
        ring.fsyst, field, field_param="B", params=params, mu=e_t,
        kt=K_B * temperature / ring.hopping, tol=0.5 * tol,
        bound=transmission_bound(ring, e_t, temperature, tol, params),
    )  # fmt: skip
    note = (f"thermal average over {avg.n_energies} energies (spectral engine, "
            f"{len(field)} factorizations), estimated error {2 * avg.error:.2g} e^2/h "
            f"(tol {tol:g})")  # fmt: skip
    energies = np.asarray(avg.energies) * ring.hopping  # lattice units -> J
    return avg.value, energies, note


def _sweeper(params: ExplorerParams, ring, e_t: float, probes, field: np.ndarray, area: float):
    """Engine sweeper at lattice energy ``e_t`` and the parameter values for ``field``."""
    if params.field_mode == "flux_tube":
        from ringkit.transport.lowrank import FluxTubeSweeper

        kw = {}
        if probes is not None:
            kw = {"probe_sites": probes.sites, "probe_eta": probes.eta}
        sw = FluxTubeSweeper(ring.fsyst, energy=e_t, params=ring.params(flux=0.0), **kw)
        return sw, field * area
    from ringkit.transport.fastsweep import FieldSweeper

    other = {k: v for k, v in ring.params(B=0.0).items() if k != "B"}
    sw = FieldSweeper(ring.fsyst, field_param="B", params=other, energy=e_t, probes=probes)
    return sw, field


def _two_terminal(sweeper, values: np.ndarray, probes) -> np.ndarray:
    """Spinless two-terminal conductance (e^2/h), probes floating."""
    if probes is None:
        return np.asarray(sweeper.transmission(values), dtype=float)
    from ringkit.transport.fastsweep import kron_reduce

    return np.asarray(kron_reduce(sweeper.conductance_matrix(values), 0, 1), dtype=float)
