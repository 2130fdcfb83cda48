"""Cost of one study work unit with dephasing probes against the coherent unit (issue 11, pt 6).

Target: the dephased unit costs at most 2x the coherent unit at the same energies, with flat
memory (peak <= 1 GB per worker). Device: the issue's ring (GaAs preset, density 3e11 cm^-2,
mean radius 0.5 um, 120 nm arms, default lattice: 28 626 sites), flux-tube mode, 201 flux points
over -3..3 h/e (``--start``/``--stop`` for another window, e.g. one without repeated phases),
100 probes, L_phi = 1 um. Cases, each in a fresh process (so the per-process L_phi
calibration is paid, as in the first unit of a lattice):

* ``coherent``: the current ``ringkit.study.compute`` without probes (reference of the target);
* ``dephased``: the current code with probes;
* ``dephased@REV`` / ``coherent@REV``: the same, with the ``ringkit`` package of git revision
  ``--rev`` (default: the commit before the Schur/unitarity-checked probe path), unpacked
  with ``git archive`` into a temporary folder and put first on ``sys.path``.

Energies: ``--energies N`` fixed energies over the 0.3 K Fermi window (default 37, the issue's
count), so every case does the same physics work; ``--policy`` instead runs the unit with the
thermal policy of the study (0.3 K, tol 1e-4 e^2/h) and reports the number of energies each
case needed. Per case: wall and CPU seconds of the unit (``time.process_time``; the machine is
shared, so the CPU ratio is the robust figure), the engine set-up (calibration of the realised
L_phi, model) and the per-energy part, peak RSS (``getrusage``), and the breakdown of the CPU
time by stage (model builds, calibration, factorization + inverse block, channel amplitudes,
Kron reduction). Thread settings (threadpoolctl inside the unit) and load averages are printed.
Medians over ``--repeat`` interleaved runs; ``--write`` writes ``benchmarks/RESULTS-study.md``
(a ``--policy`` run is appended to it).

Run from the repository root::

    .venv/bin/python benchmarks/bench_study.py [--energies 37] [--repeat 3] [--policy] [--write]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BEFORE_REV = "388716a"  # last commit before the Schur / unitarity-checked probe path

STUDY = """
[material]
preset = "GaAs"
density = "3e11 cm^-2"
mobility = "1e6 cm^2/Vs"
[geometry]
radius = "500 nm"
width = "120 nm"
[field]
mode = "flux_tube"
start = "{start} h/e"
stop = "{stop} h/e"
points = 201
[sweep]
temperature = "0.3 K"
l_phi = "{l_phi}"
[dephasing]
probes = 100
"""

CHILD = r"""
import json, resource, sys, time, types
import numpy as np
import ringkit
from ringkit.study import make_plan, parse_config
from ringkit.study import compute as C
from ringkit.units import K_B

l_phi, n_e, study = sys.argv[1], int(sys.argv[2]), sys.argv[3]
plan = make_plan(parse_config(study.replace("{l_phi}", l_phi)))
STAGES = {}


def timed(owner, name, stage):
    fn = getattr(owner, name)

    def wrapper(*a, **k):
        t = time.process_time()
        try:
            return fn(*a, **k)
        finally:
            STAGES[stage] = STAGES.get(stage, 0.0) + time.process_time() - t

    setattr(owner, name, wrapper)


import ringkit.transport.fastsweep as FS
import ringkit.transport.lowrank as LR
import ringkit.transport.realised_l_phi as RL

timed(LR.FluxTubeModel, "__init__", "model build")
timed(LR.FluxTubeModel, "with_probes", "model build")
timed(RL, "realised_ring_probes", "L_phi calibration")
timed(LR.FluxTubeSweeper, "_factorize", "factorization + inverse block")
timed(LR.FluxTubeSweeper, "transmission_matrix", "channel amplitudes (all pairs)")
timed(LR.FluxTubeSweeper, "transmission", "channel amplitudes (lead pair)")
timed(FS, "kron_reduce", "Kron reduction (probe solve)")
C.kron_reduce = FS.kron_reduce
if n_e > 0:
    def fixed_average(ring, temperature, thermal, g_at):
        mu, kt = ring.fermi_energy, K_B * 0.3
        es = mu + np.linspace(-4 * kt, 4 * kt, n_e)
        w = 1 / np.cosh((es - mu) / (2 * kt)) ** 2
        w /= w.sum()
        value = sum(wk * g_at(float(e)) for e, wk in zip(es, w))
        return types.SimpleNamespace(value=value, n_energies=n_e, error=0.0)

    C.thermal_average = fixed_average
setup = {}
init = C.UnitEngine.__init__


def engine_init(self, *a, **k):
    t, w = time.process_time(), time.perf_counter()
    init(self, *a, **k)
    setup["cpu"], setup["wall"] = time.process_time() - t, time.perf_counter() - w


C.UnitEngine.__init__ = engine_init
task = C.make_tasks(plan, [plan.units[0]])[0]
C.state_for(task)  # the lattice (shared by every unit of a realization) is not timed
threads = {}


def blas_limit(n):
    ctx = C_blas_limit(n)
    from threadpoolctl import threadpool_info

    class Ctx:
        def __enter__(self):
            ctx.__enter__()
            threads.update({p["internal_api"]: p["num_threads"] for p in threadpool_info()})

        def __exit__(self, *e):
            return ctx.__exit__(*e)

    return Ctx()


C_blas_limit, C.blas_limit = C.blas_limit, blas_limit
t0, w0 = time.process_time(), time.perf_counter()
res = C.compute_unit(task)
cpu, wall = time.process_time() - t0, time.perf_counter() - w0
rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"wall": wall, "cpu": cpu, "setup_cpu": setup["cpu"],
                  "setup_wall": setup["wall"], "rss_mb": rss, "sites": res.info["n_sites"],
                  "n_energies": res.info["n_energies_total"], "stages": STAGES,
                  "threads": threads, "g": res.conductance[0].tolist(),
                  "package": ringkit.__file__}))
"""


def run_case(l_phi: str, n_e: int, pythonpath: str | None, study: str = STUDY) -> dict:
    env = dict(os.environ)
    if pythonpath:
        env["PYTHONPATH"] = pythonpath
    p = subprocess.run(  # cwd outside the repository: "import ringkit" is the chosen package
        [sys.executable, "-c", CHILD, l_phi, str(n_e), study],
        capture_output=True,
        text=True,
        env=env,
        cwd=tempfile.gettempdir(),
        check=False,
    )
    if p.returncode:
        raise SystemExit(f"{l_phi}: {p.stderr[-3000:]}")
    return json.loads(p.stdout.strip().splitlines()[-1])


def _fmt_stages(r: dict) -> str:
    st = sorted(r["stages"].items(), key=lambda kv: -kv[1])
    return "; ".join(f"{k} {v:.2f}" for k, v in st if v >= 0.005)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--energies", type=int, default=37)
    ap.add_argument("--policy", action="store_true", help="thermal policy instead of N energies")
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--rev", default=BEFORE_REV, help="git revision of the 'before' cases")
    ap.add_argument("--no-before", action="store_true", help="skip the @REV cases")
    ap.add_argument("--start", default="-3", help="flux window start, h/e (default -3)")
    ap.add_argument("--stop", default="3", help="flux window stop, h/e (default 3)")
    ap.add_argument("--write", action="store_true")
    args = ap.parse_args()
    study = STUDY.replace("{start}", args.start).replace("{stop}", args.stop)
    n_e = 0 if args.policy else args.energies
    tmp = tempfile.TemporaryDirectory(prefix="ringkit_before_")
    cases = [("coherent", "inf", None), ("dephased", "1 um", None)]
    if not args.no_before:
        archive = subprocess.run(
            ["git", "archive", args.rev, "ringkit"], capture_output=True, check=True, cwd=ROOT
        ).stdout
        subprocess.run(["tar", "-x", "-C", tmp.name], input=archive, check=True)
        cases += [
            (f"coherent@{args.rev}", "inf", tmp.name),
            (f"dephased@{args.rev}", "1 um", tmp.name),
        ]
    load_before = os.getloadavg()
    res: dict[str, list[dict]] = {name: [] for name, _, _ in cases}
    for _ in range(args.repeat):
        for name, l_phi, path in cases:
            r = run_case(l_phi, n_e, path, study)
            res[name].append(r)
            print(
                f"{name:18s} wall {r['wall']:6.1f} s  CPU {r['cpu']:6.1f} s  set-up CPU "
                f"{r['setup_cpu']:5.1f} s  energies {r['n_energies']:4d}  peak RSS "
                f"{r['rss_mb']:5.0f} MB  load {os.getloadavg()[0]:.1f}  [{r['package']}]",
                flush=True,
            )
    load_after = os.getloadavg()
    tmp.cleanup()
    med = {
        k: {q: statistics.median(r[q] for r in v) for q in ("wall", "cpu", "setup_cpu")}
        for k, v in res.items()
    }
    for k, v in res.items():
        n = v[0]["n_energies"]
        med[k]["per_energy"] = statistics.median((r["cpu"] - r["setup_cpu"]) / n for r in v)
    rss = {k: max(r["rss_mb"] for r in v) for k, v in res.items()}
    first = res["dephased"][0]
    sites, threads = first["sites"], first["threads"]
    thread_text = ", ".join(f"{k} {v}" for k, v in sorted(threads.items())) or "none found"
    env_text = ", ".join(
        f"{k}={os.environ.get(k, 'unset')}"
        for k in ("RINGKIT_ENGINE_THREADS", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")
    )
    coh, dep = med["coherent"], med["dephased"]
    energies = (
        "the study's thermal policy (0.3 K, tol 1e-4 e^2/h)"
        if args.policy
        else f"{args.energies} fixed energies over the 0.3 K window"
    )
    lines = [
        "# Study work unit with dephasing probes against the coherent unit (issue 11, pt 6)",
        "",
        f"`benchmarks/bench_study.py{' --policy' if args.policy else ''}`, "
        f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; ring of {sites:,} sites "
        "(GaAs, 3e11 cm^-2, r = 0.5 um, 120 nm arms), flux-tube mode, 201 flux points over "
        f"{args.start}..{args.stop} h/e, {energies}, 100 probes, L_phi = 1 um "
        "(realised-L_phi calibration included: "
        "every case runs in a fresh process). BLAS threads inside the unit (threadpoolctl): "
        f"{thread_text}; {env_text}; MUMPS sequential. Median of {args.repeat} interleaved "
        f"run(s); load average {load_before[0]:.1f}/{load_before[1]:.1f} (1/5 min) before, "
        f"{load_after[0]:.1f}/{load_after[1]:.1f} after, 2 shared cores. `@{args.rev}`: the "
        "package before this change.",
        "",
        "| case | energies | wall (s) | CPU (s) | set-up CPU (s) | CPU per energy (s) | "
        "peak RSS (MB) | CPU ratio to coherent | wall ratio |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for k, m in med.items():
        ref = med["coherent" if "@" not in k else f"coherent@{args.rev}"]
        lines.append(
            f"| {k} | {res[k][0]['n_energies']} | {m['wall']:.1f} | {m['cpu']:.1f} | "
            f"{m['setup_cpu']:.1f} | {m['per_energy']:.3f} | {rss[k]:.0f} | "
            f"{m['cpu'] / ref['cpu']:.2f} | {m['wall'] / ref['wall']:.2f} |"
        )
    lines += ["", "CPU seconds by stage (first run of each case):", ""]
    lines += [f"* {k}: {_fmt_stages(v[0])}" for k, v in res.items()]
    lines += [
        "",
        f"Dephased/coherent: CPU {dep['cpu'] / coh['cpu']:.2f}x, wall "
        f"{dep['wall'] / coh['wall']:.2f}x; per energy (without the set-up) "
        f"{dep['per_energy'] / coh['per_energy']:.2f}x.",
    ]
    if not args.no_before and not args.policy:
        import numpy as np

        for name in ("coherent", "dephased"):
            d = np.max(np.abs(np.subtract(res[name][0]["g"], res[f"{name}@{args.rev}"][0]["g"])))
            lines.append(f"max |G - G@{args.rev}| over the field, {name}: {d:.1e} e^2/h.")
    text = "\n".join(lines) + "\n"
    print(text)
    if args.write:  # a --policy run is appended to the fixed-energy results
        out = ROOT / "benchmarks" / "RESULTS-study.md"
        if args.policy and out.exists():
            text = out.read_text() + "\n" + text.replace("# ", "## ", 1)
        out.write_text(text)


if __name__ == "__main__":
    main()
