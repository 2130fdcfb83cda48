"""Benchmark behind ``thermal_engine="auto"`` with dephasing probes (``spectral_preferred``).

Run from the repository root (about 25 minutes on 2 shared cores)::

    .venv/bin/python benchmarks/bench_auto_rule.py            # RESULTS-auto-rule.md
    .venv/bin/python benchmarks/bench_auto_rule.py --repeats 1 --output /tmp/x.md

Device: the 0.5 um GaAs ring of ``bench_spectral_modes.py`` (GaAs preset 3e11 cm^-2,
``RingGeometry.from_mean_radius(0.5 um, 120 nm)``, default lattice, disorder seed 1, 28 626
sites), L_phi = 1 um, calibrated probes (the library default).

The probes are calibrated ONCE per (ring, number of probes) before any timing, through
``ring_probes`` (the per-process cache of ``ringkit.transport.realised_l_phi``); both engines
are then served the same cached probes, and the calibration is timed on its own and left out
of the engine times (the cache counters are printed to show that no timed run calibrates).

Every timed run is the public path ``field_sweep(ring, ..., temperature=T, l_phi=L_PHI,
n_probes=n, thermal_engine=e)`` with ``e`` forced to ``"spectral"`` (flux tube: cut mode, one
reduced model for every flux) or ``"direct"`` (flux tube: the exact low-rank flux update per
energy; uniform field: one factorization per (energy, field) point), so the energies come
from the same thermal policy and tolerance (default 1e-4 e^2/h, adaptive rule).

1. Flux tube, 24 fluxes over one period (0..h/e, both ends included), at 0.3 K and 1 K with 0
   (reference), 40, 64 and 100 probes (``--probes``).
2. Uniform field, 0.3 K, the same nonzero probe counts, ``--uniform-points`` fields over 0..1 period
   (positive, so no Onsager folding between them).

Engines alternate within each repeat (less drift from the shared machine's load); wall and
CPU (this process and its finished worker processes) medians over ``--repeats`` runs, one run
only for a case whose first run took more than 60 s (marked). Prints BLAS thread settings,
``uptime`` load at start and end, max |G_spectral - G_low-rank| and the ratios.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_engine import machine  # noqa: E402
from bench_spectral_modes import ring_of, timed  # noqa: E402
from bench_uniform import load, thread_settings  # noqa: E402

from ringkit.transport import field_sweep  # noqa: E402
from ringkit.transport import realised_l_phi as rlp  # noqa: E402
from ringkit.transport.sweep import ring_probes  # noqa: E402
from ringkit.units import PHI0  # noqa: E402

L_PHI = 1e-6  # m, as in bench_spectral_modes section 2
ENGINES = ("spectral", "direct")
LONG = 60.0  # s: a case whose first run is longer is run once


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()
    except OSError:
        return f"load average {load()}"


def _calib_count() -> int:
    """Calibrator set-ups plus secant calibrations of this process (cache counters)."""
    info = rlp.cache_info()
    return int(info["setups"] + info["calibrations"])


def calibrate(ring, n: int) -> float:
    """Calibrate the probes of ``ring`` once (cached per process); wall time in s."""
    t0 = time.perf_counter()
    ring_probes(ring, L_PHI, ring.fermi_energy_lattice, ring.params(), n)
    return time.perf_counter() - t0


def case(ring, values, temperature: float, n: int, repeats: int) -> dict:
    """Both engines on one case, alternating; medians and agreement."""
    key = "fluxes" if ring.field_param == "flux" else "fields"
    kw = {key: values, "temperature": temperature, "thermal_engine": None}
    if n:
        kw.update(l_phi=L_PHI, n_probes=n)
    runs = {e: [] for e in ENGINES}
    out = {"T": temperature, "n": n, "mode": ring.field_param, "points": len(values)}
    out["load0"] = load()
    calib0 = _calib_count()
    for rep in range(repeats):
        for e in ENGINES:
            if rep and runs[e][0]["wall"] > LONG:
                continue
            ds, wall, cpu = timed(lambda e=e: field_sweep(ring, **{**kw, "thermal_engine": e}))
            runs[e].append({"wall": wall, "cpu": cpu, "G": ds["G"].values, "attrs": ds.attrs})
            print(
                f"  {ring.field_param} {temperature} K {n} probes {e}: {wall:.1f} s wall, "
                f"{cpu:.1f} s CPU, {ds.attrs['n_energies']} energies, load {load()}",
                flush=True,
            )
    out["calibrations_during_timing"] = _calib_count() - calib0
    for e in ENGINES:
        a = runs[e][0]["attrs"]
        out[e] = {
            "wall": statistics.median(r["wall"] for r in runs[e]),
            "cpu": statistics.median(r["cpu"] for r in runs[e]),
            "runs": len(runs[e]),
            "n_energies": int(a["n_energies"]),
            "err": float(a["thermal_error_estimate"]),
            "solver": str(a["solver"]),
        }
    g_s = np.array([r["G"] for r in runs["spectral"]])
    g_d = np.array([r["G"] for r in runs["direct"]])
    out["diff"] = float(np.max(np.abs(g_s[:, None] - g_d[None, :])))
    out["ratio_wall"] = out["direct"]["wall"] / out["spectral"]["wall"]
    out["ratio_cpu"] = out["direct"]["cpu"] / out["spectral"]["cpu"]
    out["load1"] = load()
    print(
        f"  -> low-rank/spectral {out['ratio_wall']:.2f} (wall) {out['ratio_cpu']:.2f} (CPU), "
        f"max |dG| {out['diff']:.2g} e^2/h",
        flush=True,
    )
    return out


def row(c: dict) -> str:
    s, d = c["spectral"], c["direct"]
    mark = lambda x: f"{x['runs']}" + (" (>60 s: 1 run)" if x["runs"] == 1 else "")  # noqa: E731
    field = "flux tube" if c["mode"] == "flux" else "uniform"
    return (
        f"| {field} | {c['T']} K | {c['n']} | {c['points']} | {s['n_energies']} / "
        f"{d['n_energies']} | {s['wall']:.1f} | {s['cpu']:.1f} | {mark(s)} | {d['wall']:.1f} | "
        f"{d['cpu']:.1f} | {mark(d)} | **{c['ratio_wall']:.2f}** | {c['ratio_cpu']:.2f} | "
        f"{c['diff']:.2g} | {c['load0']} -> {c['load1']} |"
    )


def write(path: str, r: dict) -> None:
    head = (
        "| field | T | probes | points | energies (spectral / per-energy) | spectral wall (s) | "
        "spectral CPU (s) | runs | per-energy wall (s) | per-energy CPU (s) | runs | "
        "per-energy / spectral (wall) | (CPU) | max abs(G_s - G_pe) (e^2/h) | load |"
    )
    lines = [
        '# thermal_engine="auto" with dephasing probes: spectral (cut mode) vs low-rank',
        "",
        f"Generated by `.venv/bin/python benchmarks/bench_auto_rule.py {r['argv']}` on "
        f"{time.strftime('%Y-%m-%d %H:%M', time.gmtime())} (UTC).",
        "",
        f"Machine: {machine()}. The machine is shared with other jobs: read the ratios.",
        "",
        f"* `uptime` at the start: {r['uptime0']}",
        f"* `uptime` at the end: {r['uptime1']}",
        f"* Threads: {thread_settings()}.",
        "",
        f"Device: GaAs preset (3e11 cm^-2), mean radius 0.5 um, 120 nm arms, default lattice, "
        f"seed 1: {r['n_sites']} sites. L_phi = 1 um, calibrated probes; thermal tolerance "
        '1e-4 e^2/h, adaptive rule, `field_sweep(..., thermal_engine="spectral" | '
        '"direct")` end to end (wall includes the reduced model / the factorizations).',
        "",
        "Probe calibration, done once per (device, number of probes) before the timings and "
        "served from the per-process cache to both engines (not in the engine times): "
        + "; ".join(f"{k}: {v:.1f} s" for k, v in r["calibration"].items())
        + f". Calibrations during the timed runs: {r['calib_in_timing']} (cache counters). "
        "A uniform-field ring is calibrated on its flux-tube twin (the cache key of "
        "`realised_l_phi`), so its calibration reuses the flux tube's set-up.",
        "",
        "Per-energy path: the low-rank flux update (flux tube), one factorization per (energy, "
        "field) point (uniform field). Flux tube: 24 fluxes over one period (0..h/e, ends "
        "included; folded by h/e periodicity "
        "and Onsager symmetry in both engines). Uniform field: fields over 0..1 period "
        "(positive). Wall and CPU are medians over the runs (CPU of this process and its "
        "finished energy workers); engines alternate within a repeat.",
        "",
        head,
        "|" + "---|" * 15,
        *(row(c) for c in r["cases"]),
        "",
        "Solvers reported: "
        + "; ".join(sorted({c[e]["solver"] for c in r["cases"] for e in ENGINES}))
        + ".",
        "",
        f"Largest |G_spectral - G_per-energy| over all cases: {r['worst']:.2g} e^2/h.",
        "",
    ]
    Path(path).write_text("\n".join(lines))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--uniform-points", type=int, default=3)
    ap.add_argument("--temperatures", default="0.3,1.0")
    ap.add_argument("--probes", default="0,40,64,100")
    ap.add_argument("--output", default=str(HERE / "RESULTS-auto-rule.md"))
    args = ap.parse_args()
    temps = [float(x) for x in args.temperatures.split(",")]
    probes = [int(x) for x in args.probes.split(",")]
    r = {"argv": " ".join(sys.argv[1:]), "uptime0": uptime()}
    print(r["uptime0"], flush=True)
    ring_f, ring_u = ring_of("flux_tube"), ring_of("uniform")
    r["n_sites"] = ring_f.n_sites
    print(f"{ring_f.n_sites} sites; threads: {thread_settings()}", flush=True)
    r["calibration"] = {}
    for name, ring in (("flux tube", ring_f), ("uniform", ring_u)):
        for n in (x for x in probes if x):
            r["calibration"][f"{name}, {n} probes"] = calibrate(ring, n)
            print(f"calibration {name} {n} probes: {r['calibration']} ", flush=True)
    fluxes = np.linspace(0.0, 1.0, 24) * PHI0
    fields = np.linspace(0.0, 1.0, args.uniform_points + 1)[1:] * PHI0 / ring_u.loop_area
    r["cases"] = []
    for t in temps:
        for n in probes:
            r["cases"].append(case(ring_f, fluxes, t, n, args.repeats))
    for n in (x for x in probes if x):
        r["cases"].append(case(ring_u, fields, 0.3, n, args.repeats))
    r["calib_in_timing"] = sum(c["calibrations_during_timing"] for c in r["cases"])
    r["worst"] = max(c["diff"] for c in r["cases"])
    r["uptime1"] = uptime()
    print(r["uptime1"], flush=True)
    write(args.output, r)
    print(f"wrote {args.output}")


if __name__ == "__main__":
    main()
