"""Benchmark of the thermal-averaging policy on the 0.5 um GaAs ring (issue 11, points 1 and 3).

Run from the repository root (about 15 minutes alone on 2 cores, plus ~5 minutes the first
time for the dense reference, which is cached under ``~/.cache/ringkit/bench_thermal``)::

    .venv/bin/python benchmarks/bench_thermal.py [--temperatures 0.3 1.0] [--output PATH]

Device: GaAs preset (density 3e11 cm^-2, ringkit.device.Material.preset), circular ring with
r_in = 0.44 um, r_out = 0.56 um (mean radius 0.5 um, 120 nm arms), default lattice (28 626
sites), flux-tube mode, 201 flux points over 6 h/e. Engine calls and energy workers run with
1 BLAS thread (ringkit.transport._engine_threads; the factorization is sequential MUMPS).

For every temperature, in the same run:

* ``former grid``: the old uniform rule (step min(k_B T, E_c/4), E_c = hbar v_F/(2 pi r_mean),
  half-width k_B T ln(2e6); ``ringkit.transport.thermal.thermal_weights``), serial;
* ``one-at-a-time``: the adaptive Gauss-Kronrod 7/15 rule bisecting one interval per step
  (the former policy, ``thermal_policy._MAX_PER_ROUND = 1``), 1 worker;
* ``rounds``: the policy as shipped (all intervals of large error bisected per round), 1 worker;
* ``rounds, 2 workers``: the same with ``RINGKIT_THERMAL_WORKERS=2`` (energy_pool), checked
  equal to the 1-worker result;
* reference: a dense uniform trapezoid, step k_B T/16 (0.3 K) or 0.025 K (1 K), over
  |E - E_F| <= 15 k_B T, with the halving estimate of its own error printed.

Printed and written to ``benchmarks/RESULTS-thermal.md``: energies, wall and CPU time (this
process and its workers), max |G - G_ref| over the 201 fluxes, the policy's own error estimate,
and the load average. The uniform-field 0.3 K cost is estimated from the measured energy count
and the per-point cost of ``FieldSweeper`` in benchmarks/RESULTS-uniform.md.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import platform
import resource
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import ringkit.thermal_policy as policy  # noqa: E402
from ringkit.device import Material, RingDevice, RingGeometry  # noqa: E402
from ringkit.thermal_policy import fermi_window  # noqa: E402
from ringkit.tightbinding import build_ring  # noqa: E402
from ringkit.transport import field_sweep  # noqa: E402
from ringkit.transport._engine_threads import blas_limit, engine_threads  # noqa: E402
from ringkit.transport.lowrank import FluxTubeModel  # noqa: E402
from ringkit.transport.sweep import ring_correlation_energy  # noqa: E402
from ringkit.transport.thermal import thermal_weights  # noqa: E402
from ringkit.units import K_B, PHI0  # noqa: E402

CACHE = Path(os.environ.get("XDG_CACHE_HOME", Path.home() / ".cache")) / "ringkit/bench_thermal"
# per-point cost of the uniform-field direct path (FieldSweeper), benchmarks/RESULTS-uniform.md
UNIFORM_MS_PER_POINT = {"wall": 126.1, "cpu": 62.6}
UNIFORM_SETUP_S = 0.06


def ring05():
    mat = Material.preset("GaAs", density=3e15)
    geo = RingGeometry.circular(0.44e-6, 0.56e-6)
    return build_ring(RingDevice(mat, geo, field_mode="flux_tube"), seed=0)


def cpu_seconds() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


@contextlib.contextmanager
def setting(workers: int, per_round: int | None):
    old_env, old_round = os.environ.get("RINGKIT_THERMAL_WORKERS"), policy._MAX_PER_ROUND
    os.environ["RINGKIT_THERMAL_WORKERS"] = str(workers)
    policy._MAX_PER_ROUND = per_round
    try:
        yield
    finally:
        policy._MAX_PER_ROUND = old_round
        if old_env is None:
            os.environ.pop("RINGKIT_THERMAL_WORKERS")
        else:
            os.environ["RINGKIT_THERMAL_WORKERS"] = old_env


def reference(ring, model, temp, flux) -> tuple[np.ndarray, float, int]:
    """Dense trapezoid (cached table of T(E) at every flux) and its halving self-check."""
    mu, kt = ring.fermi_energy_lattice, K_B * temp / ring.hopping
    step = kt / 16 if temp < 0.5 else K_B * 0.025 / ring.hopping
    m = int(np.ceil(15 * kt / step))
    m += m % 2
    e_ref = mu + step * np.arange(-m, m + 1)
    path = CACHE / f"ref_{ring.n_sites}_{mu:.12g}_{temp:g}_{e_ref.size}_{flux.size}.npz"
    if path.exists():
        vals = np.load(path)["transmission"]
    else:
        with blas_limit():
            vals = np.array([model.sweeper(float(e)).transmission(flux) for e in e_ref])
        CACHE.mkdir(parents=True, exist_ok=True)
        np.savez(path, energies=e_ref, transmission=vals)
    w = fermi_window(e_ref, mu, kt)
    ref = 2.0 * (w / w.sum()) @ vals
    w2 = w[::2] / w[::2].sum()
    return ref, float(np.max(np.abs(ref - 2.0 * w2 @ vals[::2]))), e_ref.size


def timed(fn):
    t0, c0 = time.perf_counter(), cpu_seconds()
    out = fn()
    return out, time.perf_counter() - t0, cpu_seconds() - c0


def run_temperature(ring, model, flux, temp) -> dict:
    mu = ring.fermi_energy_lattice
    ref, ref_err, ref_n = reference(ring, model, temp, flux)
    grid = thermal_weights(
        mu, temp, energy_unit=ring.hopping, correlation_energy=ring_correlation_energy(ring)
    )

    def former():
        with blas_limit():
            vals = [model.sweeper(float(e)).transmission(flux) for e in grid.energies]
        return 2.0 * grid.weights @ np.array(vals)

    g_old, t_old, c_old = timed(former)
    row = {"T": temp, "ref_n": ref_n, "ref_err": ref_err}
    row["former"] = (grid.n_energies, t_old, c_old, float(np.max(np.abs(g_old - ref))), None)
    sweeps = {}
    for key, workers, per_round in (("one", 1, 1), ("rounds", 1, None), ("rounds2", 2, None)):
        with setting(workers, per_round):
            ds, wall, cpu = timed(lambda: field_sweep(ring, flux, temperature=temp))
        sweeps[key] = ds["G"].values
        row[key] = (
            int(ds.attrs["n_energies"]),
            wall,
            cpu,
            float(np.max(np.abs(ds["G"].values - ref))),
            float(ds.attrs["thermal_error_estimate"]),
        )
        print(temp, key, row[key], flush=True)
    row["parallel_diff"] = float(np.max(np.abs(sweeps["rounds"] - sweeps["rounds2"])))
    return row


def speedup(ring, flux, n_energies: int, repeats: int) -> str:
    """Wall time of one round of ``n_energies`` energies with 1 and 2 workers, interleaved
    (1, 2, 1, 2, ...) so that a changing load on the shared machine hits both alike."""
    from ringkit.transport.energy_pool import EnergyPool
    from ringkit.transport.lowrank import FluxTubeSweeper

    mu = ring.fermi_energy_lattice
    kt = K_B * 1.0 / ring.hopping
    energies = mu + kt * np.linspace(-3, 3, n_energies)
    sw = FluxTubeSweeper(FluxTubeModel(ring.fsyst, params=ring.params()), energy=mu)
    times: dict[int, list] = {1: [], 2: []}
    rows = {}
    load0 = os.getloadavg()
    for _ in range(repeats):
        for workers in (1, 2):
            with EnergyPool(sw, flux, workers=workers) as pool:
                t0 = time.perf_counter()
                rows[workers] = pool(energies)
                times[workers].append(time.perf_counter() - t0)
                assert pool.used_workers == workers
    load1 = os.getloadavg()
    t1, t2 = np.median(times[1]), np.median(times[2])
    return (
        f"Round of {n_energies} energies (1 K window, 201 fluxes), 1 and 2 workers interleaved, "
        f"{repeats} repeats: median wall {t1:.1f} s (1 worker) and {t2:.1f} s (2 workers), "
        f"ratio {t1 / t2:.2f}; max |G(1) - G(2)| = "
        f"{2 * float(np.max(np.abs(rows[1] - rows[2]))):.1e}; load average "
        f"{load0[0]:.1f} at the start, {load1[0]:.1f} at the end.\n"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--temperatures", type=float, nargs="+", default=[0.3, 1.0])
    ap.add_argument("--output", default=str(HERE / "RESULTS-thermal.md"))
    ap.add_argument(
        "--speedup",
        type=int,
        nargs=2,
        metavar=("ENERGIES", "REPEATS"),
        help="only measure 1 vs 2 workers on one round (interleaved); appended to --output",
    )
    args = ap.parse_args()
    ring = ring05()
    flux = np.linspace(0, 6, 201) * PHI0
    if args.speedup:
        text = speedup(ring, flux, *args.speedup)
        print(text)
        with open(args.output, "a") as fh:
            fh.write("\n" + text)
        return
    load0 = os.getloadavg()
    model = FluxTubeModel(ring.fsyst, params=ring.params())
    rows = [run_temperature(ring, model, flux, temp) for temp in args.temperatures]
    load1 = os.getloadavg()
    text = report(ring, rows, load0, load1)
    print(text)
    Path(args.output).write_text(text)


def report(ring, rows, load0, load1) -> str:
    env = {k: os.environ.get(k, "unset") for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")}
    lines = [
        "# Thermal averaging: energies, errors and time on the 0.5 um ring (issue 11, pts 1, 3)",
        "",
        f"Generated by `.venv/bin/python benchmarks/bench_thermal.py` on "
        f"{time.strftime('%Y-%m-%d %H:%M', time.gmtime())} (UTC).",
        "",
        f"Device: 0.5 um GaAs ring, {ring.n_sites} sites, flux tube, 201 fluxes over 6 h/e, "
        f"tol 1e-4 e^2/h. Threads: engine calls and energy workers {engine_threads()} BLAS "
        f"thread(s) (RINGKIT_ENGINE_THREADS={os.environ.get('RINGKIT_ENGINE_THREADS', 'unset')}"
        f", OPENBLAS_NUM_THREADS={env['OPENBLAS_NUM_THREADS']}, "
        f"OMP_NUM_THREADS={env['OMP_NUM_THREADS']}), MUMPS sequential. Machine: "
        f"{platform.machine()}, {os.cpu_count()} cores, shared with other jobs; load average "
        f"(1/5/15 min) {load0[0]:.2f}/{load0[1]:.2f}/{load0[2]:.2f} at the start, "
        f"{load1[0]:.2f}/{load1[1]:.2f}/{load1[2]:.2f} at the end.",
        "",
        "Reference: dense uniform trapezoid over |E - E_F| <= 15 k_B T (halving self-check "
        "in the table). Errors: max over the 201 fluxes of |G - G_ref|, e^2/h. CPU time: this "
        "process plus its workers.",
        "",
        "| T (K) | rule | energies | wall (s) | CPU (s) | max error | own estimate |",
        "|---|---|---|---|---|---|---|",
    ]
    names = {
        "former": "former grid (no estimate)",
        "one": "adaptive GK 7/15, one interval at a time (former policy), 1 worker",
        "rounds": "adaptive GK 7/15 in rounds (policy), 1 worker",
        "rounds2": "adaptive GK 7/15 in rounds (policy), 2 workers",
    }
    for r in rows:
        for key, name in names.items():
            n, wall, cpu, err, est = r[key]
            est_s = "-" if est is None else f"{est:.2e}"
            lines.append(
                f"| {r['T']:g} | {name} | {n} | {wall:.1f} | {cpu:.1f} | {err:.2e} | {est_s} |"
            )
    lines += [
        "",
        "| T (K) | reference energies | reference self-check | "
        "wall 1 worker / 2 workers | max |G(1 worker) - G(2 workers)| |",
        "|---|---|---|---|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['T']:g} | {r['ref_n']} | {r['ref_err']:.1e} | "
            f"{r['rounds'][1] / r['rounds2'][1]:.2f} | {r['parallel_diff']:.1e} |"
        )
    cold = [r for r in rows if r["T"] <= 0.5]
    if cold:
        n = cold[0]["rounds"][0]
        cost = {k: n * (UNIFORM_SETUP_S + 201 * v / 1e3) for k, v in UNIFORM_MS_PER_POINT.items()}
        lines += [
            "",
            f"Uniform field at {cold[0]['T']:g} K, 201 points (estimate, not run): {n} energies x "
            f"({UNIFORM_SETUP_S} s set-up + 201 x the direct FieldSweeper per-point cost of "
            f"RESULTS-uniform.md, {UNIFORM_MS_PER_POINT['wall']} ms wall / "
            f"{UNIFORM_MS_PER_POINT['cpu']} ms CPU at load ~5) = {cost['wall']:.0f} s wall, "
            f"{cost['cpu']:.0f} s CPU on one core; with 2 energy workers about "
            f"{cost['cpu'] / 2:.0f} s on a quiet 2-core machine.",
        ]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    main()
