"""Fast conductance sweeps of a built ring: the default path behind :func:`field_sweep`.

API
---
fast_field_conductance(ring, fields, *, energy, gate=None, temperature=0.0, l_phi=None,
                       n_probes=100) -> FastSweepResult
    Two-terminal G [e^2/h] (spin-degenerate) over a field sweep.

Which solver
------------
* uniform field: :class:`ringkit.transport.fastsweep.FieldSweeper` (Hamiltonian values updated
  with numpy per field, MUMPS symbolic analysis reused, lead data cached per energy);
* flux tube: :class:`ringkit.transport.lowrank.FluxTubeSweeper` (one factorization per energy,
  then an exact low-rank update per flux value).

Both agree with plain ``kwant.smatrix`` on the same system to 1e-10 (tests/test_sweep.py).
Finite temperature uses :func:`ringkit.transport.thermal.thermal_conductance` with the
ballistic correlation energy ``hbar v_F / (2 pi r_mean)`` of the ring, so that resonances of
the whole loop are resolved. Dephasing adds floating Büttiker probes along both arms
(:func:`ringkit.transport.probes.attach_probes`) coupled for the requested ``l_phi``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ringkit._validation import check_positive
from ringkit.transport.fastsweep import FieldSweeper
from ringkit.transport.lowrank import FluxTubeSweeper
from ringkit.transport.probes import attach_probes
from ringkit.transport.thermal import thermal_conductance
from ringkit.units import HBAR

__all__ = ["FastSweepResult", "fast_field_conductance", "ring_correlation_energy"]


@dataclass(frozen=True)
class FastSweepResult:
    """Conductance of a sweep and how it was computed.

    Attributes
    ----------
    conductance : ndarray
        Two-terminal G in e^2/h (spin-degenerate, probes floating).
    info : dict
        ``solver``, ``n_energies`` (thermal grid size), ``n_probes``, ``probe_eta``,
        ``temperature_K``, ``l_phi_m`` and ``n_fallbacks`` (points recomputed by a direct
        solve).
    """

    conductance: np.ndarray
    info: dict = field(default_factory=dict)


def ring_correlation_energy(ring) -> float:
    """Ballistic correlation energy ``hbar v_F / (2 pi r_mean)`` of the ring, in units of t."""
    geo = ring.device.geometry
    v_f = ring.device.material.fermi_velocity
    return HBAR * v_f / (2 * math.pi * geo.mean_radius) / ring.hopping


def fast_field_conductance(
    ring,
    fields,
    *,
    energy: float,
    gate: float | None = None,
    temperature: float = 0.0,
    l_phi: float | None = None,
    n_probes: int = 100,
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

    Returns
    -------
    FastSweepResult
    """
    temperature = check_positive("temperature", temperature, "K", allow_zero=True)
    values = np.asarray(fields, dtype=float)
    e_t = ring.to_lattice_energy(energy)
    name = ring.field_param
    params = ring.params(gate=gate)
    probes = None
    if l_phi is not None and math.isfinite(l_phi):
        check_positive("l_phi", l_phi, "m")
        probes = attach_probes(
            ring.fsyst,
            l_phi=l_phi,
            energy=e_t,
            n_probes=int(n_probes),
            lattice_spacing=ring.lattice_spacing,
            params=params,
            zero_field={name: 0.0},
        )
    if name == "flux":
        sweeper = FluxTubeSweeper(ring.fsyst, energy=e_t, params=params, probes=probes)
        solver = "low-rank flux-tube update (ringkit.transport.lowrank)"
    else:
        sweeper = FieldSweeper(
            ring.fsyst, field_param=name, params=params, energy=e_t, probes=probes
        )
        solver = "fixed-pattern MUMPS sweep (ringkit.transport.fastsweep)"
    if temperature > 0:
        res = thermal_conductance(
            sweeper,
            values,
            temperature,
            energy_unit=ring.hopping,
            correlation_energy=ring_correlation_energy(ring),
        )
        g_spin, n_e = np.asarray(res.value), res.n_energies
    else:
        g_spin, n_e = np.asarray(sweeper.conductance(values)), 1
    fallbacks = int(getattr(sweeper, "n_fallbacks", getattr(sweeper, "n_fallback", 0)))
    info = {
        "solver": solver,
        "n_energies": int(n_e),
        "temperature_K": temperature,
        "l_phi_m": float("inf") if probes is None else float(l_phi),
        "n_probes": 0 if probes is None else len(np.atleast_1d(probes.sites)),
        "probe_eta": 0.0 if probes is None else float(np.mean(probes.eta)),
        "n_fallbacks": fallbacks,
    }
    return FastSweepResult(2.0 * g_spin, info)
