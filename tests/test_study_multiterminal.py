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
from test_cli_study import run_cli  # the in-process CLI runner of the study tests

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


# ----------------------------------------------------------------------------- studies
# The ~400-site ring of tests/test_cli_study.py with four leads (two per side) and two reciprocal
# configurations; serial executor, one realization, 40 field points, T = 0 (a finite temperature
# costs ~100 energies on this ring; the thermal path is resistance_field_sweep's own).
FOUR = """
[study]
name = "four-terminal ring"
[material]
preset = "GaAs"
fermi_energy = "5.5 meV"
mean_free_path = "250 nm"
[geometry]
r_in = "70 nm"
r_out = "98 nm"
leads = [{angle = "135 deg"}, {angle = "45 deg"}, {angle = "225 deg"}, {angle = "-45 deg"}]
[lattice]
spacing = "7 nm"
[field]
start = "-1.2 T"
stop = "1.2 T"
points = 40
[sweep]
contacts = ["0,2,1,3", "1,3,0,2"]
[ensemble]
seed = 5
[executor]
kind = "serial"
"""


@pytest.fixture(scope="module")
def four_study(tmp_path_factory):
    path = tmp_path_factory.mktemp("four") / "four.toml"
    path.write_text(FOUR)
    out = path.parent / "out"
    rc, stdout, err = run_cli("study", str(path), "--out", str(out), "--quiet")
    assert rc == 0, err
    return path, out


def test_four_terminal_study_end_to_end(four_study):
    """results.nc holds R_ohm per configuration; reciprocity R_mn,kl(B) = R_kl,mn(-B) (M.
    Büttiker, Phys. Rev. Lett. 57, 1761 (1986)) holds on the study output; the report lists
    the configurations and embeds the R(B) figure."""
    import xarray as xr

    path, out = four_study
    ds = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    assert ds["R_ohm"].attrs["units"] == "ohm"
    assert list(ds["config"].values) == ["0,2,1,3", "1,3,0,2"]
    assert ds["R_ohm"].dims[-2:] == ("config", "B")
    r = ds["R_ohm"].isel(realization=0, fermi_energy=0, gate_potential=0, l_phi=0)
    assert np.all(np.isfinite(r.values))
    np.testing.assert_allclose(ds["B"].values, -ds["B"].values[::-1], atol=1e-15)
    fwd, rev = r.isel(temperature=0).values
    np.testing.assert_allclose(fwd, rev[::-1], rtol=0, atol=1e-8 * np.abs(fwd).max())
    assert not np.allclose(fwd, fwd[::-1], rtol=1e-3)  # R_02,13 itself is not even in B
    assert float(ds["R_thermal_error"].max()) == 0  # T = 0: one energy, no thermal error
    assert ds.attrs["sweep.contacts"] == '["0,2,1,3", "1,3,0,2"]'
    text = (out / "report.md").read_text()
    assert "## Four-terminal resistance" in text
    assert "| R_02,13 |" in text and "| R_13,02 |" in text
    assert "](figures/resistance.png)" in text and (out / "figures" / "resistance.png").is_file()


def test_four_terminal_study_equals_direct_sweep(four_study):
    """The study's R is resistance_field_sweep on the same device and seed (to 1e-10), and a
    resume from the checkpoint gives the same numbers bit for bit."""
    import xarray as xr

    from ringkit.study import load_config
    from ringkit.study.setup import make_device

    path, out = four_study
    ds = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    cfg = load_config(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # coarse-lattice hint, reported by the study
        ring = build_ring(make_device(cfg.physics(), None, 0.0), seed=int(ds["seed"].values[0]))
    for t, temp in enumerate(ds["temperature"].values):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # coarse-lattice and field-regime hints
            direct = resistance_field_sweep(ring, ds["B"].values, ["0,2,1,3", "1,3,0,2"],
                                            temperature=float(temp))  # fmt: skip
        study = ds["R_ohm"].isel(realization=0, fermi_energy=0, gate_potential=0,
                                 l_phi=0, temperature=t).values  # fmt: skip
        np.testing.assert_allclose(study, direct["R_ohm"].transpose("config", "B").values,
                                   rtol=1e-10)  # fmt: skip
    rc, _, err = run_cli("study", str(path), "--out", str(out), "--quiet")
    assert rc == 0, err
    again = xr.load_dataset(out / "results.nc", engine="h5netcdf")
    np.testing.assert_array_equal(again["R_ohm"].values, ds["R_ohm"].values)


@pytest.mark.parametrize(
    ("edit", "fragment"),
    [
        (("0,2,1,3", "0,2,0,3"), "sweep.contacts[0] = '0,2,0,3' is not allowed: contacts.voltage"),
        (("1,3,0,2", "1,3,0,4"), "sweep.contacts[1] = '1,3,0,4' is not allowed: contacts.voltage:"
         " contacts must lie in 0..3"),
        (("leads =", "# leads ="), "sweep.contacts[0] = '0,2,1,3' is not allowed: "
         "contacts.current: contacts must lie in 0..1"),
        (('"135 deg"', '"135"'), "geometry.leads[0].angle"),
        (('{angle = "225 deg"}', '{angle = "140 deg"}'), "geometry.leads = [2.356194, 0.785398, "
         "2.443461, -0.785398] is not allowed: leads 0 and 2 on the left side overlap"),
    ],
)  # fmt: skip
def test_bad_contacts_are_one_line_errors(tmp_path, edit, fragment):
    path = tmp_path / "bad.toml"
    path.write_text(FOUR.replace(*edit))
    rc, stdout, err = run_cli("study", str(path), "--out", str(tmp_path / "o"))
    assert rc == 2 and err.count("\n") == 1 and "Traceback" not in err, err
    assert fragment in err, err
