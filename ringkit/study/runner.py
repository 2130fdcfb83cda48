"""Running a study: executors, progress bar, checkpointed resumable execution, outputs.

:func:`run_study` expands the study into work units, skips those already in the checkpoint,
runs the rest on the configured executor (local processes, this process, or a dask cluster)
with a tqdm progress bar, stores every finished unit at once, and finally writes the results
(netCDF), ``summary.json``, figures and the report. Ctrl-C or a killed process loses at most
the units that were running; running the same study into the same directory resumes.
Results do not depend on the executor, the number of workers or the completion order: every
unit is deterministic and the result is assembled by unit id.

API
---
run_study(config, out_dir, *, executor=None, progress=True, restart=False) -> StudyOutcome
StudyOutcome
open_executor(config, *, workers=None) -> context manager yielding an Executor or None
UnitFailed
"""

from __future__ import annotations

import time
from collections.abc import Callable
from concurrent.futures import (
    Executor,
    Future,
    as_completed,
)
from dataclasses import dataclass, replace
from pathlib import Path

from ringkit.study import compute, cost
from ringkit.study.checkpoint import Checkpoint, UnitResult
from ringkit.study.config import StudyConfig
from ringkit.study.executors import exclusive, open_executor
from ringkit.study.plan import StudyPlan, WorkUnit, make_plan
from ringkit.study.setup import StudySetup, check_setup

__all__ = ["run_study", "StudyOutcome", "open_executor", "UnitFailed", "OutputWriteError"]


class UnitFailed(RuntimeError):
    """One or more work units raised; finished units are kept in the checkpoint."""


class OutputWriteError(RuntimeError):
    """The final outputs could not be written; the checkpoint is complete (run again)."""


@dataclass(frozen=True)
class StudyOutcome:
    """What a study run produced.

    Attributes
    ----------
    out_dir : pathlib.Path
        Output directory.
    files : dict of str to pathlib.Path
        ``"results"`` (netCDF), ``"summary"`` (JSON), ``"report"`` and ``"figure:<name>"``.
    n_units, n_computed, n_reused : int
        Work units in the study, computed in this run, taken from the checkpoint.
    elapsed : float
        Wall-clock seconds of this run.
    """

    out_dir: Path
    files: dict[str, Path]
    n_units: int
    n_computed: int
    n_reused: int
    elapsed: float


def _describe_unit(plan: StudyPlan, unit: WorkUnit) -> str:
    from ringkit.study.quantities import format_quantity

    e = "material" if unit.fermi_energy is None else format_quantity(unit.fermi_energy, "energy")
    return (
        f"work unit {unit.uid} (disorder seed {unit.seed}, E_F = {e}, gate = "
        f"{format_quantity(unit.gate_potential, 'energy')}, "
        f"L_phi = {format_quantity(unit.l_phi, 'length')})"
    )


def _execute(
    plan: StudyPlan,
    pending: list[WorkUnit],
    executor: Executor | None,
    ckpt: Checkpoint,
    *,
    progress: bool,
    n_done: int,
    weights: dict[str, float] | None = None,
) -> None:
    """Compute ``pending`` units (in this process when ``executor`` is None), saving each.

    The progress bar counts work, not units: each unit advances it by its estimated cost
    (``weights``, seconds from :func:`ringkit.study.cost.estimate_cost`), so the ETA holds
    when units differ in cost (dephasing probes, more thermal energies).
    """
    tasks = compute.make_tasks(plan, pending)
    bar = _WorkBar(plan, pending, n_done, weights, progress)
    failures: list[str] = []
    with bar:
        if executor is None:
            for task in tasks:
                try:
                    result = compute.compute_unit(task)
                except Exception as err:  # reported with the unit; the others go on
                    failures.append(f"{_describe_unit(plan, task.unit)} failed: {err!r}")
                    bar.write(f"ringkit: {failures[-1]}")
                    continue
                ckpt.save(result)
                bar.done(task.unit.uid)
        else:
            _run_on(executor, plan, tasks, ckpt, bar, failures)
    if failures:
        raise UnitFailed(
            f"{len(failures)} of {len(pending)} work units failed; the first: {failures[0]}. "
            "Finished units are kept in the checkpoint; run the same command again to retry."
        )


class _WorkBar:
    """tqdm bar whose total is the estimated work (seconds) and whose postfix counts units."""

    def __init__(self, plan, pending, n_done: int, weights, progress: bool) -> None:
        from tqdm.auto import tqdm

        w = weights or {}
        self.weights = {u.uid: max(float(w.get(u.uid, 1.0)), 1e-3) for u in plan.units}
        pend = {u.uid for u in pending}
        total = sum(self.weights.values())
        done_w = sum(v for k, v in self.weights.items() if k not in pend)
        self.n_done, self.n_total = n_done, len(plan.units)
        self.total, self.work_done = total, done_w
        self.bar = tqdm(
            total=total,
            initial=done_w,
            desc=f"{plan.config['study']['name']}",
            disable=not progress,
            dynamic_ncols=True,
            bar_format="{desc}: {percentage:3.0f}%|{bar}| {postfix} [{elapsed}<{remaining}]",
        )
        self._postfix()

    def _postfix(self) -> None:
        self.bar.set_postfix_str(f"{self.n_done}/{self.n_total} units", refresh=False)

    def done(self, uid: str) -> None:
        self.n_done += 1
        self.work_done += self.weights[uid]
        self._postfix()
        self.bar.update(self.weights[uid])

    def write(self, text: str) -> None:
        self.bar.write(text)

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.bar.close()


def _run_on(
    executor: Executor,
    plan: StudyPlan,
    tasks: list[compute.UnitTask],
    ckpt: Checkpoint,
    bar: _WorkBar,
    failures: list[str],
) -> None:
    """Submit every task to ``executor``; save results as they complete.

    On any interruption (Ctrl-C, an error while saving) the pending futures are cancelled
    and the results that completed meanwhile are still saved before re-raising.
    """
    futures: dict[Future[UnitResult], WorkUnit] = {
        executor.submit(compute.compute_unit, t): t.unit for t in tasks
    }
    saved: set[str] = set()
    try:
        for fut in as_completed(futures):
            unit = futures[fut]
            err = fut.exception()
            if err is not None:
                failures.append(f"{_describe_unit(plan, unit)} failed: {err!r}")
                bar.write(f"ringkit: {failures[-1]}")
                continue
            ckpt.save(fut.result())
            saved.add(unit.uid)
            bar.done(unit.uid)
    except BaseException:
        for fut in futures:
            fut.cancel()
        for fut, unit in futures.items():  # keep what finished while we were interrupted
            if unit.uid not in saved and fut.done() and not fut.cancelled():
                if fut.exception() is None:
                    ckpt.save(fut.result())
        raise


def run_study(
    config: StudyConfig,
    out_dir: str | Path,
    *,
    executor: Executor | None = None,
    progress: bool = True,
    restart: bool = False,
    workers: int | None = None,
    echo: Callable[[str], None] | None = None,
    yes: bool = True,
    confirm_above: float = 30.0,
    oversubscribe: bool = False,
) -> StudyOutcome:
    """Run (or resume) a study and write its outputs into ``out_dir``.

    Before anything is computed: the memory, disk and worker checks of
    :func:`ringkit.study.cost.preflight` (no lattice built), every value of the study
    (:func:`ringkit.study.setup.check_setup`), the checkpoint (broken unit files are named and
    recomputed) and the cost estimate of :func:`ringkit.study.cost.estimate_cost`, all reported
    through ``echo``.

    Parameters
    ----------
    config : StudyConfig
        Validated study (see :func:`ringkit.study.load_config`).
    out_dir : path
        Output directory; created if needed. It holds the checkpoint, ``results.nc``,
        ``summary.json``, ``figures/`` and ``report.md`` (or ``report.html``).
    executor : concurrent.futures.Executor, optional
        Run the units here instead of the executor described by the study file.
    progress : bool
        Show a tqdm progress bar (text in a terminal, a widget in a notebook).
    restart : bool
        Discard an existing checkpoint in ``out_dir`` first.
    workers : int, optional
        Overrides ``executor.workers``; at most the number of cores unless ``oversubscribe``.
    echo : callable, optional
        Receives one-line status messages (e.g. ``print``).
    yes : bool
        Run even when the estimate exceeds ``confirm_above`` minutes (the library default;
        the command line asks for ``--yes``).
    confirm_above : float
        Minutes of estimated wall-clock time above which ``yes`` is required.
    oversubscribe : bool
        Allow more workers than cores.

    Returns
    -------
    StudyOutcome

    Raises
    ------
    ringkit.study.cost.CostError
        The study does not fit (memory, disk, workers) or needs ``yes``.
    ringkit.study.checkpoint.CheckpointMismatch
        ``out_dir`` holds a checkpoint of a different study.
    UnitFailed
        Some units raised (the others are kept).
    OutputWriteError
        The final outputs could not be written (the checkpoint is kept; run again).
    KeyboardInterrupt
        Propagated after cancelling pending work; finished units stay in the checkpoint.
    """
    t0 = time.perf_counter()
    say = echo or (lambda _msg: None)
    out = Path(out_dir)
    plan = make_plan(config)
    opts = _RunOptions(executor, progress, restart, workers, yes, confirm_above, oversubscribe)
    pre = cost.preflight(plan, workers=workers, oversubscribe=oversubscribe, out_dir=out)
    setup = check_setup(plan)  # every value is checked before any work starts
    for note in (*setup.notes, *pre.notes):
        say(note)
    out.mkdir(parents=True, exist_ok=True)
    with exclusive(out):
        return _run_locked(plan, setup, pre, out, opts, say, t0)


@dataclass(frozen=True)
class _RunOptions:
    executor: Executor | None
    progress: bool
    restart: bool
    workers: int | None
    yes: bool
    confirm_above: float
    oversubscribe: bool


def _run_locked(
    plan: StudyPlan,
    setup: StudySetup,
    pre: cost.Preflight,
    out: Path,
    opts: _RunOptions,
    say: Callable[[str], None],
    t0: float,
) -> StudyOutcome:
    """The part of :func:`run_study` done while holding the output-directory lock."""
    from ringkit.study import report

    config = plan.config
    ckpt = Checkpoint.open(out, plan, restart=opts.restart)
    results, broken = ckpt.load_done(plan.uids)
    for line in broken:
        say(line)
    pending = [u for u in plan.units if u.uid not in results]
    n_workers = max(1, min(pre.workers, len(pending) or 1))
    pre = replace(pre, workers=n_workers)
    say(
        f"study {config['study']['name']!r}: {len(plan.units)} work units "
        f"({setup.n_sites:,} sites, {len(plan.field)} field points); "
        f"{len(results)} from the checkpoint, {len(pending)} to compute"
    )
    estimate = None
    if pending:
        estimate = cost.estimate_cost(plan, pre, pending)
    for line in cost.describe(plan, pre, estimate, len(pending)):
        say(line)
    if estimate is not None:
        cost.check_confirmation(estimate, yes=opts.yes, limit_minutes=opts.confirm_above)
        weights = estimate.unit_seconds
        run = dict(progress=opts.progress, n_done=len(results), weights=weights)
        if opts.executor is not None or len(pending) == 1:
            _execute(plan, pending, opts.executor, ckpt, **run)
        else:
            with open_executor(config, workers=n_workers) as ex:
                _execute(plan, pending, ex, ckpt, **run)
        results.update({u.uid: ckpt.load(u.uid) for u in pending})
    try:
        files = report.write_outputs(plan, results, out, setup=setup)
    except OSError as err:
        raise OutputWriteError(
            f"could not write the outputs into {out} ({err.strerror or err}); all "
            f"{len(plan.units)} computed work units are kept in {out / 'checkpoint'}: free "
            "disk space (or fix the directory) and run the same command again, which writes "
            "the outputs without recomputing anything"
        ) from None
    return StudyOutcome(
        out_dir=out,
        files=files,
        n_units=len(plan.units),
        n_computed=len(pending),
        n_reused=len(plan.units) - len(pending),
        elapsed=time.perf_counter() - t0,
    )
