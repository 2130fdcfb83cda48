"""Coverage of the inverse fit on held-out lattice realizations, the T^-1 law, and the cost.

Run from the repository root: ``.venv/bin/python benchmarks/bench_inverse_fit.py [--trials N]``.
Writes ``benchmarks/RESULTS-inverse-fit.md``. Stages are cached under
``benchmarks/.cache-inverse-fit/`` (emulator netCDF + unit checkpoints, one file per trial), so
an interrupted run resumes.

A. Emulator of a small GaAs ring (flux tube, 3e11 cm^-2, mean radius 50 nm, 26 nm arms)
   over T = 0.3-4 K, six L_phi targets and three mean free paths, seeds 0..n-1.
B. Trials: true L_phi(T) = L_ref (T/T_ref)^-1 (the law of Hansen et al., Phys. Rev. B 64,
   045327 (2001), for ballistic GaAs rings between 0.3 and 4 K), L_ref drawn per trial, mean
   free path one of the nodes; one HELD-OUT disorder seed per trial (10000 + k, never in the
   emulator). The lattice model gives G(flux) at each (T, L_phi(T)); six periods with white
   noise are analysed by ``measured_amplitudes_from_traces`` and fitted by ``fit_device``.
   Coverage: fraction of trials whose true L_phi(T_ref) lies in the 68 % / 95 % profile
   intervals (issue 13: 60-76 % and >= 90 %), also per temperature, for p (= 1) and l.
C. Cost: per-energy time of the unit on the 0.5 um GaAs ring (28.6k sites, 100 probes) and
   the extrapolated build time on 2 workers; fit time from the cache.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
CACHE = HERE / ".cache-inverse-fit"
TEMPS = (0.3, 0.5, 0.9, 1.6, 2.5, 4.0)
LPHI_TARGETS = (0.06e-6, 0.12e-6, 0.25e-6, 0.5e-6, 1.0e-6, 2.0e-6)
MFPS = (0.2e-6, 0.4e-6, 0.8e-6)
NOISE = 3e-3  # e^2/h per point (white), invented measurement noise
N_PERIODS, N_FLUX = 6, 24
TARGET = "60-76 %, >= 90 % (issue 13)"
FIT_VERSION = "v3"  # level/slope summary, Hartlap-Percival Gaussian (docs/inverse-fit.md); v2: t


def small_device():
    from ringkit.device import Material, RingDevice, RingGeometry

    geo = RingGeometry.from_mean_radius(50e-9, 26e-9)
    return RingDevice(Material.preset("GaAs"), geo, field_mode="flux_tube")


def load_avg() -> str:
    return ", ".join(f"{x:.2f}" for x in os.getloadavg())


def build(n_seeds: int, workers: int = 2):
    from ringkit.transport.emulator_build import build_emulator

    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        emu = build_emulator(
            small_device(),
            temperatures=TEMPS,
            l_phi_values=LPHI_TARGETS,
            disorder_values=MFPS,
            n_realizations=n_seeds,
            n_probes=40,
            thermal_tol=1e-2,
            n_flux=N_FLUX,
            max_workers=workers,
            cache_path=CACHE / f"emulator-{n_seeds}.nc",
            progress=True,
        )
    return emu, time.perf_counter() - t0


def eta_for(emu, d: int, l_phi: np.ndarray) -> np.ndarray:
    """Coupling realising ``l_phi`` on node d (interpolation of the ensemble realised map)."""
    u = np.where(np.isfinite(emu.l_phi_realised[d]), 1.0 / emu.l_phi_realised[d], 0.0)
    return np.interp(1.0 / np.asarray(l_phi), u, emu.etas[d])


def simulate(args) -> dict:
    """One held-out trial: noisy traces (field, G) at every temperature."""
    from ringkit.transport.emulator_build import EmulatorUnitTask, _device_for

    k, seed, mfp, etas, unit_kwargs = args
    path = CACHE / f"trial-{k}.npz"
    if path.exists():
        return dict(np.load(path))
    task = EmulatorUnitTask(_device_for(small_device(), mfp), tuple(etas), **unit_kwargs)
    amps, _, traces, _ = task.unpack(task(seed))
    j = np.arange(len(etas))
    g = traces[j, j]  # (J, n_flux): L_phi(T_j) at T_j
    rng = np.random.default_rng(seed)
    noisy = np.tile(g, (1, N_PERIODS)) + NOISE * rng.standard_normal(
        (g.shape[0], N_PERIODS * N_FLUX)
    )
    out = {"g": noisy, "amps": amps[j, j]}
    np.savez(path, **out)
    return out


_EMU = {}


def _emulator(path):
    from ringkit.analysis.emulator import AmplitudeEmulator

    if path not in _EMU:
        _EMU[path] = AmplitudeEmulator.load(path)
    return _EMU[path]


def fit_trial(args) -> dict:
    from ringkit.analysis.inverse_fit import fit_device, measured_amplitudes_from_traces
    from ringkit.units import PHI0

    path, g, k = args
    done = CACHE / f"fit-{FIT_VERSION}-{k}.json"
    if done.exists():
        return json.loads(done.read_text())
    emu = _emulator(path)
    dev = small_device()
    r = dev.geometry.mean_radius
    flux = np.arange(N_PERIODS * N_FLUX) * PHI0 / N_FLUX
    field = flux / (math.pi * r * r)
    ms = measured_amplitudes_from_traces(
        [(field, row) for row in g],
        list(TEMPS),
        device=dev,
        background="none",
        band_radii=(0.95 * r, 1.05 * r),
    )
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit_device(ms, emu)
    out = res.to_dict()
    out["fit_time_s"] = time.perf_counter() - t0
    done.write_text(json.dumps(out))
    return out


def loo_trial(args) -> dict:
    """Leave-one-seed-out draw from the emulator itself: the likelihood alone (no lattice).

    Seed ``s`` is removed from the emulator; its own interpolated values at the truth are the
    "measured" amplitudes (no noise, 1e-4 e^2/h errors). Separates the calibration of the
    likelihood from the emulator's interpolation error.
    """
    from ringkit.analysis.inverse_fit import MeasuredAmplitudes, fit_device

    path, k, s, d, lp = args
    done = CACHE / f"loo-{FIT_VERSION}-{k}.json"
    if done.exists():
        return json.loads(done.read_text())
    emu = _emulator(path)
    sub = emu.subset([i for i in range(emu.seeds.size) if i != s])
    v = emu.node_values(d, lp, list(TEMPS))[s]
    ms = [
        MeasuredAmplitudes(t, a, b, g, 1e-4, 1e-4, 1e-4)
        for t, (a, b, g) in zip(TEMPS, v, strict=True)
    ]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit_device(ms, sub, l_phi_per_temperature=False, profile=("l_phi_ref", "p"))
    out = res.to_dict()
    done.write_text(json.dumps(out))
    return out


def time_fits(path, sims) -> tuple[float, str, str]:
    """Median wall time of fresh serial fits (not cached) and the load before/after."""
    from ringkit.analysis.inverse_fit import fit_device, measured_amplitudes_from_traces
    from ringkit.units import PHI0

    emu = _emulator(path)
    dev = small_device()
    r = dev.geometry.mean_radius
    field = np.arange(N_PERIODS * N_FLUX) * PHI0 / N_FLUX / (math.pi * r * r)
    from ringkit.transport._engine_threads import blas_limit

    la0, times = load_avg(), []
    for s in sims:
        with warnings.catch_warnings(), blas_limit():
            warnings.simplefilter("ignore")
            ms = measured_amplitudes_from_traces(
                [(field, row) for row in s["g"]],
                list(TEMPS),
                device=dev,
                background="none",
                band_radii=(0.95 * r, 1.05 * r),
            )
            t0 = time.perf_counter()
            fit_device(ms, emu)
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), la0, load_avg()


def frac(k: int, n: int) -> str:
    """Fraction with its binomial standard error."""
    f = k / max(n, 1)
    return f"{f:.0%} ± {math.sqrt(f * (1 - f) / max(n, 1)):.0%}"


def combined_p(fits) -> tuple[float, float, float, float]:
    """Sum of the rings' profile 2 Delta lnL(p): minimum, 68 % range, value at p = 1.

    Each ring keeps its own L_ref and l (nuisance parameters profiled per ring), so this is
    a pooled statistic, not a calibrated joint fit (Neyman-Scott: many nuisance parameters).
    """
    grid = np.linspace(-0.5, 3.0, 1401)
    tot = np.zeros_like(grid)
    for f in fits:
        pr = f["profiles"].get("p")
        if not pr:
            continue
        x, y = np.asarray(pr["x"], float), np.asarray(pr["two_delta_loglike"], float)
        tot += np.interp(grid, x, np.minimum(y, 1e3))
    tot -= tot.min()
    inn = grid[tot <= 1.0]
    return (
        float(grid[np.argmin(tot)]),
        float(inn[0]),
        float(inn[-1]),
        float(np.interp(1, grid, tot)),
    )


def inside(iv, x) -> bool:
    lo, hi = (math.inf if v == "inf" else (math.nan if v is None else v) for v in iv)
    # 1e-9 relative: truths on the emulator's range edge (mean free path nodes 0.2, 0.8 um)
    # against an open interval ending at exp(ln edge) (rounding only)
    return bool(lo * (1 - 1e-9) <= x <= hi * (1 + 1e-9))


def cost_big(n_energy_sample: int = 3) -> dict:
    """Per-energy unit cost on the 0.5 um GaAs ring, and the energy count of the build."""
    from ringkit.device import Material, RingDevice, RingGeometry
    from ringkit.transport._engine_threads import blas_limit
    from ringkit.transport.emulator_build import (
        EmulatorUnitTask,
        _reference,
        emulator_energy_indices,
    )
    from ringkit.units import K_B

    geo = RingGeometry.from_mean_radius(0.5e-6, 120e-9)
    dev = RingDevice(Material.preset("GaAs", mobility=None, mean_free_path=0.36e-6), geo)
    dev = RingDevice(dev.material, geo, field_mode="flux_tube")
    ref = _reference(dev, 100)
    kts = K_B * np.asarray(TEMPS) / dev.hopping
    bound = 2.0 * ref["n_modes"]
    h0, per_t, union, cal = emulator_energy_indices(kts, ref["e_c"], 2e-3, bound)
    etas = (0.0,) + tuple(np.geomspace(0.002, 0.2, len(LPHI_TARGETS)))
    idx = tuple(int(i) for i in union[:n_energy_sample])
    task = EmulatorUnitTask(dev, etas, (1.0,), h0, idx, ((1, 1),), (idx[0],), 24, 100, 2e-3, bound)
    with blas_limit():
        t0 = time.perf_counter()
        task.conductance(0)
        per_e = (time.perf_counter() - t0) / len(idx)
    return {
        "n_sites": ref["n_sites"],
        "n_modes": ref["n_modes"],
        "n_energies": int(union.size),
        "per_energy_s": per_e,
        "n_eta": len(etas),
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--trials", type=int, default=60)
    ap.add_argument("--seeds", type=int, default=32)
    ap.add_argument("--skip-cost", action="store_true")
    ap.add_argument("--new-cost", action="store_true", help="re-measure section C")
    ap.add_argument("--workers", type=int, default=2)
    opt = ap.parse_args()
    CACHE.mkdir(exist_ok=True)
    lines = ["# Inverse fit: coverage on held-out realizations, T^-1 law, cost", ""]
    la0 = load_avg()
    emu, t_build = build(opt.seeds, opt.workers)
    la1 = load_avg()
    print(f"emulator: {t_build:.0f} s, load {la0} -> {la1}", flush=True)
    from ringkit.transport.emulator_build import _device_for, _reference

    ref = _reference(_device_for(small_device(), MFPS[0]), 40)
    unit_kwargs = dict(
        temperatures=TEMPS,
        h0=emu.info["energy_step_t"],
        indices=None,
        per_t=None,
        cal=None,
    )
    # recompute the energy layout exactly as the build did
    from ringkit.transport.emulator_build import emulator_energy_indices
    from ringkit.units import K_B

    kts = K_B * np.asarray(TEMPS) / small_device().hopping
    h0, per_t, union, cal = emulator_energy_indices(
        kts, ref["e_c"], 1e-2, emu.info["thermal_bound_e2h"]
    )
    unit_kwargs.update(
        h0=h0,
        indices=tuple(int(i) for i in union),
        per_t=tuple((int(p[1] - p[0]), int(p.size // 2)) for p in per_t),
        cal=tuple(int(i) for i in cal),
        n_flux=N_FLUX,
        n_probes=40,
        tol=1e-2,
        bound=emu.info["thermal_bound_e2h"],
    )
    rng = np.random.default_rng(20261204)
    t_ref = float(np.exp(np.mean(np.log(TEMPS))))
    jobs, truths = [], []
    for k in range(opt.trials):
        d = int(rng.integers(0, len(MFPS)))
        l_ref = float(np.exp(rng.uniform(np.log(0.22e-6), np.log(0.45e-6))))
        lp = l_ref * (np.asarray(TEMPS) / t_ref) ** -1.0
        etas = eta_for(emu, d, lp)
        truths.append({"d": d, "l_ref": l_ref, "l_phi": lp, "mfp": MFPS[d]})
        jobs.append((k, 10_000 + k, MFPS[d], etas, unit_kwargs))
    t0 = time.perf_counter()
    from ringkit.transport.ensemble import default_executor

    with default_executor(opt.workers) as ex:
        sims = list(ex.map(simulate, jobs))
        t_sim = time.perf_counter() - t0
        path = str(CACHE / f"emulator-{opt.seeds}.nc")
        t1 = time.perf_counter()
        fits = list(ex.map(fit_trial, [(path, s["g"], k) for k, s in enumerate(sims)]))
        t_fit = time.perf_counter() - t1
        loo_jobs = [
            (path, k, (7 * k) % opt.seeds, tr["d"], tr["l_phi"]) for k, tr in enumerate(truths)
        ]
        loos = list(ex.map(loo_trial, loo_jobs))
    print(f"trials simulated in {t_sim:.0f} s, fitted in {t_fit:.0f} s", flush=True)
    quiet = time_fits(path, sims[1:6])
    n = len(fits)
    hits = {key: [0, 0] for key in ("l_ref", "p", "mfp", "loo_l_ref", "loo_p")}
    per_t = np.zeros((len(TEMPS), 2), dtype=int)
    p_vals, lref_ratio, gof, n_unc = [], [], [], 0
    for tr, f, lo in zip(truths, fits, loos, strict=True):
        P, L = f["parameters"], lo["parameters"]
        for key, E, name, x in (
            ("l_ref", P, "l_phi_ref", tr["l_ref"]),
            ("p", P, "p", 1.0),
            ("mfp", P, "mean_free_path", tr["mfp"]),
            ("loo_l_ref", L, "l_phi_ref", tr["l_ref"]),
            ("loo_p", L, "p", 1.0),
        ):
            if not E[name]["constrained"]:
                n_unc += not key.startswith("loo")
                continue
            hits[key][0] += inside(E[name]["ci68"], x)
            hits[key][1] += inside(E[name]["ci95"], x)
        for j, e in enumerate(f["l_phi_at_temperatures"]):
            per_t[j] += [inside(e["ci68"], tr["l_phi"][j]), inside(e["ci95"], tr["l_phi"][j])]
        if P["p"]["constrained"]:
            p_vals.append(P["p"]["value"])
            lref_ratio.append(P["l_phi_ref"]["value"] / tr["l_ref"])
        gof.append(f["goodness"]["p_value"])
    fit_times = [f["fit_time_s"] for f in fits]
    lines += [
        f"Measured {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; load average "
        f"{la0} (start), {la1} (after the build), {load_avg()} (end); 2 worker processes, "
        "one BLAS thread each.",
        "",
        "## A. Emulator (small device)",
        "",
        f"GaAs preset, 3e11 cm^-2, mean radius 50 nm, 26 nm arms, flux tube, "
        f"{emu.info['n_sites']} sites, 40 probes; T = {list(TEMPS)} K; L_phi targets "
        f"{[round(x * 1e6, 3) for x in LPHI_TARGETS]} um; mean free paths "
        f"{[round(x * 1e6, 3) for x in MFPS]} um; {opt.seeds} seeds per mean free path; "
        f"{emu.info['n_energies']} energies per unit (thermal tol 1e-2 e^2/h; largest "
        f"amplitude error estimate {float(np.max(emu.thermal_errors[..., :2])):.2g} e^2/h). "
        f"Build wall time {emu.info['build_wall_time_s']:.0f} s "
        f"({emu.info['build_wall_time_s'] / (opt.seeds * len(MFPS)):.2f} s per unit; "
        "cached from the build of 2026-12-04 19:22 UTC at load ~12).",
        "",
        "Realised L_phi (ensemble h/e damping at T = 0, um) per node:",
        "",
    ]
    for d, m in enumerate(MFPS):
        lr = emu.l_phi_realised[d, 1:] * 1e6
        le = emu.l_phi_realised_err[d, 1:] * 1e6
        pairs = ", ".join(f"{a:.3g} ± {b:.2g}" for a, b in zip(lr, le, strict=True))
        lines.append(f"* l = {m * 1e6:.2g} um: {pairs}")
    pv, rv = np.array(p_vals), np.array(lref_ratio)
    pc = combined_p(fits)
    lines += [
        "",
        "## B. Coverage over held-out seeds (likelihood " + FIT_VERSION + ")",
        "",
        f"{n} trials (held-out seeds 10000..{10000 + n - 1}, never in the emulator; true p = 1, "
        f"L_ref at T_ref = {t_ref:.3g} K drawn log-uniform in 0.22-0.45 um, l one of the "
        f"nodes; noise {NOISE} e^2/h per point, {N_PERIODS} periods x {N_FLUX} points). "
        f"Lattice traces simulated once (cached; {t_sim:.0f} s in this run). Fits: all three "
        f"parameters profiled and L_phi(T_j) at each T (cached per trial; {t_fit:.0f} s in this "
        f"run): stored wall times median {np.median(fit_times):.1f} s, max "
        f"{np.max(fit_times):.1f} s per fit, measured while the fits ran 2 at a time next to "
        f"other helpers' benchmarks. Serial re-timing of trials 1-5 in this run (load "
        f"{quiet[1]} -> {quiet[2]}, one BLAS thread): median {quiet[0]:.1f} s.",
        "",
        "| parameter | in 68 % interval | in 95 % interval | target |",
        "|---|---|---|---|",
        f"| L_phi(T_ref), lattice | {frac(hits['l_ref'][0], n)} | {frac(hits['l_ref'][1], n)} "
        f"| {TARGET} |",
        f"| p (true 1), lattice | {frac(hits['p'][0], n)} | {frac(hits['p'][1], n)} | |",
        f"| mean free path, lattice | {frac(hits['mfp'][0], n)} | {frac(hits['mfp'][1], n)} | |",
    ]
    for j, t in enumerate(TEMPS):
        lines.append(
            f"| L_phi({t} K), lattice | {frac(per_t[j, 0], n)} | {frac(per_t[j, 1], n)} | |"
        )
    lines += [
        f"| L_phi(T_ref), emulator leave-one-seed-out | {frac(hits['loo_l_ref'][0], n)} | "
        f"{frac(hits['loo_l_ref'][1], n)} | |",
        f"| p, emulator leave-one-seed-out | {frac(hits['loo_p'][0], n)} | "
        f"{frac(hits['loo_p'][1], n)} | |",
        "",
        "(± binomial standard error over the trials.) Leave-one-seed-out: seed (7k mod "
        f"{opt.seeds}) removed from the emulator, its own values at the truth fitted (no noise); "
        "this isolates the likelihood from the interpolation.",
        "",
        f"Unconstrained parameter reports (lattice): {n_unc}. Goodness of fit: median p-value "
        f"{np.nanmedian(gof):.2f}, fraction of p-values < 0.05: "
        f"{np.mean(np.array(gof, dtype=float) < 0.05):.0%} (expected 5 % if the model is right).",
        "",
        "## Published law (Hansen et al., Phys. Rev. B 64, 045327 (2001): L_phi ∝ T^-1)",
        "",
        f"Per ring (one ring, six temperatures): fitted p over {pv.size} trials has quantiles "
        f"16/50/84 % = {np.quantile(pv, 0.16):.2f} / {np.median(pv):.2f} / "
        f"{np.quantile(pv, 0.84):.2f} (mean {pv.mean():.2f}); L_ref/true "
        f"{np.quantile(rv, 0.16):.2f} / {np.median(rv):.2f} / {np.quantile(rv, 0.84):.2f}. "
        f"p = 1 lies inside the 68 % interval in {frac(hits['p'][0], n)} and the 95 % interval "
        f"in {frac(hits['p'][1], n)} of the rings. Pooled over the {n} rings (sum of the "
        f"profiles of p, each ring with its own L_ref and l): p = {pc[0]:.2f} "
        f"(2 Delta lnL <= 1: {pc[1]:.2f}-{pc[2]:.2f}); 2 Delta lnL at p = 1: {pc[3]:.1f}.",
    ]
    f68, f95 = hits["l_ref"][0] / n, hits["l_ref"][1] / n
    met = 0.60 <= f68 <= 0.76 and f95 >= 0.90
    m = min(n, 60)
    first = [
        sum(
            inside(f["parameters"]["l_phi_ref"][c], tr["l_ref"])
            for tr, f in zip(truths[:m], fits[:m], strict=True)
        )
        for c in ("ci68", "ci95")
    ]
    lines += [
        "",
        f"## Verdict: L_phi(T_ref) coverage {f68:.0%} ± {math.sqrt(f68 * (1 - f68) / n):.0%} / "
        f"{f95:.0%} ± {math.sqrt(f95 * (1 - f95) / n):.0%} on {n} held-out lattice trials: "
        f"{'inside' if met else 'OUTSIDE'} the target {TARGET}",
        "",
        f"The first {m} trials alone: {first[0] / m:.0%} / {first[1] / m:.0%}. "
        "The 68 % coverage sits at the lower edge of the target: within its binomial error it "
        "is compatible with 68 % and with a mild under-coverage; the low temperatures "
        "(L_phi(0.3 K), L_phi(0.5 K)) and the exponent p are under-covered at 68 % (table).",
    ]
    lines += [
        "",
        "History: the former likelihood v1 (all 18 values y(T_j), shrunk correlations, "
        "predictive t; run of 2026-12-04 19:22 UTC, same trials) covered L_phi(T_ref) in "
        "12 % / 52 %, p in 17 % / 53 %, with fitted p median 0.66; v2 (level and slope in "
        "ln T, predictive t) covered 58 % / 95 % (L_phi(T_ref)) and 56 % / 98 % (p) on the "
        "first 43 trials (run stopped for v3). docs/inverse-fit.md explains the change.",
    ]
    diag = CACHE / "diagnosis.md"
    if diag.exists():
        lines += ["", diag.read_text().rstrip()]
    cost_path = CACHE / "cost.json"
    if not opt.skip_cost and (opt.new_cost or not cost_path.exists()):
        c = cost_big()
        c["load"] = load_avg()
        c["when"] = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
        cost_path.write_text(json.dumps(c))
    if not opt.skip_cost:
        c = json.loads(cost_path.read_text())
        units = 3 * 32
        total = units * c["n_energies"] * c["per_energy_s"] / 1.3  # 2 workers ~ 1.3x one
        lines += [
            "",
            "## C. Cost on the 0.5 um GaAs ring",
            "",
            f"Device: GaAs preset, 3e11 cm^-2, mean radius 0.5 um, 120 nm arms, default lattice, "
            f"{c['n_sites']} sites, {c['n_modes']} lead modes, 100 probes, {c['n_eta']} couplings. "
            f"Measured unit cost per energy (factorization + selected inverse + "
            f"{c['n_eta']} couplings x 24 fluxes): {c['per_energy_s']:.2f} s (measured "
            f"{c['when']}, load {c['load']}). "
            f"Energies for T = 0.3-4 K at thermal tol 2e-3 e^2/h: {c['n_energies']}. "
            f"Extrapolated build (3 mean free paths x 32 seeds, 2 workers at 1.3x one): "
            f"{total / 60:.0f} min -- NOT measured end to end.",
        ]
    (HERE / "RESULTS-inverse-fit.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))
    (CACHE / "summary.json").write_text(json.dumps({"coverage": hits, "per_t": per_t.tolist()}))


if __name__ == "__main__":
    main()
