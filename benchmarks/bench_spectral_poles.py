"""Benchmark of the window evaluation of a pole-residue resolvent (``_spectral_poles``).

Run from the repository root (about a minute on 2 cores)::

    .venv/bin/python benchmarks/bench_spectral_poles.py

Options: ``--sizes 14 80 120 180`` (terminals b), ``--energies 400``, ``--repeats 5``,
``--output PATH`` (default ``benchmarks/RESULTS-spectral-poles.md``).

Models: a 100 x 100 square lattice (hopping t = 1, Anderson disorder W = 1.5 t from a fixed
seed, Peierls phases of a uniform field of 0.01 flux quanta per plaquette, so H is complex
Hermitian) with ``b`` terminal orbitals on its left and right edges. ringkit's block Lanczos on
``(H - mu)^-1`` (``_spectral_lanczos.BlockLanczos``, shift = window centre mu = 0.5 t) runs
until K = 20 b poles: a realistic pole set, dense near mu and sparse far from it. Window
half width 0.02 t, n_E energies spread uniformly over it.

Quantities (medians over repeats, BLAS limited to 1 thread as in the engine, wall time):

* ``direct``: ``ReducedResolvent.resolvent`` (the definition ``C diag(1/(E - p)) C^dag``) over
  the n_E energies, in chunks of <= 64 MB temporaries;
* ``setup``: ``WindowResolvent(poles, C, mu, half)`` (split, Chebyshev coefficients);
* ``eval``: its ``__call__`` on the same energies;
* ``ratio`` = direct / (setup + eval); ``max err``: max |fast - direct| over all elements and
  energies, beside the object's rigorous truncation bound ``error_bound`` (exact arithmetic),
  ``tol * scale`` and the rounding scale of the direct sum itself,
  ``rounding = eps * max_(E, i) sum_k |C_ik|^2 / |E - p_k|`` (near a pole this dominates).
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as sla

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from threadpoolctl import threadpool_info, threadpool_limits  # noqa: E402

from ringkit.transport._spectral_lanczos import BlockLanczos, ReducedResolvent  # noqa: E402
from ringkit.transport._spectral_poles import WindowResolvent  # noqa: E402

SIDE, DISORDER, FLUX, MU, HALF = 100, 1.5, 0.01, 0.5, 0.02
EPS = np.finfo(float).eps


def lattice() -> sp.csc_matrix:
    """Square lattice SIDE x SIDE, Landau-gauge Peierls phases, Anderson disorder (seed 7)."""
    n = SIDE * SIDE
    idx = np.arange(n).reshape(SIDE, SIDE)  # idx[x, y]
    rng = np.random.default_rng(7)
    rows, cols, vals = [], [], []
    # x bonds carry the phase exp(-2 pi i FLUX y) (Landau gauge), y bonds none
    y = np.arange(SIDE)
    ph = np.exp(-2j * np.pi * FLUX * y)
    rows.append(idx[1:, :].ravel())
    cols.append(idx[:-1, :].ravel())
    vals.append(-np.broadcast_to(ph, (SIDE - 1, SIDE)).ravel())
    rows.append(idx[:, 1:].ravel())
    cols.append(idx[:, :-1].ravel())
    vals.append(-np.ones(SIDE * (SIDE - 1), complex))
    r, c, v = (np.concatenate(x) for x in (rows, cols, vals))
    hop = sp.coo_matrix((v, (r, c)), shape=(n, n))
    onsite = sp.diags(rng.uniform(-DISORDER / 2, DISORDER / 2, n))
    return (hop + hop.conj().T + onsite).tocsc()


def model(h: sp.csc_matrix, b: int) -> ReducedResolvent:
    """Block Lanczos model with b edge terminals and K = 20 b poles."""
    n = h.shape[0]
    edge = np.concatenate([np.arange(SIDE), n - SIDE + np.arange(SIDE)])  # x = 0 and x = SIDE-1
    p = np.zeros((n, b), complex)
    p[edge[:b], np.arange(b)] = 1.0
    lu = sla.splu((h - MU * sp.identity(n, format="csc")).tocsc())
    lz = BlockLanczos(lambda x: lu.solve(np.asfortranarray(x)), p, MU)
    for _ in range(20):
        lz.step()
    return lz.model()


def direct(red: ReducedResolvent, e: np.ndarray) -> np.ndarray:
    b, k = red.weights.shape
    step = max(1, (64 << 20) // (16 * b * k))
    return np.concatenate([red.resolvent(e[a : a + step]) for a in range(0, e.size, step)])


def timed(fn, repeats: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[14, 80, 120, 180])
    ap.add_argument("--energies", type=int, default=400)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--output", default=str(HERE / "RESULTS-spectral-poles.md"))
    args = ap.parse_args()
    lines = []

    def say(s: str = "") -> None:
        print(s, flush=True)
        lines.append(s)

    say("# Window evaluation of the pole-residue resolvent (bench_spectral_poles.py)")
    say()
    say(f"- load average at start: {os.getloadavg()}")
    say(f"- python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}")
    h = lattice()
    rng = np.random.default_rng(11)
    e = np.sort(rng.uniform(MU - HALF, MU + HALF, args.energies))
    rows = []
    with threadpool_limits(1, user_api="blas"):
        for info in threadpool_info():
            keys = ("internal_api", "num_threads", "version")
            say("- BLAS: " + ", ".join(f"{k}={info.get(k)}" for k in keys))
        say(f"- lattice {SIDE}x{SIDE}, mu = {MU} t, half width = {HALF} t, n_E = {args.energies}")
        say(f"- medians of {args.repeats} repeats, wall time, 1 BLAS thread")
        say()
        for b in args.sizes:
            red = model(h, b)
            k = red.poles.size
            inside = int(np.sum(np.abs(red.poles - MU) <= HALF))
            near3 = int(np.sum(np.abs(red.poles - MU) <= 3 * HALF))
            t_dir, ref = timed(lambda red=red: direct(red, e), args.repeats)
            t_set, wr = timed(
                lambda red=red: WindowResolvent(red.poles, red.weights, MU, HALF), args.repeats
            )
            t_ev, got = timed(lambda wr=wr: wr(e), args.repeats)
            err = float(np.abs(got - ref).max())
            inv = 1.0 / np.abs(e[:, None] - red.poles[None, :])
            rnd = EPS * float(np.max(inv @ (np.abs(red.weights) ** 2).T))
            rows.append(
                f"| {b} | {k} | {inside} / {near3} | {wr.n_near} | {wr.order} | {wr.radius:.2f} "
                f"| {t_dir * 1e3:.1f} | {t_set * 1e3:.1f} | {t_ev * 1e3:.1f} "
                f"| {t_dir / (t_set + t_ev):.1f} | {t_dir / t_ev:.1f} | {err:.1e} "
                f"| {wr.error_bound:.1e} | {wr.tol * wr.scale:.1e} | {rnd:.1e} |"
            )
            print(rows[-1], flush=True)
    say(
        "| b | K | poles in window / within 3 half | near | order | radius | direct ms "
        "| setup ms | eval ms | ratio | ratio (eval) | max err | bound | tol*scale |"
    )
    say("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        say(r)
    say()
    say(f"- load average at end: {os.getloadavg()}")
    Path(args.output).write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
