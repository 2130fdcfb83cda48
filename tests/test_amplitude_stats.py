"""Amplitude statistics over disorder realizations (ringkit.transport.amplitude_stats,
ringkit.analysis.ensemble_stats): bootstrap errors against exact order statistics, Wilson
interval against scipy, the stopping rule, reproducibility across executors, the N^-1/2 law
of ensemble-averaged h/e oscillations, netCDF output and the histogram figure
(docs/amplitude-statistics.md)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from ringkit._validation import ParameterError
from ringkit.analysis.ensemble_stats import (
    ConvergenceWarning,
    StoppingRule,
    averaged_amplitude,
    bootstrap_quantiles,
    exceedance_probability,
    flux_to_equivalent_field,
    trace_amplitudes,
)
from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.transport.amplitude_size import amplitude_vs_radius
from ringkit.transport.amplitude_stats import (
    amplitude_statistics,
    ensemble_statistics,
)
from ringkit.transport.ensemble import SerialExecutor, default_executor
from ringkit.units import PHI0

FLUX = np.arange(60) / 12  # five h/e periods, 12 points per period (units of h/e)


def _rayleigh_ppf(u):
    """Closed-form Rayleigh (sigma = 1) quantile function sqrt(-2 ln(1 - u))."""
    return np.sqrt(-2.0 * np.log1p(-u))


def _order_statistic_sd(k: int, n: int) -> float:
    """Exact standard deviation of the k-th order statistic of n Rayleigh samples: U_(k) is
    Beta(k, n + 1 - k) distributed (David & Nagaraja, Order Statistics, 2003, eq. 2.2.1;
    from memory), mapped through the quantile function; quadrature."""
    dist = stats.beta(k, n + 1 - k)
    m1 = integrate.quad(lambda u: _rayleigh_ppf(u) * dist.pdf(u), 0, 1, limit=200)[0]
    m2 = integrate.quad(lambda u: _rayleigh_ppf(u) ** 2 * dist.pdf(u), 0, 1, limit=200)[0]
    return math.sqrt(m2 - m1 * m1)


def test_bootstrap_quantile_error_matches_exact_order_statistics():
    n, trials = 120, 200
    rng = np.random.default_rng(12345)
    q = np.array([0.16, 0.5, 0.84])
    errs = np.empty((trials, 3))
    ests = np.empty((trials, 3))
    for i in range(trials):
        x = rng.rayleigh(1.0, n)
        est, err = bootstrap_quantiles(x, q, n_boot=400, seed=i)
        ests[i], errs[i] = est[0], err[0]
    for j, p in enumerate(q):
        k = math.ceil(n * p)  # numpy's inverted_cdf quantile is the order statistic X_(ceil(nq))
        exact = _order_statistic_sd(k, n)
        # mean bootstrap error within 10 % of the exact sd (bootstrap of a quantile is biased by
        # O(n^-1/2) and noisy; 200 trials average it: common practice)
        assert errs[:, j].mean() == pytest.approx(exact, rel=0.10)
        # the estimator's own spread over trials agrees with the exact sd too (sd of an sd of
        # 200 trials ~5 %)
        assert ests[:, j].std(ddof=1) == pytest.approx(exact, rel=0.15)
        # and the quantile is unbiased against the closed form to 3 standard errors
        assert abs(ests[:, j].mean() - _rayleigh_ppf(p)) < 3 * exact / math.sqrt(trials) + 0.01


def test_wilson_interval_against_scipy():
    x = np.r_[np.full(7, 2.0), np.full(13, 0.5)]
    p, lo, hi = exceedance_probability(x, 1.0, confidence=0.9)
    ref = stats.binomtest(7, 20).proportion_ci(confidence_level=0.9, method="wilson")
    assert p == pytest.approx(0.35, abs=1e-15)
    assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-12)
    p0, lo0, hi0 = exceedance_probability(np.zeros(10), 1.0)
    assert p0 == 0.0 and lo0 == 0.0 and hi0 > 0.15  # not empty at k = 0
    with pytest.raises(ParameterError, match="confidence"):
        exceedance_probability(x, 1.0, confidence=1.0)


class RayleighTrace:
    """Synthetic ensemble task: G(phi) = 1 + a cos(2 pi phi + theta) + a/3 cos(4 pi phi), with a
    Rayleigh (sigma = 0.1) and theta uniform from the seed -- the h/e amplitude of a ring whose
    h/e Fourier coefficient is a complex Gaussian (random phase). h/e rms = a/sqrt 2 exactly."""

    def __call__(self, seed):
        rng = np.random.default_rng([7, seed])
        a, th = 0.1 * rng.rayleigh(), rng.uniform(0, 2 * np.pi)
        return 1 + a * np.cos(2 * np.pi * FLUX + th) + a / 3 * np.cos(4 * np.pi * FLUX)

    def describe(self):
        return {"task": "RayleighTrace"}


FIELD = flux_to_equivalent_field(FLUX * PHI0, 1.0)  # lengths in arbitrary units (scale-free)
KW = dict(r_in=0.95, r_out=1.05, background="none", executor=SerialExecutor())


def test_stopping_rule_stops_when_quantiles_converge():
    rule = StoppingRule(rel_tol=0.1, min_realizations=40, batch=20, max_realizations=600)
    res = ensemble_statistics(RayleighTrace(), FIELD, rule=rule, columns=["amplitude_he_rms"], **KW)
    assert res.stop_reason == "converged"
    # the 16 % quantile has the largest relative error: sd/Q = sqrt(p(1-p))/(f(x_p) x_p sqrt n)
    # = 1.251/sqrt(n) for a Rayleigh law (closed form), so 10 % needs n ~ 157
    assert 100 <= res.n_realizations <= 260
    assert np.all(res.converged[0]) and np.all(res.quantile_errors[0] <= 0.1 * res.quantiles[0])
    assert res.history[-2][1] > 0.1 >= res.history[-1][1]  # stopped at the first converged batch
    exact = 0.1 / math.sqrt(2) * _rayleigh_ppf(res.q)  # h/e rms quantiles, closed form
    assert np.all(np.abs(res.quantiles[0] - exact) < 3 * res.quantile_errors[0])
    assert res.n_realizations == len(res.seeds) == res.samples.shape[0]
    with pytest.warns(ConvergenceWarning, match="max_realizations = 60"):
        capped = ensemble_statistics(
            RayleighTrace(),
            FIELD,
            rule=StoppingRule(rel_tol=0.02, min_realizations=40, batch=20, max_realizations=60),
            **KW,
        )
    assert capped.stop_reason == "max_realizations" and capped.n_realizations == 60
    assert not np.all(capped.converged)
    assert np.array_equal(capped.samples, res.samples[:60])  # same seeds, same samples


def test_extraction_of_periodic_trace_is_exact():
    g = 2 + 0.3 * np.cos(2 * np.pi * FLUX + 0.4) + 0.1 * np.cos(4 * np.pi * FLUX + 1)
    a = trace_amplitudes(FIELD, g, r_in=0.95, r_out=1.05, background="none")[0]
    # cosine of amplitude A has rms A/sqrt 2 (Parseval)
    assert a == pytest.approx([0.3 / math.sqrt(2), 0.1 / math.sqrt(2), 2.0], rel=1e-3)


def _device(radius=150e-9, mean_free_path=3e-7):
    geo = RingGeometry.from_mean_radius(radius, 60e-9)
    mat = Material.preset("GaAs", mean_free_path=mean_free_path)
    return RingDevice(mat, geo, field_mode="flux_tube")


def test_reproducible_by_seed_and_identical_across_executors(tmp_path):
    dev = _device()
    # coherent rings (no probes) keep the test short; dephasing only changes the task
    kw = dict(rule=StoppingRule.fixed(6), seed0=5, noise_floor=0.05)
    serial = amplitude_statistics(dev, FLUX * PHI0, executor=SerialExecutor(), **kw)
    with default_executor(2) as ex:
        pooled = amplitude_statistics(dev, FLUX * PHI0, executor=ex, checkpoint=tmp_path, **kw)
    for name in ("traces", "samples", "quantiles", "quantile_errors"):
        assert np.array_equal(getattr(serial, name), getattr(pooled, name)), name  # bit for bit
    assert serial.exceedance == pooled.exceedance
    assert np.ptp(serial.samples[:, 0]) > 0  # realizations differ
    # rerun from the checkpoint: nothing recomputed, same numbers
    again = amplitude_statistics(
        dev, FLUX * PHI0, executor=SerialExecutor(), checkpoint=tmp_path, **kw
    )
    assert np.array_equal(again.samples, serial.samples)
    other = amplitude_statistics(dev, FLUX * PHI0, executor=SerialExecutor(), **{**kw, "seed0": 6})
    assert not np.array_equal(other.samples, serial.samples)
    assert np.array_equal(other.samples[:-1], serial.samples[1:])  # seed k is realization k


def test_dataset_is_netcdf_safe_and_histogram(tmp_path):
    import xarray as xr

    from ringkit.view.stats_plots import plot_statistics

    res = ensemble_statistics(
        RayleighTrace(),
        FIELD,
        rule=StoppingRule.fixed(20),
        noise_floor=0.05,
        **KW,
    )
    ds = res.to_dataset()
    ds.to_netcdf(tmp_path / "s.nc")
    back = xr.load_dataset(tmp_path / "s.nc")
    assert np.array_equal(back["amplitude_he_rms"].values, res.samples[:, 0])
    assert back.attrs["stop_reason"] == res.stop_reason
    assert back.attrs["exceedance_p"] == pytest.approx(np.mean(res.samples[:, 0] > 0.05))
    axes = plot_statistics(res)
    assert len(axes) == 3 and axes[0].figure is axes[2].figure
    assert sum(p.get_height() for p in axes[0].patches if hasattr(p, "get_height")) >= 20


@pytest.mark.slow
def test_ensemble_average_h_over_e_falls_as_inverse_sqrt_n():
    # N as in tests/test_ensemble.py: the G(B) traces of N rings are averaged (rings measured
    # together, in series or parallel) and the h/e rms of the average is taken. Random-phase h/e
    # terms add incoherently: rms ~ N^(-1/2) (C. P. Umbach et al., Phys. Rev. B 30, 4048 (1984);
    # Umbach et al., Phys. Rev. Lett. 56, 386 (1986) -- from memory). The phase is random only
    # in diffusive rings: mean free path 100 nm << half circumference 470 nm (a 300 nm path
    # gave a slope of -0.32: nearly ballistic rings share an h/e sign).
    dev = _device(mean_free_path=1e-7)
    with default_executor(2) as ex:
        res = amplitude_statistics(dev, FLUX * PHI0, rule=StoppingRule.fixed(64), executor=ex)
    assert res.stop_reason == "fixed_size"
    out = averaged_amplitude(
        res.field,
        res.traces,
        [1, 2, 4, 8],
        r_in=0.95 * 150e-9,
        r_out=1.05 * 150e-9,
        background="none",
    )
    assert out["slope_err"] < 0.2  # the check can tell -1/2 from 0 and from -1
    assert abs(out["slope"] + 0.5) < 2.5 * out["slope_err"]


def test_amplitude_versus_radius_bands_and_fitted_prefactors():
    from ringkit.analysis.scaling import predict_amplitudes

    radii = (150e-9, 200e-9)
    mat = Material.preset("GaAs", mean_free_path=3e-7)
    model = dict(
        l_phi=math.inf,
        temperature=0.0,
        mean_free_path=3e-7,
        fermi_velocity=mat.fermi_velocity,
        n_modes=2,
    )
    out = amplitude_vs_radius(
        _device,
        radii,
        lambda dev: FLUX * PHI0,
        rule=StoppingRule.fixed(8),
        executor=SerialExecutor(),
        fit_kwargs=model,
    )
    s0 = out["statistics"][0]
    assert out["he_median"][0] == s0.quantile("amplitude_he_rms", 0.5)[0]
    assert np.all(out["he_q16"] <= out["he_median"]) and np.all(out["he_median"] <= out["he_q84"])
    assert list(out["n_realizations"]) == [8, 8] and out["stop_reason"] == ["fixed_size"] * 2
    fit = out["fit"]
    assert fit is not None and fit["coherent_amplitude"] is not None
    assert fit["coherent_amplitude_err"] > 0  # no prefactor without its uncertainty
    # the fitted law passes through the medians within their scatter (weighted fit, 2 points)
    pred = predict_amplitudes(
        np.array(radii),
        **model,
        conductance=out["mean_g_median"],
        coherent_amplitude=fit["coherent_amplitude"],
        aas_amplitude=fit["aas_amplitude"] or 1.0,
    )
    resid = (pred["amplitude_he_rms"].values - out["he_median"]) / out["he_median_err"]
    assert np.all(np.abs(resid) < 4)
