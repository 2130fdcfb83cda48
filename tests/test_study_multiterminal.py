"""Study-file forms of the lead layout and contact configurations, and the R(B) report rows
(issue 12 pts 1, 4, 5; docs/multiterminal.md).

External references: reciprocity R_mn,kl(B) = R_kl,mn(-B) (M. Büttiker, Phys. Rev. Lett. 57,
1761 (1986)) holds in the swept dataset; the report row equals the public
``analyze_four_terminal`` on the same trace; the plotted lines are the dataset's R_ohm.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from ringkit._validation import ParameterError
from ringkit.analysis.fourterminal import analyze_four_terminal
from ringkit.device import Material, RingDevice, RingGeometry
from ringkit.study.multiterminal import parse_angle, parse_contacts, parse_leads, resistance_rows
from ringkit.tightbinding import build_ring
from ringkit.transport.multiterminal import resistance_field_sweep
from ringkit.units import PHI0
from ringkit.view import plots


def test_parse_leads_maps_to_lead_specs():
    specs = parse_leads(
        [{"angle": "135 deg", "width": "30 nm"}, {"angle": "25.78 deg"},
         {"angle": "3.6416 rad", "width": "20 nm"}, {"angle": "-28.65°", "width": "20 nm"}]
    )  # fmt: skip
    assert specs[0].angle == pytest.approx(3 * math.pi / 4, rel=1e-15)  # 135 deg = 3 pi / 4
    assert specs[0].width == pytest.approx(30e-9) and specs[1].width is None
    assert specs[2].angle == pytest.approx(3.6416) and specs[3].angle == pytest.approx(-0.5, 1e-3)
    geo = RingGeometry.circular(45e-9, 85e-9, leads=list(specs))
    assert geo.n_leads == 4
    assert [o["side"] for o in geo.lead_outlines()] == [-1, 1, -1, 1]


@pytest.mark.parametrize(
    ("value", "name"),
    [
        ([{"angle": "135"}, {"angle": "45 deg"}], "geometry.leads[0].angle"),  # unit missing
        ([{"angle": "135 deg"}], "geometry.leads"),  # one lead
        ([{"angle": "135 deg", "w": "3 nm"}, {"angle": "0 deg"}], "geometry.leads[0].w"),
        ("135 deg", "geometry.leads"),
    ],
)
def test_parse_leads_errors_name_the_key(value, name):
    with pytest.raises(ParameterError) as err:
        parse_leads(value)
    assert err.value.name == name


def test_parse_contacts():
    cs = parse_contacts(["0,2,1,3", "I1-3,V0-2"], 4)
    assert [c.label for c in cs] == ["R_02,13", "R_13,02"]
    with pytest.raises(ParameterError, match=r"sweep.contacts\[0\].*contacts.voltage"):
        parse_contacts(["0,2,0,3"], 4)  # voltage contact equal to a current contact
    with pytest.raises(ParameterError, match=r"contacts.current.*0..2"):
        parse_contacts("0,3,1,2", 3)  # only three leads
    with pytest.raises(ParameterError, match="angle with its unit"):
        parse_angle(2.0, "x")


def test_resistance_rows_and_figure():
    n, radius = 40, 150e-9
    a = 2 * math.pi * radius / n
    t = constants.hbar**2 / (2 * 0.067 * constants.m_e * a**2)
    angles = [3 * math.pi / 4, math.pi / 4 + 0.35, 5 * math.pi / 4 - 0.2, -math.pi / 4]
    geo = RingGeometry.chain(radius, n_sites=n, leads=angles)
    ring = build_ring(RingDevice(Material(0.067, fermi_energy=0.9 * t), geo, max_kfa=1.2))
    area = 0.5 * n * radius**2 * math.sin(2 * math.pi / n)
    fields = np.linspace(-4, 4, 161) * PHI0 / area
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # field-regime hints are meaningless for a chain
        ds = resistance_field_sweep(ring, fields, [str(c) for c in parse_contacts(
            ["0,2,1,3", "1,3,0,2"], geo.n_leads)])  # fmt: skip
    r, r_rev = ds.R_ohm.values.T
    np.testing.assert_allclose(r, r_rev[::-1], atol=1e-8 * np.abs(r).max())  # Büttiker 1986
    rows = resistance_rows(ds, r_in=0.9 * radius, r_out=1.05 * radius)
    assert [row["configuration"] for row in rows] == ["R_02,13", "R_13,02"]
    ref = analyze_four_terminal(fields, r, contacts="0,2,1,3", r_in=0.9 * radius,
                                r_out=1.05 * radius)  # fmt: skip
    assert rows[0]["mean_ohm"] == pytest.approx(ref.mean_ohm, rel=1e-12)
    assert rows[0]["amplitude_he_ohm"] == pytest.approx(ref.amplitude_he_ohm, rel=1e-12)
    assert rows[0]["phase_he_rad"] == pytest.approx(ref.phase_he, abs=1e-12)
    assert rows[0]["min_ohm"] == pytest.approx(r.min())
    ax = plots.plot_resistance_configs(ds)
    lines = ax.get_lines()
    assert [ln.get_label() for ln in lines] == ["R_02,13", "R_13,02"]
    np.testing.assert_allclose(lines[1].get_ydata(), r_rev)
    np.testing.assert_allclose(lines[0].get_xdata(), fields * 1e3)  # mT for a sweep < 0.5 T


def test_site_estimate_counts_every_lead():
    """RingDevice.site_estimate counts the stubs of all leads: within 4 % of the built lattice
    (the count of kwant's finalized system, an independent construction)."""
    from ringkit.device import LeadSpec

    leads = [LeadSpec(math.pi - 0.45, 30e-9), LeadSpec(0.45), LeadSpec(math.pi + 0.5, 20e-9),
             LeadSpec(-0.5, 20e-9)]  # fmt: skip
    geo = RingGeometry.circular(45e-9, 85e-9, leads=leads)
    dev = RingDevice(Material(0.067, fermi_energy=0.008 * constants.e), geo, lattice_spacing=4e-9)
    built = len(build_ring(dev).fsyst.sites)
    assert dev.site_estimate().n_sites == pytest.approx(built, rel=0.04)
