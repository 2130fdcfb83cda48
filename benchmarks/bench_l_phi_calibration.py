"""Validation and cost of the per-device L_phi calibration (ringkit.transport.probe_calibration).

Part A (statistics, small rings): disorder seeds, arm widths 3-15 sites, energies and disorder
strengths drawn from ``numpy.random.default_rng(BENCH_SEED)`` (20261205, a generator used
neither in development nor by the unit test, which uses 20261204). For each ring the probes
are calibrated for the requested L_phi on 16 energies; the realised L_phi is then measured on
16 held-out energies (interleaved with the calibration energies, same window). Prints
realised/requested ratios and the fraction within 15 %.

Part C (definition check): at a FIXED probe coupling and probe density, the per-device
realised L_phi (-pi r/ln rho on each ring) is compared with the L_phi of the size fit
ln rho = ln C - pi r/L_phi over rings of several radii (the reviewer's definition: damping of
the h/e amplitude with the path length). Equal values and ln C ~ 0 mean that the per-device
measurement realises the same L_phi as the size-scaling definition.

Part B (cost, realistic ring): a GaAs ring of mean radius 0.5 um (ringkit device, flux-tube
mode), calibration time and the equivalent number of factorizations; median of repeats,
load average printed. Thread settings: OPENBLAS_NUM_THREADS as set in the environment
(recommend 1); the small dense blocks run with one BLAS thread (threadpoolctl).

Run from the repository root:
    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_l_phi_calibration.py [--quick]
Writes benchmarks/RESULTS-l_phi-calibration.md.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from engine_systems import square_ring

from ringkit.transport.lowrank import FluxTubeModel
from ringkit.transport.probe_calibration import (
    ProbeFluxSolver,
    calibrate_probes,
    default_calibration_energies,
    measure_realised_l_phi,
)

BENCH_SEED = 20261205
OUT = Path(__file__).with_name("RESULTS-l_phi-calibration.md")


def _velocity(fsyst, energy):
    prop, _ = fsyst.leads[0].modes(energy)
    return float(np.mean(np.abs(prop.velocities)))


def part_a(n_cases: int, l_phi: float = 30.0, rm: float = 18.0) -> list[str]:
    rng = np.random.default_rng(BENCH_SEED)
    rows, ok = [], []
    for _ in range(n_cases):
        seed, w = int(rng.integers(0, 2**31)), int(rng.integers(3, 16))
        e0, dis = float(rng.uniform(0.6, 1.4)), float(rng.uniform(0.5, 1.0))
        fs = square_ring(
            rm + w / 2, rm - w / 2, min(w, 6), disorder=dis, seed=seed, field_param="flux"
        )
        model = FluxTubeModel(fs, flux_period=1.0)
        t0 = time.perf_counter()
        pr = calibrate_probes(model, l_phi, e0, n_probes=64, radius=rm)
        tc = time.perf_counter() - t0
        v = _velocity(fs, e0)
        e_c = v / (2 * np.pi * rm)
        held = default_calibration_energies(e0 + 0.5 * e_c, v, rm, 16)
        m = measure_realised_l_phi(ProbeFluxSolver(model, pr.sites, held), pr.eta, radius=rm)
        ratio = m["l_phi_realised"] / l_phi
        ok.append(abs(ratio - 1) <= 0.15)
        rows.append(
            f"| {seed} | {w} | {e0:.3f} | {dis:.2f} | {fs.graph.num_nodes} | "
            f"{pr.info['l_phi_realised'] / l_phi:.3f} ± "
            f"{pr.info['l_phi_realised_err'] / l_phi:.3f} "
            f"| {ratio:.3f} ± {m['l_phi_realised_err'] / l_phi:.3f} | {pr.info['n_steps']} | "
            f"{tc:.2f} |"
        )
        print(rows[-1], flush=True)
    frac = float(np.mean(ok))
    head = [
        f"## A. Realised / requested L_phi (requested {l_phi:g} a, mean radius {rm:g} a, "
        f"64 probes, generator default_rng({BENCH_SEED}))",
        "",
        "| disorder seed | arm width (sites) | E (t) | W (t) | sites | calibrated (16 E) | "
        "held-out (16 E) | steps | time (s) |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    return head + rows + ["", f"Held-out realised within 15 %: **{frac:.0%}** of {n_cases}.", ""]


def part_c(eta: float = 0.2, width: int = 5, density: float = 0.5) -> list[str]:
    rng = np.random.default_rng(BENCH_SEED + 1)
    radii = (10.0, 14.0, 18.0, 22.0, 26.0)
    rows, lr_all, pl_all = [], [], []
    for rm in radii:
        per = []
        for _ in range(3):
            seed, e0 = int(rng.integers(0, 2**31)), float(rng.uniform(0.8, 1.2))
            fs = square_ring(
                rm + width / 2, rm - width / 2, width, disorder=0.7, seed=seed, field_param="flux"
            )
            model = FluxTubeModel(fs, flux_period=1.0)
            v = _velocity(fs, e0)
            n_p = int(round(2 * np.pi * rm * density))
            from ringkit.transport.probes import ring_probe_sites

            sol = ProbeFluxSolver(
                model, ring_probe_sites(fs, n_p), default_calibration_energies(e0, v, rm, 16)
            )
            m = measure_realised_l_phi(sol, eta, radius=rm)
            per.append(m["log_ratio"])
            lr_all.append(m["log_ratio"])
            pl_all.append(np.pi * rm)
        lr = float(np.mean(per))
        rows.append(
            f"| {rm:g} | {np.pi * rm:.1f} | {lr:.3f} ± {np.std(per, ddof=1) / np.sqrt(3):.3f} "
            f"| {-np.pi * rm / lr:.1f} |"
        )
        print(rows[-1], flush=True)
    (slope, icpt), cov = np.polyfit(pl_all, lr_all, 1, cov=True)
    l_fit, l_err = -1 / slope, np.sqrt(cov[0, 0]) / slope**2
    return [
        f"## C. Per-device versus size-fit L_phi (fixed eta = {eta} t, {density} probes per "
        f"site of circumference, width {width}, W = 0.7 t, 3 seeds per radius, "
        f"default_rng({BENCH_SEED + 1}))",
        "",
        "| r (a) | pi r (a) | ln rho (mean ± sem) | per-device L_phi (a) |",
        "|---|---|---|---|",
        *rows,
        "",
        f"Size fit ln rho = ln C - pi r/L_phi: L_phi = {l_fit:.1f} ± {l_err:.1f} a, "
        f"ln C = {icpt:.3f} ± {np.sqrt(cov[1, 1]):.3f}.",
        "",
    ]


def _a_values(model, energy, solver):
    """Data of E - H - Sigma_leads in the solver's pattern (for the bare-factorization time)."""
    from ringkit.transport._lowrank_linalg import lead_self_energies

    n = model.h0.shape[0]
    sig = lead_self_energies(model.fsyst.leads, model.params, energy, {})
    vals = [-model.h0.data, np.zeros(model.cut.n_entries), np.full(n, energy)]
    return vals + [-x.ravel() for x in sig]


def part_b(repeats: int) -> list[str]:
    from ringkit.device import Material, RingDevice, RingGeometry
    from ringkit.tightbinding import build_ring

    dev = RingDevice(
        Material.preset("GaAs", temperature=0.3),
        RingGeometry.from_mean_radius(0.5e-6, 0.12e-6),
        field_mode="flux_tube",
    )
    ring = build_ring(dev, seed=11)
    e_t = ring.fermi_energy_lattice
    a = ring.lattice_spacing
    lines = [
        "## B. Cost at realistic size",
        "",
        f"GaAs ring, mean radius 0.5 um, arm width 0.12 um, a = {a * 1e9:.2f} nm, "
        f"{ring.n_sites} sites, E_F = {e_t:.4f} t, requested L_phi = 1.0 um "
        "(pi r/L_phi = 1.57).",
        "",
    ]
    model = FluxTubeModel(ring.fsyst, params=ring.params())
    times, res = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        res = calibrate_probes(
            model, 1.0e-6 / a, e_t, n_probes=100, radius=dev.geometry.mean_radius / a
        )
        times.append(time.perf_counter() - t0)
    # baselines: plain kwant.smatrix (one energy, one flux, no probes), the bare sparse
    # factorization of E - H - Sigma, and the dephasing sweep the calibration serves (16
    # energies x 64 flux points with the 100 calibrated probes, FluxTubeSweeper)
    import kwant

    from ringkit.transport.lowrank import FluxTubeSweeper

    t0 = time.perf_counter()
    kwant.smatrix(ring.fsyst, e_t, params=ring.params())
    t_kwant = time.perf_counter() - t0
    solver = ProbeFluxSolver(model, res.sites, [e_t])
    t0 = time.perf_counter()
    solver._lu.factor(solver._pattern.matrix(solver._pattern.fill(_a_values(model, e_t, solver))))
    t_fact = time.perf_counter() - t0
    t0 = time.perf_counter()
    probed = model.with_probes(res)
    flux = np.linspace(0, 2, 64) * model.flux_period
    for e in res.info["calibration_energies"]:
        FluxTubeSweeper(probed, energy=e).conductance(flux)
    t_sweep = time.perf_counter() - t0
    med = float(np.median(times))
    lines += [
        "| step | time (s) | calibration / step |",
        "|---|---|---|",
        f"| calibration (16 energies, {res.info['n_steps']} coupling evaluations), median of "
        f"{repeats} | {med:.2f} | 1 |",
        f"| plain kwant.smatrix, one energy and flux, no probes | {t_kwant:.2f} | "
        f"{med / t_kwant:.1f} |",
        f"| bare sparse factorization of E - H - Sigma (MUMPS) | {t_fact:.3f} | "
        f"{med / t_fact:.1f} |",
        f"| dephasing flux sweep, 16 energies x 64 fluxes, 100 probes | {t_sweep:.2f} | "
        f"{med / t_sweep:.2f} |",
        "",
        f"* realised L_phi = {res.info['l_phi_realised'] * a * 1e6:.3f} ± "
        f"{res.info['l_phi_realised_err'] * a * 1e6:.3f} um (requested 1.000 um); "
        f"eta = {res.eta:.4g} t",
        "",
    ]
    return lines


def main() -> None:
    quick = "--quick" in sys.argv
    warnings.simplefilter("ignore")
    load0 = os.getloadavg()
    lines = [
        "# L_phi calibration: validation and cost",
        "",
        "Generated by `benchmarks/bench_l_phi_calibration.py`. "
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}; "
        f"load average at start {load0[0]:.2f}, {load0[1]:.2f}, {load0[2]:.2f} (2 shared cores, "
        "other jobs running).",
        "Convention: h/e damped as exp(-L/L_phi), L = pi r (ringkit.conventions).",
        "",
    ]
    if "--only-b" in sys.argv:
        print("\n".join(part_b(1)))
        return
    if "--only-c" in sys.argv:
        print("\n".join(part_c()))
        return
    lines += part_a(6 if quick else 30)
    lines += part_c()
    lines += part_b(1 if quick else 3)
    load1 = os.getloadavg()
    lines.append(f"Load average at end: {load1[0]:.2f}, {load1[1]:.2f}, {load1[2]:.2f}.")
    OUT.write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
