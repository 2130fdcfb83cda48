"""Four-terminal wiring of the view layer: lead layout in the device outline, contacts field and
R_mn,kl analysis in the measured-data panel (issue 12 pts 1, 4; docs/multiterminal.md).

References outside the panel: the lead polygons are those of the public
``RingGeometry.lead_outlines()``; the panel's numbers equal the public
``analyze_four_terminal`` on the same data (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986) for
the configuration convention R_mn,kl); the INVENTED trace is R0 + A cos(2 pi B/dB + phi) with
dB = h/(e pi r^2) (closed form), so amplitude and phase must be the generating A and phi.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from ringkit.analysis.fourterminal import analyze_four_terminal
from ringkit.device import LeadSpec, RingGeometry
from ringkit.view import plots
from ringkit.view.panels import MeasuredDataPanel

RADIUS = 500e-9
PERIOD = constants.h / constants.e / (math.pi * RADIUS**2)  # CODATA via scipy.constants
R0, AMP, PHASE = 1000.0, 5.0, 0.7  # Ohm, Ohm, rad (invented scenario)


def _trace(header: str = "") -> tuple[bytes, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(3)
    b = np.linspace(-0.05, 0.05, 1201)
    r = R0 + 20 * (b / 0.05) ** 2 + AMP * np.cos(2 * np.pi * b / PERIOD + PHASE)
    r = r + 0.01 * rng.standard_normal(b.size)
    rows = "\n".join(f"{x * 1e3:.9g}\t{y:.12g}" for x, y in zip(b, r, strict=True))
    text = f"# INVENTED four-terminal trace\n{header}B (mT)\tR (Ohm)\n{rows}\n"
    return text.encode(), b, np.array([float(f"{y:.12g}") for y in r])


def test_outline_draws_every_lead():
    geo = RingGeometry.circular(
        45e-9, 85e-9,
        leads=[LeadSpec(math.pi - 0.45, 30e-9), LeadSpec(0.45),
               LeadSpec(math.pi + 0.5, 20e-9), LeadSpec(-0.5, 20e-9)],
    )  # fmt: skip
    outlines = geo.lead_outlines()
    ax = plots.plot_ring_sketch(geo.r_in, geo.r_out, leads=outlines)
    patches = {p.get_gid(): p for p in ax.patches if str(p.get_gid()).startswith("lead-")}
    assert sorted(patches) == [f"lead-{i}" for i in range(4)]
    for lead in outlines:
        xy = patches[f"lead-{lead['index']}"].get_xy()[:4]
        np.testing.assert_allclose(xy, lead["polygon"] * 1e9, rtol=1e-12)
    labels = {t.get_gid(): t.get_text() for t in ax.texts}
    assert [labels[f"lead-label-{i}"] for i in range(4)] == ["0", "1", "2", "3"]
    far = max(np.abs(o["polygon"]).max() for o in outlines) * 1e9
    assert ax.get_xlim()[1] > far  # every strip inside the axes


def _panel(header: str = "", contacts: str = "") -> MeasuredDataPanel:
    """Load the file, then set its options (each change reloads the same file)."""
    panel = MeasuredDataPanel()
    content, _, _ = _trace(header)
    assert panel.load_bytes(content, "r4t.tsv"), panel.message.value
    panel.load_controls["terminals"].value = "four"
    panel.load_controls["contacts"].value = contacts
    return panel


def test_panel_contacts_field_matches_public_analysis():
    _, b, r = _trace()
    panel = _panel(contacts="I 0→2, V 1–3")
    res = panel.four_terminal
    assert res is not None and res.contacts.label == "R_02,13"
    ref = analyze_four_terminal(b, r, contacts="0,2,1,3")
    assert res.mean_ohm == pytest.approx(ref.mean_ohm, rel=1e-9)
    assert res.amplitude_he_ohm == pytest.approx(ref.amplitude_he_ohm, rel=1e-6)
    assert res.phase_he == pytest.approx(ref.phase_he, abs=1e-6)
    assert res.amplitude_he_ohm == pytest.approx(AMP, rel=0.02)  # generating amplitude
    assert res.phase_he == pytest.approx(PHASE, abs=0.05)  # generating phase
    html = panel.four_summary.value
    assert "R_02,13" in html and "Ω" in html and "h/e phase" in html and "symmetrisation" in html
    # the even part of a single configuration
    panel.controls["symmetrize"].value = "even"
    even = analyze_four_terminal(b, r, contacts="0,2,1,3", symmetrize="even")
    assert panel.four_terminal.amplitude_he_ohm == pytest.approx(even.amplitude_he_ohm, rel=1e-6)
    assert "even part" in panel.four_summary.value


def test_header_configuration_and_messages():
    panel = _panel(header="# contacts: 1,3,0,2\n")
    assert panel.four_terminal is not None
    assert panel.four_terminal.contacts.label == "R_13,02"
    # a bad contact string: one line in the message area naming the parameter, no traceback
    panel.load_controls["contacts"].value = "0,2,0"
    lines = [ln for ln in panel.message.value.split("\n") if "contacts" in ln]
    assert len(lines) == 1 and "four contact numbers" in lines[0]
    assert "Traceback" not in panel.message.value
    assert panel.four_terminal is None and panel.four_summary.value == ""
    assert panel.analysis is not None  # the two-terminal analysis is still shown


def test_four_terminal_without_configuration_says_what_to_add():
    panel = _panel()
    assert panel.four_terminal is None
    text = panel.message.value
    assert "without a contact configuration" in text and "# contacts: m,n,k,l" in text
    assert sum("contact configuration" in ln for ln in text.split("\n")) == 1


def test_outline_of_a_chain_ring_draws_lines():
    geo = RingGeometry.chain(300e-9, n_sites=60, leads=[3 * math.pi / 4, 0.3, 4.0])
    ax = plots.plot_ring_sketch(geo.r_in, geo.r_out, leads=geo.lead_outlines())
    lines = {ln.get_gid(): ln for ln in ax.get_lines() if str(ln.get_gid()).startswith("lead-")}
    assert sorted(lines) == ["lead-0", "lead-1", "lead-2"]
    for lead in geo.lead_outlines():
        line = lines[f"lead-{lead['index']}"]
        np.testing.assert_allclose(line.get_xdata(), lead["polygon"][:2, 0] * 1e9, rtol=1e-12)
    (ring,) = [p for p in ax.patches if p.get_gid() is None]
    assert ring.get_radius() == pytest.approx(300.0)  # the chain's circle, in nm
