"""Cost before compute: time, memory and disk of a study, estimated before any unit runs.

Two stages, both before the checkpoint is opened:

:func:`preflight` (no lattice is built)
    Site and memory estimate of every device of the study
    (:meth:`ringkit.device.RingDevice.site_estimate`, plus the dense blocks of the sweeps:
    right-hand sides of the terminal and cut columns, the channel-amplitude matrices with
    probes), the size of the result array, the available memory and disk space, and the
    number of workers: at most the number of cores (unless ``oversubscribe``) and at most as
    many as fit into the available memory. A study that cannot fit is refused here
    (:class:`CostError`), e.g. a ring estimated at 97 GB on a 23 GB machine or an 800 GB
    result array.
:func:`estimate_cost` (after :func:`ringkit.study.setup.check_setup`)
    A quick timing of the first unit's engine at its Fermi energy (one factorization with
    one and with five field points, coherent and, with finite L_phi, with the probes) gives
    seconds per energy ``s_0 + n_fields s_1``; every unit costs its number of distinct
    thermal energies times that. The per-unit costs also weight the progress bar, so the ETA
    counts work rather than units.

API
---
Preflight, preflight(plan, *, workers=None, oversubscribe=False, out_dir=None) -> Preflight
CostEstimate, estimate_cost(plan, pre, pending) -> CostEstimate
CostError
available_memory() -> float or None
"""

from __future__ import annotations

import math
import os
import shutil
import time
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

from ringkit._validation import ParameterError
from ringkit.study.plan import StudyPlan, WorkUnit

__all__ = [
    "CostError",
    "Preflight",
    "CostEstimate",
    "preflight",
    "estimate_cost",
    "available_memory",
    "unit_energy_counts",
    "human_time",
    "human_bytes",
]

_PARENT_BASE_BYTES = 250 * 2**20  # interpreter, xarray/matplotlib for the outputs
_COMPLEX = 16
_FLOAT = 8


class CostError(ValueError):
    """The study cannot run as given (memory, disk) or needs confirmation (``--yes``)."""


def human_time(seconds: float) -> str:
    """``"42 s"``, ``"3.5 min"``, ``"2.1 h"``, ``"4.0 days"``."""
    s = float(seconds)
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.1f} min"
    if s < 2 * 86400:
        return f"{s / 3600:.1f} h"
    return f"{s / 86400:.1f} days"


def human_bytes(n: float) -> str:
    """``"350 MB"``, ``"4.3 GB"`` (decimal units)."""
    n = float(n)
    for unit, f in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6)):
        if n >= f:
            return f"{n / f:.3g} {unit}"
    return f"{n / 1e3:.3g} kB"


def available_memory() -> float | None:
    """Memory available to new processes in bytes (``MemAvailable`` of /proc/meminfo)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return None


def cpu_count() -> int:
    """Cores this process may use (affinity mask when available)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # pragma: no cover - non-Linux
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class Preflight:
    """What :func:`preflight` found (no lattice built).

    Attributes
    ----------
    n_sites : int
        Largest site estimate over the devices of the study.
    worker_bytes : float
        Estimated peak memory of one worker process (bytes).
    parent_bytes : float
        Estimated peak memory of the main process while writing the outputs.
    result_bytes : float
        Size of the conductance array ``G`` (float64).
    available_bytes : float or None
        Available memory of the machine.
    disk_free : float or None
        Free space where the outputs go.
    cores : int
    workers : int
        Worker processes that will be started (1 for the serial executor).
    notes : tuple of str
        Decisions taken (e.g. workers capped), printed before the run.
    """

    n_sites: int
    worker_bytes: float
    parent_bytes: float
    result_bytes: float
    available_bytes: float | None
    disk_free: float | None
    cores: int
    workers: int
    notes: tuple[str, ...] = ()


def _terminal_channels(plan: StudyPlan, lead_sites: int, n_sites: int) -> int:
    d = min(plan.config["dephasing"]["probes"], n_sites)  # more probes are refused by set-up
    return 2 * lead_sites + (d if any(math.isfinite(x) for x in plan.l_phi_values) else 0)


def _worker_bytes(plan: StudyPlan, device) -> tuple[int, float]:
    """Site estimate and peak memory of one worker computing a unit of ``device``."""
    est = device.site_estimate()
    a = device.spacing
    lead_sites = max(1, round(float(device.geometry.lead_width) / a))
    arm_sites = max(1, round(device.geometry.max_arm_width / a))
    nch = _terminal_channels(plan, lead_sites, est.n_sites)
    # dense solves: right-hand sides / inverse columns for the terminals and the branch cut
    dense = est.n_sites * (nch + 2 * arm_sites) * _COMPLEX * 2
    # channel-amplitude and conductance matrices over the field grid (probes: all pairs)
    n_f = len(plan.field)
    amplitudes = n_f * nch**2 * (_COMPLEX + 3 * _FLOAT)
    energies = 64 * n_f * _FLOAT  # G(E, field) kept for the thermal averages
    # one lattice kept besides the one in use (units of one realization share it)
    return est.n_sites, est.memory_bytes + est.n_sites * 590.0 + dense + amplitudes + energies


def preflight(
    plan: StudyPlan,
    *,
    workers: int | None = None,
    oversubscribe: bool = False,
    out_dir: str | Path | None = None,
    n_pending: int | None = None,
) -> Preflight:
    """Memory, disk and worker checks of ``plan`` before any lattice is built.

    Parameters
    ----------
    plan : StudyPlan
    workers : int, optional
        Requested workers (``--workers``; default ``executor.workers`` or the core count).
    oversubscribe : bool
        Allow more workers than cores.
    out_dir : path, optional
        Output directory (for the free-disk check).
    n_pending : int, optional
        Units still to compute (default: all); no more workers than that are started.

    Raises
    ------
    CostError
        One worker, or the result array, does not fit into the available memory; the
        outputs do not fit on the disk; more workers than cores without ``oversubscribe``
        (only when requested with ``--workers``; ``executor.workers`` is capped with a note).
    ringkit.ParameterError
        A device of the study is invalid (as :func:`ringkit.study.setup.check_setup`).
    """
    from ringkit.study.setup import make_device, study_names

    notes: list[str] = []
    n_sites, worst = 0, 0.0
    with warnings.catch_warnings(), study_names():
        warnings.simplefilter("ignore")  # reported by check_setup
        for e in plan.fermi_energies:
            for g in plan.gate_potentials:
                device = make_device(plan.config.physics(), e, g)
                device.check_size()
                n, b = _worker_bytes(plan, device)
                n_sites, worst = max(n_sites, n), max(worst, b)
    result_bytes = float(math.prod(plan.shape)) * len(plan.temperatures) * len(plan.field) * 8
    parent = _PARENT_BASE_BYTES + 4.0 * result_bytes  # units, G, G_mean + analysis, file
    avail = available_memory()
    cores = cpu_count()
    ex = plan.config["executor"]
    remote = ex["kind"] == "dask" and ex["address"]
    if ex["kind"] == "serial":
        n_workers = 1
    else:
        requested = workers or ex["workers"]
        n_workers = requested or cores
        if n_workers > cores and not remote and not oversubscribe:
            if workers:
                raise CostError(
                    f"--workers {workers} is more than the {cores} cores of this machine "
                    "(workers would only compete for them); use --workers "
                    f"{cores} or pass --oversubscribe"
                )
            notes.append(
                f"executor.workers = {requested} capped at the {cores} cores of this machine "
                "(--oversubscribe to allow more)"
            )
            n_workers = cores
    if n_pending is not None:
        n_workers = max(1, min(n_workers, n_pending))
    if avail is not None:
        if parent > avail:
            raise CostError(
                f"the results of this study ({_shape_text(plan)} = {human_bytes(result_bytes)} "
                f"of conductance values) need about {human_bytes(parent)} of memory to write, "
                f"but only {human_bytes(avail)} is available; reduce field.points, the sweep "
                "lists or ensemble.realizations"
            )
        if worst + parent > avail:
            raise CostError(
                f"one work unit needs about {human_bytes(worst)} of memory (~{n_sites:,} "
                f"sites), but only {human_bytes(avail - parent)} is available; increase "
                "lattice.spacing, shrink the ring or use a machine with more memory"
            )
        if not remote and ex["kind"] != "serial":
            fit = max(1, int((avail - parent) // worst))
            if fit < n_workers:
                notes.append(
                    f"{fit} worker(s) instead of {n_workers}: each needs about "
                    f"{human_bytes(worst)} and {human_bytes(avail)} is available"
                )
                n_workers = fit
    disk = None
    if out_dir is not None:
        probe = Path(out_dir).resolve()
        while not probe.exists() and probe != probe.parent:
            probe = probe.parent
        try:
            disk = float(shutil.disk_usage(probe).free)
        except OSError:  # pragma: no cover - unusual file systems
            disk = None
        need = 2.2 * result_bytes  # checkpoint units + results.nc
        if disk is not None and need > disk:
            raise CostError(
                f"the outputs need about {human_bytes(need)} on disk (checkpoint and "
                f"results.nc) but {probe} has {human_bytes(disk)} free"
            )
    return Preflight(
        n_sites=n_sites,
        worker_bytes=worst,
        parent_bytes=parent,
        result_bytes=result_bytes,
        available_bytes=avail,
        disk_free=disk,
        cores=cores,
        workers=n_workers,
        notes=tuple(notes),
    )


def _shape_text(plan: StudyPlan) -> str:
    n_r, n_e, n_g, n_d = plan.shape
    return (
        f"{n_r} realizations x {n_e} x {n_g} x {len(plan.temperatures)} x {n_d} conditions x "
        f"{len(plan.field)} field points"
    )


def unit_energy_counts(plan: StudyPlan) -> dict[float | None, int]:
    """Distinct thermal energies of a unit, per Fermi energy of the plan (a lower bound).

    The first level of the thermal policy (:func:`ringkit.study.setup.thermal_grid`) at every
    temperature; the adaptive rule evaluates these and may add more.
    """
    from ringkit.study.setup import make_device, thermal_grid

    out: dict[float | None, int] = {}
    physics = plan.config.physics()
    for e in plan.fermi_energies:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            device = make_device(physics, e, 0.0)
        energies: set[float] = set()
        for t in plan.temperatures:
            energies.update(float(x) for x in thermal_grid(device, t, physics["thermal"]).energies)
        out[e] = len(energies)
    return out


@dataclass(frozen=True)
class CostEstimate:
    """Estimated compute time of the pending units (from a quick timing).

    Attributes
    ----------
    unit_seconds : dict of uid -> float
        Estimated seconds of every unit of the plan (weights of the progress bar).
    pending_seconds : float
        Sum over the units still to compute (CPU seconds).
    wall_seconds : float
        ``pending_seconds / workers``.
    per_energy : dict of str -> Timing
        Measured engine cost (:class:`Timing`) for ``"coherent"`` and, with dephasing,
        ``"dephased"``.
    n_energies : int
        Energy evaluations of the pending units (each one sweep over the field grid).
    timing_seconds : float
        Time the quick timing took.
    """

    unit_seconds: dict[str, float]
    pending_seconds: float
    wall_seconds: float
    per_energy: dict[str, Timing]
    n_energies: int
    timing_seconds: float


def _time_engine(plan: StudyPlan, unit: WorkUnit) -> Timing:
    """:class:`Timing` of ``unit``: seconds per energy and per field point (direct paths).

    A first call at the Fermi energy builds what a worker builds once (field model, probe
    weights) and is not counted; then one energy near E_F is swept over 1 and over 5 field
    points (median of two repetitions of each).
    """
    import numpy as np

    from ringkit.study import compute

    task = compute.make_tasks(plan, [unit])[0]
    with compute.blas_limit(task.blas_threads):
        t0 = time.perf_counter()
        state = compute.state_for(task)  # the lattice (cached per process: 0 s when reused)
        t_build = time.perf_counter() - t0
        t0 = time.perf_counter()
        engine = compute.UnitEngine(state, task)  # probe calibration, engine set-up
        t_setup = time.perf_counter() - t0
        ring = state.ring
        e_lat = ring.fermi_energy_lattice
        field = np.asarray(plan.field, float)
        picks = field[np.linspace(0, field.size - 1, 5).round().astype(int)]
        if engine.uses_spectral:
            return _time_spectral(engine, picks, e_lat)._replace(setup=t_setup, build=t_build)
        engine.field = picks[:1]
        engine.conductance(e_lat)  # one-time set-up of the worker
        e_near = e_lat * (1 + 1e-3)  # another energy: nothing cached for it
        times: dict[int, list[float]] = {1: [], 5: []}
        for _ in range(2):
            for sub in (picks[:1], picks):
                engine.field = sub
                t0 = time.perf_counter()
                engine.conductance(e_near)
                times[sub.size].append(time.perf_counter() - t0)
    t1, t5 = (float(np.median(times[k])) for k in (1, 5))
    per_point = max(0.0, (t5 - t1) / 4)
    return Timing("per-energy", max(t1 - per_point, 0.0), per_point, t_setup, t_build)


class Timing(NamedTuple):
    """Measured cost of one unit's engine.

    ``kind``: ``"per-energy"`` (``s0`` s per energy + ``s1`` s per field point and energy),
    ``"spectral-field"`` (spectral engine in a uniform field: ``s1`` s for the model of one
    distinct field point + ``s0`` s per energy and distinct point) or ``"spectral-cut"``
    (spectral engine, flux tube: ``s0`` s for the one model + ``s1`` s per flux and energy).

    ``setup``: seconds per unit before any energy (the L_phi calibration of the probes and the
    engine set-up); ``build``: seconds of one lattice, paid once per realization and Fermi
    energy (a worker keeps the lattice for the other units of that realization).
    """

    kind: str
    s0: float
    s1: float
    setup: float = 0.0
    build: float = 0.0

    def unit_seconds(self, n_energies: int, field) -> float:
        """Estimated seconds of one unit with ``n_energies`` energies over ``field``."""
        import numpy as np

        if self.kind == "spectral-field":  # one model per distinct |B| (Onsager folding)
            n = np.unique(np.round(np.abs(np.asarray(field, float)), 12)).size
            return n * (self.s1 + n_energies * self.s0)
        if self.kind == "spectral-cut":
            return self.s0 + n_energies * len(field) * self.s1
        return n_energies * (self.s0 + len(field) * self.s1)

    def describe(self, n_field: int) -> str:
        if self.kind == "spectral-field":
            text = (
                f"spectral engine, {self.s1:.3g} s per distinct field point + "
                f"{self.s0:.3g} s per energy and point"
            )
        elif self.kind == "spectral-cut":
            text = f"spectral engine, {self.s0:.3g} s + {n_field} x {self.s1:.3g} s per energy"
        else:
            text = f"{self.s0:.3g} s + {n_field} x {self.s1:.3g} s per energy"
        if self.setup >= 0.05:
            text += f" + {self.setup:.3g} s set-up per unit"
        return text


def _time_spectral(engine, picks, e_lat: float) -> Timing:
    """Cost of a spectral-engine unit: one reduced model (uniform field, timed on one field
    point), or the one flux-tube model plus its dense work per flux and energy (five fluxes,
    16 energies)."""
    import numpy as np

    sw = engine._spectral_engine
    if sw.mode == "per-field":
        t0 = time.perf_counter()
        # the largest |B| of the grid: complex arithmetic (B = 0 is real and about twice as
        # cheap, so the middle of a symmetric window would underestimate every other point)
        red, _ = sw.reduce(float(picks[np.argmax(np.abs(picks))]))
        sw.transmission_of(red, e_lat + sw.half_width * np.linspace(-0.9, 0.9, 16))
        t_model = time.perf_counter() - t0  # the model and its windowed resolvent
        t0 = time.perf_counter()
        sw.transmission_of(red, e_lat + sw.half_width * np.linspace(-0.95, 0.95, 64))
        per_energy = (time.perf_counter() - t0) / 64  # Dyson, Fisher-Lee, Kron per energy
        return Timing("spectral-field", per_energy, t_model)
    t0 = time.perf_counter()
    engine.field = picks
    sw = engine._spectral
    t_model = time.perf_counter() - t0
    energies = e_lat + sw.half_width * np.linspace(-0.9, 0.9, 16)
    t0 = time.perf_counter()
    sw.transmission(energies)
    return Timing("spectral-cut", t_model, (time.perf_counter() - t0) / (16 * len(picks)))


def estimate_cost(plan: StudyPlan, pre: Preflight, pending: list[WorkUnit]) -> CostEstimate:
    """Time of the pending units from a quick timing of the first unit's engine.

    Raises
    ------
    ringkit.ParameterError
        The probes cannot be coupled for a dephasing length (from the engine).
    """
    t_start = time.perf_counter()
    counts = unit_energy_counts(plan)
    first = plan.units[0]
    per_energy = {"coherent": _time_engine(plan, _with_l_phi(first, math.inf))}
    build = per_energy["coherent"].build  # the first timing builds the lattice
    if any(math.isfinite(d) for d in plan.l_phi_values):
        l_phi = next(d for d in plan.l_phi_values if math.isfinite(d))
        per_energy["dephased"] = _time_engine(plan, _with_l_phi(first, l_phi))
    # sweep.contacts: every energy is swept a second time for the conductance matrix of R
    sweeps = 2 if plan.config["sweep"]["contacts"] else 1
    unit_seconds = {}
    built: set = set()
    for u in plan.units:
        timing = per_energy["coherent" if math.isinf(u.l_phi) else "dephased"]
        seconds = sweeps * timing.unit_seconds(counts[u.fermi_energy], plan.field)
        seconds += timing.setup  # probe calibration and engine set-up of this unit
        lattice = (u.seed, u.fermi_energy)
        if lattice not in built:  # first unit of its realization and E_F builds the lattice
            built.add(lattice)
            seconds += build
        unit_seconds[u.uid] = seconds
    pend = sum(unit_seconds[u.uid] for u in pending)
    n_e = sweeps * sum(counts[u.fermi_energy] for u in pending)
    wall = pend / max(1, pre.workers)
    return CostEstimate(
        unit_seconds=unit_seconds,
        pending_seconds=pend,
        wall_seconds=wall,
        per_energy=per_energy,
        n_energies=n_e,
        timing_seconds=time.perf_counter() - t_start,
    )


def _with_l_phi(unit: WorkUnit, l_phi: float) -> WorkUnit:
    from dataclasses import replace

    return replace(unit, l_phi=l_phi)


def describe(plan: StudyPlan, pre: Preflight, cost: CostEstimate | None, n_pending: int) -> list:
    """Lines of the up-front estimate printed by ``ringkit study``."""
    n_probes = plan.config["dephasing"]["probes"]
    dephased = sum(1 for u in plan.units if math.isfinite(u.l_phi))
    lines = [
        f"work: {n_pending} of {len(plan.units)} units to compute; each sweeps "
        f"{len(plan.field)} field points at every energy of its thermal window"
        + (f"; {dephased} units with {n_probes} dephasing probes" if dephased else ""),
    ]
    if cost is not None:
        parts = []
        for kind, timing in cost.per_energy.items():
            parts.append(f"{kind} {timing.describe(len(plan.field))}")
        lines.append(
            f"cost: at least {cost.n_energies} energies ({'; '.join(parts)}; "
            f"timed on the first unit) = {human_time(cost.pending_seconds)} of CPU, about "
            f"{human_time(cost.wall_seconds)} on {pre.workers} worker(s) (the adaptive thermal "
            "average may add energies)"
        )
    avail = "unknown" if pre.available_bytes is None else human_bytes(pre.available_bytes)
    lines.append(
        f"memory: ~{human_bytes(pre.worker_bytes)} per worker (~{pre.n_sites:,} sites) x "
        f"{pre.workers} + {human_bytes(pre.parent_bytes)} for the results; available {avail}"
    )
    return lines


def check_confirmation(cost: CostEstimate, *, yes: bool, limit_minutes: float) -> None:
    """Raise :class:`CostError` when the estimate exceeds ``limit_minutes`` without ``yes``."""
    if yes or cost.wall_seconds <= 60.0 * limit_minutes:
        return
    raise CostError(
        f"this study is estimated at {human_time(cost.wall_seconds)} "
        f"({human_time(cost.pending_seconds)} of CPU), above the {limit_minutes:g} min "
        "confirmation limit; pass --yes to run it (finished units are checkpointed, Ctrl-C "
        "keeps them), or reduce the study"
    )


def check_workers_option(workers: Any) -> None:
    """``--workers`` must be a positive integer no larger than the schema's bound."""
    from ringkit.study.schema import SCHEMA

    high = int(SCHEMA["executor"][1]["workers"].high)
    if workers is not None and not 1 <= workers <= high:
        raise ParameterError("--workers", workers, f"must lie in [1, {high}]")
