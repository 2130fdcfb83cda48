"""Shared pytest configuration.

Matplotlib is switched to the non-interactive Agg backend here (and only here), so unit tests do
not depend on a pre-set MPLBACKEND; notebook kernels and servers get an environment without
MPLBACKEND (see tests/test_notebooks.py).
"""

from __future__ import annotations

import os

# Single-threaded BLAS for the whole suite (set before numpy is imported): on a loaded 2-core
# machine multi-threaded OpenBLAS makes small dense solves up to 400x slower.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import pytest  # noqa: E402

os.environ.pop("MPLBACKEND", None)
try:  # matplotlib is a core dependency, but keep the import failure readable
    import matplotlib

    matplotlib.use("Agg", force=True)
except ImportError:  # pragma: no cover
    pass


@pytest.fixture(autouse=True)
def _single_threaded_blas(monkeypatch):
    """Keep BLAS single-threaded in subprocesses started by tests (2-core machine)."""
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", os.environ.get("OPENBLAS_NUM_THREADS", "1"))
