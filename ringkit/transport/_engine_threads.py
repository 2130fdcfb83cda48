"""Private: the number of BLAS threads used by the transport engine, chosen deliberately.

The engine is a sequential sparse factorization (MUMPS, linked to its own BLAS) plus small
dense numpy operations per field point (Schur blocks of ~100 x 100, conductance matrices,
Krylov bases). Multi-threaded OpenBLAS on matrices this small only adds thread start-up and
spin-waiting, which on a shared 2-core machine made a 30k-site uniform sweep 1.8x slower than
the bare factorization and a 120 x 120 dense solve take 123 ms (issue 11). Parallelism comes
from processes instead (ensembles, study units). So every public engine call runs with
``engine_threads()`` BLAS threads: 1 unless ``RINGKIT_ENGINE_THREADS`` says otherwise
(``0`` = leave the libraries' own setting). The limit is scoped to the call (threadpoolctl)
and restored afterwards, so user code around it keeps its settings.
"""

from __future__ import annotations

import contextlib
import functools
import os

__all__ = ["engine_threads", "blas_limit", "limited"]

_CONTROLLER: list = []


def engine_threads() -> int:
    """BLAS threads for engine calls (``RINGKIT_ENGINE_THREADS``, default 1; 0 = unchanged)."""
    raw = os.environ.get("RINGKIT_ENGINE_THREADS", "1").strip()
    try:
        n = int(raw)
    except ValueError:
        return 1
    return max(n, 0)


def blas_limit(n: int | None = None):
    """Context limiting BLAS to ``n`` threads (default :func:`engine_threads`)."""
    n = engine_threads() if n is None else int(n)
    if n <= 0:
        return contextlib.nullcontext()
    if not _CONTROLLER:
        from threadpoolctl import ThreadpoolController

        _CONTROLLER.append(ThreadpoolController())
    return _CONTROLLER[0].limit(limits=n, user_api="blas")


def limited(method):
    """Decorator: run ``method`` under :func:`blas_limit` (re-entrant, ~10 us per call)."""

    @functools.wraps(method)
    def wrapper(*args, **kwargs):
        with blas_limit():
            return method(*args, **kwargs)

    return wrapper
