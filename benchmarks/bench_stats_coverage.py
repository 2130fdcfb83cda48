"""Large-sample statistical validation of the noise floor, the area error and the l_phi fits.

Run from the repository root (about a minute on one core)::

    OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/bench_stats_coverage.py

Options: ``--traces 1000`` (per signal-to-noise ratio), ``--fits 400`` (joint-fit data sets),
``--output PATH`` (default ``benchmarks/RESULTS-stats-coverage.md``).

Not a timing benchmark: it measures the statistical properties that the unit tests check on
smaller samples (tests/test_analysis_extract.py, tests/test_analysis_fitting.py):

* noise floor: white-noise traces of known sigma (N = 1000 points, Hann window, ring band of
  a 0.6-0.66 um ring) -> ``noise_he_rms / (sigma sqrt(2K/N))`` (closed form for the band of K
  bins; docs/physics.md §12.6), and the same with the old median-only floor (ln 2 bias);
* area error: a cosine of amplitude A (true area pi (0.63 um)^2) in white noise sigma at
  A/sigma = 0.6, 1, 3, 10 -> fraction of traces whose true area lies within +-1 reported
  sigma (68.3 % for a Gaussian), scatter / mean reported error, and the reported error over the
  Cramer-Rao bound sqrt(3) sigma/(pi A sqrt(N) T) (Rife and Boorstyn 1974, from memory;
  docs/physics.md §12.7);
* l_phi(T) fits: synthetic h/e and h/2e amplitudes from the closed forms of docs/physics.md §13
  (x/sinh x, exp(-L/l_phi), l_phi = 2 um/T; 7 temperatures, 3 % errors) -> 1-sigma coverage of
  the joint fit; fraction of single-harmonic fits (E_c free) and of T^-1/2 data sets
  (thermal averaging only, default model) reported as unconstrained.
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import constants

from ringkit.analysis import extract_oscillations, fit_l_phi_joint, fit_l_phi_temperature
from ringkit.analysis.fitting import thermal_factor

PHI0 = constants.h / constants.e
K_B = constants.k


def _extract(b, g, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return extract_oscillations(b, g, r_in=0.6e-6, r_out=0.66e-6, **kw)


def noise_floor(n_traces: int, rng: np.random.Generator) -> dict[str, float]:
    n, sigma = 1000, 0.01
    b = np.linspace(-0.05, 0.05, n)
    ratios = []
    for _ in range(n_traces):
        res = _extract(b, 1 + sigma * rng.normal(size=n))
        k = np.count_nonzero(res.spectrum.band_mask(res.bands[1], margin=res.band_margin))
        ratios.append(res.noise_he_rms / (sigma * np.sqrt(2 * k / n)))
    r = np.asarray(ratios)
    return {
        "mean": float(r.mean()),
        "sem": float(r.std(ddof=1) / np.sqrt(r.size)),
        "median_only": float(r.mean() * np.sqrt(np.log(2))),
    }


def area_coverage(n_traces: int, rng: np.random.Generator) -> list[dict[str, float]]:
    n, sigma = 1000, 0.01
    b = np.linspace(-0.05, 0.05, n)
    f0 = np.pi * (0.63e-6) ** 2 / PHI0
    rows = []
    for snr in (0.6, 1.0, 3.0, 10.0):
        amp = snr * sigma
        dev, err = [], []
        for _ in range(n_traces):
            g = 1 + amp * np.cos(2 * np.pi * f0 * b + rng.uniform(0, 2 * np.pi))
            res = _extract(b, g + sigma * rng.normal(size=n), background="none")
            dev.append(res.frequency_he - f0)
            err.append(res.frequency_he_err)
        dev_a, err_a = np.asarray(dev), np.asarray(err)
        crb = np.sqrt(3) * sigma / (np.pi * amp * np.sqrt(n) * (b[-1] - b[0]))
        rows.append(
            {
                "snr": snr,
                "coverage": float(np.mean(np.abs(dev_a) < err_a)),
                "scatter_over_error": float(np.std(dev_a) / np.mean(err_a)),
                "error_over_crb": float(np.mean(err_a) / crb),
                "bias_over_error": float(np.mean(dev_a) / np.mean(err_a)),
            }
        )
    return rows


def fits(n_sets: int, rng: np.random.Generator) -> dict[str, float]:
    temps = np.array([0.25, 0.4, 0.6, 0.9, 1.4, 2.0, 2.8])
    r, e_c, lref = 0.63e-6, K_B * 1.0, 2.0e-6
    l_phi = lref / temps
    he = 0.5 * thermal_factor(temps, "ballistic", e_c) * np.exp(-np.pi * r / l_phi)
    h2e = 0.1 * np.exp(-2 * np.pi * r / l_phi)
    truth = {"l_phi_ref": lref, "p": 1.0, "thermal_energy": e_c}
    inside = dict.fromkeys(truth, 0)
    flagged_joint = flagged_single = flagged_power = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(n_sets):
            a1 = he * (1 + 0.03 * rng.normal(size=temps.size))
            a2 = h2e * (1 + 0.03 * rng.normal(size=temps.size))
            fit = fit_l_phi_joint(
                temps,
                a1,
                temps,
                a2,
                radius=r,
                amplitude_he_err=0.03 * he,
                amplitude_h2e_err=0.03 * h2e,
            )
            flagged_joint += bool(fit.unconstrained)
            for k, v in truth.items():
                inside[k] += abs(fit.values[k] - v) < fit.errors[k]
            single = fit_l_phi_temperature(
                temps, a1, radius=r, amplitude_err=0.03 * he, thermal="ballistic"
            )
            flagged_single += bool(single.unconstrained)
            a_pow = 0.3 * temps**-0.5 * (1 + 0.03 * rng.normal(size=temps.size))
            power = fit_l_phi_temperature(temps, a_pow, radius=r, amplitude_err=0.03 * a_pow)
            flagged_power += bool(power.unconstrained)
    out = {f"coverage_{k}": inside[k] / n_sets for k in truth}
    out.update(
        flagged_joint=flagged_joint / n_sets,
        flagged_single=flagged_single / n_sets,
        flagged_power=flagged_power / n_sets,
    )
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--traces", type=int, default=1000)
    ap.add_argument("--fits", type=int, default=400)
    ap.add_argument(
        "--output", type=Path, default=Path(__file__).with_name("RESULTS-stats-coverage.md")
    )
    args = ap.parse_args(argv)
    rng = np.random.default_rng(20261204)
    t0 = time.perf_counter()
    nf = noise_floor(args.traces, rng)
    rows = area_coverage(args.traces, rng)
    ft = fits(args.fits, rng)
    wall = time.perf_counter() - t0
    load = os.getloadavg()
    lines = [
        "# Statistical validation: noise floor, area error, l_phi fits",
        "",
        f"`benchmarks/bench_stats_coverage.py --traces {args.traces} --fits {args.fits}`; "
        f"Python {sys.version.split()[0]}, {platform.machine()}, "
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
        f"load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}, wall {wall:.0f} s. "
        "Not timings: statistical properties (docs/physics.md §12.6, §12.7, §13).",
        "",
        "## Noise floor (white noise, N = 1000, Hann)",
        "",
        "| estimator | band noise rms / truth |",
        "| --- | --- |",
        f"| median / ln 2 (ringkit) | {nf['mean']:.4f} ± {nf['sem']:.4f} |",
        f"| median only (before) | {nf['median_only']:.4f} |",
        "",
        "## Area error (cosine + white noise, N = 1000 over 0.1 T)",
        "",
        "| A/sigma | within ±1 sigma | scatter / mean error | mean error / Cramér–Rao | "
        "bias / error |",
        "| --- | --- | --- | --- | --- |",
    ]
    for r in rows:
        lines.append(
            f"| {r['snr']:g} | {100 * r['coverage']:.1f} % | {r['scatter_over_error']:.3f} | "
            f"{r['error_over_crb']:.2f} | {r['bias_over_error']:+.3f} |"
        )
    lines += [
        "",
        f"Binomial standard deviation of a coverage at n = {args.traces}: "
        f"{100 * np.sqrt(0.683 * 0.317 / args.traces):.1f} %.",
        "",
        "## l_phi(T) fits (7 temperatures 0.25-2.8 K, 3 % errors)",
        "",
        "| quantity | value |",
        "| --- | --- |",
    ]
    for k, v in ft.items():
        lines.append(f"| {k} | {v:.3f} |")
    text = "\n".join(lines) + "\n"
    args.output.write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
