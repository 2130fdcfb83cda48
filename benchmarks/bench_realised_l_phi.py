"""Cost of the realised-L_phi calibration now that it is on by default (issue 15.1).

Device: GaAs ring, mean radius 0.5 um, arm width 0.12 um (ringkit device, flux-tube mode,
seed 11; 28.6k sites), the ring of benchmarks/bench_l_phi_calibration.py part B.

Part 1 (library sweep): ``fast_field_conductance`` at T = 0.3 K with L_phi = 1 um and 100
probes over one h/e period (64 flux points), three ways:
  * ``calibrate_l_phi=False`` (analytic coupling: the cost before the default changed),
  * default, cold cache (the calibration's set-up and secant run in this call),
  * default, warm cache (the same device again: served from the per-process cache);
plus the calibration alone for the uniform-field twin of the same device (its extra cost is the
build of the flux-tube twin).

Part 2 (study unit): one dephased work unit of the default study
(``ringkit/study/default_study.toml``: flux-tube GaAs ring, T = 0.25 K and 1 K, L_phi = 2 um,
40 probes), once as written and once with the geometry of the 0.5 um ring (radius 500 nm, arm
width 120 nm). Reported: the unit's wall time (cold calibration cache) and the calibration
alone (``realised_ring_probes`` on the unit's lattice, cold cache).

Medians of ``--repeats`` runs (default 1; the machine has 2 shared cores and other jobs run
at the same time, so the load average is printed with every table). Thread settings:
OPENBLAS_NUM_THREADS as set in the environment (recommend 1); ringkit limits BLAS to one
thread in the dense calibration blocks and in study units.

Run from the repository root:
    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_realised_l_phi.py [--repeats N]
Prints Markdown (copy into docs/probes.md "Realised L_phi", cost paragraph).
"""

from __future__ import annotations

import os
import sys
import time
import warnings

import numpy as np


def _load() -> str:
    a, b, c = os.getloadavg()
    return f"load average {a:.2f}, {b:.2f}, {c:.2f}"


def _ring(mode: str = "flux_tube"):
    from ringkit.device import Material, RingDevice, RingGeometry
    from ringkit.tightbinding import build_ring

    dev = RingDevice(
        Material.preset("GaAs", temperature=0.3),
        RingGeometry.from_mean_radius(0.5e-6, 0.12e-6),
        field_mode=mode,
    )
    return build_ring(dev, seed=11)


def _timed(fn, repeats: int, before=None) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        if before is not None:
            before()
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), out


def part1(repeats: int) -> list[str]:
    from ringkit.transport.realised_l_phi import clear_calibration_cache, realised_ring_probes
    from ringkit.transport.sweep import fast_field_conductance
    from ringkit.units import PHI0

    ring = _ring()
    flux = np.linspace(0, 1, 64, endpoint=False) * PHI0
    kw = dict(energy=ring.fermi_energy, temperature=0.3, l_phi=1e-6, n_probes=100)

    def sweep(cal: bool):
        return fast_field_conductance(ring, flux, calibrate_l_phi=cal, **kw)

    lines = [
        "### 1. Library sweep, 0.5 um GaAs ring",
        "",
        f"{ring.n_sites} sites, flux-tube mode, T = 0.3 K, L_phi = 1 um, 100 probes, 64 flux "
        f"points; {_load()} at start.",
        "",
        "| run | time (s) | / opt-out sweep | n_energies | realised L_phi (um) |",
        "|---|---|---|---|---|",
    ]
    t_off, r_off = _timed(lambda: sweep(False), repeats)
    t_cold, r_cold = _timed(lambda: sweep(True), repeats, before=clear_calibration_cache)
    t_warm, r_warm = _timed(lambda: sweep(True), repeats)
    for name, t, r in (
        ("calibrate_l_phi=False (analytic coupling)", t_off, r_off),
        ("default, cold cache (calibration in the call)", t_cold, r_cold),
        ("default, warm cache (same device again)", t_warm, r_warm),
    ):
        i = r.info
        real = (
            "not measured"
            if np.isnan(i["l_phi_realised_m"])
            else f"{i['l_phi_realised_m'] * 1e6:.3f} ± {i['l_phi_realised_err_m'] * 1e6:.3f}"
        )
        lines.append(f"| {name} | {t:.1f} | {t / t_off:.2f} | {i['n_energies']} | {real} |")
    uni = _ring("uniform")
    e_t = uni.fermi_energy_lattice
    t_uni, _ = _timed(
        lambda: realised_ring_probes(uni, 1e-6, e_t, uni.params(), 100),
        repeats,
        before=clear_calibration_cache,
    )
    t_tube, _ = _timed(
        lambda: realised_ring_probes(ring, 1e-6, e_t, ring.params(), 100),
        repeats,
        before=clear_calibration_cache,
    )
    lines += [
        "",
        f"Calibration alone, cold cache: flux-tube ring {t_tube:.1f} s; uniform-field ring "
        f"{t_uni:.1f} s (includes building its flux-tube twin). {_load()} at the end.",
        "",
    ]
    return lines


def _study_unit(overrides: dict, repeats: int) -> tuple[str, float, float, dict]:
    from importlib.resources import files

    from ringkit.study import compute, parse_config
    from ringkit.study.plan import make_plan
    from ringkit.transport.realised_l_phi import clear_calibration_cache, realised_ring_probes

    text = files("ringkit.study").joinpath("default_study.toml").read_text()
    cfg = parse_config(text).with_overrides({"ensemble.realizations": 1, **overrides})
    plan = make_plan(cfg)
    unit = next(u for u in plan.units if np.isfinite(u.l_phi))
    task = compute.make_tasks(plan, [unit])[0]
    t_unit, res = _timed(lambda: compute.compute_unit(task), repeats, before=compute.clear_cache)
    ring = compute.state_for(task).ring
    n_probes = int(task.physics["dephasing"]["probes"])
    t_cal, _ = _timed(
        lambda: realised_ring_probes(
            ring, unit.l_phi, ring.fermi_energy_lattice, ring.params(), n_probes
        ),
        repeats,
        before=clear_calibration_cache,
    )
    return f"{ring.n_sites}", t_unit, t_cal, res.info | {"n_energies": res.n_energies}


def part2(repeats: int) -> list[str]:
    lines = [
        "### 2. Study unit, default study (ringkit/study/default_study.toml)",
        "",
        f"One dephased unit (L_phi = 2 um, 40 probes, T = 0.25 K and 1 K, thermal tol 1e-3, "
        f"97 flux points), cold caches; {_load()} at start.",
        "",
        "| geometry | sites | unit (s) | calibration alone (s) | share | realised L_phi (um) |",
        "|---|---|---|---|---|---|",
    ]
    print("\n".join(lines), flush=True)
    lines = []
    for label, over in (
        # the config holds r_in/r_out after validation: r = 500 nm, w = 120 nm
        ("r = 500 nm, w = 120 nm", {"geometry.r_in": "440 nm", "geometry.r_out": "560 nm"}),
        ("as written (r = 400 nm, w = 60 nm)", {}),
    ):
        sites, t_unit, t_cal, info = _study_unit(over, repeats)
        real = f"{info['l_phi_realised_m'] * 1e6:.3f} ± {info['l_phi_realised_err_m'] * 1e6:.3f}"
        row = f"| {label} | {sites} | {t_unit:.1f} | {t_cal:.1f} | {t_cal / t_unit:.0%} | {real} |"
        print(row + f" <!-- {_load()}; n_energies {info['n_energies']} -->", flush=True)
    lines += ["", f"{_load()} at the end.", ""]
    return lines


def main() -> None:
    warnings.simplefilter("ignore")
    repeats = int(sys.argv[sys.argv.index("--repeats") + 1]) if "--repeats" in sys.argv else 1
    head = [
        "## Realised L_phi by default: measured cost",
        "",
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}; "
        f"median of {repeats} run(s); 2 shared cores with other jobs running.",
        "",
    ]
    print("\n".join(head), flush=True)
    if "--only-study" not in sys.argv:
        print("\n".join(part1(repeats)), flush=True)
    if "--only-sweep" not in sys.argv:
        print("\n".join(part2(repeats)), flush=True)


if __name__ == "__main__":
    main()
