"""Benchmark of the thermal-averaging policy on the 0.5 um GaAs ring (issue 11, point 1).

Run from the repository root (about 10 minutes alone on 2 cores)::

    .venv/bin/python benchmarks/bench_thermal.py [--temperatures 0.3 1.0] [--output PATH]

Device: GaAs preset (density 3e11 cm^-2, ringkit.device.Material.preset), circular ring with
r_in = 0.44 um, r_out = 0.56 um (mean radius 0.5 um, 120 nm arms), default lattice (28 626
sites), flux-tube mode, 201 flux points over 6 h/e. BLAS is limited to 1 thread with
threadpoolctl for the whole run (the factorization is sequential MUMPS; stated in the output).

For every temperature, in the same run:

* ``old grid``: the former rule (uniform step min(k_B T, E_c/4), E_c = hbar v_F/(2 pi r_mean),
  half-width k_B T ln(2e6); ``ringkit.transport.thermal.thermal_weights``);
* ``adaptive``: ``field_sweep(..., temperature=T)`` (the policy, tol 1e-4 e^2/h);
* reference: a dense uniform trapezoid, step k_B T/16 (0.3 K) or 0.025 K (1 K), over
  |E - E_F| <= 15 k_B T, with the halving estimate of its own error printed.

Printed and written to ``benchmarks/RESULTS-thermal.md``: energies, wall time, time per energy,
max |G - G_ref| over the 201 fluxes, the policy's own error estimate, and the load average.
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from ringkit.device import Material, RingDevice, RingGeometry  # noqa: E402
from ringkit.thermal_policy import fermi_window  # noqa: E402
from ringkit.tightbinding import build_ring  # noqa: E402
from ringkit.transport import field_sweep  # noqa: E402
from ringkit.transport.lowrank import FluxTubeModel  # noqa: E402
from ringkit.transport.sweep import ring_correlation_energy  # noqa: E402
from ringkit.transport.thermal import thermal_weights  # noqa: E402
from ringkit.units import K_B, PHI0  # noqa: E402


def ring05():
    mat = Material.preset("GaAs", density=3e15)
    geo = RingGeometry.circular(0.44e-6, 0.56e-6)
    return build_ring(RingDevice(mat, geo, field_mode="flux_tube"), seed=0)


def weighted(model, energies, weights, flux) -> tuple[np.ndarray, float]:
    t0 = time.perf_counter()
    acc = np.zeros(flux.size)
    for e, w in zip(energies, weights, strict=True):
        acc += w * 2.0 * model.sweeper(float(e)).transmission(flux)
    return acc, time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--temperatures", type=float, nargs="+", default=[0.3, 1.0])
    ap.add_argument("--output", default=str(HERE / "RESULTS-thermal.md"))
    args = ap.parse_args()
    ring = ring05()
    flux = np.linspace(0, 6, 201) * PHI0
    mu = ring.fermi_energy_lattice
    rows = []
    load0 = os.getloadavg()
    with threadpool_limits(limits=1, user_api="blas"):
        model = FluxTubeModel(ring.fsyst, params=ring.params())
        for temp in args.temperatures:
            kt = K_B * temp / ring.hopping
            grid = thermal_weights(
                mu, temp, energy_unit=ring.hopping, correlation_energy=ring_correlation_energy(ring)
            )
            g_old, t_old = weighted(model, grid.energies, grid.weights, flux)
            t0 = time.perf_counter()
            ds = field_sweep(ring, flux, temperature=temp)
            t_new = time.perf_counter() - t0
            step = kt / 16 if temp < 0.5 else K_B * 0.025 / ring.hopping
            m = int(np.ceil(15 * kt / step))
            m += m % 2
            e_ref = mu + step * np.arange(-m, m + 1)
            w = fermi_window(e_ref, mu, kt)
            vals = np.array([2.0 * model.sweeper(float(e)).transmission(flux) for e in e_ref])
            ref = (w / w.sum()) @ vals
            w2 = w[::2] / w[::2].sum()
            ref_err = float(np.max(np.abs(ref - w2 @ vals[::2])))
            rows.append(
                {
                    "T": temp,
                    "old_n": grid.n_energies,
                    "old_t": t_old,
                    "old_err": float(np.max(np.abs(g_old - ref))),
                    "new_n": int(ds.attrs["n_energies"]),
                    "new_t": t_new,
                    "new_err": float(np.max(np.abs(ds["G"].values - ref))),
                    "new_est": float(ds.attrs["thermal_error_estimate"]),
                    "he_est": float(ds.attrs["thermal_error_he"]),
                    "ref_n": e_ref.size,
                    "ref_err": ref_err,
                }
            )
            print(rows[-1], flush=True)
    load1 = os.getloadavg()
    lines = [
        "# Thermal averaging: former grid vs the adaptive policy (issue 11, point 1)",
        "",
        f"Device: 0.5 um GaAs ring, {ring.n_sites} sites, flux tube, 201 fluxes over 6 h/e. "
        "BLAS threads: 1 (threadpoolctl), MUMPS sequential. "
        f"Machine: {platform.machine()}, {os.cpu_count()} cores, shared with other jobs; load "
        f"average (1/5/15 min) {load0[0]:.2f}/{load0[1]:.2f}/{load0[2]:.2f} at the start, "
        f"{load1[0]:.2f}/{load1[1]:.2f}/{load1[2]:.2f} at the end.",
        "",
        "Reference: dense uniform trapezoid over |E - E_F| <= 15 k_B T (its halving estimate "
        "in the last column). Errors are max over the 201 fluxes, in e^2/h.",
        "",
        "| T (K) | old grid: energies | time (s) | max error | adaptive: energies | time (s) "
        "| max error | own estimate | h/e band estimate | ratio energies | ratio time "
        "| reference energies | reference self-check |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['T']:g} | {r['old_n']} | {r['old_t']:.1f} | {r['old_err']:.2e} | "
            f"{r['new_n']} | {r['new_t']:.1f} | {r['new_err']:.2e} | {r['new_est']:.2e} | "
            f"{r['he_est']:.2e} | {r['new_n'] / r['old_n']:.2f} | {r['new_t'] / r['old_t']:.2f} "
            f"| {r['ref_n']} | {r['ref_err']:.1e} |"
        )
    text = "\n".join(lines) + "\n"
    print(text)
    Path(args.output).write_text(text)


if __name__ == "__main__":
    main()
