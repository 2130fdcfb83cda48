"""Figure functions of ringkit.view (plots over plain arrays) and the style module.

Checks: data are drawn in the stated display units (B in mT/T, radius in µm, sites in nm),
axis labels carry units, period marks are exactly one period long, the h/e and h/2e bands
sit where given, the area axis converts with h/e (1 µm^2 <-> 241.7989 1/T, docs/physics.md §1.2
[C]), figures are pyplot-free and render to PNG, and computation modules stay free of
matplotlib/ipywidgets.
"""

from __future__ import annotations

import subprocess
import sys

import matplotlib
import numpy as np
import pytest
from matplotlib.collections import PathCollection
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle, Wedge
from scipy import constants

from ringkit.view import plots, style

H_OVER_E = constants.h / constants.e  # flux quantum from CODATA (scipy.constants)


def _period_bar(ax, label):
    (line,) = [ln for ln in ax.get_lines() if ln.get_gid() == f"period-{label}"]
    x = np.asarray(line.get_xdata(), dtype=float)
    return x[1] - x[0], line


def test_conductance_units_labels_and_period_marks():
    b = np.linspace(-0.02, 0.02, 401)  # T
    g = 1.0 + 0.1 * np.cos(2 * np.pi * b / 4e-3)
    ax = plots.plot_conductance(b, g, period=4e-3, label="model")
    assert isinstance(ax.figure, Figure)
    (line,) = [ln for ln in ax.get_lines() if ln.get_label() == "model"]
    np.testing.assert_allclose(line.get_xdata(), b * 1e3)  # shown in mT below 0.5 T
    np.testing.assert_allclose(line.get_ydata(), g)
    assert "(mT)" in ax.get_xlabel() and "B" in ax.get_xlabel()
    assert "e²/h" in ax.get_ylabel()
    he, _ = _period_bar(ax, "h/e")
    h2e, _ = _period_bar(ax, "h/2e")
    assert he == pytest.approx(4.0, rel=1e-12)  # one h/e period, 4 mT
    assert h2e == pytest.approx(2.0, rel=1e-12)
    texts = [t.get_text() for t in ax.texts]
    assert any(t.startswith("h/e: 4 mT") for t in texts)
    # the marks sit above the data (head room)
    top = ax.get_ylim()[1]
    assert g.max() < ax.get_ylim()[0] + 0.65 * (top - ax.get_ylim()[0])


def test_conductance_tesla_for_large_fields():
    b = np.linspace(0, 2.0, 50)
    ax = plots.plot_conductance(b, np.ones_like(b), field_unit="auto")
    assert "(T)" in ax.get_xlabel()
    np.testing.assert_allclose(ax.get_lines()[0].get_xdata(), b)
    with pytest.raises(ValueError, match="field_unit"):
        plots.plot_conductance(b, b, field_unit="gauss")


def test_spectrum_bands_and_area_axis():
    f = np.linspace(0, 600, 601)
    amp = np.exp(-((f - 241.7989) ** 2) / 20)
    bands = {1: (200.0, 280.0), 2: (400.0, 560.0)}
    ax = plots.plot_spectrum(f, amp, bands=bands, label="x")
    spans = sorted((p for p in ax.patches if isinstance(p, Rectangle)), key=lambda p: p.get_x())
    # axvspan: x in data coordinates, y in axes coordinates
    data_x = [(p.get_x(), p.get_x() + p.get_width()) for p in spans]
    np.testing.assert_allclose(data_x[0], bands[1], rtol=1e-12)
    np.testing.assert_allclose(data_x[1], bands[2], rtol=1e-12)
    names = {t.get_text() for t in ax.texts}
    assert {"h/e", "h/2e"} <= names
    assert ax.get_xlim() == pytest.approx((0.0, 1.3 * 560.0))
    assert "1/T" in ax.get_xlabel() and "e²/h" in ax.get_ylabel()
    (sec,) = ax.child_axes
    ax.figure.canvas.draw()
    lo, hi = sec.get_xlim()
    # area = f h/e: 1 µm^2 <-> 241.7989 1/T (computed from h/e; docs/physics.md §1.2)
    assert hi == pytest.approx(1.3 * 560.0 * H_OVER_E * 1e12, rel=1e-9)
    assert 241.7989 * H_OVER_E * 1e12 == pytest.approx(1.0, rel=1e-6)
    assert "µm" in sec.get_xlabel()


def test_ring_sites_in_nm_with_colour_and_leads():
    rng = np.random.default_rng(0)
    pos = rng.uniform(-5e-7, 5e-7, (300, 2))
    vals = rng.normal(size=300)
    leads = [pos[:3], pos[3:6]]
    probes = pos[10:14]
    ax = plots.plot_ring_sites(pos, values=vals, lead_sites=leads, probe_sites=probes)
    cols = [c for c in ax.collections if isinstance(c, PathCollection)]
    np.testing.assert_allclose(cols[0].get_offsets(), pos * 1e9)
    np.testing.assert_allclose(cols[0].get_array(), vals)
    np.testing.assert_allclose(cols[-1].get_offsets(), probes * 1e9)
    assert len(cols) == 4  # sites, two leads, probes
    assert ax.get_xlabel() == "x (nm)"
    assert any("disorder" in a.get_ylabel() for a in ax.figure.axes if a is not ax)  # colour bar


def test_ring_sketch_geometry():
    ax = plots.plot_ring_sketch(400e-9, 600e-9, gate_arm="upper", probes=4)
    wedges = [p for p in ax.patches if isinstance(p, Wedge)]
    assert wedges[0].r == pytest.approx(600.0) and wedges[0].width == pytest.approx(200.0)
    assert (wedges[1].theta1, wedges[1].theta2) == pytest.approx((0.0, 180.0))  # upper arm
    probes = ax.get_lines()[0]
    np.testing.assert_allclose(np.hypot(probes.get_xdata(), probes.get_ydata()), 500.0)
    (bar,) = [ln for ln in ax.get_lines() if ln.get_gid() == "scale-bar"]
    assert np.ptp(bar.get_xdata()) == pytest.approx(200.0)  # 1-2-5 bar below r_out/2 = 300 nm
    assert "200 nm" in [t.get_text() for t in ax.texts]
    ax2 = plots.plot_ring_sketch(1.0e-6, 1.4e-6, scale_bar=False)
    assert ax2.get_xlabel() == "x (nm)" and ax2.axison


def test_background_panels():
    b = np.linspace(0, 0.05, 200)
    sig = 10 + b + 0.1 * np.sin(2 * np.pi * b / 0.005)
    bg = 10 + b
    top, bottom = plots.plot_background(b, sig, bg, sig - bg, period=0.005)
    np.testing.assert_allclose(top.get_lines()[0].get_ydata(), sig)
    np.testing.assert_allclose(top.get_lines()[1].get_ydata(), bg)
    np.testing.assert_allclose(bottom.get_lines()[0].get_ydata(), sig - bg)
    assert "δG" in bottom.get_ylabel() and "e²/h" in bottom.get_ylabel()
    assert _period_bar(bottom, "h/e")[0] == pytest.approx(5.0)


def test_amplitude_scaling_units_and_points():
    r = np.geomspace(1e-7, 2e-6, 30)
    ax = plots.plot_amplitude_scaling(
        r, {1: np.exp(-r / 1e-6), 2: np.exp(-2 * r / 1e-6)},
        points={1: (np.array([2e-7, 4e-7]), np.array([0.5, 0.3]), np.array([0.05, 0.04]))},
    )  # fmt: skip
    np.testing.assert_allclose(ax.get_lines()[0].get_xdata(), r * 1e6)
    assert ax.get_yscale() == "log"
    assert "µm" in ax.get_xlabel()
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == ["h/e model", "h/2e model", "h/e simulated"]


def test_twin_axis_keeps_field_units():
    b = np.linspace(-0.01, 0.01, 101)
    ax = plots.plot_conductance(b, np.cos(b), period=2e-3)
    twin = plots.plot_twin(ax, b, 5 * np.sin(b), ylabel="other (e^2/h)", label="sim")
    np.testing.assert_allclose(twin.get_lines()[0].get_xdata(), b * 1e3)
    assert twin.get_ylabel() == "other (e^2/h)"


def test_style_helpers_and_png():
    assert style.field_unit_for(np.array([0.01, -0.2])) == "mT"
    assert style.field_unit_for(np.array([0.8])) == "T"
    assert style.field_scale("mT") == 1e3
    fig, axes = style.new_figure(2, 1)
    assert axes.shape == (2, 1) and isinstance(fig, Figure)
    png = style.figure_to_png(fig)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    base = matplotlib.rcParams["font.size"]
    with style.style_context():
        assert matplotlib.rcParams["font.size"] == style.RC["font.size"]
    assert matplotlib.rcParams["font.size"] == base


def test_import_hygiene():
    # computation modules: no matplotlib/ipywidgets; figure functions: no pyplot
    code = (
        "import sys\n"
        "import ringkit.analysis.network1d, ringkit.view.panels.explorer\n"
        "import ringkit.view.panels.measured, ringkit.view.panels.scaling\n"
        "bad = [m for m in ('matplotlib', 'ipywidgets') if m in sys.modules]\n"
        "import numpy as np\n"
        "from ringkit.view import plots\n"
        "plots.plot_conductance(np.linspace(0, 1, 5), np.ones(5))\n"
        "bad += ['pyplot'] if 'matplotlib.pyplot' in sys.modules else []\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
