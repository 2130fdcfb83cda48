"""Benchmark of multi-terminal conductance matrices: ms per field point, 2 versus 4 leads.

Run from the repository root (about 1-2 minutes on 2 cores)::

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_multiterminal.py

System: a ringkit ring (``RingGeometry.circular(380 nm, 500 nm)``, a = 10 nm: ~3 400 sites,
Anderson disorder W = t, E = 1.0 t) with two leads (angles pi - 0.5 and 0.5) or four leads
(pi - 0.5, 0.5, pi + 0.5, -0.5), all 100 nm (10 sites) wide; uniform field.

Methods, per field point (the full N x N conductance matrix in every case):
(i)   plain kwant: ``kwant.smatrix(fsyst, E, params)`` (all leads in and out, kwant's value
      functions evaluated at every field) and ``conductance_matrix()``;
(ii)  bare sparse direct solver: MUMPS numeric LU (AMD, symbolic analysis done beforehand) and
      the solve for the columns of all leads of the very same linear system, assembled in
      advance (not timed);
(iii) what ``multiterminal.conductance_matrices`` runs: ``FieldSweeper.conductance_matrix``
      (Schur complement onto the lead variables);
and, in flux-tube mode, the low-rank path over a 201-point sweep divided by 201 (one
factorization per energy). Medians of CPU time, best of interleaved rounds; the load average
before and after.
"""

from __future__ import annotations

import math
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import kwant  # noqa: E402

from ringkit.device import LeadSpec, Material, RingDevice, RingGeometry  # noqa: E402
from ringkit.tightbinding import build_ring  # noqa: E402
from ringkit.transport._engine_linsys import MumpsKernel  # noqa: E402
from ringkit.transport.fastsweep import FieldSweeper  # noqa: E402
from ringkit.transport.lowrank import FluxTubeSweeper  # noqa: E402
from ringkit.units import PHI0, hopping_energy  # noqa: E402

A = 10e-9
E_T = 1.0


def _device(n_leads: int, mode: str) -> RingDevice:
    t = hopping_energy(0.067, A)
    mat = Material(0.067, fermi_energy=0.2 * t, disorder_strength=1.0 * t)
    angles = [math.pi - 0.5, 0.5, math.pi + 0.5, -0.5][:n_leads]
    geo = RingGeometry.circular(380e-9, 500e-9, leads=[LeadSpec(a, 100e-9) for a in angles])
    return RingDevice(mat, geo, lattice_spacing=A, field_mode=mode)


def _cpu_ms(fn, values) -> float:
    out = []
    for v in values:
        c0 = time.process_time()
        fn(v)
        out.append(1e3 * (time.process_time() - c0))
    return statistics.median(out)


def _load() -> str:
    return "/".join(f"{x:.1f}" for x in os.getloadavg())


def bench(n_leads: int, rounds: int = 3) -> dict:
    ring = build_ring(_device(n_leads, "uniform"), seed=1)
    fs = ring.fsyst
    fields = np.linspace(0.01, 0.05, 6)  # T, a few h/e periods of this ring
    out = {"leads": n_leads, "sites": ring.n_sites, "load_before": _load()}
    sw = FieldSweeper(fs, field_param="B", energy=E_T)
    system = sw._system
    lu = MumpsKernel(system, "lu", "amd")
    rhs = np.asfortranarray(np.concatenate([system.lead_rhs(i) for i in range(n_leads)], axis=1))

    def bare(v):
        system.set_field(v)  # numpy update of the field entries (included: it is tiny)
        lu.factor()
        lu.solve(rhs)

    def naive(v):
        np.asarray(kwant.smatrix(fs, E_T, params=ring.params(B=v)).conductance_matrix())

    methods = {"naive": naive, "bare": bare, "ringkit": sw.conductance_matrix}
    best = {}
    for _ in range(rounds):
        for name, fn in methods.items():
            t = _cpu_ms(fn, fields)
            best[name] = min(best.get(name, np.inf), t)
    out.update(best)
    ref = np.asarray(kwant.smatrix(fs, E_T, params=ring.params(B=0.03)).conductance_matrix())
    out["max_dev"] = float(np.abs(sw.conductance_matrix(0.03) - ref).max())
    ring_f = build_ring(_device(n_leads, "flux_tube"), seed=1)
    fluxes = np.linspace(0, 3, 201) * PHI0
    c0 = time.process_time()
    FluxTubeSweeper(ring_f.fsyst, energy=E_T).conductance_matrix(fluxes)
    out["lowrank"] = 1e3 * (time.process_time() - c0) / fluxes.size
    out["load_after"] = _load()
    return out


def main() -> None:
    rows = [bench(n) for n in (2, 4)]
    lines = [
        "# Multi-terminal conductance matrices: CPU ms per field point",
        "",
        f"`OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}`, "
        f"kwant {kwant.__version__}; medians over 6 fields, best of 3 interleaved rounds.",
        "",
        "| leads | sites | plain kwant smatrix | bare MUMPS LU+solve | ringkit FieldSweeper | "
        "ringkit/kwant | ringkit/bare | low-rank flux tube (201 pts) | max abs dG vs kwant | "
        "load before/after |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['leads']} | {r['sites']} | {r['naive']:.1f} | {r['bare']:.1f} | "
            f"{r['ringkit']:.1f} | {r['ringkit'] / r['naive']:.2f} | "
            f"{r['ringkit'] / r['bare']:.2f} | {r['lowrank']:.2f} | {r['max_dev']:.1e} | "
            f"{r['load_before']} / {r['load_after']} |"
        )
    text = "\n".join(lines) + "\n"
    print(text)
    (HERE / "RESULTS-multiterminal.md").write_text(text)


if __name__ == "__main__":
    main()
