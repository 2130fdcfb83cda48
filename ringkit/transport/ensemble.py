"""Disorder ensembles on any ``concurrent.futures.Executor``, chunked and checkpointed.

A *task* is a picklable callable ``task(seed) -> array`` (one realization, e.g. G over a field
sweep); :class:`SweepTask` is the ready-made one for ring sweeps. :func:`run_ensemble` cuts the
seeds into chunks (several realizations per submitted job, so a job lasts long enough to
amortize the scheduling overhead: ~0.1 ms per job for a process pool, 3-5 ms for dask), submits
them with ``executor.submit`` only and consumes ``concurrent.futures.as_completed``. That works
with the default local process pool, ``dask.distributed`` (``client.get_executor(pure=False)``
-- pure=False matters: dask would otherwise merge identical submissions), MPI/loky executors or
:class:`SerialExecutor`. Results are returned in the order of the seeds given, so they are
identical for every executor, worker count and completion order.

With ``checkpoint=path`` every finished chunk is written to disk at once; a run that was killed
resumes from there without recomputing a stored realization, and its result equals that of an
uninterrupted run bit for bit. A failing realization is reported with its seed and the task
parameters (:class:`EnsembleError`); the finished ones are kept (and checkpointed).

Public API
----------
run_ensemble, SweepTask, EnsembleResult, EnsembleError, TaskFailure, SerialExecutor
"""

from __future__ import annotations

import concurrent.futures as cf
import functools
import hashlib
import inspect
import math
import multiprocessing
import os
import traceback
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

import numpy as np

from ringkit._validation import ParameterError
from ringkit.transport._engine_threads import blas_limit
from ringkit.transport.checkpoint import Checkpoint, task_fingerprint

__all__ = [
    "run_ensemble",
    "SweepTask",
    "EnsembleResult",
    "EnsembleError",
    "TaskFailure",
    "SerialExecutor",
    "default_executor",
]


@dataclass(frozen=True)
class TaskFailure:
    """One realization that did not finish."""

    seed: int
    message: str
    parameters: dict = field(default_factory=dict)
    details: str = ""


@dataclass(frozen=True, eq=False)
class EnsembleResult:
    """Results of an ensemble run, in the order of ``seeds``.

    Attributes
    ----------
    seeds : ndarray of int
    values : ndarray, shape (n_seeds, ...)
        One row per realization (e.g. G in e^2/h over the field values).
    description : dict
        Task description (parameters) and ``fingerprint`` its SHA-256.
    computed_seeds : tuple of int
        Seeds computed in this call (the others came from the checkpoint).
    """

    seeds: np.ndarray
    values: np.ndarray
    description: dict
    fingerprint: str
    computed_seeds: tuple[int, ...] = ()

    @property
    def n(self) -> int:
        return len(self.seeds)

    def mean(self) -> np.ndarray:
        """Ensemble average over realizations."""
        return self.values.mean(axis=0)

    def var(self) -> np.ndarray:
        """Unbiased ensemble variance over realizations."""
        return self.values.var(axis=0, ddof=1)

    def to_dataset(self, dim: str = "B", coords=None, name: str = "G"):
        """xarray Dataset with ``name`` on (``seed``, ``dim``) and the description as attrs."""
        import xarray as xr

        dims = ("seed", dim) if self.values.ndim == 2 else ("seed",)
        da = xr.DataArray(self.values, dims=dims, coords={"seed": self.seeds})
        if coords is not None and self.values.ndim == 2:
            da = da.assign_coords({dim: np.asarray(coords)})
        attrs = {"task_fingerprint": self.fingerprint, "task_description": repr(self.description)}
        return xr.Dataset({name: da}, attrs=attrs)


class EnsembleError(RuntimeError):
    """Some realizations failed; ``failures`` names them, ``partial`` holds the finished ones."""

    def __init__(
        self, failures: list[TaskFailure], partial: EnsembleResult | None, description: dict
    ) -> None:
        self.failures = failures
        self.partial = partial
        self.description = description
        seeds = ", ".join(str(f.seed) for f in failures[:20])
        more = "" if len(failures) <= 20 else f" (+{len(failures) - 20} more)"
        first = failures[0].message if failures else ""
        done = 0 if partial is None else partial.n
        super().__init__(
            f"{len(failures)} realization(s) failed: seeds {seeds}{more}; first error: {first}; "
            f"task parameters: {description}; {done} finished realization(s) kept"
        )


class SerialExecutor(cf.Executor):
    """Runs every submitted call at once in this process (debugging, notebooks, tests)."""

    def submit(self, fn, /, *args, **kwargs):
        fut: cf.Future = cf.Future()
        try:
            fut.set_result(fn(*args, **kwargs))
        except BaseException as err:  # forwarded to the future, as a pool does
            fut.set_exception(err)
        return fut


def default_executor(max_workers: int | None = None) -> cf.ProcessPoolExecutor:
    """Local process pool sized to the machine (``os.cpu_count()``).

    Uses the forkserver start method where available (fork is unsafe once threads exist; spawn
    elsewhere), with kwant and the engine preloaded in the server so that every worker starts
    without re-importing them. Tasks must be importable (module-level), as for any process
    pool.
    """
    n = max_workers or os.cpu_count() or 1
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["ringkit.transport.fastsweep", "ringkit.transport.ensemble"])
    else:  # pragma: no cover - non-POSIX
        ctx = multiprocessing.get_context("spawn")
    return cf.ProcessPoolExecutor(max_workers=n, mp_context=ctx)


def _run_chunk(task, seeds: list[int]) -> list[tuple[int, bool, object]]:
    """Worker side: run ``task`` for each seed, catching Python errors per realization.

    BLAS runs with the engine's thread count (one thread unless ``RINGKIT_ENGINE_THREADS``
    says otherwise): the workers are the parallelism, and two workers each starting
    multi-threaded BLAS on two cores gave 0.76-1.04x the throughput of one (issue 11).
    """
    out = []
    with blas_limit():
        for s in seeds:
            try:
                out.append((s, True, np.asarray(task(s), dtype=float)))
            except Exception as err:  # reported per seed; the others continue
                out.append((s, False, f"{type(err).__name__}: {err}\n{traceback.format_exc()}"))
    return out


def _check_seeds(seeds: Iterable[int]) -> list[int]:
    out = []
    for s in seeds:
        if isinstance(s, (bool, np.bool_)) or not isinstance(s, (int, np.integer)):
            raise ParameterError("seeds", s, "must be integers")
        out.append(int(s))
    if len(set(out)) != len(out):
        raise ParameterError("seeds", "list", "must not repeat a seed")
    if not out:
        raise ParameterError("seeds", out, "must not be empty")
    return out


def run_ensemble(
    task: Callable[[int], np.ndarray],
    seeds: Iterable[int],
    *,
    executor: cf.Executor | None = None,
    checkpoint=None,
    progress: bool = True,
    chunk_size: int | None = None,
    max_workers: int | None = None,
) -> EnsembleResult:
    """Run ``task(seed)`` for every seed on an executor; results in the order of ``seeds``.

    Parameters
    ----------
    task : callable
        Picklable ``task(seed) -> array`` of a fixed shape (float). A ``describe()`` method,
        if present, provides the parameters stored in the checkpoint and in error reports.
    seeds : iterable of int
        Distinct disorder seeds.
    executor : concurrent.futures.Executor, optional
        Any executor (only ``submit`` is used). Default: a local process pool with
        ``max_workers`` (default ``os.cpu_count()``) processes, shut down afterwards. For dask
        pass ``client.get_executor(pure=False)``.
    checkpoint : str or Path, optional
        Directory for the incremental checkpoint (see :mod:`ringkit.transport.checkpoint`).
    progress : bool
        Show a tqdm.auto progress bar (text in a terminal, widget in a notebook).
    chunk_size : int, optional
        Realizations per submitted job; default ``ceil(n / (4 workers))`` so each worker gets
        about four jobs (choose it so a job lasts >= ~0.5 s on dask).
    max_workers : int, optional
        Size of the default process pool.

    Returns
    -------
    EnsembleResult

    Raises
    ------
    EnsembleError
        If some realizations failed (Python error or a dead worker process); the message names
        their seeds and the task parameters; ``.partial`` holds the finished ones, which are
        also in the checkpoint.
    CheckpointMismatchError
        If ``checkpoint`` holds results of another task.
    """
    from tqdm.auto import tqdm

    seeds = _check_seeds(seeds)
    description, fingerprint = task_fingerprint(task)
    store = Checkpoint(checkpoint, description, fingerprint) if checkpoint is not None else None
    done: dict[int, np.ndarray] = {}
    if store is not None:
        stored = store.load()
        done = {s: stored[s] for s in seeds if s in stored}
    todo = [s for s in seeds if s not in done]
    own = executor is None and bool(todo)
    if own:
        executor = default_executor(max_workers)
    n_workers = max_workers or getattr(executor, "_max_workers", None) or os.cpu_count() or 1
    if chunk_size is None:
        chunk_size = max(1, math.ceil(len(todo) / (4 * n_workers)))
    elif int(chunk_size) < 1:
        raise ParameterError("chunk_size", chunk_size, "must be >= 1")
    chunk_size = int(chunk_size)
    chunks = [todo[i : i + chunk_size] for i in range(0, len(todo), chunk_size)]
    failures: list[TaskFailure] = []
    computed: list[int] = []
    bar = tqdm(
        total=len(seeds), initial=len(done), disable=not progress, desc="realizations", unit="real"
    )
    try:
        futures = {executor.submit(_run_chunk, task, chunk): chunk for chunk in chunks}
        for fut in cf.as_completed(futures):
            chunk = futures[fut]
            try:
                rows = fut.result()
            except BaseException as err:  # e.g. BrokenProcessPool, a lost worker
                if isinstance(err, KeyboardInterrupt):
                    raise
                msg = f"worker process failed or died ({type(err).__name__}: {err})"
                failures += [TaskFailure(s, msg, description) for s in chunk]
                bar.update(len(chunk))
                continue
            good = [(s, r) for s, ok, r in rows if ok]
            for s, ok, r in rows:
                if not ok:
                    first = str(r).splitlines()[0] if r else ""
                    failures.append(TaskFailure(s, first, description, str(r)))
            if good:
                if store is not None:
                    store.save([s for s, _ in good], np.stack([r for _, r in good]))
                for s, r in good:
                    done[s] = r
                    computed.append(s)
            bar.update(len(chunk))
    finally:
        bar.close()
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
    finished = [s for s in seeds if s in done]
    partial = None
    if finished:
        shapes = {np.shape(done[s]) for s in finished}
        if len(shapes) != 1:
            raise ParameterError("task", "results", f"must all have one shape, got {shapes}")
        partial = EnsembleResult(
            np.array(finished, dtype=np.int64),
            np.stack([np.asarray(done[s]) for s in finished]),
            description,
            fingerprint,
            tuple(s for s in seeds if s in set(computed)),
        )
    if failures:
        order = {s: k for k, s in enumerate(seeds)}
        failures.sort(key=lambda f: order[f.seed])
        raise EnsembleError(failures, partial, description)
    return partial


def _describe_callable(fn) -> object:
    if isinstance(fn, functools.partial):
        return {
            "function": _describe_callable(fn.func),
            "args": [repr(a) for a in fn.args],
            "kwargs": {k: repr(v) for k, v in sorted(fn.keywords.items())},
        }
    mod = getattr(fn, "__module__", None)
    name = getattr(fn, "__qualname__", None)
    return f"{mod}.{name}" if mod and name else repr(fn)


def _call_build(build: Callable, seed: int):
    """``build(seed=seed)`` if the builder takes a ``seed`` keyword, else ``build(seed)``."""
    try:
        par = inspect.signature(build).parameters.get("seed")
    except (TypeError, ValueError):  # no introspectable signature
        par = None
    if par is not None and par.kind in (par.KEYWORD_ONLY, par.POSITIONAL_OR_KEYWORD):
        return build(seed=seed)
    return build(seed)


@dataclass(frozen=True, eq=False)
class SweepTask:
    """One disorder realization of a field sweep: ``build(seed)`` -> conductance over values.

    Parameters
    ----------
    build : callable
        Picklable builder returning a finalized kwant system or an object with an ``fsyst``
        attribute. It is called as ``build(seed=seed)`` when it takes a ``seed`` keyword
        (e.g. ``functools.partial(ringkit.tightbinding.build_ring, device)``, whose seed is
        keyword-only), else as ``build(seed)``.
    values : sequence of float
        Field values (units of ``field_param``).
    energy : float
        Energy in the units of the system Hamiltonian (for ringkit rings: units of the hopping
        t above the band bottom, ``E_F / device.hopping``).
    field_param : str
        kwant field parameter name.
    params : dict, optional
        Other kwant parameters.
    probes : callable, optional
        ``probes(fsyst) -> DephasingProbes`` (picklable), for dephasing. The task returns G
        only; for ringkit rings use :class:`ringkit.transport.amplitude_stats.
        RingAmplitudeTask`, whose rows also carry the L_phi the probes realise on each
        realization (probes calibrated per device, docs/probes.md "Realised L_phi").
    method : str
        FieldSweeper method.

    Examples
    --------
    >>> import functools
    >>> import numpy as np
    >>> from ringkit.device import Material, RingDevice, RingGeometry
    >>> from ringkit.tightbinding import build_ring
    >>> geometry = RingGeometry.from_mean_radius(150e-9, 60e-9)
    >>> device = RingDevice(Material.preset("GaAs", mean_free_path=3e-7), geometry)
    >>> task = SweepTask(
    ...     functools.partial(build_ring, device),
    ...     np.linspace(0.0, 0.05, 4),
    ...     energy=device.material.fermi_energy_J / device.hopping,
    ... )
    >>> g = task(3)  # G [e^2/h per spin] of disorder seed 3 at the four fields
    >>> g.shape, bool(np.all((g >= 0) & (g <= 50)))
    ((4,), True)
    """

    build: Callable
    values: tuple
    energy: float
    field_param: str = "B"
    params: dict | None = None
    probes: Callable | None = None
    method: str = "schur"

    def __post_init__(self) -> None:
        vals = np.asarray(self.values, dtype=float)
        if vals.ndim != 1 or not np.all(np.isfinite(vals)):
            raise ParameterError("values", self.values, "must be a 1D sequence of finite numbers")
        object.__setattr__(self, "values", tuple(vals.tolist()))

    def __call__(self, seed: int) -> np.ndarray:
        from ringkit.transport.fastsweep import FieldSweeper

        obj = _call_build(self.build, seed)
        fsyst = getattr(obj, "fsyst", obj)
        probes = self.probes(fsyst) if self.probes is not None else None
        sw = FieldSweeper(
            fsyst,
            field_param=self.field_param,
            params=self.params,
            energy=self.energy,
            probes=probes,
            method=self.method,
        )
        return sw.conductance(np.asarray(self.values))

    def describe(self) -> dict:
        vals = np.asarray(self.values, dtype=float)
        return {
            "task": "ringkit.transport.ensemble.SweepTask",
            "build": _describe_callable(self.build),
            "field_param": self.field_param,
            "n_values": len(vals),
            "values_sha256": hashlib.sha256(vals.tobytes()).hexdigest(),
            "values_range": [repr(float(vals.min())), repr(float(vals.max()))],
            "energy": repr(float(self.energy)),
            "params": {k: repr(v) for k, v in sorted((self.params or {}).items())},
            "probes": None if self.probes is None else _describe_callable(self.probes),
            "method": self.method,
        }
