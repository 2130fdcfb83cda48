"""Latency of the device explorer's live lattice view, per kind of control change.

Run from the repository root (about 2-4 minutes on 2 cores)::

    .venv/bin/python benchmarks/bench_live_preview.py

Options: ``--sizes default`` (also ``10k``), ``--repeats 3`` (changes per control kind),
``--scenarios T0 T0.3`` (default both), ``--out benchmarks/RESULTS-live-preview.md``.

A headless :class:`ringkit.view.panels.DeviceExplorer` (live lattice on, the default; run
synchronously here, in a Jupyter kernel the lattice runs in a background thread) is driven
through its controls like a user would. Each change draws the single-channel network frame at
once, then the exact flux-tube lattice G(Phi) and spectrum
(:class:`ringkit.view.panels.explorer_live.LiveLattice`): with dephasing probes first with the
analytic probe coupling ("lattice frame"), then, after the probe coupling is calibrated on the
device (realised L_phi), the final "calibrated frame" (the panel's default). Every change uses a
new value (no cache hit from an earlier value). Printed per control kind and frame: the median
and largest wall time from the control change until the frame is drawn, the median CPU time
(this process and its energy worker processes, BLAS limited to one thread: what the update
costs on one core, whatever else runs on a shared machine), an idle-machine estimate (this
process's CPU time plus the workers' CPU time divided by their number), the split of that
frame's computation (build, probes, model, factorize, sweep), the energies and the thermal
error estimate, and how often the lattice was rebuilt.

Engine comparison (``--compare-temperatures``, default 0.3 and 1 K): the thermal part of one
update on the default ring (lattice, probes and model already made) by the live path (one
sparse factorization per energy: with probes a block independent of the probe coupling, see
:mod:`ringkit.view.panels.explorer_live`) and by the spectral energy engine
(:class:`ringkit.transport.spectral.SpectralSweeper`, cut mode, the same 40 probes) at the
same policy, tolerance and energies, with its cost split (set-up, the bare sparse
factorization, Lanczos block steps, convergence checks, energies), the Lanczos steps, the
model error and the largest difference of the two G lines.

Rings (circular, GaAs preset, automatic spacing a = 0.5/kF = 3.64 nm): ``default``: the
explorer's default device (mean radius 0.5 um, 100 nm arms, L_phi = 2 um: 40 floating
probes); ``10k``: 280 nm / 75 nm. Scenarios: ``T0`` (T = 0) and ``T0.3`` (T = 0.3 K: the
error-controlled thermal policy, :func:`ringkit.thermal_policy.energy_average`, at the live
tolerance ``LIVE_TOL`` = 1e-2 e^2/h with a budget of ``LIVE_MAX_ENERGIES`` energies; the
number of energies and the error estimate reached are printed per control). Targets (issue 11
pt 4): median <= 1 s at T = 0 and <= 2 s at 0.3 K for every control. BLAS threads: limited to
one per update by the panel (threadpoolctl), reported below with the load average; the
machine is shared, so the wall times depend on the load and the CPU time of the update (one
core, one BLAS thread: about the wall time on an idle core) is the fair figure.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time
from dataclasses import replace
from functools import partial
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import numpy as np  # noqa: E402

from ringkit.view.panels import DeviceExplorer  # noqa: E402
from ringkit.view.panels.explorer import ExplorerParams  # noqa: E402
from ringkit.view.panels.explorer_live import (  # noqa: E402
    LIVE_MAX_ENERGIES,
    LIVE_TOL,
    LiveLattice,
    live_device,
    single_thread_blas,
)

SIZES = {"default": (0.5e-6, 0.1e-6), "10k": (280e-9, 75e-9)}
SCENARIOS = {"T0": dict(temperature=0.0), "T0.3": dict(temperature=0.3)}


def _changes(kind: str, n: int, base: ExplorerParams) -> list:
    """``n`` new values of control ``kind`` (display units of the panel), none repeated."""
    r_nm, w_nm = base.radius * 1e9, base.width * 1e9
    k = np.arange(1, n + 1)
    table = {
        "radius": [r_nm + 10.0 * i for i in k],
        "width": [w_nm + 5.0 * i for i in k],
        "width ratio": [round(1.0 + 0.05 * i, 2) for i in k],
        "asymmetry (lead angle)": [180.0 - 3.0 * i for i in k],
        "mobility": [3.0e5 + 2.0e4 * i for i in k],
        "seed": [int(i) for i in k],
        "density": [round(3.0 + 0.05 * i, 3) for i in k],
        "gate": [0.25 * i for i in k],
        "L_phi": [round(2.0 + 0.3 * i, 2) for i in k],
        "temperature": [round(base.temperature + 0.02 * i, 2) for i in k],
        "field window": [(-20.0 - 3 * i, 20.0 + 2 * i) for i in k],
    }
    return table[kind]


_CONTROL = {
    "radius": "radius",
    "width": "width",
    "width ratio": "width_ratio",
    "asymmetry (lead angle)": "lead_angle",
    "mobility": "mobility",
    "seed": "seed",
    "density": "density",
    "gate": "gate",
    "L_phi": "l_phi",
    "temperature": "temperature",
    "field window": "field",
}


def _workers() -> str:
    try:
        from ringkit.transport.energy_pool import thermal_workers
    except ImportError:
        return "none (ringkit.transport.energy_pool not available: serial)"
    return str(thermal_workers())


def _cpu() -> np.ndarray:
    """CPU seconds of this process and of its finished children (the energy workers)."""
    t = os.times()
    return np.array([t.user + t.system, t.children_user + t.children_system])


_PARTS = ("build", "probes", "model", "factorize", "sweep")


def _frame(result, wall: float, cpu: np.ndarray) -> dict:
    """Wall time, CPU time (this process + workers), idle estimate and facts of one frame."""
    own, kids = cpu
    workers = max(1, result.timings.get("workers", 1))
    # on an idle machine: this process's part, plus the workers' part spread over them
    return dict(wall=wall, cpu=own + kids, idle=own + kids / workers, timings=result.timings,
                n_e=result.n_energies, err=result.thermal_error)  # fmt: skip


def _summary(frames: list[dict]) -> dict:
    med = statistics.median
    return dict(
        wall=med(f["wall"] for f in frames),
        worst=max(f["wall"] for f in frames),
        cpu=med(f["cpu"] for f in frames),
        idle=med(f["idle"] for f in frames),
        split={p: med(f["timings"][p] for f in frames) for p in _PARTS},
        energies=med(f["n_e"] for f in frames),
        error=max(f["err"] for f in frames),
    )


def run(size: str, scenario: str, repeats: int) -> list[dict]:
    """Drive the panel's controls; per change, the analytic-coupling lattice frame (drawn
    first when there are probes) and the final frame (calibrated coupling) are timed."""
    radius, width = SIZES[size]
    params = ExplorerParams(radius=radius, width=width, **SCENARIOS[scenario])
    ex = DeviceExplorer(params, background=False)
    print(f"  live tolerance {ex.live_view.tol:g} e^2/h, budget {ex.live_view.max_energies} "
          f"energies, energy workers {ex.live_view.workers}", file=sys.stderr)  # fmt: skip
    assert ex.live is not None, ex.live_note or ex.message.value
    n_sites = ex.live.n_sites
    seen: list = []
    draw_first = ex._live_frame

    def spy(p, result):  # the analytic-coupling frame, drawn before the calibration runs
        seen.append((time.perf_counter(), _cpu(), result))
        draw_first(p, result)

    ex._live_frame = spy
    rows = []
    for kind in _CONTROL:
        first, analytic, final, rebuilt = [], [], [], 0
        for value in _changes(kind, repeats, params):
            seen.clear()
            c0, t0 = _cpu(), time.perf_counter()
            ex.controls[_CONTROL[kind]].value = value
            c1 = _cpu()
            if ex.live is None:
                raise RuntimeError(ex.message.value or ex.live_note)
            first.append(ex.latency)
            final.append(_frame(ex.live, ex.live_latency, c1 - c0))
            if seen:
                t_a, c_a, res_a = seen[0]
                analytic.append(_frame(res_a, t_a - t0, c_a - c0))
            else:  # no probes or no calibration: the only lattice frame
                analytic.append(final[-1])
            rebuilt += ex.live.rebuilt
        rows.append(
            dict(
                size=size,
                sites=n_sites,
                scenario=scenario,
                kind=kind,
                first=statistics.median(first),
                analytic=_summary(analytic),
                final=_summary(final),
                calibrated=bool(seen),
                rebuilt=rebuilt,
                n=len(final),
                probes=ex.live.n_probes,
            )  # fmt: skip
        )
        a, f = rows[-1]["analytic"]["wall"], rows[-1]["final"]["wall"]
        print(f"  {size} {scenario:5s} {kind:23s} lattice frame {1e3 * a:5.0f} ms, calibrated "
              f"{1e3 * f:5.0f} ms (medians)", file=sys.stderr)  # fmt: skip
        # back to the base value so that every kind starts from the same device
        ex.controls[_CONTROL[kind]].value = _base_value(kind, params)
    return rows


def _base_value(kind: str, p: ExplorerParams):
    return {
        "radius": p.radius * 1e9, "width": p.width * 1e9, "width ratio": p.width_ratio,
        "asymmetry (lead angle)": 180.0, "mobility": 4.0e4, "seed": p.seed, "density": 3.0,
        "gate": 0.0, "L_phi": 2.0, "temperature": p.temperature,
        "field window": (p.field_min * 1e3, p.field_max * 1e3),
    }[kind]  # fmt: skip


# --------------------------------------------------------------------------- engine comparison
def _timed(owner, name: str, sink: list):
    """Wrap ``owner.name`` so that every call adds its wall time to ``sink``."""
    fn = getattr(owner, name)

    def wrapper(*a, **kw):
        t0 = time.perf_counter()
        try:
            return fn(*a, **kw)
        finally:
            sink.append(time.perf_counter() - t0)

    return fn, wrapper


def _spectral_rows(sw, period: tuple, k: np.ndarray, energies: np.ndarray) -> np.ndarray:
    """Conductance per spin of the spectral model at ``energies`` and the plotted fluxes."""
    return sw.conductance_of(sw.reduced[0], energies, period)[:, k]


def compare_spectral(temperatures: list[float], model_tols: list[float], repeats: int) -> list[str]:
    """Thermal part of one live update on the default ring: the live path (one sparse
    factorization per energy, in the energy workers) against the spectral
    engine in cut mode with the same probes, policy, tolerance and energies.

    The lattice, probes and probe-free model are made first (a T = 0 update), so the times
    below are only what a temperature update costs after them. The spectral split: set-up
    (Peierls model from kwant, lead modes, terminal block), the bare sparse factorization of
    the extended Hamiltonian (``scipy.sparse.linalg.splu``, timed separately), Lanczos block
    steps, convergence checks, and the energies of the policy (same energies as the live path:
    same policy call, same budget).
    """
    import scipy.sparse as sp
    import scipy.sparse.linalg as sla

    from ringkit.thermal_policy import energy_average, sampled_half_width
    from ringkit.transport import _spectral_lanczos as lz_mod
    from ringkit.transport.spectral import SpectralSweeper
    from ringkit.transport.sweep import _band_projector, transmission_bound
    from ringkit.units import K_B, PHI0

    out = [
        "",
        "## Engine comparison: thermal part of one 0.3 K / 1 K update (default ring, 40 probes)",
        "",
        f"load average (1 min) at start: {os.getloadavg()[0]:.1f}",
        "",
        "| T, K | path | model_tol (per spin) | energies | CPU time median, s | wall median, s "
        "| split, s | Lanczos steps | model error (per spin) | max abs(G - G_live), e²/h |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    p0 = ExplorerParams(temperature=0.0)
    for temp in temperatures:
        live_cpu, live_wall, live = [], [], None
        for _ in range(repeats):
            view = LiveLattice()
            view.compute(p0)  # lattice, probes, model (not timed)
            c0, w0 = _cpu(), time.perf_counter()
            live = view.compute(replace(p0, temperature=temp))
            live_cpu.append(float(np.sum(_cpu() - c0)))
            live_wall.append(time.perf_counter() - w0)
        ring = view.ring
        probes = next(iter(view._probes.values()))
        f = live.timings["factorize"]
        out.append(
            f"| {temp:g} | live (one factorization per energy, "
            f"{live.timings.get('workers', 1)} workers) | - | {live.n_energies} "
            f"| {statistics.median(live_cpu):.2f} | {statistics.median(live_wall):.2f} "
            f"| energies {f:.2f} (wall) | - | - | 0 (thermal error {live.thermal_error:.2g}) |"
        )
        e_t = ring.fermi_energy_lattice
        params = ring.params(flux=0.0)
        kt = K_B * temp / ring.hopping
        bound = transmission_bound(ring, e_t, temp, view.tol, params)
        half = sampled_half_width(kt, 0.5 * view.tol, bound)
        m = live.points_per_period
        period = tuple(float(v) for v in np.arange(m) * (PHI0 / m))
        k = np.rint(live.flux / (PHI0 / m)).astype(np.int64) % m
        for mtol in model_tols:
            cpu, wall, splits, steps, merr, dg = [], [], [], 0, 0.0, 0.0
            for _ in range(repeats):
                steps_t, checks_t = [], []
                orig_step, step = _timed(lz_mod.BlockLanczos, "step", steps_t)
                with single_thread_blas():
                    c0, w0 = _cpu(), time.perf_counter()
                    sw = SpectralSweeper(ring.fsyst, field_param="flux", params=params, mu=e_t,
                                         half_width=half, probes=probes, model_tol=mtol,
                                         workers=1)  # fmt: skip
                    t_setup = time.perf_counter() - w0
                    _, sw.conductance_of = _timed(sw, "conductance_of", checks_t)
                    lz_mod.BlockLanczos.step = step
                    try:
                        t1 = time.perf_counter()
                        sw.models(np.array(period))
                        t_models = time.perf_counter() - t1
                    finally:
                        lz_mod.BlockLanczos.step = orig_step
                        del sw.conductance_of
                    t2 = time.perf_counter()
                    avg = energy_average(
                        partial(_spectral_rows, sw, period, k), e_t, kt, tol=0.5 * view.tol,
                        bound=bound, functionals=_band_projector(ring, live.flux), batched=True,
                        max_energies=view.max_energies,
                    )  # fmt: skip
                    t_energies = time.perf_counter() - t2
                    cpu.append(float(np.sum(_cpu() - c0)))
                    wall.append(time.perf_counter() - w0)
                    h = sw.hamiltonian(0.0).real
                    t3 = time.perf_counter()
                    sla.splu((h - sw.mu * sp.identity(sw.n_ext, format="csc")).tocsc())
                    t_lu = time.perf_counter() - t3
                splits.append((t_setup, t_lu, sum(steps_t), sum(checks_t),
                               t_models - sum(steps_t) - sum(checks_t), t_energies))  # fmt: skip
                steps, merr = sw.steps[0], sw.model_error
                assert avg.n_energies == live.n_energies, (avg.n_energies, live.n_energies)
                np.testing.assert_allclose(avg.energies * ring.hopping, live.energies, rtol=1e-12)
                dg = max(dg, float(np.max(np.abs(2.0 * avg.value - live.conductance))))
            s = np.median(np.array(splits), axis=0)
            out.append(
                f"| {temp:g} | spectral, cut mode ({sw.n_terminal} terminal columns, "
                f"{sw.n_ext} orbitals) | {mtol:g} | {avg.n_energies} "
                f"| {statistics.median(cpu):.2f} | {statistics.median(wall):.2f} "
                f"| set-up {s[0]:.2f}, bare splu {s[1]:.3f}, Lanczos steps {s[2]:.2f}, "
                f"checks {s[3]:.2f}, rest of model {s[4]:.2f}, energies {s[5]:.2f} "
                f"| {steps} | {merr:.2g} | {dg:.2g} |"
            )
            print("\n".join(out[-1:]), file=sys.stderr)
    out.append(f"\nload average (1 min) at the end of the comparison: {os.getloadavg()[0]:.1f}")
    return out


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="+", default=["default"], choices=list(SIZES))
    ap.add_argument("--scenarios", nargs="+", default=list(SCENARIOS), choices=list(SCENARIOS))
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument(
        "--compare-temperatures",
        nargs="*",
        type=float,
        default=[0.3, 1.0],
        help="temperatures (K) of the live vs spectral comparison (none: skip)",
    )
    ap.add_argument(
        "--model-tols",
        nargs="+",
        type=float,
        default=[5e-5, 1e-9],
        help="model_tol (per spin) of the spectral engine in the comparison",
    )
    ap.add_argument("--compare-repeats", type=int, default=2)
    ap.add_argument("--out", default=str(HERE / "RESULTS-live-preview.md"))
    args = ap.parse_args(argv)

    with single_thread_blas():
        pass  # looks up threadpoolctl once
    from threadpoolctl import threadpool_info

    pools = ", ".join(f"{p['internal_api']} {p['num_threads']} threads" for p in threadpool_info())
    env = {k: os.environ.get(k) for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")}
    out = [
        f"# Live lattice view: latency per control change ({time.strftime('%Y-%m-%d %H:%M')})",
        "",
        f"python {platform.python_version()}, {os.cpu_count()} cores; BLAS pools at start: "
        f"{pools}; each update limits BLAS to 1 thread (threadpoolctl); environment {env}",
        f"live thermal average: ringkit.thermal_policy.energy_average, tol {LIVE_TOL:g} e²/h, "
        f"budget {LIVE_MAX_ENERGIES} energies (T = 0: one energy); energy worker processes: "
        f"{_workers()} (ringkit.transport.energy_pool.thermal_workers; forked per update when "
        "one energy costs > MIN_SECONDS_PER_ENERGY)",
    ]
    for size in args.sizes:
        r, w = SIZES[size]
        est = live_device(ExplorerParams(radius=r, width=w)).site_estimate()
        out.append(f"ring {size}: mean radius {r * 1e9:.0f} nm, arm width {w * 1e9:.0f} nm, {est}")
    rows, loads = [], []
    for size in args.sizes:
        for scenario in args.scenarios:
            load0 = os.getloadavg()[0]
            rows += run(size, scenario, args.repeats)
            loads.append((size, scenario, load0, os.getloadavg()[0]))
    out.append("")
    out.append("load average (1 min) during each block: " + "; ".join(
        f"{s} {c}: {a:.1f} -> {b:.1f}" for s, c, a, b in loads))  # fmt: skip
    out += [
        "",
        "Per change: the network first frame; the first lattice frame (analytic probe coupling, "
        "drawn at once); the final frame (probe coupling calibrated on the device, realised "
        "L_phi; the panel's default with probes). Wall and CPU from the control change. CPU: "
        "this process + energy workers, one BLAS thread each; idle estimate: workers' CPU / "
        "workers. Split: build / probes (final frame: the calibration) / model / factorize / "
        "sweep, ms, of that frame's computation alone.",
        "",
        "| ring | scenario | control | network frame, ms "
        "| lattice frame: wall median, ms | CPU median, ms | idle est., ms | split, ms "
        "| energies | thermal error, e²/h "
        "| calibrated frame: wall median, ms | slowest, ms | CPU median, ms | idle est., ms "
        "| split, ms | energies | thermal error, e²/h | rebuilt |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for row in rows:
        cells = []
        for which in ("analytic", "final"):
            x = row[which]
            split = " / ".join(f"{1e3 * x['split'][p]:.0f}" for p in _PARTS)
            worst = f" | {1e3 * x['worst']:.0f}" if which == "final" else ""
            cells.append(
                f"{1e3 * x['wall']:.0f}{worst} | {1e3 * x['cpu']:.0f} | {1e3 * x['idle']:.0f} "
                f"| {split} | {x['energies']:g} | {x['error']:.2g}"
            )
        scen = f"{row['scenario']} ({row['probes']} probes)"
        out.append(
            f"| {row['size']} ({row['sites']} sites) | {scen} | {row['kind']} "
            f"| {1e3 * row['first']:.0f} | {cells[0]} | {cells[1]} | {row['rebuilt']}/{row['n']} |"
        )
    for scenario, target in (("T0", 1.0), ("T0.3", 2.0)):
        sel = [r for r in rows if r["scenario"] == scenario]
        for which, label in (("analytic", "lattice frame"), ("final", "calibrated frame")):
            if not sel:
                continue
            out.append("")
            for key, what in (("wall", "wall time at this load"),
                              ("cpu", "CPU time (all processes, one BLAS thread)"),
                              ("idle", "idle-machine estimate")):  # fmt: skip
                worst = max(sel, key=lambda r, w=which, k=key: r[w][k])
                val = worst[which][key]
                ok = "meets" if val <= target else "MISSES"
                out.append(f"{scenario} {label}: largest median {what} {1e3 * val:.0f} ms "
                           f"({worst['kind']}), {ok} the {target:g} s target")  # fmt: skip
    out.append(f"\nload average at the end of the control runs: {os.getloadavg()}")
    Path(args.out).write_text("\n".join(out) + "\n")  # kept if the comparison fails
    if args.compare_temperatures:
        out += compare_spectral(args.compare_temperatures, args.model_tols, args.compare_repeats)
    out.append(f"\nload average at the end: {os.getloadavg()}")
    text = "\n".join(out) + "\n"
    print(text)
    Path(args.out).write_text(text)


if __name__ == "__main__":
    main()
