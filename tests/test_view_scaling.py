"""Size-scaling panel: simulated quantile bands, the law fitted through them, shipped dataset.

Issue 13 point 5 (docs/amplitude-model.md, "Size dataset"; docs/amplitude-statistics.md).
The panel is a thin shell: what it draws and states is compared with the public API computed
here (ringkit.analysis.scaling.predict_amplitudes, ringkit.analysis.scaling_data) and with
closed forms: h/e damping exp(-pi r/L_phi) (docs/conventions.md, path length pi r), N^-1/2
averaging of independent rings (Umbach et al., Phys. Rev. Lett. 56, 386 (1986), from
memory), the bound A <= G/sqrt(2) undone by A_raw = A/sqrt(1 - (A/cap)^2) (closed form of the
smooth minimum, docs/amplitude-model.md). The shipped dataset is computed, not invented
(benchmarks/bench_amplitude_size.py, benchmarks/RESULTS-amplitude-size.md).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from ringkit._validation import ParameterError
from ringkit.analysis.scaling import predict_amplitudes
from ringkit.analysis.scaling_data import SIZE_DATASET_PATH, SizeFamily, load_size_dataset
from ringkit.device import Material
from ringkit.view.panels import SizeScalingPanel
from ringkit.view.panels.scaling_bands import dataset_mismatch

GAAS_DENSITY = 3e15  # m^-2 = 3e11 cm^-2, the GaAs preset named in issue 13 pt 5


@pytest.fixture(scope="module")
def panel():
    return SizeScalingPanel()


def _reset(p):
    d = p.data["family"]
    c = p.controls
    with p.draw_lock:
        c["temperature"].value = 1e-3
        c["width"].value = d.width * 1e9
        c["n_averaged"].value = 1
        c["override_prefactors"].value = False
        c["l_phi"].value = p.data["fit"]["l_phi"] * 1e6


def test_shipped_dataset_loads_and_matches_what_the_panel_states(panel):
    data = load_size_dataset()
    fam = data["family"]
    mat = Material.preset("GaAs")
    assert fam.material == "GaAs" and mat.density == pytest.approx(GAAS_DENSITY)
    assert data["device"] == fam.key()
    assert data["device"]["density_m2"] == pytest.approx(GAAS_DENSITY)
    assert data["device"]["width_m"] == pytest.approx(120e-9)
    np.testing.assert_allclose(data["radius_m"], [0.3e-6, 0.4e-6, 0.5e-6, 0.7e-6, 1.0e-6])
    assert min(data["n_realizations"]) >= 16  # ensembles, not single rings
    for name in ("he", "h2e"):
        assert np.all(data[f"{name}_q16"] <= data[f"{name}_median"])
        assert np.all(data[f"{name}_median"] <= data[f"{name}_q84"])
        assert np.all(data[f"{name}_median_err"] > 0)
    # the panel opens on these rings and says so
    assert panel.data["device"] == data["device"]
    assert fam.describe().split(", dephasing")[0] in panel.bands_note.value
    assert "Bands hidden" not in panel.bands_note.value
    assert panel.params.width == pytest.approx(fam.width)


def test_bad_or_edited_dataset_is_refused(tmp_path):
    raw = json.loads(SIZE_DATASET_PATH.read_text())
    raw["device"]["width_m"] = 200e-9  # description no longer that of the simulated rings
    f = tmp_path / "edited.json"
    f.write_text(json.dumps(raw))
    with pytest.raises(ParameterError, match="size dataset"):
        load_size_dataset(f)
    raw = json.loads(SIZE_DATASET_PATH.read_text())
    raw["he_q16"] = raw["he_q16"][:-1]
    f.write_text(json.dumps(raw))
    with pytest.raises(ParameterError, match="he_q16"):
        load_size_dataset(f)
    f.write_text("{not json")
    with pytest.raises(ParameterError, match="JSON"):
        load_size_dataset(f)
    p = SizeScalingPanel(dataset=f)  # a broken file: the panel says so and draws the law
    assert p.data is None and "No simulated bands" in p.bands_note.value


def test_panel_draws_bands_and_the_fitted_law_through_them(panel):
    _reset(panel)
    data, fit, art = panel.data, panel.data["fit"], panel.artists
    assert panel.mismatch == []
    rs = data["radius_m"] * 1e6
    for name in ("he", "h2e"):
        ys = art[f"{name}_band"].get_paths()[0].vertices[:, 1]
        for lo, hi in zip(data[f"{name}_q16"], data[f"{name}_q84"], strict=True):
            assert np.isclose(ys, lo).any() and np.isclose(ys, hi).any()
        med = art[f"{name}_median"].lines[0]
        np.testing.assert_allclose(med.get_xdata(), rs)
        np.testing.assert_allclose(med.get_ydata(), data[f"{name}_median"])
    # fitted prefactors shown read-only in place of the typed fields
    for key in ("coherent_amplitude", "aas_amplitude"):
        assert fit[key] is not None
        assert f"{fit[key]:.3g} ± {fit[f'{key}_err']:.2g}" in panel.fitted.value
        assert panel.controls[key].disabled
    assert f"{fit['l_phi'] * 1e6:.3g} ± {fit['l_phi_err'] * 1e6:.2g}" in panel.fitted.value
    # the law as the public API gives it with the fitted numbers, solid inside the simulated
    # radii and dashed outside, the two parts joined
    fam: SizeFamily = data["family"]
    r = panel.law["radius"].values
    ref = predict_amplitudes(
        r,
        **{**fam.model_kwargs(), "l_phi": panel.params.l_phi, "temperature": 1e-3},
        coherent_amplitude=fit["coherent_amplitude"],
        aas_amplitude=fit["aas_amplitude"],
    )
    inside = (r >= 0.3e-6 * (1 - 1e-9)) & (r <= 1.0e-6 * (1 + 1e-9))
    for name, key in (("he", "amplitude_he_rms"), ("h2e", "amplitude_h2e_rms")):
        solid = np.asarray(art[name].get_ydata(), float)
        dashed = np.asarray(art[f"{name}_extrapolated"].get_ydata(), float)
        np.testing.assert_allclose(solid[inside], ref[key].values[inside], rtol=1e-9)
        assert np.all(np.isnan(solid[~inside]))
        np.testing.assert_allclose(dashed[~inside], ref[key].values[~inside], rtol=1e-9)
        idx = np.flatnonzero(inside)
        assert dashed[idx[0]] == solid[idx[0]] and dashed[idx[-1]] == solid[idx[-1]]
    # the reported chi^2 is that of the law at the fitted numbers against the medians
    # (log space, bootstrap errors), recomputed here at T = 0 where the bands were simulated
    at = predict_amplitudes(
        data["radius_m"],
        **{**fam.model_kwargs(), "l_phi": fit["l_phi"]},
        coherent_amplitude=fit["coherent_amplitude"],
        aas_amplitude=fit["aas_amplitude"],
    )
    chi2 = sum(
        np.sum(
            (
                np.log(at[key].values / data[f"{n}_median"])
                / (data[f"{n}_median_err"] / data[f"{n}_median"])
            )
            ** 2
        )
        for n, key in (("he", "amplitude_he_rms"), ("h2e", "amplitude_h2e_rms"))
    )
    if fit["model_discrepancy"] == 0:
        assert chi2 == pytest.approx(fit["chi2_stat"], rel=1e-6)


def test_law_lines_follow_l_phi_and_averaging_and_bands_hide_for_other_rings(panel):
    _reset(panel)
    c = panel.controls

    def raw_he():  # the drawn law before the smooth bound by G (docs/amplitude-model.md)
        a = panel.law["amplitude_he_rms"].values
        cap = panel.law["conductance"].values / np.sqrt(2)
        return a / np.sqrt(1 - (a / cap) ** 2)

    c["l_phi"].value = 2.0
    he = raw_he()
    r = panel.law["radius"].values
    assert any("L_phi" in m for m in panel.mismatch) and "he_band" not in panel.artists
    assert "Bands hidden" in panel.bands_note.value and "L_phi" in panel.bands_note.value
    c["l_phi"].value = 1.0
    he2 = raw_he()
    np.testing.assert_allclose(he2 / he, np.exp(-np.pi * r / 1e-6 + np.pi * r / 2e-6), rtol=1e-9)
    c["n_averaged"].value = 4
    np.testing.assert_allclose(raw_he(), he2 / 2, rtol=1e-9)  # N^-1/2
    assert any("averaged" in m for m in panel.mismatch)
    c["temperature"].value = 0.1  # the law's thermal factor at 0.1 K is far below 0.98
    assert any(m.startswith("temperature") for m in panel.mismatch)
    _reset(panel)
    assert panel.mismatch == [] and "he_band" in panel.artists
    # other rings than the simulated ones (compute part, no redraw needed)
    for change, start in (({"width": 200e-9}, "arm width"), ({"material": "InAs"}, "material"),
                          ({"mean_free_path": 1e-7}, "mean free path")):  # fmt: skip
        other = panel.params.updated(**change)
        assert any(m.startswith(start) for m in dataset_mismatch(other, panel.data)), change
    c["override_prefactors"].value = True  # advanced: typed prefactors, clearly labelled
    assert not c["coherent_amplitude"].disabled and "override" in panel.fitted.value
    c["coherent_amplitude"].value = 0.5
    ref = predict_amplitudes(
        panel.law["radius"].values,
        **{**panel.data["family"].model_kwargs(), "l_phi": panel.params.l_phi, "temperature": 1e-3},
        coherent_amplitude=0.5,
        aas_amplitude=c["aas_amplitude"].value,
    )
    np.testing.assert_allclose(panel.law["amplitude_he_rms"].values, ref["amplitude_he_rms"].values)
    _reset(panel)


def test_recompute_bands_for_the_panels_own_rings(panel):
    from ringkit.transport.ensemble import SerialExecutor

    p = panel  # last test of the module: replaces the panel's bands
    p.executor = SerialExecutor()
    p.calibrate_probes = False  # analytic coupling: half the cost (calibration: test_probes.py)
    c = p.controls
    c["width"].value = 30.0
    c["mean_free_path"].value = 0.3
    p.sim_radii.value = "0.1, 0.13"
    p.sim_seeds.value = 5
    job = p.run_simulation()
    assert job.wait(timeout=240) and job.error is None, job.error
    fam = p.data["family"]
    assert fam.radii == (0.1e-6, 0.13e-6) and fam.width == pytest.approx(30e-9)
    assert fam.temperature == 0.0  # 1 mK: thermal factor >= 0.98, computed at T = 0
    assert list(p.data["n_realizations"]) == [5, 5]
    assert p.progress.bar_style == "success"
    fit = p.data["fit"]
    law_l_phi = fit["l_phi"] if fit["l_phi"] is not None else fam.l_phi
    c["l_phi"].value = law_l_phi * 1e6
    assert p.mismatch == [] and "he_band" in p.artists
    p.sim_radii.value = "0.2"
    assert p.run_simulation() is None and "simulated radii" in p.message.value
