"""Benchmark of the spectral energy engine on a realistic ring: finite-temperature field sweeps
with one factorization per field point for every energy of the thermal window.

Run from the repository root (about 25 minutes on 2 shared cores at load 2-3)::

    .venv/bin/python benchmarks/bench_spectral.py              # default: 201 points
    .venv/bin/python benchmarks/bench_spectral.py --points 41 --quick

Device (issue 11, as in ``bench_uniform.py``): GaAs preset (3e11 cm^-2),
``RingGeometry.from_mean_radius(0.5 um, 120 nm)``, default lattice, disorder seed 1: 28 626
sites; uniform field, 201 points over 6 h/e periods; default thermal tolerance (1e-4 e^2/h) and
the adaptive rule of :mod:`ringkit.thermal_policy`.

Measured:
1. End to end, default user settings (workers as the library chooses):
   ``field_sweep(ring, fields=..., temperature=T, thermal_engine="spectral")`` at 0.3 K and
   1.0 K: wall and CPU time (parent + workers), energies, factorizations, Lanczos steps, error
   estimates (dataset attrs). The time spent building the reduced models
   (``SpectralSweeper.models``, parallel) is recorded by wrapping that method in this script.
2. The direct path (one factorization per (energy, field) point) on 3 field points at exactly
   the energies the 0.3 K spectral run used, through the library's own energy pool
   (:class:`ringkit.transport.energy_pool.EnergyPool`, same workers), then extrapolated to 201
   points from the measured per-energy set-up and per-point cost. Agreement of G (same
   weights) and of T(E, B) between the two paths at those points.
3. Per field point: the spectral engine in one process (reduction + all energies) versus
   (a) the bare sparse factorization of the same extended matrix (``scipy.sparse.linalg.splu``,
   as the engine calls it) and the MUMPS numeric LU + solve of the direct path's system (as in
   ``bench_uniform.py``), and (b) a plain kwant script (``kwant.smatrix`` at each energy of the
   thermal average; a handful of energies timed, median times the number of energies).
4. Thread settings, machine, load average; the spectral transmission against ``kwant.smatrix``
   at a few (E, B) points (kwant itself is the outside reference).
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import kwant  # noqa: E402
import scipy.sparse as sp  # noqa: E402
import scipy.sparse.linalg as sla  # noqa: E402
from bench_engine import machine  # noqa: E402
from bench_uniform import load, the_ring, thread_settings  # noqa: E402

import ringkit.transport.sweep as sweep_mod  # noqa: E402
from ringkit.transport import field_sweep  # noqa: E402
from ringkit.transport._engine_linsys import MumpsKernel  # noqa: E402
from ringkit.transport._engine_threads import blas_limit  # noqa: E402
from ringkit.transport.energy_pool import EnergyPool, thermal_workers  # noqa: E402
from ringkit.transport.fastsweep import FieldSweeper  # noqa: E402
from ringkit.transport.spectral import SpectralSweeper  # noqa: E402

TARGET_S = 120.0  # issue 11: 0.3 K, 201 points, converged, <= 2 min on 2 cores


def cpu_all() -> float:
    """CPU seconds of this process and its reaped children (pool workers)."""
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def med(x) -> float:
    return float(statistics.median(x))


class Capture:
    """Records what ``fast_field_conductance`` gets from the spectral engine (no change to it)."""

    def __init__(self):
        self.out: list = []
        self.models_s: list[float] = []
        self._orig_stt = sweep_mod.spectral_thermal_transmission
        self._orig_models = SpectralSweeper.models

    def __enter__(self) -> Capture:
        def stt(*a, **k):
            r = self._orig_stt(*a, **k)
            self.out.append(r)
            return r

        def models(sw, values):
            w0 = time.perf_counter()
            try:
                return self._orig_models(sw, values)
            finally:
                self.models_s.append(time.perf_counter() - w0)

        sweep_mod.spectral_thermal_transmission = stt
        SpectralSweeper.models = models
        return self

    def __exit__(self, *exc) -> None:
        sweep_mod.spectral_thermal_transmission = self._orig_stt
        SpectralSweeper.models = self._orig_models


def end_to_end(ring, fields, temperature: float) -> dict:
    with Capture() as cap:
        l0, w0, c0 = load(), time.perf_counter(), cpu_all()
        ds = field_sweep(ring, fields=fields, temperature=temperature, thermal_engine="spectral")
        wall, cpu = time.perf_counter() - w0, cpu_all() - c0
    (avg, sw) = cap.out[-1]
    a = ds.attrs
    r = {
        "T": temperature,
        "wall": wall,
        "cpu": cpu,
        "models_s": cap.models_s[-1],
        "load": (l0, load()),
        "G": np.asarray(ds["G"].values),
        "attrs": {k: a[k] for k in a if isinstance(a[k], (int, float, str, np.number))},
        "avg": avg,
        "sw": sw,
        "steps_min": int(np.min(sw.steps)),
        "steps_max": int(np.max(sw.steps)),
        "n_terminal": sw.n_terminal,
        "n_ext": sw.n_ext,
        "half_width": sw.half_width,
        "kt": avg.kt,
    }
    print(
        f"T = {temperature} K: {wall:.1f} s wall, {cpu:.1f} s CPU, n_E {a['n_energies']}, "
        f"factorizations {a['n_factorizations']}, steps median {a['lanczos_steps_median']}, "
        f"err {a['thermal_error_estimate']:.2e}, model err {a['spectral_model_error']:.1e}",
        flush=True,
    )
    return r


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=201)
    ap.add_argument("--periods", type=float, default=6.0)
    ap.add_argument("--quick", action="store_true", help="fewer timed/kwant points, 0.3 K only")
    ap.add_argument("--output", default=str(HERE / "RESULTS-spectral.md"))
    args = ap.parse_args()
    res: dict = {
        "load_start": load(),
        "threads": thread_settings(),
        "machine": machine(),
        "workers": thermal_workers(),
        "argv": " ".join(sys.argv[1:]),
    }
    print(res["threads"], flush=True)
    ring, period = the_ring()
    e_t = ring.fermi_energy_lattice
    params = ring.params()
    name = ring.field_param
    fields = np.linspace(0.0, args.periods * period, args.points)
    res.update(sites=ring.n_sites, period=period, points=args.points, periods=args.periods)

    # 1. end to end, default user settings
    temps = (0.3,) if args.quick else (0.3, 1.0)
    runs = [end_to_end(ring, fields, t) for t in temps]
    res["runs"] = runs
    # the same number of points over a window symmetric in B, as a measured trace usually is:
    # G(-B) = G(B) (Onsager) folds it onto about half as many reduced models
    sym = end_to_end(ring, np.linspace(-0.5, 0.5, args.points) * args.periods * period, 0.3)
    sym["window"] = "symmetric"
    res["symmetric"] = sym
    r03 = runs[0]
    sw, avg = r03["sw"], r03["avg"]
    energies, weights = avg.energies, avg.weights

    # 2. direct path on 3 field points, the same energies and weights as the 0.3 K run
    idx = sorted({1, args.points // 3, (2 * args.points) // 3})
    sub = fields[idx]
    direct = FieldSweeper(ring.fsyst, field_param=name, params=params, energy=e_t)
    l0, w0, c0 = load(), time.perf_counter(), cpu_all()
    with EnergyPool(direct, sub) as pool:
        rows = pool(energies)  # (n_E, 3), T per spin
        res["direct_workers"] = pool.used_workers
    # after the pool is closed, so that the workers' CPU time is counted
    res["direct_wall"], res["direct_cpu"] = time.perf_counter() - w0, cpu_all() - c0
    res["direct_load"] = (l0, load())
    g_direct = 2.0 * (weights @ rows)
    g_spec = r03["G"][idx]
    t_spec = sw.transmission(energies)[:, idx]
    res["dev_G_direct"] = float(np.max(np.abs(g_direct - g_spec)))
    res["dev_T_direct"] = float(np.max(np.abs(rows - t_spec)))
    res["direct_idx"] = idx
    print(
        f"direct, 3 points x {len(energies)} energies: {res['direct_wall']:.1f} s wall, "
        f"max |dG| {res['dev_G_direct']:.1e}, max |dT| {res['dev_T_direct']:.1e}",
        flush=True,
    )
    # serial per-energy set-up and per-point cost of the direct path (for the extrapolation)
    ne_s = 4 if args.quick else 8
    e_sample = energies[np.linspace(0, len(energies) - 1, ne_s).round().astype(int)]
    setup_w, setup_c, pt_w, pt_c = [], [], [], []
    with blas_limit():
        for e in e_sample:
            w0, c0 = time.perf_counter(), time.process_time()
            s_e = direct.at_energy(float(e))
            setup_w.append(time.perf_counter() - w0)
            setup_c.append(time.process_time() - c0)
            for b in sub:
                w0, c0 = time.perf_counter(), time.process_time()
                s_e.conductance(b)
                pt_w.append(time.perf_counter() - w0)
                pt_c.append(time.process_time() - c0)
    res["direct_setup"] = (med(setup_w), med(setup_c))
    res["direct_sampled"] = ne_s
    res["direct_point"] = (med(pt_w), med(pt_c))

    # 3. per field point in one process: spectral reduction + all energies; bare factorizations
    nb = 3 if args.quick else 5
    bsub = fields[np.linspace(0, args.points - 1, nb).round().astype(int)]
    red_w, red_c, ev_w, ev_c, steps = [], [], [], [], []
    lu_w, lu_c, solve_w, mumps_w, mumps_c = [], [], [], [], []
    eye = sp.identity(sw.n_ext, format="csc")
    system = direct._system
    mlu = MumpsKernel(system, "lu", "amd")
    mrhs = np.asfortranarray(system.lead_rhs(0))
    block = np.asfortranarray(np.random.default_rng(0).standard_normal((sw.n_ext, sw.n_terminal)))
    with blas_limit():
        for b in bsub:
            w0, c0 = time.perf_counter(), time.process_time()
            red, _ = sw.reduce(float(b))
            red_w.append(time.perf_counter() - w0)
            red_c.append(time.process_time() - c0)
            steps.append(red.steps)
            w0, c0 = time.perf_counter(), time.process_time()
            sw.transmission_of(red, energies)
            ev_w.append(time.perf_counter() - w0)
            ev_c.append(time.process_time() - c0)
            a = (sw.hamiltonian(float(b)) - sw.mu * eye).tocsc()  # assembly not timed
            w0, c0 = time.perf_counter(), time.process_time()
            lu = sla.splu(a)
            lu_w.append(time.perf_counter() - w0)
            lu_c.append(time.process_time() - c0)
            w0 = time.perf_counter()
            lu.solve(block.astype(complex))
            solve_w.append(time.perf_counter() - w0)
            system.set_field(float(b))
            w0, c0 = time.perf_counter(), time.process_time()
            mlu.factor()
            mlu.solve(mrhs)
            mumps_w.append(time.perf_counter() - w0)
            mumps_c.append(time.process_time() - c0)
    res["reduce"] = (med(red_w), med(red_c))
    res["evaluate"] = (med(ev_w), med(ev_c))
    res["reduce_steps"] = steps
    res["splu"] = (med(lu_w), med(lu_c))
    res["splu_solve"] = med(solve_w)
    res["mumps"] = (med(mumps_w), med(mumps_c))
    print(
        f"one process per point: reduce {res['reduce'][0]:.2f} s, evaluate "
        f"{res['evaluate'][0]:.3f} s, splu {res['splu'][0]:.3f} s, block solve "
        f"{res['splu_solve']:.3f} s, MUMPS {res['mumps'][0]:.3f} s",
        flush=True,
    )

    # 3b/4. plain kwant script at a handful of energies (field sub[0]); check against spectral
    ke = energies[np.linspace(0, len(energies) - 1, 3 if args.quick else 5).round().astype(int)]
    ke = np.unique(np.concatenate([ke, [e_t]]))
    checks = [(float(e), 0) for e in ke] + [(e_t, 1), (float(ke[0]), 2)][: 1 if args.quick else 2]
    k_w, k_c, kdev = [], [], []
    for e, j in checks:
        b = float(sub[j])
        w0, c0 = time.perf_counter(), time.process_time()
        tk = kwant.smatrix(ring.fsyst, e, params={**params, name: b}).transmission(1, 0)
        k_w.append(time.perf_counter() - w0)
        k_c.append(time.process_time() - c0)
        ts = float(sw.transmission_of(sw.reduced[idx[j]], [e])[0])
        kdev.append((e, b, tk, ts))
    res["kwant"] = (med(k_w), med(k_c))
    res["kwant_n"] = len(checks)
    res["kwant_checks"] = kdev
    res["e_t"] = e_t
    res["load_end"] = load()
    print(f"kwant: {res['kwant'][0]:.2f} s per energy", flush=True)
    write(args.output, res)
    print(f"written {args.output}")


def write(path: str, r: dict) -> None:
    n = r["points"]
    runs = r["runs"]
    r03 = runs[0]
    a03 = r03["attrs"]
    n_e = int(a03["n_energies"])
    workers = r["workers"]
    cmd = " ".join([".venv/bin/python benchmarks/bench_spectral.py", r["argv"]]).strip()
    lines = [
        "# Spectral energy engine: finite-temperature sweeps at realistic size",
        "",
        f"Generated by `{cmd}` on {time.strftime('%Y-%m-%d %H:%M')} (UTC), default user settings "
        f"({workers} workers, as the library chooses on this machine).",
        "",
        f"Machine: {r['machine']}. Load average {r['load_start']} at the start, "
        f"{r['load_end']} at the end (other jobs were running).",
        "",
        f"Threads: {r['threads']}. Spectral and direct workers run every engine call with the "
        "engine's BLAS limit (1 thread).",
        "",
        f"Device: GaAs preset (3e11 cm^-2), mean radius 0.5 um, 120 nm arms, default lattice, "
        f"disorder seed 1: {r['sites']} sites; {n} field points over {r['periods']:g} h/e "
        f"periods (period {1e3 * r['period']:.3f} mT); thermal tolerance "
        f"{a03['thermal_tol']:g} e^2/h, rule `{a03['thermal_method']}`. Extended matrix of the "
        f"spectral engine (ring + clean lead chunks): {r03['n_ext']} orbitals, "
        f"{r03['n_terminal']} terminal modes.",
        "",
        "## 1. End to end: `field_sweep(ring, fields=..., temperature=T, "
        'thermal_engine="spectral")`',
        "",
        "| T | wall (s) | CPU (s, all processes) | of which reduced models (s wall) | energies | "
        "factorizations | Lanczos steps median (min-max) | thermal error estimate (e^2/h) | "
        "model error (e^2/h) | load start / end |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for run in runs:
        a = run["attrs"]
        lines.append(
            f"| {run['T']:g} K | {run['wall']:.1f} | {run['cpu']:.1f} | {run['models_s']:.1f} | "
            f"{a['n_energies']} | {a['n_factorizations']} | {a['lanczos_steps_median']:g} "
            f"({run['steps_min']}-{run['steps_max']}) | {a['thermal_error_estimate']:.2e} | "
            f"{a['spectral_model_error']:.1e} | {run['load'][0]} / {run['load'][1]} |"
        )
    conv = a03["thermal_error_estimate"] <= a03["thermal_tol"]
    met = conv and r03["wall"] <= TARGET_S and n >= 201
    lines += [
        "",
        f"Target of issue 11 (0.3 K, 201 points, converged, <= 2 min on 2 cores): "
        f"**{'met' if met else 'not met'}** in this run ({r03['wall']:.0f} s wall, error "
        f"estimate {a03['thermal_error_estimate']:.1e} "
        f"{'<=' if conv else '>'} tol {a03['thermal_tol']:g}"
        + ("" if n >= 201 else f"; only {n} points were run")
        + "). h/e and h/2e band errors at 0.3 K: "
        f"{a03['thermal_error_he']:.1e} / {a03['thermal_error_h2e']:.1e} e^2/h.",
        "",
    ]
    sym = r["symmetric"]
    a_s = sym["attrs"]
    lines += [
        f"The same {n} points over the symmetric window -{r['periods'] / 2:g}..+"
        f"{r['periods'] / 2:g} periods at 0.3 K (G(-B) = G(B) folds them onto "
        f"{a_s['n_factorizations']} reduced models): {sym['wall']:.1f} s wall, "
        f"{sym['cpu']:.1f} s CPU, {a_s['n_energies']} energies, error estimate "
        f"{a_s['thermal_error_estimate']:.1e}, load {sym['load'][0]} / {sym['load'][1]}.",
        "",
    ]
    # 2. direct path
    dw, dc = r["direct_wall"], r["direct_cpu"]
    s_w, s_c = r["direct_setup"]
    p_w, p_c = r["direct_point"]
    ext_serial = n_e * (s_w + 201 * p_w)
    ext_cpu = n_e * (s_c + 201 * p_c)
    ext_par = ext_serial / workers
    ext_meas = dw * (s_w + 201 * p_w) / (s_w + 3 * p_w)
    naive = dw / 3 * 201
    lines += [
        "## 2. Direct path (one factorization per energy and field point), 0.3 K",
        "",
        f"Measured on 3 field points (indices {r['direct_idx']}) at exactly the {n_e} energies "
        f"of the 0.3 K spectral run, through the library's energy pool "
        f"({r['direct_workers']} workers): {dw:.1f} s wall, {dc:.1f} s CPU (load "
        f"{r['direct_load'][0]} / {r['direct_load'][1]}). Serial medians over "
        f"{r['direct_sampled']} sampled energies: sweeper set-up per energy "
        f"{s_w:.3f} s wall / {s_c:.3f} s CPU, one field point {1e3 * p_w:.1f} ms / "
        f"{1e3 * p_c:.1f} ms.",
        "",
        "**Extrapolated** (not measured) to 201 points, from these 3 points: the measured "
        "3-point pool time scaled by (set-up + 201 x point) / (set-up + 3 x point) gives "
        f"{ext_meas:.0f} s = {ext_meas / 60:.1f} min wall (the pool's parallel efficiency as "
        f"measured at this load); with {workers} ideal workers, {n_e} x (set-up + 201 x point) "
        f"/ {workers} = {ext_par:.0f} s = {ext_par / 60:.1f} min ({ext_cpu:.0f} s CPU in "
        f"total); the plain per-point scaling of the 3-point wall time (x 201 / 3) gives "
        f"{naive:.0f} s = {naive / 60:.1f} min. The direct engine's own adaptive rule picks "
        "the same energies (same rule and tolerance, values equal to 1e-11). Spectral end to "
        f"end: {r03['wall']:.0f} s, i.e. {ext_meas / r03['wall']:.0f}x "
        f"({ext_par / r03['wall']:.0f}x against ideal workers) faster than the extrapolated "
        "direct path.",
        "",
        f"Agreement at those 3 points (same energies and weights): max |G_spectral - G_direct| "
        f"= {r['dev_G_direct']:.1e} e^2/h; per energy max |T_spectral - T_direct| = "
        f"{r['dev_T_direct']:.1e} (per spin, over {n_e} x 3 values).",
        "",
    ]
    # 3. per field point
    red_w, red_c = r["reduce"]
    ev_w, ev_c = r["evaluate"]
    sp_w, sp_c = red_w + ev_w, red_c + ev_c
    lu_w, lu_c = r["splu"]
    mu_w, mu_c = r["mumps"]
    k_w, k_c = r["kwant"]
    kw_pt, kc_pt = k_w * n_e, k_c * n_e
    dir_pt_w = n_e * (p_w + s_w / 201)
    dir_pt_c = n_e * (p_c + s_c / 201)
    lines += [
        "## 3. Per field point (0.3 K energies, one process, 1 BLAS thread, medians over "
        f"{len(r['reduce_steps'])} points)",
        "",
        "| what | s per field point (wall / CPU) |",
        "|---|---|",
        f"| spectral: reduction (splu + {med(r['reduce_steps']):.0f} block Lanczos steps + "
        f"checks) | {red_w:.3f} / {red_c:.3f} |",
        f"| spectral: transmission at all {n_e} energies from the reduced model | "
        f"{ev_w:.3f} / {ev_c:.3f} |",
        f"| spectral total | {sp_w:.3f} / {sp_c:.3f} |",
        f"| of the reduction: splu + {med(r['reduce_steps']):.0f} x block solve (rows (a) below) "
        f"| {lu_w + med(r['reduce_steps']) * r['splu_solve']:.3f} / - |",
        "| of the reduction: the rest (block orthogonalisation and QR on the "
        f"{r03['n_ext']} x {r03['n_terminal']} blocks, convergence checks), by difference | "
        f"{red_w - lu_w - med(r['reduce_steps']) * r['splu_solve']:.3f} / - |",
        f"| spectral end to end, {workers} workers: wall / {n} points | "
        f"{r03['wall'] / n:.3f} / {r03['cpu'] / n:.3f} |",
        f"| (a) bare `scipy.sparse.linalg.splu` of the extended matrix (as the engine calls "
        f"it) | {lu_w:.3f} / {lu_c:.3f} |",
        f"| (a) one solve with the {r03['n_terminal']}-column block (one Lanczos step) | "
        f"{r['splu_solve']:.3f} / - |",
        f"| (a') bare MUMPS numeric LU + solve of the direct path's system (as "
        f"bench_uniform.py) | {mu_w:.3f} / {mu_c:.3f} |",
        f"| direct path: {n_e} x (point + set-up/201) (from section 2) | "
        f"{dir_pt_w:.2f} / {dir_pt_c:.2f} |",
        f"| (b) plain kwant script: {n_e} x `kwant.smatrix` (median of {r['kwant_n']} timed, "
        f"multiplied) | {kw_pt:.1f} / {kc_pt:.1f} |",
        "",
        f"Ratios (wall): spectral / splu = {sp_w / lu_w:.1f}; spectral / MUMPS LU = "
        f"{sp_w / mu_w:.1f}; kwant / spectral = {kw_pt / sp_w:.0f}; direct / spectral = "
        f"{dir_pt_w / sp_w:.0f}. CPU: spectral / splu = {sp_c / lu_c:.1f}; kwant / spectral "
        f"= {kc_pt / sp_c:.0f}; direct / spectral = {dir_pt_c / sp_c:.0f}. The kwant figure is "
        f"one measured `kwant.smatrix` time ({1e3 * k_w:.0f} ms wall, median) times {n_e}, "
        "not a full run.",
        "",
        "## 4. Checks",
        "",
        "Spectral transmission (reduced model of the 0.3 K run) against `kwant.smatrix` on the "
        "same finite system (kwant's own lead modes and solver), per spin:",
        "",
        "| E - E_F (k_B T at 0.3 K) | B (mT) | kwant | spectral | abs. difference |",
        "|---|---|---|---|---|",
    ]
    kt = r03["kt"]
    for e, b, tk, ts in r["kwant_checks"]:
        lines.append(
            f"| {(e - r['e_t']) / kt:+.2f} | {1e3 * b:.3f} | {tk:.12f} | {ts:.12f} | "
            f"{abs(tk - ts):.1e} |"
        )
    kmax = max(abs(c[2] - c[3]) for c in r["kwant_checks"])
    lines += [
        "",
        f"Largest difference {kmax:.1e}; spectral versus direct: section 2.",
        "",
        "## What this shows / what it does not",
        "",
        "Shows: on this device a converged finite-temperature sweep (adaptive rule, default "
        f"tolerance) costs one sparse factorization plus {med(r['reduce_steps']):.0f} block "
        "solves per field point, independent of the number of energies; the energies "
        f"themselves are small dense algebra ({ev_w:.2f} s for all {n_e}). That is about "
        f"{sp_w / lu_w:.0f}x a bare factorization per point, not ~1x: the block solves "
        f"(SuperLU, {r03['n_terminal']} columns) and the dense block orthogonalisation cost "
        "more than the factorization itself."
        + "".join(
            f" At {run['T']:g} K: {run['attrs']['n_energies']} energies, Lanczos steps median "
            f"{run['attrs']['lanczos_steps_median']:g}, {run['models_s'] * workers / n:.1f} s "
            "of worker time per field point (reduced-model wall x workers / points; "
            f"{r03['models_s'] * workers / n:.1f} s at {r03['T']:g} K): the window grows with "
            "T and the model needs more steps."
            for run in runs[1:]
        )
        + " The result agrees with the direct path at the "
        "same energies and with "
        "kwant at the checked points to the figures above. Does not show: other devices "
        "(wider leads mean more terminal modes and larger Lanczos blocks; denser spectra or "
        "narrower resonances need more steps), dephasing probes or flux-tube rings (those stay "
        "on the direct path), or behaviour on an idle machine (the load was as quoted); the "
        "direct 201-point time at 0.3 K is an extrapolation from 3 points, and the kwant "
        "figure an extrapolation from a handful of energies.",
        "",
    ]
    Path(path).write_text("\n".join(lines))


if __name__ == "__main__":
    main()
