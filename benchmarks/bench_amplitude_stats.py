"""Amplitude statistics of the 0.5 um GaAs ring over disorder realizations (issue 13 pts 1, 5).

Device: GaAs preset (3e11 cm^-2, mobility 4 m^2/(V s), Born mean free path ~0.36 um), mean
radius 0.5 um, 120 nm arms, flux-tube mode (exact low-rank flux sweeps), 60 flux points over
five h/e periods. Runs, each through ringkit.transport.amplitude_stats on a 2-worker process
pool with one BLAS thread per worker (OPENBLAS_NUM_THREADS=1, the engine default):

A. T = 0, L_phi = 1.5 um: batches of 16 until every 16/50/84 % quantile of the h/e rms, h/2e
   rms and mean G has a bootstrap error <= 10 % (cap CAP_A; the number needed for 10 % / 5 % is
   projected from the measured errors by error ~ n^-1/2);
B. T = 0.3 K, L_phi = 1.5 um, thermal_tol 2e-3 e^2/h: N_B realizations (cost per realization);
C. (point 5) T = 0, L_phi = 1.5 um, mean radius 0.3, 0.5, 0.7, 1.0 um, N_C realizations each:
   quantile bands versus radius and fit_amplitude_prefactors through the medians.

Run from the repository root:
    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_amplitude_stats.py [A B C]
Writes benchmarks/RESULTS-amplitude-stats.md (sections of the runs done).
"""

from __future__ import annotations

import math
import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from ringkit.analysis.ensemble_stats import StoppingRule
from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.transport.amplitude_size import amplitude_vs_radius
from ringkit.transport.amplitude_stats import amplitude_statistics
from ringkit.transport.ensemble import default_executor
from ringkit.units import PHI0

OUT = Path(__file__).with_name("RESULTS-amplitude-stats.md")
FLUX = np.arange(60) / 12 * PHI0
L_PHI = 1.5e-6
CKPT = Path(os.environ.get("RINGKIT_BENCH_CKPT", "/tmp/ringkit-bench-amplitude-stats"))
CAP_A, N_B, N_C = 560, 6, 12  # A: ~13 min, B: ~4 min, C: ~1 min on 2 shared cores
NOISE = 0.01  # e^2/h, an invented noise floor for the exceedance probability (demo value)


def device(radius: float = 0.5e-6) -> RingDevice:
    geo = RingGeometry.from_mean_radius(radius, 120e-9)
    return RingDevice(Material.preset("GaAs"), geo, field_mode="flux_tube")


def load() -> str:
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def table(st, label: str) -> list[str]:
    per = st.info["wall_time_s"] / st.n_realizations
    lines = [
        f"**{label}**: {st.n_realizations} realizations, stop reason `{st.stop_reason}`, "
        f"wall {st.info['wall_time_s']:.0f} s ({per:.2f} s per realization on 2 workers), "
        f"median thermal energies {st.info.get('n_energies_median', 1):.0f}, "
        f"largest thermal error of the h/e rms {st.info.get('thermal_error_he_max', 0):.2g} "
        f"e^2/h; load average before/after {st.info['load_before']} / {load()}",
        "",
        "| quantity (e^2/h) | 16 % | 50 % | 84 % |",
        "|---|---|---|---|",
    ]
    for j, name in enumerate(("h/e rms", "h/2e rms", "mean G")):
        cells = [f"{st.quantiles[j, k]:.4g} +- {st.quantile_errors[j, k]:.2g}" for k in range(3)]
        lines.append(f"| {name} | " + " | ".join(cells) + " |")
    if st.exceedance is not None:
        e = st.exceedance
        lines += [
            "",
            f"P(h/e rms > {e['noise_floor']} e^2/h) = {e['p']:.3f} "
            f"(95 % Wilson interval {e['low']:.3f}-{e['high']:.3f})",
        ]
    worst = st.history[-1][1]
    n = st.n_realizations
    lines += [
        f"Largest relative bootstrap error {worst:.3f}; projected realizations for 10 %: "
        f"{math.ceil(n * (worst / 0.10) ** 2)}, for 5 %: {math.ceil(n * (worst / 0.05) ** 2)} "
        "(error ~ n^-1/2).",
        "",
    ]
    return lines


def run(kind: str, ex) -> list[str]:
    dev = device()
    est = dev.site_estimate()
    before = load()
    if kind == "A":
        rule = StoppingRule(rel_tol=0.10, min_realizations=16, batch=16, max_realizations=CAP_A)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # worker-side fallbacks are counted in the rows
            st = amplitude_statistics(
                dev,
                FLUX,
                l_phi=L_PHI,
                rule=rule,
                executor=ex,
                noise_floor=NOISE,
                checkpoint=CKPT / "A",
            )
        st.info["load_before"] = before
        return table(st, f"A. T = 0, L_phi = 1.5 um, tolerance 10 % ({est})")
    if kind == "B":
        rule = StoppingRule.fixed(N_B)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # ConvergenceWarning expected (capped run)
            st = amplitude_statistics(
                dev,
                FLUX,
                temperature=0.3,
                l_phi=L_PHI,
                thermal_tol=2e-3,
                rule=rule,
                executor=ex,
                noise_floor=NOISE,
                checkpoint=CKPT / "B",
            )
        st.info["load_before"] = before
        return table(
            st, f"B. T = 0.3 K, L_phi = 1.5 um, thermal_tol 2e-3 e^2/h, fixed {N_B} realizations"
        )
    radii = (0.3e-6, 0.5e-6, 0.7e-6, 1.0e-6)
    mat = Material.preset("GaAs")
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = amplitude_vs_radius(
            device,
            radii,
            lambda d: FLUX,
            l_phi=L_PHI,
            rule=StoppingRule.fixed(N_C),
            executor=ex,
            fit_kwargs=dict(
                l_phi=L_PHI,
                temperature=0.0,
                mean_free_path=mat.elastic_mean_free_path,
                fermi_velocity=mat.fermi_velocity,
                n_modes=int(mat.fermi_wavevector * 120e-9 / math.pi),
            ),
        )
    wall = time.perf_counter() - t0
    lines = [
        f"**C. amplitude versus radius** (T = 0, L_phi = 1.5 um, {N_C} realizations per radius; "
        f"wall {wall:.0f} s; load before/after {before} / {load()})",
        "",
        "| r (um) | h/e 16/50/84 % (e^2/h) | h/2e 16/50/84 % (e^2/h) | median G |",
        "|---|---|---|---|",
    ]
    for i, r in enumerate(out["radius"]):
        he = "/".join(f"{out[f'he_{k}'][i]:.3g}" for k in ("q16", "median", "q84"))
        h2 = "/".join(f"{out[f'h2e_{k}'][i]:.3g}" for k in ("q16", "median", "q84"))
        lines.append(f"| {r * 1e6:.1f} | {he} | {h2} | {out['mean_g_median'][i]:.3g} |")
    fit = out["fit"]
    lines += ["", f"fit_amplitude_prefactors through the medians: {fit}", ""]
    if fit is None:
        lines.append(f"fit error: {out.get('fit_error')}")
    return lines


def main() -> None:
    kinds = sys.argv[1:] or ["A", "B", "C"]
    head = [
        "# Amplitude statistics of the 0.5 um GaAs ring (bench_amplitude_stats.py)",
        "",
        f"Machine: 2 shared vCPUs, other jobs running; OPENBLAS_NUM_THREADS="
        f"{os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, 2 worker processes with one BLAS "
        f"thread each; device: {device().site_estimate()}",
        "",
    ]
    body: list[str] = []
    with default_executor(2) as ex:
        for k in kinds:
            body += run(k, ex)
            OUT.write_text("\n".join(head + body) + "\n")
            print("\n".join(body))


if __name__ == "__main__":
    main()
