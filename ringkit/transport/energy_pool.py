"""Energies of a thermal average evaluated in parallel worker processes.

One energy of a thermal average costs one sparse factorization plus the field sweep at that
energy (:meth:`at_energy` of a sweeper, then :meth:`conductance`). The adaptive policy of
:mod:`ringkit.thermal_policy` asks for its energies in rounds (every interval it refines in a
round at once), so the energies of a round are independent and are spread over worker
processes here. Each worker inherits the sweeper (field model, probes, symbolic analysis) from
the parent by ``fork``, so nothing is pickled but the energies and the result rows, and runs
every engine call with the engine's BLAS thread limit
(:mod:`ringkit.transport._engine_threads`, 1 thread by default). The values are those of the
serial loop (same code, same single-threaded BLAS, no reduction across processes); the tests
check equality to 1e-12.

Workers: ``workers`` argument, else ``RINGKIT_THERMAL_WORKERS`` (an integer >= 1), else the
number of usable cores capped at 4. Energy workers are only started by a top-level process
(never inside another pool's worker: ensembles and study units already use processes), only
where ``fork`` exists, and only when one energy costs more than ``MIN_SECONDS_PER_ENERGY``
(measured on the first energy; starting a worker costs a few tens of ms). Otherwise, the
energies are evaluated serially in the calling process.

Public API
----------
thermal_workers(workers=None) -> int
EnergyPool(sweeper, values, *, workers=None, min_seconds=MIN_SECONDS_PER_ENERGY)
    Callable ``pool(energies) -> rows`` (one row of ``sweeper.at_energy(E).conductance(values)``
    per energy); a context manager that shuts the workers down.
"""

from __future__ import annotations

import multiprocessing
import os
import time
import warnings

import numpy as np

from ringkit._validation import ParameterError

__all__ = ["MIN_SECONDS_PER_ENERGY", "EnergyPool", "thermal_workers"]

MIN_SECONDS_PER_ENERGY = 0.05
"""Below this cost per energy (s) the energies are evaluated serially (worker start-up ~30 ms)."""
_MAX_DEFAULT_WORKERS = 4

# the (sweeper, values) a forked worker evaluates; set by the parent right before the fork
_TASK: list = []


def thermal_workers(workers: int | None = None) -> int:
    """Number of energy workers: ``workers``, ``RINGKIT_THERMAL_WORKERS`` or the cores (<= 4).

    Raises ``ParameterError`` naming ``workers`` for a value below 1. Returns 1 inside a worker
    process of another pool (no nested pools) and where ``fork`` is unavailable.
    """
    if workers is None:
        raw = os.environ.get("RINGKIT_THERMAL_WORKERS", "").strip()
        if raw:
            try:
                workers = int(raw)
            except ValueError:
                raise ParameterError(
                    "RINGKIT_THERMAL_WORKERS", raw, "must be an integer >= 1"
                ) from None
        else:
            try:
                cores = len(os.sched_getaffinity(0))
            except AttributeError:  # pragma: no cover - not Linux
                cores = os.cpu_count() or 1
            workers = min(cores, _MAX_DEFAULT_WORKERS)
    if isinstance(workers, bool) or int(workers) != workers or int(workers) < 1:
        raise ParameterError("workers", workers, "must be an integer >= 1")
    if multiprocessing.parent_process() is not None:
        return 1
    if "fork" not in multiprocessing.get_all_start_methods():
        return 1  # pragma: no cover - not Linux
    return int(workers)


def _row(energy: float) -> tuple[np.ndarray, list]:
    sweeper, values = _TASK[0]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        sw = sweeper if energy == sweeper.energy else sweeper.at_energy(energy)
        row = np.asarray(sw.conductance(values), dtype=float)
    return row, [(w.category, str(w.message)) for w in caught]


class EnergyPool:
    """``pool(energies) -> rows``: ``sweeper.at_energy(E).conductance(values)`` per energy.

    Parameters
    ----------
    sweeper
        A sweeper with ``energy``, ``at_energy(E)`` and ``conductance(values)`` (e.g.
        :class:`ringkit.transport.lowrank.FluxTubeSweeper`,
        :class:`ringkit.transport.fastsweep.FieldSweeper`).
    values : array_like
        Field values of the sweep (units of the sweeper's field parameter).
    workers : int, optional
        See :func:`thermal_workers`.
    min_seconds : float
        Workers are started only if the first energy took longer than this (s).

    Attributes
    ----------
    workers : int
        Requested workers; ``used_workers`` the number actually started (1: serial).
    seconds_per_energy : float
        Wall time of the first energy (decides serial or parallel).
    """

    def __init__(
        self,
        sweeper,
        values,
        *,
        workers: int | None = None,
        min_seconds: float = MIN_SECONDS_PER_ENERGY,
    ):
        self.sweeper, self.values = sweeper, np.asarray(values, dtype=float)
        self.min_seconds = float(min_seconds)
        self.workers = thermal_workers(workers)
        self.used_workers = 1
        self.seconds_per_energy = float("nan")
        self._pool = None

    def __enter__(self) -> EnergyPool:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Stop the workers (if any were started)."""
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None
        _TASK.clear()

    def _serial(self, energies) -> list:
        _TASK[:] = [(self.sweeper, self.values)]
        return [_row(e) for e in energies]

    def __call__(self, energies) -> np.ndarray:
        energies = [float(e) for e in np.atleast_1d(energies)]
        rows: dict[float, tuple] = {}
        # the chemical potential (the caller's own sweeper) and the first energy, which is timed
        # to decide serial or parallel, are evaluated here
        here = [e for e in energies if e == self.sweeper.energy]
        if self._pool is None and self.seconds_per_energy != self.seconds_per_energy:
            first = next((e for e in energies if e not in here), None)
            if first is not None:
                t0 = time.perf_counter()
                rows[first] = self._serial([first])[0]
                self.seconds_per_energy = time.perf_counter() - t0
        for e in here:
            rows[e] = self._serial([e])[0]
        rest = [e for e in dict.fromkeys(energies) if e not in rows]
        parallel = self.workers > 1 and self.seconds_per_energy > self.min_seconds
        if len(rest) > 1 and parallel:
            if self._pool is None:
                _TASK[:] = [(self.sweeper, self.values)]
                self._pool = multiprocessing.get_context("fork").Pool(self.workers)
                self.used_workers = self.workers
            rows.update(zip(rest, self._pool.map(_row, rest, chunksize=1), strict=True))
        else:
            rows.update(zip(rest, self._serial(rest), strict=True))
        for e in dict.fromkeys(energies):
            for category, message in rows[e][1]:
                warnings.warn(message, category, stacklevel=2)
        return np.stack([rows[e][0] for e in energies])
