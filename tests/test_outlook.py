"""Outlook "will my rings oscillate?" (ringkit.view.panels.outlook and its widget shell).

Checks against references outside the module (docs/outlook-and-fit-usage.md, "Outlook"):
the predictive number of rings against direct quadrature of Binomial(N, p) over the Jeffreys
posterior Beta(k + 1/2, n - k + 1/2) (scipy.integrate / scipy.stats), and its large-sample
limit against scipy.stats.binom; the statistics against a direct call of the public
``amplitude_statistics``; the Wilson interval against scipy.stats.binomtest; the resistance
floor against dR = R_K dG / G^2 with R_K = h/e^2 from scipy.constants (small-signal inverse
of R = 1/G, docs/measured-data.md). Panel tests set control values like a user.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest
from scipy import constants, integrate, stats

from ringkit._validation import ParameterError
from ringkit.analysis.ensemble_stats import StoppingRule
from ringkit.transport.amplitude_stats import amplitude_statistics
from ringkit.transport.ensemble import SerialExecutor
from ringkit.view.panels._base import JobCancelled
from ringkit.view.panels.outlook import (
    OutlookParams,
    measured_overlay,
    reevaluate,
    ring_outlook,
    rings_above_floor,
)

R_K = constants.h / constants.e**2  # von Klitzing constant, CODATA (exact in SI 2019)
TINY = OutlookParams(radius=150e-9, width=60e-9, l_phi=math.inf, realizations=6, seed=3,
                     noise_floor=0.05, n_rings=12)  # fmt: skip


def _mixture_pmf(j: int, k: int, n: int, n_rings: int) -> float:
    """P(K = j) = int Binomial(j; N, p) Beta(p; k + 1/2, n - k + 1/2) dp by quadrature."""
    post = stats.beta(k + 0.5, n - k + 0.5)
    f = lambda p: stats.binom.pmf(j, n_rings, p) * post.pdf(p)  # noqa: E731
    return integrate.quad(f, 0, 1, limit=200, points=[k / n])[0]


@pytest.mark.parametrize(("k", "n", "n_rings"), [(7, 10, 20), (0, 12, 5), (30, 40, 8)])
def test_rings_above_floor_against_quadrature(k, n, n_rings):
    mean, lo, hi = rings_above_floor(k, n, n_rings, confidence=0.9)
    pmf = np.array([_mixture_pmf(j, k, n, n_rings) for j in range(n_rings + 1)])
    assert pmf.sum() == pytest.approx(1.0, abs=1e-7)
    assert mean == pytest.approx(float(np.dot(np.arange(n_rings + 1), pmf)), rel=1e-6)
    cdf = np.cumsum(pmf)
    # equal-tailed interval: smallest j with CDF >= 5 % and >= 95 %
    assert lo == int(np.argmax(cdf >= 0.05 - 1e-9))
    assert hi == int(np.argmax(cdf >= 0.95 - 1e-9))


def test_rings_above_floor_large_sample_is_binomial():
    # with p known to high precision only the ring-to-ring binomial spread remains
    mean, lo, hi = rings_above_floor(700_000, 1_000_000, 20, confidence=0.95)
    ref = stats.binom(20, 0.7)
    assert mean == pytest.approx(14.0, rel=1e-5)
    assert (lo, hi) == (int(ref.ppf(0.025)), int(ref.ppf(0.975)))


def test_rings_above_floor_bad_input():
    with pytest.raises(ParameterError, match="k"):
        rings_above_floor(5, 4, 10)
    with pytest.raises(ParameterError, match="n_rings"):
        rings_above_floor(1, 4, 0)


@pytest.fixture(scope="module")
def outlook():
    return ring_outlook(TINY)


def test_outlook_is_amplitude_statistics_of_the_device(outlook):
    ref = amplitude_statistics(
        TINY.device(), TINY.fluxes(), rule=StoppingRule.fixed(6), seed0=3,
        executor=SerialExecutor(), progress=False,
    )  # fmt: skip
    assert np.array_equal(outlook.stats.samples, ref.samples)
    assert np.array_equal(outlook.stats.quantiles, ref.quantiles)
    he = ref.samples[:, 0]
    k = int(np.sum(he > 0.05))
    assert outlook.k_above == k and outlook.p == k / he.size
    ci = stats.binomtest(k, he.size).proportion_ci(confidence_level=0.95, method="wilson")
    assert (outlook.p_low, outlook.p_high) == pytest.approx((ci.low, ci.high), abs=1e-12)
    assert "Of 12 rings" in outlook.sentence()


def test_resistance_floor_and_reevaluation(outlook):
    he, g = outlook.stats.samples[:, 0], outlook.stats.samples[:, 2]
    dr = R_K * he / g**2  # small-signal inverse of R = 1/G, G in e^2/h
    floor = float(np.median(dr))
    again = reevaluate(outlook, TINY.updated(floor_unit="ohm", noise_floor=floor, n_rings=30))
    assert again.floor_samples == pytest.approx(dr, rel=1e-12)
    assert again.k_above == int(np.sum(dr > floor))
    assert again.expected_rings == pytest.approx(30 * (again.k_above + 0.5) / (he.size + 1))
    with pytest.raises(ParameterError, match="run the outlook again"):
        reevaluate(outlook, TINY.updated(radius=200e-9))


def test_progress_and_cancel(tmp_path):
    calls = []

    def report(frac, text):
        calls.append((frac, text))
        if len(calls) > 3:
            raise JobCancelled("cancelled by the user")

    with pytest.raises(JobCancelled):
        ring_outlook(TINY, report=report, checkpoint=tmp_path)
    fracs = [f for f, _ in calls]
    assert fracs == sorted(fracs) and "realization" in calls[-1][1]
    done = []
    res = ring_outlook(TINY, report=lambda f, t: done.append(f), checkpoint=tmp_path)
    assert done[-1] == 1.0 and res.stats.n_realizations == 6


@pytest.mark.parametrize(
    ("change", "name"),
    [({"radius": -1e-9}, "radius"), ({"width": 400e-9}, "width"),
     ({"floor_unit": "volt"}, "floor_unit"), ({"n_rings": 0}, "n_rings"),
     ({"realizations": 2}, "realizations"), ({"l_phi": 0.0}, "l_phi"),
     ({"noise_floor": -1.0}, "noise_floor")],
)  # fmt: skip
def test_bad_settings_name_the_parameter(change, name):
    with pytest.raises(ParameterError, match=name):
        TINY.updated(**change)


def test_measured_overlay_reads_fit_documents(tmp_path):
    doc = {
        "measured": [{"temperature_K": 0.3, "amplitude_he_e2h": 0.02,
                      "amplitude_h2e_e2h": 0.01, "mean_conductance_e2h": 2.0}],
        "model_bands": [{"temperature_K": 0.3, "he_q16": 0.01, "he_q50": 0.02, "he_q84": 0.04}],
    }  # fmt: skip
    ov = measured_overlay(doc)
    assert ov["measured_he"].tolist() == [0.02] and ov["he_q84"].tolist() == [0.04]
    assert np.isnan(ov["g_q50"][0])
    (tmp_path / "bad.json").write_text("{not json")
    with pytest.raises(ParameterError, match="fit file"):
        measured_overlay(tmp_path / "bad.json")
    with pytest.raises(ParameterError, match="measured"):
        measured_overlay({"parameters": {}})


def test_panel_runs_updates_and_overlays(outlook):
    from ringkit.view.panels import RingOutlookPanel

    panel = RingOutlookPanel(TINY)
    c = panel.controls
    assert c["radius"].value == pytest.approx(150.0) and c["l_phi"].value == 0.0
    job = panel.run()
    assert job.wait(timeout=120) and job.error is None, job.error
    res = panel.result
    assert np.array_equal(res.stats.samples, outlook.stats.samples)
    (bars,) = panel.ax_hist.containers  # the histogram's BarContainer
    assert sum(p.get_height() for p in bars) == 6  # one count per realization
    floor_x = [ln.get_xdata()[0] for ln in panel.ax_hist.get_lines() if ln.get_linestyle() == "--"]
    assert floor_x == [pytest.approx(0.05)]
    assert "Of 12 rings" in panel.summary.value
    # a new floor re-evaluates the same realizations at once
    t0 = time.perf_counter()
    c["noise_floor"].value = 0.02
    elapsed = time.perf_counter() - t0
    assert panel.result.p == np.mean(outlook.stats.samples[:, 0] > 0.02)
    assert elapsed < 5.0  # no new ensemble (a redraw; measured ~0.1-0.7 s)
    # bad input: one line, the last result stays
    c["width"].value = 400.0
    assert panel.last_error and "width" in panel.last_error and "\n" not in panel.last_error
    assert panel.result is not None and panel.result.p == np.mean(res.stats.samples[:, 0] > 0.02)
    c["width"].value = 60.0
    assert panel.last_error is None
    # after measurement: overlay of a fit document
    doc = {"measured": [{"temperature_K": 0.5, "amplitude_he_e2h": 0.03,
                         "amplitude_h2e_e2h": 0.01, "mean_conductance_e2h": 1.0}]}  # fmt: skip
    assert panel.load_fit(doc)
    xs = [ln.get_xdata().tolist() for ln in panel.ax_overlay.get_lines()]
    assert [0.5] in xs
    assert not panel.load_fit("   ") and "fit.json" in panel.last_error
