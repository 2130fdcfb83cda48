"""Latency of the device explorer's live lattice view, per kind of control change.

Run from the repository root (about 1-2 minutes on 2 cores)::

    .venv/bin/python benchmarks/bench_live_preview.py

Options: ``--sizes 5k 10k`` (default both), ``--repeats 5`` (changes per control kind),
``--scenarios coherent dephased thermal`` (default all).

A headless :class:`ringkit.view.panels.DeviceExplorer` with "live lattice" on (flux-tube
mode, GaAs preset) is driven through its controls like a user would; each change runs the whole
update synchronously: 1D preview, live lattice G(Phi) and spectrum
(:class:`ringkit.view.panels.explorer_live.LiveLattice`), PNG render, summary. Every change uses
a new value (no cache hit from an earlier value). Printed per control kind: the median and the
largest wall-clock latency of the update (what the user waits for) and the median time of the
lattice part alone with its split (build, probes, model, factorize, sweep) and whether the
lattice was rebuilt.

Rings (circular, mean radius / arm width, automatic spacing a = 0.5/kF = 3.64 nm): ``5k``:
180 nm / 55 nm; ``10k``: 280 nm / 75 nm. Scenarios: ``coherent`` (L_phi = inf, T = 0.1 K: one
energy, no probes); ``dephased`` (L_phi = 2 um: 40 floating probes); ``thermal`` (dephased and
T = 1.5 K: 3 energies of the thermal average). The BLAS libraries are limited to one thread by
the panel itself (threadpoolctl); the machine is shared, so expect +-30 % between runs.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import numpy as np  # noqa: E402

from ringkit.view.panels import DeviceExplorer  # noqa: E402
from ringkit.view.panels.explorer import ExplorerParams  # noqa: E402
from ringkit.view.panels.explorer_live import live_device, single_thread_blas  # noqa: E402

SIZES = {"5k": (180e-9, 55e-9), "10k": (280e-9, 75e-9)}
SCENARIOS = {
    "coherent": dict(phase_coherence_length=None, temperature=0.1),
    "dephased": dict(phase_coherence_length=2e-6, temperature=0.1),
    "thermal": dict(phase_coherence_length=2e-6, temperature=1.5),
}


def _changes(kind: str, n: int, base: ExplorerParams) -> list:
    """``n`` new values of control ``kind`` (display units of the panel), none repeated."""
    r_nm = base.radius * 1e9
    k = np.arange(1, n + 1)
    table = {
        "field window": [(-30.0 - 7 * i, 30.0 + 5 * i) for i in k],
        "temperature": [round(base.temperature + 0.01 * i, 2) for i in k],
        "arm gate": [0.25 * i for i in k],
        "L_phi": [round(2.0 + 0.3 * i, 2) for i in k],
        "Fermi energy": [round(10.5 + 0.2 * i, 2) for i in k],
        "radius": [r_nm + 5.0 * i for i in k],
        "mobility": [3.0e5 + 2.0e4 * i for i in k],
        "seed": [int(i) for i in k],
    }
    return table[kind]


_CONTROL = {
    "field window": "field",
    "temperature": "temperature",
    "arm gate": "gate",
    "L_phi": "lphi",
    "Fermi energy": "fermi_energy",
    "radius": "radius",
    "mobility": "mobility",
    "seed": "seed",
}


def run(size: str, scenario: str, repeats: int) -> list[dict]:
    radius, width = SIZES[size]
    params = ExplorerParams(radius=radius, width=width, field_min=-0.03, field_max=0.03,
                            **SCENARIOS[scenario])  # fmt: skip
    ex = DeviceExplorer(params, live_lattice=True)
    assert ex.live is not None, ex.live_note or ex.message.value
    n_sites = ex.live.n_sites
    kinds = list(_CONTROL)
    if params.phase_coherence_length is None:
        kinds.remove("L_phi")  # moving it would switch dephasing on
    rows = []
    for kind in kinds:
        lat, comp, parts, rebuilt = [], [], [], 0
        for value in _changes(kind, repeats, params):
            ex.controls[_CONTROL[kind]].value = value
            if ex.live is None:
                raise RuntimeError(ex.message.value or ex.live_note)
            lat.append(ex.latency)
            comp.append(ex.live.timings["total"])
            parts.append(ex.live.timings)
            rebuilt += ex.live.rebuilt
        split = {
            p: statistics.median(t[p] for t in parts)
            for p in ("build", "probes", "model", "factorize", "sweep")
        }
        rows.append(
            dict(
                size=size,
                sites=n_sites,
                scenario=scenario,
                kind=kind,
                median=statistics.median(lat),
                worst=max(lat),
                lattice=statistics.median(comp),
                split=split,
                rebuilt=rebuilt,
                n=len(lat),
                energies=ex.live.energies.size,
                probes=ex.live.n_probes,
            )  # fmt: skip
        )
        print(f"  {size} {scenario:9s} {kind:13s} median {1e3 * rows[-1]['median']:5.0f} ms",
              file=sys.stderr)  # fmt: skip
    return rows


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="+", default=list(SIZES), choices=list(SIZES))
    ap.add_argument("--scenarios", nargs="+", default=list(SCENARIOS), choices=list(SCENARIOS))
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args(argv)

    with single_thread_blas():
        pass  # looks up threadpoolctl once
    try:
        import threadpoolctl  # noqa: F401

        blas = "limited to 1 thread per update (threadpoolctl)"
    except ImportError:
        env = os.environ.get("OPENBLAS_NUM_THREADS")
        blas = f"NOT limited (no threadpoolctl); OPENBLAS_NUM_THREADS={env}"
    print(f"# Live lattice view: latency per control change ({time.strftime('%Y-%m-%d %H:%M')})")
    print(f"python {platform.python_version()}, {os.cpu_count()} cores, BLAS {blas}")
    for size in args.sizes:
        r, w = SIZES[size]
        est = live_device(ExplorerParams(radius=r, width=w)).site_estimate()
        print(f"ring {size}: mean radius {r * 1e9:.0f} nm, arm width {w * 1e9:.0f} nm, {est}")
    rows = []
    for size in args.sizes:
        for scenario in args.scenarios:
            load0 = os.getloadavg()
            rows += run(size, scenario, args.repeats)
            load1 = os.getloadavg()
            print(f"  load average {load0[0]:.1f} -> {load1[0]:.1f}", file=sys.stderr)
    print()
    print("| ring | scenario | control | update median, ms | slowest, ms | lattice part, ms "
          "| build / probes / model / factorize / sweep, ms | rebuilt |")  # fmt: skip
    print("|---|---|---|---|---|---|---|---|")
    for row in rows:
        s = row["split"]
        split = " / ".join(f"{1e3 * s[p]:.0f}" for p in s)
        scen = f"{row['scenario']} ({row['energies']} E, {row['probes']} probes)"
        print(
            f"| {row['size']} ({row['sites']} sites) | {scen} | {row['kind']} "
            f"| {1e3 * row['median']:.0f} | {1e3 * row['worst']:.0f} "
            f"| {1e3 * row['lattice']:.0f} | {split} | {row['rebuilt']}/{row['n']} |"
        )
    print(f"\nload average at the end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
