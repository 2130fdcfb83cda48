"""Generate the invented magnetoresistance files used by tests/test_analysis_*.py.

All data here are INVENTED (synthetic, seeded); they imitate the format and the defects of
real measurement files, not any particular experiment. ``TRUTH`` holds the parameters the
files were made from; the tests read it from this module and
``tests/test_analysis_traces.py`` checks that rerunning :func:`write_all` reproduces the
committed files byte for byte.

Run ``python tests/data/make_analysis_data.py`` to regenerate.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy import constants

HERE = Path(__file__).parent
PHI0 = constants.h / constants.e  # h/e in Wb (the test data do not depend on ringkit)
K_B = constants.k
E2H = constants.e**2 / constants.h

TRUTH: dict[str, dict] = {
    # Two-terminal ring, one up and one down sweep, R in kOhm, B in mT, uneven steps.
    "ring_updown.tsv": {
        "r_in": 0.60e-6,  # m, ring inner radius (invented)
        "r_out": 0.66e-6,  # m
        "r_eff": 0.63e-6,  # m, radius of the single h/e component put into the data
        "g_mean": 3.0,  # e^2/h
        "amp_he": 0.12,  # e^2/h, cosine amplitude of the h/e term
        "amp_h2e": 0.03,  # e^2/h, cosine amplitude of the h/2e term
        "phase_he": 0.4,  # rad
        "series_resistance": 1200.0,  # Ohm, added to 1/G
        "noise_ohm": 2.0,  # Ohm, Gaussian noise on R
        "field_range": (-0.1, 0.1),  # T
        "n_per_sweep": 1500,
        "temperature": 0.3,  # K, written in the header
        "nan_lines": 3,  # rows with an empty R value
        "duplicates": 1,  # rows repeating the previous field value
        "out_of_order": 1,  # rows swapped with the previous one in the up sweep
    },
    # Temperature series in one CSV file: T (K), Field (G), G (e^2/h).
    "ring_temperatures.csv": {
        "r_eff": 0.63e-6,  # m (thin ring)
        "path_length": np.pi * 0.63e-6,  # m, L = pi r (h/e pair of paths)
        "temperatures": (0.25, 0.4, 0.6, 0.9, 1.4, 2.0),  # K
        "amp0": 0.5,  # e^2/h, A(T) = amp0 F_T exp(-L/L_phi(T))
        "l_phi_1K": 2.0e-6,  # m, L_phi(T) = l_phi_1K (T/1 K)^-p
        "p": 1.0,
        "thermal_energy": K_B * 2.0,  # J, F_T = x/sinh(x), x = pi k_B T/E_c
        "g_mean": 4.0,  # e^2/h
        "noise": 0.002,  # e^2/h, Gaussian noise on G
        "field_range": (-0.025, 0.025),  # T
        "n_per_trace": 700,
    },
}


def _uneven_grid(rng: np.random.Generator, lo: float, hi: float, n: int) -> np.ndarray:
    step = (hi - lo) / (n - 1)
    b = np.linspace(lo, hi, n) + rng.uniform(-0.3, 0.3, n) * step
    b[0], b[-1] = lo, hi
    return np.sort(b)


def thermal_factor(temperature: float, energy: float) -> float:
    """x/sinh(x) with x = pi k_B T / E_c (docs/physics.md §5.4)."""
    x = np.pi * K_B * temperature / energy
    return float(x / np.sinh(x))


def amplitude_vs_temperature(temperature: float) -> float:
    t = TRUTH["ring_temperatures.csv"]
    l_phi = t["l_phi_1K"] * temperature ** (-t["p"])
    ft = thermal_factor(temperature, t["thermal_energy"])
    return t["amp0"] * ft * float(np.exp(-t["path_length"] / l_phi))


def make_ring_updown() -> str:
    t = TRUTH["ring_updown.tsv"]
    rng = np.random.default_rng(20240501)
    f1 = np.pi * t["r_eff"] ** 2 / PHI0
    lo, hi = t["field_range"]
    up = _uneven_grid(rng, lo, hi, t["n_per_sweep"])
    down = _uneven_grid(rng, lo, hi, t["n_per_sweep"])[::-1]
    b = np.concatenate([up, down])
    g = (
        t["g_mean"]
        - 8.0 * b**2  # smooth classical background, e^2/h per T^2
        + 0.05 * b  # slow drift
        + t["amp_he"] * np.cos(2 * np.pi * f1 * b + t["phase_he"])
        + t["amp_h2e"] * np.cos(4 * np.pi * f1 * b)
    )
    r = 1.0 / (g * E2H) + t["series_resistance"] + rng.normal(0, t["noise_ohm"], b.size)
    rows = [f"{bb * 1e3:.6f}\t{rr / 1e3:.7f}" for bb, rr in zip(b, r, strict=True)]
    # defects: out-of-order row pair, duplicate field, empty values
    i = 400
    rows[i], rows[i + 1] = rows[i + 1], rows[i]
    j = 700
    rows.insert(j + 1, rows[j].split("\t")[0] + "\t" + f"{r[j] / 1e3:.7f}")
    for k in (100, 1600, 2500)[: t["nan_lines"]]:
        rows[k] = rows[k].split("\t")[0] + "\t"
    head = [
        "# INVENTED test data (ringkit tests/data/make_analysis_data.py), not a measurement",
        "# sample: synthetic two-terminal ring",
        f"# T = {t['temperature']} K",
        f"# series resistance = {t['series_resistance']:g} Ohm",
        "B [mT]\tR [kOhm]",
    ]
    return "\n".join(head + rows) + "\n"


def make_ring_temperatures() -> str:
    t = TRUTH["ring_temperatures.csv"]
    rng = np.random.default_rng(20240502)
    f1 = np.pi * t["r_eff"] ** 2 / PHI0
    lo, hi = t["field_range"]
    rows = [
        "# INVENTED test data (ringkit tests/data/make_analysis_data.py), not a measurement",
        "T (K),Field (G),G (e^2/h)",
    ]
    for temp in t["temperatures"]:
        b = _uneven_grid(rng, lo, hi, t["n_per_trace"])
        a = amplitude_vs_temperature(temp)
        phase = rng.uniform(0, 2 * np.pi)
        g = (
            t["g_mean"]
            + 2.0 * b**2
            + a * np.cos(2 * np.pi * f1 * b + phase)
            + rng.normal(0, t["noise"], b.size)
        )
        rows += [f"{temp:.3f},{bb * 1e4:.5f},{gg:.7f}" for bb, gg in zip(b, g, strict=True)]
    return "\n".join(rows) + "\n"


def make_headerless() -> str:
    """Whitespace-delimited, comment lines, no header: B in mT, R in Ohm (units not stated)."""
    rng = np.random.default_rng(20240503)
    b = np.linspace(-20.0, 20.0, 401)  # mT
    g = 2.0 + 0.1 * np.cos(2 * np.pi * b / 4.0)  # e^2/h, period 4 mT
    r = 1.0 / (g * E2H) + rng.normal(0, 0.5, b.size)
    rows = ["# INVENTED test data (ringkit tests/data/make_analysis_data.py)", "# no header"]
    rows += [f"  {bb:9.4f}   {rr:12.4f}" for bb, rr in zip(b, r, strict=True)]
    return "\n".join(rows) + "\n"


def make_malformed() -> str:
    """A CSV file whose line 6 holds a non-numeric value."""
    rows = ["# INVENTED test data: malformed on purpose (line 6)", "B (T),R (Ohm)"]
    rows += [f"{0.001 * i:.3f},{1000 + i}" for i in range(3)]
    rows.append("0.003,12O4")  # letter O instead of zero
    rows += [f"{0.001 * i:.3f},{1000 + i}" for i in range(4, 12)]
    return "\n".join(rows) + "\n"


FILES = {
    "ring_updown.tsv": make_ring_updown,
    "ring_temperatures.csv": make_ring_temperatures,
    "headerless.dat": make_headerless,
    "malformed.csv": make_malformed,
}


def write_all(directory: Path = HERE) -> list[Path]:
    """Write every file into ``directory``; returns the paths."""
    out = []
    for name, make in FILES.items():
        p = Path(directory) / name
        p.write_text(make(), encoding="utf-8")
        out.append(p)
    return out


if __name__ == "__main__":
    for path in write_all():
        print(path, path.stat().st_size, "bytes")
