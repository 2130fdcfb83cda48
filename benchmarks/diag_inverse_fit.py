"""Diagnosis of the inverse-fit likelihood: which summary of the amplitudes is calibrated.

Run from the repository root after ``bench_inverse_fit.py`` has built its cache:
``.venv/bin/python benchmarks/diag_inverse_fit.py [--trials N]``. Writes
``benchmarks/.cache-inverse-fit/diagnosis.md`` (included in RESULTS-inverse-fit.md by the next
run of the benchmark).

For each trial of the benchmark (same truths), the negative log-likelihood of several
likelihood variants is evaluated on a grid of (ln L_ref, p) with the mean free path held at
its true value, and the profile 2 Delta lnL of the true L_ref is compared with the chi-square(1)
quantiles 0.989 / 3.841 (scipy.stats). Two kinds of "measured" ring:

* ``loo``: a seed left out of the emulator, its own interpolated values at the truth (the
  likelihood alone, no interpolation error, no noise);
* ``lattice``: the held-out lattice traces of the benchmark (seeds 10000+), analysed as in the
  benchmark (interpolation error and measurement noise included).

Variants (``VARIANTS``): all 18 values y(T_j) or their projection on K polynomials in ln T
per quantity (level, slope, curvature); Schafer-Strimmer shrunk or plain sample covariance;
predictive Student t (v1, v2) or Gaussian with the Hartlap-Percival factor (v3, the one in
use). Also: the correlation of sqrt(h/e rms) between temperatures. No interpolation variance
here (the likelihood form alone).
"""

from __future__ import annotations

import argparse
import math
import sys
import warnings
from pathlib import Path

import numpy as np
from scipy import stats

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import bench_inverse_fit as B  # noqa: E402

from ringkit.analysis import _emulator_likelihood as lik  # noqa: E402
from ringkit.analysis.emulator import (  # noqa: E402
    AmplitudeEmulator,
    measured_vector,
    shrunk_covariance,
)
from ringkit.analysis.inverse_fit import MeasuredAmplitudes  # noqa: E402

TEMPS = np.asarray(B.TEMPS)
T_REF = float(np.exp(np.mean(np.log(TEMPS))))
VARIANTS = {
    "v1: 18 values, shrunk, t": dict(k=None, shrink=True, kind="t"),
    "18 values, sample cov, t": dict(k=None, shrink=False, kind="t"),
    "18 values, sample cov, Hartlap-Percival": dict(k=None, shrink=False, kind="hp"),
    "level, t": dict(k=1, shrink=False, kind="t"),
    "v2: level+slope, t": dict(k=2, shrink=False, kind="t"),
    "level+slope, shrunk, t": dict(k=2, shrink=True, kind="t"),
    "v3: level+slope, Hartlap-Percival": dict(k=2, shrink=False, kind="hp"),
    "level+slope+curvature, Hartlap-Percival": dict(k=3, shrink=False, kind="hp"),
}


def truths(n: int) -> list[dict]:
    rng = np.random.default_rng(20261204)  # as bench_inverse_fit.main
    out = []
    for _ in range(n):
        d = int(rng.integers(0, len(B.MFPS)))
        l_ref = float(np.exp(rng.uniform(np.log(0.22e-6), np.log(0.45e-6))))
        out.append(dict(d=d, l_ref=l_ref, l_phi=l_ref * (TEMPS / T_REF) ** -1.0))
    return out


def lattice_measured(k: int):
    from ringkit.analysis.inverse_fit import measured_amplitudes_from_traces
    from ringkit.units import PHI0

    g = np.load(B.CACHE / f"trial-{k}.npz")["g"]
    dev = B.small_device()
    r = dev.geometry.mean_radius
    field = np.arange(B.N_PERIODS * B.N_FLUX) * PHI0 / B.N_FLUX / (math.pi * r * r)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return measured_amplitudes_from_traces(
            [(field, row) for row in g],
            list(B.TEMPS),
            device=dev,
            background="none",
            band_radii=(0.95 * r, 1.05 * r),
        )


def t_logpdf(x, mean, cov, n, extra) -> float:
    """The predictive t of v1/v2: df n - p, scale S (1 + 1/n)(n - 1)/(n - p) + extra."""
    p = x.size
    nu = max(n - p, 3)
    try:
        dist = stats.multivariate_t(mean, cov * (1 + 1 / n) * (n - 1) / nu + extra, df=nu)
    except np.linalg.LinAlgError:  # numerically singular 18 x 18 sample covariance
        return -math.inf
    return dist.logpdf(x)


def nll(emu, d, ms, lp, k, shrink, kind) -> float:
    noise = np.array([[m.he_noise_rms, m.h2e_noise_rms] for m in ms])
    v = emu._with_noise(emu.node_values(d, lp, TEMPS), noise)
    v[..., :2] = np.sqrt(np.maximum(v[..., :2], 0.0))
    y, var = measured_vector(ms)
    y, var = y.reshape(-1, 3), var.reshape(-1, 3)
    q = np.eye(TEMPS.size) if k is None else lik.temperature_basis(TEMPS, k)
    zs, z = lik.project(v, q), lik.project(y, q)
    cov = shrunk_covariance(zs) if shrink else np.cov(zs, rowvar=False)
    extra = lik.project_measurement_cov(var, q)
    if kind == "t":
        return -t_logpdf(z, zs.mean(axis=0), cov, zs.shape[0], extra)
    return -lik.logpdf(z, zs.mean(axis=0), cov, zs.shape[0], extra, n_theta=2)


def run(emu, mode: str, n: int) -> dict:
    lrefs = np.geomspace(0.08e-6, 1.2e-6, 29)
    ps = np.linspace(-0.2, 2.2, 25)
    out = {name: [] for name in VARIANTS}
    for k, tr in enumerate(truths(n)):
        d = tr["d"]
        if mode == "loo":
            s = (7 * k) % emu.seeds.size
            e = emu.subset([i for i in range(emu.seeds.size) if i != s])
            v = emu.node_values(d, tr["l_phi"], TEMPS)[s]
            ms = [MeasuredAmplitudes(t, *row) for t, row in zip(TEMPS, v, strict=True)]
        else:
            e, ms = emu, lattice_measured(k)
        for name, kw in VARIANTS.items():
            g = np.full((lrefs.size, ps.size), np.inf)
            for a, lr in enumerate(lrefs):
                for b, p in enumerate(ps):
                    lp = lr * (TEMPS / T_REF) ** -p
                    if lp.min() >= e.l_phi_range[0]:
                        lp = np.where(lp > 10 * e.largest_finite_l_phi, np.inf, lp)
                        g[a, b] = nll(e, d, ms, lp, **kw)
            at_truth = nll(e, d, ms, tr["l_phi"], **kw)
            best = min(g.min(), at_truth)
            prof = 2 * (np.interp(np.log(tr["l_ref"]), np.log(lrefs), g.min(axis=1)) - best)
            a, b = np.unravel_index(np.argmin(g), g.shape)
            out[name].append((prof, lrefs[a] / tr["l_ref"], ps[b]))
    return {name: np.array(v) for name, v in out.items()}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--trials", type=int, default=40)
    opt = ap.parse_args()
    emu = AmplitudeEmulator.load(B.CACHE / "emulator-32.nc")
    y = np.sqrt(emu.amplitudes[..., 0])  # (d, s, i, T)
    c = [np.corrcoef(y[d, :, i].T) for d in range(y.shape[0]) for i in range(y.shape[2])]
    adj = np.mean([np.mean(np.diag(m, 1)) for m in c])
    far = np.mean([m[0, -1] for m in c])
    lines = [
        "## Diagnosis: which likelihood is calibrated (benchmarks/diag_inverse_fit.py)",
        "",
        f"Correlation of sqrt(h/e rms) of one realization between temperatures (mean over "
        f"nodes): neighbouring T {adj:.2f}, 0.3 K vs 4 K {far:.2f}. Profile 2 Delta lnL of "
        f"the true L_ref on a grid (29 L_ref x 25 p, mean free path fixed at the truth), "
        f"{opt.trials} trials, chi-square(1) levels (scipy.stats):",
        "",
        "| ring | likelihood | true L_ref in 68 % | in 95 % | MLE L_ref/true (median) | "
        "MLE p (median, mean) |",
        "|---|---|---|---|---|---|",
    ]
    for mode in ("loo", "lattice"):
        res = run(emu, mode, opt.trials)
        for name, r in res.items():
            lines.append(
                f"| {mode} | {name} | {np.mean(r[:, 0] < stats.chi2.ppf(0.68, 1)):.0%} | "
                f"{np.mean(r[:, 0] < stats.chi2.ppf(0.95, 1)):.0%} | {np.median(r[:, 1]):.2f} | "
                f"{np.median(r[:, 2]):.2f}, {np.mean(r[:, 2]):.2f} |"
            )
        print("\n".join(lines), flush=True)
    text = "\n".join(lines) + "\n"
    (B.CACHE / "diagnosis.md").write_text(text)
    print(text)


if __name__ == "__main__":
    main()
