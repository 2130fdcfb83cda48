"""Cost of one study work unit with dephasing probes, before and after the reuse of one model.

Issue 11, point 6: a dephased unit rebuilt the flux-tube model and re-attached the probes (LDOS
solve included) at every energy of the thermal window, and its memory grew by ~35 MB per
energy. This script times one work unit of the issue's ring (GaAs preset, density
3e11 cm^-2, mean radius 0.5 um, 120 nm arms, default lattice: 28 626 sites) in flux-tube mode,
201 flux points, 100 probes, L_phi = 1 um, on a fixed set of N energies (default 37, the issue's
count, spread over the 0.3 K Fermi window) for:

* ``old``: ``ringkit/study/compute.py`` as of commit baf6e05 (before the reuse);
* ``new``: the current ``ringkit.study.compute`` (one model and one probe mapping per lattice);
* ``coherent``: the current code without probes (the reference of the 2x target).

Every case runs in a fresh process (peak RSS from ``getrusage``); the energies are fixed here
so that both versions do the same physics work whatever the thermal policy picks. Both
versions run with one BLAS thread (the old one via threadpoolctl here, the new one by itself).
Prints medians over ``--repeat`` runs, ratios, and the load average; writes
``benchmarks/RESULTS-study.md`` with ``--write``.

Run from the repository root::

    .venv/bin/python benchmarks/bench_study.py [--energies 37] [--repeat 1] [--write]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
OLD_REV = "baf6e05"

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
start = "-3 h/e"
stop = "3 h/e"
points = 201
[sweep]
temperature = "0.3 K"
l_phi = "{l_phi}"
[dephasing]
probes = 100
"""

CHILD = r"""
import importlib.util, json, resource, sys, time, types
import numpy as np
from threadpoolctl import threadpool_limits
from ringkit.study import make_plan, parse_config
from ringkit.units import K_B

which, l_phi, n_e, old_path = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
plan = make_plan(parse_config(sys.argv[5].replace("{l_phi}", l_phi)))


class Grid:  # a fixed energy grid: the same physics work for both versions
    def __init__(self, mu, temperature):
        kt = K_B * 0.3
        self.energies = mu + np.linspace(-4 * kt, 4 * kt, n_e)
        w = 1 / np.cosh((self.energies - mu) / (2 * kt)) ** 2
        self.weights = w / w.sum()
        self.n_energies = n_e


def fixed_grid(device, temperature, thermal):
    return Grid(device.material.fermi_energy_J, temperature)


if which == "old":
    spec = importlib.util.spec_from_file_location("old_compute", old_path)
    C = importlib.util.module_from_spec(spec)
    sys.modules["old_compute"] = C  # dataclasses look the module up
    spec.loader.exec_module(C)
    C.thermal_grid = fixed_grid
else:
    from ringkit.study import compute as C

    def fixed_average(ring, temperature, thermal, g_at):
        grid = fixed_grid(ring.device, temperature, thermal)
        value = sum(w * g_at(float(e)) for e, w in zip(grid.energies, grid.weights))
        return types.SimpleNamespace(value=value, n_energies=n_e, error=0.0)

    C.thermal_average = fixed_average
task = C.make_tasks(plan, [plan.units[0]])[0]
t0 = time.perf_counter()
with threadpool_limits(limits=1, user_api="blas"):
    res = C.compute_unit(task)
dt = time.perf_counter() - t0
rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"seconds": dt, "rss_mb": rss, "sites": res.info["n_sites"],
                  "g0": float(res.conductance[0, 0])}))
"""


def run_case(which: str, l_phi: str, n_e: int, old_path: str) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.endswith("_NUM_THREADS")}
    p = subprocess.run(
        [sys.executable, "-c", CHILD, which, l_phi, str(n_e), old_path, STUDY],
        capture_output=True,
        text=True,
        env=env,
        cwd=ROOT,
        check=False,
    )
    if p.returncode:
        raise SystemExit(f"{which} {l_phi}: {p.stderr[-2000:]}")
    return json.loads(p.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--energies", type=int, default=37)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--write", action="store_true")
    args = ap.parse_args()
    old_src = subprocess.run(
        ["git", "show", f"{OLD_REV}:ringkit/study/compute.py"],
        capture_output=True,
        text=True,
        check=True,
        cwd=ROOT,
    ).stdout
    old_path = Path("/tmp") / f"ringkit_old_compute_{os.getpid()}.py"
    old_path.write_text(old_src)
    cases = [("coherent", "new", "inf"), ("new", "new", "1 um"), ("old", "old", "1 um")]
    load_before = os.getloadavg()
    results: dict[str, list[dict]] = {name: [] for name, _, _ in cases}
    for _ in range(args.repeat):
        for name, which, l_phi in cases:
            results[name].append(run_case(which, l_phi, args.energies, str(old_path)))
            r = results[name][-1]
            print(f"{name:9s} {r['seconds']:7.1f} s  peak RSS {r['rss_mb']:6.0f} MB", flush=True)
    load_after = os.getloadavg()
    old_path.unlink()
    med = {k: statistics.median(r["seconds"] for r in v) for k, v in results.items()}
    rss = {k: max(r["rss_mb"] for r in v) for k, v in results.items()}
    sites = results["new"][0]["sites"]
    dg = abs(results["new"][0]["g0"] - results["old"][0]["g0"])
    lines = [
        "# Study work unit with dephasing probes (issue 11, point 6)",
        "",
        f"`benchmarks/bench_study.py`, {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; "
        f"ring of {sites:,} sites (GaAs, 3e11 cm^-2, r = 0.5 um, 120 nm arms), flux-tube mode, "
        f"201 flux points, {args.energies} energies, 100 probes, L_phi = 1 um; one BLAS "
        f"thread; median of {args.repeat} run(s) in fresh processes; load average "
        f"{load_before[0]:.1f} before, {load_after[0]:.1f} after (2 shared cores).",
        "",
        "| case | s per unit | peak RSS (MB) | ratio to coherent |",
        "|---|---|---|---|",
    ]
    for k in ("coherent", "new", "old"):
        lines.append(f"| {k} | {med[k]:.1f} | {rss[k]:.0f} | {med[k] / med['coherent']:.2f} |")
    lines += [
        "",
        f"Speed-up of the dephased unit: {med['old'] / med['new']:.2f}x; peak memory "
        f"{rss['old']:.0f} -> {rss['new']:.0f} MB. |G_new - G_old| at the first flux point: "
        f"{dg:.1e} e^2/h (the new unit maps L_phi to the probe coupling once, at E_F, as the "
        "library and the explorer do; the old one re-mapped it at every energy).",
    ]
    text = "\n".join(lines) + "\n"
    print(text)
    if args.write:
        (ROOT / "benchmarks" / "RESULTS-study.md").write_text(text)


if __name__ == "__main__":
    main()
