"""Ensembles: executor independence, checkpoint/resume after a real kill, failure reports,
and the physics of ensemble averages (AAS h/2e survives, h/e shrinks ~ 1/sqrt(N))."""

from __future__ import annotations

import functools
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
from engine_systems import CrashTask, SlowTask, build_ring_for_seed

from ringkit.transport.checkpoint import CheckpointMismatchError
from ringkit.transport.ensemble import (
    EnsembleError,
    SerialExecutor,
    SweepTask,
    default_executor,
    run_ensemble,
)

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent


def _task(energy: float = 1.0, disorder: float = 1.0) -> SweepTask:
    build = functools.partial(
        build_ring_for_seed, r_out=10, r_in=6, lead_width=4, disorder=disorder, field_param="flux"
    )
    return SweepTask(build, np.linspace(0.0, 1.0, 6), energy, field_param="flux")


SEEDS = list(range(10))


@pytest.fixture(scope="module")
def reference():
    return run_ensemble(_task(), SEEDS, executor=SerialExecutor(), progress=False)


def test_identical_for_every_executor_worker_count_and_order(reference):
    task = _task()
    assert reference.values.shape == (10, 6)
    assert np.ptp(reference.values) > 0.05  # realizations really differ
    with default_executor(2) as ex:
        two = run_ensemble(task, SEEDS, executor=ex, chunk_size=1, progress=False)
    one = run_ensemble(task, SEEDS[::-1], max_workers=1, chunk_size=3, progress=False)
    assert np.array_equal(two.values, reference.values)
    assert np.array_equal(one.seeds, SEEDS[::-1])
    assert np.array_equal(one.values[::-1], reference.values)  # bit for bit


def test_dask_local_cluster_executor(reference):
    distributed = pytest.importorskip("distributed")
    with (
        distributed.LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            dashboard_address=None,
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        res = run_ensemble(
            _task(), SEEDS, executor=client.get_executor(pure=False), chunk_size=2, progress=False
        )
    assert np.array_equal(res.values, reference.values)


def test_progress_bar_reports(capsys):
    run_ensemble(_task(), [1, 2], executor=SerialExecutor(), progress=True)
    err = capsys.readouterr().err
    assert "realizations" in err and "100%" in err and "2/2" in err


def test_killed_run_resumes_without_loss_or_recomputation(tmp_path, reference):
    ckpt = tmp_path / "ckpt"
    script = tmp_path / "run.py"
    script.write_text(
        textwrap.dedent(f"""
        import functools, sys
        sys.path.insert(0, {str(TESTS)!r})
        import numpy as np
        from engine_systems import SlowTask, build_ring_for_seed
        from ringkit.transport.ensemble import SweepTask, run_ensemble
        if __name__ == "__main__":
            build = functools.partial(build_ring_for_seed, r_out=10, r_in=6, lead_width=4,
                                      disorder=1.0, field_param="flux")
            task = SlowTask(SweepTask(build, np.linspace(0.0, 1.0, 6), 1.0,
                                      field_param="flux"), 0.6)
            run_ensemble(task, list(range(10)), checkpoint={str(ckpt)!r}, chunk_size=1,
                         max_workers=2, progress=False)
    """)
    )
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(
        [sys.executable, str(script)],
        env=env,
        start_new_session=True,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        deadline = time.monotonic() + 120
        while len(list(ckpt.glob("chunk-*.npz"))) < 3:
            assert proc.poll() is None, "the run ended before it could be killed"
            assert time.monotonic() < deadline
            time.sleep(0.05)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the run, its forkserver and its workers
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    n_stored = len(list(ckpt.glob("chunk-*.npz")))
    assert 3 <= n_stored < 10
    task = SlowTask(_task(), 0.0)
    resumed = run_ensemble(task, SEEDS, executor=SerialExecutor(), checkpoint=ckpt, progress=False)
    assert len(resumed.computed_seeds) == 10 - n_stored  # nothing recomputed ...
    assert resumed.n == 10  # ... and nothing lost
    assert np.array_equal(resumed.values, reference.values)  # bit for bit
    again = run_ensemble(task, SEEDS, executor=SerialExecutor(), checkpoint=ckpt, progress=False)
    assert again.computed_seeds == ()


def test_checkpoint_of_other_task_is_refused(tmp_path):
    ckpt = tmp_path / "c"
    run_ensemble(_task(), [0, 1], executor=SerialExecutor(), checkpoint=ckpt, progress=False)
    with pytest.raises(CheckpointMismatchError, match="energy"):
        run_ensemble(
            _task(energy=1.2), [0, 1], executor=SerialExecutor(), checkpoint=ckpt, progress=False
        )
    with pytest.raises(CheckpointMismatchError, match="build"):
        run_ensemble(
            _task(disorder=2.0), [0], executor=SerialExecutor(), checkpoint=ckpt, progress=False
        )


def test_dead_worker_is_reported_and_finished_results_kept(tmp_path):
    ckpt = tmp_path / "c"
    task = CrashTask(_task(), bad_seed=3)
    with pytest.raises(EnsembleError) as info:
        run_ensemble(
            task, [0, 1, 2, 3, 4], checkpoint=ckpt, chunk_size=1, max_workers=1, progress=False
        )
    err = info.value
    assert 3 in [f.seed for f in err.failures]
    assert "seeds 3" in str(err) and "energy" in str(err) and "died" in str(err)
    assert err.partial is not None and {0, 1, 2} <= set(err.partial.seeds.tolist())
    kept = run_ensemble(
        _task(), [0, 1, 2], executor=SerialExecutor(), checkpoint=ckpt, progress=False
    )
    assert kept.computed_seeds == ()  # all three were checkpointed before the crash


def test_python_error_in_one_realization():
    task = CrashTask(_task(), bad_seed=2, python_error=True)
    with pytest.raises(EnsembleError, match="bad realization 2") as info:
        run_ensemble(task, [0, 1, 2, 3], executor=SerialExecutor(), chunk_size=4, progress=False)
    assert [f.seed for f in info.value.failures] == [2]
    assert "ValueError" in info.value.failures[0].details
    assert info.value.partial.seeds.tolist() == [0, 1, 3]


def test_to_dataset(reference):
    ds = reference.to_dataset("flux", np.linspace(0, 1, 6))
    assert ds["G"].dims == ("seed", "flux")
    assert ds.attrs["task_fingerprint"] == reference.fingerprint


@pytest.mark.slow
def test_ensemble_average_keeps_h2e_and_averages_out_h_over_e():
    # Disordered rings (6 sites wide, disorder 1.5t, E = 2t, 3 lead channels) threaded by a
    # flux tube, one period sampled at 16 points. Physics notes 9.1 and 9.4: the h/e term has a
    # sample-dependent sign, so the h/e amplitude of an average over n rings falls like
    # n^(-1/2); the AAS h/2e term has the same sign in every sample (conductance minimum at
    # zero flux: weak localization) and survives the average (Al'tshuler, Aronov, Spivak, JETP
    # Lett. 33, 94 (1981), from memory).
    build = functools.partial(
        build_ring_for_seed, r_out=14, r_in=8, lead_width=7, disorder=1.5, field_param="flux"
    )
    flux = np.arange(16) / 16
    res = run_ensemble(
        SweepTask(build, flux, 2.0, field_param="flux"), range(64), max_workers=2, progress=False
    )
    c = 2 * np.fft.rfft(res.values, axis=1).real / len(flux)  # cosine coefficients per ring
    n_total = len(c)
    c2 = c[:, 2].mean()
    se2 = c[:, 2].std(ddof=1) / np.sqrt(n_total)
    assert c2 < 0 and abs(c2) > 3 * se2  # h/2e survives with the AAS sign
    rms1 = np.sqrt(np.mean(c[:, 1] ** 2))
    assert abs(c[:, 1].mean()) < 3 * rms1 / np.sqrt(n_total)  # h/e of the full average
    assert abs(c2) > abs(c[:, 1].mean())
    sizes = np.array([1, 2, 4, 8, 16])
    amp = [
        np.sqrt(np.mean(c[: n_total // n * n, 1].reshape(-1, n).mean(axis=1) ** 2)) for n in sizes
    ]
    slope = np.polyfit(np.log(sizes), np.log(amp), 1)[0]
    # expected -1/2; the n = 16 point rests on 4 groups (rms error ~35 %): +-0.2
    assert slope == pytest.approx(-0.5, abs=0.2)


def test_sweep_task_docstring_example_runs():
    """The ``SweepTask`` docstring example (``functools.partial(build_ring, device)``, whose seed
    is keyword-only) is executed as a doctest; it raised TypeError before (issue 11)."""
    import doctest

    from ringkit.transport.ensemble import SweepTask

    finder = doctest.DocTestFinder(recurse=False)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS)
    tests = finder.find(SweepTask, "SweepTask", globs={"SweepTask": SweepTask})
    assert tests and tests[0].examples
    for t in tests:
        runner.run(t)
    assert runner.failures == 0 and runner.tries >= 5


def test_workers_run_blas_single_threaded(monkeypatch):
    """Inside a worker chunk BLAS is limited to the engine's thread count (default 1)."""
    from threadpoolctl import threadpool_info

    from ringkit.transport import ensemble

    monkeypatch.delenv("RINGKIT_ENGINE_THREADS", raising=False)
    seen = []

    def task(seed):
        seen.extend(i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas")
        return np.zeros(1)

    ensemble._run_chunk(task, [1])
    assert seen and set(seen) == {1}
