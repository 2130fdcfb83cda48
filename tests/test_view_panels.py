"""Widget panels of ringkit.view, headless (no browser, no kernel).

Each test sets control ``.value``s like a user and checks the recomputed plotted data or the
numbers shown against references outside the panel code: the closed-form single-channel ring
(docs/physics.md §6.2 [C]), Landauer sums computed here, the mean free path l = hbar kF mu/e
(§8.3 [C]), exp(-L/L_phi) and N^-1/2 scaling (§9.2-9.4), sinusoid rms = A/sqrt(2) (§12.5).
Invalid settings must show the validation message and keep the last good plot.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime

import numpy as np
import pytest
from scipy import constants

from ringkit.analysis.network1d import ring_transmission
from ringkit.view.panels import DeviceExplorer, MeasuredDataPanel
from ringkit.view.panels._base import BackgroundJob, JobCancelled
from ringkit.view.panels.explorer import ExplorerParams

H_OVER_E = constants.h / constants.e  # scipy.constants (CODATA, exact in SI 2019)
M_GAAS = 0.067  # GaAs effective mass (Yu & Cardona table, as in the Material preset)


def closed_T(th1, th2, phi, eps):
    """Two-lead ring transmission, docs/physics.md §6.2 [C] (independent of the network solver)."""
    a = (np.sqrt(1 - 2 * eps) - 1) / 2
    b = (np.sqrt(1 - 2 * eps) + 1) / 2
    num = eps**2 * (
        np.sin(th1) ** 2 + np.sin(th2) ** 2 + 2 * np.sin(th1) * np.sin(th2) * np.cos(phi)
    )
    den = ((1 - eps) * np.cos(th1 + th2) - a**2 * np.cos(th1 - th2) - b**2 * np.cos(phi)) ** 2
    return num / (den + eps**2 * np.sin(th1 + th2) ** 2)


def kf_of(e_f_mev: float, mass: float = M_GAAS) -> float:
    return math.sqrt(2 * mass * constants.m_e * e_f_mev * 1e-3 * constants.e) / constants.hbar


@pytest.fixture
def coherent_explorer():
    """Explorer at T = 0, no dephasing, no disorder, junction eps = 1/2."""
    ex = DeviceExplorer(
        ExplorerParams(temperature=0.0, l_phi=None, mobility=math.inf,
                       coupling=0.5), live_lattice=False,
    )  # fmt: skip
    c = ex.controls
    assert c["l_phi"].value == 10 ** c["l_phi"].max  # log slider top end = no dephasing
    assert c["mobility"].value == 10 ** c["mobility"].max  # top end = clean
    return ex


def _preview_xy(ex):
    line = ex.artists["preview"]
    return np.asarray(line.get_xdata()) / 1e3, np.asarray(line.get_ydata())  # mT -> T


def _ef_mev(ex) -> float:
    """E_F in meV of the explorer's carrier input: the density through E_F = pi hbar^2 n/m*
    (spin-degenerate 2DEG; J. H. Davies, The Physics of Low-Dimensional Semiconductors
    (1998), ch. 1), or the Fermi energy typed in."""
    c = ex.controls
    if ex.fermi_source == "density":
        n = c["density"].value * 1e15  # display unit 1e11 cm^-2
        return math.pi * constants.hbar**2 * n / (M_GAAS * constants.m_e) / constants.e * 1e3
    return c["fermi_energy"].value


def _expected(ex, *, lead_deg=180.0, gate_mev=0.0, eps=0.5):
    c = ex.controls
    b, _ = _preview_xy(ex)
    r = c["radius"].value / 1e9
    e_f = _ef_mev(ex)
    l1 = r * math.radians(lead_deg)
    l2 = 2 * math.pi * r - l1
    k1 = kf_of(e_f - gate_mev)
    phi = 2 * math.pi * b * math.pi * r**2 / H_OVER_E
    return 2.0 * closed_T(k1 * l1, kf_of(e_f) * l2, phi, eps)  # spin-degenerate, e^2/h


# --------------------------------------------------------------------------- device explorer


def test_explorer_preview_is_the_exact_ring(coherent_explorer):
    ex = coherent_explorer
    _, g = _preview_xy(ex)
    np.testing.assert_allclose(g, _expected(ex), atol=1e-9)
    # symmetric ring, eps = 1/2: G = 2 e^2/h at zero flux, 0 at half a flux quantum (§6.3)
    assert g.max() == pytest.approx(2.0, abs=1e-6)
    r = ex.controls["radius"].value / 1e9
    period = H_OVER_E / (math.pi * r**2)
    shown = ex.summary.value
    assert f"{period * 1e3:.3g} mT" in shown  # h/e period of the mean radius


def test_explorer_controls_recompute(coherent_explorer):
    ex = coherent_explorer
    c = ex.controls
    c["radius"].value = 620.0
    np.testing.assert_allclose(_preview_xy(ex)[1], _expected(ex), atol=1e-9)
    c["lead_angle"].value = 150.0  # arms of unequal length
    np.testing.assert_allclose(_preview_xy(ex)[1], _expected(ex, lead_deg=150.0), atol=1e-9)
    c["gate"].value = 1.5  # meV on the upper arm: local wavevector sqrt(2 m (E_F - V))/hbar
    want = _expected(ex, lead_deg=150.0, gate_mev=1.5)
    np.testing.assert_allclose(_preview_xy(ex)[1], want, atol=1e-9)
    c["coupling"].value = 0.3
    want = _expected(ex, lead_deg=150.0, gate_mev=1.5, eps=0.3)
    np.testing.assert_allclose(_preview_xy(ex)[1], want, atol=1e-9)


def test_explorer_disorder_and_dephasing(coherent_explorer):
    ex = coherent_explorer
    c = ex.controls
    c["mobility"].value = 2e5  # cm^2/Vs
    b, g = _preview_xy(ex)
    r = c["radius"].value / 1e9
    kf = kf_of(_ef_mev(ex))
    mfp = constants.hbar * kf * 2e5 * 1e-4 / constants.e  # l = hbar kF mu / e (§8.3)
    lj = math.pi * r
    refl = lj / (lj + mfp)  # one mid-arm scatterer per arm (documented preview convention)
    phi = 2 * math.pi * b * math.pi * r**2 / H_OVER_E
    coh = 2 * ring_transmission(kf * lj, kf * lj, phi, 0.5, arm_reflection=(refl, refl))
    np.testing.assert_allclose(g, coh, atol=1e-9)
    c["mobility"].value = 10 ** c["mobility"].max  # top end = clean
    c["l_phi"].value = 1.0  # µm
    f = math.exp(-math.pi * r / 1e-6)  # coherent fraction exp(-(C/2)/L_phi)
    classical = 2 * (2 * 0.5 / (2 - 0.5))  # ideal arms: T_cl = 2 eps/(2 - eps)
    want = f * _expected(ex) + (1 - f) * classical
    np.testing.assert_allclose(_preview_xy(ex)[1], want, atol=1e-9)


def test_explorer_temperature_matches_quadrature(coherent_explorer):
    ex = coherent_explorer
    ex.controls["temperature"].value = 2.0
    b, g = _preview_xy(ex)
    r = ex.controls["radius"].value / 1e9
    e_f = _ef_mev(ex) * 1e-3 * constants.e
    kt = constants.k * 2.0
    e = np.linspace(e_f - 15 * kt, e_f + 15 * kt, 3001)
    w = 1 / np.cosh((e - e_f) / (2 * kt)) ** 2  # -df/dE up to a constant
    w /= w.sum()
    k = np.sqrt(2 * M_GAAS * constants.m_e * e) / constants.hbar
    phi = 2 * math.pi * b * math.pi * r**2 / H_OVER_E
    t = closed_T(k[:, None] * math.pi * r, k[:, None] * math.pi * r, phi[None, :], 0.5)
    # Near integer flux quanta the ring has resonances far narrower than the preview's energy
    # step (0.15 rad of dynamic phase), so the preview's thermal mean is accurate to ~1e-2
    # there (documented in NetworkRing.energy_grid); elsewhere to ~1e-3.
    ref = 2 * (w @ t)
    np.testing.assert_allclose(g, ref, atol=1.5e-2)
    assert np.median(np.abs(g - ref)) < 1e-3
    # symmetric ring, eps = 1/2: T = 1 at integer and 0 at half-integer flux for every
    # energy (§6.3), so those points survive up to the thermal policy's error control
    # (its default tol = 1e-4 e^2/h, ringkit.thermal_policy); in between the smearing is visible
    assert g.max() == pytest.approx(2.0, abs=1e-4)
    assert np.max(np.abs(g - _expected(ex))) > 0.05


def test_explorer_invalid_keeps_last_plot():
    ex = DeviceExplorer(live_lattice=False)
    before_png = ex.pane.image.value
    before = _preview_xy(ex)[1].copy()
    ex.controls["radius"].value = 300.0
    good_png = ex.pane.image.value
    assert good_png != before_png
    good = _preview_xy(ex)[1].copy()
    assert not np.array_equal(good, before)
    ex.controls["width"].value = 800.0  # wider than the ring allows
    assert "width" in ex.message.value and "2 * radius" in ex.message.value
    assert ex.pane.image.value == good_png
    np.testing.assert_array_equal(_preview_xy(ex)[1], good)
    ex.controls["width"].value = 100.0
    assert ex.message.value == "" and ex.last_error is None


def test_explorer_full_tight_binding_with_preview():
    from ringkit.tightbinding import build_ring
    from ringkit.transport import conductance
    from ringkit.view.panels.explorer_full import build_device

    ex = DeviceExplorer(
        ExplorerParams(radius=0.15e-6, width=0.04e-6, temperature=0.0,
                       l_phi=None, field_min=-0.03, field_max=0.03),
        live_lattice=False,
    )  # fmt: skip
    job = ex.run_full()
    assert job.wait(timeout=180), "full computation did not finish"
    assert job.error is None, job.error
    assert ex.progress.value == 1.0 and ex.progress_label.value.startswith("done")
    full = ex.full
    line = ex.artists["full"]
    np.testing.assert_allclose(line.get_ydata(), full.conductance)
    np.testing.assert_allclose(np.asarray(line.get_xdata()) / 1e3, full.field)
    assert "preview" in ex.artists  # both results drawn together
    # Onsager, two terminals: G(B) = G(-B) (docs/physics.md §5.3)
    np.testing.assert_allclose(full.conductance, full.conductance[::-1], atol=1e-8)
    # the zero-field point agrees with the core's kwant-based conductance of the same ring
    ring = build_ring(build_device(ex.params), seed=0)
    i0 = int(np.argmin(np.abs(full.field)))
    assert abs(full.field[i0]) < 1e-12
    assert full.conductance[i0] == pytest.approx(conductance(ring, flux=0.0), abs=1e-8)
    assert "tight-binding: mean G" in ex.summary.value
    # changing a control marks the full result as belonging to earlier settings
    ex.controls["temperature"].value = 0.5
    assert ex.artists["full"].get_label() == "tight-binding (earlier settings)"


def test_explorer_full_cancel():
    ex = DeviceExplorer(ExplorerParams(radius=0.3e-6, width=0.08e-6, temperature=0.0),
                        live_lattice=False)  # fmt: skip
    job = ex.run_full()
    ex.cancel_full()
    assert job.wait(timeout=120)
    assert isinstance(job.error, JobCancelled)
    assert ex.progress_label.value == "cancelled"
    assert ex.full is None and not ex.run_button.disabled


def test_background_job_progress_and_cancel():
    seen = []

    def work(report, cancelled):
        for i in range(5):
            report(i / 5, f"step {i}")
        return 42

    job = BackgroundJob(work, on_progress=lambda f, t: seen.append(f)).start()
    assert job.wait(5) and job.result == 42 and seen == [0.0, 0.2, 0.4, 0.6, 0.8]

    def slow(report, cancelled):
        while True:
            report(0.5, "waiting")
            cancelled.wait(0.01)

    errors = []
    job = BackgroundJob(slow, on_error=errors.append).start()
    job.cancel()
    assert job.wait(5) and isinstance(errors[0], JobCancelled)


# --------------------------------------------------------------------------- measured data


def _synthetic_csv(period=3.0e-3, amp=0.05, units=True) -> bytes:
    b = np.linspace(-0.05, 0.05, 2001)
    g = 15.0 + 20.0 * b + amp * np.cos(2 * np.pi * b / period)
    head = "B (mT),G (e^2/h)" if units else "B,G"
    rows = "\n".join(f"{x * 1e3:.6f},{y:.9f}" for x, y in zip(b, g, strict=True))
    return f"{head}\n{rows}\n".encode()


def test_measured_upload_extracts_period_and_amplitude():
    panel = MeasuredDataPanel()
    content = _synthetic_csv()
    panel.upload.value = (
        {"name": "synthetic.csv", "type": "text/csv", "size": len(content),
         "content": memoryview(content), "last_modified": datetime.now(UTC)},
    )  # fmt: skip
    assert panel.last_error is None, panel.message.value
    res = panel.analysis.result
    assert res.period_he == pytest.approx(3.0e-3, rel=0.01)
    assert res.amplitude_he_rms == pytest.approx(0.05 / math.sqrt(2), rel=0.03)  # §12.5
    np.testing.assert_allclose(panel.artists["trace"].get_xdata(), panel.analysis.field * 1e3)
    resid = np.asarray(panel.artists["residual"].get_ydata())
    b = panel.analysis.field
    np.testing.assert_allclose(resid, 0.05 * np.cos(2 * np.pi * b / 3e-3), atol=4e-3)
    assert "3 ±" in panel.summary.value or "3.00" in panel.summary.value
    # the overlaid simulation is a ring of the extracted area
    area = res.area
    assert panel.analysis.sim_ring.radius == pytest.approx(math.sqrt(area / math.pi), rel=1e-12)
    np.testing.assert_allclose(panel.artists["simulation"].get_xdata(), b * 1e3)


def test_measured_controls_recompute():
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_synthetic_csv(), "synthetic.csv")
    c = panel.controls
    c["field"].value = (-20.0, 30.0)
    x = np.asarray(panel.artists["trace"].get_xdata())
    assert x.min() >= -20.0 - 1e-9 and x.max() <= 30.0 + 1e-9 and x.max() > 29.9
    c["background"].value = "none"
    np.testing.assert_allclose(panel.artists["background"].get_ydata(), 0.0)
    c["background"].value = "moving_average"
    c["window_periods"].value = 1.0
    res = panel.analysis.result
    assert res.amplitude_he_rms == pytest.approx(0.05 / math.sqrt(2), rel=0.05)


def test_measured_units_and_bad_upload():
    panel = MeasuredDataPanel()
    assert panel.load_bytes(_synthetic_csv(), "good.csv")
    png = panel.pane.image.value
    resid = np.asarray(panel.artists["residual"].get_ydata()).copy()
    assert not panel.load_bytes(b"B (mT),G (e^2/h)\n1.0,abc\n2.0,3.0\n", "broken.csv")
    assert "broken.csv" in panel.message.value and "line 2" in panel.message.value
    assert panel.pane.image.value == png  # the last good plot stays
    np.testing.assert_array_equal(panel.artists["residual"].get_ydata(), resid)
    # no units in the header: pick them in the panel
    assert not panel.load_bytes(_synthetic_csv(units=False), "plain.csv")
    assert panel.last_error is not None
    panel.load_controls["signal_unit"].value = "e^2/h"
    panel.load_controls["field_unit"].value = "T"  # wrong on purpose: mT values read as T
    assert panel.last_error is None, panel.message.value
    assert panel.analysis.result.period_he == pytest.approx(3.0, rel=0.01)
    panel.load_controls["field_unit"].value = "mT"
    assert panel.analysis.result.period_he == pytest.approx(3.0e-3, rel=0.01)


def test_measured_demo_is_labelled():
    panel = MeasuredDataPanel()
    assert panel.load_demo()
    assert "INVENTED" in panel.axes[0].get_title()
    # scenario radius 0.65 µm (the demo's own input), recovered through R -> G with R_series
    assert panel.analysis.result.radius == pytest.approx(0.65e-6, rel=0.02)


# --------------------------------------------------------------------------- size scaling


# the size-scaling panel's bands, fitted law and controls: tests/test_view_scaling.py


def test_simulated_points_same_on_engine_ensemble():
    from ringkit.transport.ensemble import SerialExecutor
    from ringkit.view.panels.scaling import ScalingParams, simulate_points

    params = ScalingParams(l_phi=1e-6, temperature=0.05)
    kw = dict(seeds=(0, 1), width=0.04e-6, n_flux=16)
    here = simulate_points(params, [0.12e-6], **kw)
    pooled = simulate_points(params, [0.12e-6], executor=SerialExecutor(), **kw)
    for key in ("amplitude_he_rms", "amplitude_h2e_rms", "amplitude_he_rms_err"):
        np.testing.assert_allclose(here[key], pooled[key], rtol=1e-12)
    assert np.all(here["amplitude_he_rms"] > 0) and here["n_samples"][0] == 2
    # the probes are calibrated on each sample (issue 15 pt 1): realised L_phi with an error,
    # equal on both paths, and stated in the notes (docs/probes.md, "Realised L_phi")
    assert np.isfinite(here["l_phi_realised_m"][0]) and here["l_phi_realised_err_m"][0] > 0
    np.testing.assert_allclose(here["l_phi_realised_m"], pooled["l_phi_realised_m"], rtol=1e-12)
    assert any("realised L_phi" in n for n in here["notes"])


def test_explorer_material_preset_switch():
    ex = DeviceExplorer(ExplorerParams(temperature=0.0, l_phi=None),
                        live_lattice=False)  # fmt: skip
    ex.controls["material"].value = "Au"
    # free-electron Au: E_F = 5.53 eV (Ashcroft & Mermin table, as in the Material preset)
    assert ex.controls["fermi_energy"].value == pytest.approx(5530.0, rel=1e-9)
    ring = ex.preview.ring
    assert ring.effective_mass == 1.0
    assert ring.fermi_energy == pytest.approx(5.53 * constants.e, rel=1e-9)
    # one recomputation for the whole preset switch, with the new material's wavevector
    b = ex.preview.field
    r = ex.controls["radius"].value / 1e9
    kf = math.sqrt(2 * constants.m_e * 5.53 * constants.e) / constants.hbar
    lj = math.pi * r
    mfp = constants.hbar * kf * ex.controls["mobility"].value * 1e-4 / constants.e  # §8.3
    assert mfp == pytest.approx(30e-9, rel=1e-6)  # the panel's Au film default: l = 30 nm
    refl = lj / (lj + mfp)
    want = 2 * ring_transmission(kf * lj, kf * lj, 2 * math.pi * b * math.pi * r**2 / H_OVER_E,
                                 0.5, arm_reflection=(refl, refl))  # fmt: skip
    np.testing.assert_allclose(ex.artists["preview"].get_ydata(), want, atol=1e-6)
