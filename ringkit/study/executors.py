"""Where the work units of a study run: local processes, this process, or a dask cluster.

Also the exclusive lock on an output directory. Used by :mod:`ringkit.study.runner`.

API
---
open_executor(config, *, workers=None) -> context manager yielding an Executor or None
exclusive(out_dir) -> context manager holding the output-directory lock
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import threading
import time
from collections.abc import Iterator
from concurrent.futures import Executor, InvalidStateError, ProcessPoolExecutor
from pathlib import Path

from ringkit.study import cost
from ringkit.study.checkpoint import CheckpointMismatch
from ringkit.study.config import ConfigError, StudyConfig

__all__ = ["open_executor", "exclusive"]


@contextlib.contextmanager
def open_executor(config: StudyConfig, *, workers: int | None = None) -> Iterator[Executor | None]:
    """Executor described by the ``[executor]`` section (``None`` = run in this process).

    Parameters
    ----------
    config : StudyConfig
        Validated study; ``executor.kind`` is ``"process"``, ``"serial"`` or ``"dask"``.
    workers : int, optional
        Overrides ``executor.workers`` (default: number of CPUs).

    Notes
    -----
    ``"dask"`` connects a ``dask.distributed.Client`` to ``executor.address`` (or starts a
    local cluster) and uses ``client.get_executor(pure=False)``; ``pure=False`` matters, since
    dask would otherwise merge tasks with equal arguments.
    """
    ex = config["executor"]
    n = workers or ex["workers"] or cost.cpu_count()
    kind = ex["kind"]
    if kind == "serial":
        yield None
    elif kind == "process":
        pool = ProcessPoolExecutor(
            max_workers=n,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=_worker_init,
            initargs=(os.getpid(),),
        )
        previous_hook = threading.excepthook
        try:
            yield pool
        except BaseException:
            threading.excepthook = _quiet_cancelled_future_hook(previous_hook)
            _terminate_workers(pool)
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
            threading.excepthook = previous_hook
    elif kind == "dask":
        with _dask_executor(ex["address"], n) as dex:
            yield dex
    else:  # pragma: no cover - the schema allows only the kinds above
        raise ConfigError(f"executor.kind = {kind!r} is not supported")


def _worker_init(parent_pid: int) -> None:
    """Worker set-up: ignore Ctrl-C (the parent stops the pool) and die with the parent.

    A killed parent must not leave workers behind: on Linux the kernel delivers SIGKILL when
    the parent exits (``prctl(PR_SET_PDEATHSIG)``); elsewhere a watchdog thread notices that
    the worker was re-parented.
    """
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    with contextlib.suppress(Exception):  # Linux only
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    if os.getppid() != parent_pid:  # the parent died before we got here
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(1.0)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="ringkit-parent-watch", daemon=True).start()


def _quiet_cancelled_future_hook(previous):
    """Thread excepthook that drops the executor's InvalidStateError after a forced stop.

    When the workers are terminated after Ctrl-C, CPython 3.11's pool management thread marks
    the pool broken and tries to set an exception on futures that were already cancelled,
    raising ``InvalidStateError`` in that thread (a traceback on stderr, nothing else). The
    finished units are already saved; every other thread exception still goes to ``previous``.
    """

    def hook(args) -> None:
        if args.exc_type is not None and issubclass(args.exc_type, InvalidStateError):
            return
        previous(args)

    return hook


def _terminate_workers(pool: ProcessPoolExecutor) -> None:
    """Stop the pool's worker processes at once (after Ctrl-C or an error)."""
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        with contextlib.suppress(Exception):
            proc.terminate()


@contextlib.contextmanager
def exclusive(out_dir: Path) -> Iterator[None]:
    """Hold an exclusive lock on ``out_dir`` (two runs must not share a checkpoint).

    The lock is an ``flock`` on ``out_dir/.ringkit-lock``; the kernel releases it when the
    process ends in any way, so a killed run never leaves a stale lock. No-op where ``fcntl``
    is unavailable.
    """
    try:
        import fcntl
    except ImportError:  # pragma: no cover - non-POSIX
        yield
        return
    with open(out_dir / ".ringkit-lock", "a+") as fh:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise CheckpointMismatch(
                f"{out_dir} is in use by another ringkit run; wait for it or choose another --out"
            ) from None
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


@contextlib.contextmanager
def _dask_executor(address: str | None, n_workers: int) -> Iterator[Executor]:
    try:
        from distributed import Client, LocalCluster
    except ImportError as err:
        raise ConfigError(
            'executor.kind = "dask" needs dask.distributed: pip install "ringkit[dask]"'
        ) from err
    if address:
        try:
            client = Client(address, timeout="10s")
        except (OSError, TimeoutError) as err:
            raise ConfigError(
                f'executor.address = "{address}": cannot reach the dask scheduler ({err})'
            ) from None
        with client:
            yield client.get_executor(pure=False)
    else:
        with (
            LocalCluster(
                n_workers=n_workers,
                threads_per_worker=1,
                processes=True,
                dashboard_address=":0",  # a free port: never clashes with another run
                host="127.0.0.1",
            ) as cluster,
            Client(cluster) as client,
        ):
            yield client.get_executor(pure=False)
