"""``ringkit analyze --contacts/--reverse``: four-terminal keys added to the JSON output.

The trace files are INVENTED (written by the tests): R(B) = R0 + A cos(2 pi B / dB + phi) +
small noise, with dB = h/(e pi r^2) (Aharonov-Bohm period, closed form; PHI0 from CODATA via
scipy.constants). Expected amplitude and phase are the generating A and phi; the reverse file
obeys reciprocity R_kl,mn(B) = R_mn,kl(-B) (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986)),
so the Onsager-Büttiker residual is the noise only. docs/multiterminal.md.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import constants

from ringkit.cli import main

PHI0 = constants.h / constants.e  # CODATA
RADIUS = 500e-9
PERIOD = PHI0 / (np.pi * RADIUS**2)  # h/e period of a ring of radius 500 nm (closed form)
R0, AMP, PHASE = 1000.0, 5.0, 0.7  # Ohm, Ohm, rad (invented scenario)
RING = ["--r-in", "450nm", "--r-out", "550nm"]


def _write(path, sign=1.0, header="", seed=0):
    rng = np.random.default_rng(seed)
    b = np.linspace(-0.05, 0.05, 2001)
    r = R0 + 20 * (b / 0.05) ** 2 + AMP * np.cos(2 * np.pi * sign * b / PERIOD + PHASE)
    r = r + 0.01 * rng.standard_normal(b.size)
    lines = ["# INVENTED four-terminal trace (ringkit test scenario)", header, "B (T)\tR (Ohm)"]
    lines += [f"{x:.9g}\t{y:.9g}" for x, y in zip(b, r, strict=True)]
    path.write_text("\n".join(ln for ln in lines if ln) + "\n")
    return str(path)


def _run(capsys, *args):
    code = main(["analyze", *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_contacts_option_adds_keys_and_keeps_old_ones(tmp_path, capsys):
    f = _write(tmp_path / "r0213.tsv")
    code, out, err = _run(capsys, f, "--four-terminal", "--contacts", "0,2,1,3", *RING, "--json")
    assert code == 0, err
    d = json.loads(out)
    for key in ("period_he_T", "area_m2", "radius_m", "amplitude_he_e2h", "n_points_used"):
        assert key in d, key  # today's keys are kept
    four = d["four_terminal"]
    assert d["configuration"] == four["configuration"] == "R_02,13"
    assert d["contacts"] == "0,2,1,3"
    assert four["mean_resistance_ohm"] == pytest.approx(R0 + 20 / 3, rel=1e-3)  # mean of b^2
    assert four["period_he_T"] == pytest.approx(PERIOD, rel=0.01)
    assert four["amplitude_he_ohm"] == pytest.approx(AMP, rel=0.02)
    assert four["phase_he_rad"] == pytest.approx(PHASE, abs=0.05)
    assert four["symmetrization"] == "even/odd"  # single configuration, not symmetrised


def test_header_contacts_and_reverse_file(tmp_path, capsys):
    f = _write(tmp_path / "r0213.tsv", header="# contacts: 0,2,1,3")
    rev = _write(tmp_path / "r1302.tsv", sign=-1.0, seed=1)  # R_13,02(B) = R_02,13(-B)
    code, out, err = _run(capsys, f, "--four-terminal", "--reverse", rev, *RING, "--json")
    assert code == 0, err
    four = json.loads(out)["four_terminal"]
    assert four["configuration"] == "R_02,13"
    assert four["reciprocity_residual_ohm"] < 0.05  # noise 0.01 Ohm per point, no B asymmetry
    assert four["amplitude_he_ohm"] == pytest.approx(AMP, rel=0.02)
    assert four["phase_he_rad"] == pytest.approx(PHASE, abs=0.05)
    code, out, err = _run(capsys, f, "--four-terminal", "--reverse", rev, *RING)
    assert code == 0 and "four-terminal R_02,13" in out and "reciprocity residual" in out


def test_missing_configuration_is_one_line(tmp_path, capsys):
    f = _write(tmp_path / "r.tsv")
    code, out, err = _run(capsys, f, "--four-terminal", *RING, "--json")
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert "--contacts m,n,k,l" in lines[0] and "# contacts:" in lines[0]
    # a header saying four-terminal counts as marked too
    g = _write(tmp_path / "h.tsv", header="# terminals: four")
    code, _, err = _run(capsys, g, *RING)
    assert code == 2 and "--contacts m,n,k,l" in err and len(err.strip().splitlines()) == 1


def test_bad_configuration_names_the_parameter(tmp_path, capsys):
    f = _write(tmp_path / "r.tsv")
    code, _, err = _run(capsys, f, "--four-terminal", "--contacts", "0,2,0,3", *RING)
    assert code == 2 and "contacts.voltage" in err and len(err.strip().splitlines()) == 1
    code, _, err = _run(capsys, f, "--four-terminal", "--contacts", "0,2", *RING)
    assert code == 2 and "four contact numbers" in err


def test_two_terminal_output_unchanged(tmp_path, capsys):
    f = _write(tmp_path / "r.tsv")
    code, out, err = _run(capsys, f, *RING, "--json")
    assert code == 0, err
    d = json.loads(out)
    assert "four_terminal" not in d and "phase_he_rad" not in d
