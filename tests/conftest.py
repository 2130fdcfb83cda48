"""Shared pytest configuration.

Matplotlib is switched to the non-interactive Agg backend here (and only here), so unit tests do
not depend on a pre-set MPLBACKEND; notebook kernels and servers get an environment without
MPLBACKEND (see tests/test_notebooks.py).
"""

from __future__ import annotations

import os

import pytest

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
