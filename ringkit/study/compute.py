"""Physics of one work unit: device -> tight-binding ring -> G(B) at every temperature.

A unit (one disorder realization, Fermi energy, gate potential and dephasing length) builds the
ring with :func:`ringkit.tightbinding.build_ring` (cached per worker process, so units of the
same realization share the build; the gate is a kwant parameter), attaches floating dephasing
probes for a finite L_phi (:func:`ringkit.transport.probes.attach_probes`) and sweeps the field
with the engine's :class:`~ringkit.transport.fastsweep.FieldSweeper` (flux-tube mode:
:class:`~ringkit.transport.lowrank.FluxTubeModel`). Temperatures are thermal averages on the
energy grid of :mod:`ringkit.transport.thermal`; energies shared by several temperatures are
computed once. The result of a unit does not depend on which process computes it or on what
that process computed before (tested bit for bit).

This module runs inside worker processes: the task payload holds plain data only.

API
---
UnitTask
make_tasks(plan, units) -> list of UnitTask
compute_unit(task) -> UnitResult
"""

from __future__ import annotations

import math
import time
from collections import OrderedDict
from dataclasses import dataclass
from typing import Any

import numpy as np

from ringkit.study.checkpoint import UnitResult
from ringkit.study.plan import StudyPlan, WorkUnit
from ringkit.study.setup import make_device, thermal_grid

__all__ = ["UnitTask", "make_tasks", "compute_unit"]


@dataclass(frozen=True)
class UnitTask:
    """Picklable payload of one work unit (plain data only)."""

    unit: WorkUnit
    physics: dict[str, dict[str, Any]]
    field_name: str
    field: np.ndarray
    temperatures: tuple[float, ...]


def make_tasks(plan: StudyPlan, units: list[WorkUnit]) -> list[UnitTask]:
    """Payloads of ``units`` for :func:`compute_unit`."""
    physics = plan.config.physics()
    return [
        UnitTask(
            unit=u,
            physics=physics,
            field_name=plan.field_name,
            field=np.asarray(plan.field),
            temperatures=tuple(plan.temperatures),
        )
        for u in units
    ]


# Per-process cache of built rings: units of one realization reuse the lattice.
_CACHE: OrderedDict[str, Any] = OrderedDict()
_CACHE_SIZE = 2


def _cached(key: str, make):
    if key in _CACHE:
        _CACHE.move_to_end(key)
        return _CACHE[key]
    value = make()
    _CACHE[key] = value
    while len(_CACHE) > _CACHE_SIZE:
        _CACHE.popitem(last=False)
    return value


def _probes(ring, dephasing_length: float, energy_lattice: float, n_probes: int, params: dict):
    """Floating dephasing probes for ``dephasing_length`` in m (None when coherent).

    The coupling is rounded to 8 significant digits: the engine's mapping uses kwant's LDOS,
    which varies in the last bits between identical calls (seen with kwant 1.5.0 and MUMPS
    5.5), and a study must give bit-identical numbers on every executor and after a resume.
    8 digits are far below the precision of the L_phi calibration.
    """
    if math.isinf(dephasing_length):
        return None
    from ringkit.transport.probes import attach_probes

    probes = attach_probes(
        ring.fsyst,
        l_phi=dephasing_length,
        energy=energy_lattice,
        n_probes=n_probes,
        lattice_spacing=ring.lattice_spacing,
        params=params,
        zero_field={ring.field_param: 0.0},
    )
    eta = np.asarray(probes.eta, dtype=float)
    rounded = np.array([float(f"{x:.8g}") for x in eta.ravel()]).reshape(eta.shape)
    return probes.with_eta(rounded if rounded.ndim else float(rounded))


def _device_key(physics: dict[str, dict[str, Any]], unit: WorkUnit) -> str:
    import json

    keep = {s: physics[s] for s in ("material", "geometry", "lattice", "field")}
    gated = any(v != 0 for v in physics["sweep"]["gate_potential"])
    extra = [unit.seed, unit.fermi_energy, physics["sweep"]["gate_arm"] if gated else None]
    return json.dumps([keep, extra], sort_keys=True, default=repr)


def _ring_for(task: UnitTask):
    """Built ring of the unit (cached per process; the gate is a kwant parameter)."""
    import warnings

    from ringkit.tightbinding import build_ring

    u = task.unit
    gated = any(v != 0 for v in task.physics["sweep"]["gate_potential"])

    def make():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # reported once by check_setup in the parent
            # any nonzero potential creates the gate parameter; the unit's value is set below
            device = make_device(task.physics, u.fermi_energy, 1.0 if gated else 0.0)
        return build_ring(device, seed=u.seed)

    return _cached(_device_key(task.physics, u), make)


def compute_unit(task: UnitTask) -> UnitResult:
    """Compute ``G[temperature, field]`` (e^2/h, spin-degenerate) of one work unit.

    Every temperature's thermal average uses the energies of
    :func:`ringkit.transport.thermal.thermal_weights`; energies shared between temperatures
    are computed once. Finite dephasing lengths add floating voltage probes whose voltages are
    eliminated (Kron reduction of the conductance matrix).
    """
    from ringkit.transport.fastsweep import FieldSweeper, kron_reduce

    t0 = time.perf_counter()
    u = task.unit
    ring = _ring_for(task)
    full_params = ring.params(gate=u.gate_potential if "gate" in ring.params() else None)
    params = {k: v for k, v in full_params.items() if k != ring.field_param}
    grids = [thermal_grid(ring.device, t, task.physics["thermal"]) for t in task.temperatures]
    n_probes = task.physics["dephasing"]["probes"]
    cache: dict[float, np.ndarray] = {}
    model = None
    flux_models: dict[float | None, Any] = {}
    field = np.asarray(task.field, float)
    for grid in grids:
        for e_j in grid.energies:
            if float(e_j) in cache:
                continue
            e_lat = ring.to_lattice_energy(float(e_j))
            probes = _probes(ring, u.dephasing_length, e_lat, n_probes, full_params)
            if task.field_name == "flux":
                from ringkit.transport.lowrank import FluxTubeModel

                key = None if probes is None else float(np.mean(probes.eta))
                if key not in flux_models:
                    kw = (
                        {}
                        if probes is None
                        else {"probe_sites": probes.sites, "probe_eta": probes.eta}
                    )
                    flux_models[key] = FluxTubeModel(ring.fsyst, params=params, **kw)
                sw = flux_models[key].sweeper(e_lat)
                if probes is None:
                    g = sw.transmission(field)
                else:
                    g = kron_reduce(sw.conductance_matrix(field))
            else:
                sw = FieldSweeper(
                    ring.fsyst,
                    field_param="B",
                    params=params,
                    energy=e_lat,
                    probes=probes,
                    model=model,
                )
                model = sw.model
                g = sw.conductance(field)
            cache[float(e_j)] = 2.0 * np.asarray(g, float)  # spin degeneracy
    out = np.empty((len(task.temperatures), field.size))
    for i, grid in enumerate(grids):
        out[i] = sum(w * cache[float(e)] for e, w in zip(grid.energies, grid.weights, strict=True))
    return UnitResult(
        uid=u.uid,
        conductance=out,
        n_energies=tuple(g.n_energies for g in grids),
        elapsed=time.perf_counter() - t0,
        info={"n_sites": int(ring.n_sites), "n_energies_total": len(cache)},
    )
