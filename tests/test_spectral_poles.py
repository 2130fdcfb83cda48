"""Window evaluation of a pole-residue resolvent (ringkit.transport._spectral_poles).

References, each named beside its check:
* the definition, the direct sum ``C diag(1/(E - p)) C^dag`` (``ReducedResolvent.resolvent``);
* independent: for a Hermitian ``H = U diag(lam) U^dag`` (numpy.linalg.eigh, or built from a
  chosen spectrum) and an orthonormal block ``P``, ``C = P^dag U`` gives
  ``C diag(1/(E - lam)) C^dag = P^dag (E - H)^-1 P``, computed by numpy.linalg.solve;
* the stated truncation bound ``error_bound`` (Chebyshev generating function, see the module),
  checked to hold and to be attained within a factor 1000 when truncation dominates rounding.
"""

from __future__ import annotations

import numpy as np
import pytest

import ringkit.transport._spectral_poles as spp
from ringkit._validation import ParameterError
from ringkit.transport._spectral_lanczos import ReducedResolvent
from ringkit.transport._spectral_poles import WindowResolvent

EPS = np.finfo(float).eps
MU, HALF = 0.1, 0.02


def _orthonormal(rng, n, b, real=False):
    x = rng.normal(size=(n, b)) + (0 if real else 1j * rng.normal(size=(n, b)))
    return np.linalg.qr(x)[0]


def _random_hermitian(rng, n, real=False):
    x = rng.normal(size=(n, n)) + (0 if real else 1j * rng.normal(size=(n, n)))
    return (x + x.conj().T) / np.sqrt(8 * n)  # semicircle spectrum on [-1, 1]


def _case(seed, n, b, real=False):
    rng = np.random.default_rng(seed)
    h = _random_hermitian(rng, n, real)
    lam, u = np.linalg.eigh(h)
    p = _orthonormal(rng, n, b, real)
    return h, p, lam, p.conj().T @ u


def _rounding(lam, c, e):
    """``eps * max_i sum_k |C_ik|^2 / |E - p_k|`` per energy: the rounding scale of the sum."""
    return EPS * np.max((1.0 / np.abs(e[:, None] - lam[None, :])) @ (np.abs(c) ** 2).T, axis=1)


def _check_against_definition(w, lam, c, e, slack=64.0):
    got = w(e)
    ref = ReducedResolvent(lam, c, 0).resolvent(e)
    err = np.abs(got - ref).max(axis=(1, 2))
    allowed = w.error_bound + slack * _rounding(lam, c, e)
    assert np.all(err <= allowed), float(np.max(err / allowed))
    return float(err.max())


def _solve_reference(h, p, energies):
    n = h.shape[0]
    return np.array([p.conj().T @ np.linalg.solve(en * np.eye(n) - h, p) for en in energies])


@pytest.mark.parametrize("b", [1, 120])
def test_matches_definition_and_solve(b):
    h, p, lam, c = _case(1 + b, 700, b)
    w = WindowResolvent(lam, c, MU, HALF)
    assert 0 < w.n_near < lam.size and w.order >= 1  # both parts are exercised
    assert w.error_bound <= w.tol * w.scale
    e = np.concatenate([np.linspace(MU - HALF, MU + HALF, 201), [MU - HALF, MU + HALF]])
    _check_against_definition(w, lam, c, e)
    # independent reference: P^dag (E - H)^-1 P by a dense solve (error ~ eps |g| cond)
    few = np.array([MU - HALF, MU - 0.37 * HALF, MU + 0.61 * HALF, MU + HALF])
    ref = _solve_reference(h, p, few)
    gap = np.min(np.abs(few[:, None] - lam[None, :]), axis=1)
    err = np.abs(w(few) - ref).max(axis=(1, 2))
    assert np.all(err <= 1e-10 * w.scale * (1 + HALF / gap) ** 2)


@pytest.mark.parametrize("tol", [1e-5, 1e-8, 1e-11])
def test_truncation_bound_holds_and_is_not_loose(tol):
    # loose tolerances: the truncation error dominates rounding, so the bound is tested itself
    h, p, lam, c = _case(5, 500, 6)
    w = WindowResolvent(lam, c, MU, HALF, tol=tol)
    assert w.order >= 1
    assert w.error_bound <= tol * w.scale
    e = np.linspace(MU - HALF, MU + HALF, 801)
    err = _check_against_definition(w, lam, c, e)
    assert err >= 1e-3 * w.error_bound  # the bound is a real estimate, not a vacuous one


def test_poles_at_the_window_edge_and_energy_on_a_pole():
    # chosen spectrum: poles just inside/outside both edges and inside the window
    rng = np.random.default_rng(9)
    n, b = 400, 12
    edge = MU + HALF * np.array([-1 - 1e-9, -1 + 1e-9, 1 - 1e-7, 1 + 1e-7, 1 + 1e-3, 1.05, 0.3])
    lam = np.sort(np.concatenate([rng.uniform(-1.0, 1.0, n - edge.size), edge]))
    u = np.linalg.qr(rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n)))[0]
    h = (u * lam) @ u.conj().T
    p = _orthonormal(rng, n, b)
    c = p.conj().T @ u
    w = WindowResolvent(lam, c, MU, HALF)
    assert w.radius > 1.0
    e = np.concatenate([np.linspace(MU - HALF, MU + HALF, 301), edge[np.abs(edge - MU) < HALF]])
    e = np.concatenate([e, [MU - HALF, MU + HALF, edge[-1] + 1e-6]])
    ok = np.min(np.abs(e[:, None] - lam[None, :]), axis=1) > 0  # exactly on a pole: below
    _check_against_definition(w, lam, c, e[ok])
    few = np.array([MU + HALF, MU - 0.5 * HALF, edge[-1] + 1e-6])
    gap = np.min(np.abs(few[:, None] - lam[None, :]), axis=1)
    err = np.abs(w(few) - _solve_reference(h, p, few)).max(axis=(1, 2))
    assert np.all(err <= 1e-10 * w.scale * (1 + HALF / gap) ** 2)
    # an energy exactly on a pole: stepped off by a relative 1e-13, as ReducedResolvent does
    on = np.array([edge[-1], edge[1]])
    got, ref = w(on), ReducedResolvent(lam, c, 0).resolvent(on)
    assert np.all(np.isfinite(got))
    assert np.abs(got - ref).max() <= 1e-12 * np.abs(ref).max()
    assert np.abs(ref).max() > 1e10  # the pole's residue over the step dominates


def test_real_weights_give_real_values():
    h, p, lam, c = _case(3, 500, 8, real=True)
    w = WindowResolvent(lam, c, MU, HALF)
    e = np.linspace(MU - HALF, MU + HALF, 101)
    assert w(e).dtype == np.float64
    _check_against_definition(w, lam, c, e)


def test_small_chunks_and_uncached_near_products(monkeypatch):
    h, p, lam, c = _case(4, 500, 10)
    e = np.linspace(MU - HALF, MU + HALF, 97)
    big = WindowResolvent(lam, c, MU, HALF)(e)
    monkeypatch.setattr(spp, "_CHUNK_BYTES", 16 * 10 * 10 * 7)  # 7 energies, 1-2 poles a chunk
    w = WindowResolvent(lam, c, MU, HALF)
    assert w._near_tri is None
    small = w(e)
    assert np.abs(small - big).max() <= 1e-13 * w.scale
    _check_against_definition(w, lam, c, e)


def test_no_poles_and_all_near():
    w = WindowResolvent(np.zeros(0), np.zeros((3, 0), complex), MU, HALF)
    assert w(np.array([MU])).shape == (1, 3, 3) and not np.any(w(np.array([MU])))
    # few poles: the cost model sums them all exactly
    lam = np.array([MU, MU + 3 * HALF, -2.0])
    c = np.arange(6.0).reshape(2, 3) + 1j
    w = WindowResolvent(lam, c, MU, HALF)
    e = np.array([MU + 0.5 * HALF])
    assert np.allclose(w(e), ReducedResolvent(lam, c, 0).resolvent(e), rtol=1e-14, atol=0)


def test_out_of_window_energies_raise():
    h, p, lam, c = _case(2, 400, 3)
    w = WindowResolvent(lam, c, MU, HALF)
    with pytest.raises(ParameterError, match="energies"):
        w(np.array([MU, MU + HALF * 1.001]))
    with pytest.raises(ParameterError, match="energies"):
        w(np.array([np.nan]))
    with pytest.raises(ParameterError, match="half"):
        WindowResolvent(lam, c, MU, 0.0)
    with pytest.raises(ParameterError, match="weights"):
        WindowResolvent(lam, c[:, :-1], MU, HALF)
