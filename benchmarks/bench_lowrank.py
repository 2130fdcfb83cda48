"""Benchmark of the low-rank flux-tube path: a 400-point flux sweep versus factorizations.

Run from the repository root (about 1-2 minutes on 2 cores)::

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_lowrank.py

Options: ``--sizes 3.3k 30k`` (default both), ``--points 400``, ``--repeats 9`` (timing rounds
at 3.3k; 30k uses ``max(3, repeats // 2)``), ``--output PATH`` (default
``benchmarks/RESULTS-lowrank.md``).

Systems (tests/lowrank_systems.py, plain kwant, independent of ringkit's builder): square-lattice
rings, outer/inner radius 50/38 (3 374 sites) and 150/114 (30 010 sites), Anderson disorder t
(hashed per site), leads 10 and 30 sites wide along -x/+x, branch cut above the hole, every
hopping a kwant value function of ``flux``; E = 0.5t (the rings of docs/engine.md).

Quantities (medians over interleaved rounds; CPU = process time, the machine is shared):

* ``F``: one sparse factorization of ``A = E - H - Sigma`` - MUMPS symbolic analysis + numeric
  LU with AMD ordering (the cheapest ordering here, docs/engine.md §2.2), the unit of cost;
* ``setup``: ``FluxTubeSweeper(model, energy=E)`` for a new energy with a fresh analysis (lead
  self-energies, assembly, factorization, Green's-function block of the cut and lead orbitals);
* ``sweep``: ``sweeper.transmission(fluxes)`` for the 400 fluxes (vectorised small solves);
* ``kwant``: the straightforward script, ``kwant.smatrix(fsyst, E, params={"flux": f})`` per flux
  (value functions evaluated by kwant, default solver options), median over a few fluxes;
* ``model``: ``FluxTubeModel(fsyst)`` - three evaluations of kwant's Hamiltonian to find the
  cut bonds; once per system and parameter set (shared by all energies), shown separately; with
  only the cut bonds as value functions (as ringkit's builder does) one evaluation plus the cut
  bonds.
"""

from __future__ import annotations

import argparse
import functools
import os
import platform
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))
sys.path.insert(0, str(HERE.parent))

import kwant  # noqa: E402
import scipy  # noqa: E402
from kwant.linalg import mumps  # noqa: E402
from lowrank_systems import flux_tube_ring, ring_sites_near  # noqa: E402

from ringkit.transport._lowrank_linalg import Factorization  # noqa: E402
from ringkit.transport.lowrank import FluxTubeModel, FluxTubeSweeper  # noqa: E402
from ringkit.units import PHI0  # noqa: E402

SIZES = {"3.3k": (50.0, 38.0, 10), "30k": (150.0, 114.0, 30)}
ENERGY = 0.5


def timed(fn, repeats: int) -> tuple[float, float, object]:
    """Median CPU and wall time (s) of ``fn()`` over ``repeats`` calls, and the last result."""
    cpu, wall, out = [], [], None
    for _ in range(repeats):
        c0, w0 = time.process_time(), time.perf_counter()
        out = fn()
        cpu.append(time.process_time() - c0)
        wall.append(time.perf_counter() - w0)
    return statistics.median(cpu), statistics.median(wall), out


def machine() -> dict[str, str]:
    cpu = "?"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = "?"
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal"):
                mem = f"{int(line.split()[1]) / 2**20:.1f} GiB"
    except OSError:
        pass
    return {
        "cpu": cpu,
        "cores": str(os.cpu_count()),
        "memory": mem,
        "os": platform.platform(),
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "kwant": kwant.__version__,
        "mumps orderings": ", ".join(mumps.possible_orderings()),
        "OPENBLAS_NUM_THREADS": os.environ.get("OPENBLAS_NUM_THREADS", "(unset)"),
    }


def load() -> str:
    return " ".join(f"{x:.1f}" for x in os.getloadavg())


def bench_size(label: str, n_points: int, repeats: int) -> dict:
    r_out, r_in, lw = SIZES[label]
    fsyst = flux_tube_ring(r_out, r_in, lead_width=lw, disorder=1.0, seed=0)
    fluxes = np.linspace(0.0, 2.0, n_points, endpoint=False) * PHI0
    res: dict = {"label": label, "sites": len(fsyst.sites), "load_before": load()}
    res["model_cpu"], res["model_wall"], model = timed(lambda: FluxTubeModel(fsyst), 1)
    res["entries"] = model.cut.n_entries
    cut_only = flux_tube_ring(
        r_out, r_in, lead_width=lw, disorder=1.0, seed=0, value_functions="cut"
    )
    res["model_cut_cpu"], _, _ = timed(lambda: FluxTubeModel(cut_only), 3)

    def fresh_setup():
        model._lu = Factorization()  # forget the symbolic analysis: count it in the setup
        return FluxTubeSweeper(model, energy=ENERGY)

    sweeper = fresh_setup()
    res["channels"] = sweeper.n_channels
    a = model._pattern.matrix(sweeper._data_ref)

    def factorize():
        ctx = mumps.MUMPSContext()
        ctx.factor(a, ordering="amd")
        return ctx

    def kwant_point(k):
        return kwant.smatrix(fsyst, ENERGY, params={"flux": fluxes[k]}).transmission(1, 0)

    # interleaved rounds, so that a change of the machine load hits all parts of a round alike;
    # the headline ratios are medians of the per-round ratios
    n_kwant = repeats if label == "3.3k" else 3
    picks = np.linspace(0, n_points - 1, n_kwant).astype(int)
    keys = ("fact", "setup", "sweep", "kwant")
    cpu = {k: [] for k in keys}
    wall = {k: [] for k in keys}
    tot_f, pp_f, speed, errs = [], [], [], []
    t_sweep = None

    def record(key, fn):
        c, w, out = timed(fn, 1)
        cpu[key].append(c)
        wall[key].append(w)
        return out

    for r in range(repeats):
        record("fact", factorize)
        sweeper = record("setup", fresh_setup)
        t_sweep = record("sweep", functools.partial(sweeper.transmission, fluxes))
        if r < n_kwant:
            errs.append(
                abs(record("kwant", functools.partial(kwant_point, picks[r])) - t_sweep[picks[r]])
            )
        per = cpu["sweep"][-1] / n_points
        tot_f.append((cpu["setup"][-1] + cpu["sweep"][-1]) / cpu["fact"][-1])
        pp_f.append(per / cpu["fact"][-1])
        if r < n_kwant:
            speed.append(cpu["kwant"][-1] / per)
    for key in keys:
        res[f"{key}_cpu"] = statistics.median(cpu[key])
        res[f"{key}_wall"] = statistics.median(wall[key])
    res["ratio_total_f"] = statistics.median(tot_f)
    res["ratio_total_f_range"] = (min(tot_f), max(tot_f))
    res["ratio_pp_f"] = statistics.median(pp_f)
    res["ratio_speed"] = statistics.median(speed)
    res["setup_reuse_cpu"], _, _ = timed(lambda: FluxTubeSweeper(model, energy=ENERGY), repeats)
    ctx = factorize()
    res["fact_numeric_cpu"], _, _ = timed(
        lambda: ctx.factor(a, ordering="amd", reuse_analysis=True), repeats
    )
    res["fallbacks"] = sweeper.n_fallback
    res["max_err"] = max(errs)
    res["onsager"] = float(np.max(np.abs(sweeper.transmission(-fluxes) - t_sweep)))
    res["period"] = float(np.max(np.abs(sweeper.transmission(fluxes + PHI0) - t_sweep)))
    if label == "3.3k":  # 20 dephasing probes: full 22-terminal conductance matrix
        sites = ring_sites_near(fsyst, np.linspace(0.15, 2 * np.pi - 0.15, 20), 44.0)
        pmodel = FluxTubeModel(fsyst, probe_sites=sites, probe_eta=0.2)
        psw = FluxTubeSweeper(pmodel, energy=ENERGY)
        res["probe_cpu"], _, _ = timed(lambda: psw.conductance_matrix(fluxes), repeats)
    res["load_after"] = load()
    return res


def ratios(r: dict) -> dict:
    n = r["n_points"]
    return {
        "per_point_ms": 1e3 * r["sweep_cpu"] / n,
        "per_point_over_F": r["ratio_pp_f"],
        "total_over_F": r["ratio_total_f"],
        "speedup": r["ratio_speed"],
        "speedup_incl_setup": r["kwant_cpu"] * n / (r["setup_cpu"] + r["sweep_cpu"]),
    }


def markdown(results: list[dict], info: dict, args) -> str:
    lines = [
        "# Low-rank flux-tube path: benchmark",
        "",
        "Written by `benchmarks/bench_lowrank.py` (command: `OPENBLAS_NUM_THREADS=1 "
        f".venv/bin/python benchmarks/bench_lowrank.py --points {args.points} "
        f"--repeats {args.repeats}`), {time.strftime('%Y-%m-%d %H:%M %Z')}.",
        "",
        "The machine is shared with other jobs: all times are medians of CPU (process) time over "
        "the repeats, wall-clock medians in brackets; the load average (1, 5, 15 min) is given "
        "before and after each size. The parts are timed in interleaved rounds (F, setup, sweep, "
        "one kwant point) and the ratios in bold are medians of the per-round ratios. "
        "F = one sparse factorization of E - H - Sigma (MUMPS analysis + numeric LU, AMD "
        "ordering), the unit of the targets of issue 8.",
        "",
        "## Machine",
        "",
    ]
    lines += [f"- {k}: {v}" for k, v in info.items()]
    lines += [
        "",
        "## Results (E = 0.5t, disorder t, flux sweep over two periods)",
        "",
        "| quantity | " + " | ".join(f"{r['label']} ({r['sites']} sites)" for r in results) + " |",
        "|---|" + "---|" * len(results),
    ]

    def row(name, fn):
        lines.append(f"| {name} | " + " | ".join(fn(r) for r in results) + " |")

    row("cut entries / lead channels", lambda r: f"{r['entries']} / {r['channels']}")
    row("F: factorization, ms", lambda r: f"{1e3 * r['fact_cpu']:.1f} [{1e3 * r['fact_wall']:.1f}]")
    row("numeric LU alone (analysis reused), ms", lambda r: f"{1e3 * r['fact_numeric_cpu']:.1f}")
    row(
        "setup per energy (fresh analysis), ms",
        lambda r: f"{1e3 * r['setup_cpu']:.1f} [{1e3 * r['setup_wall']:.1f}]",
    )
    row("setup per energy (analysis reused), ms", lambda r: f"{1e3 * r['setup_reuse_cpu']:.1f}")
    row(
        f"{results[0]['n_points']}-point sweep, ms",
        lambda r: f"{1e3 * r['sweep_cpu']:.1f} [{1e3 * r['sweep_wall']:.1f}]",
    )
    row("per flux point, ms", lambda r: f"{r['ratios']['per_point_ms']:.4f}")
    row(
        "**per point / F** (target <= 1 %)",
        lambda r: f"**{100 * r['ratios']['per_point_over_F']:.2f} %**",
    )
    row(
        "**(setup + sweep) / F** (target < 3; min-max over rounds)",
        lambda r: (
            f"**{r['ratios']['total_over_F']:.2f}** "
            f"({r['ratio_total_f_range'][0]:.2f}-{r['ratio_total_f_range'][1]:.2f})"
        ),
    )
    row(
        "straightforward kwant script per point, ms",
        lambda r: f"{1e3 * r['kwant_cpu']:.1f} [{1e3 * r['kwant_wall']:.1f}]",
    )
    row("**speed-up per point vs kwant**", lambda r: f"**{r['ratios']['speedup']:.0f}x**")
    row("speed-up incl. setup (whole sweep)", lambda r: f"{r['ratios']['speedup_incl_setup']:.0f}x")
    row(
        "model preparation (3 H evaluations, once per system), ms",
        lambda r: f"{1e3 * r['model_cpu']:.0f} [{1e3 * r['model_wall']:.0f}]",
    )
    row(
        "model preparation, only the cut bonds as value functions, ms",
        lambda r: f"{1e3 * r['model_cut_cpu']:.0f}",
    )
    row("max abs(T - T_kwant) on sampled fluxes", lambda r: f"{r['max_err']:.1e}")
    row("max abs(T(-flux) - T(flux))", lambda r: f"{r['onsager']:.1e}")
    row("max abs(T(flux + h/e) - T(flux))", lambda r: f"{r['period']:.1e}")
    row("points solved directly (fallback)", lambda r: str(r["fallbacks"]))
    row(
        "22-terminal conductance matrix (20 probes), ms per point",
        lambda r: f"{1e3 * r['probe_cpu'] / r['n_points']:.4f}" if "probe_cpu" in r else "-",
    )
    row("load average before / after", lambda r: f"{r['load_before']} / {r['load_after']}")
    lines += [
        "",
        "Notes:",
        "",
        "- The targets count the per-energy work: setup (with its own symbolic analysis) plus the "
        "sweep. The model preparation evaluates kwant's value functions three times; it is paid "
        "once per system and parameter set and shared by every energy of a thermal average, and "
        "it costs about as much as three calls of the kwant script (one evaluation of the "
        "Hamiltonian plus the cut bonds when only the cut bonds are value functions).",
        "- A point is solved directly (fresh sparse LU) only when the estimated rounding error "
        "of its small solve exceeds the tolerance; the fallback count is reported above.",
        "",
    ]
    return "\n".join(lines)


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", nargs="+", default=list(SIZES), choices=list(SIZES))
    p.add_argument("--points", type=int, default=400)
    p.add_argument("--repeats", type=int, default=9)
    p.add_argument("--output", default=str(HERE / "RESULTS-lowrank.md"))
    args = p.parse_args(argv)
    info = machine()
    results = []
    for label in args.sizes:
        reps = args.repeats if label == "3.3k" else max(3, args.repeats // 2)
        r = bench_size(label, args.points, reps)
        r["n_points"] = args.points
        r["ratios"] = ratios(r)
        results.append(r)
        q = r["ratios"]
        print(
            f"{label:>5} {r['sites']} sites: F {1e3 * r['fact_cpu']:.1f} ms, setup "
            f"{1e3 * r['setup_cpu']:.1f} ms, sweep {1e3 * r['sweep_cpu']:.1f} ms "
            f"({q['per_point_ms']:.4f} ms/point = {100 * q['per_point_over_F']:.2f} % of F), "
            f"total {q['total_over_F']:.2f} F, kwant {1e3 * r['kwant_cpu']:.1f} ms/point -> "
            f"{q['speedup']:.0f}x per point; max err {r['max_err']:.1e}; "
            f"load {r['load_before']} -> {r['load_after']}",
            flush=True,
        )
    Path(args.output).write_text(markdown(results, info, args))
    print(f"wrote {args.output}")


if __name__ == "__main__":
    main()
