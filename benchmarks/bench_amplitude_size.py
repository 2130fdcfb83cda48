"""Amplitude versus ring radius from simulated ensembles: the size-scaling panel's dataset.

Issue 13 point 5. Device family: GaAs preset (3e11 cm^-2, mobility 4 m^2/(V s), Born mean free
path ~0.36 um), 120 nm arms, mean radii 0.3, 0.4, 0.5, 0.7, 1.0 um, flux-tube mode (flux
through the hole only: exact low-rank flux sweeps, G strictly h/e periodic), 60 flux points
over five h/e periods, T = 0 and L_phi = 2 um (dephasing probes, analytic coupling). T = 0:
at T > 0 the thermal policy needs ~180 energies per realization (44 s for the 0.5 um ring,
several minutes under the shared machine's load), so the bands are computed at T = 0 and the
temperature enters through the fitted law's thermal factor (docs/amplitude-model.md).

The ensemble grows in rounds (ROUNDS realizations per radius, all radii per round), each
through ringkit.transport.amplitude_size.amplitude_vs_radius on a 2-worker process pool with
one BLAS thread per worker and a per-radius checkpoint, so an interrupted run resumes and a
rerun with the same round reloads everything (seconds). After every round it writes

* benchmarks/RESULTS-amplitude-size.md (quantile table, fit, timing with load average);
* ringkit/data/amplitude_size_gaas.json (compact dataset shown by the size-scaling panel,
  ringkit.analysis.scaling_data.load_size_dataset).

Run from the repository root (optionally the last round to run, e.g. 64):
    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_amplitude_size.py [N_MAX]
Rebuild the outputs of round N from the checkpoints only (no computation):
    .venv/bin/python benchmarks/bench_amplitude_size.py --assemble N
Measure the realised L_phi of the probes on some rings directly (docs/amplitude-model.md):
    .venv/bin/python benchmarks/bench_amplitude_size.py --realised 0.3e-6:0 0.5e-6:1
Environment: RINGKIT_BENCH_CKPT (checkpoint directory, default /tmp/ringkit-bench-amplitude-size).
"""

from __future__ import annotations

import json
import os
import platform
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from ringkit.analysis.ensemble_stats import StoppingRule
from ringkit.analysis.scaling_data import SIZE_DATASET_PATH, SizeFamily, size_dataset_from_result
from ringkit.transport.amplitude_size import family_vs_radius, radius_checkpoint
from ringkit.transport.ensemble import default_executor

ROOT = Path(__file__).resolve().parent
OUT = ROOT / "RESULTS-amplitude-size.md"
CKPT = Path(os.environ.get("RINGKIT_BENCH_CKPT", "/tmp/ringkit-bench-amplitude-size"))
ROUNDS = (16, 32, 64, 96, 128, 192, 256)
# the shipped dataset was computed with the analytic probe coupling (code of commit 1a75c3e,
# before per-device calibration was ringkit's default)
FAMILY = SizeFamily(calibrate_l_phi=False)


def load() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def versions() -> dict:
    import kwant
    import scipy

    import ringkit

    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "kwant": kwant.__version__,
        "ringkit": getattr(ringkit, "__version__", "?"),
        "machine": f"{platform.machine()}, {os.cpu_count()} vCPUs (shared)",
        "OPENBLAS_NUM_THREADS": os.environ.get("OPENBLAS_NUM_THREADS", "unset"),
        "code": os.environ.get("RINGKIT_BENCH_CODE") or git_head(),
    }


def git_head() -> str:
    """Commit of the working tree that computes (RINGKIT_BENCH_CODE overrides, e.g. for a
    snapshot without .git)."""
    import subprocess

    try:
        out = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, text=True,
                             capture_output=True, check=True)  # fmt: skip
    except (OSError, subprocess.CalledProcessError):
        return "unknown"
    return out.stdout.strip()


def report(out: dict, family, timing: list, n: int) -> list[str]:
    lines = [
        "# Amplitude versus radius from simulated ensembles (bench_amplitude_size.py)",
        "",
        f"Device family: {family.describe()}.",
        f"Flux-tube field (flux through the hole only), {len(family.fluxes())} flux points over "
        "5 h/e periods; dephasing probes with the analytic coupling (realised L_phi not "
        "calibrated per device); seeds 0 .. n-1 at every radius (same seeds for every radius); "
        "2 worker processes with one BLAS thread each on a shared 2-vCPU machine.",
        f"Versions: {versions()}",
        "",
        "## Rounds (wall time per round for all radii, load average before / after)",
        "",
        "| realizations per radius | wall (s) | per realization per radius (s) | load before | "
        "load after |",
        "|---|---|---|---|---|",
    ]
    for k, wall, lb, la, per in timing:
        lines.append(f"| {k} | {wall:.0f} | {per} | {lb} | {la} |")
    lines += [
        "",
        f"## Quantile bands ({n} realizations per radius, bootstrap errors, e^2/h)",
        "",
        "| r (um) | sites | h/e 16 % | h/e 50 % | h/e 84 % | h/2e 16 % | h/2e 50 % | "
        "h/2e 84 % | median G |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for i, r in enumerate(out["radius"]):
        cells = []
        for name in ("he", "h2e"):
            for lab in ("q16", "median", "q84"):
                cells.append(f"{out[f'{name}_{lab}'][i]:.3g} ± {out[f'{name}_{lab}_err'][i]:.2g}")
        sites = f"{family.device(float(r)).site_estimate().n_sites:,}"
        lines.append(
            f"| {r * 1e6:.2f} | {sites} | "
            + " | ".join(cells)
            + f" | {out['mean_g_median'][i]:.3g} |"
        )
    for name in ("he", "h2e"):
        worst = {
            lab: float(np.max(out[f"{name}_{lab}_err"] / out[f"{name}_{lab}"]))
            for lab in ("q16", "median", "q84")
        }
        lines.append(
            f"\nLargest relative bootstrap error over the radii, {name}: "
            + ", ".join(f"{k} {100 * v:.0f} %" for k, v in worst.items())
            + " (error ~ n^-1/2)."
        )
    fit = out.get("fit")
    lines += ["", "## Law fitted through the medians", ""]
    if fit is None:
        lines.append(f"fit failed: {out.get('fit_error')}")
    else:
        lines.append("```")
        lines += [f"{k}: {v}" for k, v in fit.items() if k not in ("model_kwargs",)]
        lines.append("```")
    lines += ["", "## Fit variants (why the law did not fit before)", ""] + variants(out, family)
    lines += [
        "",
        f"Compact dataset: `{SIZE_DATASET_PATH.relative_to(ROOT.parent)}` (regenerate with "
        "`OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_amplitude_size.py`; with the "
        "checkpoints present it reloads instead of recomputing).",
        "",
    ]
    return lines


def variants(out: dict, family) -> list[str]:
    """The law fitted through the medians in several ways (docs/amplitude-model.md)."""
    from ringkit.analysis.scaling_fit import fit_amplitude_prefactors

    med = {
        "amplitude_he": out["he_median"],
        "amplitude_he_err": out["he_median_err"],
        "amplitude_h2e": out["h2e_median"],
        "amplitude_h2e_err": out["h2e_median_err"],
    }
    he_only = {k: v for k, v in med.items() if "h2e" not in k}
    base = {**family.model_kwargs()}
    rows = [
        ("linear, L_phi fixed at the probe setting (the old fit)", med,
         {"space": "linear", "model_discrepancy": None}),
        ("log, L_phi fixed at the probe setting", med, {"model_discrepancy": None}),
        ("log, L_phi fixed, model discrepancy added", med, {}),
        ("log, L_phi fitted (shipped fit)", med, {"fit_l_phi": True}),
        ("log, L_phi fitted, modes fully mixed (mode_mixing = 1)", med,
         {"fit_l_phi": True, "mode_mixing": 1.0}),
        ("log, L_phi fitted, h/e medians only", he_only, {"fit_l_phi": True}),
    ]  # fmt: skip
    lines = [
        "| fit | chi2/dof (bootstrap errors) | p | model discrepancy | c_he (e^2/h) | "
        "c_aas (e^2/h) | L_phi (um) |",
        "|---|---|---|---|---|---|---|",
    ]

    def pm(f, k, scale=1.0):
        if f.get(k) is None:
            return "unconstrained" if k in f.get("unconstrained", []) else "-"
        return f"{f[k] * scale:.3g} ± {f[k + '_err'] * scale:.2g}"

    for label, data, kw in rows:
        f = fit_amplitude_prefactors(out["radius"], **data, **base, **kw)
        lp = pm(f, "l_phi", 1e6) if f["l_phi_fitted"] else f"{family.l_phi * 1e6:g} (fixed)"
        lines.append(
            f"| {label} | {f['chi2_stat']:.3g}/{f['dof']} | {f['p_value_stat']:.2g} | "
            f"{100 * f['model_discrepancy']:.0f} % | {pm(f, 'coherent_amplitude')} | "
            f"{pm(f, 'aas_amplitude')} | {lp} |"
        )
    return lines


def seeds_on_disk(radius: float) -> set[int]:
    """Seeds stored in the checkpoint of one radius."""
    seeds: set[int] = set()
    for f in radius_checkpoint(CKPT, radius).glob("chunk-*.npz"):
        with np.load(f) as z:
            seeds.update(int(x) for x in z["seeds"])
    return seeds


def realised(pairs: list[str]) -> None:
    """Realised L_phi of the family's probes on rings ``R:SEED`` (m, int), measured directly
    with LPhiCalibrator.measure (h/e damping over 16 energies at E_F; docs/probes.md). Run it
    with the code that computed the dataset (see "code" in the versions) to check that run."""
    from ringkit.tightbinding import build_ring
    from ringkit.transport.lowrank import FluxTubeModel
    from ringkit.transport.probe_calibration import LPhiCalibrator
    from ringkit.transport.sweep import ring_probes

    fam = FAMILY
    for r, seed in ((float(a), int(b)) for a, b in (x.split(":") for x in pairs)):
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ring = build_ring(fam.device(r), seed=seed)
            e_t = ring.to_lattice_energy(fam.material_obj().fermi_energy_J)
            p0 = ring.params(flux=0.0)
            try:  # analytic coupling (today's code calibrates unless told not to)
                pr = ring_probes(ring, fam.l_phi, e_t, p0, 100, calibrate=False)
            except TypeError:  # code before the calibration option
                pr = ring_probes(ring, fam.l_phi, e_t, p0, 100)
            a = ring.lattice_spacing
            cal = LPhiCalibrator(
                FluxTubeModel(ring.fsyst, params=p0), e_t, n_probes=100,
                radius=ring.device.geometry.mean_radius / a,
            )  # fmt: skip
            m = cal.measure(pr.eta)
        print(
            f"r = {r * 1e6:.2f} um, seed {seed}: realised L_phi "
            f"{m['l_phi_realised'] * a * 1e6:.3f} +- {m['l_phi_realised_err'] * a * 1e6:.3f} um "
            f"({time.perf_counter() - t0:.0f} s, load {load()})",
            flush=True,
        )


def main() -> None:
    """``[N_MAX]``: run rounds up to N_MAX; ``--assemble N``: rebuild the outputs of round N
    from the checkpoints only (refuses if a seed is missing, so nothing is recomputed with other
    code than the run's)."""
    args = sys.argv[1:]
    if args and args[0] == "--realised":
        realised(args[1:])
        return
    assemble = bool(args) and args[0] == "--assemble"
    n_max = int(args[-1]) if args and args[-1] != "--assemble" else ROUNDS[-1]
    family = FAMILY
    log = CKPT / "timing.json"  # wall times of the computed rounds survive reruns
    timing = [tuple(t) for t in json.loads(log.read_text())] if log.exists() else []
    rounds = [n_max] if assemble else [k for k in ROUNDS if k <= n_max]
    if assemble:
        for r in family.radii:
            missing = set(range(n_max)) - seeds_on_disk(r)
            if missing:
                raise SystemExit(f"r = {r:g} m: {len(missing)} seeds of {n_max} not on disk")
    with default_executor(2) as ex:
        for n in rounds:
            before, t0 = load(), time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # fixed-size ensembles warn; counted in info
                out = family_vs_radius(family, StoppingRule.fixed(n), executor=ex, checkpoint=CKPT)
            wall = time.perf_counter() - t0
            done = [t for t in timing if t[0] < n]
            new = n - (done[-1][0] if done else 0)
            if wall > 30 and not any(t[0] == n for t in timing):
                per = f"{wall / max(new, 1) / len(family.radii):.1f}"
                timing.append((n, wall, before, load(), per))
                log.write_text(json.dumps(timing))
            data = size_dataset_from_result(out, family, versions=versions())
            data["timing"] = [list(t) for t in timing if t[0] <= n]
            SIZE_DATASET_PATH.write_text(json.dumps(data, indent=1) + "\n")
            OUT.write_text("\n".join(report(out, family, [t for t in timing if t[0] <= n], n)))
            print(f"round {n}: {wall:.0f} s, load {load()}", flush=True)


if __name__ == "__main__":
    main()
