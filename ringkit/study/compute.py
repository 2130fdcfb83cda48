"""Physics of one work unit: device -> tight-binding ring -> G(B) at every temperature.

A unit (one disorder realization, Fermi energy, gate potential and dephasing length) builds the
ring with :func:`ringkit.tightbinding.build_ring` and sweeps the field with the engine's
:class:`~ringkit.transport.fastsweep.FieldSweeper` (flux-tube mode:
:class:`~ringkit.transport.lowrank.FluxTubeSweeper`). Temperatures are thermal averages on the
energies of the thermal policy (:func:`ringkit.study.setup.thermal_average`); energies shared
by several temperatures are computed once. A unit at T > 0 in a uniform field (without probes
or with at most ``AUTO_MAX_PROBES``), or in flux-tube mode without probes, runs on the
spectral engine (:mod:`ringkit.transport.spectral`): one factorization per distinct field
point (one for every flux) serves every energy of the widest window of its temperatures, and the
measured model error is added to the thermal error (``info["engine"]``,
``info["spectral_model_error_e2h"]``). The result of a unit does not depend on which process
computes it or on what that process computed before (tested bit for bit).

What is reused (per worker process, :class:`_RingState`, at most two lattices kept):

* the built lattice (units of one realization share it; the gate is a kwant parameter);
* one field model per (lattice, gate): the flux-tube :class:`~ringkit.transport.lowrank.
  FluxTubeModel` (the only evaluation of the Hamiltonian; models with probes are derived from
  it with ``with_probes``) or the uniform-field Peierls model of the first
  :class:`~ringkit.transport.fastsweep.FieldSweeper`;
* in flux-tube mode, each distinct flux point once: G is h/e-periodic and, for the real
  (time-reversal symmetric) Hamiltonians of ringkit rings, even in the flux
  (:func:`ringkit.transport.flux_symmetry.flux_classes`; 201 points over -3..3 h/e are 51
  distinct points);
* the L_phi calibration of (lattice, gate, E_F): one
  :class:`~ringkit.transport.probe_calibration.LPhiCalibrator` per process
  (:func:`ringkit.transport.realised_l_phi.realised_ring_probes`, built on the cached
  flux-tube model in flux-tube mode); every L_phi of the lattice only runs the secant on the
  probe coupling, and a repeated L_phi is served from the cache.

Dephasing convention: the probe coupling is calibrated **at the Fermi energy** of the unit, on
the lattice itself, so that the probes realise the requested L_phi (h/e damping, docs/probes.md
"Realised L_phi"), and kept for every energy of the thermal window, as in
:func:`ringkit.transport.sweep.fast_field_conductance` (L_phi is a property of the sample at
temperature T, not of each energy of the window). The unit's ``info`` holds the realised
``l_phi_realised_m`` and its error ``l_phi_realised_err_m``. Sweepers (one sparse
factorization each) are released after their energy, so memory stays flat over the window.

BLAS threads: every unit runs with BLAS limited to ``UnitTask.blas_threads`` threads
(threadpoolctl; default 1). The engine is a sequential MUMPS factorization plus small dense
products for which extra threads only contend with the other workers (measured in
benchmarks/RESULTS-study.md); one thread everywhere also makes results bit-identical on every
executor.

This module runs inside worker processes: the task payload holds plain data only.

API
---
UnitTask, UnitEngine(state, task).conductance(energy)
state_for(task), blas_limit(threads)
make_tasks(plan, units) -> list of UnitTask
compute_unit(task) -> UnitResult
clear_cache()
"""

from __future__ import annotations

import contextlib
import math
import time
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ringkit.study.checkpoint import UnitResult
from ringkit.study.plan import StudyPlan, WorkUnit
from ringkit.study.setup import make_device, thermal_average

__all__ = [
    "UnitTask",
    "UnitEngine",
    "make_tasks",
    "compute_unit",
    "state_for",
    "blas_limit",
    "clear_cache",
    "BLAS_THREADS",
]

BLAS_THREADS = 1
"""BLAS threads per work unit (see the module docstring)."""


@dataclass(frozen=True)
class UnitTask:
    """Picklable payload of one work unit (plain data only)."""

    unit: WorkUnit
    physics: dict[str, dict[str, Any]]
    field_name: str
    field: np.ndarray
    temperatures: tuple[float, ...]
    blas_threads: int = BLAS_THREADS


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


@dataclass
class _RingState:
    """A built lattice and what is reused with it (field models)."""

    ring: Any
    models: OrderedDict = field(default_factory=OrderedDict)  # gate -> field model


# Per-process cache of built lattices: units of one realization reuse the lattice.
_CACHE: OrderedDict[str, _RingState] = OrderedDict()
_CACHE_SIZE = 2
_PER_RING = 2  # field models kept per lattice (gate values)


def clear_cache() -> None:
    """Forget the lattices, models and L_phi calibrations kept by this process."""
    from ringkit.transport.realised_l_phi import clear_calibration_cache

    _CACHE.clear()
    clear_calibration_cache()


def _lru(cache: OrderedDict, key, make, size: int):
    if key in cache:
        cache.move_to_end(key)
        return cache[key]
    value = make()
    cache[key] = value
    while len(cache) > size:
        cache.popitem(last=False)
    return value


def _device_key(physics: dict[str, dict[str, Any]], unit: WorkUnit) -> str:
    import json

    keep = {s: physics[s] for s in ("material", "geometry", "lattice", "field")}
    gated = any(v != 0 for v in physics["sweep"]["gate_potential"])
    extra = [unit.seed, unit.fermi_energy, physics["sweep"]["gate_arm"] if gated else None]
    return json.dumps([keep, extra], sort_keys=True, default=repr)


def state_for(task: UnitTask) -> _RingState:
    """Built lattice of the unit and its reusable pieces (cached per process)."""
    import warnings

    from ringkit.tightbinding import build_ring

    u = task.unit
    gated = any(v != 0 for v in task.physics["sweep"]["gate_potential"])

    def make():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # reported once by check_setup in the parent
            # any nonzero potential creates the gate parameter; the unit's value is set later
            device = make_device(task.physics, u.fermi_energy, 1.0 if gated else 0.0)
        return _RingState(build_ring(device, seed=u.seed))

    return _lru(_CACHE, _device_key(task.physics, u), make, _CACHE_SIZE)


def _round8(eta) -> Any:
    """Coupling rounded to 8 significant digits.

    The LDOS behind the coupling varies in the last bits between identical calls (seen with
    kwant 1.5.0 and MUMPS 5.5), and a study must give bit-identical numbers on every executor
    and after a resume; 8 digits are far below the precision of the L_phi calibration.
    """
    arr = np.asarray(eta, dtype=float)
    rounded = np.array([float(f"{x:.8g}") for x in arr.ravel()]).reshape(arr.shape)
    return rounded if rounded.ndim else float(rounded)


class UnitEngine:
    """G(field) at any energy of one unit, reusing the lattice's model and probe weights."""

    def __init__(self, state: _RingState, task: UnitTask) -> None:
        self.state = state
        self.ring = ring = state.ring
        self.task = task
        u = task.unit
        self.full_params = ring.params(gate=u.gate_potential if "gate" in ring.params() else None)
        self.params = {k: v for k, v in self.full_params.items() if k != ring.field_param}
        self.gate_key = self.full_params.get("gate")
        self.field = np.asarray(task.field, float)
        self.flux = task.field_name == "flux"
        self.n_probes = int(task.physics["dephasing"]["probes"])
        self.probes = None if math.isinf(u.l_phi) else self._probes(u.l_phi)
        self.model = self._model() if self.flux else None
        self._classes: tuple | None = None  # (field, representatives, inverse)
        self._spectral_engine = self._spectral_sweeper()  # models built on first use
        self._spectral_field: np.ndarray | None = None

    @property
    def uses_spectral(self) -> bool:
        """Whether this unit's energies come from the spectral engine."""
        return self._spectral_engine is not None

    @property
    def _spectral(self):
        """The spectral engine with its reduced models for the current field (or None)."""
        sw = self._spectral_engine
        if sw is not None and (
            self._spectral_field is None or not np.array_equal(self._spectral_field, self.field)
        ):
            sw.models(self.field)
            self._spectral_field = np.array(self.field, copy=True)
        return sw

    def _spectral_sweeper(self):
        """Spectral engine of a unit at T > 0 (uniform field, or flux tube without probes).

        One factorization per distinct field point (one for every flux in flux-tube mode)
        serves every energy of the widest thermal window of the unit's temperatures
        (:mod:`ringkit.transport.spectral`; probes are Kron-reduced at every energy as on the
        direct path); computed in this process (units are the parallel work).
        """
        from ringkit.study.setup import thermal_bound
        from ringkit.thermal_policy import DEFAULT_TOL, sampled_half_width
        from ringkit.transport.spectral import (
            MODEL_TOL,
            SpectralSweeper,
            spectral_eligible,
            spectral_preferred,
        )
        from ringkit.units import K_B

        temps = [float(t) for t in self.task.temperatures if t > 0]
        ring = self.ring
        if not temps or not spectral_preferred(self.flux, self.probes):
            return None  # many probes, or a flux tube with probes: the per-energy engines
        if spectral_eligible(ring.fsyst, ring.field_param, self.params, self.probes) is not None:
            return None
        thermal = self.task.physics["thermal"]
        tol = float(thermal.get("tol", DEFAULT_TOL))
        method = thermal.get("method", "adaptive")
        half = max(
            sampled_half_width(K_B * t, tol, thermal_bound(ring, t, tol), method) for t in temps
        )
        return SpectralSweeper(
            ring.fsyst,
            field_param=ring.field_param,
            params=self.params,
            mu=ring.fermi_energy_lattice,
            half_width=half / ring.hopping,
            model_tol=max(1e-13, min(MODEL_TOL, tol / 200.0)),  # per spin; G is 2 T
            workers=1,
            probes=self.probes,
        )

    @property
    def spectral_model_error(self) -> float:
        """Measured model error of the spectral engine in e^2/h (0 when it is not used)."""
        return 2.0 * self._spectral.model_error if self.uses_spectral else 0.0

    # ------------------------------------------------------------------ reused pieces
    def _base_model(self):
        """Probe-free flux-tube model of the lattice at this gate (cached with the lattice).

        In uniform mode the Peierls model of the first :class:`FieldSweeper` is cached instead
        (:meth:`conductance`).
        """

        from ringkit.transport.lowrank import FluxTubeModel

        def make():
            return FluxTubeModel(self.ring.fsyst, params=self.params)

        return _lru(self.state.models, self.gate_key, make, _PER_RING)

    def _probes(self, l_phi: float):
        """Probes of the unit, calibrated on the lattice so that they realise ``l_phi``.

        One :class:`~ringkit.transport.probe_calibration.LPhiCalibrator` per (lattice, gate,
        E_F, probe count) and process (:mod:`ringkit.transport.realised_l_phi`), reused for
        every L_phi of the lattice; the coupling and the realised L_phi are rounded to 8
        significant digits (:func:`_round8`).
        """
        from ringkit.transport.probes import DephasingProbes
        from ringkit.transport.realised_l_phi import realised_ring_probes

        ring = self.ring
        pr = realised_ring_probes(
            ring, l_phi, ring.fermi_energy_lattice, self.full_params, self.n_probes,
            model=self._base_model() if self.flux else None,
        )  # fmt: skip
        info = dict(pr.info)
        for key in ("l_phi_realised", "l_phi_realised_err"):
            info[key] = _round8(info[key])
        return DephasingProbes(pr.sites, _round8(pr.eta), l_phi, info)

    def _model(self):
        base = self._base_model()
        return base if self.probes is None else base.with_probes(self.probes)

    def _flux_points(self) -> tuple[np.ndarray, np.ndarray]:
        """Distinct flux points of ``self.field`` and the map back onto it (exact: h/e
        periodicity and, for reciprocal models, G(-Phi) = G(Phi);
        :func:`ringkit.transport.flux_symmetry.flux_classes`)."""
        from ringkit.transport.flux_symmetry import flux_classes

        f = np.asarray(self.field, float)
        if self._classes is None or not np.array_equal(self._classes[0], f):
            self._classes = (f.copy(), *flux_classes(self.model, f))
        return self._classes[1], self._classes[2]

    def conductance_many(self, e_lattice) -> np.ndarray:
        """Spin-degenerate G (e^2/h), one row per lattice energy (spectral engine only)."""
        return 2.0 * self._spectral.transmission(np.asarray(e_lattice, dtype=float))

    # ------------------------------------------------------------------ one energy
    def conductance(self, e_lattice: float) -> np.ndarray:
        """Spin-degenerate G (e^2/h) over the field grid at ``e_lattice`` (units of t)."""
        from ringkit.transport.fastsweep import FieldSweeper, kron_reduce

        if self.uses_spectral:
            return self.conductance_many([e_lattice])[0]
        if self.flux:
            from ringkit.transport.lowrank import FluxTubeSweeper

            reps, expand = self._flux_points()
            sw = FluxTubeSweeper(self.model, energy=e_lattice)
            if self.probes is None:
                g = sw.transmission(reps)
            else:
                g = kron_reduce(sw.conductance_matrix(reps))
            g = np.asarray(g)[expand]
        else:
            model = self.state.models.get(self.gate_key)
            sw = FieldSweeper(
                self.ring.fsyst,
                field_param=self.ring.field_param,
                params=self.params,
                energy=e_lattice,
                probes=self.probes,
                model=model,
            )
            if model is None:  # the Peierls model of this gate, shared by the next energies
                _lru(self.state.models, self.gate_key, lambda: sw.model, _PER_RING)
            g = sw.conductance(self.field)
        return 2.0 * np.asarray(g, float)  # spin degeneracy


def blas_limit(threads: int):
    """Context limiting the BLAS libraries of this process to ``threads`` threads."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - a dependency of ringkit
        return contextlib.nullcontext()
    return threadpool_limits(limits=int(threads), user_api="blas")


def compute_unit(task: UnitTask) -> UnitResult:
    """Compute ``G[temperature, field]`` (e^2/h, spin-degenerate) of one work unit.

    Every temperature's thermal average uses the energies of
    :func:`ringkit.study.setup.thermal_average`; energies shared between temperatures are
    computed once. Finite dephasing lengths add floating dephasing probes, calibrated on the
    lattice to realise L_phi, whose voltages are eliminated at each energy (Kron reduction of
    the conductance matrix); ``info`` reports the realised L_phi and its error.
    """
    with blas_limit(task.blas_threads):
        return _compute(task)


def _compute(task: UnitTask) -> UnitResult:
    import warnings

    t0 = time.perf_counter()
    state = state_for(task)
    ring = state.ring
    cache: dict[float, np.ndarray] = {}

    def g_at(e_joule: float) -> np.ndarray:
        key = float(e_joule)
        if key not in cache:
            cache[key] = engine.conductance(ring.to_lattice_energy(key))
        return cache[key]

    def g_many(energies: np.ndarray) -> np.ndarray:  # the spectral engine: one call per round
        new = [float(e) for e in energies if float(e) not in cache]
        if new:
            rows = engine.conductance_many([ring.to_lattice_energy(e) for e in new])
            cache.update(zip(new, rows, strict=True))
        return np.stack([cache[float(e)] for e in energies])

    out = np.empty((len(task.temperatures), np.size(task.field)))
    n_energies, errors = [], []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        engine = UnitEngine(state, task)  # calibration warnings (range) are recorded too
        spectral = engine.uses_spectral
        for i, temp in enumerate(task.temperatures):
            avg = thermal_average(
                ring, temp, task.physics["thermal"], g_many if spectral else g_at,
                batched=spectral,
            )  # fmt: skip
            out[i] = avg.value
            n_energies.append(int(avg.n_energies))
            errors.append(float(avg.error) + engine.spectral_model_error)
    info: dict[str, Any] = {
        "n_sites": int(ring.n_sites),
        "n_energies_total": len(cache),
        "thermal_error_e2h": errors,
    }
    if engine.uses_spectral:
        info["engine"] = f"spectral ({engine._spectral.n_models} factorizations)"
        info["spectral_model_error_e2h"] = engine.spectral_model_error
    if caught:
        info["warnings"] = sorted({f"{w.category.__name__}: {w.message}" for w in caught})
    if engine.probes is not None:
        info["n_probes"] = int(engine.probes.n)
        info["probe_eta_t"] = float(np.mean(engine.probes.eta))
        info["l_phi_realised_m"] = float(engine.probes.info["l_phi_realised"])
        info["l_phi_realised_err_m"] = float(engine.probes.info["l_phi_realised_err"])
    resistance = None
    if task.physics["sweep"].get("contacts"):
        resistance, info["resistance_thermal_error_e2h"] = _resistances(task, ring)
    return UnitResult(
        uid=task.unit.uid,
        conductance=out,
        n_energies=tuple(n_energies),
        elapsed=time.perf_counter() - t0,
        info=info,
        resistance=resistance,
    )


def _resistances(task: UnitTask, ring) -> tuple[np.ndarray, list[float]]:
    """``R_ohm[temperature, config, field]`` of ``sweep.contacts`` and the thermal errors.

    One :func:`ringkit.transport.multiterminal.resistance_field_sweep` per temperature on the
    unit's lattice (same realization, Fermi energy, gate, L_phi and probe count, same thermal
    tolerance and rule); the errors are the largest estimated error of the averaged
    conductance matrix elements (e^2/h).
    """
    import warnings

    from ringkit.transport.multiterminal import resistance_field_sweep

    u, sweep = task.unit, task.physics["sweep"]
    thermal = task.physics["thermal"]
    out = np.empty((len(task.temperatures), len(sweep["contacts"]), np.size(task.field)))
    errors = []
    for i, temp in enumerate(task.temperatures):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # field-range hints are reported with G
            ds = resistance_field_sweep(
                ring, np.asarray(task.field, float), list(sweep["contacts"]),
                gate=u.gate_potential if "gate" in ring.params() else None, temperature=temp,
                l_phi=None if math.isinf(u.l_phi) else u.l_phi,
                n_probes=int(task.physics["dephasing"]["probes"]),
                thermal_tol=thermal["tol"], thermal_method=thermal["method"],
            )  # fmt: skip
        out[i] = ds["R_ohm"].transpose("config", ...).values
        errors.append(float(ds.attrs["thermal_error_estimate"]))
    return out, errors
