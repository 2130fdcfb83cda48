"""Device explorer: density input and derived quantities, first frame and lattice swap-in,
panel <-> batch study, bad input, figure panes (issue 14; issue 11 pt 4).

References outside the panel code, named beside each check:
* E_F = pi hbar^2 n/m* and k_F = sqrt(2 pi n) for a spin-degenerate 2DEG (J. H. Davies, *The
  Physics of Low-Dimensional Semiconductors* (1998), ch. 1 -- textbook relation, from memory);
* transverse modes of a hard-wall strip floor(k_F W/pi), mean free path l = hbar k_F mu/e,
  D = v_F l/2, E_Th = hbar D/L^2 and L_T = sqrt(hbar D/k_B T) in a diffusive ring (same
  book, ch. 6; closed forms), constants from scipy.constants (CODATA);
* the study runner (`ringkit.study.run_study`) on the exported file, compared with the
  panel's lattice line to 1e-10.
docs/panels.md, "Device explorer" and "Panel to batch".
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit.view.panels import DeviceExplorer
from ringkit.view.panels._base import FigurePane
from ringkit.view.panels.explorer import ExplorerParams
from ringkit.view.style import new_figure

M_GAAS = 0.067  # GaAs effective mass (as in the Material preset)
SMALL = dict(radius=0.12e-6, width=0.03e-6, temperature=0.0, l_phi=None,
             field_min=-0.1, field_max=0.1)  # fmt: skip


def _derived(ex) -> dict:
    return {q.key: q for q in ex.derived}


def test_density_input_gives_textbook_fermi_energy_and_derived_quantities():
    ex = DeviceExplorer(ExplorerParams(temperature=0.3, l_phi=None),
                        live_lattice=False)  # fmt: skip
    c = ex.controls
    c["density"].value = 2.5  # 10^11 cm^-2
    assert ex.fermi_source == "density" and ex.last_error is None
    n = 2.5e15  # m^-2
    e_f = math.pi * constants.hbar**2 * n / (M_GAAS * constants.m_e)  # Davies (1998), ch. 1
    d = _derived(ex)
    assert d["fermi_energy"].value == pytest.approx(e_f, rel=1e-12)
    assert ex.preview.ring.fermi_energy == pytest.approx(e_f, rel=1e-12)  # the model uses it
    assert d["fermi_energy"].text == f"{e_f / constants.e * 1e3:.4g} meV"
    assert c["fermi_energy"].value == float(f"{e_f / constants.e * 1e3:.4g}")  # 4 digits shown
    k_f = math.sqrt(2 * math.pi * n)
    assert d["k_fermi"].value == pytest.approx(k_f, rel=1e-12)
    w = c["width"].value * 1e-9
    assert d["modes"].value == math.floor(k_f * w / math.pi)
    mu = c["mobility"].value * 1e-4
    l_el = constants.hbar * k_f * mu / constants.e
    assert d["mean_free_path"].value == pytest.approx(l_el, rel=1e-9)
    length = math.pi * c["radius"].value * 1e-9
    assert l_el < length  # this default device is diffusive
    v_f = constants.hbar * k_f / (M_GAAS * constants.m_e)
    diff = v_f * l_el / 2
    assert d["thouless_energy"].value == pytest.approx(constants.hbar * diff / length**2, rel=1e-9)
    l_t = math.sqrt(constants.hbar * diff / (constants.k * 0.3))
    assert d["thermal_length"].value == pytest.approx(l_t, rel=1e-9)
    for key, unit in (("fermi_energy", "meV"), ("k_fermi", "nm⁻¹"), ("mean_free_path", "µm"),
                      ("thermal_length", "µm"), ("thouless_energy", "µeV")):  # fmt: skip
        assert d[key].text.endswith(unit) and d[key].text in ex.summary.value
    # typing E_F makes it the input; the density follows (4 digits)
    c["fermi_energy"].value = 8.0
    assert ex.fermi_source == "fermi_energy"
    assert ex.params.fermi_energy == pytest.approx(8e-3 * constants.e, rel=1e-12)
    n8 = 8e-3 * constants.e * M_GAAS * constants.m_e / (math.pi * constants.hbar**2)
    assert c["density"].value == float(f"{n8 / 1e15:.4g}")


def test_bad_density_or_mobility_is_one_line_and_changes_nothing():
    ex = DeviceExplorer(ExplorerParams(temperature=0.0, l_phi=None),
                        live_lattice=False)  # fmt: skip
    params, png = ex.params, ex.pane.image.value
    line = np.asarray(ex.artists["preview"].get_ydata()).copy()
    for value in (-1.0, 0.0, 1e9):
        ex.controls["density"].value = value
        msg = ex.message.value
        assert "density" in msg and "must lie in" in msg and "Traceback" not in msg
        assert msg.count("\n") == 0
        assert ex.params == params and ex.pane.image.value == png
        np.testing.assert_array_equal(ex.artists["preview"].get_ydata(), line)
    ex.controls["density"].value = 3.0
    assert ex.last_error is None
    with pytest.raises(ValueError, match="mobility"):
        ExplorerParams(mobility=1e6)  # m^2/Vs: outside (1e-4, 1e3)


def test_first_frame_labelled_then_lattice_swapped_in():
    ex = DeviceExplorer(ExplorerParams(**SMALL), background=True)
    assert ex.wait_live(120) and ex.live is not None
    modes = _derived(ex)["modes"].text
    assert f"exact lattice, {modes} modes per arm" in ex.banner_text()
    assert "single-channel" in ex.banner_text()
    ex.controls["radius"].value = 130.0  # new lattice: the single-channel frame comes first
    assert ex.live is None and ex.live_pending and "computing" in ex.banner_text()
    assert "preview" in ex.artists
    if ex.live_stale is not None:  # the previous lattice line stays, faint and dashed
        assert ex.artists["live"].get_linestyle() == "--" and "previous" in ex.banner_text()
    assert ex.wait_live(120)
    assert ex.live is not None and ex.live_params == ex.params and "live" in ex.artists
    assert ex.artists["live"].get_linestyle() == "-" and ex.live_stale is None
    assert ex.live_latency >= ex.latency > 0
    assert ex.artists["preview"].get_label().startswith("single-channel")


def test_export_run_study_reproduces_panel_lattice(tmp_path):
    from ringkit.study import parse_config, run_study

    ex = DeviceExplorer(ExplorerParams(**SMALL))
    assert ex.live is not None
    path = tmp_path / "design.toml"
    assert ex.export_study(path), ex.message.value
    cfg = parse_config(path.read_text(),
                       overrides={"executor.kind": "serial", "output.figures": False})  # fmt: skip
    out = run_study(cfg, tmp_path / "run", progress=False)
    import xarray as xr

    with xr.open_dataset(out.files["results"]) as ds:
        g = ds.G.values.reshape(-1)
        flux = ds.flux.values
    np.testing.assert_allclose(flux, ex.live.flux, rtol=0, atol=1e-12 * constants.h / constants.e)
    np.testing.assert_allclose(g, ex.live.conductance, rtol=0, atol=1e-10)
    # loading the file into a fresh panel gives the same settings
    other = DeviceExplorer(ExplorerParams(radius=0.3e-6), live_lattice=False)
    assert other.import_study(path), other.message.value
    p, q = other.params, ex.params
    for name in ("radius", "width", "density", "mobility", "temperature", "seed"):
        assert getattr(p, name) == pytest.approx(getattr(q, name), rel=1e-9), name
    assert p.l_phi is None and p.field_mode == q.field_mode == "flux_tube"


def test_import_bad_files_one_line_nothing_changes(tmp_path):
    ex = DeviceExplorer(ExplorerParams(temperature=0.0, l_phi=None),
                        live_lattice=False)  # fmt: skip
    params = ex.params
    bad = {
        "broken.toml": "[material\npreset = ",
        "density.toml": '[material]\npreset = "GaAs"\ndensity = "-3e11 cm^-2"\n'
        '[geometry]\nradius = "300 nm"\nwidth = "50 nm"\n[field]\nstart = "-10 mT"\n'
        'stop = "10 mT"\n',
        "mobility.toml": '[material]\npreset = "GaAs"\nmobility = "1e12 cm^2/Vs"\n'
        '[geometry]\nradius = "300 nm"\nwidth = "50 nm"\n[field]\nstart = "-10 mT"\n'
        'stop = "10 mT"\n',
    }
    for name, text in bad.items():
        (tmp_path / name).write_text(text)
    for name in (*bad, "missing.toml"):
        assert not ex.import_study(tmp_path / name)
        msg = ex.message.value
        assert name in msg and "Traceback" not in msg and msg.count("\n") == 0, msg
        assert ex.params == params


def test_figure_panes_png_size_and_canvas():
    fig, _ = new_figure(1, 1, size=(6.0, 3.0), layout=None)
    pane = FigurePane(fig, interactive=False)
    pane.refresh()
    import io

    from PIL import Image

    img = Image.open(io.BytesIO(pane.image.value))
    css_w = int(pane.image.layout.width.removesuffix("px"))
    assert css_w == 600 and img.size[0] >= css_w  # shown at its own size, never upscaled
    pytest.importorskip("ipympl")
    canvas_pane = FigurePane(fig, interactive=True)
    assert canvas_pane.widget is canvas_pane.canvas and fig.canvas is canvas_pane.canvas
    canvas_pane.refresh()  # headless: only messages to a (missing) frontend


def test_full_computation_reports_the_realised_l_phi():
    # the full computation calibrates its probes on the device (docs/panels.md, "Live lattice
    # view"; docs/probes.md "Realised L_phi") and reports what field_sweep reports for them
    from ringkit.tightbinding import build_ring
    from ringkit.transport import field_sweep
    from ringkit.view.panels.explorer_full import build_device, explorer_full

    params = ExplorerParams(**{**SMALL, "l_phi": 1.0e-6, "field_min": -0.02, "field_max": 0.02})
    full = explorer_full(params, n_probes=8)
    ring = build_ring(build_device(params), seed=params.seed)
    ds = field_sweep(ring, full.field[:3] * ring.loop_area, energy=ring.fermi_energy,
                     l_phi=1.0e-6, n_probes=8)  # fmt: skip
    real, err = ds.attrs["l_phi_realised_m"], ds.attrs["l_phi_realised_err_m"]
    assert math.isfinite(real) and err > 0
    note = next(n for n in full.notes if n.startswith("L_phi requested"))
    assert f"requested 1 um, realised {real * 1e6:.3g} +- {err * 1e6:.2g} um" in note
    assert "measured on this device" in note
