"""Block orthonormalisation with deflation used by the block Lanczos reduction
(ringkit.transport._spectral_lanczos; docs/engine.md section 9).

Reference: the singular value decomposition of numpy (LAPACK gesdd), a general-purpose
library independent of the code under test.
"""

from __future__ import annotations

import numpy as np
import pytest

from ringkit.transport._spectral_lanczos import _GRAM_MIN_COLUMNS, _orthonormal_basis


def _block(sig: np.ndarray, n: int = 3000, seed: int = 0, real: bool = False) -> np.ndarray:
    rng = np.random.default_rng(seed)
    k = sig.size
    shape = (n, k)
    u = rng.standard_normal(shape) + (0 if real else 1j * rng.standard_normal(shape))
    v = rng.standard_normal((k, k)) + (0 if real else 1j * rng.standard_normal((k, k)))
    u, _ = np.linalg.qr(u)
    v, _ = np.linalg.qr(v)
    return np.asfortranarray((u * sig) @ v.conj().T)


@pytest.mark.parametrize("real", [False, True])
@pytest.mark.parametrize("k", [8, _GRAM_MIN_COLUMNS, 60])
@pytest.mark.parametrize(
    "case",
    [
        "well conditioned",  # every direction kept
        "one invariant direction",  # a rounding-level direction: dropped
        "ill conditioned",  # a small but real direction above the threshold: kept
        "near the threshold",  # the Gram matrix cannot decide: pivoted QR decides
    ],
)
def test_basis_keeps_exactly_the_directions_above_the_threshold(case, k, real, monkeypatch):
    import scipy.linalg

    pivoted = []
    qr = scipy.linalg.qr
    monkeypatch.setattr(scipy.linalg, "qr", lambda *a, **kw: pivoted.append(1) or qr(*a, **kw))
    sig = np.logspace(0, -2, k)
    thr = 1e-10
    if case == "one invariant direction":
        sig[-1] = 1e-15
    elif case == "ill conditioned":
        sig[-1] = 3e-5
    elif case == "near the threshold":
        sig[-1] = 2e-9
    w = _block(sig, seed=k, real=real)
    q, b = _orthonormal_basis(w.copy(order="F"), thr)
    expected = int(np.sum(np.linalg.svd(w, compute_uv=False) > thr))  # numpy SVD reference
    assert b.shape == (expected, k) and q.shape == (w.shape[0], expected)
    assert np.allclose(q.conj().T @ q, np.eye(expected), atol=1e-13)  # orthonormal
    # w is reproduced up to the dropped directions (below the threshold)
    assert np.linalg.norm(w - q @ b, 2) <= 10 * thr
    assert np.isrealobj(q) == real
    # wide blocks whose directions the Gram matrix resolves take CholQR2, the rest pivoted QR
    gram = k >= _GRAM_MIN_COLUMNS and case in ("well conditioned", "ill conditioned")
    assert bool(pivoted) != gram
