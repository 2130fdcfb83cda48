"""Transport: Landauer conductance of built rings, datasets, closed-ring spectra.

API (core)
----------
conductance(ring, *, B=0.0, flux=0.0, energy=None, gate=None, spin_resolved=False, zeeman=False)
    Two-terminal G in units of e^2/h.
transmission(ring, *, B=0.0, flux=0.0, energy=None, gate=None)
    Spinless transmission T.
field_sweep(ring, fields, ...), energy_sweep(ring, energies, ...), gate_sweep(ring, potentials, ...)
    xarray datasets with data variable ``G`` [e^2/h], SI coordinates and full parameter attrs.
save_dataset(ds, path), load_dataset(path), ring_attrs(ring), device_from_attrs(attrs)
    Lossless netCDF (h5netcdf) I/O and provenance.
closed_ring_spectrum(ring_or_device, fluxes, n_levels=10, ...) -> ClosedRingSpectrum
    E_n(Phi) and persistent currents -dE/dPhi of the isolated ring.

API (engine)
------------
FieldSweeper, kron_reduce                   (fastsweep: fixed-pattern sweeps of any kwant system)
FluxTubeSweeper, FluxTubeModel              (lowrank: exact low-rank flux-tube sweeps)
thermal_weights, thermal_average, thermal_conductance   (thermal: -df/dE averaging)
DephasingProbes, attach_probes, effective_conductance, thermal_probe_conductance
                                            (probes: energy-conserving dephasing probes and
                                            voltage probes, docs/probes.md)
calibrate_probes, calibrate_ring_probes     (probe_calibration: realised L_phi per device)
run_ensemble, SweepTask, EnsembleResult     (ensemble: any concurrent.futures executor)
fast_field_conductance                      (sweep: the default path of field_sweep)
"""

from __future__ import annotations

from ringkit.transport.closed import ClosedRingSpectrum, closed_ring_spectrum
from ringkit.transport.conductance import (
    conductance,
    energy_sweep,
    field_sweep,
    gate_sweep,
    transmission,
)
from ringkit.transport.dataset import (
    COORD_META,
    device_from_attrs,
    load_dataset,
    make_dataset,
    ring_attrs,
    save_dataset,
)
from ringkit.transport.ensemble import EnsembleResult, SweepTask, run_ensemble
from ringkit.transport.fastsweep import FieldSweeper, kron_reduce
from ringkit.transport.lowrank import FluxTubeModel, FluxTubeSweeper
from ringkit.transport.probe_calibration import calibrate_probes, calibrate_ring_probes
from ringkit.transport.probes import (
    DephasingProbes,
    attach_probes,
    effective_conductance,
    thermal_probe_conductance,
)
from ringkit.transport.sweep import fast_field_conductance
from ringkit.transport.thermal import thermal_average, thermal_conductance, thermal_weights

__all__ = [
    "conductance",
    "transmission",
    "field_sweep",
    "energy_sweep",
    "gate_sweep",
    "save_dataset",
    "load_dataset",
    "make_dataset",
    "ring_attrs",
    "device_from_attrs",
    "COORD_META",
    "closed_ring_spectrum",
    "ClosedRingSpectrum",
    "FieldSweeper",
    "kron_reduce",
    "FluxTubeSweeper",
    "FluxTubeModel",
    "thermal_weights",
    "thermal_average",
    "thermal_conductance",
    "DephasingProbes",
    "attach_probes",
    "effective_conductance",
    "thermal_probe_conductance",
    "calibrate_probes",
    "calibrate_ring_probes",
    "run_ensemble",
    "SweepTask",
    "EnsembleResult",
    "fast_field_conductance",
]
