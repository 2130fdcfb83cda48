"""Benchmark of the spectral engine's flux-tube and dephasing modes at realistic size.

Run from the repository root (about 15-25 minutes on 2 shared cores)::

    .venv/bin/python benchmarks/bench_spectral_modes.py          # RESULTS-spectral-modes.md
    .venv/bin/python benchmarks/bench_spectral_modes.py --quick    # fewer points, no output file

Device (issue 11): GaAs preset (3e11 cm^-2), ``RingGeometry.from_mean_radius(0.5 um, 120 nm)``,
default lattice, disorder seed 1: 28 626 sites; default thermal tolerance (1e-4 e^2/h) and rule.

1. Flux tube, 201 fluxes over -3..3 h/e, coherent, at 1 K and 0.3 K: ``field_sweep`` end to
   end with ``thermal_engine="spectral"`` (one reduced model for every flux; every flux of an
   energy from one eigendecomposition of the cut pencil), the same with the pencil switched off
   (one dense cut solve per energy and flux, the previous evaluation), and ``"direct"`` (the
   exact low-rank flux update per energy), same policy and tolerance; wall, CPU of all
   processes, energies, factorizations, agreement. Accuracy of the pencil at 1 K: against the
   per-flux dense solve on 101 energies x every distinct flux (and its fallback count), and
   against ``kwant.smatrix`` at 3 energies x 3 fluxes.
2. Uniform field with dephasing probes (L_phi = 1 um, the calibrated default probes), 0.3 K:
   the spectral engine end to end on ``--uniform-points`` fields, and the direct path on one
   field point at the same energies (extrapolated per point, stated as such); agreement.
3. Reference costs: the bare sparse factorization of the system (scipy ``splu`` of the
   spectral engine's extended matrix) and one plain ``kwant.smatrix`` call.
Prints thread settings and the load average; the machine is shared, so read the ratios.
"""

from __future__ import annotations

import argparse
import os
import resource
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
from bench_uniform import load, thread_settings  # noqa: E402
from scipy import constants  # noqa: E402

from ringkit.device import Material, RingDevice, RingGeometry  # noqa: E402
from ringkit.thermal_policy import sampled_half_width  # noqa: E402
from ringkit.tightbinding import build_ring  # noqa: E402
from ringkit.transport import _spectral_terminals, field_sweep  # noqa: E402
from ringkit.transport.spectral import SpectralSweeper  # noqa: E402
from ringkit.units import PHI0  # noqa: E402


def cpu_all() -> float:
    """CPU seconds of this process and its finished children."""
    a = resource.getrusage(resource.RUSAGE_SELF)
    b = resource.getrusage(resource.RUSAGE_CHILDREN)
    return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime


def timed(fn):
    w0, c0 = time.perf_counter(), cpu_all()
    out = fn()
    return out, time.perf_counter() - w0, cpu_all() - c0


def ring_of(mode: str):
    material = Material.preset("GaAs", density=3e15)
    device = RingDevice(material, RingGeometry.from_mean_radius(0.5e-6, 120e-9), field_mode=mode)
    return build_ring(device, seed=1)


ENGINES = (
    ("spectral", "spectral", "spectral, cut pencil (one eigendecomposition per energy)"),
    ("per-flux", "spectral", "spectral, one dense cut solve per energy and flux"),
    ("direct", "direct", "low-rank update per energy"),
)


def flux_tube(ring, n: int, temperature: float) -> dict:
    fluxes = np.linspace(-3.0, 3.0, n) * PHI0
    row = {"T": temperature, "points": n, "load0": load()}
    keep = _spectral_terminals.PENCIL_MIN_VALUES
    for key, engine, _ in ENGINES:
        _spectral_terminals.PENCIL_MIN_VALUES = 10**9 if key == "per-flux" else keep
        try:
            ds, wall, cpu = timed(
                lambda e=engine: field_sweep(
                    ring, fluxes=fluxes, temperature=temperature, thermal_engine=e
                )
            )
        finally:
            _spectral_terminals.PENCIL_MIN_VALUES = keep
        row[key] = {
            "wall": wall,
            "cpu": cpu,
            "G": ds["G"].values,
            "load": load(),
            **{
                k: ds.attrs[k] for k in ("n_energies", "n_factorizations", "thermal_error_estimate")
            },
        }
        print(
            f"flux tube {temperature} K {key}: {wall:.1f} s wall, {cpu:.1f} s CPU, load {load()}",
            flush=True,
        )
    row["diff"] = float(np.max(np.abs(row["spectral"]["G"] - row["direct"]["G"])))
    row["diff_per_flux"] = float(np.max(np.abs(row["spectral"]["G"] - row["per-flux"]["G"])))
    row["load1"] = load()
    return row


def pencil_accuracy(ring, n: int, temperature: float) -> dict:
    """The pencil against the per-flux dense solve (same reduced model) and kwant.smatrix."""
    fluxes = np.linspace(-3.0, 3.0, n) * PHI0
    kt = constants.k * temperature / ring.hopping
    half = sampled_half_width(kt, 1e-4, 1.0, "adaptive", None)
    mu = ring.fermi_energy_lattice
    sw = SpectralSweeper(
        ring.fsyst, field_param=ring.field_param, params=ring.params(), mu=mu,
        half_width=half, workers=1,
    ).models(fluxes)  # fmt: skip
    energies = mu + half * np.linspace(-0.999, 0.999, 101)
    sw.terminals.pencil_fallbacks = 0
    g = sw.transmission(energies)
    fallbacks = sw.terminals.pencil_fallbacks
    keep = _spectral_terminals.PENCIL_MIN_VALUES
    _spectral_terminals.PENCIL_MIN_VALUES = 10**9
    try:
        g_direct = sw.transmission(energies)
    finally:
        _spectral_terminals.PENCIL_MIN_VALUES = keep
    worst = 0.0
    for a in (3, 50, 91):
        for b in (n // 12, n // 2, (13 * n) // 16):
            params = ring.params(**{ring.field_param: float(fluxes[b])})
            ref = kwant.smatrix(ring.fsyst, energies[a], params=params).transmission(1, 0)
            worst = max(worst, abs(g[a, b] - ref))
    return {
        "n_E": energies.size,
        "n_reps": len(sw._reps),
        "fallbacks": fallbacks,
        "vs_per_flux": float(np.max(np.abs(g - g_direct))),
        "vs_kwant": worst,
        "model_error": sw.model_error,
        "n_cut": sw.terminals.n_cut,
        "pencil": sw.terminals.pencil() is not None,
    }


def uniform_probes(ring, n: int, temperature: float) -> dict:
    period = PHI0 / ring.loop_area
    fields = np.linspace(-3.0, 3.0, n) * period
    kw = dict(temperature=temperature, l_phi=1e-6)
    row = {"T": temperature, "points": n, "load0": load()}
    ds, wall, cpu = timed(lambda: field_sweep(ring, fields=fields, thermal_engine="spectral", **kw))
    row["spectral"] = {
        "wall": wall,
        "cpu": cpu,
        **{
            k: ds.attrs[k]
            for k in ("n_energies", "n_factorizations", "thermal_error_estimate", "n_probes")
        },
    }
    print(f"uniform + probes spectral: {wall:.1f} s wall ({n} points)", flush=True)
    one = fields[[n // 3]]
    d1, w1, c1 = timed(lambda: field_sweep(ring, fields=one, thermal_engine="direct", **kw))
    s1 = field_sweep(ring, fields=one, thermal_engine="spectral", **kw)
    row["direct_one"] = {"wall": w1, "cpu": c1, "n_energies": d1.attrs["n_energies"]}
    row["diff"] = float(abs(d1["G"].values[0] - s1["G"].values[0]))
    print(f"uniform + probes direct, one point: {w1:.1f} s wall", flush=True)
    row["load1"] = load()
    return row


def references(ring_u, ring_f) -> dict:
    out = {}
    for name, ring in (("uniform", ring_u), ("flux_tube", ring_f)):
        sw = SpectralSweeper(
            ring.fsyst, field_param=ring.field_param, params=ring.params(),
            mu=ring.fermi_energy_lattice, half_width=0.01,
        )  # fmt: skip
        h = sw.hamiltonian(0.0)
        shifted = (h - sw.mu * sp.identity(sw.n_ext, format="csc")).tocsc()
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            sla.splu(shifted)
            times.append(time.perf_counter() - t0)
        out[name] = {"splu": statistics.median(times), "n_ext": sw.n_ext, "b": sw.n_terminal}
    e = ring_u.fermi_energy_lattice
    times = []
    for b in (0.0, 1e-3):
        t0 = time.perf_counter()
        kwant.smatrix(ring_u.fsyst, e, params=ring_u.params(B=b))
        times.append(time.perf_counter() - t0)
    out["kwant_smatrix"] = statistics.median(times)
    return out


def write(path: str, r: dict) -> None:
    lines = [
        "# Spectral engine: flux tube and dephasing at realistic size",
        "",
        f"Generated by `.venv/bin/python benchmarks/bench_spectral_modes.py {r['argv']}` on "
        f"{time.strftime('%Y-%m-%d %H:%M', time.gmtime())} (UTC), default user settings.",
        "",
        f"Machine: {machine()}. Load average {r['load_start']} at the start, {r['load_end']} at "
        "the end (the machine is shared: read the ratios).",
        "",
        f"Threads: {thread_settings()}.",
        "",
        f"Device: GaAs preset (3e11 cm^-2), mean radius 0.5 um, 120 nm arms, default lattice, "
        f"seed 1: {r['n_sites']} sites. Extended matrix of the spectral engine: "
        f"{r['ref']['uniform']['n_ext']} orbitals; terminal block {r['ref']['uniform']['b']} "
        f"(uniform, lead modes) and {r['ref']['flux_tube']['b']} (flux tube: lead modes + cut "
        "orbitals). Thermal tolerance 1e-4 e^2/h, adaptive rule.",
        "",
        "## 1. Flux tube, 201 fluxes over -3..3 h/e, coherent",
        "",
        "`field_sweep(..., thermal_engine=...)` end to end (wall includes building the reduced "
        "model: one factorization, Lanczos steps and their convergence checks).",
        "",
        "| T | engine | wall (s) | CPU (s) | load after | energies | factorizations | "
        "error estimate (e^2/h) |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for row in r["flux"]:
        for key, _, label in ENGINES:
            x = row[key]
            lines.append(
                f"| {row['T']} K | {label} | {x['wall']:.1f} | {x['cpu']:.1f} | {x['load']} | "
                f"{x['n_energies']} | "
                f"{x['n_factorizations']} | {x['thermal_error_estimate']:.2g} |"
            )
    lines.append("")
    for row in r["flux"]:
        s, d, f = row["spectral"], row["direct"], row["per-flux"]
        lines.append(
            f"* {row['T']} K: low-rank / spectral = {d['wall'] / s['wall']:.1f} (wall), "
            f"{d['cpu'] / s['cpu']:.1f} (CPU); per-flux solves / pencil = "
            f"{f['wall'] / s['wall']:.2f} (wall), {f['cpu'] / s['cpu']:.2f} (CPU); "
            f"max |G_spectral - G_low-rank| = {row['diff']:.2g} e^2/h (both within their error "
            f"estimates), max |G_pencil - G_per-flux| = {row['diff_per_flux']:.2g} e^2/h; "
            f"load {row['load0']} -> {row['load1']}."
        )
    acc = r.get("accuracy")
    if acc is not None:
        lines += [
            "",
            f"Pencil accuracy at 1 K (same reduced model, model error {acc['model_error']:.2g}; "
            f"{acc['n_cut']} cut orbitals, pencil applies: {acc['pencil']}): "
            f"{acc['n_E']} energies across the window x {acc['n_reps']} distinct fluxes, "
            f"max |G_pencil - G_per-flux solve| = {acc['vs_per_flux']:.2g} e^2/h per spin, "
            f"{acc['fallbacks']} of {acc['n_E']} energies sent back to the direct solve by the "
            f"pencil's checks; against kwant.smatrix at 3 energies x 3 fluxes: max "
            f"|T - T_kwant| = {acc['vs_kwant']:.2g}.",
        ]
    if "section2" in r:
        lines += ["", *r["section2"].rstrip("\n").split("\n"), ""]
    else:
        u = r["uniform"]
        s, d = u["spectral"], u["direct_one"]
        per_point = s["wall"] / u["points"]
        lines += [
            "",
            f"## 2. Uniform field with dephasing probes (L_phi = 1 um, {s['n_probes']} calibrated "
            f"probes), {u['T']} K",
            "",
            f"Spectral end to end, {u['points']} field points over -3..3 h/e: "
            f"{s['wall']:.1f} s wall, {s['cpu']:.1f} s CPU, {s['n_energies']} energies, "
            f"{s['n_factorizations']} factorizations (Onsager folding), error estimate "
            f"{s['thermal_error_estimate']:.2g} e^2/h. "
            f"Wall per requested point {per_point:.2f} s.",
            "",
            f"Direct path, ONE field point at its own {d['n_energies']} energies: "
            f"{d['wall']:.1f} s wall, "
            f"{d['cpu']:.1f} s CPU (per point, so x {u['points']} for the sweep: "
            f"{d['wall'] * u['points'] / 60:.0f} min, extrapolated, not measured). "
            f"Ratio direct / spectral per point: {d['wall'] / per_point:.0f}. "
            f"|G_spectral - G_direct| at that point: {u['diff']:.2g} e^2/h. "
            f"Load {u['load0']} -> {u['load1']}.",
            "",
        ]
    lines += [
        "## 3. Reference costs",
        "",
        f"* bare `scipy.sparse.linalg.splu` of the extended matrix: "
        f"{r['ref']['uniform']['splu'] * 1e3:.0f} ms (uniform), "
        f"{r['ref']['flux_tube']['splu'] * 1e3:.0f} ms (flux tube);",
        f"* one plain `kwant.smatrix` call at E_F: {r['ref']['kwant_smatrix'] * 1e3:.0f} ms.",
        "",
    ]
    f1 = next((row for row in r["flux"] if row["T"] == 1.0), None)
    if f1 is not None:
        s = f1["spectral"]
        lines.append(
            f"Flux tube at 1 K in units of these: spectral = "
            f"{s['wall'] / r['ref']['flux_tube']['splu']:.0f} bare factorizations, or "
            f"{s['wall'] / r['ref']['kwant_smatrix']:.0f} kwant.smatrix calls "
            f"for {s['n_energies']} x 201 (E, flux) points."
        )
        lines.append("")
    Path(path).write_text("\n".join(lines))


def keep_section2(path: str, r: dict) -> None:
    """Write sections 1 and 3 anew and carry section 2 over from the previous file, marked."""
    old = Path(path).read_text()
    a, b = old.index("## 2. "), old.index("## 3. ")
    carried = old[a:b].rstrip().split("\n")
    carried.insert(
        2, "(Carried over unchanged from the previous run of this file; not re-run with "
        "`--flux-only`.)\n"
    )  # fmt: skip
    r["section2"] = "\n".join(carried) + "\n\n"
    write(path, r)
    print(f"wrote {path}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer points, 1 K flux tube only")
    ap.add_argument("--uniform-points", type=int, default=61)
    ap.add_argument(
        "--flux-only", action="store_true",
        help="re-run sections 1 and 3 only; section 2 is kept from the existing output file",
    )  # fmt: skip
    ap.add_argument("--output", default=str(HERE / "RESULTS-spectral-modes.md"))
    args = ap.parse_args()
    r = {"argv": " ".join(sys.argv[1:]), "load_start": load()}
    ring_f, ring_u = ring_of("flux_tube"), ring_of("uniform")
    r["n_sites"] = ring_u.n_sites
    print(f"{ring_u.n_sites} sites; threads: {thread_settings()}", flush=True)
    r["ref"] = references(ring_u, ring_f)
    temps = (1.0,) if args.quick else (1.0, 0.3)
    r["flux"] = [flux_tube(ring_f, 51 if args.quick else 201, t) for t in temps]
    r["accuracy"] = pencil_accuracy(ring_f, 51 if args.quick else 201, 1.0)
    print(f"pencil accuracy: {r['accuracy']}", flush=True)
    if args.flux_only:
        r["load_end"] = load()
        keep_section2(args.output, r)
        return
    r["uniform"] = uniform_probes(ring_u, 11 if args.quick else args.uniform_points, 0.3)
    r["load_end"] = load()
    if not args.quick:
        write(args.output, r)
        print(f"wrote {args.output}")
    os.sys.stdout.flush()


if __name__ == "__main__":
    main()
